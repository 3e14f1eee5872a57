//! The training loop: seeded shuffling, mini-batches, validation, early stopping, gradient
//! clipping, a divergence guard and per-epoch observers. L-BFGS runs full batch through the
//! same bookkeeping, one line-search iteration per "epoch".

use crate::fit::objective::Objective;
use crate::fit::optim::{Lbfgs, LbfgsOutcome, LbfgsProblem, Optimizer, OptimizerChoice};
use crate::fit::schedule::Schedule;
use crate::fit::split::Rows;
use crate::kernels::scalar::Scalar;
use crate::nn::error::{ConfigError, ShapeError};
use crate::nn::init::rng_from_seed;
use crate::nn::layer::Pass;
use crate::nn::network::Network;
use ndarray::{Array2, ArrayView2, CowArray, Ix2};
use rand::seq::SliceRandom;
use serde::{Deserialize, Serialize};
use std::ops::Range;
use std::time::Instant;
use thiserror::Error;

/// Settings of one training run. `Default` gives the settings documented in DEVELOPERS.md.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainConfig {
    /// Most epochs (for L-BFGS: most iterations).
    pub epochs: usize,
    /// Rows per mini-batch (ignored by L-BFGS, which uses every training row).
    pub batch: usize,
    /// The optimizer.
    pub optimizer: OptimizerChoice,
    /// Base learning rate (ignored by L-BFGS).
    pub lr: f64,
    /// Loss and penalty.
    pub objective: Objective,
    /// Learning-rate schedule over epochs.
    pub schedule: Schedule,
    /// Fraction of rows held out for validation when no validation set is given (0 for none).
    pub val_frac: f64,
    /// Stop after this many epochs without a validation improvement, and restore the best
    /// weights; `None` trains every epoch (and still restores the best weights).
    pub patience: Option<usize>,
    /// Relative improvement of the validation loss that resets the patience count.
    pub min_improvement: f64,
    /// Rescale the gradient when its global L2 norm exceeds this (Pascanu et al. 2013).
    pub clip_norm: Option<f64>,
    /// Clamp every gradient entry to ±this.
    pub clip_value: Option<f64>,
    /// Divergence guard: how many roll-backs (each halving the learning rate) before giving up.
    pub max_rollbacks: usize,
    /// Seed of the validation split and the shuffling.
    pub seed: u64,
}

impl Default for TrainConfig {
    fn default() -> Self {
        TrainConfig {
            epochs: 500,
            batch: 32,
            optimizer: OptimizerChoice::Adam { amsgrad: false },
            lr: 1e-3,
            objective: Objective::from(crate::nn::loss::Loss::Mse),
            schedule: Schedule::Constant,
            val_frac: 0.2,
            patience: Some(30),
            min_improvement: 1e-4,
            clip_norm: None,
            clip_value: None,
            max_rollbacks: 8,
            seed: 0,
        }
    }
}

impl TrainConfig {
    /// Checks every setting.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let bad = |d: String| Err(ConfigError::invalid("training", d));
        if self.epochs == 0 {
            return bad("epochs must be at least 1".into());
        }
        if self.batch == 0 {
            return bad("batch must be at least 1".into());
        }
        if !(self.lr.is_finite() && self.lr > 0.0) {
            return bad(format!("learning rate must be > 0, got {}", self.lr));
        }
        if !(0.0..1.0).contains(&self.val_frac) {
            return bad(format!("val_frac must be in [0, 1), got {}", self.val_frac));
        }
        for (name, v) in [
            ("clip_norm", self.clip_norm),
            ("clip_value", self.clip_value),
        ] {
            if let Some(v) = v {
                if !(v.is_finite() && v > 0.0) {
                    return bad(format!("{name} must be > 0, got {v}"));
                }
            }
        }
        if self.optimizer.is_full_batch()
            && self.objective.penalty.l1_mode == crate::fit::penalty::L1Mode::Proximal
            && self.objective.penalty.l1 > 0.0
        {
            return bad("proximal L1 needs a step-based optimizer, not L-BFGS".into());
        }
        self.optimizer.validate()?;
        self.objective.loss.validate()?;
        self.objective.penalty.validate()?;
        self.schedule.validate()
    }
}

