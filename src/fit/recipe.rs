//! Training with defaults that work without tuning: scaling, architecture, optimizer and
//! early stopping chosen for tables of about 100 to 100 000 rows.
//!
//! The defaults, and why (DEVELOPERS.md has the measurements behind them):
//! - inputs and target standardized on the training rows (common practice, no source; on
//!   Longley it is what makes the ill-conditioned fit converge), un-scaled on output;
//! - two hidden layers of 64 units with He initialization (He et al. 2015);
//! - early stopping on a seeded 20% validation split, best weights restored;
//! - tables up to [`SMALL_TABLE_ROWS`] training rows: GELU units trained full batch with
//!   L-BFGS (Liu & Nocedal 1989) and no penalty, which fit the NIST StRD sets far better than
//!   Adam, and than ReLU units (L-BFGS models curvature, which a ReLU loss lacks between its
//!   kinks); below [`TINY_TABLE_ROWS`] rows, no validation split;
//! - larger tables: ReLU units, Adam (Kingma & Ba 2015) at 3e-3 in mini-batches of 32, an L2
//!   penalty of 3e-4 on the weights and a halving of the rate after 10 epochs without
//!   progress: on Friedman #1 and the demo table this beat plain Adam clearly (1.15 vs 1.33
//!   test RMSE on Friedman #1).

use crate::fit::monitor::{Monitor, MonitorConfig, Revival};
use crate::fit::objective::Objective;
use crate::fit::optim::OptimizerChoice;
use crate::fit::penalty::L1Mode;
use crate::fit::penalty::Penalty;
use crate::fit::scale::Standardizer;
use crate::fit::schedule::Schedule;
use crate::fit::train::{train_on_rows, Observer, TrainConfig, TrainError, TrainSummary};
use crate::kernels::scalar::Scalar;
use crate::nn::activation::Activation;
use crate::nn::error::ShapeError;
use crate::nn::init::Init;
use crate::nn::loss::Loss;
use crate::nn::network::{Network, NetworkPlan};
use crate::report::{DataShape, RunReport};
use ndarray::{Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

/// Tables with at most this many training rows use [`Recipe::small_tables`].
pub const SMALL_TABLE_ROWS: usize = 1000;

/// Tables with fewer rows than this train on every row, without a validation split: a 20%
/// split would leave under 20 rows, too few to tell a better epoch from noise.
pub const TINY_TABLE_ROWS: usize = 100;

/// Patience, in iterations, of early stopping under L-BFGS (its validation loss moves in
/// small, noisy steps, so it gets more iterations than Adam gets epochs).
pub const LBFGS_PATIENCE: usize = 300;

/// Everything needed to train a regressor from a table of numbers.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Recipe {
    /// Hidden layer widths.
    pub hidden: Vec<usize>,
    /// Hidden activation; None picks by table size: GELU for small tables (trained with
    /// L-BFGS, whose curvature model wants a smooth loss) and ReLU for larger ones.
    pub activation: Option<Activation>,
    /// Hidden weight initializer (None: the activation's default).
    pub init: Option<Init>,
    /// Dropout after each hidden activation.
    pub dropout: f64,
    /// Standardize the input columns.
    pub scale_inputs: bool,
    /// Standardize the target columns.
    pub scale_target: bool,
    /// Training settings for tables above [`SMALL_TABLE_ROWS`] training rows (for every table
    /// if `small_tables` is None).
    pub train: TrainConfig,
    /// Training settings for tables up to [`SMALL_TABLE_ROWS`] training rows; below
    /// [`TINY_TABLE_ROWS`] rows their validation split is dropped, unless
    /// `keep_tiny_validation` is set.
    pub small_tables: Option<TrainConfig>,
    /// Keep the validation split even on tables under [`TINY_TABLE_ROWS`] rows.
    pub keep_tiny_validation: bool,
    /// Seed of the initialization (the split and shuffling use `train.seed`).
    pub seed: u64,
    /// Ensemble members a model trained from a table gets ([`crate::Model::fit`]; `fit` on
    /// arrays trains one network).
    #[serde(default = "default_members")]
    pub members: usize,
    /// Choose the L2 strength on the data ([`crate::fit::ensemble::PENALTY_GRID`]) when training
    /// a model from a table.
    #[serde(default = "default_true")]
    pub choose_penalty: bool,
    /// Nominal coverage of the prediction interval.
    #[serde(default = "default_coverage")]
    pub coverage: f64,
    /// Revival of dead or dormant units in every run (Sokar et al. 2023), off by default.
    #[serde(default)]
    pub revival: Option<Revival>,
}

