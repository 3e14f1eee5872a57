//! Training: optimizers, penalties and the objective, schedules, the training loop, the
//! monitor, scaling, the size-dependent recipe and seed ensembles.

pub mod ensemble;
pub mod monitor;
pub mod objective;
pub mod optim;
pub mod parallel;
pub mod penalty;
pub mod recipe;
pub mod scale;
pub mod schedule;
pub mod split;
pub mod train;