/// What happened in one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    /// Epoch index, from 0.
    pub epoch: usize,
    /// Mean data loss over the epoch's training batches (as computed in the training pass).
    pub train_loss: f64,
    /// Data loss on the validation rows at the end of the epoch.
    pub val_loss: Option<f64>,
    /// Learning rate used (after any guard cuts).
    pub lr: f64,
    /// Mean global gradient norm over the epoch's steps, before clipping.
    pub grad_norm_mean: f64,
    /// Largest global gradient norm of the epoch, before clipping.
    pub grad_norm_max: f64,
    /// Steps whose gradient was clipped.
    pub clipped_steps: usize,
    /// Optimizer steps taken.
    pub steps: usize,
    /// Wall time of the epoch.
    pub seconds: f64,
}

/// One optimizer step, as observers see it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepRecord {
    /// Epoch index.
    pub epoch: usize,
    /// Step within the epoch.
    pub step: usize,
    /// Data loss of the batch.
    pub batch_loss: f64,
    /// Global gradient norm before clipping.
    pub grad_norm: f64,
}

/// Whether training goes on after an observer has looked at an epoch.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Flow {
    /// Go on.
    Continue,
    /// Stop now (the best weights are still restored).
    Stop,
}

/// Watches training; called after every step and every epoch.
pub trait Observer<F: Scalar> {
    /// Once, before the first step, with the starting network.
    fn start(&mut self, _net: &Network<F>) {}

    /// After each optimizer step, with the network's gradients of that step (and its updated
    /// parameters).
    fn after_step(&mut self, _record: &StepRecord, _net: &Network<F>) {}

    /// After each epoch, with its record; may change the network (e.g. revive units).
    fn after_epoch(&mut self, _record: &EpochRecord, _net: &mut Network<F>) -> Flow {
        Flow::Continue
    }

    /// Parameter entries whose optimizer state must be forgotten because `after_epoch`
    /// re-initialized them; asked right after `after_epoch`. Step-based optimizers honour it;
    /// L-BFGS, whose curvature pairs span all entries, does not.
    fn take_optimizer_resets(&mut self) -> Vec<usize> {
        Vec::new()
    }
}

/// Why training stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// Ran every epoch.
    EpochLimit,
    /// The validation loss stopped improving.
    EarlyStop,
    /// An observer asked to stop.
    Observer,
    /// L-BFGS reached its gradient tolerance.
    Converged,
    /// L-BFGS found no step that lowers the objective further.
    NoProgress,
}

impl StopReason {
    /// Why training stopped, in words (`patience`: the early-stopping patience in epochs).
    pub fn describe(&self, patience: Option<usize>) -> String {
        match self {
            StopReason::EpochLimit => "reached the epoch limit".to_string(),
            StopReason::EarlyStop => match patience {
                Some(p) => format!("stopped early: no better validation loss for {p} epochs"),
                None => "stopped early: the validation loss stopped improving".to_string(),
            },
            StopReason::Observer => "stopped by an observer".to_string(),
            StopReason::Converged => "converged: the gradient fell below its tolerance".to_string(),
            StopReason::NoProgress => "stopped: no step lowers the objective further".to_string(),
        }
    }
}

/// A divergence the guard recovered from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Rollback {
    /// Epoch in which it happened.
    pub epoch: usize,
    /// Step within the epoch (None: found in the end-of-epoch validation pass).
    pub step: Option<usize>,
    /// Where the non-finite value first appeared (a layer, tensor, or "loss").
    pub location: String,
    /// Learning rate after the cut.
    pub lr_after: f64,
}

/// The outcome of a run.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainSummary {
    /// One record per completed epoch.
    pub history: Vec<EpochRecord>,
    /// Epoch whose weights were kept (the best validation loss, or the last epoch).
    pub best_epoch: usize,
    /// Validation loss at `best_epoch`, if there was a validation set.
    pub best_val_loss: Option<f64>,
    /// Why it stopped.
    pub stop: StopReason,
    /// Roll-backs of the divergence guard.
    pub rollbacks: Vec<Rollback>,
    /// Training and validation rows.
    pub rows: (usize, usize),
}

