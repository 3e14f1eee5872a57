//! The run report: configuration, data shape, per-epoch losses and layer diagnostics,
//! warnings and final metrics, as JSON; and an SVG chart of it.
//!
//! Field names of the per-epoch entries (`epoch`, `train_loss`, `val_loss`, `lr`, `layers`, and
//! per layer `dead_fraction`, `zero_fraction`, `dormant_fraction`, `grad_norm`) are read by
//! outside tools: keep them.

pub mod cost_svg;
mod explain_svg;
mod svg;

pub use explain_svg::plot_explanation;
pub use svg::{plot_comparison, plot_run, PlotOptions};

use crate::fit::monitor::{LayerStats, Monitor, TensorHealth, Warning};
use crate::fit::train::{Rollback, StopReason, TrainConfig, TrainSummary};
use crate::kernels::scalar::Scalar;
use crate::nn::layer::LayerSpec;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Name in the `format` field of every run report.
pub const REPORT_FORMAT: &str = "relume-run-report";
/// Version of the run report layout.
pub const REPORT_VERSION: u32 = 1;

/// Rows and columns the run trained on.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DataShape {
    /// Training rows.
    pub train_rows: usize,
    /// Validation rows.
    pub val_rows: usize,
    /// Input columns (as the network sees them).
    pub inputs: usize,
    /// Target columns.
    pub outputs: usize,
}

/// One epoch of the report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochEntry {
    /// Epoch index from 0.
    pub epoch: usize,
    /// Mean training loss (scaled target units).
    pub train_loss: f64,
    /// Validation loss, if any.
    pub val_loss: Option<f64>,
    /// Learning rate.
    pub lr: f64,
    /// Mean global gradient norm over the epoch's steps.
    pub grad_norm: f64,
    /// One entry per hidden layer (empty without a monitor).
    pub layers: Vec<LayerStats>,
    /// Gradient norm and update ratio of every parameter tensor (empty without a monitor).
    pub tensors: Vec<TensorHealth>,
}

/// How the run ended.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FinalMetrics {
    /// Epochs run.
    pub epochs_run: usize,
    /// Epoch whose weights were kept.
    pub best_epoch: usize,
    /// Validation loss of the kept weights.
    pub best_val_loss: Option<f64>,
    /// Training loss of the last epoch.
    pub last_train_loss: Option<f64>,
    /// Why training stopped.
    pub stop: StopReason,
    /// Extra named figures (e.g. validation RMSE in target units), added by the caller.
    pub extra: Vec<(String, f64)>,
}

/// Everything about one training run.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RunReport {
    /// Always [`REPORT_FORMAT`].
    pub format: String,
    /// [`REPORT_VERSION`] at writing.
    pub version: u32,
    /// Seed of the network initialization.
    pub seed: u64,
    /// The training settings.
    pub config: TrainConfig,
    /// The network's layers.
    pub network: Vec<LayerSpec>,
    /// Data shape.
    pub data: DataShape,
    /// One entry per epoch.
    pub epochs: Vec<EpochEntry>,
    /// Diagnostics warnings, in order.
    pub warnings: Vec<Warning>,
    /// Roll-backs of the divergence guard.
    pub rollbacks: Vec<Rollback>,
    /// How it ended.
    pub final_metrics: FinalMetrics,
    /// What became of each table column ("name: what"), when trained from a table.
    #[serde(default)]
    pub columns: Vec<String>,
    /// Warnings about the data (likely leaks, a skewed target, pooled levels, empty targets).
    #[serde(default)]
    pub data_warnings: Vec<String>,
    /// Epochs at which the learning rate has moved by more than [`RATE_CHANGE_SHOWN`] from
    /// the rate last listed (a schedule step, a plateau cut, a guard cut, or a gradual
    /// schedule's progress), with the new rate.
    #[serde(default)]
    pub rate_changes: Vec<RateChange>,
    /// Epochs at whose end units were revived, with how many (all hidden layers together).
    #[serde(default)]
    pub revivals: Vec<RevivalEvent>,
}

