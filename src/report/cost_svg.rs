//! The cost report as a Markdown table and an SVG chart (one panel per measure: median time
//! per call as a bar, its 95% interval as a whisker), and the accuracy-against-cost chart:
//! validation RMSE from a comparison against single-row prediction time, one point per
//! candidate, both with their intervals.

use super::svg::{label, ticks, TRAIN_COLOUR, VAL_COLOUR};
use crate::sweep::cost::{AccuracyCost, CostReport, Interval, Measure};
use std::fmt::Write as _;

/// Header lines naming the machine and the method.
fn header(report: &CostReport) -> String {
    format!(
        "CPU: {}; kernels: {}.\nArchitecture: {}; training batch {}, batch prediction {} rows; \
         {} interleaved rounds on one thread.\nClock: {}.\nIntervals: {}.\n",
        report.cpu,
        report.instruction_set,
        report.architecture,
        report.batch,
        report.predict_rows,
        report.rounds,
        report.clock,
        report.interval_method
    )
}

fn title(m: Measure) -> &'static str {
    match m {
        Measure::TrainStep => "training step",
        Measure::BatchPredict => "batch prediction",
        Measure::RowPredict => "single-row prediction",
    }
}

/// "1.23 (1.20 to 1.31)".
fn interval_text(i: Interval) -> String {
    format!("{:.2} ({:.2} to {:.2})", i.median, i.lo, i.hi)
}

/// The cost report as Markdown: the header lines, then per candidate and measure the median
/// µs with its 95% interval and the ratio to ReLU with its interval, and the extra time per
/// activation value of a batch prediction over ReLU's (the unit of `perf_report`'s lines).
pub fn cost_markdown(report: &CostReport) -> String {
    let mut s = header(report);
    s.push('\n');
    s.push_str("| activation |");
    for m in Measure::ALL {
        let _ = write!(s, " {} µs (95% CI) | × ReLU (95% CI) |", title(m));
    }
    s.push_str(" batch prediction: extra ns per activation value |\n|---|");
    s.push_str(&"---|---|".repeat(Measure::ALL.len()));
    s.push_str("---|\n");
    let relu = report.candidates.first().map(|c| c.batch_predict_us);
    for c in &report.candidates {
        let _ = write!(s, "| {} |", c.activation);
        for m in Measure::ALL {
            let _ = write!(
                s,
                " {} | {} |",
                interval_text(c.time(m)),
                interval_text(c.vs_relu(m))
            );
        }
        let extra = relu.map_or(f64::NAN, |r| {
            1e3 * (c.batch_predict_us - r) / report.batch_predict_activations.max(1) as f64
        });
        let _ = writeln!(s, " {extra:.2} |");
    }
    s
}

/// Accuracy beside cost as Markdown; `missing` lists compare candidates with no cost figure.
pub fn accuracy_cost_markdown(pairs: &[AccuracyCost], missing: &[String]) -> String {
    let mut s = String::from(
        "| candidate | validation RMSE (95% CI) | single-row µs (95% CI) | training step µs (95% CI) | cheaper and as accurate? |\n|---|---|---|---|---|\n",
    );
    for p in pairs {
        let _ = writeln!(
            s,
            "| {} | {:.4} ({:.4} to {:.4}) | {} | {} | {} |",
            p.label,
            p.rmse,
            p.rmse_ci95.0,
            p.rmse_ci95.1,
            interval_text(p.row_predict),
            interval_text(p.train_step),
            if frontier(pairs, p) {
                "on the front"
            } else {
                "another is both cheaper and more accurate"
            }
        );
    }
    if !missing.is_empty() {
        let _ = writeln!(s, "\nNot timed: {}.", missing.join(", "));
    }
    s
}

/// Whether no other candidate has both a lower mean RMSE and a lower median row time.
fn frontier(pairs: &[AccuracyCost], p: &AccuracyCost) -> bool {
    !pairs.iter().any(|q| {
        q.rmse < p.rmse && q.row_predict.median < p.row_predict.median && !std::ptr::eq(p, q)
    })
}

fn svg_open(w: f64, h: f64) -> String {
    let mut svg = String::new();
    let _ = writeln!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif">"#
    );
    let _ = writeln!(svg, r#"<rect width="{w}" height="{h}" fill="white"/>"#);
    svg
}

