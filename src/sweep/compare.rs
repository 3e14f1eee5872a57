//! The activation bake-off: candidates (activation, optionally initializer and learning rate)
//! × seeds × folds on the user's table, in a paired design — every candidate sees the same
//! seeds and the same folds, everything else identical — summarized with Student-t intervals
//! and Wilcoxon signed-rank tests against the best candidate.
//!
//! Runs are spread over the cores with rayon; each run depends only on its (candidate, seed,
//! fold), so results do not depend on the thread count. `shard` runs a slice of the grid for
//! batch schedulers; [`merge`] puts shard reports back together.

use crate::data::{kfold, ColumnData, DataError, EncoderSpec, Table};
use crate::fit::monitor::MonitorConfig;
use crate::fit::parallel::map_in_order;
use crate::fit::recipe::Overrides;
use crate::fit::train::TrainError;
use crate::nn::activation::Activation;
use crate::nn::init::Init;
use crate::serve::model::{FitError, Model};
use crate::serve::predict::Predictor;
use crate::sweep::cost::thread_cpu_seconds;
use crate::sweep::shard::Invocation;
use crate::sweep::stats::{mean_sd_ci95, wilcoxon};
use serde::{Deserialize, Serialize};
use std::time::Instant;

/// Name in the `format` field of sweep reports.
pub const SWEEP_FORMAT: &str = "relume-sweep";
/// Version of the sweep report layout.
pub const SWEEP_VERSION: u32 = 1;

/// One setting under comparison.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Candidate {
    /// Short label, e.g. "relu" or "elu, he, lr 1e-3".
    pub label: String,
    /// Hidden activation.
    pub activation: Activation,
    /// Initializer (None: the activation's default).
    pub init: Option<Init>,
    /// Learning rate (None: the default).
    pub lr: Option<f64>,
}

/// The grid and the design.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SweepPlan {
    /// Candidates, in order.
    pub candidates: Vec<Candidate>,
    /// Seeds 0..seeds (initialization, internal validation split and shuffling).
    pub seeds: usize,
    /// Folds of the outer split: ≥ 2 for k-fold, else one seeded holdout of `holdout`.
    pub folds: usize,
    /// Held-out fraction when `folds` < 2.
    pub holdout: f64,
    /// Seed of the outer split (the same for every candidate and seed).
    pub split_seed: u64,
    /// Settings shared by every run.
    pub base: Overrides,
}

/// One grid cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Cell {
    /// Candidate index.
    pub candidate: usize,
    /// Seed.
    pub seed: u64,
    /// Fold index.
    pub fold: usize,
}

impl SweepPlan {
    /// The cartesian product of activations × initializers × learning rates (an empty list
    /// means "the default" for that axis).
    pub fn grid(
        activations: &[Activation],
        inits: &[Init],
        lrs: &[f64],
        seeds: usize,
        folds: usize,
        base: Overrides,
    ) -> SweepPlan {
        let inits: Vec<Option<Init>> = if inits.is_empty() {
            vec![None]
        } else {
            inits.iter().copied().map(Some).collect()
        };
        let lrs: Vec<Option<f64>> = if lrs.is_empty() {
            vec![None]
        } else {
            lrs.iter().copied().map(Some).collect()
        };
        let mut candidates = Vec::new();
        for &activation in activations {
            for &init in &inits {
                for &lr in &lrs {
                    let mut label = activation.to_string();
                    if let Some(i) = init {
                        label += &format!(", {}", init_label(&i));
                    }
                    if let Some(lr) = lr {
                        label += &format!(", lr {lr:e}");
                    }
                    candidates.push(Candidate {
                        label,
                        activation,
                        init,
                        lr,
                    });
                }
            }
        }
        SweepPlan {
            candidates,
            seeds: seeds.max(1),
            folds,
            holdout: 0.2,
            split_seed: 0,
            base,
        }
    }

    /// Number of outer folds actually used.
    pub fn fold_count(&self) -> usize {
        if self.folds >= 2 {
            self.folds
        } else {
            1
        }
    }