/// Why training could not run or finish.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum TrainError {
    /// A setting is invalid.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// An array has the wrong shape.
    #[error(transparent)]
    Shape(#[from] ShapeError),
    /// The data cannot be trained on.
    #[error("{0}")]
    Data(String),
    /// The divergence guard ran out of roll-backs; the network holds the last finite weights.
    #[error(
        "training diverged: a non-finite value first appeared in {location} at epoch {epoch}{}, \
         after {rollbacks} roll-backs that halved the learning rate to {lr:e}. Try a lower \
         learning rate, gradient clipping (--clip-norm; clip_norm in the library), a leaky rectifier instead of ReLU, or \
         scaled inputs and target",
        step.map_or(String::new(), |s| format!(", step {s}"))
    )]
    Diverged {
        /// Epoch of the last divergence.
        epoch: usize,
        /// Step of the last divergence (None: in the validation pass).
        step: Option<usize>,
        /// Layer, tensor or "loss" where it first appeared.
        location: String,
        /// Roll-backs already spent.
        rollbacks: usize,
        /// Learning rate at the last attempt.
        lr: f64,
    },
}

/// Trains `net` on rows `x` → `y`. Validation uses `validation` if given, else a seeded
/// `config.val_frac` split of the rows. On return the network holds the weights of the best
/// validation epoch (or of the last epoch without validation), and they are always finite.
pub fn train<F: Scalar>(
    net: &mut Network<F>,
    x: ArrayView2<'_, F>,
    y: ArrayView2<'_, F>,
    validation: Option<(ArrayView2<'_, F>, ArrayView2<'_, F>)>,
    config: &TrainConfig,
    observers: &mut [&mut dyn Observer<F>],
) -> Result<TrainSummary, TrainError> {
    config.validate()?;
    check_data(net, x, y, "training")?;
    if let Some((vx, vy)) = validation {
        check_data(net, vx, vy, "validation")?;
    }
    let split = Split::new(x, y, validation, config)?;
    run_split(net, &split, config, observers)
}

/// [`train`] on the rows `train_rows` of `x` → `y`, validating on the rows `val_rows` (none: no
/// validation, and no split of its own whatever `config.val_frac` says), without copying them
/// out: the same result as passing copies of those rows to [`train`].
pub fn train_on_rows<F: Scalar>(
    net: &mut Network<F>,
    x: ArrayView2<'_, F>,
    y: ArrayView2<'_, F>,
    train_rows: &[usize],
    val_rows: &[usize],
    config: &TrainConfig,
    observers: &mut [&mut dyn Observer<F>],
) -> Result<TrainSummary, TrainError> {
    config.validate()?;
    check_data(net, x, y, "training")?;
    if let Some(&r) = train_rows.iter().chain(val_rows).find(|&&r| r >= x.nrows()) {
        return Err(TrainError::Data(format!(
            "row {r} asked for, but the data has {} rows",
            x.nrows()
        )));
    }
    if train_rows.is_empty() {
        return Err(TrainError::Data("no training rows".to_string()));
    }
    let split = Split {
        train: Rows::subset(x, y, train_rows),
        val: (!val_rows.is_empty()).then(|| Rows::subset(x, y, val_rows)),
    };
    run_split(net, &split, config, observers)
}

/// Trains on a split, by the optimizer's loop.
fn run_split<'a, F: Scalar>(
    net: &mut Network<F>,
    split: &'a Split<'a, F>,
    config: &'a TrainConfig,
    observers: &mut [&mut dyn Observer<F>],
) -> Result<TrainSummary, TrainError> {
    let run = Run::new(net, split, config);
    observers.iter_mut().for_each(|o| o.start(net));
    if config.optimizer.is_full_batch() {
        run.full_batch(net, observers)
    } else {
        run.mini_batch(net, observers)
    }
}

fn check_data<F: Scalar>(
    net: &Network<F>,
    x: ArrayView2<'_, F>,
    y: ArrayView2<'_, F>,
    what: &str,
) -> Result<(), TrainError> {
    if x.nrows() == 0 {
        return Err(TrainError::Data(format!("{what} data has no rows")));
    }
    if x.ncols() != net.input_width() {
        return Err(ShapeError::new(
            format!("{what} inputs"),
            (x.nrows(), net.input_width()),
            x.dim(),
        )
        .into());
    }
    if y.dim() != (x.nrows(), net.output_width()) {
        return Err(ShapeError::new(
            format!("{what} targets"),
            (x.nrows(), net.output_width()),
            y.dim(),
        )
        .into());
    }
    for (name, m) in [("input", x), ("target", y)] {
        if let Some(((r, c), v)) = m.indexed_iter().find(|(_, v)| !v.is_finite()) {
            return Err(TrainError::Data(format!(
                "{what} {name} row {r}, column {c} is {v}: every value must be finite"
            )));
        }
    }
    Ok(())
}