fn default_members() -> usize {
    crate::fit::ensemble::DEFAULT_MEMBERS
}

fn default_true() -> bool {
    true
}

fn default_coverage() -> f64 {
    crate::serve::interval::DEFAULT_COVERAGE
}

impl Default for Recipe {
    fn default() -> Self {
        Recipe {
            hidden: vec![64, 64],
            activation: None,
            init: None,
            dropout: 0.0,
            scale_inputs: true,
            scale_target: true,
            train: TrainConfig {
                lr: 3e-3,
                objective: Objective::new(Loss::Mse, Penalty::l2(3e-4)),
                schedule: Schedule::Plateau {
                    patience: 10,
                    factor: 0.5,
                    min_fraction: 0.01,
                },
                ..TrainConfig::default()
            },
            small_tables: Some(TrainConfig {
                optimizer: OptimizerChoice::Lbfgs { history: 20 },
                epochs: 2000,
                patience: Some(LBFGS_PATIENCE),
                ..TrainConfig::default()
            }),
            keep_tiny_validation: false,
            seed: 0,
            members: default_members(),
            choose_penalty: true,
            coverage: default_coverage(),
            revival: None,
        }
    }
}

/// Changes to the default recipe, as a command line gives them: every `None` keeps the default.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Overrides {
    /// Hidden widths.
    pub hidden: Option<Vec<usize>>,
    /// Hidden activation.
    pub activation: Option<Activation>,
    /// Hidden initializer.
    pub init: Option<Init>,
    /// Optimizer for every table size (turns off the size-dependent choice).
    pub optimizer: Option<OptimizerChoice>,
    /// Learning rate of step-based optimizers.
    pub lr: Option<f64>,
    /// Most epochs (L-BFGS: iterations).
    pub epochs: Option<usize>,
    /// Mini-batch rows.
    pub batch: Option<usize>,
    /// L1 strength on weights.
    pub l1: Option<f64>,
    /// L2 strength on weights.
    pub l2: Option<f64>,
    /// Validation fraction (kept even on tiny tables).
    pub val_frac: Option<f64>,
    /// Early-stopping patience.
    pub patience: Option<usize>,
    /// Seed of initialization, split and shuffling.
    pub seed: Option<u64>,
    /// Ensemble members.
    #[serde(default)]
    pub members: Option<usize>,
    /// Nominal coverage of the prediction interval.
    #[serde(default)]
    pub coverage: Option<f64>,
    /// Training loss.
    #[serde(default)]
    pub loss: Option<Loss>,
    /// Learning-rate schedule of step-based optimizers.
    #[serde(default)]
    pub schedule: Option<Schedule>,
    /// Gradient-norm clipping threshold.
    #[serde(default)]
    pub clip_norm: Option<f64>,
    /// Gradient-value clipping threshold.
    #[serde(default)]
    pub clip_value: Option<f64>,
    /// Dropout after each hidden activation.
    #[serde(default)]
    pub dropout: Option<f64>,
    /// How the L1 penalty is applied.
    #[serde(default)]
    pub l1_mode: Option<L1Mode>,
    /// Revival of dead or dormant units.
    #[serde(default)]
    pub revival: Option<Revival>,
}

/// The [`Overrides`] fields that only step-based optimizers use, as [`Overrides::step_only`]
/// names them.
const STEP_ONLY: [&str; 6] = [
    "lr",
    "batch",
    "schedule",
    "clip_norm",
    "clip_value",
    "l1_mode",
];