    /// Every cell, candidate-major, then seed, then fold.
    pub fn cells(&self) -> Vec<Cell> {
        let mut out = Vec::new();
        for candidate in 0..self.candidates.len() {
            for seed in 0..self.seeds as u64 {
                for fold in 0..self.fold_count() {
                    out.push(Cell {
                        candidate,
                        seed,
                        fold,
                    });
                }
            }
        }
        out
    }

    /// The outer (training, held-out) rows of every fold: the same for every candidate.
    pub fn splits(&self, rows: usize) -> Vec<(Vec<usize>, Vec<usize>)> {
        if self.folds >= 2 {
            kfold(rows, self.folds, self.split_seed)
        } else {
            vec![crate::data::holdout(rows, self.holdout, self.split_seed)]
        }
    }
}

fn init_label(init: &Init) -> String {
    match init {
        Init::He { .. } => "he".into(),
        Init::Glorot { .. } => "glorot".into(),
        Init::Lecun { .. } => "lecun".into(),
        Init::Orthogonal { .. } => "orthogonal".into(),
        Init::Constant { value } => format!("constant {value}"),
    }
}

/// The outcome of one run.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RunResult {
    /// Candidate index.
    pub candidate: usize,
    /// Seed.
    pub seed: u64,
    /// Fold index.
    pub fold: usize,
    /// RMSE on the fold's held-out rows, in target units (None if training diverged).
    pub val_rmse: Option<f64>,
    /// Epoch of the best (internal) validation loss.
    pub best_epoch: usize,
    /// Epochs run.
    pub epochs: usize,
    /// Wall time per epoch, in seconds (other cells run at the same time: see
    /// `cpu_seconds_per_epoch`).
    pub seconds_per_epoch: f64,
    /// CPU time of the thread that trained the cell, per epoch, in seconds: what the cell
    /// itself cost, whatever ran beside it ([`COST_CLOCK`]). None where the system has no
    /// per-thread clock, for diverged runs and in reports from before it existed.
    #[serde(default)]
    pub cpu_seconds_per_epoch: Option<f64>,
    /// Mean dead fraction of the hidden layers at the end.
    pub dead_fraction: f64,
    /// Mean exact-zero fraction of the hidden layers at the end.
    pub zero_fraction: f64,
    /// Why the run diverged, if it did.
    pub diverged: Option<String>,
}

/// All runs of a sweep (or of one shard of it).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SweepReport {
    /// Always [`SWEEP_FORMAT`].
    pub format: String,
    /// [`SWEEP_VERSION`].
    pub version: u32,
    /// The plan.
    pub plan: SweepPlan,
    /// (i, n) if this report holds only shard i of n.
    pub shard: Option<(usize, usize)>,
    /// Results in cell order.
    pub runs: Vec<RunResult>,
    /// What the runs trained on: see [`data_digest`] (None in reports from before it existed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub data: Option<String>,
    /// The command that ran this report (None in a merged report), for rerunning missing shards.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub invocation: Option<Invocation>,
    /// How `cpu_seconds_per_epoch` was measured ([`COST_CLOCK`]; None in reports from before
    /// it existed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cost_clock: Option<String>,
}

/// How a cell's training cost is measured, as reports and tables say it.
pub const COST_CLOCK: &str = "CPU time of the thread that trained the cell \
     (clock_gettime CLOCK_THREAD_CPUTIME_ID) from the start of Model::fit to its end, per \
     epoch; a cell trains one network on one thread, so cells running at the same time do not \
     add their time to it (they can still slow it through shared caches and memory); kernel \
     helper threads (RELUME_THREADS > 1) are not counted";

impl SweepReport {
    /// Pretty JSON.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a sweep report serializes")
    }

    /// Parses a sweep report, checking format and version.
    pub fn from_json(text: &str) -> Result<SweepReport, String> {
        let r: SweepReport =
            serde_json::from_str(text).map_err(|e| format!("not a sweep report: {e}"))?;
        if r.format != SWEEP_FORMAT || r.version != SWEEP_VERSION {
            return Err(format!(
                "format '{}' version {} is not {SWEEP_FORMAT} version {SWEEP_VERSION}",
                r.format, r.version
            ));
        }
        Ok(r)
    }
}

