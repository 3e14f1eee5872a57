//! Reader for NIST StRD nonlinear regression files (tests/data/nist-strd, see its README).

use ndarray::Array2;

/// One NIST StRD data set.
#[allow(dead_code)]
pub struct NistSet {
    pub name: String,
    /// Predictors, one column per x.
    pub x: Array2<f64>,
    /// Response (one column).
    pub y: Array2<f64>,
    pub certified_rss: f64,
    pub certified_sd: f64,
}

fn number_after(text: &str, label: &str) -> f64 {
    let line = text
        .lines()
        .find(|l| l.trim_start().starts_with(label))
        .unwrap();
    line[line.find(':').unwrap() + 1..]
        .split_whitespace()
        .next()
        .unwrap()
        .parse()
        .unwrap()
}

/// Parses `tests/data/nist-strd/NAME.dat`.
pub fn load(name: &str) -> NistSet {
    let path = format!(
        "{}/tests/data/nist-strd/{name}.dat",
        env!("CARGO_MANIFEST_DIR")
    );
    let text = std::fs::read_to_string(&path).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    // The column header of the data block: "Data:   y   x ..." (the first "Data:" line only
    // counts the responses).
    let start = lines
        .iter()
        .position(|l| l.starts_with("Data:") && l.split_whitespace().nth(1) == Some("y"))
        .unwrap();
    let rows: Vec<Vec<f64>> = lines[start + 1..]
        .iter()
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split_whitespace().map(|v| v.parse().unwrap()).collect())
        .collect();
    let cols = rows[0].len();
    let n = rows.len();
    let y = Array2::from_shape_fn((n, 1), |(i, _)| rows[i][0]);
    let x = Array2::from_shape_fn((n, cols - 1), |(i, j)| rows[i][j + 1]);
    NistSet {
        name: name.to_string(),
        x,
        y,
        certified_rss: number_after(&text, "Residual Sum of Squares"),
        certified_sd: number_after(&text, "Residual Standard Deviation"),
    }
}
