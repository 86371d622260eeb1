//! Spark runner.