/// Runs the plan on `table` (all cells, or shard i of n: the cells whose index ≡ i mod n).
pub fn run(
    table: &Table,
    spec: &EncoderSpec,
    plan: &SweepPlan,
    shard: Option<(usize, usize)>,
) -> Result<SweepReport, FitError> {
    if let Some((i, n)) = shard {
        if n == 0 || i >= n {
            return Err(FitError::Data(DataError::Table {
                source_name: table.source.clone(),
                message: format!("shard {i}/{n}: need 0 <= i < n"),
            }));
        }
    }
    let ColumnData::Number(truth) = &table.column(&spec.target)?.data else {
        return Err(FitError::Data(DataError::Table {
            source_name: table.source.clone(),
            message: format!("the target column '{}' is not numeric", spec.target),
        }));
    };
    let splits = plan.splits(table.rows());
    let cells: Vec<Cell> = plan
        .cells()
        .into_iter()
        .enumerate()
        .filter(|(k, _)| shard.is_none_or(|(i, n)| k % n == i))
        .map(|(_, c)| c)
        .collect();
    let runs = map_in_order(&cells, |cell| {
        run_cell(table, spec, plan, &splits, truth, *cell)
    })
    .into_iter()
    .collect::<Result<Vec<_>, _>>()?;
    Ok(SweepReport {
        format: SWEEP_FORMAT.to_string(),
        version: SWEEP_VERSION,
        plan: plan.clone(),
        shard,
        runs,
        data: Some(data_digest(table, spec)),
        invocation: None,
        cost_clock: crate::sweep::cost::thread_cpu_seconds().map(|_| COST_CLOCK.to_string()),
    })
}

/// The table's size and a 64-bit FNV-1a digest of its column names and cells, with the
/// columns modelled, so that `merge` can refuse shards that ran on other data.
pub fn data_digest(table: &Table, spec: &EncoderSpec) -> String {
    let mut h = Fnv1a::default();
    for c in &table.columns {
        h.eat(c.name.as_bytes());
        match &c.data {
            ColumnData::Number(v) => v.iter().for_each(|x| h.eat(&x.to_bits().to_le_bytes())),
            ColumnData::Text(v) => v.iter().for_each(|x| match x {
                Some(t) => h.eat(t.as_bytes()),
                None => h.eat(&[0xff]),
            }),
        }
    }
    let features = spec
        .features
        .as_ref()
        .map_or("all but the target".to_string(), |f| f.join(","));
    format!(
        "{} rows × {} columns, FNV-1a {:016x}; target {}, features {features}, impute {:?}, \
         log target {}",
        table.rows(),
        table.columns.len(),
        h.0,
        spec.target,
        spec.impute,
        spec.log_target
    )
}

/// 64-bit FNV-1a, each piece followed by its length so that pieces cannot run together.
/// Offset basis and prime from the FNV reference (Fowler, Noll, Vo; IETF draft
/// draft-eastlake-fnv), from memory; checked on its test vectors in the unit test below.
struct Fnv1a(u64);

impl Default for Fnv1a {
    fn default() -> Self {
        Fnv1a(0xcbf2_9ce4_8422_2325)
    }
}

impl Fnv1a {
    fn bytes(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0 ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3);
        }
    }

    fn eat(&mut self, piece: &[u8]) {
        self.bytes(piece);
        self.bytes(&(piece.len() as u64).to_le_bytes());
    }
}

