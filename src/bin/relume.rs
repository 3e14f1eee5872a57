//! The `relume` command: train, predict, evaluate and inspect, thin over the library.
//!
//! Exit codes: 0 success; 2 bad usage, bad data or a bad model file; 1 internal error.

use clap::{Args, Parser, Subcommand};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use relume::data::{list_some, DataError, EncoderSpec, Impute, ReadOptions, Table, UnseenPolicy};
use relume::fit::monitor::{MonitorConfig, Revival};
use relume::fit::penalty::L1Mode;
use relume::fit::schedule::Schedule;
use relume::nn::loss::Loss;
use relume::report::{plot_run, PlotOptions};
use relume::serve::metrics::Metrics;
use relume::serve::model::{FitError, ModelError};
use relume::{Activation, Init, LayerSpec, Model, OptimizerChoice, Overrides, Predictor};
use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

const CAUTIONS: &str =
    "Cautions: predictions can feed decisions that hurt people (prices, credit, health, \
safety). Validate on held-out data from your own process before use; rows flagged as outside the \
training range are extrapolation; keep a human and domain review in the loop; follow local \
regulations and defer to licensed professionals.";

const EXAMPLES: &str = "Examples (the bundled cold-store demo table):
  relume train --data examples/data/cold_store.csv --target power_kw --out cold.json --report run.json --plot run.svg
  relume predict --model cold.json --data examples/data/cold_store.csv --out predictions.csv
  relume evaluate --model cold.json --data examples/data/cold_store.csv --report eval.json
  relume inspect --model cold.json";

/// Train small rectifier-family neural regressors on tabular data and use them.
#[derive(Parser, Debug)]
#[command(name = "relume", version, about, after_help = format!("{EXAMPLES}\n\n{CAUTIONS}"))]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Train a model on a CSV table and write the model file.
    #[command(after_help = format!("Example:\n  relume train --data examples/data/cold_store.csv --target power_kw --out cold.json --report run.json --plot run.svg\n\n{CAUTIONS}"))]
    Train(Box<TrainArgs>),
    /// Predict every row of a CSV table (a file, or - for standard input).
    #[command(after_help = format!("Example:\n  relume predict --model cold.json --data examples/data/cold_store.csv --key outdoor_c,refrigerant\n\n{CAUTIONS}"))]
    Predict(PredictArgs),
    /// Compare a model's predictions with the target column of a CSV table.
    #[command(after_help = format!("Example:\n  relume evaluate --model cold.json --data examples/data/cold_store.csv --report eval.json\n\n{CAUTIONS}"))]
    Evaluate(EvaluateArgs),
    /// Show what a model file holds.
    #[command(after_help = "Example:\n  relume inspect --model cold.json")]
    Inspect(InspectArgs),
    /// Compare activations (and optionally initializers and learning rates) over seeds and
    /// folds, paired, with confidence intervals and signed-rank tests.
    #[command(after_help = format!("Examples:\n  relume compare --data examples/data/cold_store.csv --target power_kw --activations relu,leaky-relu,elu,gelu,tanh --seeds 5 --folds 2 --table cmp.md --plot cmp.svg\n  relume compare ... --shard 0/3 --report part0.json   (then part1, part2 as separate jobs)\n  relume merge --reports part0.json,part1.json,part2.json --table cmp.md\n\n{CAUTIONS}"))]
    Compare(Box<CompareArgs>),
    /// Combine the shard reports of one comparison into the full one.
    #[command(
        after_help = "Example:\n  relume merge --reports part0.json,part1.json,part2.json --report cmp.json --table cmp.md --plot cmp.svg"
    )]
    Merge(MergeArgs),
    /// Time a training step, a batch prediction and a single-row prediction for each
    /// activation on this CPU, with intervals and ratios to ReLU.
    #[command(
        after_help = "Examples:\n  relume cost --inputs 10 --layers 64,64 --activations relu,gelu,elu,tanh --table cost.md --plot cost.svg\n  relume cost --model cold.json --activations relu,leaky-relu,elu,gelu,tanh --accuracy cmp.json --plot pick.svg"
    )]
    Cost(CostArgs),
    /// Explain a model on a table: permutation importance (needs the target column),
    /// partial dependence and ICE curves of every input column.
    #[command(
        after_help = "Example:\n  relume explain --model cold.json --data examples/data/cold_store.csv --report explain.json --plot explain.svg"
    )]
    Explain(ExplainArgs),
}

#[derive(Args, Debug)]
struct CostArgs {
    /// Time the architecture of this model file (its columns, scaling and networks).
    #[arg(long, value_name = "MODEL", conflicts_with_all = ["inputs", "layers"], required_unless_present = "inputs")]
    model: Option<PathBuf>,
    /// Input width of the architecture to time (with --layers).
    #[arg(long, value_name = "N", requires = "layers")]
    inputs: Option<usize>,
    /// Hidden layer widths of the architecture to time (with --inputs).
    #[arg(long, value_delimiter = ',', value_name = "64,64", requires = "inputs")]
    layers: Option<Vec<usize>>,
    /// Activations to time (ReLU is always timed: the ratios are to it).
    #[arg(
        long,
        value_delimiter = ',',
        value_name = "relu,gelu,..",
        required = true
    )]
    activations: Vec<Activation>,
    /// Rows per training step (the training batch size).
    #[arg(long, default_value_t = 32)]
    batch: usize,
    /// Rows per batch prediction.
    #[arg(long, default_value_t = 1024, value_name = "N")]
    predict_rows: usize,
    /// Interleaved rounds (at least 6).
    #[arg(long, default_value_t = 31)]
    rounds: usize,
    /// A compare report: adds its validation RMSE beside the cost, and the chart becomes
    /// accuracy against single-row prediction cost.
    #[arg(long, value_name = "CMP.json")]
    accuracy: Option<PathBuf>,
    /// Write the JSON report here.
    #[arg(long, value_name = "C.json")]
    report: Option<PathBuf>,
    /// Write the Markdown table here.
    #[arg(long = "table", value_name = "C.md")]
    table_out: Option<PathBuf>,
    /// Write the SVG chart here.
    #[arg(long, value_name = "C.svg")]
    plot: Option<PathBuf>,
}

#[derive(Args, Debug)]
struct ExplainArgs {
    /// The model file.
    #[arg(long, value_name = "MODEL")]
    model: PathBuf,
    #[command(flatten)]
    table: TableArgs,
    /// Write the explanation as JSON here.
    #[arg(long, value_name = "E.json")]
    report: Option<PathBuf>,
    /// Write the SVG chart here.
    #[arg(long, value_name = "E.svg")]
    plot: Option<PathBuf>,
    /// Shuffles per column for the importance.
    #[arg(long, default_value_t = relume::explain::REPEATS)]
    repeats: usize,
    /// Seed of the shuffles and row samples.
    #[arg(long, default_value_t = 0)]
    seed: u64,
}

#[derive(Args, Debug)]
struct CompareArgs {
    #[command(flatten)]
    table: TableArgs,
    #[command(flatten)]
    columns: ColumnArgs,
    /// Activations to compare.
    #[arg(long, value_delimiter = ',', value_name = "relu,elu,..")]
    activations: Vec<Activation>,
    /// Initializers to cross with the activations (default: each activation's own).
    #[arg(long, value_delimiter = ',', value_name = "he,glorot,..")]
    inits: Vec<Init>,
    /// Learning rates to cross with the activations (default: the default rate).
    #[arg(long, value_delimiter = ',', value_name = "1e-3,3e-3")]
    lrs: Vec<f64>,
    /// Seeds per candidate.
    #[arg(long, default_value_t = 5)]
    seeds: usize,
    /// Folds of the outer split (1: one seeded 20% holdout).
    #[arg(long, default_value_t = 1)]
    folds: usize,
    /// Hidden layer widths for every candidate.
    #[arg(long, value_delimiter = ',', value_name = "64,64")]
    layers: Option<Vec<usize>>,
    /// Most epochs per run.
    #[arg(long, value_name = "N")]
    epochs: Option<usize>,
    /// Optimizer for every candidate.
    #[arg(long, value_name = "adam")]
    optimizer: Option<OptimizerChoice>,
    #[command(flatten)]
    learning: LearningArgs,
    /// Run only shard i of n of the grid and write a partial report (merge the parts later);
    /// auto: from a Slurm array task or a Kubernetes indexed Job (count in RELUME_SHARD_COUNT).
    #[arg(long, value_name = "i/n|auto")]
    shard: Option<String>,
    #[command(flatten)]
    outputs: SweepOutputs,
}

