//! What an activation costs on this CPU: for one architecture and each candidate activation,
//! a training step (forward, backward, Adam) at the training batch size, a batch prediction
//! and a single-row prediction through [`Predictor::predict_row`], timed in interleaved rounds
//! on the calling thread with the kernels' helper threads off.
//!
//! Each round times every candidate once per measure (a block of calls long enough to dwarf
//! the clock, [`CostOptions::block_seconds`]); the candidates' order rotates from round to
//! round. A measure's figure is the median per-call time over the rounds, with the
//! distribution-free 95% interval for the median from two order statistics
//! ([`median_interval_ranks`]); the ratio to ReLU is taken per round (both times come from
//! the same round, so slow phases of a shared machine hit both) and summarized the same way.
//!
//! Time is the CPU time of the measuring thread ([`thread_cpu_seconds`]) where the system has
//! a per-thread clock, so time the thread spends descheduled does not count; elsewhere wall
//! time. The same clock measures `compare`'s per-cell training cost.

use crate::data::{Cell, Column, ColumnData, EncoderSpec, FeatureEncoding, Table};
use crate::fit::monitor::MonitorConfig;
use crate::fit::optim::{Adam, Optimizer};
use crate::fit::recipe::Recipe;
use crate::fit::train::TrainConfig;
use crate::nn::activation::Activation;
use crate::nn::layer::{LayerSpec, Pass};
use crate::nn::loss::Loss;
use crate::nn::network::Network;
use crate::serve::model::{FitError, Model};
use crate::serve::predict::Predictor;
use crate::sweep::stats::ln_gamma;
use ndarray::Array2;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use serde::{Deserialize, Serialize};
use std::hint::black_box;

/// Name in the `format` field of cost reports.
pub const COST_FORMAT: &str = "relume-cost";
/// Version of the cost report layout.
pub const COST_VERSION: u32 = 1;
/// Fewest rounds: with 5 or fewer, no pair of order statistics covers the median with 95%.
pub const MIN_ROUNDS: usize = 6;
/// Most rounds (keeps the binomial sums well inside f64).
pub const MAX_ROUNDS: usize = 1000;
/// Widest input or layer accepted (the model file's bound).
pub const MAX_WIDTH: usize = 65536;

/// How the timing runs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CostOptions {
    /// Rows per training step (the training batch size).
    pub batch: usize,
    /// Rows per batch prediction.
    pub predict_rows: usize,
    /// Interleaved rounds (each gives one time per candidate and measure).
    pub rounds: usize,
    /// Least duration of one timed block of calls, in seconds.
    pub block_seconds: f64,
    /// Seed of the weights and the inputs.
    pub seed: u64,
}

impl Default for CostOptions {
    fn default() -> Self {
        CostOptions {
            batch: 32,
            predict_rows: 1024,
            rounds: 31,
            block_seconds: 0.002,
            seed: 0,
        }
    }
}

/// Why a cost measurement could not run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CostError {
    /// A setting is out of range; the message says which.
    #[error("{0}")]
    Setting(String),
    /// The architecture could not be built.
    #[error(transparent)]
    Fit(#[from] FitError),
}

/// A median and its 95% interval.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    /// The sample median.
    pub median: f64,
    /// Lower end.
    pub lo: f64,
    /// Upper end.
    pub hi: f64,
}

/// The three things timed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Measure {
    /// Forward, backward and Adam on one training batch.
    TrainStep,
    /// Inference on [`CostOptions::predict_rows`] rows through the network.
    BatchPredict,
    /// One row through [`Predictor::predict_row`] (encoding, scaling, every member).
    RowPredict,
}

impl Measure {
    /// All three, in report order.
    pub const ALL: [Measure; 3] = [
        Measure::TrainStep,
        Measure::BatchPredict,
        Measure::RowPredict,
    ];

    /// The prefix of its JSON fields.
    pub fn name(self) -> &'static str {
        match self {
            Measure::TrainStep => "train_step",
            Measure::BatchPredict => "batch_predict",
            Measure::RowPredict => "row_predict",
        }
    }
}