fn run_cell(
    table: &Table,
    spec: &EncoderSpec,
    plan: &SweepPlan,
    splits: &[(Vec<usize>, Vec<usize>)],
    truth: &[f64],
    cell: Cell,
) -> Result<RunResult, FitError> {
    let candidate = &plan.candidates[cell.candidate];
    let (train_rows, test_rows) = &splits[cell.fold];
    let overrides = Overrides {
        activation: Some(candidate.activation),
        init: candidate.init.or(plan.base.init),
        lr: candidate.lr.or(plan.base.lr),
        seed: Some(cell.seed),
        ..plan.base.clone()
    };
    let recipe = cell_recipe(&overrides, truth.len());
    let started = Instant::now();
    let cpu_start = thread_cpu_seconds();
    let fitted = Model::fit(
        &table.select(train_rows),
        spec,
        &recipe,
        MonitorConfig::default(),
    );
    let seconds = started.elapsed().as_secs_f64();
    let cpu_seconds = cpu_start
        .zip(thread_cpu_seconds())
        .map(|(a, b)| (b - a).max(0.0));
    let (model, report) = match fitted {
        Ok(m) => m,
        Err(FitError::Train(e @ TrainError::Diverged { .. })) => {
            return Ok(RunResult {
                candidate: cell.candidate,
                seed: cell.seed,
                fold: cell.fold,
                val_rmse: None,
                best_epoch: 0,
                epochs: 0,
                seconds_per_epoch: 0.0,
                cpu_seconds_per_epoch: None,
                dead_fraction: 0.0,
                zero_fraction: 0.0,
                diverged: Some(e.to_string()),
            })
        }
        Err(e) => return Err(e),
    };
    let predictions = Predictor::new(&model).predict_table(&table.select(test_rows))?;
    let (mut sse, mut n) = (0.0, 0usize);
    for (row, &r) in predictions.iter().zip(test_rows) {
        if let (Some(p), t) = (row.value, truth[r]) {
            if !t.is_nan() {
                sse += (p - t).powi(2);
                n += 1;
            }
        }
    }
    let last = report.epochs.last();
    let mean_of = |f: fn(&crate::fit::monitor::LayerStats) -> f64| {
        last.map_or(0.0, |e| {
            e.layers.iter().map(f).sum::<f64>() / e.layers.len().max(1) as f64
        })
    };
    let epochs = model.summary.epochs_run.max(1);
    Ok(RunResult {
        candidate: cell.candidate,
        seed: cell.seed,
        fold: cell.fold,
        val_rmse: (n > 0).then(|| (sse / n as f64).sqrt()),
        best_epoch: model.summary.best_epoch,
        epochs: model.summary.epochs_run,
        seconds_per_epoch: seconds / epochs as f64,
        cpu_seconds_per_epoch: cpu_seconds.map(|c| c / epochs as f64),
        dead_fraction: mean_of(|l| l.dead_fraction),
        zero_fraction: mean_of(|l| l.zero_fraction),
        diverged: None,
    })
}

impl SweepPlan {
    /// Position of a cell in [`SweepPlan::cells`], or None if the plan has no such cell.
    pub fn cell_index(&self, candidate: usize, seed: u64, fold: usize) -> Option<usize> {
        let seed = usize::try_from(seed).ok()?;
        (candidate < self.candidates.len() && seed < self.seeds && fold < self.fold_count())
            .then(|| (candidate * self.seeds + seed) * self.fold_count() + fold)
    }

    /// "relu, seed 2, fold 1".
    pub fn cell_label(&self, cell: Cell) -> String {
        let name = self.candidates.get(cell.candidate).map_or_else(
            || format!("candidate {}", cell.candidate),
            |c| c.label.clone(),
        );
        format!("{name}, seed {}, fold {}", cell.seed, cell.fold)
    }
}

/// Whether two runs of one cell agree exactly in everything but the wall time.
fn same_outcome(a: &RunResult, b: &RunResult) -> bool {
    let bits = |v: Option<f64>| v.map(f64::to_bits);
    (a.candidate, a.seed, a.fold, a.best_epoch, a.epochs)
        == (b.candidate, b.seed, b.fold, b.best_epoch, b.epochs)
        && bits(a.val_rmse) == bits(b.val_rmse)
        && a.dead_fraction.to_bits() == b.dead_fraction.to_bits()
        && a.zero_fraction.to_bits() == b.zero_fraction.to_bits()
        && a.diverged == b.diverged
}

/// Why reports could not be merged.
#[derive(Clone, Debug, PartialEq)]
pub enum MergeError {
    /// The reports do not fit together; the reason.
    Refused(String),
    /// Some cells have no result.
    Incomplete(Gap),
}

/// The cells a set of reports lacks, and the commands that run only those.
#[derive(Clone, Debug, PartialEq)]
pub struct Gap {
    /// Labels of the missing cells, in cell order.
    pub missing: Vec<String>,
    /// Cells in the plan.
    pub cells: usize,
    /// The shard count the commands use.
    pub count: usize,
    /// The shards (of `count`) that hold the missing cells.
    pub shards: Vec<usize>,
    /// One shell command per shard in `shards` (empty if no report recorded its command).
    pub commands: Vec<String>,
    /// The reports those commands write, relative to their working directory.
    pub reports: Vec<String>,
    /// Cells those shards hold that are already done (nonzero only when the reports use
    /// different shard counts); rerunning them gives the same results, so the merge accepts them.
    pub extra: usize,
}

