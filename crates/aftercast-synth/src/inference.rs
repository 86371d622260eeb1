//! Inference beyond placebo in space (filled in below).