/// The figures of one candidate; `<measure>_us`, `_lo`, `_hi` are the median time per call
/// and its 95% interval in microseconds, `<measure>_vs_relu` (with `_lo`, `_hi`) the median
/// per-round ratio to ReLU and its 95% interval.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CandidateCost {
    /// The activation, as `compare` labels it.
    pub activation: String,
    /// Median time of a training step, µs.
    pub train_step_us: f64,
    /// Lower end of its 95% interval, µs.
    pub train_step_lo: f64,
    /// Upper end, µs.
    pub train_step_hi: f64,
    /// Median per-round ratio to ReLU.
    pub train_step_vs_relu: f64,
    /// Lower end of the ratio's 95% interval.
    pub train_step_vs_relu_lo: f64,
    /// Upper end of the ratio's interval.
    pub train_step_vs_relu_hi: f64,
    /// Median time of a batch prediction, µs.
    pub batch_predict_us: f64,
    /// Lower end of its 95% interval, µs.
    pub batch_predict_lo: f64,
    /// Upper end, µs.
    pub batch_predict_hi: f64,
    /// Median per-round ratio to ReLU.
    pub batch_predict_vs_relu: f64,
    /// Lower end of the ratio's 95% interval.
    pub batch_predict_vs_relu_lo: f64,
    /// Upper end of the ratio's interval.
    pub batch_predict_vs_relu_hi: f64,
    /// Median time of a single-row prediction, µs.
    pub row_predict_us: f64,
    /// Lower end of its 95% interval, µs.
    pub row_predict_lo: f64,
    /// Upper end, µs.
    pub row_predict_hi: f64,
    /// Median per-round ratio to ReLU.
    pub row_predict_vs_relu: f64,
    /// Lower end of the ratio's 95% interval.
    pub row_predict_vs_relu_lo: f64,
    /// Upper end of the ratio's interval.
    pub row_predict_vs_relu_hi: f64,
}

impl CandidateCost {
    fn new(activation: String, time: [Interval; 3], ratio: [Interval; 3]) -> Self {
        let [t, b, r] = time;
        let [tq, bq, rq] = ratio;
        CandidateCost {
            activation,
            train_step_us: t.median,
            train_step_lo: t.lo,
            train_step_hi: t.hi,
            train_step_vs_relu: tq.median,
            train_step_vs_relu_lo: tq.lo,
            train_step_vs_relu_hi: tq.hi,
            batch_predict_us: b.median,
            batch_predict_lo: b.lo,
            batch_predict_hi: b.hi,
            batch_predict_vs_relu: bq.median,
            batch_predict_vs_relu_lo: bq.lo,
            batch_predict_vs_relu_hi: bq.hi,
            row_predict_us: r.median,
            row_predict_lo: r.lo,
            row_predict_hi: r.hi,
            row_predict_vs_relu: rq.median,
            row_predict_vs_relu_lo: rq.lo,
            row_predict_vs_relu_hi: rq.hi,
        }
    }

    /// Median time per call and its interval, in microseconds.
    pub fn time(&self, m: Measure) -> Interval {
        let (median, lo, hi) = match m {
            Measure::TrainStep => (self.train_step_us, self.train_step_lo, self.train_step_hi),
            Measure::BatchPredict => (
                self.batch_predict_us,
                self.batch_predict_lo,
                self.batch_predict_hi,
            ),
            Measure::RowPredict => (
                self.row_predict_us,
                self.row_predict_lo,
                self.row_predict_hi,
            ),
        };
        Interval { median, lo, hi }
    }

    /// Median per-round ratio to ReLU and its interval.
    pub fn vs_relu(&self, m: Measure) -> Interval {
        let (median, lo, hi) = match m {
            Measure::TrainStep => (
                self.train_step_vs_relu,
                self.train_step_vs_relu_lo,
                self.train_step_vs_relu_hi,
            ),
            Measure::BatchPredict => (
                self.batch_predict_vs_relu,
                self.batch_predict_vs_relu_lo,
                self.batch_predict_vs_relu_hi,
            ),
            Measure::RowPredict => (
                self.row_predict_vs_relu,
                self.row_predict_vs_relu_lo,
                self.row_predict_vs_relu_hi,
            ),
        };
        Interval { median, lo, hi }
    }
}