impl std::fmt::Display for MergeError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let g = match self {
            MergeError::Refused(reason) => return f.write_str(reason),
            MergeError::Incomplete(g) => g,
        };
        let list: Vec<String> = g
            .shards
            .iter()
            .map(|i| format!("{i}/{}", g.count))
            .collect();
        writeln!(
            f,
            "{} of {} cells are missing (the cells of shard {}):",
            g.missing.len(),
            g.cells,
            list.join(", ")
        )?;
        for m in &g.missing {
            writeln!(f, "  {m}")?;
        }
        if g.extra > 0 {
            writeln!(
                f,
                "(the reports use different shard counts: these shards also rerun {} cells \
                 already done, with the same results)",
                g.extra
            )?;
        }
        if g.commands.is_empty() {
            return write!(
                f,
                "no report recorded its command: run the sweep's compare command again with \
                 --shard {} (one run each), then merge again with the new reports added",
                list.join(", --shard ")
            );
        }
        writeln!(f, "run only those with:")?;
        for c in &g.commands {
            writeln!(f, "  {c}")?;
        }
        write!(
            f,
            "then merge again with {} added to --reports",
            g.reports.join(",")
        )
    }
}

/// The recipe of a cell: the size-dependent settings (optimizer, epochs, patience, penalty)
/// are those of the whole table of `rows` rows, held fixed across folds and candidates so the
/// comparison trains what would ship; each cell trains one network with the recipe's own
/// penalty (the seeds already average over initializations).
pub fn cell_recipe(overrides: &Overrides, rows: usize) -> crate::Recipe {
    let recipe = overrides.recipe();
    let regime = recipe.config_for(rows);
    let mut fixed = recipe.with_config(regime);
    fixed.members = 1;
    fixed.choose_penalty = false;
    fixed
}

/// Combines reports of one plan — shards, reruns of shards, even shards of different counts —
/// into the full report. A cell reported twice must have the same result both times (wall time
/// aside), else the merge is refused; missing cells make [`MergeError::Incomplete`], which says
/// how to run just those.
pub fn merge(reports: &[SweepReport]) -> Result<SweepReport, MergeError> {
    let refuse = |m: String| Err(MergeError::Refused(m));
    let Some(first) = reports.first() else {
        return refuse("no reports to merge".to_string());
    };
    let plan = &first.plan;
    let cells = plan.cells();
    let mut slots: Vec<Option<(usize, &RunResult)>> = vec![None; cells.len()];
    for (k, r) in reports.iter().enumerate() {
        if r.plan != *plan {
            return refuse(format!(
                "report {} (in the order given) comes from a different sweep than report 1: \
                 the candidates, seeds, folds or settings differ",
                k + 1
            ));
        }
        if let (Some(a), Some(b)) = (&first.data, &r.data) {
            if a != b {
                return refuse(format!(
                    "report {} ran on other data than report 1 ({b}, not {a})",
                    k + 1
                ));
            }
        }
        if let Some((i, n)) = r.shard {
            if n == 0 || i >= n {
                return refuse(format!("report {} claims shard {i}/{n}", k + 1));
            }
        }
        for run in &r.runs {
            let Some(at) = plan.cell_index(run.candidate, run.seed, run.fold) else {
                return refuse(format!(
                    "report {} has a run (candidate {}, seed {}, fold {}) outside its plan",
                    k + 1,
                    run.candidate,
                    run.seed,
                    run.fold
                ));
            };
            match slots[at] {
                None => slots[at] = Some((k, run)),
                Some((j, earlier)) if !same_outcome(earlier, run) => {
                    return refuse(format!(
                        "{} has two different results: validation RMSE {:?}, best epoch {} in \
                         report {} but {:?}, {} in report {} (in the order given); the runs did \
                         not compute the same way (another build or machine?): keep one of \
                         the two reports",
                        plan.cell_label(cells[at]),
                        earlier.val_rmse,
                        earlier.best_epoch,
                        j + 1,
                        run.val_rmse,
                        run.best_epoch,
                        k + 1
                    ))
                }
                Some(_) => {}
            }
        }
    }
    let missing: Vec<usize> = (0..cells.len()).filter(|&c| slots[c].is_none()).collect();
    if !missing.is_empty() {
        return Err(MergeError::Incomplete(gap(reports, &missing)));
    }
    Ok(SweepReport {
        shard: None,
        runs: slots
            .into_iter()
            .flatten()
            .map(|(_, run)| run.clone())
            .collect(),
        invocation: None,
        ..first.clone()
    })
}