/// Training and validation rows, as views of the caller's arrays (no copies).
struct Split<'d, F> {
    train: Rows<'d, F>,
    val: Option<Rows<'d, F>>,
}

impl<'d, F: Scalar> Split<'d, F> {
    fn new(
        x: ArrayView2<'d, F>,
        y: ArrayView2<'d, F>,
        validation: Option<(ArrayView2<'d, F>, ArrayView2<'d, F>)>,
        config: &TrainConfig,
    ) -> Result<Self, TrainError> {
        if let Some((vx, vy)) = validation {
            return Ok(Split {
                train: Rows::all(x, y),
                val: Some(Rows::all(vx, vy)),
            });
        }
        let rows = x.nrows();
        let n_val = (rows as f64 * config.val_frac).round() as usize;
        if n_val == 0 {
            return Ok(Split {
                train: Rows::all(x, y),
                val: None,
            });
        }
        if n_val >= rows {
            return Err(TrainError::Data(format!(
                "a validation fraction of {} leaves no training rows out of {rows}",
                config.val_frac
            )));
        }
        let (train_idx, val_idx) = holdout_indices(rows, n_val, config.seed);
        Ok(Split {
            train: Rows::subset(x, y, train_idx),
            val: Some(Rows::subset(x, y, val_idx)),
        })
    }
}

/// A seeded split of `0..rows` into (training, validation) indices, `n_val` of the latter,
/// each part in ascending order.
pub fn holdout_indices(rows: usize, n_val: usize, seed: u64) -> (Vec<usize>, Vec<usize>) {
    let mut order: Vec<usize> = (0..rows).collect();
    order.shuffle(&mut rng_from_seed(seed ^ SPLIT_SALT));
    let mut val = order[..n_val].to_vec();
    let mut train = order[n_val..].to_vec();
    val.sort_unstable();
    train.sort_unstable();
    (train, val)
}

/// Salt that keeps the split's random stream apart from the shuffling stream.
const SPLIT_SALT: u64 = 0x5eed_5711;

/// The best weights so far, for early stopping.
struct Best<F> {
    params: Vec<F>,
    epoch: usize,
    val_loss: f64,
}

/// State shared by the mini-batch and full-batch loops.
struct Run<'a, F: Scalar> {
    split: &'a Split<'a, F>,
    config: &'a TrainConfig,
    ranges: Vec<Range<usize>>,
    history: Vec<EpochRecord>,
    rollbacks: Vec<Rollback>,
    best: Option<Best<F>>,
    /// Score at the last improvement that counted for patience.
    patience_reference: f64,
    /// Entries whose optimizer state observers asked to reset after the last epoch.
    optimizer_resets: Vec<usize>,
    since_best: usize,
}

enum EpochEnd {
    Continue,
    Stop(StopReason),
}

impl<'a, F: Scalar> Run<'a, F> {
    fn new(net: &Network<F>, split: &'a Split<'a, F>, config: &'a TrainConfig) -> Self {
        Run {
            split,
            config,
            ranges: config.objective.penalty.ranges(net),
            history: Vec::new(),
            rollbacks: Vec::new(),
            best: None,
            patience_reference: f64::INFINITY,
            optimizer_resets: Vec::new(),
            since_best: 0,
        }
    }

    /// Data loss of the network on the validation rows.
    fn val_loss(&self, net: &mut Network<F>) -> Result<Option<f64>, TrainError> {
        let Some(val) = &self.split.val else {
            return Ok(None);
        };
        Ok(Some(val.mean_loss(net, &self.config.objective.loss)?))
    }

    /// Bookkeeping at the end of an epoch: best weights, patience, observers.
    fn end_epoch(
        &mut self,
        net: &mut Network<F>,
        record: EpochRecord,
        observers: &mut [&mut dyn Observer<F>],
    ) -> EpochEnd {
        // With validation the best validation loss decides which weights are kept, and only a
        // relative improvement of at least `min_improvement` resets the patience count.
        // Without validation the last epoch's weights are kept.
        let has_val = record.val_loss.is_some();
        let score = record.val_loss.unwrap_or(record.train_loss);
        let better = self
            .best
            .as_ref()
            .is_none_or(|b| !has_val || score < b.val_loss);
        if better {
            match &mut self.best {
                Some(b) => {
                    b.params.copy_from_slice(net.params());
                    b.epoch = record.epoch;
                    b.val_loss = score;
                }
                None => {
                    self.best = Some(Best {
                        params: net.params().to_vec(),
                        epoch: record.epoch,
                        val_loss: score,
                    })
                }
            }
        }
        let reference = self.patience_reference;
        if !reference.is_finite()
            || score < reference - self.config.min_improvement * reference.abs()
        {
            self.patience_reference = score;
            self.since_best = 0;
        } else {
            self.since_best += 1;
        }
        let mut flow = Flow::Continue;
        for o in observers.iter_mut() {
            if o.after_epoch(&record, net) == Flow::Stop {
                flow = Flow::Stop;
            }
            self.optimizer_resets.extend(o.take_optimizer_resets());
        }
        self.history.push(record);
        if flow == Flow::Stop {
            return EpochEnd::Stop(StopReason::Observer);
        }
        match self.config.patience {
            Some(p) if self.split.val.is_some() && self.since_best >= p.max(1) => {
                EpochEnd::Stop(StopReason::EarlyStop)
            }
            _ => EpochEnd::Continue,
        }
    }