/// A cost measurement: where and how it ran, and one entry per candidate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CostReport {
    /// Always [`COST_FORMAT`].
    pub format: String,
    /// [`COST_VERSION`].
    pub version: u32,
    /// The CPU model (from /proc/cpuinfo where there is one).
    pub cpu: String,
    /// The instruction set the kernels ran with ([`crate::kernels::simd_level`]).
    pub instruction_set: String,
    /// The clock the times come from.
    pub clock: String,
    /// The architecture timed, e.g. "10 inputs → 64 → 64 → 1, 1 network".
    pub architecture: String,
    /// Rows per training step.
    pub batch: usize,
    /// Rows per batch prediction.
    pub predict_rows: usize,
    /// Activation values one batch prediction computes (rows × hidden units): the extra
    /// time of a candidate over ReLU divided by this is its extra cost per element, the unit
    /// of `perf_report`'s activation lines.
    pub batch_predict_activations: usize,
    /// Rounds.
    pub rounds: usize,
    /// How the intervals are made.
    pub interval_method: String,
    /// One entry per candidate, ReLU first.
    pub candidates: Vec<CandidateCost>,
}

impl CostReport {
    /// Pretty JSON.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a cost report serializes")
    }

    /// Parses a cost report, checking format and version.
    pub fn from_json(text: &str) -> Result<CostReport, String> {
        let r: CostReport = serde_json::from_str(text).map_err(|e| {
            format!(
                "not a cost report: {e} (line {}, column {})",
                e.line(),
                e.column()
            )
        })?;
        if r.format != COST_FORMAT || r.version != COST_VERSION {
            return Err(format!(
                "format '{}' version {} is not {COST_FORMAT} version {COST_VERSION}",
                r.format, r.version
            ));
        }
        Ok(r)
    }
}

/// Seconds of CPU time the calling thread has used (CLOCK_THREAD_CPUTIME_ID), or None where
/// the system has no such clock.
pub fn thread_cpu_seconds() -> Option<f64> {
    #[cfg(unix)]
    {
        let mut t = libc::timespec {
            tv_sec: 0,
            tv_nsec: 0,
        };
        // SAFETY: `t` is a valid, writable timespec; the call only writes into it.
        let ok = unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut t) } == 0;
        if ok {
            return Some(t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9);
        }
    }
    None
}

/// A stopwatch on the thread's CPU time where there is one, else on wall time.
#[derive(Clone, Copy, Debug)]
pub struct ThreadClock {
    cpu: Option<f64>,
    wall: std::time::Instant,
}

impl ThreadClock {
    /// Starts the stopwatch.
    pub fn start() -> Self {
        ThreadClock {
            cpu: thread_cpu_seconds(),
            wall: std::time::Instant::now(),
        }
    }

    /// Seconds since [`ThreadClock::start`], on the clock [`ThreadClock::describe`] names.
    pub fn seconds(&self) -> f64 {
        match (self.cpu, thread_cpu_seconds()) {
            (Some(a), Some(b)) => b - a,
            _ => self.wall.elapsed().as_secs_f64(),
        }
    }

    /// What the clock measures.
    pub fn describe() -> &'static str {
        if thread_cpu_seconds().is_some() {
            "CPU time of the measuring thread (clock_gettime CLOCK_THREAD_CPUTIME_ID): time \
             the thread waits descheduled is not counted"
        } else {
            "wall time (this system has no per-thread CPU clock)"
        }
    }
}

/// The ranks (1-based, `lo` ≤ `hi`) of the two order statistics that make the shortest
/// symmetric distribution-free interval for the median of `n` samples with coverage at least
/// `level`, and its exact coverage 1 − 2·P(B ≤ lo − 1), B ~ Binomial(n, ½) (the classical
/// interval for a quantile from order statistics: Conover, Practical Nonparametric Statistics,
/// 3rd ed. 1999, §3.2, from memory). None when even (1, n) falls short of `level`.
pub fn median_interval_ranks(n: usize, level: f64) -> Option<(usize, usize, f64)> {
    if n == 0 {
        return None;
    }
    let coverage = |k: usize| 1.0 - 2.0 * binomial_half_cdf(n, k - 1);
    if coverage(1) < level {
        return None;
    }
    let mut k = 1;
    while k < n.div_ceil(2) && coverage(k + 1) >= level {
        k += 1;
    }
    Some((k, n + 1 - k, coverage(k)))
}