#[derive(Args, Debug)]
struct MergeArgs {
    /// The shard reports.
    #[arg(long, value_delimiter = ',', value_name = "A.json,B.json,..")]
    reports: Vec<PathBuf>,
    #[command(flatten)]
    outputs: SweepOutputs,
}

/// Where a comparison's results go.
#[derive(Args, Debug)]
struct SweepOutputs {
    /// Write the JSON report here.
    #[arg(long, value_name = "CMP.json")]
    report: Option<PathBuf>,
    /// Write the Markdown table here.
    #[arg(long = "table", value_name = "CMP.md")]
    table_out: Option<PathBuf>,
    /// Write the SVG chart here.
    #[arg(long, value_name = "CMP.svg")]
    plot: Option<PathBuf>,
}

/// How to read the table.
#[derive(Args, Debug)]
struct TableArgs {
    /// The CSV file (with a header row); - reads standard input.
    #[arg(long, value_name = "FILE.csv")]
    data: String,
    /// Columns to read as text (categories) even if they look numeric.
    #[arg(long, value_delimiter = ',', value_name = "COL,..")]
    text_columns: Vec<String>,
    /// Read NaN / inf cells as empty instead of refusing them.
    #[arg(long)]
    allow_non_finite: bool,
    /// Field separator: comma, semicolon or tab (default: detected from the header line).
    #[arg(long, value_name = "SEP")]
    separator: Option<SeparatorArg>,
    /// Read "6,520" as 6.52 (decimal comma) where it could also be 6520.
    #[arg(long)]
    decimal_comma: bool,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum SeparatorArg {
    #[value(name = ",", alias = "comma")]
    Comma,
    #[value(name = ";", alias = "semicolon")]
    Semicolon,
    #[value(name = "tab")]
    Tab,
}

impl SeparatorArg {
    fn byte(self) -> u8 {
        match self {
            SeparatorArg::Comma => b',',
            SeparatorArg::Semicolon => b';',
            SeparatorArg::Tab => b'\t',
        }
    }
}

/// Which columns to model, and how.
#[derive(Args, Debug)]
struct ColumnArgs {
    /// The column to predict. Rows where it is empty are left out and counted.
    #[arg(long, value_name = "COL")]
    target: String,
    /// Feature columns, used whatever their role would be (default: every column but the
    /// target, leaving out identifier-like and constant columns).
    #[arg(long, value_delimiter = ',', value_name = "a,b,..")]
    features: Option<Vec<String>>,
    /// Columns to use even if they look identifier-like or constant.
    #[arg(long, value_delimiter = ',', value_name = "COL,..")]
    keep_columns: Vec<String>,
    /// Columns to leave out.
    #[arg(long, value_delimiter = ',', value_name = "COL,..")]
    drop_columns: Vec<String>,
    /// Category levels seen in fewer rows are pooled into one learned "(other)" level.
    #[arg(long, value_name = "N", default_value_t = relume::data::DEFAULT_MIN_LEVEL_ROWS)]
    min_level_rows: usize,
    /// Most levels a text column keeps (the most frequent; the rest are pooled).
    #[arg(long, value_name = "N", default_value_t = relume::data::DEFAULT_MAX_LEVELS)]
    max_levels: usize,
    /// A category never seen in training, at prediction time: flag (predict through the
    /// pooled level and say so in the issue column) or error (no prediction for the row).
    #[arg(long, value_name = "POLICY", default_value = "flag")]
    unseen: UnseenArg,
    /// Fill empty numeric cells: mean, median or most-frequent, with a was-missing input
    /// (recorded in the model). Without it an empty numeric cell is an error.
    #[arg(long, value_name = "HOW")]
    impute: Option<ImputeArg>,
    /// Model ln(target); predictions come back in the target's units.
    #[arg(long)]
    log_target: bool,
    /// Numeric values further outside their training range than this fraction of it are held
    /// at that distance (recorded in the model; such rows are still flagged). `off` lets every
    /// value reach the network as it is (default 0.25)
    #[arg(
        long,
        value_name = "F|off",
        default_value = "0.25",
        value_parser = parse_hold,
        allow_negative_numbers = true
    )]
    hold_beyond: HoldArg,
}

/// `--hold-beyond`: a fraction of the training range, or None for `off`.
#[derive(Clone, Copy, Debug)]
struct HoldArg(Option<f64>);

fn parse_hold(text: &str) -> Result<HoldArg, String> {
    if text == "off" {
        return Ok(HoldArg(None));
    }
    match text.parse::<f64>() {
        Ok(f) if f.is_finite() && f >= 0.0 => Ok(HoldArg(Some(f))),
        _ => Err(format!("expected a number ≥ 0 or 'off', not '{text}'")),
    }
}

impl ColumnArgs {
    /// The encoder spec these options describe.
    fn spec(&self) -> EncoderSpec {
        EncoderSpec {
            target: self.target.clone(),
            features: self.features.clone(),
            impute: self.impute.map(|i| match i {
                ImputeArg::Mean => Impute::Mean,
                ImputeArg::Median => Impute::Median,
                ImputeArg::MostFrequent => Impute::MostFrequent,
            }),
            log_target: self.log_target,
            min_level_rows: self.min_level_rows,
            max_levels: self.max_levels,
            unseen: match self.unseen {
                UnseenArg::Flag => UnseenPolicy::Flag,
                UnseenArg::Error => UnseenPolicy::Error,
            },
            keep: self.keep_columns.clone(),
            drop: self.drop_columns.clone(),
            hold_beyond: self.hold_beyond.0,
        }
    }
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum UnseenArg {
    Flag,
    Error,
}

/// Loss, schedule, clipping, dropout and revival: shared by `train` and `compare`.
#[derive(Args, Debug)]
struct LearningArgs {
    /// Training loss: mse, mae, huber[:delta] (delta in standardized target units, default 1)
    /// or quantile[:tau] (the model then predicts the tau quantile; default 0.5). Default mse.
    #[arg(long, value_name = "mse")]
    loss: Option<Loss>,
    /// Learning-rate schedule for step-based optimizers: constant, step:EVERY[:FACTOR],
    /// exponential:GAMMA, cosine:TOTAL[:WARMUP[:FLOOR]], plateau[:PATIENCE[:FACTOR[:MIN]]]
    /// (default plateau:10:0.5:0.01 with adam; L-BFGS takes none).
    #[arg(long, value_name = "plateau:10")]
    schedule: Option<Schedule>,
    /// Rescale each step's gradient when its L2 norm exceeds X (default: no clipping).
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    clip_norm: Option<f64>,
    /// Clamp every gradient entry to ±X (default: no clipping).
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    clip_value: Option<f64>,
    /// Dropout probability after each hidden activation, in [0, 1) (default 0: none).
    #[arg(long, value_name = "P", allow_negative_numbers = true)]
    dropout: Option<f64>,
    /// Apply the --l1 penalty as a soft-threshold after each step, which gives exact zeros
    /// (step-based optimizers only; default: L1 in the gradient). With --l2 as well, the
    /// penalty is an elastic net.
    #[arg(long)]
    l1_proximal: bool,
    /// Every N epochs, re-initialize dead or dormant hidden units (default: never).
    #[arg(long, value_name = "N")]
    revive_every: Option<usize>,
    /// Units whose dormant score is at most T are revived (default 0: dead units only).
    #[arg(
        long,
        value_name = "T",
        allow_negative_numbers = true,
        requires = "revive_every"
    )]
    revive_tau: Option<f64>,
}