/// The shards holding the `missing` cells (by the shard count most reports use) and the
/// commands that run them, built from a recorded invocation.
fn gap(reports: &[SweepReport], missing: &[usize]) -> Gap {
    let plan = &reports[0].plan;
    let counts: Vec<usize> = reports
        .iter()
        .filter_map(|r| r.shard.map(|s| s.1))
        .collect();
    let count = counts
        .iter()
        .copied()
        .max_by_key(|&n| (counts.iter().filter(|&&m| m == n).count(), usize::MAX - n))
        .unwrap_or(1);
    let mut shards: Vec<usize> = missing.iter().map(|c| c % count).collect();
    shards.sort_unstable();
    shards.dedup();
    let recorded = reports
        .iter()
        .filter(|r| r.shard.is_some_and(|s| s.1 == count))
        .chain(reports)
        .find_map(|r| r.invocation.as_ref());
    let (mut commands, mut paths) = (Vec::new(), Vec::new());
    if let Some(inv) = recorded {
        let dir = inv
            .report()
            .and_then(|p| std::path::Path::new(p).parent())
            .map(|d| d.to_string_lossy().into_owned())
            .unwrap_or_default();
        for &i in &shards {
            let name = format!("shard-{i}-of-{count}.json");
            let path = if dir.is_empty() {
                name
            } else {
                format!("{dir}/{name}")
            };
            commands.push(inv.for_shard(i, count, &path).shell());
            paths.push(path);
        }
    }
    let cells = plan.cells();
    let in_shards = (0..cells.len())
        .filter(|c| shards.binary_search(&(c % count)).is_ok())
        .count();
    Gap {
        extra: in_shards - missing.len(),
        missing: missing.iter().map(|&c| plan.cell_label(cells[c])).collect(),
        cells: cells.len(),
        count,
        shards,
        commands,
        reports: paths,
    }
}

/// Paired comparison of a candidate with the best one.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Paired {
    /// Pairs (same seed and fold) where both runs finished.
    pub n: usize,
    /// Mean of candidate − best validation RMSE.
    pub mean_difference: f64,
    /// 95% Student-t interval of the mean difference.
    pub ci95: (f64, f64),
    /// Two-sided Wilcoxon signed-rank p-value.
    pub p_value: f64,
    /// Whether the p-value is exact.
    pub exact: bool,
}

/// Everything reported about one candidate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CandidateSummary {
    /// The candidate's label.
    pub label: String,
    /// Runs that finished.
    pub runs: usize,
    /// Runs that diverged.
    pub diverged: usize,
    /// Mean validation RMSE.
    pub mean_rmse: f64,
    /// Sample standard deviation of the validation RMSE.
    pub sd_rmse: f64,
    /// 95% Student-t interval of the mean validation RMSE.
    pub ci95: (f64, f64),
    /// Median epoch of the best validation loss.
    pub median_best_epoch: f64,
    /// Mean wall time per epoch, seconds.
    pub seconds_per_epoch: f64,
    /// Mean CPU time of the cell's thread per epoch, seconds (None when no run has one).
    #[serde(default)]
    pub cpu_seconds_per_epoch: Option<f64>,
    /// 95% Student-t interval of that mean over the runs (None with fewer than 2).
    #[serde(default)]
    pub cpu_ci95: Option<(f64, f64)>,
    /// Mean final dead fraction.
    pub dead_fraction: f64,
    /// Mean final zero fraction.
    pub zero_fraction: f64,
    /// Against the best candidate (None for the best itself).
    pub versus_best: Option<Paired>,
    /// In plain words.
    pub verdict: String,
}

