//! A trained model with its preprocessing, trained from a table, saved as one versioned file.
//!
//! The file is JSON: `{"format": "relume-model", "version": 1, ...}` holding the encoder, the
//! input and target scaling, the layers, the parameters (as f64, exact for f32 weights), the
//! input ranges seen in training (inside the encoder) and a training summary. Saving is atomic.
//! Loading checks everything and bounds every size before anything is allocated.

use crate::data::{DataError, Encoder, EncoderSpec, FeatureEncoding, Table};
use crate::fit::ensemble::fit_ensemble_scaled;
use crate::fit::monitor::MonitorConfig;
use crate::fit::recipe::Recipe;
use crate::fit::scale::Standardizer;
use crate::fit::train::{StopReason, TrainError};
use crate::nn::layer::LayerSpec;
use crate::nn::loss::Loss;
use crate::nn::network::Network;
use crate::report::RunReport;
use crate::serve::interval::Conformal;
use crate::serve::metrics::Metrics;
use serde::{Deserialize, Serialize};
use std::path::Path;
use thiserror::Error;

/// Name in the `format` field of every model file.
pub const MODEL_FORMAT: &str = "relume-model";
/// Version of the model file layout this library writes (3: numeric features may hold their
/// values within bounds, which an older reader would ignore, so it must refuse the file).
pub const MODEL_VERSION: u32 = 3;
/// Oldest model file version this library reads (version 1 files load with today's defaults
/// for what they lack: no pooled or missing levels, no was-missing inputs).
pub const OLDEST_MODEL_VERSION: u32 = 1;
/// Largest model file read, in bytes.
pub const MAX_MODEL_BYTES: u64 = 1 << 30;
/// Largest width of any layer in a model file.
pub const MAX_WIDTH: usize = 1 << 16;
/// Largest number of parameters in a model file.
pub const MAX_PARAMS: usize = 1 << 27;
/// Most layers in a model file.
pub const MAX_LAYERS: usize = 1024;
/// Most ensemble members in a model file.
pub const MAX_MEMBERS: usize = 256;

/// Splits the validation rows into early-stopping rows and calibration rows (seeded halves;
/// fewer than [`MIN_CALIBRATION_ROWS`] rows all go to early stopping).
fn split_validation(val_rows: &[usize], seed: u64) -> (Vec<usize>, Vec<usize>) {
    if val_rows.len() < 2 * MIN_CALIBRATION_ROWS {
        return (val_rows.to_vec(), Vec::new());
    }
    let (stop, cal) = crate::fit::train::holdout_indices(
        val_rows.len(),
        val_rows.len() / 2,
        seed ^ CALIBRATION_SALT,
    );
    (
        stop.iter().map(|&i| val_rows[i]).collect(),
        cal.iter().map(|&i| val_rows[i]).collect(),
    )
}

/// The rows of `0..n` not in `taken`.
fn complement(n: usize, taken: &[usize]) -> Vec<usize> {
    let mut out = vec![true; n];
    for &r in taken {
        out[r] = false;
    }
    (0..n).filter(|&r| out[r]).collect()
}

/// Validation sets smaller than twice this are not split for calibration.
pub const MIN_CALIBRATION_ROWS: usize = 10;
const CALIBRATION_SALT: u64 = 0x6361_6c69_6272_6174;