/// P(B ≤ k) for B ~ Binomial(n, ½), summed exactly term by term in log space.
pub fn binomial_half_cdf(n: usize, k: usize) -> f64 {
    let nf = n as f64;
    let ln_norm = ln_gamma(nf + 1.0) - nf * std::f64::consts::LN_2;
    (0..=k.min(n))
        .map(|i| {
            let i = i as f64;
            (ln_norm - ln_gamma(i + 1.0) - ln_gamma(nf - i + 1.0)).exp()
        })
        .sum::<f64>()
        .min(1.0)
}

/// The median of `samples` with its distribution-free 95% interval, or None with fewer
/// than [`MIN_ROUNDS`] samples or a non-finite one.
pub fn median_with_interval(samples: &[f64]) -> Option<Interval> {
    if samples.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let (lo, hi, _) = median_interval_ranks(samples.len(), 0.95)?;
    let mut s = samples.to_vec();
    s.sort_by(f64::total_cmp);
    let n = s.len();
    let median = if n % 2 == 1 {
        s[n / 2]
    } else {
        0.5 * (s[n / 2 - 1] + s[n / 2])
    };
    Some(Interval {
        median,
        lo: s[lo - 1],
        hi: s[hi - 1],
    })
}

/// The instruction set the kernels run with, in words.
pub fn instruction_set() -> &'static str {
    use crate::kernels::Simd;
    match crate::kernels::simd_level() {
        Simd::Avx512 => "AVX-512F with AVX2 and FMA",
        Simd::Avx2 => "AVX2 with FMA",
        Simd::Baseline => "baseline (SSE2 on x86-64)",
    }
}

/// The CPU model name, from /proc/cpuinfo where there is one, else the architecture.
pub fn cpu_name() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| format!("unknown {} CPU", std::env::consts::ARCH))
}

/// A model with the given architecture and no meaning: `inputs` numeric columns, the hidden
/// widths, one network, fitted for one epoch on 64 rows of a synthetic table (x_j standard
/// normal, y = Σ sin x_j), so that the row path has a real encoder and scaling to go through.
pub fn model_for_inputs(inputs: usize, hidden: &[usize], seed: u64) -> Result<Model, CostError> {
    if inputs == 0 || inputs > MAX_WIDTH {
        return Err(CostError::Setting(format!(
            "--inputs {inputs}: need 1 to {MAX_WIDTH} inputs"
        )));
    }
    if let Some(w) = hidden.iter().find(|&&w| w == 0 || w > MAX_WIDTH) {
        return Err(CostError::Setting(format!(
            "--layers: a hidden width of {w}; need 1 to {MAX_WIDTH}"
        )));
    }
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    const ROWS: usize = 64;
    let mut columns: Vec<Vec<f64>> = vec![Vec::with_capacity(ROWS); inputs + 1];
    for _ in 0..ROWS {
        let mut y = 0.0;
        for column in columns.iter_mut().take(inputs) {
            let v: f64 = StandardNormal.sample(&mut rng);
            y += v.sin();
            column.push(v);
        }
        columns[inputs].push(y);
    }
    let table = Table {
        source: "synthetic".to_string(),
        columns: columns
            .into_iter()
            .enumerate()
            .map(|(j, data)| Column {
                name: if j < inputs {
                    format!("x{}", j + 1)
                } else {
                    "y".to_string()
                },
                data: ColumnData::Number(data),
            })
            .collect(),
        lines: (2..ROWS as u64 + 2).collect(),
    };
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let mut recipe = Recipe {
        hidden: hidden.to_vec(),
        activation: Some(Activation::Relu),
        seed,
        ..Recipe::default()
    }
    .with_config(TrainConfig {
        epochs: 1,
        ..TrainConfig::default()
    });
    recipe.members = 1;
    recipe.choose_penalty = false;
    Ok(Model::fit(&table, &spec, &recipe, MonitorConfig::default())?.0)
}

/// `specs` with every activation layer switched to `activation`.
fn with_activation(specs: &[LayerSpec], activation: Activation) -> Vec<LayerSpec> {
    specs
        .iter()
        .map(|s| match s {
            LayerSpec::Activation { width, .. } => LayerSpec::Activation {
                width: *width,
                activation,
            },
            other => *other,
        })
        .collect()
}

