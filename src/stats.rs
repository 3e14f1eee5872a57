//! Small-sample statistics for comparing runs: Student t quantiles and intervals, and the
//! Wilcoxon signed-rank test (Wilcoxon 1945), exact for small samples.

/// ln Γ(x) for x > 0 (Lanczos approximation, g = 7, nine terms; relative error ~1e-15).
pub fn ln_gamma(x: f64) -> f64 {
    const G: f64 = 7.0;
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x)Γ(1 − x) = π / sin(πx).
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut sum = C[0];
    for (i, c) in C.iter().enumerate().skip(1) {
        sum += c / (x + i as f64);
    }
    let t = x + G + 0.5;
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + sum.ln()
}

/// Regularized incomplete beta I_x(a, b), by its continued fraction (modified Lentz).
pub fn incomplete_beta(x: f64, a: f64, b: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    let front =
        (ln_gamma(a + b) - ln_gamma(a) - ln_gamma(b) + a * x.ln() + b * (1.0 - x).ln()).exp();
    // The fraction converges fast for x < (a + 1)/(a + b + 2); use the symmetry otherwise.
    if x > (a + 1.0) / (a + b + 2.0) {
        return 1.0 - incomplete_beta(1.0 - x, b, a);
    }
    let tiny = 1e-300;
    let (mut c, mut d) = (1.0, 1.0 - (a + b) * x / (a + 1.0));
    if d.abs() < tiny {
        d = tiny;
    }
    d = 1.0 / d;
    let mut f = d;
    for m in 1..500 {
        let m = m as f64;
        for step in 0..2 {
            let num = if step == 0 {
                m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m))
            } else {
                -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0))
            };
            d = 1.0 + num * d;
            if d.abs() < tiny {
                d = tiny;
            }
            c = 1.0 + num / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            f *= c * d;
        }
        if (c * d - 1.0).abs() < 1e-16 {
            break;
        }
    }
    front * f / a
}

/// P(T ≤ t) for Student's t with `df` degrees of freedom.
pub fn t_cdf(t: f64, df: f64) -> f64 {
    let tail = 0.5 * incomplete_beta(df / (df + t * t), 0.5 * df, 0.5);
    if t >= 0.0 {
        1.0 - tail
    } else {
        tail
    }
}

/// The `p` quantile of Student's t with `df` degrees of freedom (bisection on [`t_cdf`]).
pub fn t_quantile(p: f64, df: f64) -> f64 {
    if p == 0.5 {
        return 0.0;
    }
    if p < 0.5 {
        return -t_quantile(1.0 - p, df);
    }
    let (mut lo, mut hi) = (0.0, 1.0);
    while t_cdf(hi, df) < p {
        hi *= 2.0;
        if hi > 1e12 {
            return f64::INFINITY;
        }
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if t_cdf(mid, df) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Mean, sample standard deviation and the half-width of the 95% Student-t confidence interval
/// of the mean (NaN half-width for fewer than two values).
pub fn mean_sd_ci95(values: &[f64]) -> (f64, f64, f64) {
    let n = values.len();
    if n == 0 {
        return (f64::NAN, f64::NAN, f64::NAN);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n < 2 {
        return (mean, f64::NAN, f64::NAN);
    }
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt();
    let half = t_quantile(0.975, (n - 1) as f64) * sd / (n as f64).sqrt();
    (mean, sd, half)
}

/// The Wilcoxon signed-rank test of paired differences.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Wilcoxon {
    /// Non-zero differences used (zeros are dropped, as Wilcoxon 1945 does).
    pub n: usize,
    /// Sum of the ranks of the positive differences (mid-ranks for ties).
    pub w_plus: f64,
    /// Two-sided p-value.
    pub p_value: f64,
    /// True if the p-value is exact (n ≤ [`WILCOXON_EXACT_MAX`]), false for the normal
    /// approximation with tie and continuity corrections.
    pub exact: bool,
}

/// Largest sample for which the exact null distribution is used.
pub const WILCOXON_EXACT_MAX: usize = 25;

/// Two-sided Wilcoxon signed-rank test of `differences` against a zero median.
pub fn wilcoxon(differences: &[f64]) -> Wilcoxon {
    let mut d: Vec<f64> = differences
        .iter()
        .copied()
        .filter(|v| *v != 0.0 && v.is_finite())
        .collect();
    let n = d.len();
    if n == 0 {
        return Wilcoxon {
            n,
            w_plus: 0.0,
            p_value: 1.0,
            exact: true,
        };
    }
    d.sort_by(|a, b| a.abs().total_cmp(&b.abs()));
    // Doubled mid-ranks, integers even with ties.
    let mut ranks2 = vec![0u64; n];
    let mut ties = Vec::new();
    let mut i = 0;
    while i < n {
        let mut j = i;
        while j + 1 < n && d[j + 1].abs() == d[i].abs() {
            j += 1;
        }
        let r2 = (i + 1 + j + 1) as u64; // 2 × mean of ranks i+1..=j+1
        ranks2[i..=j].iter_mut().for_each(|r| *r = r2);
        ties.push((j - i + 1) as f64);
        i = j + 1;
    }
    let w2: u64 = d
        .iter()
        .zip(&ranks2)
        .filter(|(v, _)| **v > 0.0)
        .map(|(_, r)| r)
        .sum();
    let w_plus = w2 as f64 / 2.0;
    if n <= WILCOXON_EXACT_MAX {
        // Null distribution of 2·W+ over all 2ⁿ sign patterns, by dynamic programming.
        let total: u64 = ranks2.iter().sum();
        let mut counts = vec![0f64; total as usize + 1];
        counts[0] = 1.0;
        for &r in &ranks2 {
            for s in (r as usize..=total as usize).rev() {
                counts[s] += counts[s - r as usize];
            }
        }
        let all = 2f64.powi(n as i32);
        let below: f64 = counts[..=w2 as usize].iter().sum::<f64>() / all;
        let above: f64 = counts[w2 as usize..].iter().sum::<f64>() / all;
        return Wilcoxon {
            n,
            w_plus,
            p_value: (2.0 * below.min(above)).min(1.0),
            exact: true,
        };
    }
    let nf = n as f64;
    let mean = nf * (nf + 1.0) / 4.0;
    let tie_term: f64 = ties.iter().map(|t| t * t * t - t).sum::<f64>() / 48.0;
    let var = nf * (nf + 1.0) * (2.0 * nf + 1.0) / 24.0 - tie_term;
    let z = ((w_plus - mean).abs() - 0.5).max(0.0) / var.sqrt();
    let p = 2.0 * (1.0 - crate::activation::normal_cdf(z));
    Wilcoxon {
        n,
        w_plus,
        p_value: p.min(1.0),
        exact: false,
    }
}