fn escape(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// The cost chart: one panel per measure, a bar per candidate at the median time per call
/// (µs, axis from 0) with its 95% interval as a whisker, ReLU's bar highlighted.
pub fn plot_cost(report: &CostReport) -> String {
    let rows = report.candidates.len().max(1) as f64;
    let (left, panel_w, gap, row_h, top) = (110.0, 230.0, 40.0, 28.0, 70.0);
    let w = left + 3.0 * panel_w + 2.0 * gap + 30.0;
    let h = top + row_h * rows + 80.0;
    let mut svg = svg_open(w, h);
    let _ = writeln!(
        svg,
        r#"<text x="10" y="22" font-size="14" font-weight="bold">Time per call, median and 95% interval (µs), {} interleaved rounds</text><text x="10" y="42" font-size="11">{} · kernels {} · {}</text>"#,
        report.rounds,
        escape(&report.cpu),
        report.instruction_set,
        escape(&report.architecture)
    );
    for (k, m) in Measure::ALL.into_iter().enumerate() {
        let x0 = left + k as f64 * (panel_w + gap);
        let max = report
            .candidates
            .iter()
            .map(|c| c.time(m).hi)
            .filter(|v| v.is_finite())
            .fold(0.0_f64, f64::max)
            .max(1e-9);
        let x_of = |v: f64| x0 + panel_w * (v / max).clamp(0.0, 1.0);
        let _ = writeln!(
            svg,
            r##"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle" font-weight="bold">{}</text><rect x="{x0:.1}" y="{top:.1}" width="{panel_w}" height="{:.1}" fill="#fbfbfb" stroke="#999"/>"##,
            x0 + panel_w / 2.0,
            top - 8.0,
            title(m),
            row_h * rows
        );
        for t in ticks(0.0, max, false) {
            let x = x_of(t);
            let _ = writeln!(
                svg,
                r##"<line x1="{x:.1}" x2="{x:.1}" y1="{top:.1}" y2="{:.1}" stroke="#e3e3e3"/><text x="{x:.1}" y="{:.1}" font-size="10" text-anchor="middle">{}</text>"##,
                top + row_h * rows,
                top + row_h * rows + 14.0,
                label(t)
            );
        }
        for (i, c) in report.candidates.iter().enumerate() {
            let y = top + row_h * (i as f64 + 0.5);
            let t = c.time(m);
            if k == 0 {
                let _ = writeln!(
                    svg,
                    r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="end">{}</text>"#,
                    left - 8.0,
                    y + 4.0,
                    escape(&c.activation)
                );
            }
            let colour = if i == 0 { VAL_COLOUR } else { TRAIN_COLOUR };
            let _ = writeln!(
                svg,
                r##"<rect x="{x0:.1}" y="{:.1}" width="{:.1}" height="12" fill="{colour}" fill-opacity="0.6"/><line x1="{:.1}" x2="{:.1}" y1="{y:.1}" y2="{y:.1}" stroke="#222" stroke-width="1.5"/><line x1="{:.1}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#222"/><line x1="{:.1}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#222"/>"##,
                y - 6.0,
                x_of(t.median) - x0,
                x_of(t.lo),
                x_of(t.hi),
                x_of(t.lo),
                x_of(t.lo),
                y - 5.0,
                y + 5.0,
                x_of(t.hi),
                x_of(t.hi),
                y - 5.0,
                y + 5.0
            );
        }
    }
    let _ = writeln!(
        svg,
        r#"<text x="10" y="{:.1}" font-size="11">ReLU (the reference of the ratios) in red. Clock: {}</text>"#,
        h - 14.0,
        escape(report.clock.split(':').next().unwrap_or(""))
    );
    svg.push_str("</svg>\n");
    svg
}

/// The accuracy-against-cost chart: x = single-row prediction time (µs, median and 95%
/// interval), y = validation RMSE (mean and 95% interval), one labelled point per candidate;
/// candidates that no other beats on both axes (by the central values) are drawn in red.
pub fn plot_accuracy_cost(pairs: &[AccuracyCost], report: &CostReport) -> String {
    let (w, h) = (760.0, 520.0);
    let (left, top, pw, ph) = (90.0, 60.0, 600.0, 380.0);
    let mut svg = svg_open(w, h);
    let finite = |v: &f64| v.is_finite();
    let xs: Vec<f64> = pairs
        .iter()
        .flat_map(|p| [p.row_predict.lo, p.row_predict.hi])
        .filter(finite)
        .collect();
    let ys: Vec<f64> = pairs
        .iter()
        .flat_map(|p| [p.rmse_ci95.0, p.rmse_ci95.1, p.rmse])
        .filter(finite)
        .collect();
    let range = |v: &[f64]| {
        let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        if lo.is_finite() {
            let pad = 0.08 * (hi - lo).max(1e-9 * hi.abs().max(1.0));
            (lo - pad, hi + pad)
        } else {
            (0.0, 1.0)
        }
    };
    let ((x_lo, x_hi), (y_lo, y_hi)) = (range(&xs), range(&ys));
    let x_lo = x_lo.max(0.0);
    let x_of = |v: f64| left + pw * (v - x_lo) / (x_hi - x_lo);
    let y_of = |v: f64| top + ph * (1.0 - (v - y_lo) / (y_hi - y_lo));
    let _ = writeln!(
        svg,
        r##"<text x="10" y="22" font-size="14" font-weight="bold">Accuracy against single-row prediction cost (lower left is better)</text><text x="10" y="42" font-size="11">{} · kernels {} · {}</text><rect x="{left}" y="{top}" width="{pw}" height="{ph}" fill="#fbfbfb" stroke="#999"/>"##,
        escape(&report.cpu),
        report.instruction_set,
        escape(&report.architecture)
    );
    for t in ticks(x_lo, x_hi, false) {
        let x = x_of(t);
        let _ = writeln!(
            svg,
            r##"<line x1="{x:.1}" x2="{x:.1}" y1="{top}" y2="{:.1}" stroke="#e3e3e3"/><text x="{x:.1}" y="{:.1}" font-size="10" text-anchor="middle">{}</text>"##,
            top + ph,
            top + ph + 14.0,
            label(t)
        );
    }
    for t in ticks(y_lo, y_hi, false) {
        let y = y_of(t);
        let _ = writeln!(
            svg,
            r##"<line x1="{left}" x2="{:.1}" y1="{y:.1}" y2="{y:.1}" stroke="#e3e3e3"/><text x="{:.1}" y="{:.1}" font-size="10" text-anchor="end">{}</text>"##,
            left + pw,
            left - 6.0,
            y + 3.0,
            label(t)
        );
    }
    for p in pairs {
        let colour = if frontier(pairs, p) {
            VAL_COLOUR
        } else {
            TRAIN_COLOUR
        };
        let (x, y) = (x_of(p.row_predict.median), y_of(p.rmse));
        // Labels of points in the right half go to their left, so they stay in the picture.
        let (label_x, anchor) = if x > left + pw / 2.0 {
            (x - 7.0, "end")
        } else {
            (x + 7.0, "start")
        };
        let _ = writeln!(
            svg,
            r#"<line x1="{:.1}" x2="{:.1}" y1="{y:.1}" y2="{y:.1}" stroke="{colour}" stroke-width="1.5"/><line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="1.5"/><circle cx="{x:.1}" cy="{y:.1}" r="4.5" fill="{colour}"/><text x="{label_x:.1}" y="{:.1}" font-size="12" text-anchor="{anchor}">{}</text>"#,
            x_of(p.row_predict.lo),
            x_of(p.row_predict.hi),
            y_of(p.rmse_ci95.0),
            y_of(p.rmse_ci95.1),
            y - 7.0,
            escape(&p.label)
        );
    }
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle">single-row prediction, µs (median, 95% interval)</text><text x="18" y="{:.1}" font-size="12" text-anchor="middle" transform="rotate(-90 18 {:.1})">validation RMSE (mean, 95% CI)</text><text x="10" y="{:.1}" font-size="11">red: no other candidate is both cheaper and more accurate</text>"#,
        left + pw / 2.0,
        top + ph + 36.0,
        top + ph / 2.0,
        top + ph / 2.0,
        h - 12.0
    );
    svg.push_str("</svg>\n");
    svg
}