/// How training went, as kept in the model file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ModelSummary {
    /// Training rows.
    pub train_rows: usize,
    /// Validation rows.
    pub val_rows: usize,
    /// Epochs run.
    pub epochs_run: usize,
    /// Epoch whose weights were kept.
    pub best_epoch: usize,
    /// Why training stopped.
    pub stop: StopReason,
    /// Validation metrics in target units, if there was a validation split.
    pub validation: Option<Metrics>,
    /// Dead-unit fraction of each hidden layer at the end (from the monitor's probe).
    pub dead_fractions: Vec<f64>,
    /// Rows left out because their target was empty.
    #[serde(default)]
    pub empty_targets: usize,
    /// File lines of the first of those rows.
    #[serde(default)]
    pub empty_target_lines: Vec<u64>,
    /// Each ensemble member's seed, epochs and score on the calibration rows.
    #[serde(default)]
    pub members: Vec<MemberSummary>,
    /// L2 strength on weights the members were trained with.
    #[serde(default)]
    pub l2: Option<f64>,
    /// (L2 strength, best early-stopping loss) of each grid point, when it was chosen on the
    /// data.
    #[serde(default)]
    pub penalty_grid: Vec<(f64, Option<f64>)>,
    /// Rows that calibrated the prediction interval and gave the validation metrics (never
    /// used for fitting, early stopping or the penalty choice).
    #[serde(default)]
    pub calibration_rows: usize,
    /// What a careful analyst would say about the result (few rows, more inputs than rows, a
    /// validation R² below 0).
    #[serde(default)]
    pub warnings: Vec<String>,
    /// The training loss; a quantile loss means the model predicts that quantile (files
    /// written before the loss was recorded trained with MSE).
    #[serde(default = "mse")]
    pub loss: Loss,
}

fn mse() -> Loss {
    Loss::Mse
}

/// Fewer training rows than this get a warning. Common practice, no source: below a few
/// dozen rows a validation score says little and a network is rarely better than a line.
pub const FEW_TRAINING_ROWS: usize = 50;

/// Warnings about a finished fit (the R² one only when `validation` is given).
fn result_warnings(train_rows: usize, inputs: usize, validation: Option<&Metrics>) -> Vec<String> {
    let mut out = Vec::new();
    if train_rows < FEW_TRAINING_ROWS {
        out.push(format!(
            "only {train_rows} training rows (fewer than {FEW_TRAINING_ROWS}): the model and \
             its validation score are unreliable"
        ));
    }
    if inputs > train_rows {
        out.push(format!(
            "{inputs} inputs for {train_rows} training rows: more inputs than rows invites \
             overfitting; leave columns out or gather more rows"
        ));
    }
    if let Some(v) = validation.filter(|v| v.r2 < 0.0) {
        out.push(format!(
            "the validation R² is {:.3}: the model predicts worse than the mean of the target \
             would; do not use it as it is",
            v.r2
        ));
    }
    out
}

/// How one ensemble member trained.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MemberSummary {
    /// Seed of its initialization and shuffling.
    pub seed: u64,
    /// Epochs run.
    pub epochs_run: usize,
    /// Epoch whose weights were kept.
    pub best_epoch: usize,
    /// RMSE on the calibration rows, in target units.
    pub rmse: Option<f64>,
}

/// Lines of rows with an empty target listed at most.
pub const EMPTY_TARGET_LINES_SHOWN: usize = 5;

/// A trained model: encoder, scaling, the ensemble's networks, the prediction interval and
/// the summary.
#[derive(Debug, Clone)]
pub struct Model {
    /// Column encoding (with the training ranges of numeric inputs).
    pub encoder: Encoder,
    /// Scaling of the encoded inputs.
    pub inputs: Standardizer,
    /// Scaling of the (possibly log) target.
    pub target: Standardizer,
    /// The ensemble's networks on scaled values (at least one); predictions average them.
    pub members: Vec<Network<f32>>,
    /// Split-conformal interval, when there were enough calibration rows.
    pub interval: Option<Conformal>,
    /// How training went.
    pub summary: ModelSummary,
}

/// Why a model file could not be written or read.
#[derive(Debug, Clone, PartialEq, Error)]
#[error("model file {path}: {message}")]
pub struct ModelError {
    /// The file.
    pub path: String,
    /// What is wrong.
    pub message: String,
}

