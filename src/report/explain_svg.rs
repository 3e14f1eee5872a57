//! The SVG chart of an explanation: permutation importance as bars with their 95% intervals,
//! then one small panel per input column with its partial dependence (line), the band the
//! middle 90% of the ICE curves span (faint), and a rug of the column's values in the table.
//! Labelled in the table's own column names and the target's units.

use super::svg::{label, ticks as raw_ticks};
use crate::data::civil_from_days;
use crate::explain::{Dependence, Explanation, GridValue};
use std::fmt::Write as _;

const WIDTH: f64 = 900.0;
const BAR: &str = "#1b6ca8";
const LINE: &str = "#c8553d";
const BAND: &str = "#c8553d";
const COLUMNS: usize = 3;
const CELL_W: f64 = 290.0;
const CELL_H: f64 = 210.0;

/// The SVG text of the chart of `e`.
pub fn plot_explanation(e: &Explanation) -> String {
    let mut svg = String::new();
    let left = 170.0;
    let bar_h = 22.0;
    let top = 60.0;
    let imp_h = if e.importance.is_empty() {
        40.0
    } else {
        bar_h * e.importance.len() as f64 + 50.0
    };
    let rows = e.partial_dependence.len().div_ceil(COLUMNS);
    let height = top + imp_h + 90.0 + rows as f64 * (CELL_H + 70.0);
    let _ = writeln!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{WIDTH}" height="{height:.0}" viewBox="0 0 {WIDTH} {height:.0}" font-family="sans-serif">"#
    );
    let _ = writeln!(svg, r#"<rect width="100%" height="100%" fill="white"/>"#);
    let target = escape(&e.target);
    let _ = writeln!(
        svg,
        r#"<text x="20" y="28" font-size="17" font-weight="bold">What drives {target}: permutation importance (95% intervals)</text>"#
    );
    if e.importance.is_empty() {
        let _ = writeln!(
            svg,
            r##"<text x="20" y="{:.1}" font-size="12" fill="#555">No importance: the table has no '{target}' column.</text>"##,
            top + 10.0
        );
    } else {
        importance(&mut svg, e, left, top, WIDTH - left - 40.0, bar_h);
    }
    let pd_top = top + imp_h + 30.0;
    let _ = writeln!(
        svg,
        r##"<text x="20" y="{:.1}" font-size="17" font-weight="bold">How {target} moves with each column</text><text x="20" y="{:.1}" font-size="12" fill="#555">line: partial dependence · band: middle 90% of the ICE curves · ticks: the column's values in the table</text>"##,
        pd_top,
        pd_top + 18.0
    );
    for (i, d) in e.partial_dependence.iter().enumerate() {
        let (r, c) = (i / COLUMNS, i % COLUMNS);
        let x = 20.0 + 55.0 + c as f64 * (CELL_W);
        let y = pd_top + 55.0 + r as f64 * (CELL_H + 70.0);
        dependence(&mut svg, d, &target, x, y, CELL_W - 75.0, CELL_H);
    }
    svg.push_str("</svg>\n");
    svg
}

