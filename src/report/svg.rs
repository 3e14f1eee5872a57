//! A self-contained SVG chart of a run: training and validation loss over epochs (linear or
//! log scale) above the dead-unit fraction of each hidden layer. Written by hand so that it
//! needs no font files; text is left to the viewer's default sans-serif font.

use super::RunReport;
use std::fmt::Write as _;

/// Chart settings.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlotOptions {
    /// Log-scale loss axis.
    pub log_loss: bool,
    /// Width in pixels.
    pub width: f64,
    /// Height in pixels.
    pub height: f64,
}

impl Default for PlotOptions {
    fn default() -> Self {
        PlotOptions {
            log_loss: true,
            width: 820.0,
            height: 600.0,
        }
    }
}

pub(super) const TRAIN_COLOUR: &str = "#1b6ca8";
pub(super) const VAL_COLOUR: &str = "#c8553d";
const LAYER_COLOURS: [&str; 6] = [
    "#2a9d8f", "#7b2cbf", "#e9a23b", "#6c757d", "#bc4b51", "#3d5a80",
];

/// One panel: a rectangle in the picture and the data range it shows.
struct Panel {
    left: f64,
    top: f64,
    width: f64,
    height: f64,
    x_max: f64,
    y_min: f64,
    y_max: f64,
    log: bool,
}

impl Panel {
    fn x(&self, epoch: f64) -> f64 {
        self.left + self.width * epoch / self.x_max.max(1.0)
    }

    fn y(&self, v: f64) -> f64 {
        let (v, lo, hi) = if self.log {
            (
                v.max(1e-300).log10(),
                self.y_min.log10(),
                self.y_max.log10(),
            )
        } else {
            (v, self.y_min, self.y_max)
        };
        let t = if hi > lo { (v - lo) / (hi - lo) } else { 0.5 };
        self.top + self.height * (1.0 - t.clamp(0.0, 1.0))
    }

    fn frame(&self, svg: &mut String, title: &str, y_label: &str) {
        let _ = writeln!(
            svg,
            r##"<rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="#fbfbfb" stroke="#999"/>"##,
            self.left, self.top, self.width, self.height
        );
        let _ = writeln!(
            svg,
            r#"<text x="{:.1}" y="{:.1}" font-size="15" font-weight="bold">{title}</text>"#,
            self.left,
            self.top - 10.0
        );
        let _ = writeln!(
            svg,
            r#"<text transform="translate({:.1},{:.1}) rotate(-90)" font-size="12" text-anchor="middle">{y_label}</text>"#,
            self.left - 58.0,
            self.top + self.height / 2.0
        );
        for tick in ticks(self.y_min, self.y_max, self.log) {
            let y = self.y(tick);
            let _ = writeln!(
                svg,
                r##"<line x1="{:.1}" x2="{:.1}" y1="{y:.1}" y2="{y:.1}" stroke="#e3e3e3"/><text x="{:.1}" y="{:.1}" font-size="11" text-anchor="end">{}</text>"##,
                self.left,
                self.left + self.width,
                self.left - 6.0,
                y + 4.0,
                label(tick)
            );
        }
        for tick in ticks(0.0, self.x_max.max(1.0), false) {
            let x = self.x(tick);
            let _ = writeln!(
                svg,
                r#"<text x="{x:.1}" y="{:.1}" font-size="11" text-anchor="middle">{}</text>"#,
                self.top + self.height + 16.0,
                label(tick)
            );
        }
    }

    fn line(&self, svg: &mut String, points: &[(f64, f64)], colour: &str, dashed: bool) {
        let finite: Vec<String> = points
            .iter()
            .filter(|(_, v)| v.is_finite() && (!self.log || *v > 0.0))
            .map(|&(e, v)| format!("{:.1},{:.1}", self.x(e), self.y(v)))
            .collect();
        if finite.is_empty() {
            return;
        }
        let dash = if dashed {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        let _ = writeln!(
            svg,
            r#"<polyline fill="none" stroke="{colour}" stroke-width="2"{dash} points="{}"/>"#,
            finite.join(" ")
        );
    }
}

/// About five round tick values covering [lo, hi] (powers of ten on a log axis).
pub(super) fn ticks(lo: f64, hi: f64, log: bool) -> Vec<f64> {
    if log {
        let (a, b) = (lo.log10().floor() as i32, hi.log10().ceil() as i32);
        return (a..=b)
            .map(|e| 10f64.powi(e))
            .filter(|t| *t >= lo * 0.999 && *t <= hi * 1.001)
            .collect();
    }
    let span = (hi - lo).max(1e-12);
    let raw = span / 5.0;
    let magnitude = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * magnitude)
        .find(|s| span / s <= 6.0)
        .unwrap_or(magnitude * 10.0);
    let mut t = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while t <= hi + 1e-9 * step {
        out.push(t);
        t += step;
    }
    out
}