impl LearningArgs {
    /// These options written into `o`, checked.
    fn apply(&self, o: &mut Overrides) -> Result<(), Failure> {
        if let Some(p) = self.dropout {
            if !(0.0..1.0).contains(&p) {
                return Err(Failure::User(format!(
                    "--dropout {p} must be in [0, 1) (for example 0.1)"
                )));
            }
        }
        if let Some(t) = self.revive_tau {
            if !(0.0..=1.0).contains(&t) {
                return Err(Failure::User(format!(
                    "--revive-tau {t} must be in [0, 1] (0: dead units only)"
                )));
            }
        }
        if self.revive_every == Some(0) {
            return Err(Failure::User(
                "--revive-every must be at least 1 epoch".to_string(),
            ));
        }
        o.loss = self.loss;
        o.schedule = self.schedule;
        o.clip_norm = self.clip_norm;
        o.clip_value = self.clip_value;
        o.dropout = self.dropout;
        o.l1_mode = self.l1_proximal.then_some(L1Mode::Proximal);
        o.revival = self.revive_every.map(|every| Revival {
            every,
            tau: self.revive_tau.unwrap_or(0.0),
            seed: 0,
        });
        Ok(())
    }
}

/// Refuses options that the optimizer chosen for a table of `rows` rows would ignore.
fn refuse_step_only(o: &Overrides, rows: usize) -> Result<(), Failure> {
    let unused = o.step_only(rows);
    if unused.is_empty() {
        return Ok(());
    }
    let flags: Vec<String> = unused
        .iter()
        .map(|field| match *field {
            "l1_mode" => "--l1-proximal".to_string(),
            other => format!("--{}", other.replace('_', "-")),
        })
        .collect();
    Err(Failure::User(format!(
        "{} cannot be used here: L-BFGS trains this table ({}), and it takes no learning rate, \
         batch, schedule, clipping or proximal step; add --optimizer adam (or another \
         step-based optimizer) to use {}, or leave {} out",
        flags.join(", "),
        if o.optimizer.is_some() {
            "as --optimizer asks"
        } else {
            "the default for tables up to 1000 training rows"
        },
        if flags.len() == 1 { "it" } else { "them" },
        if flags.len() == 1 { "it" } else { "them" },
    )))
}