impl Overrides {
    /// The default recipe with these changes applied to both size regimes.
    pub fn recipe(&self) -> Recipe {
        let mut recipe = Recipe::default();
        if let Some(h) = &self.hidden {
            recipe.hidden = h.clone();
        }
        recipe.activation = self.activation.or(recipe.activation);
        recipe.init = self.init.or(recipe.init);
        if let Some(opt) = self.optimizer {
            let base = if opt.is_full_batch() {
                recipe.small_tables.clone().unwrap_or_default()
            } else {
                recipe.train.clone()
            };
            recipe.train = TrainConfig {
                optimizer: opt,
                ..base
            };
            recipe.small_tables = None;
        }
        if let Some(seed) = self.seed {
            recipe.seed = seed;
        }
        if self.val_frac.is_some() {
            recipe.keep_tiny_validation = true;
        }
        if let Some(m) = self.members {
            recipe.members = m.max(1);
        }
        if let Some(c) = self.coverage {
            recipe.coverage = c;
        }
        if self.l1.is_some() || self.l2.is_some() {
            // A penalty given by hand is used as given.
            recipe.choose_penalty = false;
        }
        if let Some(p) = self.dropout {
            recipe.dropout = p;
        }
        recipe.revival = self.revival;
        let mut configs: Vec<&mut TrainConfig> = vec![&mut recipe.train];
        if let Some(small) = recipe.small_tables.as_mut() {
            configs.push(small);
        }
        for c in configs {
            if let Some(lr) = self.lr {
                c.lr = lr;
            }
            if let Some(e) = self.epochs {
                c.epochs = e;
            }
            if let Some(b) = self.batch {
                c.batch = b;
            }
            if let Some(v) = self.val_frac {
                c.val_frac = v;
            }
            if let Some(p) = self.patience {
                c.patience = Some(p);
            }
            if let Some(seed) = self.seed {
                c.seed = seed;
            }
            if self.l1.is_some() || self.l2.is_some() {
                let p = &mut c.objective.penalty;
                p.l1 = self.l1.unwrap_or(p.l1);
                p.l2 = self.l2.unwrap_or(p.l2);
            }
            if let Some(mode) = self.l1_mode {
                c.objective.penalty.l1_mode = mode;
            }
            if let Some(loss) = self.loss {
                c.objective.loss = loss;
            }
            if let Some(s) = self.schedule {
                c.schedule = s;
            }
            c.clip_norm = self.clip_norm.or(c.clip_norm);
            c.clip_value = self.clip_value.or(c.clip_value);
        }
        recipe
    }

    /// The options given here that the optimizer chosen for a table of `rows` rows would
    /// ignore (L-BFGS takes no learning rate, batch, schedule, clipping or proximal step), by
    /// field name; empty when every option applies.
    pub fn step_only(&self, rows: usize) -> Vec<&'static str> {
        if !self.recipe().config_for(rows).optimizer.is_full_batch() {
            return Vec::new();
        }
        let given = [
            self.lr.is_some(),
            self.batch.is_some(),
            self.schedule.is_some(),
            self.clip_norm.is_some(),
            self.clip_value.is_some(),
            self.l1_mode == Some(L1Mode::Proximal),
        ];
        STEP_ONLY
            .iter()
            .zip(given)
            .filter(|(_, g)| *g)
            .map(|(n, _)| *n)
            .collect()
    }
}

/// A trained network with the scaling of its inputs and target.
#[derive(Debug, Clone)]
pub struct Trained<F: Scalar> {
    /// The network, working on scaled values.
    pub network: Network<F>,
    /// Input scaling fitted on the training rows.
    pub inputs: Standardizer,
    /// Target scaling fitted on the training rows.
    pub target: Standardizer,
    /// How training went.
    pub summary: TrainSummary,
}