fn importance(svg: &mut String, e: &Explanation, left: f64, top: f64, width: f64, bar_h: f64) {
    let lo = e.importance.iter().map(|i| i.lower).fold(0.0, f64::min);
    let hi = e
        .importance
        .iter()
        .map(|i| i.upper)
        .fold(0.0, f64::max)
        .max(lo + 1e-12);
    let x = |v: f64| left + width * (v - lo) / (hi - lo);
    let bottom = top + bar_h * e.importance.len() as f64;
    for t in ticks(lo, hi, false) {
        let _ = writeln!(
            svg,
            r##"<line x1="{0:.1}" x2="{0:.1}" y1="{top:.1}" y2="{bottom:.1}" stroke="#e3e3e3"/><text x="{0:.1}" y="{1:.1}" font-size="11" text-anchor="middle">{2}</text>"##,
            x(t),
            bottom + 15.0,
            label(t)
        );
    }
    let _ = writeln!(
        svg,
        r##"<line x1="{0:.1}" x2="{0:.1}" y1="{top:.1}" y2="{bottom:.1}" stroke="#666"/>"##,
        x(0.0)
    );
    for (k, i) in e.importance.iter().enumerate() {
        let y = top + bar_h * k as f64;
        let (a, b) = (x(0.0).min(x(i.mean)), x(0.0).max(x(i.mean)));
        let (name_x, name_y, mid) = (left - 8.0, y + bar_h * 0.65, y + bar_h * 0.5);
        let (from, to) = (x(i.lower), x(i.upper));
        let (cap_lo, cap_hi) = (y + bar_h * 0.3, y + bar_h * 0.7);
        let (bar_y, bar_w, bar_height) = (y + 4.0, (b - a).max(0.5), bar_h - 8.0);
        let name = escape(&i.feature);
        let _ = writeln!(
            svg,
            r##"<text x="{name_x:.1}" y="{name_y:.1}" font-size="12" text-anchor="end">{name}</text><rect x="{a:.1}" y="{bar_y:.1}" width="{bar_w:.1}" height="{bar_height:.1}" fill="{BAR}" opacity="0.8"/><line x1="{from:.1}" x2="{to:.1}" y1="{mid:.1}" y2="{mid:.1}" stroke="#222" stroke-width="1.5"/><line x1="{from:.1}" x2="{from:.1}" y1="{cap_lo:.1}" y2="{cap_hi:.1}" stroke="#222"/><line x1="{to:.1}" x2="{to:.1}" y1="{cap_lo:.1}" y2="{cap_hi:.1}" stroke="#222"/>"##
        );
    }
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" text-anchor="middle">rise in RMSE when the column is shuffled ({} units; {} shuffles)</text>"#,
        left + width / 2.0,
        bottom + 34.0,
        escape(&e.target),
        e.repeats
    );
}

/// The 5% and 95% points of the ICE curves at each grid point.
fn band(d: &Dependence) -> Vec<(f64, f64)> {
    (0..d.mean.len())
        .map(|g| {
            let mut v: Vec<f64> = d.ice.iter().map(|c| c[g]).collect();
            if v.is_empty() {
                return (d.mean[g], d.mean[g]);
            }
            v.sort_by(f64::total_cmp);
            let at = |q: f64| v[((v.len() - 1) as f64 * q).round() as usize];
            (at(0.05), at(0.95))
        })
        .collect()
}