/// The comparison of a full sweep.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Comparison {
    /// One summary per candidate, in plan order.
    pub candidates: Vec<CandidateSummary>,
    /// Index of the best candidate (lowest mean validation RMSE).
    pub best: usize,
    /// Seeds × folds per candidate.
    pub runs_per_candidate: usize,
    /// How the CPU time per epoch was measured (the report's `cost_clock`).
    #[serde(default)]
    pub cost_clock: Option<String>,
}

/// Summarizes a full (merged or unsharded) sweep report.
pub fn summarize(report: &SweepReport) -> Result<Comparison, String> {
    if report.shard.is_some() {
        return Err("this is one shard of a sweep: merge the shards first".to_string());
    }
    let k = report.plan.candidates.len();
    let rmse_of = |c: usize| -> Vec<(u64, usize, f64)> {
        report
            .runs
            .iter()
            .filter(|r| r.candidate == c)
            .filter_map(|r| r.val_rmse.map(|v| (r.seed, r.fold, v)))
            .collect()
    };
    let means: Vec<f64> = (0..k)
        .map(|c| {
            let v: Vec<f64> = rmse_of(c).iter().map(|x| x.2).collect();
            mean_sd_ci95(&v).0
        })
        .collect();
    let best = (0..k)
        .filter(|&c| means[c].is_finite())
        .min_by(|&a, &b| means[a].total_cmp(&means[b]))
        .ok_or("every run diverged")?;
    let best_runs = rmse_of(best);
    let mut summaries = Vec::with_capacity(k);
    for c in 0..k {
        let runs: Vec<&RunResult> = report.runs.iter().filter(|r| r.candidate == c).collect();
        let ok: Vec<&&RunResult> = runs.iter().filter(|r| r.val_rmse.is_some()).collect();
        let values: Vec<f64> = ok.iter().filter_map(|r| r.val_rmse).collect();
        let (mean, sd, half) = mean_sd_ci95(&values);
        let mut epochs: Vec<f64> = ok.iter().map(|r| r.best_epoch as f64).collect();
        epochs.sort_by(f64::total_cmp);
        let avg = |f: fn(&RunResult) -> f64| {
            ok.iter().map(|r| f(r)).sum::<f64>() / ok.len().max(1) as f64
        };
        let versus_best = (c != best).then(|| {
            let diffs: Vec<f64> = rmse_of(c)
                .iter()
                .filter_map(|&(s, f, v)| {
                    best_runs
                        .iter()
                        .find(|b| b.0 == s && b.1 == f)
                        .map(|b| v - b.2)
                })
                .collect();
            let (m, _, h) = mean_sd_ci95(&diffs);
            let w = wilcoxon(&diffs);
            Paired {
                n: diffs.len(),
                mean_difference: m,
                ci95: (m - h, m + h),
                p_value: w.p_value,
                exact: w.exact,
            }
        });
        let verdict = verdict(c == best, versus_best.as_ref(), runs.len() - ok.len());
        let cpu: Vec<f64> = ok.iter().filter_map(|r| r.cpu_seconds_per_epoch).collect();
        let (cpu_mean, _, cpu_half) = mean_sd_ci95(&cpu);
        summaries.push(CandidateSummary {
            label: report.plan.candidates[c].label.clone(),
            runs: ok.len(),
            diverged: runs.len() - ok.len(),
            mean_rmse: mean,
            sd_rmse: sd,
            ci95: (mean - half, mean + half),
            median_best_epoch: crate::serve::metrics::quantile(&epochs, 0.5),
            seconds_per_epoch: avg(|r| r.seconds_per_epoch),
            cpu_seconds_per_epoch: (!cpu.is_empty()).then_some(cpu_mean),
            cpu_ci95: (cpu.len() >= 2).then_some((cpu_mean - cpu_half, cpu_mean + cpu_half)),
            dead_fraction: avg(|r| r.dead_fraction),
            zero_fraction: avg(|r| r.zero_fraction),
            versus_best,
            verdict,
        });
    }
    Ok(Comparison {
        candidates: summaries,
        best,
        runs_per_candidate: report.plan.seeds * report.plan.fold_count(),
        cost_clock: report.cost_clock.clone(),
    })
}

