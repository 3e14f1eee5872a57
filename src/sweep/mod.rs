//! Comparing candidates: paired sweeps over seeds and folds, their statistics, and shards
//! for cluster schedulers.

pub mod compare;
pub mod cost;
pub mod shard;
pub mod stats;