fn dependence(svg: &mut String, d: &Dependence, target: &str, left: f64, top: f64, w: f64, h: f64) {
    let spread = band(d);
    let lo = spread
        .iter()
        .map(|b| b.0)
        .chain(d.mean.iter().copied())
        .fold(f64::INFINITY, f64::min);
    let hi = spread
        .iter()
        .map(|b| b.1)
        .chain(d.mean.iter().copied())
        .fold(f64::NEG_INFINITY, f64::max);
    let (lo, hi) = if hi > lo {
        (lo, hi)
    } else {
        (lo - 1.0, hi + 1.0)
    };
    let y = |v: f64| top + h * (1.0 - (v - lo) / (hi - lo));
    let _ = writeln!(
        svg,
        r##"<rect x="{left:.1}" y="{top:.1}" width="{w:.1}" height="{h:.1}" fill="#fbfbfb" stroke="#999"/><text x="{left:.1}" y="{:.1}" font-size="13" font-weight="bold">{}</text><text transform="translate({:.1},{:.1}) rotate(-90)" font-size="11" text-anchor="middle">{target}</text>"##,
        top - 6.0,
        escape(&d.feature),
        left - 42.0,
        top + h / 2.0
    );
    for t in ticks(lo, hi, false) {
        let (right, at, text_x, text_y, text) = (left + w, y(t), left - 4.0, y(t) + 3.5, label(t));
        let _ = writeln!(
            svg,
            r##"<line x1="{left:.1}" x2="{right:.1}" y1="{at:.1}" y2="{at:.1}" stroke="#e8e8e8"/><text x="{text_x:.1}" y="{text_y:.1}" font-size="10" text-anchor="end">{text}</text>"##
        );
    }
    let numbers: Vec<f64> = d
        .grid
        .iter()
        .filter_map(|g| match g {
            GridValue::Number(v) => Some(*v),
            GridValue::Level(_) => None,
        })
        .collect();
    let date = d.kind == "date";
    if numbers.len() == d.grid.len() && numbers.len() > 1 {
        let (a, b) = (numbers[0], numbers[numbers.len() - 1]);
        let x = |v: f64| left + w * (v - a) / (b - a);
        let upper: Vec<String> = numbers
            .iter()
            .zip(&spread)
            .map(|(&v, s)| format!("{:.1},{:.1}", x(v), y(s.1)))
            .collect();
        let lower: Vec<String> = numbers
            .iter()
            .zip(&spread)
            .rev()
            .map(|(&v, s)| format!("{:.1},{:.1}", x(v), y(s.0)))
            .collect();
        let _ = writeln!(
            svg,
            r#"<polygon fill="{BAND}" opacity="0.15" stroke="none" points="{} {}"/>"#,
            upper.join(" "),
            lower.join(" ")
        );
        let line: Vec<String> = numbers
            .iter()
            .zip(&d.mean)
            .map(|(&v, m)| format!("{:.1},{:.1}", x(v), y(*m)))
            .collect();
        let _ = writeln!(
            svg,
            r#"<polyline fill="none" stroke="{LINE}" stroke-width="2" points="{}"/>"#,
            line.join(" ")
        );
        for r in &d.rug {
            if (a..=b).contains(r) {
                let _ = writeln!(
                    svg,
                    r##"<line x1="{0:.1}" x2="{0:.1}" y1="{1:.1}" y2="{2:.1}" stroke="#333" opacity="0.35"/>"##,
                    x(*r),
                    top + h - 7.0,
                    top + h
                );
            }
        }
        for t in ticks(a, b, false) {
            let text = if date {
                let (yy, mm, dd) = civil_from_days(t.floor() as i64);
                format!("{yy:04}-{mm:02}-{dd:02}")
            } else {
                label(t)
            };
            let _ = writeln!(
                svg,
                r#"<text x="{:.1}" y="{:.1}" font-size="10" text-anchor="middle">{text}</text>"#,
                x(t),
                top + h + 13.0
            );
        }
    } else {
        let n = d.grid.len().max(1) as f64;
        let x = |k: usize| left + w * (k as f64 + 0.5) / n;
        for (k, g) in d.grid.iter().enumerate() {
            let name = match g {
                GridValue::Level(l) => escape(l),
                GridValue::Number(v) => label(*v),
            };
            let _ = writeln!(
                svg,
                r##"<line x1="{0:.1}" x2="{0:.1}" y1="{1:.1}" y2="{2:.1}" stroke="{BAND}" stroke-width="8" opacity="0.2"/><circle cx="{0:.1}" cy="{3:.1}" r="4" fill="{LINE}"/><text transform="translate({0:.1},{4:.1}) rotate(30)" font-size="10">{name}</text>"##,
                x(k),
                y(spread[k].0),
                y(spread[k].1),
                y(d.mean[k]),
                top + h + 12.0
            );
        }
    }
}

/// Round tick values over [lo, hi], with values within rounding of zero shown as 0.
fn ticks(lo: f64, hi: f64, log: bool) -> Vec<f64> {
    let span = (hi - lo).abs();
    raw_ticks(lo, hi, log)
        .into_iter()
        .map(|t| if t.abs() < 1e-9 * span { 0.0 } else { t })
        .collect()
}

/// Text safe inside SVG.
fn escape(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}