fn verdict(is_best: bool, paired: Option<&Paired>, diverged: usize) -> String {
    let note = if diverged > 0 {
        format!("; {diverged} run(s) diverged")
    } else {
        String::new()
    };
    if is_best {
        return format!("best mean validation RMSE{note}");
    }
    let Some(p) = paired else {
        return format!("no paired runs{note}");
    };
    if p.n < 2 {
        return format!("too few paired runs to compare ({}){note}", p.n);
    }
    let significant = p.p_value < 0.05;
    let interval_clear = p.ci95.0 > 0.0;
    if significant && interval_clear {
        format!(
            "worse than the best by {:.4} (95% CI {:.4} to {:.4}, signed-rank p = {:.3}){note}",
            p.mean_difference, p.ci95.0, p.ci95.1, p.p_value
        )
    } else if significant || interval_clear {
        format!(
            "borderline: signed-rank p = {:.3}, 95% CI of the difference {:.4} to {:.4}; add seeds \
             or folds to decide{note}",
            p.p_value, p.ci95.0, p.ci95.1
        )
    } else {
        let small = if p.n <= 5 {
            " (with 5 or fewer pairs the signed-rank test cannot reach p < 0.05: add seeds or folds)"
        } else {
            ""
        };
        format!(
            "cannot be told apart from the best at {} paired runs (p = {:.3}){small}{note}",
            p.n, p.p_value
        )
    }
}

/// The comparison as a Markdown table.
pub fn markdown(c: &Comparison) -> String {
    let mut s = String::from(
        "| candidate | runs | diverged | validation RMSE (mean ± sd) | 95% CI | Δ vs best (95% CI) | p | median best epoch | ms / epoch | thread CPU ms / epoch (95% CI) | dead | zero | verdict |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|\n",
    );
    for (i, x) in c.candidates.iter().enumerate() {
        let (delta, p) = match &x.versus_best {
            Some(v) => (
                format!(
                    "{:+.4} ({:+.4} to {:+.4})",
                    v.mean_difference, v.ci95.0, v.ci95.1
                ),
                format!("{:.3}", v.p_value),
            ),
            None => ("—".to_string(), "—".to_string()),
        };
        let name = if i == c.best {
            format!("**{}**", x.label)
        } else {
            x.label.clone()
        };
        let cpu = match (x.cpu_seconds_per_epoch, x.cpu_ci95) {
            (Some(m), Some((lo, hi))) => {
                format!("{:.2} ({:.2} to {:.2})", 1e3 * m, 1e3 * lo, 1e3 * hi)
            }
            (Some(m), None) => format!("{:.2}", 1e3 * m),
            _ => "—".to_string(),
        };
        s += &format!(
            "| {name} | {} | {} | {:.4} ± {:.4} | {:.4} to {:.4} | {delta} | {p} | {:.0} | {:.2} | {cpu} | {:.1}% | {:.1}% | {} |\n",
            x.runs,
            x.diverged,
            x.mean_rmse,
            x.sd_rmse,
            x.ci95.0,
            x.ci95.1,
            x.median_best_epoch,
            1000.0 * x.seconds_per_epoch,
            100.0 * x.dead_fraction,
            100.0 * x.zero_fraction,
            x.verdict
        );
    }
    s
}

/// The note under the table saying how its two cost columns were measured.
pub fn cost_footnote(c: &Comparison) -> String {
    format!(
        "ms / epoch: wall time, measured while other cells ran. Thread CPU ms / epoch: {}.\n",
        c.cost_clock
            .as_deref()
            .unwrap_or("not measured (no per-thread clock, or an older report)")
    )
}

#[cfg(test)]
mod tests {
    use super::Fnv1a;

    /// Test vectors of 64-bit FNV-1a from the FNV reference's test suite (from memory):
    /// "" → cbf29ce484222325, "a" → af63dc4c8601ec8c, "foobar" → 85944171f73967e8.
    #[test]
    fn fnv1a_matches_the_reference_vectors() {
        for (text, digest) in [
            ("", 0xcbf2_9ce4_8422_2325_u64),
            ("a", 0xaf63_dc4c_8601_ec8c),
            ("foobar", 0x8594_4171_f739_67e8),
        ] {
            let mut h = Fnv1a::default();
            h.bytes(text.as_bytes());
            assert_eq!(h.0, digest, "{text:?}");
        }
    }
}