#[derive(Args, Debug)]
struct TrainArgs {
    #[command(flatten)]
    table: TableArgs,
    #[command(flatten)]
    columns: ColumnArgs,
    /// Hidden layer widths (default 64,64).
    #[arg(long, value_delimiter = ',', value_name = "64,64")]
    layers: Option<Vec<usize>>,
    /// Hidden activation (default: gelu when L-BFGS trains, which it does for tables up to
    /// 1000 training rows unless --optimizer says otherwise; relu for every other optimizer).
    #[arg(long, value_name = "relu")]
    activation: Option<Activation>,
    /// Weight initializer (default: he for rectifiers, lecun for selu, glorot for tanh/sigmoid).
    #[arg(long, value_name = "he")]
    init: Option<Init>,
    /// Optimizer: sgd, momentum, nesterov, rmsprop, adam, amsgrad, adamw, lbfgs (default: lbfgs
    /// up to 1000 training rows, adam above).
    #[arg(long, value_name = "adam")]
    optimizer: Option<OptimizerChoice>,
    /// Learning rate (default 3e-3 for adam).
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    lr: Option<f64>,
    /// Most epochs (L-BFGS: iterations).
    #[arg(long, value_name = "N")]
    epochs: Option<usize>,
    /// Rows per mini-batch (default 32).
    #[arg(long, value_name = "N")]
    batch: Option<usize>,
    /// L1 penalty on weights.
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    l1: Option<f64>,
    /// L2 penalty on weights (default 3e-4 above 1000 rows, 0 below).
    #[arg(long, value_name = "X", allow_negative_numbers = true)]
    l2: Option<f64>,
    /// Fraction of rows held out for early stopping and validation metrics (default 0.2).
    #[arg(long, value_name = "0.2", allow_negative_numbers = true)]
    val_frac: Option<f64>,
    /// Epochs without validation improvement before stopping.
    #[arg(long, value_name = "N")]
    patience: Option<usize>,
    /// Seed of initialization, split and shuffling (default 0).
    #[arg(long, value_name = "N", allow_negative_numbers = true)]
    seed: Option<u64>,
    /// Ensemble members: networks trained with different seeds whose predictions are averaged
    /// (default 5; 1 gives a single network).
    #[arg(long, value_name = "K", value_parser = clap::value_parser!(usize))]
    members: Option<usize>,
    /// Nominal coverage of the split-conformal prediction interval (default 0.9).
    #[arg(long, value_name = "0.9", allow_negative_numbers = true)]
    coverage: Option<f64>,
    #[command(flatten)]
    learning: LearningArgs,
    /// Where to write the model file.
    #[arg(long, value_name = "MODEL")]
    out: PathBuf,
    /// Write the JSON run report here.
    #[arg(long, value_name = "RUN.json")]
    report: Option<PathBuf>,
    /// Write an SVG chart of the run here.
    #[arg(long, value_name = "RUN.svg")]
    plot: Option<PathBuf>,
    /// Draw the chart's loss axis linearly instead of on a log scale.
    #[arg(long)]
    linear_plot: bool,
    /// Threads for large matrix products and element-wise loops (default: RELUME_THREADS, or
    /// 1). Pays off for wide layers and large batches; small networks gain nothing.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..=64))]
    threads: Option<u16>,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum ImputeArg {
    Mean,
    Median,
    MostFrequent,
}

#[derive(Args, Debug)]
struct PredictArgs {
    /// The model file.
    #[arg(long, value_name = "MODEL")]
    model: PathBuf,
    #[command(flatten)]
    table: TableArgs,
    /// Write the predictions here (default: standard output).
    #[arg(long, value_name = "PRED.csv")]
    out: Option<PathBuf>,
    /// Columns copied from the input to identify each row (default: the row's line number).
    #[arg(long, value_delimiter = ',', value_name = "COL,..")]
    key: Vec<String>,
    /// Add one attribution:<column> per input (integrated gradients, target units) and the
    /// baseline prediction they start from: attributions + baseline = prediction.
    #[arg(long)]
    explain: bool,
}

#[derive(Args, Debug)]
struct EvaluateArgs {
    /// The model file.
    #[arg(long, value_name = "MODEL")]
    model: PathBuf,
    #[command(flatten)]
    table: TableArgs,
    /// Write the metrics as JSON here.
    #[arg(long, value_name = "EVAL.json")]
    report: Option<PathBuf>,
}

#[derive(Args, Debug)]
struct InspectArgs {
    /// The model file.
    #[arg(long, value_name = "MODEL")]
    model: PathBuf,
}

/// A failure, with the exit code it maps to.
enum Failure {
    /// Bad usage, data or model file: exit 2.
    User(String),
    /// A bug or an environment problem: exit 1.
    Internal(String),
    /// The reader of standard output went away (`| head`): stop, exit 0, say nothing.
    Quiet,
}

impl From<DataError> for Failure {
    fn from(e: DataError) -> Self {
        Failure::User(e.to_string())
    }
}

impl From<ModelError> for Failure {
    fn from(e: ModelError) -> Self {
        Failure::User(e.to_string())
    }
}

impl From<FitError> for Failure {
    fn from(e: FitError) -> Self {
        Failure::User(e.to_string())
    }
}

fn io_failure(what: &Path, e: std::io::Error) -> Failure {
    Failure::User(format!("{}: {e}", what.display()))
}

fn main() -> ExitCode {
    std::panic::set_hook(Box::new(|info| {
        // `println!` panics when the reader of standard output has gone (`| head`): that is
        // the reader's choice, not an error.
        if info.to_string().contains("Broken pipe") {
            std::process::exit(0);
        }
        eprintln!("relume: internal error: {info}");
    }));
    let cli = Cli::parse();
    if let Err(message) = check_thread_variable() {
        eprintln!("relume: {message}");
        return ExitCode::from(2);
    }
    let outcome = std::panic::catch_unwind(|| match cli.command {
        Command::Train(a) => train(*a),
        Command::Predict(a) => predict(a),
        Command::Evaluate(a) => evaluate(a),
        Command::Inspect(a) => inspect(a),
        Command::Compare(a) => compare(*a),
        Command::Merge(a) => merge(a),
        Command::Cost(a) => cost(a),
        Command::Explain(a) => explain(a),
    });
    match outcome {
        Ok(Ok(())) | Ok(Err(Failure::Quiet)) => ExitCode::SUCCESS,
        Ok(Err(Failure::User(message))) => {
            eprintln!("relume: {message}");
            ExitCode::from(2)
        }
        Ok(Err(Failure::Internal(message))) => {
            eprintln!("relume: internal error: {message}");
            ExitCode::from(1)
        }
        Err(_) => ExitCode::from(1),
    }
}

/// The library reads `RELUME_THREADS` leniently (falling back to one thread); the command
/// refuses a value it cannot use, so a typo does not go unnoticed.
fn check_thread_variable() -> Result<(), String> {
    match std::env::var("RELUME_THREADS") {
        Ok(v) => match v.trim().parse::<usize>() {
            Ok(n) if (1..=64).contains(&n) => Ok(()),
            _ => Err(format!(
                "RELUME_THREADS={v:?}: expected a whole number from 1 to 64"
            )),
        },
        Err(_) => Ok(()),
    }
}

/// Reads the table; `model_text` adds the columns a model reads as text (categories, dates),
/// so a column is typed as the model was trained on it.
/// The read options the table arguments ask for, with the model's text columns.
fn read_options(args: &TableArgs, model_text: &[String]) -> ReadOptions {
    ReadOptions {
        text_columns: args.text_columns.clone(),
        allow_non_finite: args.allow_non_finite,
        model_text_columns: model_text.to_vec(),
        separator: args.separator.map(|s| s.byte()),
        decimal_comma: args.decimal_comma,
    }
}

fn read_table(args: &TableArgs, model_text: &[String]) -> Result<Table, Failure> {
    let options = read_options(args, model_text);
    Ok(if args.data == "-" {
        Table::read(std::io::stdin().lock(), "stdin", &options)?
    } else {
        Table::read_path(Path::new(&args.data), &options)?
    })
}

/// Progress over the ensemble's training runs on a terminal; nothing when standard error is
/// not one.
fn run_progress() -> ProgressBar {
    let bar = ProgressBar::new(1);
    if std::io::stderr().is_terminal() {
        bar.set_style(
            ProgressStyle::with_template("{bar:30} training run {pos}/{len}  {elapsed}  eta {eta}")
                .expect("valid template"),
        );
    } else {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    }
    bar
}

/// Refuses an output path that cannot be written (missing folder, a folder itself, no write
/// permission) before any work is done, so a finished run is never thrown away.
fn check_output(option: &str, path: &Path) -> Result<(), Failure> {
    let refuse = |why: String| Failure::User(format!("{option} {}: {why}", path.display()));
    if path.as_os_str().is_empty() {
        return Err(refuse("the path is empty".to_string()));
    }
    if path.is_dir() || path.as_os_str().to_string_lossy().ends_with('/') {
        return Err(refuse("is a folder; give a file name".to_string()));
    }
    // A device or named pipe is written in place (see serve::atomic); opening a pipe here to
    // test it would end the reader's input before the real output starts.
    if relume::serve::atomic::is_special_file(path) {
        return Ok(());
    }
    let parent = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !parent.is_dir() {
        return Err(refuse(format!(
            "the folder {} does not exist",
            parent.display()
        )));
    }
    // Try a file beside it: the same check the atomic save's temporary file will need.
    let probe = parent.join(format!(".relume-write-check-{}", std::process::id()));
    match std::fs::File::create(&probe) {
        Ok(_) => {
            let _ = std::fs::remove_file(&probe);
        }
        Err(e) => return Err(refuse(format!("cannot write in {}: {e}", parent.display()))),
    }
    if path.exists() && std::fs::OpenOptions::new().append(true).open(path).is_err() {
        return Err(refuse("the file exists and cannot be replaced".to_string()));
    }
    Ok(())
}

/// Checks every output path given.
fn check_outputs(paths: &[(&str, Option<&Path>)]) -> Result<(), Failure> {
    for (option, path) in paths {
        if let Some(p) = path {
            check_output(option, p)?;
        }
    }
    let given: Vec<&Path> = paths.iter().filter_map(|(_, p)| *p).collect();
    for (i, p) in given.iter().enumerate() {
        if given[..i].contains(p) {
            return Err(Failure::User(format!(
                "{} is given for two outputs",
                p.display()
            )));
        }
    }
    Ok(())
}

fn train(a: TrainArgs) -> Result<(), Failure> {
    check_outputs(&[
        ("--out", Some(a.out.as_path())),
        ("--report", a.report.as_deref()),
        ("--plot", a.plot.as_deref()),
    ])?;
    if let Some(n) = a.threads {
        relume::kernels::set_threads(usize::from(n));
    }
    let table = read_table(&a.table, &[])?;
    let spec = a.columns.spec();
    let mut overrides = Overrides {
        hidden: a.layers.clone(),
        activation: a.activation,
        init: a.init,
        optimizer: a.optimizer,
        lr: a.lr,
        epochs: a.epochs,
        batch: a.batch,
        l1: a.l1,
        l2: a.l2,
        val_frac: a.val_frac,
        patience: a.patience,
        seed: a.seed,
        members: a.members,
        coverage: a.coverage,
        ..Overrides::default()
    };
    a.learning.apply(&mut overrides)?;
    refuse_step_only(&overrides, table.rows())?;
    let recipe = overrides.recipe();
    if !(recipe.coverage > 0.0 && recipe.coverage < 1.0) {
        return Err(Failure::User(format!(
            "--coverage {} must be between 0 and 1 (for example 0.9)",
            recipe.coverage
        )));
    }
    // Data summary.
    let target = table.column(&a.columns.target)?;
    let values: Vec<f64> = match &target.data {
        relume::data::ColumnData::Number(v) => v.iter().copied().filter(|v| !v.is_nan()).collect(),
        relume::data::ColumnData::Text(_) => {
            return Err(Failure::User(format!(
                "{}: the target column '{}' is not numeric",
                table.source, a.columns.target
            )))
        }
    };
    let n = values.len().max(1) as f64;
    let mean = values.iter().sum::<f64>() / n;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n).sqrt();
    let (lo, hi) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| {
            (l.min(v), h.max(v))
        });
    eprintln!(
        "{}: {} rows, {} columns; target '{}': mean {mean:.4}, sd {sd:.4}, range [{lo}, {hi}]",
        table.source,
        table.rows(),
        table.columns.len(),
        a.columns.target
    );
    let config = recipe.config_for(table.rows());
    eprintln!("loss: {}", describe_loss(config.objective.loss));
    eprintln!(
        "training: {} hidden layers of {} units, {}, {} optimizer, up to {} epochs, validation {:.0}%",
        recipe.hidden.len(),
        recipe
            .hidden
            .iter()
            .map(usize::to_string)
            .collect::<Vec<_>>()
            .join(", "),
        recipe.activation_for(table.rows()),
        config.optimizer.name(),
        config.epochs,
        100.0 * config.val_frac
    );
    let prepared = Model::prepare(&table, &spec, &recipe)?;
    drop(table);
    print_columns(&prepared.encoder);
    let (empty, lines) = &prepared.empty_targets;
    if *empty > 0 {
        eprintln!(
            "rows left out: {empty} with an empty target (lines {}{})",
            lines
                .iter()
                .map(u64::to_string)
                .collect::<Vec<_>>()
                .join(", "),
            if *empty > lines.len() { ", ..." } else { "" }
        );
    }
    for w in &prepared.encoder.warnings {
        eprintln!("warning: {w}");
    }
    eprintln!(
        "encoded inputs: {} ({})",
        prepared.encoder.width(),
        list_some(prepared.encoder.input_names(), 12)
    );
    let bar = run_progress();
    let (model, mut report) = Model::fit_prepared(
        prepared,
        &recipe,
        MonitorConfig::default(),
        &|done, total| {
            bar.set_length(total as u64);
            bar.set_position(done as u64);
        },
    )?;
    bar.finish_and_clear();
    let s = &model.summary;
    eprintln!(
        "trained {} epochs on {} rows (best epoch {}; {})",
        s.epochs_run,
        s.train_rows,
        s.best_epoch,
        s.stop.describe(config.patience)
    );
    print_ensemble(s, model.interval.as_ref(), |line| eprintln!("{line}"));
    if let Some(v) = &s.validation {
        eprintln!(
            "validation ({} rows held out of all fitting, ensemble): RMSE {:.4}  MAE {:.4}  R² {:.4}",
            v.rows, v.rmse, v.mae, v.r2
        );
        report.final_metrics.extra = vec![
            ("val_rmse".to_string(), v.rmse),
            ("val_mae".to_string(), v.mae),
            ("val_r2".to_string(), v.r2),
        ];
    }
    for w in &s.warnings {
        eprintln!("warning: {w}");
    }
    for (k, dead) in s.dead_fractions.iter().enumerate() {
        if *dead > 0.0 {
            eprintln!(
                "hidden layer {}: {:.0}% dead units at the end",
                k + 1,
                100.0 * dead
            );
        }
    }
    // Each kind of warning once per layer, with its remedy.
    let mut shown: Vec<(relume::fit::monitor::WarningKind, Option<usize>)> = Vec::new();
    for w in &report.warnings {
        if !shown.contains(&(w.kind, w.layer)) {
            shown.push((w.kind, w.layer));
            eprintln!(
                "warning (epoch {}): {}. Remedy: {}",
                w.epoch, w.message, w.remedy
            );
        }
    }
    for r in &report.rollbacks {
        eprintln!(
            "divergence guard: non-finite values in {} at epoch {}; rate cut to {:e}",
            r.location, r.epoch, r.lr_after
        );
    }
    model.save(&a.out)?;
    eprintln!("model written to {}", a.out.display());
    if let Some(path) = &a.report {
        report.write_json(path).map_err(|e| io_failure(path, e))?;
        eprintln!("run report written to {}", path.display());
    }
    if let Some(path) = &a.plot {
        let svg = plot_run(
            &report,
            PlotOptions {
                log_loss: !a.linear_plot,
                ..PlotOptions::default()
            },
        );
        relume::serve::atomic::write_atomic(path, svg.as_bytes())
            .map_err(|e| io_failure(path, e))?;
        eprintln!("chart written to {}", path.display());
    }
    eprintln!("\n{CAUTIONS}");
    Ok(())
}