    /// Puts the best weights so far into the network, if there are any.
    fn restore_best(&self, net: &mut Network<F>) {
        if let Some(b) = &self.best {
            net.params_mut().copy_from_slice(&b.params);
        }
    }

    fn finish(self, net: &mut Network<F>, stop: StopReason) -> TrainSummary {
        self.restore_best(net);
        let (best_epoch, best_val_loss) = match &self.best {
            Some(b) => (b.epoch, self.split.val.as_ref().map(|_| b.val_loss)),
            None => (0, None),
        };
        TrainSummary {
            history: self.history,
            best_epoch,
            best_val_loss,
            stop,
            rollbacks: self.rollbacks,
            rows: (
                self.split.train.len(),
                self.split.val.as_ref().map_or(0, Rows::len),
            ),
        }
    }

    fn mini_batch(
        mut self,
        net: &mut Network<F>,
        observers: &mut [&mut dyn Observer<F>],
    ) -> Result<TrainSummary, TrainError> {
        let config = self.config;
        let mut optimizer: Box<dyn Optimizer<F>> = config
            .optimizer
            .build(config.lr)
            .expect("step-based optimizer");
        optimizer.set_decay_mask(&decay_mask(net, &self.ranges));
        let mut rates = config.schedule.start(config.lr);
        let mut guard_factor = 1.0;
        let mut rng = rng_from_seed(config.seed);
        let rows = self.split.train.len();
        let batch = config.batch.min(rows);
        let mut order: Vec<usize> = (0..rows).collect();
        let mut xb = Array2::<F>::zeros((batch, net.input_width()));
        let mut yb = Array2::<F>::zeros((batch, net.output_width()));
        let mut top = Array2::<F>::zeros((batch, net.output_width()));
        let initial = net.params().to_vec();
        let mut last_good = initial.clone();
        // Divergences since the last completed epoch.
        let mut failures_in_a_row = 0;
        let mut epoch = 0;
        while epoch < config.epochs {
            let started = Instant::now();
            let lr = rates.rate(epoch) * guard_factor;
            optimizer.set_learning_rate(lr);
            order.shuffle(&mut rng);
            let mut stats = StepStats::default();
            let mut failure = None;
            for (step, chunk) in order.chunks(batch).enumerate() {
                let k = chunk.len();
                let next = order.get((step + 1) * batch..).unwrap_or(&[]);
                next.iter()
                    .take(batch)
                    .for_each(|&i| self.split.train.prefetch(i));
                for (slot, &i) in chunk.iter().enumerate() {
                    xb.row_mut(slot).assign(&self.split.train.x_row(i));
                    yb.row_mut(slot).assign(&self.split.train.y_row(i));
                }
                let (xv, yv) = (
                    xb.slice(ndarray::s![..k, ..]),
                    yb.slice(ndarray::s![..k, ..]),
                );
                let mut tv = top.slice_mut(ndarray::s![..k, ..]);
                match self.step(net, optimizer.as_mut(), xv, yv, tv.view_mut(), lr) {
                    Ok((loss, norm)) => {
                        stats.add(loss, norm, k, config.clip_norm);
                        let record = StepRecord {
                            epoch,
                            step,
                            batch_loss: loss,
                            grad_norm: norm,
                        };
                        observers
                            .iter_mut()
                            .for_each(|o| o.after_step(&record, net));
                    }
                    Err(location) => {
                        failure = Some((Some(step), location));
                        break;
                    }
                }
            }
            let val_loss = match failure {
                Some(_) => None,
                None => match self.val_loss(net)? {
                    Some(v) if !v.is_finite() => {
                        failure = Some((None, "the validation pass".to_string()));
                        None
                    }
                    v => v,
                },
            };
            if let Some((step, location)) = failure {
                // Divergence guard: restore, cut the rate, forget optimizer state, redo epoch.
                // If the last good weights fail again straight away they are themselves the
                // trouble (finite but huge): start over from the initial weights.
                failures_in_a_row += 1;
                let anchor = if failures_in_a_row > 1 {
                    &initial
                } else {
                    &last_good
                };
                net.params_mut().copy_from_slice(anchor);
                optimizer.reset();
                if self.rollbacks.len() >= config.max_rollbacks {
                    // Keep the best finite weights seen, if better than the last good ones.
                    self.restore_best(net);
                    return Err(TrainError::Diverged {
                        epoch,
                        step,
                        location,
                        rollbacks: config.max_rollbacks,
                        lr,
                    });
                }
                guard_factor *= 0.5;
                self.rollbacks.push(Rollback {
                    epoch,
                    step,
                    location,
                    lr_after: lr * 0.5,
                });
                continue;
            }
            last_good.copy_from_slice(net.params());
            failures_in_a_row = 0;
            if let Some(v) = val_loss {
                rates.observe(v);
            }
            let record = stats.record(epoch, lr, val_loss, started);
            let end = self.end_epoch(net, record, observers);
            if !self.optimizer_resets.is_empty() {
                optimizer.reset_entries(&self.optimizer_resets);
                self.optimizer_resets.clear();
            }
            if let EpochEnd::Stop(reason) = end {
                return Ok(self.finish(net, reason));
            }
            epoch += 1;
        }
        Ok(self.finish(net, StopReason::EpochLimit))
    }