pub(super) fn label(v: f64) -> String {
    if v != 0.0 && (v.abs() < 1e-2 || v.abs() >= 1e4) {
        format!("{v:.0e}")
    } else if v.fract() == 0.0 {
        format!("{v:.0}")
    } else {
        format!("{v:.2}")
    }
}

/// The legend name of hidden layer `k`: its number and activation.
fn layer_name(report: &RunReport, k: usize) -> String {
    report
        .epochs
        .iter()
        .find_map(|e| e.layers.get(k))
        .map_or_else(
            || format!("hidden layer {}", k + 1),
            |l| format!("hidden layer {} ({})", k + 1, l.activation),
        )
}

fn legend(svg: &mut String, x: f64, y: f64, entries: &[(String, &str, bool)]) {
    for (i, (name, colour, dashed)) in entries.iter().enumerate() {
        let yy = y + 18.0 * i as f64;
        let dash = if *dashed {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        let _ = writeln!(
            svg,
            r#"<line x1="{x:.1}" x2="{:.1}" y1="{yy:.1}" y2="{yy:.1}" stroke="{colour}" stroke-width="2"{dash}/><text x="{:.1}" y="{:.1}" font-size="12">{name}</text>"#,
            x + 24.0,
            x + 30.0,
            yy + 4.0
        );
    }
}

/// The SVG text of the chart for `report`.
pub fn plot_run(report: &RunReport, options: PlotOptions) -> String {
    let (w, h) = (options.width, options.height);
    let epochs = report.epochs.len().max(2) as f64 - 1.0;
    let losses: Vec<f64> = report
        .epochs
        .iter()
        .flat_map(|e| std::iter::once(e.train_loss).chain(e.val_loss))
        .filter(|v| v.is_finite() && (!options.log_loss || *v > 0.0))
        .collect();
    let (mut lo, mut hi) = losses
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        (lo, hi) = (1e-3, 1.0);
    }
    if options.log_loss {
        (lo, hi) = (
            10f64.powf(lo.log10().floor()),
            10f64.powf(hi.log10().ceil()),
        );
    } else {
        lo = lo.min(0.0);
    }
    let left = 80.0;
    // Room on the right for the longest legend entry (a layer with a parametrized activation
    // can be long), at about 6.6 px per character of 12 px sans-serif text.
    let longest = (0..report
        .epochs
        .iter()
        .map(|e| e.layers.len())
        .max()
        .unwrap_or(0))
        .map(|k| layer_name(report, k).chars().count())
        .max()
        .unwrap_or(0)
        .max("validation".len());
    let plot_w = w - left - (60.0 + 6.6 * longest as f64).max(170.0);
    let loss = Panel {
        left,
        top: 50.0,
        width: plot_w,
        height: h * 0.5 - 60.0,
        x_max: epochs,
        y_min: lo,
        y_max: hi,
        log: options.log_loss,
    };
    let dead = Panel {
        left,
        top: h * 0.5 + 40.0,
        width: plot_w,
        height: h * 0.5 - 90.0,
        x_max: epochs,
        y_min: 0.0,
        y_max: 1.0,
        log: false,
    };
    let mut svg = String::new();
    let _ = writeln!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif">"#
    );
    let _ = writeln!(svg, r#"<rect width="{w}" height="{h}" fill="white"/>"#);
    let scale = if options.log_loss {
        "log scale"
    } else {
        "linear"
    };
    // The loss is computed on standardized targets (z-scores of the training rows).
    loss.frame(
        &mut svg,
        "Loss per epoch (on the standardized target)",
        &format!("loss, target in sd units ({scale})"),
    );
    let train: Vec<(f64, f64)> = report
        .epochs
        .iter()
        .map(|e| (e.epoch as f64, e.train_loss))
        .collect();
    let val: Vec<(f64, f64)> = report
        .epochs
        .iter()
        .filter_map(|e| e.val_loss.map(|v| (e.epoch as f64, v)))
        .collect();
    loss.line(&mut svg, &train, TRAIN_COLOUR, false);
    loss.line(&mut svg, &val, VAL_COLOUR, true);
    let mut entries = vec![("training".to_string(), TRAIN_COLOUR, false)];
    if !val.is_empty() {
        entries.push(("validation".to_string(), VAL_COLOUR, true));
    }
    legend(&mut svg, left + plot_w + 20.0, loss.top + 10.0, &entries);
    let best_x = loss.x(report.final_metrics.best_epoch as f64);
    // Label on the side of the marker with more room.
    let (label_x, anchor) = if best_x > loss.left + 0.7 * loss.width {
        (best_x - 4.0, "end")
    } else {
        (best_x + 4.0, "start")
    };
    let _ = writeln!(
        svg,
        r##"<line x1="{best_x:.1}" x2="{best_x:.1}" y1="{:.1}" y2="{:.1}" stroke="#444" stroke-dasharray="2 3"/><text x="{label_x:.1}" y="{:.1}" font-size="11" text-anchor="{anchor}">best epoch {}</text>"##,
        loss.top,
        loss.top + loss.height,
        loss.top + 14.0,
        report.final_metrics.best_epoch
    );

    let cuts: Vec<usize> = report.rate_changes.iter().map(|c| c.epoch).collect();
    event_marks(&mut svg, &loss, &cuts, "#8a5a00", "rate changed");

    dead.frame(&mut svg, "Dead units per hidden layer", "fraction dead");
    let revived: Vec<usize> = report.revivals.iter().map(|r| r.epoch).collect();
    event_marks(&mut svg, &dead, &revived, "#2a7f62", "units revived");
    let layer_count = report
        .epochs
        .iter()
        .map(|e| e.layers.len())
        .max()
        .unwrap_or(0);
    let mut layer_entries = Vec::new();
    for k in 0..layer_count {
        let colour = LAYER_COLOURS[k % LAYER_COLOURS.len()];
        let points: Vec<(f64, f64)> = report
            .epochs
            .iter()
            .filter_map(|e| e.layers.get(k).map(|l| (e.epoch as f64, l.dead_fraction)))
            .collect();
        dead.line(&mut svg, &points, colour, false);
        layer_entries.push((layer_name(report, k), colour, false));
    }
    if layer_count == 0 {
        let _ = writeln!(
            svg,
            r##"<text x="{:.1}" y="{:.1}" font-size="12" fill="#666">no diagnostics recorded</text>"##,
            dead.left + 12.0,
            dead.top + 24.0
        );
    }
    legend(
        &mut svg,
        left + plot_w + 20.0,
        dead.top + 10.0,
        &layer_entries,
    );
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle">epoch</text>"#,
        left + plot_w / 2.0,
        h - 14.0
    );
    svg.push_str("</svg>\n");
    svg
}