/// Hidden units that go through an activation, summed over the layers.
fn activation_width(specs: &[LayerSpec]) -> usize {
    specs
        .iter()
        .map(|s| match s {
            LayerSpec::Activation { width, .. } => *width,
            _ => 0,
        })
        .sum()
}

/// The architecture in words, e.g. "10 inputs → 64 → 64 → 1, 5 networks".
pub fn describe_architecture(model: &Model) -> String {
    let net = &model.members[0];
    let mut widths = vec![format!("{} inputs", net.input_width())];
    for s in net.specs() {
        if let LayerSpec::Affine { outputs, .. } = s {
            widths.push(outputs.to_string());
        }
    }
    let n = model.members.len();
    format!(
        "{}, {n} network{}",
        widths.join(" → "),
        if n == 1 { "" } else { "s" }
    )
}

/// One candidate's timed pieces.
struct Bench {
    train: Network<f32>,
    start: Vec<f32>,
    adam: Adam<f32>,
    infer: Network<f32>,
    predictor: Predictor,
}

/// Inputs shared by every candidate.
struct Inputs {
    x: Array2<f32>,
    y: Array2<f32>,
    grad: Array2<f32>,
    rows: Array2<f32>,
    texts: Vec<String>,
    numbers: Vec<Option<f64>>,
}

impl Inputs {
    fn row(&self) -> Vec<Cell<'_>> {
        self.numbers
            .iter()
            .zip(&self.texts)
            .map(|(n, t)| match n {
                Some(v) => Cell::Number(*v),
                None if t.is_empty() => Cell::Missing,
                None => Cell::Text(t),
            })
            .collect()
    }
}

fn normal(rows: usize, cols: usize, rng: &mut rand_chacha::ChaCha8Rng) -> Array2<f32> {
    Array2::from_shape_simple_fn((rows, cols), || StandardNormal.sample(&mut *rng))
}

/// A cell every feature accepts: the middle of a numeric or date range, the first level.
fn typical_cells(model: &Model) -> (Vec<Option<f64>>, Vec<String>) {
    model
        .encoder
        .features
        .iter()
        .map(|f| match f {
            FeatureEncoding::Number { min, max, .. } => (Some(0.5 * (min + max)), String::new()),
            FeatureEncoding::Date { min, max, .. } => {
                let (y, m, d) = crate::data::civil_from_days((0.5 * (min + max)).floor() as i64);
                (None, format!("{y:04}-{m:02}-{d:02}"))
            }
            FeatureEncoding::Category { levels, .. } => {
                (None, levels.first().cloned().unwrap_or_default())
            }
        })
        .unzip()
}

/// Runs `f` `calls` times and returns the time per call in seconds.
fn block(calls: usize, f: &mut dyn FnMut()) -> f64 {
    let clock = ThreadClock::start();
    for _ in 0..calls {
        f();
    }
    clock.seconds() / calls as f64
}

impl Bench {
    fn new(model: &Model, activation: Activation, seed: u64) -> Result<Bench, CostError> {
        let build = |specs: &[LayerSpec], width: usize, seed: u64| {
            Network::<f32>::from_specs(width, &with_activation(specs, activation))
                .map(|mut n| {
                    n.initialize(seed);
                    n
                })
                .map_err(|e| CostError::Setting(e.to_string()))
        };
        let members = model
            .members
            .iter()
            .enumerate()
            .map(|(k, m)| build(&m.specs(), m.input_width(), seed.wrapping_add(k as u64)))
            .collect::<Result<Vec<_>, _>>()?;
        let train = members[0].clone();
        let candidate = Model {
            members,
            ..model.clone()
        };
        Ok(Bench {
            start: train.params().to_vec(),
            infer: train.clone(),
            train,
            adam: Adam::new(1e-3),
            predictor: Predictor::new(&candidate),
        })
    }