    /// One optimizer step on a batch. Returns (batch loss, gradient norm before clipping), or
    /// where a non-finite value appeared (the weights are then left untouched, or restored by
    /// the caller if the update itself was not finite).
    fn step(
        &self,
        net: &mut Network<F>,
        optimizer: &mut dyn Optimizer<F>,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        mut top: ndarray::ArrayViewMut2<'_, F>,
        lr: f64,
    ) -> Result<(f64, f64), String> {
        let objective = &self.config.objective;
        net.clear_gradients();
        let out = net.forward(x, Pass::Train).map_err(|e| e.to_string())?;
        let loss = objective.loss.value(out, y).map_err(|e| e.to_string())?;
        if !loss.is_finite() {
            return Err(first_non_finite_output(net).unwrap_or_else(|| "the loss".into()));
        }
        objective
            .loss
            .gradient_into(net.output(), y, top.view_mut())
            .map_err(|e| e.to_string())?;
        net.backward_params(top.view()).map_err(|e| e.to_string())?;
        let (params, grads) = net.grads_with_params();
        objective.penalty.add_gradient(params, grads, &self.ranges);
        if let Some(t) = non_finite_tensor(net, net.grads(), true) {
            return Err(format!("the gradient of {t}"));
        }
        let norm = clip(
            net.grads_mut(),
            self.config.clip_value,
            self.config.clip_norm,
        );
        let (params, grads) = net.params_and_grads();
        optimizer.step(params, grads);
        objective.penalty.apply_proximal(params, &self.ranges, lr);
        if let Some(t) = non_finite_tensor(net, net.params(), false) {
            return Err(format!("the update of {t}"));
        }
        Ok((loss.as_f64(), norm))
    }