impl<F: Scalar> Trained<F> {
    /// Predictions in the target's own units (run in chunks of
    /// [`CHUNK_ROWS`](crate::fit::split::CHUNK_ROWS) rows, so the network's buffers stay small).
    pub fn predict(&mut self, x: ArrayView2<'_, F>) -> Result<Array2<F>, ShapeError> {
        let scaled = self.inputs.apply(x);
        let out = crate::fit::split::forward_in_chunks(&mut self.network, scaled.view())?;
        Ok(self.target.invert(out.view()))
    }
}

impl Recipe {
    /// The training settings this recipe uses for a table of `rows` rows.
    pub fn config_for(&self, rows: usize) -> TrainConfig {
        let Some(small) = &self.small_tables else {
            return self.train.clone();
        };
        let train_rows = rows - (rows as f64 * small.val_frac).round() as usize;
        if train_rows > SMALL_TABLE_ROWS {
            return self.train.clone();
        }
        let mut config = small.clone();
        if rows < TINY_TABLE_ROWS && !self.keep_tiny_validation {
            config.val_frac = 0.0;
        }
        config
    }

    /// The (training, validation) rows this recipe uses for a table of `rows` rows: a seeded
    /// split, the same on every call. Encoders fitted outside the recipe must use these
    /// training rows only.
    pub fn split(&self, rows: usize) -> Result<(Vec<usize>, Vec<usize>), TrainError> {
        let config = self.config_for(rows);
        if !(0.0..1.0).contains(&config.val_frac) {
            return Err(TrainError::Data(format!(
                "a validation fraction of {} is not in [0, 1) (for example 0.2)",
                config.val_frac
            )));
        }
        let n_val = (rows as f64 * config.val_frac).round() as usize;
        if n_val >= rows {
            return Err(TrainError::Data(format!(
                "a validation fraction of {} leaves no training rows out of {rows}",
                config.val_frac
            )));
        }
        Ok(crate::fit::train::holdout_indices(rows, n_val, config.seed))
    }

    /// The same recipe with one training configuration for every table size.
    pub fn with_config(mut self, config: TrainConfig) -> Self {
        self.train = config;
        self.small_tables = None;
        self
    }

    /// The activation this recipe uses for a table of `rows` rows.
    pub fn activation_for(&self, rows: usize) -> Activation {
        self.activation.unwrap_or_else(|| {
            if self.config_for(rows).optimizer.is_full_batch() {
                Activation::Gelu
            } else {
                Activation::Relu
            }
        })
    }

    /// The network plan for a table of `rows` rows with `inputs` input and `outputs` target
    /// columns.
    pub fn plan(&self, rows: usize, inputs: usize, outputs: usize) -> NetworkPlan {
        NetworkPlan {
            inputs,
            hidden: self.hidden.clone(),
            outputs,
            activation: self.activation_for(rows),
            init: self.init,
            dropout: self.dropout,
        }
    }