/// Short ticks along the top of `panel` at each of `epochs`, with `label` once beside the
/// first (at most 200 ticks are drawn, evenly spread, so a long run stays light).
fn event_marks(svg: &mut String, panel: &Panel, epochs: &[usize], colour: &str, label: &str) {
    let Some(&first) = epochs.first() else {
        return;
    };
    let stride = epochs.len().div_ceil(200).max(1);
    for &e in epochs.iter().step_by(stride) {
        let x = panel.x(e as f64);
        let _ = writeln!(
            svg,
            r#"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="1.5"/>"#,
            panel.top,
            panel.top + 8.0
        );
    }
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" font-size="10" fill="{colour}">{label} ({})</text>"#,
        panel.x(first as f64) + 3.0,
        panel.top + panel.height - 6.0,
        epochs.len()
    );
}

/// An SVG chart of a comparison: each candidate's validation RMSE per run (dots) with its mean
/// and 95% interval (bar), and its wall time per epoch.
pub fn plot_comparison(
    comparison: &crate::sweep::compare::Comparison,
    report: &crate::sweep::compare::SweepReport,
) -> String {
    let rows = comparison.candidates.len().max(1);
    let (w, row_h) = (860.0, 34.0);
    let h = 90.0 + row_h * rows as f64 + 50.0;
    let (left, mid, right_w) = (170.0, 470.0, 130.0);
    let values: Vec<f64> = report.runs.iter().filter_map(|r| r.val_rmse).collect();
    let (mut lo, mut hi) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        (lo, hi) = (0.0, 1.0);
    }
    let pad = 0.05 * (hi - lo).max(1e-12);
    let rmse = Panel {
        left,
        top: 60.0,
        width: mid,
        height: row_h * rows as f64,
        x_max: 1.0,
        y_min: 0.0,
        y_max: 1.0,
        log: false,
    };
    let x_of = |v: f64| left + mid * (v - (lo - pad)) / ((hi + pad) - (lo - pad));
    let max_time = comparison
        .candidates
        .iter()
        .map(|c| c.seconds_per_epoch)
        .fold(0.0_f64, f64::max)
        .max(1e-12);
    let time_left = left + mid + 40.0;
    let mut svg = String::new();
    let _ = writeln!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif">"#
    );
    let _ = writeln!(svg, r#"<rect width="{w}" height="{h}" fill="white"/>"#);
    let _ = writeln!(
        svg,
        r#"<text x="{left}" y="30" font-size="15" font-weight="bold">Validation RMSE per run (dots), mean and 95% CI (bar)</text><text x="{time_left}" y="30" font-size="15" font-weight="bold">ms per epoch</text>"#
    );
    let _ = writeln!(
        svg,
        r##"<rect x="{left}" y="{:.1}" width="{mid}" height="{:.1}" fill="#fbfbfb" stroke="#999"/>"##,
        rmse.top, rmse.height
    );
    for tick in ticks(lo - pad, hi + pad, false) {
        let x = x_of(tick);
        let _ = writeln!(
            svg,
            r##"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="#e3e3e3"/><text x="{x:.1}" y="{:.1}" font-size="11" text-anchor="middle">{}</text>"##,
            rmse.top,
            rmse.top + rmse.height,
            rmse.top + rmse.height + 16.0,
            label(tick)
        );
    }
    for (i, c) in comparison.candidates.iter().enumerate() {
        let y = rmse.top + row_h * (i as f64 + 0.5);
        let colour = if i == comparison.best {
            VAL_COLOUR
        } else {
            TRAIN_COLOUR
        };
        let weight = if i == comparison.best {
            "bold"
        } else {
            "normal"
        };
        let _ = writeln!(
            svg,
            r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="end" font-weight="{weight}">{}</text>"#,
            left - 8.0,
            y + 4.0,
            c.label
        );
        for r in report.runs.iter().filter(|r| r.candidate == i) {
            if let Some(v) = r.val_rmse {
                let _ = writeln!(
                    svg,
                    r#"<circle cx="{:.1}" cy="{y:.1}" r="3.5" fill="{colour}" fill-opacity="0.55"/>"#,
                    x_of(v)
                );
            }
        }
        if c.ci95.0.is_finite() && c.ci95.1.is_finite() {
            let _ = writeln!(
                svg,
                r#"<line x1="{:.1}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="3"/>"#,
                x_of(c.ci95.0),
                x_of(c.ci95.1),
                y + 9.0,
                y + 9.0
            );
        }
        if c.mean_rmse.is_finite() {
            let _ = writeln!(
                svg,
                r##"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="#222" stroke-width="2"/>"##,
                y - 9.0,
                y + 12.0,
                x = x_of(c.mean_rmse)
            );
        }
        let bar = right_w * c.seconds_per_epoch / max_time;
        let _ = writeln!(
            svg,
            r##"<rect x="{time_left:.1}" y="{:.1}" width="{bar:.1}" height="14" fill="#9aa5b1"/><text x="{:.1}" y="{:.1}" font-size="11">{:.2}</text>"##,
            y - 7.0,
            time_left + bar + 4.0,
            y + 4.0,
            1000.0 * c.seconds_per_epoch
        );
    }
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle">validation RMSE (target units); best in bold</text>"#,
        left + mid / 2.0,
        h - 14.0
    );
    svg.push_str("</svg>\n");
    svg
}