    /// Times measure `m` over `calls` calls: seconds per call.
    fn run(&mut self, m: Measure, data: &mut Inputs, calls: usize) -> f64 {
        let Bench {
            train,
            start,
            adam,
            infer,
            predictor,
        } = self;
        match m {
            Measure::TrainStep => {
                // Back to the initial weights before each block (untimed), so thousands of
                // steps on one batch do not drift the network away from what training sees.
                train.params_mut().copy_from_slice(start);
                let (x, y, grad) = (&data.x, &data.y, &mut data.grad);
                block(calls, &mut || {
                    train.clear_gradients();
                    let out = train.forward(x.view(), Pass::Train).expect("widths match");
                    Loss::Mse
                        .gradient_into(out, y.view(), grad.view_mut())
                        .expect("widths match");
                    train.backward_params(grad.view()).expect("widths match");
                    let (p, g) = train.params_and_grads();
                    adam.step(p, g);
                })
            }
            Measure::BatchPredict => {
                let rows = &data.rows;
                block(calls, &mut || {
                    let out = infer
                        .forward(rows.view(), Pass::Infer)
                        .expect("widths match");
                    black_box(out[(0, 0)]);
                })
            }
            Measure::RowPredict => {
                let row = data.row();
                let mut scratch = predictor.scratch();
                block(calls, &mut || {
                    let p = predictor
                        .predict_row(black_box(&row), &mut scratch)
                        .expect("typical cells are valid");
                    black_box(p.value);
                })
            }
        }
    }

    /// Calls per block so that a block lasts at least `seconds` (after a warm-up in which
    /// buffers grow to size).
    fn calls(&mut self, m: Measure, data: &mut Inputs, seconds: f64) -> usize {
        self.run(m, data, 3);
        let mut calls = 1usize;
        loop {
            let t = self.run(m, data, calls) * calls as f64;
            if t >= seconds || calls >= 1 << 24 {
                return calls;
            }
            calls *= if t > 0.0 {
                ((seconds / t).ceil() as usize).clamp(2, 64)
            } else {
                2
            };
        }
    }
}

/// Times every activation in `activations` (ReLU is added first when missing) on the
/// architecture of `model` (its encoder, scaling and member count; each member's activation
/// layers switched to the candidate, weights freshly initialized). Runs on the calling
/// thread with the kernels set to one thread for the duration.
pub fn measure(
    model: &Model,
    activations: &[Activation],
    options: &CostOptions,
) -> Result<CostReport, CostError> {
    if activations.is_empty() {
        return Err(CostError::Setting(
            "--activations needs at least one activation".into(),
        ));
    }
    if !(MIN_ROUNDS..=MAX_ROUNDS).contains(&options.rounds) {
        return Err(CostError::Setting(format!(
            "--rounds {}: need {MIN_ROUNDS} to {MAX_ROUNDS} (with fewer than {MIN_ROUNDS} no \
             interval from order statistics reaches 95%)",
            options.rounds
        )));
    }
    for (name, v) in [
        ("--batch", options.batch),
        ("--predict-rows", options.predict_rows),
    ] {
        if v == 0 || v > 1 << 20 {
            return Err(CostError::Setting(format!(
                "{name} {v}: need 1 to {}",
                1 << 20
            )));
        }
    }
    if !(options.block_seconds > 0.0 && options.block_seconds <= 1.0) {
        return Err(CostError::Setting(format!(
            "block of {} s: need more than 0 and at most 1 s",
            options.block_seconds
        )));
    }
    let mut list = vec![Activation::Relu];
    list.extend(activations.iter().filter(|a| **a != Activation::Relu));
    for a in &list {
        a.validate()
            .map_err(|e| CostError::Setting(format!("activation {a}: {e}")))?;
    }
    let net = &model.members[0];
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(options.seed);
    let (numbers, texts) = typical_cells(model);
    let mut data = Inputs {
        x: normal(options.batch, net.input_width(), &mut rng),
        y: normal(options.batch, net.output_width(), &mut rng),
        grad: Array2::zeros((options.batch, net.output_width())),
        rows: normal(options.predict_rows, net.input_width(), &mut rng),
        texts,
        numbers,
    };
    let check = Predictor::new(model);
    if let Err(e) = check.predict_row(&data.row(), &mut check.scratch()) {
        return Err(CostError::Setting(format!(
            "cannot make a valid row for this model: {}",
            check.explain(&e)
        )));
    }
    let threads = crate::kernels::threads();
    crate::kernels::set_threads(1);
    let outcome = timed_rounds(model, &list, options, &mut data);
    crate::kernels::set_threads(threads);
    let candidates = outcome?;
    Ok(CostReport {
        format: COST_FORMAT.into(),
        version: COST_VERSION,
        cpu: cpu_name(),
        instruction_set: instruction_set().into(),
        clock: ThreadClock::describe().into(),
        architecture: describe_architecture(model),
        batch: options.batch,
        predict_rows: options.predict_rows,
        batch_predict_activations: options.predict_rows * activation_width(&net.specs()),
        rounds: options.rounds,
        interval_method: INTERVAL_METHOD.into(),
        candidates,
    })
}