/// Relative change of the learning rate that [`RunReport::rate_changes`] lists (a gradual
/// schedule such as cosine is listed each time it has moved this far).
pub const RATE_CHANGE_SHOWN: f64 = 0.1;

/// A change of the learning rate between two epochs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RateChange {
    /// The first epoch trained at the new rate.
    pub epoch: usize,
    /// The new rate.
    pub lr: f64,
}

/// Units revived at the end of one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RevivalEvent {
    /// The epoch at whose end the units were revived.
    pub epoch: usize,
    /// Units revived, over every hidden layer.
    pub units: usize,
}

impl RunReport {
    /// Assembles a report from a finished run and, if it was watched, its monitor.
    pub fn new<F: Scalar>(
        seed: u64,
        config: &TrainConfig,
        network: Vec<LayerSpec>,
        data: DataShape,
        summary: &TrainSummary,
        monitor: Option<&Monitor<F>>,
    ) -> Self {
        let epochs = summary
            .history
            .iter()
            .enumerate()
            .map(|(i, e)| {
                let diagnostics = monitor.and_then(|m| m.epochs.get(i));
                EpochEntry {
                    epoch: e.epoch,
                    train_loss: e.train_loss,
                    val_loss: e.val_loss,
                    lr: e.lr,
                    grad_norm: e.grad_norm_mean,
                    layers: diagnostics.map(|d| d.layers.clone()).unwrap_or_default(),
                    tensors: diagnostics.map(|d| d.tensors.clone()).unwrap_or_default(),
                }
            })
            .collect();
        RunReport {
            format: REPORT_FORMAT.to_string(),
            version: REPORT_VERSION,
            seed,
            config: config.clone(),
            network,
            data,
            epochs,
            warnings: monitor.map(|m| m.warnings.clone()).unwrap_or_default(),
            rollbacks: summary.rollbacks.clone(),
            final_metrics: FinalMetrics {
                epochs_run: summary.history.len(),
                best_epoch: summary.best_epoch,
                best_val_loss: summary.best_val_loss,
                last_train_loss: summary.history.last().map(|e| e.train_loss),
                stop: summary.stop,
                extra: Vec::new(),
            },
            columns: Vec::new(),
            data_warnings: Vec::new(),
            rate_changes: Vec::new(),
            revivals: Vec::new(),
        }
        .with_events()
    }

    /// Fills `rate_changes` and `revivals` from the per-epoch entries.
    fn with_events(mut self) -> Self {
        self.rate_changes.clear();
        let mut reference = self.epochs.first().map(|e| e.lr);
        for e in self.epochs.iter().skip(1) {
            if reference.is_some_and(|r| (e.lr / r - 1.0).abs() > RATE_CHANGE_SHOWN) {
                self.rate_changes.push(RateChange {
                    epoch: e.epoch,
                    lr: e.lr,
                });
                reference = Some(e.lr);
            }
        }
        self.revivals = self
            .epochs
            .iter()
            .map(|e| RevivalEvent {
                epoch: e.epoch,
                units: e.layers.iter().map(|l| l.revived).sum(),
            })
            .filter(|r| r.units > 0)
            .collect();
        self
    }

    /// Pretty-printed JSON. Non-finite numbers (which JSON cannot hold) become null.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a run report always serializes")
    }

    /// Parses a report, checking its format name and version.
    pub fn from_json(text: &str) -> Result<Self, String> {
        let report: RunReport = serde_json::from_str(text).map_err(|e| {
            format!(
                "not a run report: {e} (line {}, column {})",
                e.line(),
                e.column()
            )
        })?;
        if report.format != REPORT_FORMAT {
            return Err(format!(
                "format is '{}', expected '{REPORT_FORMAT}'",
                report.format
            ));
        }
        if report.version > REPORT_VERSION {
            return Err(format!(
                "report version {} is newer than this relume reads ({REPORT_VERSION})",
                report.version
            ));
        }
        Ok(report)
    }

    /// Writes the JSON to `path` atomically.
    pub fn write_json(&self, path: &Path) -> std::io::Result<()> {
        crate::serve::atomic::write_atomic(path, self.to_json().as_bytes())
    }
}
