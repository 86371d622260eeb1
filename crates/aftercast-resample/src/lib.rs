//! placeholder until the resampling layer lands