/// How the intervals are made, as the report says it.
pub const INTERVAL_METHOD: &str = "median over rounds with the distribution-free 95% interval \
     from order statistics (ranks k and n+1-k, the largest k with 1 - 2 P(Binomial(n, 1/2) <= \
     k-1) >= 0.95); ratios to ReLU are per round, summarized the same way";

fn timed_rounds(
    model: &Model,
    list: &[Activation],
    options: &CostOptions,
    data: &mut Inputs,
) -> Result<Vec<CandidateCost>, CostError> {
    let mut benches = list
        .iter()
        .map(|&a| Bench::new(model, a, options.seed))
        .collect::<Result<Vec<_>, _>>()?;
    let calls: Vec<[usize; 3]> = benches
        .iter_mut()
        .map(|b| Measure::ALL.map(|m| b.calls(m, data, options.block_seconds)))
        .collect();
    let k = list.len();
    // times[candidate][measure][round], seconds per call.
    let mut times = vec![[(); 3].map(|_| Vec::with_capacity(options.rounds)); k];
    for round in 0..options.rounds {
        for step in 0..k {
            let c = (round + step) % k;
            for (i, m) in Measure::ALL.into_iter().enumerate() {
                times[c][i].push(benches[c].run(m, data, calls[c][i]));
            }
        }
    }
    let summary = |v: &[f64]| {
        median_with_interval(v).ok_or_else(|| {
            CostError::Setting("a time came out non-finite (is the clock working?)".into())
        })
    };
    let mut out = Vec::with_capacity(k);
    for (c, a) in list.iter().enumerate() {
        let mut time = [Interval {
            median: 0.0,
            lo: 0.0,
            hi: 0.0,
        }; 3];
        let mut ratio = time;
        for i in 0..3 {
            let us: Vec<f64> = times[c][i].iter().map(|t| t * 1e6).collect();
            time[i] = summary(&us)?;
            let r: Vec<f64> = times[c][i]
                .iter()
                .zip(&times[0][i])
                .map(|(t, relu)| t / relu)
                .collect();
            ratio[i] = summary(&r)?;
        }
        out.push(CandidateCost::new(a.to_string(), time, ratio));
    }
    Ok(out)
}

/// One candidate's accuracy (from a `compare` report) beside its cost.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AccuracyCost {
    /// The compare candidate's label.
    pub label: String,
    /// Mean validation RMSE.
    pub rmse: f64,
    /// Its 95% Student-t interval (from `compare`).
    pub rmse_ci95: (f64, f64),
    /// Single-row prediction time and its interval, microseconds.
    pub row_predict: Interval,
    /// Training-step time and its interval, microseconds.
    pub train_step: Interval,
}

/// Pairs every candidate of a comparison with the cost of its activation; candidates whose
/// activation was not timed are returned by label as the second list.
pub fn pair_with_accuracy(
    cost: &CostReport,
    comparison: &crate::sweep::compare::Comparison,
    sweep: &crate::sweep::compare::SweepReport,
) -> (Vec<AccuracyCost>, Vec<String>) {
    let (mut paired, mut missing) = (Vec::new(), Vec::new());
    for (summary, candidate) in comparison.candidates.iter().zip(&sweep.plan.candidates) {
        let name = candidate.activation.to_string();
        match cost.candidates.iter().find(|c| c.activation == name) {
            Some(c) if summary.mean_rmse.is_finite() => paired.push(AccuracyCost {
                label: summary.label.clone(),
                rmse: summary.mean_rmse,
                rmse_ci95: summary.ci95,
                row_predict: c.time(Measure::RowPredict),
                train_step: c.time(Measure::TrainStep),
            }),
            _ => missing.push(summary.label.clone()),
        }
    }
    (paired, missing)
}
