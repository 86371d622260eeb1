//! Spark SQL.