    fn full_batch(
        mut self,
        net: &mut Network<F>,
        observers: &mut [&mut dyn Observer<F>],
    ) -> Result<TrainSummary, TrainError> {
        let OptimizerChoice::Lbfgs { history } = self.config.optimizer else {
            unreachable!("full_batch is only called for L-BFGS");
        };
        let lbfgs = Lbfgs {
            history,
            ..Lbfgs::default()
        };
        let mut x0: Vec<f64> = net.params().iter().map(|p| p.as_f64()).collect();
        let (xs, ys) = self.split.train.whole();
        let mut problem = FullBatch {
            xs,
            ys,
            run: &mut self,
            net,
            observers,
            top: Array2::zeros((0, 0)),
            last: Instant::now(),
            last_grad_norm: 0.0,
            stop: None,
            error: None,
        };
        let outcome = lbfgs.minimize(&mut x0, &mut problem);
        let (stop, error) = (problem.stop, problem.error.take());
        if let Some(e) = error {
            return Err(e);
        }
        let stop = match outcome {
            LbfgsOutcome::NonFiniteStart => {
                return Err(TrainError::Diverged {
                    epoch: 0,
                    step: None,
                    location: first_non_finite_output(net).unwrap_or_else(|| "the loss".into()),
                    rollbacks: 0,
                    lr: 0.0,
                })
            }
            LbfgsOutcome::Converged => StopReason::Converged,
            LbfgsOutcome::LineSearchFailed => StopReason::NoProgress,
            LbfgsOutcome::Stopped => stop.unwrap_or(StopReason::EpochLimit),
        };
        // If no iteration was accepted there is no best yet: keep the starting weights.
        if self.best.is_none() {
            for (p, v) in net.params_mut().iter_mut().zip(&x0) {
                *p = F::of(*v);
            }
        }
        Ok(self.finish(net, stop))
    }
}

/// The L-BFGS view of full-batch training.
struct FullBatch<'r, 'a, 'n, 'o, 'p, F: Scalar> {
    /// Every training row, in one piece.
    xs: CowArray<'a, F, Ix2>,
    ys: CowArray<'a, F, Ix2>,
    run: &'r mut Run<'a, F>,
    net: &'n mut Network<F>,
    observers: &'o mut [&'p mut dyn Observer<F>],
    top: Array2<F>,
    last: Instant,
    /// Gradient norm of the last evaluation (L-BFGS evaluates the accepted point last).
    last_grad_norm: f64,
    stop: Option<StopReason>,
    error: Option<TrainError>,
}

impl<F: Scalar> LbfgsProblem for FullBatch<'_, '_, '_, '_, '_, F> {
    fn evaluate(&mut self, x: &[f64], grad: &mut [f64]) -> f64 {
        let (net, run) = (&mut *self.net, &*self.run);
        for (p, v) in net.params_mut().iter_mut().zip(x) {
            *p = F::of(*v);
        }
        net.clear_gradients();
        let objective = &run.config.objective;
        let (xs, ys) = (self.xs.view(), self.ys.view());
        let Ok(out) = net.forward(xs, Pass::Train) else {
            return f64::NAN;
        };
        let Ok(loss) = objective.loss.value(out, ys) else {
            return f64::NAN;
        };
        if self.top.dim() != ys.dim() {
            self.top = Array2::zeros(ys.dim());
        }
        if objective
            .loss
            .gradient_into(net.output(), ys, self.top.view_mut())
            .is_err()
            || net.backward_params(self.top.view()).is_err()
        {
            return f64::NAN;
        }
        let (params, grads) = net.grads_with_params();
        objective.penalty.add_gradient(params, grads, &run.ranges);
        for (o, v) in grad.iter_mut().zip(net.grads()) {
            *o = v.as_f64();
        }
        self.last_grad_norm = grad.iter().map(|g| g * g).sum::<f64>().sqrt();
        loss.as_f64() + objective.penalty.value(net.params(), &run.ranges)
    }

    fn accept(&mut self, iteration: usize, x: &[f64], value: f64) -> bool {
        let net = &mut *self.net;
        for (p, v) in net.params_mut().iter_mut().zip(x) {
            *p = F::of(*v);
        }
        let penalty = self
            .run
            .config
            .objective
            .penalty
            .value(net.params(), &self.run.ranges);
        let val_loss = match self.run.val_loss(net) {
            Ok(v) => v,
            Err(e) => {
                self.error = Some(e);
                return false;
            }
        };
        let record = EpochRecord {
            epoch: iteration,
            train_loss: value - penalty,
            val_loss,
            lr: 0.0,
            grad_norm_mean: self.last_grad_norm,
            grad_norm_max: self.last_grad_norm,
            clipped_steps: 0,
            steps: 1,
            seconds: self.last.elapsed().as_secs_f64(),
        };
        self.last = Instant::now();
        // One L-BFGS iteration is one step: the last evaluation was at the accepted point, so
        // the network holds its gradient.
        let step = StepRecord {
            epoch: iteration,
            step: 0,
            batch_loss: record.train_loss,
            grad_norm: self.last_grad_norm,
        };
        self.observers
            .iter_mut()
            .for_each(|o| o.after_step(&step, net));
        if let EpochEnd::Stop(reason) = self.run.end_epoch(net, record, self.observers) {
            self.stop = Some(reason);
            return false;
        }
        if iteration + 1 >= self.run.config.epochs {
            self.stop = Some(StopReason::EpochLimit);
            return false;
        }
        true
    }
}