    /// Trains on rows `x` → `y` (several target columns allowed).
    pub fn fit<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
    ) -> Result<Trained<F>, TrainError> {
        self.fit_observed(x, y, &mut [])
    }

    /// [`Recipe::fit`] with observers.
    pub fn fit_observed<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        observers: &mut [&mut dyn Observer<F>],
    ) -> Result<Trained<F>, TrainError> {
        Ok(self.fit_inner(x, y, observers, None)?.0)
    }

    /// [`Recipe::fit`] watched by a [`Monitor`] (probing up to [`PROBE_ROWS`] training rows),
    /// returning the run report beside the trained model.
    pub fn fit_reported<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        monitor: MonitorConfig,
        observers: &mut [&mut dyn Observer<F>],
    ) -> Result<(Trained<F>, RunReport), TrainError> {
        let (trained, report) = self.fit_inner(x, y, observers, Some(monitor))?;
        Ok((trained, report.expect("a monitored run has a report")))
    }

    fn fit_inner<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        observers: &mut [&mut dyn Observer<F>],
        monitor: Option<MonitorConfig>,
    ) -> Result<(Trained<F>, Option<RunReport>), TrainError> {
        // Hold out the validation rows here so the scaling is fitted on training rows only.
        let (train_idx, val_idx) = self.split(x.nrows())?;
        self.fit_rows(x, y, &train_idx, &val_idx, observers, monitor)
    }

    /// Trains on the rows `train` of `x` → `y`, early-stopping on the rows `val` (none: no
    /// validation), with the settings chosen for a table of `x.nrows()` rows; returns the run
    /// report when a monitor is asked for. Scaling is fitted on the `train` rows only.
    pub fn fit_rows<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        train_idx: &[usize],
        val_idx: &[usize],
        observers: &mut [&mut dyn Observer<F>],
        monitor: Option<MonitorConfig>,
    ) -> Result<(Trained<F>, Option<RunReport>), TrainError> {
        let rows = self.scale_rows(x, y, train_idx, val_idx)?;
        self.fit_scaled(&rows, observers, monitor)
    }

    /// `x` → `y` copied and scaled as this recipe scales them (fitted on the `train` rows),
    /// to train on the rows `train` and validate on the rows `val`: one copy that every run
    /// on the same rows can share (an ensemble's members differ only in seed and penalty).
    pub fn scale_rows<F: Scalar>(
        &self,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
        train_idx: &[usize],
        val_idx: &[usize],
    ) -> Result<ScaledRows<F>, TrainError> {
        self.scale_owned(x.to_owned(), y.to_owned(), train_idx, val_idx)
    }

    /// [`Recipe::scale_rows`] in place, on arrays the caller gives up (no second copy of the
    /// table).
    pub fn scale_owned<F: Scalar>(
        &self,
        mut x: Array2<F>,
        mut y: Array2<F>,
        train_idx: &[usize],
        val_idx: &[usize],
    ) -> Result<ScaledRows<F>, TrainError> {
        if x.nrows() != y.nrows() {
            return Err(ShapeError::new("targets", (x.nrows(), y.ncols()), y.dim()).into());
        }
        if let Some(&r) = train_idx.iter().chain(val_idx).find(|&&r| r >= x.nrows()) {
            return Err(TrainError::Data(format!(
                "row {r} asked for, but the data has {} rows",
                x.nrows()
            )));
        }
        let inputs = if self.scale_inputs {
            Standardizer::fit_rows(x.view(), train_idx)
        } else {
            Standardizer::identity(x.ncols())
        };
        let target = if self.scale_target {
            Standardizer::fit_rows(y.view(), train_idx)
        } else {
            Standardizer::identity(y.ncols())
        };
        inputs.apply_in_place(&mut x);
        target.apply_in_place(&mut y);
        Ok(ScaledRows {
            inputs,
            target,
            x,
            y,
            train: train_idx.to_vec(),
            val: val_idx.to_vec(),
        })
    }

    /// Trains on rows scaled by [`Recipe::scale_rows`] (of a recipe with the same scaling
    /// settings), as [`Recipe::fit_rows`] does.
    pub fn fit_scaled<F: Scalar>(
        &self,
        data: &ScaledRows<F>,
        observers: &mut [&mut dyn Observer<F>],
        monitor: Option<MonitorConfig>,
    ) -> Result<(Trained<F>, Option<RunReport>), TrainError> {
        let ScaledRows {
            inputs,
            target,
            x,
            y,
            train: train_idx,
            val: val_idx,
        } = data;
        let mut network = self
            .plan(x.nrows(), x.ncols(), y.ncols())
            .build::<F>(self.seed)?;
        let mut config = self.config_for(x.nrows());
        if val_idx.is_empty() {
            // No validation rows given (the report says so).
            config.val_frac = 0.0;
        }
        // Revival needs a monitor even when no report is asked for; each run draws its own
        // revived weights.
        let revival = self.revival.map(|r| Revival {
            seed: r.seed ^ self.seed,
            ..r
        });
        let monitor = match (monitor, revival) {
            (Some(m), r) => Some(MonitorConfig {
                revival: r.or(m.revival),
                ..m
            }),
            (None, Some(r)) => Some(MonitorConfig {
                revival: Some(r),
                ..MonitorConfig::default()
            }),
            (None, None) => None,
        };
        let mut watcher = monitor.map(|c| Monitor::new(probe_rows(x.view(), train_idx).view(), c));
        let mut chain = Chain {
            monitor: watcher.as_mut(),
            rest: observers,
        };
        let summary = train_on_rows(
            &mut network,
            x.view(),
            y.view(),
            train_idx,
            val_idx,
            &config,
            &mut [&mut chain],
        )?;
        let report = watcher.as_ref().map(|m| {
            let shape = DataShape {
                train_rows: train_idx.len(),
                val_rows: val_idx.len(),
                inputs: x.ncols(),
                outputs: y.ncols(),
            };
            RunReport::new(
                self.seed,
                &config,
                network.specs(),
                shape,
                &summary,
                Some(m),
            )
        });
        Ok((
            Trained {
                network,
                inputs: inputs.clone(),
                target: target.clone(),
                summary,
            },
            report,
        ))
    }
}