/// Why training from a table failed.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FitError {
    /// The table cannot be encoded.
    #[error(transparent)]
    Data(#[from] DataError),
    /// Training failed.
    #[error(transparent)]
    Train(#[from] TrainError),
    /// The model asked for could not be saved or loaded (too large, too wide).
    #[error("{0}")]
    Size(String),
}

/// A table encoded for training ([`Model::prepare`]): the fitted encoder (with what became of
/// every column, and the data warnings), the encoded rows and the validation rows.
#[derive(Clone, Debug)]
pub struct Prepared {
    /// The encoder, fitted as [`Encoder::fit`] says.
    pub encoder: Encoder,
    /// Encoded inputs, one row per table row with a target.
    pub x: ndarray::Array2<f32>,
    /// The target as the network models it.
    pub y: ndarray::Array2<f32>,
    /// Rows (of `x`) held out for validation.
    pub val_rows: Vec<usize>,
    /// Rows left out because their target was empty: how many, and the first lines.
    pub empty_targets: (usize, Vec<u64>),
}

/// The on-disk layout.
#[derive(Serialize, Deserialize)]
struct ModelFile {
    format: String,
    version: u32,
    library: String,
    encoder: Encoder,
    input_scaling: Standardizer,
    target_scaling: Standardizer,
    input_width: usize,
    /// The single network of a version-1 file.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    layers: Vec<LayerSpec>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    parameters: Vec<f64>,
    /// The ensemble's networks (version 2).
    #[serde(default)]
    members: Vec<MemberFile>,
    #[serde(default)]
    interval: Option<Conformal>,
    summary: ModelSummary,
}

/// One network in the file.
#[derive(Serialize, Deserialize)]
struct MemberFile {
    layers: Vec<LayerSpec>,
    parameters: Vec<f64>,
}

impl Model {
    /// Trains on `table` with `recipe`: the encoder is fitted on the recipe's training rows
    /// only, the ensemble early-stops on half of the validation rows and the other half
    /// calibrates the interval and gives the validation metrics (in target units). The first
    /// member's run is watched by a monitor whose report is returned.
    pub fn fit(
        table: &Table,
        spec: &EncoderSpec,
        recipe: &Recipe,
        monitor: MonitorConfig,
    ) -> Result<(Model, RunReport), FitError> {
        let prepared = Model::prepare(table, spec, recipe)?;
        Model::fit_prepared(prepared, recipe, monitor, &|_, _| {})
    }

    /// Leaves out the rows with an empty target, then fits the encoder (levels from every
    /// remaining row, statistics from the recipe's training rows) and encodes the table.
    pub fn prepare(
        table: &Table,
        spec: &EncoderSpec,
        recipe: &Recipe,
    ) -> Result<Prepared, FitError> {
        let (table, empty_targets) = with_targets(table, &spec.target)?;
        let table = table.as_ref();
        let (train_rows, val_rows) = recipe.split(table.rows())?;
        let encoder = Encoder::fit(table, spec, &train_rows)?;
        let x = encoder.encode_inputs::<f32>(table, None)?;
        let y = encoder.encode_target(table, None)?.mapv(|v| v as f32);
        Ok(Prepared {
            encoder,
            x,
            y,
            val_rows,
            empty_targets,
        })
    }

    /// Trains on a prepared table (see [`Model::fit`]); `done` hears (runs done, runs in
    /// all) as the ensemble's runs finish.
    pub fn fit_prepared(
        prepared: Prepared,
        recipe: &Recipe,
        monitor: MonitorConfig,
        done: &(dyn Fn(usize, usize) + Sync),
    ) -> Result<(Model, RunReport), FitError> {
        let Prepared {
            encoder,
            x,
            y,
            val_rows,
            empty_targets,
        } = prepared;
        check_trainable(recipe, x.nrows(), x.ncols()).map_err(FitError::Size)?;
        let (stop_rows, calibration) = split_validation(&val_rows, recipe.seed);
        let train_rows = complement(x.nrows(), &val_rows);
        let (table_rows, width) = x.dim();
        // The members share the encoded table, scaled in place (no second copy); the
        // calibration rows are kept unscaled first.
        let xc = x.select(ndarray::Axis(0), &calibration);
        let rows = recipe.scale_owned(x, y.clone(), &train_rows, &stop_rows)?;
        let ensemble = fit_ensemble_scaled(recipe, &rows, monitor, done)?;
        drop(rows);
        let mut report = ensemble.report;
        report.columns = encoder
            .columns
            .iter()
            .map(|c| format!("{}: {}", c.name, c.what))
            .collect();
        report.data_warnings = encoder.warnings.clone();
        if empty_targets.0 > 0 {
            report.data_warnings.push(format!(
                "{} rows with an empty target were left out (first lines: {:?})",
                empty_targets.0, empty_targets.1
            ));
        }
        let mut members = ensemble.members;
        // Predictions on the calibration rows, per member, on the network's target scale.
        let per_member: Vec<Vec<f64>> = members
            .iter_mut()
            .map(|m| {
                m.predict(xc.view())
                    .expect("encoded widths match")
                    .iter()
                    .map(|&p| f64::from(p))
                    .collect()
            })
            .collect();
        let truth: Vec<f64> = calibration.iter().map(|&r| f64::from(y[(r, 0)])).collect();
        let average: Vec<f64> = (0..calibration.len())
            .map(|i| per_member.iter().map(|p| p[i]).sum::<f64>() / per_member.len() as f64)
            .collect();
        let residuals: Vec<f64> = average.iter().zip(&truth).map(|(p, t)| t - p).collect();
        let interval = Conformal::calibrate(&residuals, recipe.coverage);
        let decode =
            |v: &[f64]| -> Vec<f64> { v.iter().map(|&p| encoder.decode_target(p)).collect() };
        let validation =
            (!calibration.is_empty()).then(|| Metrics::compute(&decode(&average), &decode(&truth)));
        let member_summaries = members
            .iter()
            .zip(&per_member)
            .enumerate()
            .map(|(m, (t, p))| MemberSummary {
                seed: recipe.seed.wrapping_add(m as u64),
                epochs_run: t.summary.history.len(),
                best_epoch: t.summary.best_epoch,
                rmse: (!calibration.is_empty())
                    .then(|| Metrics::compute(&decode(p), &decode(&truth)).rmse),
            })
            .collect();
        let dead_fractions = report
            .epochs
            .last()
            .map(|e| e.layers.iter().map(|l| l.dead_fraction).collect())
            .unwrap_or_default();
        let first = &members[0];
        let s = &first.summary;
        let loss = recipe.config_for(table_rows).objective.loss;
        // A quantile model does not aim at the mean, so its R² says nothing about it.
        let mean_like = !matches!(loss, Loss::Quantile { .. });
        let warnings = result_warnings(s.rows.0, width, validation.as_ref().filter(|_| mean_like));
        let summary = ModelSummary {
            train_rows: s.rows.0,
            val_rows: s.rows.1,
            epochs_run: s.history.len(),
            best_epoch: s.best_epoch,
            stop: s.stop,
            validation,
            dead_fractions,
            empty_targets: empty_targets.0,
            empty_target_lines: empty_targets.1,
            members: member_summaries,
            l2: Some(ensemble.l2),
            penalty_grid: ensemble.grid,
            calibration_rows: calibration.len(),
            warnings,
            loss,
        };
        let (inputs, target) = (first.inputs.clone(), first.target.clone());
        Ok((
            Model {
                encoder,
                inputs,
                target,
                members: members.into_iter().map(|t| t.network).collect(),
                interval,
                summary,
            },
            report,
        ))
    }

    /// The model file's JSON text.
    pub fn to_json(&self) -> String {
        let file = ModelFile {
            format: MODEL_FORMAT.to_string(),
            version: MODEL_VERSION,
            library: format!("relume {}", env!("CARGO_PKG_VERSION")),
            encoder: self.encoder.clone(),
            input_scaling: self.inputs.clone(),
            target_scaling: self.target.clone(),
            input_width: self.members[0].input_width(),
            layers: Vec::new(),
            parameters: Vec::new(),
            members: self
                .members
                .iter()
                .map(|n| MemberFile {
                    layers: n.specs(),
                    parameters: n.params().iter().map(|&p| p as f64).collect(),
                })
                .collect(),
            interval: self.interval.clone(),
            summary: self.summary.clone(),
        };
        serde_json::to_string(&file).expect("a model always serializes")
    }

    /// Saves atomically: a crash mid-save leaves the previous file in place.
    pub fn save(&self, path: &Path) -> Result<(), ModelError> {
        crate::serve::atomic::write_atomic(path, self.to_json().as_bytes()).map_err(|e| {
            ModelError {
                path: path.display().to_string(),
                message: format!("cannot save: {e}"),
            }
        })
    }

    /// Loads and validates a model file.
    pub fn load(path: &Path) -> Result<Model, ModelError> {
        let name = path.display().to_string();
        let fail = |message: String| ModelError {
            path: name.clone(),
            message,
        };
        let size = std::fs::metadata(path)
            .map_err(|e| fail(format!("cannot open: {e}")))?
            .len();
        if size > MAX_MODEL_BYTES {
            return Err(fail(format!(
                "{size} bytes is larger than the {MAX_MODEL_BYTES} a model file may have"
            )));
        }
        let text = std::fs::read_to_string(path).map_err(|e| fail(format!("cannot read: {e}")))?;
        Model::from_json(&text).map_err(fail)
    }

    /// Parses and validates a model file's text.
    pub fn from_json(text: &str) -> Result<Model, String> {
        // Check the format and version first, so an old or foreign file gets a clear message
        // rather than a complaint about some field.
        #[derive(Deserialize)]
        struct Header {
            format: Option<String>,
            version: Option<u32>,
        }
        let header: Header = serde_json::from_str(text).map_err(|e| {
            format!(
                "not a model file: {e} (line {}, column {})",
                e.line(),
                e.column()
            )
        })?;
        match header.format.as_deref() {
            Some(MODEL_FORMAT) => {}
            Some(other) => return Err(format!("format is '{other}', not '{MODEL_FORMAT}'")),
            None => return Err(format!("no 'format' field: not a {MODEL_FORMAT} file")),
        }
        match header.version {
            Some(v) if (OLDEST_MODEL_VERSION..=MODEL_VERSION).contains(&v) => {}
            Some(v) => {
                return Err(format!(
                    "version {v} is not supported (this relume reads versions \
                     {OLDEST_MODEL_VERSION} to {MODEL_VERSION}); a newer relume wrote it"
                ))
            }
            None => return Err("no 'version' field".to_string()),
        }
        let mut file: ModelFile = serde_json::from_str(text).map_err(|e| {
            format!(
                "damaged model file: {e} (line {}, column {})",
                e.line(),
                e.column()
            )
        })?;
        if file.members.is_empty() {
            // Version 1: one network at the top level.
            file.members.push(MemberFile {
                layers: std::mem::take(&mut file.layers),
                parameters: std::mem::take(&mut file.parameters),
            });
        }
        if file.members.len() > MAX_MEMBERS {
            return Err(format!(
                "{} ensemble members: at most {MAX_MEMBERS}",
                file.members.len()
            ));
        }
        let mut total = 0usize;
        for (m, member) in file.members.iter().enumerate() {
            total = total
                .checked_add(
                    validate_network(file.input_width, member)
                        .map_err(|e| format!("member {m}: {e}"))?,
                )
                .filter(|&c| c <= MAX_PARAMS)
                .ok_or_else(|| format!("more than {MAX_PARAMS} parameters in all"))?;
        }
        validate(&file)?;
        let mut members = Vec::with_capacity(file.members.len());
        for member in &file.members {
            let mut network = Network::<f32>::from_specs(file.input_width, &member.layers)
                .map_err(|e| format!("invalid layers: {e}"))?;
            for (p, v) in network.params_mut().iter_mut().zip(&member.parameters) {
                *p = *v as f32;
            }
            members.push(network);
        }
        if let Some(interval) = &file.interval {
            interval.validate()?;
        }
        Ok(Model {
            encoder: file.encoder,
            inputs: file.input_scaling,
            target: file.target_scaling,
            members,
            interval: file.interval,
            summary: file.summary,
        })
    }
}

/// Checks one network's sizes (before anything is built), shapes and values; returns its
/// parameter count.
fn validate_network(input_width: usize, file: &MemberFile) -> Result<usize, String> {
    let count = layer_sizes(input_width, &file.layers)?;
    if file.parameters.len() != count {
        return Err(format!(
            "{} parameters stored, but the layers need {count}",
            file.parameters.len()
        ));
    }
    if let Some(i) = file.parameters.iter().position(|p| !p.is_finite()) {
        return Err(format!("parameter {i} is not finite"));
    }
    Ok(count)
}

/// Checks the layer widths and chaining against the loader's bounds (before anything is
/// built); returns the parameter count.
pub fn layer_sizes(input_width: usize, layers: &[LayerSpec]) -> Result<usize, String> {
    if layers.is_empty() || layers.len() > MAX_LAYERS {
        return Err(format!(
            "{} layers: must be 1 to {MAX_LAYERS}",
            layers.len()
        ));
    }
    let check_width = |what: &str, w: usize| {
        if w == 0 || w > MAX_WIDTH {
            Err(format!("{what} is {w}: must be 1 to {MAX_WIDTH}"))
        } else {
            Ok(())
        }
    };
    check_width("input width", input_width)?;
    let mut width = input_width;
    let mut count: usize = 0;
    for (i, layer) in layers.iter().enumerate() {
        let (takes, gives, params) = match *layer {
            LayerSpec::Affine {
                inputs, outputs, ..
            } => {
                check_width(&format!("layer {i} inputs"), inputs)?;
                check_width(&format!("layer {i} outputs"), outputs)?;
                (inputs, outputs, inputs * outputs + outputs)
            }
            LayerSpec::Activation {
                width: w,
                activation,
            } => {
                check_width(&format!("layer {i} width"), w)?;
                activation
                    .validate()
                    .map_err(|e| format!("layer {i}: {e}"))?;
                let slopes = match activation {
                    crate::Activation::Prelu { shared: true, .. } => 1,
                    crate::Activation::Prelu { shared: false, .. } => w,
                    _ => 0,
                };
                (w, w, slopes)
            }
            LayerSpec::Dropout { width: w, .. } => {
                check_width(&format!("layer {i} width"), w)?;
                (w, w, 0)
            }
        };
        if takes != width {
            return Err(format!(
                "layer {i} takes {takes} inputs but receives {width}"
            ));
        }
        width = gives;
        count = count
            .checked_add(params)
            .filter(|&c| c <= MAX_PARAMS)
            .ok_or_else(|| format!("more than {MAX_PARAMS} parameters"))?;
    }
    if width != 1 {
        return Err(format!(
            "the network gives {width} outputs; a model has one target"
        ));
    }
    Ok(count)
}

/// Bytes a parameter takes in the model file at most (an f64 in JSON with its comma).
pub const BYTES_PER_PARAMETER: u64 = 24;

/// Refuses, before anything is allocated, an ensemble the loader would refuse: widths, layer
/// count, members, and the file size its parameters would need.
pub fn check_trainable(recipe: &Recipe, rows: usize, inputs: usize) -> Result<(), String> {
    if let Some((k, &w)) = recipe
        .hidden
        .iter()
        .enumerate()
        .find(|(_, &w)| w == 0 || w > MAX_WIDTH)
    {
        return Err(format!(
            "hidden layer {} would have {w} units (--layers): a model file holds layers of 1 to \
             {MAX_WIDTH} units",
            k + 1
        ));
    }
    let specs = recipe
        .plan(rows, inputs, 1)
        .specs()
        .map_err(|e| e.to_string())?;
    let per_network = layer_sizes(inputs, &specs)?;
    let members = recipe.members.max(1);
    if members > MAX_MEMBERS {
        return Err(format!("{members} ensemble members: at most {MAX_MEMBERS}"));
    }
    let total = per_network.saturating_mul(members);
    let bytes = (total as u64).saturating_mul(BYTES_PER_PARAMETER);
    if total > MAX_PARAMS || bytes > MAX_MODEL_BYTES {
        return Err(format!(
            "{members} networks of {per_network} parameters would need a model file of about \
             {:.1} GB; a model file holds at most {} MB (use fewer or narrower layers, or \
             fewer members)",
            bytes as f64 / 1e9,
            MAX_MODEL_BYTES >> 20
        ));
    }
    Ok(())
}

/// Checks the encoder, the scaling and their widths against the network's input width.
fn validate(file: &ModelFile) -> Result<(), String> {
    if file.encoder.width() != file.input_width || file.input_scaling.width() != file.input_width {
        return Err(format!(
            "the encoder gives {} inputs and the scaling covers {}, but the network takes {}",
            file.encoder.width(),
            file.input_scaling.width(),
            file.input_width
        ));
    }
    if file.target_scaling.width() != 1 {
        return Err("the target scaling must cover one column".to_string());
    }
    for s in [&file.input_scaling, &file.target_scaling] {
        if s.mean.len() != s.sd.len()
            || s.mean.iter().any(|m| !m.is_finite())
            || s.sd.iter().any(|d| !(d.is_finite() && *d > 0.0))
        {
            return Err("scaling means must be finite and deviations finite and > 0".to_string());
        }
    }
    for f in &file.encoder.features {
        if let FeatureEncoding::Number {
            name,
            held: Some((lo, hi)),
            ..
        } = f
        {
            if !(lo.is_finite() && hi.is_finite() && lo <= hi) {
                return Err(format!("feature '{name}': invalid held bounds"));
            }
        }
        match f {
            FeatureEncoding::Number {
                name,
                min,
                max,
                fill,
                ..
            }
            | FeatureEncoding::Date {
                name,
                min,
                max,
                fill,
                ..
            } => {
                if !(min.is_finite() && max.is_finite() && min <= max)
                    || fill.is_some_and(|v| !v.is_finite())
                {
                    return Err(format!("feature '{name}': invalid range or fill value"));
                }
            }
            FeatureEncoding::Category {
                name,
                levels,
                pooled,
                missing_level,
                ..
            } => {
                if levels.is_empty() && pooled.is_none() && !missing_level {
                    return Err(format!("feature '{name}' has no categories"));
                }
            }
        }
    }
    Ok(())
}

/// Rows left out for an empty target: how many, and the first of their lines.
type EmptyTargets = (usize, Vec<u64>);

/// The table without its rows whose target is empty (borrowed when there are none), and how
/// many were left out with the first of their lines.
fn with_targets<'t>(
    table: &'t Table,
    target: &str,
) -> Result<(std::borrow::Cow<'t, Table>, EmptyTargets), DataError> {
    let column = table.column(target)?;
    let crate::data::ColumnData::Number(values) = &column.data else {
        return Err(DataError::Table {
            source_name: table.source.clone(),
            message: format!("the target column '{target}' is not numeric"),
        });
    };
    let empty: Vec<usize> = (0..values.len()).filter(|&r| values[r].is_nan()).collect();
    if empty.is_empty() {
        return Ok((std::borrow::Cow::Borrowed(table), (0, Vec::new())));
    }
    if empty.len() == values.len() {
        return Err(DataError::Table {
            source_name: table.source.clone(),
            message: format!("the target column '{target}' is empty in every row"),
        });
    }
    let lines = empty
        .iter()
        .take(EMPTY_TARGET_LINES_SHOWN)
        .map(|&r| table.lines[r])
        .collect();
    let kept: Vec<usize> = (0..values.len()).filter(|&r| !values[r].is_nan()).collect();
    Ok((
        std::borrow::Cow::Owned(table.select(&kept)),
        (empty.len(), lines),
    ))
}