/// Per-epoch accumulation of step results.
#[derive(Default)]
struct StepStats {
    loss_sum: f64,
    rows: usize,
    norm_sum: f64,
    norm_max: f64,
    clipped: usize,
    steps: usize,
}

impl StepStats {
    fn add(&mut self, loss: f64, norm: f64, rows: usize, clip_norm: Option<f64>) {
        self.loss_sum += loss * rows as f64;
        self.rows += rows;
        self.norm_sum += norm;
        self.norm_max = self.norm_max.max(norm);
        self.steps += 1;
        if clip_norm.is_some_and(|c| norm > c) {
            self.clipped += 1;
        }
    }

    fn record(
        &self,
        epoch: usize,
        lr: f64,
        val_loss: Option<f64>,
        started: Instant,
    ) -> EpochRecord {
        EpochRecord {
            epoch,
            train_loss: self.loss_sum / self.rows.max(1) as f64,
            val_loss,
            lr,
            grad_norm_mean: self.norm_sum / self.steps.max(1) as f64,
            grad_norm_max: self.norm_max,
            clipped_steps: self.clipped,
            steps: self.steps,
            seconds: started.elapsed().as_secs_f64(),
        }
    }
}

/// Σ g² in f64, over eight interleaved partial sums (one sum in order is bound by the adder's
/// latency; this runs several times faster and does not depend on the instruction set).
fn sum_of_squares<F: Scalar>(values: &[F]) -> f64 {
    let mut parts = [0.0_f64; 8];
    let chunks = values.chunks_exact(8);
    let tail = chunks.remainder();
    for chunk in chunks {
        for (p, g) in parts.iter_mut().zip(chunk) {
            let g = g.as_f64();
            *p += g * g;
        }
    }
    for (p, g) in parts.iter_mut().zip(tail) {
        let g = g.as_f64();
        *p += g * g;
    }
    let [a, b, c, d, e, f, g, h] = parts;
    ((a + b) + (c + d)) + ((e + f) + (g + h))
}

/// Clamps entries to ±`value`, then rescales to at most `norm` in L2; returns the L2 norm
/// before any clipping.
pub fn clip<F: Scalar>(grads: &mut [F], value: Option<f64>, norm: Option<f64>) -> f64 {
    let before = sum_of_squares(grads).sqrt();
    if let Some(c) = value {
        let c = F::of(c);
        grads.iter_mut().for_each(|g| *g = g.max(-c).min(c));
    }
    if let Some(max) = norm {
        let now = if value.is_some() {
            sum_of_squares(grads).sqrt()
        } else {
            before
        };
        if now > max {
            let scale = F::of(max / now);
            grads.iter_mut().for_each(|g| *g *= scale);
        }
    }
    before
}

/// Entries that decoupled weight decay applies to: those the penalty's roles cover.
fn decay_mask<F: Scalar>(net: &Network<F>, ranges: &[Range<usize>]) -> Vec<bool> {
    let mut mask = vec![false; net.param_count()];
    for r in ranges {
        mask[r.clone()].iter_mut().for_each(|m| *m = true);
    }
    mask
}

/// The first layer whose output from the last forward pass holds a non-finite value.
fn first_non_finite_output<F: Scalar>(net: &Network<F>) -> Option<String> {
    net.layers().iter().enumerate().find_map(|(i, l)| {
        l.output()
            .iter()
            .any(|v| !v.is_finite())
            .then(|| format!("the output of layer {i} ({})", l.spec().kind()))
    })
}

/// A tensor of `values` (laid out like the parameters) holding a non-finite entry: the last one
/// if `from_top` (gradients flow from the top), else the first.
fn non_finite_tensor<F: Scalar>(net: &Network<F>, values: &[F], from_top: bool) -> Option<String> {
    // A fold without early exit vectorizes (every step checks every gradient and weight).
    if !values.iter().fold(false, |bad, v| bad | !v.is_finite()) {
        return None;
    }
    let bad =
        |t: &crate::nn::network::TensorInfo| values[t.range.clone()].iter().any(|v| !v.is_finite());
    let tensors = net.tensors();
    let found = if from_top {
        tensors.iter().rev().find(|t| bad(t))
    } else {
        tensors.iter().find(|t| bad(t))
    };
    found.map(|t| t.label())
}
