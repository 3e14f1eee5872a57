//! Summaries of a column that the encoder's decisions rest on: level counts, dates, fill
//! values and the one-column measures behind the leak and skew warnings.

use super::dates::parse_iso_date;
use super::Impute;
use std::collections::HashMap;

/// Counts of a text column's values.
pub(super) struct TextProfile {
    /// Rows per distinct filled value.
    pub counts: HashMap<String, usize>,
    /// Empty cells.
    pub missing: usize,
    /// Every filled value is an ISO 8601 date or date-time.
    pub all_dates: bool,
}

/// Levels that keep an input of their own, and the pooled rest.
pub(super) struct LevelSplit {
    /// Kept levels, sorted by name.
    pub kept: Vec<String>,
    /// Pooled levels, sorted by name.
    pub pooled: Vec<String>,
    /// Levels pooled only because of the cap on the number of levels.
    pub capped: usize,
}

impl TextProfile {
    /// The profile of every cell of a column.
    pub fn of(values: &[Option<String>]) -> TextProfile {
        let mut counts: HashMap<String, usize> = HashMap::new();
        let mut missing = 0;
        for v in values {
            match v {
                Some(s) => match counts.get_mut(s.as_str()) {
                    Some(n) => *n += 1,
                    None => {
                        counts.insert(s.clone(), 1);
                    }
                },
                None => missing += 1,
            }
        }
        let all_dates = !counts.is_empty() && counts.keys().all(|k| parse_iso_date(k).is_some());
        TextProfile {
            counts,
            missing,
            all_dates,
        }
    }

    /// Keeps the levels seen in at least `min_rows` rows, at most `max_levels` of them (the
    /// most frequent; ties by name); pools the rest. A single level below the minimum is kept,
    /// since pooling it alone would change nothing.
    pub fn split_levels(&self, min_rows: usize, max_levels: usize) -> LevelSplit {
        let mut by_count: Vec<(&String, usize)> =
            self.counts.iter().map(|(k, &n)| (k, n)).collect();
        by_count.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(b.0)));
        let frequent = by_count.iter().filter(|(_, n)| *n >= min_rows).count();
        let limit = max_levels.max(1);
        let mut keep = frequent.min(limit);
        if by_count.len() == keep + 1 {
            keep += 1;
        }
        let capped = frequent.saturating_sub(limit);
        let mut kept: Vec<String> = by_count[..keep].iter().map(|(k, _)| (*k).clone()).collect();
        let mut pooled: Vec<String> = by_count[keep..].iter().map(|(k, _)| (*k).clone()).collect();
        kept.sort();
        pooled.sort();
        LevelSplit {
            kept,
            pooled,
            capped,
        }
    }
}

/// The fill value of a sorted, non-empty list of values.
pub(super) fn fill_value(sorted: &[f64], how: Impute) -> f64 {
    let n = sorted.len();
    match how {
        Impute::Mean => sorted.iter().sum::<f64>() / n as f64,
        Impute::Median if n % 2 == 1 => sorted[n / 2],
        Impute::Median => 0.5 * (sorted[n / 2 - 1] + sorted[n / 2]),
        Impute::MostFrequent => {
            let (mut best, mut best_n, mut i) = (sorted[0], 0, 0);
            while i < n {
                let j = i + sorted[i..].iter().take_while(|&&v| v == sorted[i]).count();
                if j - i > best_n {
                    (best, best_n) = (sorted[i], j - i);
                }
                i = j;
            }
            best
        }
    }
}

/// Squared Pearson correlation of the pairs with both values present (0 if either is
/// constant or fewer than 3 pairs).
pub(super) fn r_squared(pairs: impl Iterator<Item = (f64, f64)>) -> f64 {
    let pairs: Vec<(f64, f64)> = pairs.filter(|(x, y)| !(x.is_nan() || y.is_nan())).collect();
    let n = pairs.len() as f64;
    if pairs.len() < 3 {
        return 0.0;
    }
    let (mx, my) = pairs
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x / n, b + y / n));
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (x, y) in &pairs {
        sxy += (x - mx) * (y - my);
        sxx += (x - mx) * (x - mx);
        syy += (y - my) * (y - my);
    }
    if sxx <= 0.0 || syy <= 0.0 {
        0.0
    } else {
        sxy * sxy / (sxx * syy)
    }
}

/// Share of the variance of y between the groups (η², the correlation ratio); empty cells
/// form a group of their own, rows without a target are skipped.
pub(super) fn eta_squared<'a>(pairs: impl Iterator<Item = (Option<&'a str>, f64)>) -> f64 {
    let mut groups: HashMap<Option<&str>, (f64, usize)> = HashMap::new();
    let (mut total, mut n) = (0.0, 0usize);
    let mut ys = Vec::new();
    for (g, y) in pairs.filter(|(_, y)| !y.is_nan()) {
        let e = groups.entry(g).or_insert((0.0, 0));
        e.0 += y;
        e.1 += 1;
        total += y;
        n += 1;
        ys.push(y);
    }
    if n < 3 {
        return 0.0;
    }
    let mean = total / n as f64;
    let ss_total: f64 = ys.iter().map(|y| (y - mean).powi(2)).sum();
    let ss_between: f64 = groups
        .values()
        .map(|(s, k)| *k as f64 * (s / *k as f64 - mean).powi(2))
        .sum();
    if ss_total <= 0.0 {
        0.0
    } else {
        ss_between / ss_total
    }
}

/// Sample skewness g1 = m3 / m2^1.5 (moments about the mean); 0 for a constant list.
pub(super) fn skewness(v: &[f64]) -> f64 {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let m2 = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n;
    let m3 = v.iter().map(|x| (x - mean).powi(3)).sum::<f64>() / n;
    if m2 <= 0.0 {
        0.0
    } else {
        m3 / m2.powf(1.5)
    }
}