/// Training and validation rows scaled for training ([`Recipe::scale_rows`]).
#[derive(Debug, Clone)]
pub struct ScaledRows<F: Scalar> {
    /// The input scaling, fitted on the training rows.
    pub inputs: Standardizer,
    /// The target scaling, fitted on the training rows.
    pub target: Standardizer,
    /// Every row of the table, scaled.
    x: Array2<F>,
    y: Array2<F>,
    train: Vec<usize>,
    val: Vec<usize>,
}

impl<F: Scalar> ScaledRows<F> {
    /// Number of training rows.
    pub fn train_rows(&self) -> usize {
        self.train.len()
    }

    /// True when there are early-stopping (validation) rows.
    pub fn has_validation(&self) -> bool {
        !self.val.is_empty()
    }
}

/// The monitor (if any) followed by the caller's observers, as one observer.
struct Chain<'m, 'o, 'p, F: Scalar> {
    monitor: Option<&'m mut Monitor<F>>,
    rest: &'o mut [&'p mut dyn Observer<F>],
}

impl<F: Scalar> Chain<'_, '_, '_, F> {
    fn each(&mut self, mut f: impl FnMut(&mut dyn Observer<F>)) {
        if let Some(m) = self.monitor.as_deref_mut() {
            f(m);
        }
        for o in self.rest.iter_mut() {
            f(&mut **o);
        }
    }
}

impl<F: Scalar> Observer<F> for Chain<'_, '_, '_, F> {
    fn start(&mut self, net: &crate::nn::network::Network<F>) {
        self.each(|o| o.start(net));
    }

    fn after_step(
        &mut self,
        record: &crate::fit::train::StepRecord,
        net: &crate::nn::network::Network<F>,
    ) {
        self.each(|o| o.after_step(record, net));
    }

    fn after_epoch(
        &mut self,
        record: &crate::fit::train::EpochRecord,
        net: &mut crate::nn::network::Network<F>,
    ) -> crate::fit::train::Flow {
        let mut flow = crate::fit::train::Flow::Continue;
        self.each(|o| {
            if o.after_epoch(record, net) == crate::fit::train::Flow::Stop {
                flow = crate::fit::train::Flow::Stop;
            }
        });
        flow
    }

    fn take_optimizer_resets(&mut self) -> Vec<usize> {
        let mut all = Vec::new();
        self.each(|o| all.extend(o.take_optimizer_resets()));
        all
    }
}

/// Rows a [`Monitor`] probes at most.
pub const PROBE_ROWS: usize = 512;

/// Up to [`PROBE_ROWS`] of the rows `rows` of `x`, spread evenly over them.
fn probe_rows<F: Scalar>(x: ArrayView2<'_, F>, rows: &[usize]) -> ndarray::Array2<F> {
    let n = rows.len();
    let take = n.min(PROBE_ROWS);
    let idx: Vec<usize> = (0..take).map(|k| rows[k * n / take.max(1)]).collect();
    x.select(Axis(0), &idx)
}