/// The loss in words: what the model's prediction is.
fn describe_loss(loss: Loss) -> String {
    match loss {
        Loss::Mse => "mse (predicts the mean of the target)".to_string(),
        Loss::Mae => "mae (predicts the median of the target)".to_string(),
        Loss::Huber { delta } => format!(
            "huber:{delta} (squared within {delta} sd of the target, absolute beyond; robust \
             to outliers)"
        ),
        Loss::Quantile { tau } => {
            format!("quantile:{tau} (predicts the {tau} quantile of the target)")
        }
    }
}

/// The ensemble's members, the penalty choice and the interval, one line each.
fn print_ensemble(
    s: &relume::serve::model::ModelSummary,
    interval: Option<&relume::serve::interval::Conformal>,
    say: impl Fn(String),
) {
    if !s.penalty_grid.is_empty() {
        let tried: Vec<String> = s
            .penalty_grid
            .iter()
            .map(|(l2, loss)| match loss {
                Some(v) => format!("{l2:e}: {v:.4}"),
                None => format!("{l2:e}: failed"),
            })
            .collect();
        say(format!(
            "L2 penalty chosen on the early-stopping rows: {:e} (best validation loss per \
             strength: {})",
            s.l2.unwrap_or(0.0),
            tried.join(", ")
        ));
    } else if let Some(l2) = s.l2 {
        say(format!("L2 penalty: {l2:e} (as set)"));
    }
    for (m, member) in s.members.iter().enumerate() {
        say(format!(
            "member {} (seed {}): {} epochs, best epoch {}{}",
            m + 1,
            member.seed,
            member.epochs_run,
            member.best_epoch,
            member
                .rmse
                .map_or(String::new(), |r| format!(", calibration RMSE {r:.4}"))
        ));
    }
    match interval {
        Some(c) => say(format!(
            "prediction interval: {:.0}% split-conformal, ±{:.4} on the {} scale, from {} \
             calibration rows",
            100.0 * c.coverage,
            c.half_width,
            "model's target",
            c.calibration_rows
        )),
        None if s.calibration_rows > 0 => say(format!(
            "no prediction interval: {} calibration rows are too few for the coverage",
            s.calibration_rows
        )),
        None => say(
            "no prediction interval: the table is too small to hold out calibration rows"
                .to_string(),
        ),
    }
}

/// One line per column: what it became and why.
fn print_columns(encoder: &relume::data::Encoder) {
    eprintln!("columns:");
    for c in &encoder.columns {
        eprintln!("  {}: {}", c.name, c.what);
    }
}

/// What a feature's inputs are, in words.
fn describe_feature(f: &relume::data::FeatureEncoding) -> String {
    use relume::data::FeatureEncoding as E;
    let filled = |fill: Option<String>, flag: bool| match fill {
        Some(v) => format!(
            ", empty cells filled with {v}{}",
            if flag { " (+ a was-missing input)" } else { "" }
        ),
        None => String::new(),
    };
    match f {
        E::Number {
            min,
            max,
            fill,
            missing_flag,
            held,
            ..
        } => format!(
            "number, training range [{min}, {max}]{}{}",
            match held {
                Some((lo, hi)) => format!(", values held within [{lo}, {hi}]"),
                None => String::new(),
            },
            filled(fill.map(|v| v.to_string()), *missing_flag)
        ),
        E::Category {
            levels,
            fill,
            pooled,
            missing_level,
            ..
        } => format!(
            "one-hot over {} levels ({}){}{}{}",
            levels.len(),
            list_some(levels, 10),
            pooled.as_ref().map_or(String::new(), |p| format!(
                ", {} rare levels pooled into {}",
                p.len(),
                relume::data::OTHER_LEVEL
            )),
            if *missing_level {
                format!(", empty cells as {}", relume::data::MISSING_LEVEL)
            } else {
                String::new()
            },
            filled(fill.clone(), false)
        ),
        E::Date {
            min,
            max,
            fill,
            missing_flag,
            with_time,
            ..
        } => format!(
            "ISO date, training range {} to {} ({} inputs: days since 1970-01-01, year and week \
             cycles{}){}",
            iso_day(*min),
            iso_day(*max),
            f.width(),
            if *with_time { ", time of day" } else { "" },
            filled(fill.map(iso_day), *missing_flag)
        ),
    }
}

/// A day number (days since 1970-01-01) as YYYY-MM-DD.
fn iso_day(days: f64) -> String {
    let (y, m, d) = relume::data::civil_from_days(days.floor() as i64);
    format!("{y:04}-{m:02}-{d:02}")
}

fn csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

fn cell_text(table: &Table, column: &str, row: usize) -> Result<String, Failure> {
    Ok(match &table.column(column)?.data {
        relume::data::ColumnData::Number(v) if v[row].is_nan() => String::new(),
        relume::data::ColumnData::Number(v) => v[row].to_string(),
        relume::data::ColumnData::Text(v) => v[row].clone().unwrap_or_default(),
    })
}

/// Rows read, predicted and written at a time by `predict` and `evaluate`, so their memory
/// does not grow with the table.
const CHUNK_ROWS: usize = 8192;

/// Where `predict` writes: a file that appears whole only when every row is written, or
/// standard output as the rows come.
enum Sink {
    File(relume::serve::atomic::AtomicWriter, PathBuf),
    Stdout(std::io::BufWriter<std::io::StdoutLock<'static>>),
}

impl Sink {
    fn open(out: Option<&Path>) -> Result<Sink, Failure> {
        Ok(match out {
            Some(path) => Sink::File(
                relume::serve::atomic::AtomicWriter::create(path)
                    .map_err(|e| io_failure(path, e))?,
                path.to_path_buf(),
            ),
            None => Sink::Stdout(std::io::BufWriter::with_capacity(
                1 << 16,
                std::io::stdout().lock(),
            )),
        })
    }

    fn write(&mut self, text: &str) -> Result<(), Failure> {
        let (result, path) = match self {
            Sink::File(w, path) => (w.write_all(text.as_bytes()), Some(path.as_path())),
            Sink::Stdout(w) => (w.write_all(text.as_bytes()), None),
        };
        result.map_err(|e| write_failure(path, e))
    }

    /// Makes the file appear (or flushes standard output).
    fn finish(self) -> Result<(), Failure> {
        match self {
            Sink::File(w, path) => w.commit().map_err(|e| io_failure(&path, e)),
            Sink::Stdout(mut w) => w.flush().map_err(|e| write_failure(None, e)),
        }
    }
}

/// A failed write; a reader that stopped early (`| head`) is [`Failure::Quiet`].
fn write_failure(path: Option<&Path>, e: std::io::Error) -> Failure {
    match path {
        Some(p) => io_failure(p, e),
        None if e.kind() == std::io::ErrorKind::BrokenPipe => Failure::Quiet,
        None => Failure::Internal(format!("cannot write to standard output: {e}")),
    }
}

/// Reads the table in chunks of [`CHUNK_ROWS`] rows (the model's text columns read as text)
/// and hands each to `each` in order, while the next chunk is read on a second thread; a chunk
/// is handed over only when the one before has been taken, so memory stays bounded (about
/// three chunks). Returns the number of rows read. A reading error is reported after the
/// chunks before it were handled; an error from `each` stops the reading.
fn for_each_chunk(
    args: &TableArgs,
    model_text: &[String],
    mut each: impl FnMut(&Table) -> Result<(), Failure>,
) -> Result<usize, Failure> {
    /// Why the reading thread stopped early.
    enum Stop {
        Data(DataError),
        /// The handling side stopped (its own error is the one to report).
        Dropped,
    }
    impl From<DataError> for Stop {
        fn from(e: DataError) -> Self {
            Stop::Data(e)
        }
    }
    let options = read_options(args, model_text);
    let (send, receive) = std::sync::mpsc::sync_channel::<Table>(0);
    // Handled chunks go back to the reading thread to be freed where they were allocated
    // (freeing another thread's allocations costs the allocator more).
    let (give_back, returned) = std::sync::mpsc::channel::<Table>();
    std::thread::scope(|scope| {
        let reader = scope.spawn(move || -> Result<usize, Stop> {
            let forward = |table: Table| {
                returned.try_iter().for_each(drop);
                send.send(table).map_err(|_| Stop::Dropped)
            };
            if args.data == "-" {
                Table::read_chunks(
                    std::io::stdin().lock(),
                    "stdin",
                    &options,
                    CHUNK_ROWS,
                    forward,
                )
            } else {
                let path = Path::new(&args.data);
                let file = std::fs::File::open(path).map_err(|e| DataError::Io {
                    source_name: args.data.clone(),
                    message: format!("cannot open: {e}"),
                })?;
                let name = path.display().to_string();
                Table::read_chunks(file, &name, &options, CHUNK_ROWS, forward)
            }
        });
        let mut handled = Ok(());
        for table in receive.iter() {
            handled = each(&table);
            let _ = give_back.send(table);
            if handled.is_err() {
                break;
            }
        }
        // Dropping the receiver makes the reader's next send fail, so it stops.
        drop(receive);
        let read = reader
            .join()
            .map_err(|_| Failure::Internal("the reading thread panicked".to_string()))?;
        handled?;
        match read {
            Ok(rows) => Ok(rows),
            Err(Stop::Data(e)) => Err(e.into()),
            Err(Stop::Dropped) => Err(Failure::Internal(
                "the reading thread stopped without a reason".to_string(),
            )),
        }
    })
}

/// Rows `predict` flagged or could not predict.
#[derive(Default)]
struct PredictCounts {
    failed: usize,
    flagged: usize,
    unseen: usize,
}

fn predict(a: PredictArgs) -> Result<(), Failure> {
    check_outputs(&[("--out", a.out.as_deref())])?;
    let predictor = Predictor::load(&a.model)?;
    let keys: Vec<String> = if a.key.is_empty() {
        vec!["line".to_string()]
    } else {
        a.key.clone()
    };
    let header: Vec<String> = keys.iter().map(|k| csv_field(k)).collect();
    let extra: String = if a.explain {
        predictor
            .feature_names()
            .iter()
            .map(|f| format!(",{}", csv_field(&format!("attribution:{f}"))))
            .collect::<String>()
            + ",baseline"
    } else {
        String::new()
    };
    let mut sink = Sink::open(a.out.as_deref())?;
    sink.write(&format!(
        "{},prediction,lower,upper,extrapolated,issue{extra}\n",
        header.join(",")
    ))?;
    let mut counts = PredictCounts::default();
    let mut text = String::new();
    let written = for_each_chunk(&a.table, &predictor.encoder().text_columns(), |table| {
        text.clear();
        predict_chunk(&predictor, table, &a, &mut counts, &mut text)?;
        sink.write(&text)
    });
    let rows = match written {
        Err(Failure::Quiet) => return Ok(()),
        other => other?,
    };
    match sink.finish() {
        Err(Failure::Quiet) => return Ok(()),
        other => other?,
    }
    if let Some(path) = &a.out {
        eprintln!("{rows} predictions written to {}", path.display());
    }
    let PredictCounts {
        failed,
        flagged,
        unseen,
    } = counts;
    if flagged > 0 {
        eprintln!("{flagged} rows are outside the training range (extrapolation): check them");
    }
    if unseen > 0 {
        eprintln!(
            "{unseen} rows have a category not seen in training: predicted through the pooled \
             level and flagged in the issue column"
        );
    }
    if failed > 0 {
        eprintln!("{failed} rows could not be predicted (see the issue column)");
    }
    Ok(())
}

/// The CSV lines of one chunk's predictions, appended to `text`.
fn predict_chunk(
    predictor: &Predictor,
    table: &Table,
    a: &PredictArgs,
    counts: &mut PredictCounts,
    text: &mut String,
) -> Result<(), Failure> {
    for k in &a.key {
        table.column(k)?;
    }
    let rows = predictor.predict_table(table)?;
    let attributions = if a.explain {
        Some(relume::explain::attribute_table(predictor, table)?)
    } else {
        None
    };
    // Written straight into `text`: an ordinary row allocates nothing here.
    use std::fmt::Write as _;
    for (r, row) in rows.iter().enumerate() {
        if a.key.is_empty() {
            let _ = write!(text, "{}", row.line);
        } else {
            for (i, k) in a.key.iter().enumerate() {
                let sep = if i == 0 { "" } else { "," };
                let _ = write!(text, "{sep}{}", csv_field(&cell_text(table, k, r)?));
            }
        }
        // A prediction of an f32 network: the shortest text that reads back to the same f32.
        for v in [row.value, row.lower, row.upper] {
            let _ = match v {
                Some(v) => write!(text, ",{}", v as f32),
                None => write!(text, ","),
            };
        }
        let _ = write!(text, ",{},", !row.out_of_range.is_empty());
        match &row.error {
            Some(e) => {
                counts.failed += 1;
                text.push_str(&csv_field(e));
            }
            None if row.out_of_range.is_empty() && row.unseen.is_empty() => {}
            None => {
                let mut parts = Vec::new();
                if !row.out_of_range.is_empty() {
                    counts.flagged += 1;
                    parts.push(format!(
                        "outside the training range: {}",
                        row.out_of_range.join(" ")
                    ));
                }
                if !row.unseen.is_empty() {
                    counts.unseen += 1;
                    parts.push(format!(
                        "category not seen in training (predicted as {}): {}",
                        relume::data::OTHER_LEVEL,
                        row.unseen.join(" ")
                    ));
                }
                text.push_str(&csv_field(&parts.join("; ")));
            }
        }
        if let Some(t) = &attributions {
            match &t.rows[r] {
                Some(v) => v.iter().for_each(|x| {
                    let _ = write!(text, ",{x}");
                }),
                None => text.push_str(&",".repeat(t.features.len())),
            }
            let _ = write!(text, ",{}", t.baseline);
        }
        text.push('\n');
    }
    Ok(())
}

fn explain(a: ExplainArgs) -> Result<(), Failure> {
    check_outputs(&[
        ("--report", a.report.as_deref()),
        ("--plot", a.plot.as_deref()),
    ])?;
    let model = Model::load(&a.model)?;
    let table = read_table(&a.table, &model.encoder.text_columns())?;
    let options = relume::ExplainOptions {
        repeats: a.repeats,
        seed: a.seed,
        ..relume::ExplainOptions::default()
    };
    let e = relume::explain(&model, &table, &options)?;
    let target = &e.target;
    match e.rmse {
        Some(rmse) => println!("{} rows, RMSE {rmse:.4} {target} units", e.rows),
        None => println!("{} rows; no '{target}' column, so no importance", e.rows),
    }
    for i in &e.importance {
        println!(
            "  {:<24} RMSE rise {:>10.4}  [{:.4}, {:.4}]",
            i.feature, i.mean, i.lower, i.upper
        );
    }
    let outputs = [
        (a.report.as_deref(), e.to_json()),
        (a.plot.as_deref(), relume::report::plot_explanation(&e)),
    ];
    for (path, text) in outputs {
        if let Some(path) = path {
            relume::serve::atomic::write_atomic(path, text.as_bytes())
                .map_err(|err| io_failure(path, err))?;
            eprintln!("written to {}", path.display());
        }
    }
    Ok(())
}

fn evaluate(a: EvaluateArgs) -> Result<(), Failure> {
    check_outputs(&[("--report", a.report.as_deref())])?;
    let model = Model::load(&a.model)?;
    let loss = model.summary.loss;
    let predictor = Predictor::new(&model);
    drop(model);
    let target = predictor.encoder().target.name.clone();
    let source = if a.table.data == "-" {
        "stdin".to_string()
    } else {
        a.table.data.clone()
    };
    let (mut predictions, mut targets) = (Vec::new(), Vec::new());
    let (mut failed, mut flagged) = (0, 0);
    let (mut inside, mut width, mut with_interval) = (0usize, 0.0, 0usize);
    for_each_chunk(&a.table, &predictor.encoder().text_columns(), |table| {
        let column = table.column(&target)?;
        let relume::data::ColumnData::Number(truth) = &column.data else {
            return Err(Failure::User(format!(
                "{}: the target column '{target}' is not numeric",
                table.source
            )));
        };
        for (r, row) in predictor.predict_table(table)?.iter().enumerate() {
            match row.value {
                Some(v) if !truth[r].is_nan() => {
                    predictions.push(v);
                    targets.push(truth[r]);
                    flagged += usize::from(!row.out_of_range.is_empty());
                    if let (Some(lo), Some(hi)) = (row.lower, row.upper) {
                        with_interval += 1;
                        inside += usize::from(lo <= truth[r] && truth[r] <= hi);
                        width += hi - lo;
                    }
                }
                _ => failed += 1,
            }
        }
        Ok(())
    })?;
    let nominal = predictor.interval().map(|c| c.coverage);
    let coverage = (with_interval > 0).then(|| inside as f64 / with_interval as f64);
    let mean_width = (with_interval > 0).then(|| width / with_interval as f64);
    if predictions.is_empty() {
        return Err(Failure::User(format!(
            "{}: no row could be evaluated (empty targets or unusable rows)",
            source
        )));
    }
    let m = Metrics::compute(&predictions, &targets);
    println!("rows      {}", m.rows);
    println!("RMSE      {:.6}", m.rmse);
    println!("MAE       {:.6}", m.mae);
    println!("R²        {:.6}", m.r2);
    match m.mape {
        Some(p) => println!(
            "MAPE      {p:.3}%  ({} zero targets left out)",
            m.mape_skipped
        ),
        None => println!("MAPE      n/a (every target is 0)"),
    }
    let q = m.residual_quantiles;
    println!(
        "residual  5% {:.4}  25% {:.4}  median {:.4}  75% {:.4}  95% {:.4}",
        q[0], q[1], q[2], q[3], q[4]
    );
    // A quantile model is scored by its own loss and by how many targets fall below it.
    let quantile = match loss {
        Loss::Quantile { tau } => {
            let pinball = relume::serve::metrics::pinball_loss(&predictions, &targets, tau);
            let below = relume::serve::metrics::share_below(&predictions, &targets);
            println!("pinball   {pinball:.6}  (quantile loss at tau = {tau})");
            println!(
                "below     {:.1}% of targets at or below the prediction (a {tau} quantile \
                 model aims at {:.1}%)",
                100.0 * below,
                100.0 * tau
            );
            Some((tau, pinball, below))
        }
        _ => None,
    };
    match (coverage, nominal, mean_width) {
        (Some(c), Some(n), Some(w)) => println!(
            "interval  {:.1}% of rows inside (nominal {:.0}%), mean width {w:.4}",
            100.0 * c,
            100.0 * n
        ),
        _ => println!("interval  none (the model has no prediction interval)"),
    }
    println!("flagged   {flagged} rows outside the training range; {failed} rows not evaluated");
    if let Some(path) = &a.report {
        let json = serde_json::json!({
            "rows": m.rows,
            "rmse": m.rmse,
            "mae": m.mae,
            "r2": m.r2,
            "coverage": coverage,
            "nominal_coverage": nominal,
            "mean_interval_width": mean_width,
            "mape": m.mape,
            "residual_quantiles": m.residual_quantiles,
            "extrapolated_rows": flagged,
            "rows_not_evaluated": failed,
            "loss": loss.to_string(),
            "quantile": quantile.map(|q| q.0),
            "pinball_loss": quantile.map(|q| q.1),
            "share_below": quantile.map(|q| q.2),
            "model": a.model.display().to_string(),
            "data": source,
        });
        let text =
            serde_json::to_string_pretty(&json).map_err(|e| Failure::Internal(e.to_string()))?;
        relume::serve::atomic::write_atomic(path, text.as_bytes())
            .map_err(|e| io_failure(path, e))?;
        eprintln!("metrics written to {}", path.display());
    }
    Ok(())
}

fn inspect(a: InspectArgs) -> Result<(), Failure> {
    let model = Model::load(&a.model)?;
    let net = &model.members[0];
    println!("model file {}", a.model.display());
    println!(
        "parameters {} per network, {} networks in the ensemble",
        net.param_count(),
        model.members.len()
    );
    println!("layers (each network):");
    for (i, spec) in net.specs().iter().enumerate() {
        match spec {
            LayerSpec::Affine {
                inputs,
                outputs,
                weight_init,
                ..
            } => println!("  {i}: affine {inputs} -> {outputs} (initialized {weight_init})"),
            LayerSpec::Activation { width, activation } => {
                println!("  {i}: {activation} on {width} units")
            }
            LayerSpec::Dropout { width, rate } => println!("  {i}: dropout {rate} on {width}"),
        }
    }
    if !model.encoder.columns.is_empty() {
        println!("columns:");
        for c in &model.encoder.columns {
            println!("  {}: {}", c.name, c.what);
        }
    }
    println!("inputs ({} after encoding):", model.encoder.width());
    for f in &model.encoder.features {
        println!("  {}: {}", f.name(), describe_feature(f));
    }
    println!(
        "unseen categories at prediction time: {}",
        match model.encoder.unseen {
            UnseenPolicy::Flag => "predicted through the pooled (or average) level, and flagged",
            UnseenPolicy::Error => "an error for that row",
        }
    );
    let t = &model.encoder.target;
    println!(
        "target: {}{}",
        t.name,
        if t.log { " (modelled as ln)" } else { "" }
    );
    let s = &model.summary;
    println!("loss: {}", describe_loss(s.loss));
    println!(
        "training: {} rows, {} validation rows, {} epochs, best epoch {}; {}",
        s.train_rows,
        s.val_rows,
        s.epochs_run,
        s.best_epoch,
        s.stop.describe(None)
    );
    if let Some(v) = &s.validation {
        println!(
            "validation ({} calibration rows, ensemble): RMSE {:.4}, MAE {:.4}, R² {:.4}",
            v.rows, v.rmse, v.mae, v.r2
        );
    }
    print_ensemble(s, model.interval.as_ref(), |line| println!("{line}"));
    for w in &s.warnings {
        println!("warning: {w}");
    }
    for (k, dead) in s.dead_fractions.iter().enumerate() {
        println!(
            "hidden layer {}: {:.1}% dead units at the end of training",
            k + 1,
            100.0 * dead
        );
    }
    Ok(())
}

fn write_outputs(
    report: &relume::sweep::compare::SweepReport,
    outputs: &SweepOutputs,
) -> Result<(), Failure> {
    let (json, table, plot) = (
        outputs.report.as_ref(),
        outputs.table_out.as_ref(),
        outputs.plot.as_ref(),
    );
    if let Some(path) = json {
        relume::serve::atomic::write_atomic(path, report.to_json().as_bytes())
            .map_err(|e| io_failure(path, e))?;
        eprintln!("report written to {}", path.display());
    }
    if report.shard.is_some() {
        if table.is_some() || plot.is_some() {
            eprintln!("this is one shard: the table and chart come from `relume merge`");
        }
        return Ok(());
    }
    let comparison = relume::sweep::compare::summarize(report).map_err(Failure::User)?;
    let md = relume::sweep::compare::markdown(&comparison)
        + "\n"
        + &relume::sweep::compare::cost_footnote(&comparison);
    println!("{md}");
    if let Some(path) = table {
        relume::serve::atomic::write_atomic(path, md.as_bytes())
            .map_err(|e| io_failure(path, e))?;
        eprintln!("table written to {}", path.display());
    }
    if let Some(path) = plot {
        let svg = relume::report::plot_comparison(&comparison, report);
        relume::serve::atomic::write_atomic(path, svg.as_bytes())
            .map_err(|e| io_failure(path, e))?;
        eprintln!("chart written to {}", path.display());
    }
    Ok(())
}

fn compare(a: CompareArgs) -> Result<(), Failure> {
    check_outputs(&[
        ("--report", a.outputs.report.as_deref()),
        ("--table", a.outputs.table_out.as_deref()),
        ("--plot", a.outputs.plot.as_deref()),
    ])?;
    if a.activations.is_empty() {
        return Err(Failure::User(
            "--activations needs at least one activation".to_string(),
        ));
    }
    let shard = a
        .shard
        .as_deref()
        .map(|s| relume::sweep::shard::resolve(s, |k| std::env::var(k).ok()))
        .transpose()
        .map_err(Failure::User)?;
    let table = read_table(&a.table, &[])?;
    let spec = a.columns.spec();
    let mut base = Overrides {
        hidden: a.layers.clone(),
        epochs: a.epochs,
        optimizer: a.optimizer,
        ..Overrides::default()
    };
    a.learning.apply(&mut base)?;
    refuse_step_only(&base, table.rows())?;
    let plan = relume::sweep::compare::SweepPlan::grid(
        &a.activations,
        &a.inits,
        &a.lrs,
        a.seeds,
        a.folds,
        base,
    );
    let cells = plan.cells().len();
    eprintln!(
        "{}: {} candidates × {} seeds × {} folds = {cells} runs{}",
        table.source,
        plan.candidates.len(),
        plan.seeds,
        plan.fold_count(),
        shard.as_ref().map_or(String::new(), |s| format!(
            ", shard {}/{} ({})",
            s.index, s.count, s.source
        ))
    );
    let fixed = relume::sweep::compare::cell_recipe(&plan.base, table.rows());
    let regime = fixed.config_for(table.rows());
    eprintln!(
        "settings of the whole table ({} rows), the same in every fold and candidate: {} \
         optimizer, up to {} epochs, L2 {:e}, validation {:.0}%; one network per run",
        table.rows(),
        regime.optimizer.name(),
        regime.epochs,
        regime.objective.penalty.l2,
        100.0 * regime.val_frac
    );
    let slice = shard.map(|s| (s.index, s.count));
    let mut report = relume::sweep::compare::run(&table, &spec, &plan, slice)?;
    report.invocation = Some(relume::sweep::shard::Invocation::current());
    write_outputs(&report, &a.outputs)?;
    eprintln!("\n{CAUTIONS}");
    Ok(())
}

fn merge(a: MergeArgs) -> Result<(), Failure> {
    let mut parts = Vec::new();
    for path in &a.reports {
        let text = std::fs::read_to_string(path).map_err(|e| io_failure(path, e))?;
        parts.push(
            relume::sweep::compare::SweepReport::from_json(&text)
                .map_err(|e| Failure::User(format!("{}: {e}", path.display())))?,
        );
    }
    let merged = relume::sweep::compare::merge(&parts).map_err(|e| Failure::User(e.to_string()))?;
    write_outputs(&merged, &a.outputs)
}

fn cost(a: CostArgs) -> Result<(), Failure> {
    use relume::report::cost_svg;
    use relume::sweep::{compare, cost};
    let outputs = [
        ("--report", a.report.as_deref()),
        ("--table", a.table_out.as_deref()),
        ("--plot", a.plot.as_deref()),
    ];
    check_outputs(&outputs)?;
    let user = |e: String| Failure::User(e);
    let accuracy = match &a.accuracy {
        Some(path) => {
            let text = std::fs::read_to_string(path).map_err(|e| io_failure(path, e))?;
            let at = |e: String| Failure::User(format!("{}: {e}", path.display()));
            let sweep = compare::SweepReport::from_json(&text).map_err(at)?;
            let summary = compare::summarize(&sweep).map_err(at)?;
            Some((sweep, summary))
        }
        None => None,
    };
    let model = match (&a.model, a.inputs, &a.layers) {
        (Some(path), _, _) => Model::load(path)?,
        (None, Some(n), Some(layers)) => {
            cost::model_for_inputs(n, layers, 0).map_err(|e| user(e.to_string()))?
        }
        _ => return Err(user("give --model, or --inputs with --layers".into())),
    };
    let options = cost::CostOptions {
        batch: a.batch,
        predict_rows: a.predict_rows,
        rounds: a.rounds,
        ..cost::CostOptions::default()
    };
    eprintln!(
        "timing {} on {}, {} rounds (keep the machine otherwise idle)",
        cost::describe_architecture(&model),
        cost::cpu_name(),
        a.rounds
    );
    let report =
        cost::measure(&model, &a.activations, &options).map_err(|e| user(e.to_string()))?;
    let mut md = cost_svg::cost_markdown(&report);
    let svg = match &accuracy {
        Some((sweep, summary)) => {
            let (pairs, missing) = cost::pair_with_accuracy(&report, summary, sweep);
            md += &format!("\n{}", cost_svg::accuracy_cost_markdown(&pairs, &missing));
            cost_svg::plot_accuracy_cost(&pairs, &report)
        }
        None => cost_svg::plot_cost(&report),
    };
    println!("{md}");
    for ((option, path), text) in outputs.iter().zip([report.to_json(), md, svg]) {
        if let Some(path) = path {
            relume::serve::atomic::write_atomic(path, text.as_bytes())
                .map_err(|e| io_failure(path, e))?;
            eprintln!("{} written to {}", &option[2..], path.display());
        }
    }
    Ok(())
}
