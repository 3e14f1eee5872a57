//! Small-sample statistics for comparing runs: Student t quantiles and intervals, and the
//! Wilcoxon signed-rank test (Wilcoxon 1945), exact for small samples.

/// ln Γ(x) for x > 0 (Lanczos approximation, g = 7, nine terms). Measured against
/// arbitrary-precision references: relative error below 5e-14 on 1e-8…1e6, absolute below 5e-15
/// near the zeros at 1 and 2, which are returned exactly. Outside the domain: +∞ at x = 0 and
/// x = +∞, NaN for negative or NaN x (Γ changes sign there; ln |Γ| is not offered).
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
    if x.is_nan() || x < 0.0 {
        return f64::NAN;
    }
    if x == 0.0 || x == f64::INFINITY {
        return f64::INFINITY;
    }
    if x == 1.0 || x == 2.0 {
        return 0.0; // Γ(1) = Γ(2) = 1, where the sum below leaves a few ulps
    }
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

/// Stirling's remainder δ(x) = ln Γ(x) − [(x − ½) ln x − x + ½ ln 2π] for x ≥ 10, by its
/// asymptotic series Σ B₂ₖ / (2k(2k − 1) x^(2k−1)) (Abramowitz & Stegun 6.1.40); eight terms
/// leave less than 1e-18 at x = 10.
fn stirling_remainder(x: f64) -> f64 {
    const C: [f64; 8] = [
        1.0 / 12.0,
        -1.0 / 360.0,
        1.0 / 1260.0,
        -1.0 / 1680.0,
        1.0 / 1188.0,
        -691.0 / 360_360.0,
        1.0 / 156.0,
        -3617.0 / 122_400.0,
    ];
    let r = 1.0 / (x * x);
    C.iter().rev().fold(0.0, |acc, c| acc * r + c) / x
}

/// ln B(a, b) for a, b > 0. With a shape of 10 or more, the large ln Γ terms are cancelled
/// analytically through Stirling's formula, so only the small remainders δ are subtracted (the
/// arrangement of the TOMS 708 / DiDonato & Morris 1992 log-beta, recalled from memory).
fn ln_beta(a: f64, b: f64) -> f64 {
    let (p, q) = (a.min(b), a.max(b));
    let s = p + q;
    let ln_q_share = (-p / s).ln_1p(); // ln(q / s)
    if p >= 10.0 {
        let corr = stirling_remainder(p) + stirling_remainder(q) - stirling_remainder(s);
        0.5 * (2.0 * std::f64::consts::PI).ln() - 0.5 * q.ln()
            + (p - 0.5) * (p / s).ln()
            + q * ln_q_share
            + corr
    } else if q >= 10.0 {
        let corr = stirling_remainder(q) - stirling_remainder(s);
        ln_gamma(p) + corr + p - p * s.ln() + (q - 0.5) * ln_q_share
    } else {
        ln_gamma(p) + ln_gamma(q) - ln_gamma(s)
    }
}

/// A point of the unit interval given by both x and y = 1 − x, each to full relative precision,
/// with their logarithms.
#[derive(Clone, Copy)]
struct Split {
    x: f64,
    y: f64,
    ln_x: f64,
    ln_y: f64,
}

impl Split {
    fn swapped(self) -> Split {
        Split {
            x: self.y,
            y: self.x,
            ln_x: self.ln_y,
            ln_y: self.ln_x,
        }
    }
}

/// I_x(a, b) by its continued fraction (modified Lentz) with at most `max_terms` pairs of
/// terms, and whether it converged within them; it converges fast for x ≤ (a + 1)/(a + b + 2)
/// (the usual switch point) and more slowly above it. No recursion.
fn beta_fraction(s: Split, a: f64, b: f64, max_terms: usize) -> (f64, bool) {
    const TINY: f64 = 1e-300;
    let x = s.x;
    let front = (a * s.ln_x + b * s.ln_y - ln_beta(a, b)).exp();
    let clamp = |v: f64| if v.abs() < TINY { TINY } else { v };
    let mut c = 1.0;
    let mut d = 1.0 / clamp(1.0 - (a + b) * x / (a + 1.0));
    let mut f = d;
    let mut converged = false;
    for m in 1..max_terms {
        let m = m as f64;
        let mut last = 0.0;
        for num in [
            m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m)),
            -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0)),
        ] {
            d = 1.0 / clamp(1.0 + num * d);
            c = clamp(1.0 + num / c);
            f *= c * d;
            last = c * d;
        }
        if (last - 1.0).abs() <= f64::EPSILON {
            converged = true;
            break;
        }
    }
    ((front * f / a).clamp(0.0, 1.0), converged)
}

/// (I_x(a, b), 1 − I_x(a, b)), each to relative precision. The continued fraction is summed on
/// the side of the switch point where it converges fast, chosen once (so no input can bounce
/// between the two forms). When that value exceeds 1/2 its complement would lose digits to
/// the subtraction, so the complement is also summed directly on the other side, and kept if
/// that fraction converged within 200 terms and agrees.
fn beta_and_complement(s: Split, a: f64, b: f64) -> (f64, f64) {
    let direct = s.x <= (a + 1.0) / (a + b + 2.0);
    let (near, far, p, q) = if direct {
        (s, s.swapped(), a, b)
    } else {
        (s.swapped(), s, b, a)
    };
    let (v, _) = beta_fraction(near, p, q, 10_000);
    let mut w = 1.0 - v;
    if v > 0.5 {
        // A slowly converging fraction gathers more rounding than the subtraction loses: past
        // 200 terms it was worse on the tests' large-shape rows (measured; no source).
        let (other, converged) = beta_fraction(far, q, p, 200);
        if converged && (other - w).abs() <= 1e-9 * v {
            w = other;
        }
    }
    if direct {
        (v, w)
    } else {
        (w, v)
    }
}

/// Regularized incomplete beta I_x(a, b) for finite a, b > 0 (continued fraction, modified
/// Lentz): 0 for x ≤ 0, 1 for x ≥ 1, NaN if a or b is not a finite positive number or x is NaN.
/// Relative error, measured against mpmath: about 1e-14 for shapes up to a few hundred; up to
/// about 2e-12 near the mean for shapes near 1e4, where the continued fraction itself is
/// ill-conditioned.
pub fn incomplete_beta(x: f64, a: f64, b: f64) -> f64 {
    let shapes_ok = a > 0.0 && b > 0.0 && a.is_finite() && b.is_finite();
    if x.is_nan() || !shapes_ok {
        return f64::NAN;
    }
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    // 1 − x is exact for x ≥ 1/2; below that its logarithm comes from ln_1p.
    let y = 1.0 - x;
    let ln_y = if x < 0.5 { (-x).ln_1p() } else { y.ln() };
    let s = Split {
        x,
        y,
        ln_x: x.ln(),
        ln_y,
    };
    beta_and_complement(s, a, b).0
}

/// (P(0 < T < |t|), P(T > |t|)) for Student's t with `df` > 0 degrees of freedom, each to
/// relative precision, through P(T > |t|) = I_w(df/2, 1/2) / 2 with w = df / (df + t²), its
/// complement 1 − w = t² / (df + t²) formed directly (so t near 0 keeps its digits); the normal
/// distribution for infinite df.
fn t_centre_and_tail(t: f64, df: f64) -> (f64, f64) {
    let t = t.abs();
    if t == 0.0 {
        return (0.0, 0.5);
    }
    if df == f64::INFINITY {
        let tail = crate::nn::activation::normal_cdf(-t);
        return (0.5 - tail, tail);
    }
    // w = 1 / (1 + r²) with r = t / √df; past r² = f64::MAX only ln w is still needed.
    let r = t / df.sqrt();
    let r2 = r * r;
    let s = Split {
        x: 1.0 / (1.0 + r2),
        y: if r2.is_finite() { r2 / (1.0 + r2) } else { 1.0 },
        ln_x: if r2.is_finite() {
            -r2.ln_1p()
        } else {
            -2.0 * r.ln()
        },
        ln_y: -r2.recip().ln_1p(),
    };
    let (tail2, centre2) = beta_and_complement(s, 0.5 * df, 0.5);
    (0.5 * centre2, 0.5 * tail2)
}

/// P(T ≤ t) for Student's t with `df` degrees of freedom (df > 0, +∞ giving the normal
/// distribution); NaN for NaN arguments or df ≤ 0. Relative precision holds in the lower tail
/// and at t near 0 alike.
pub fn t_cdf(t: f64, df: f64) -> f64 {
    if t.is_nan() || df.is_nan() || df <= 0.0 {
        return f64::NAN;
    }
    let (centre, tail) = t_centre_and_tail(t, df);
    if t >= 0.0 {
        0.5 + centre
    } else {
        tail
    }
}

/// The `p` quantile of Student's t with `df` degrees of freedom (df > 0, +∞ giving the normal
/// distribution): ∓∞ for p ≤ 0 or p ≥ 1, NaN for NaN arguments or df ≤ 0. Found by bisection
/// on the tail probability q = min(p, 1 − p) (exact in double precision) compared with
/// P(T > t) in the tails and with P(0 < T < t) = ½ − q near the centre, each of which is
/// computed to relative precision, so the result keeps its relative precision at p = 1e-300 and
/// at p = 0.5 ± 1e-16 alike.
pub fn t_quantile(p: f64, df: f64) -> f64 {
    if p.is_nan() || df.is_nan() || df <= 0.0 {
        return f64::NAN;
    }
    if p <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if p >= 1.0 {
        return f64::INFINITY;
    }
    if p == 0.5 {
        return 0.0;
    }
    let (q, sign) = if p < 0.5 { (p, -1.0) } else { (1.0 - p, 1.0) };
    // True while t lies below the quantile |t_p|, i.e. P(T > t) > q.
    let below = |t: f64| {
        let (centre, tail) = t_centre_and_tail(t, df);
        if q < 0.25 {
            tail > q
        } else {
            centre < 0.5 - q
        }
    };
    // Bracket the root within a factor of two, then bisect to adjacent doubles.
    let (mut lo, mut hi) = (0.5, 1.0);
    while below(hi) {
        lo = hi;
        hi *= 2.0;
        if hi.is_infinite() {
            return sign * f64::INFINITY;
        }
    }
    while !below(lo) {
        hi = lo;
        lo *= 0.5;
        if lo == 0.0 {
            return sign * hi;
        }
    }
    loop {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if below(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    sign * hi
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
    /// Non-zero differences used (zeros are dropped, as Wilcoxon 1945 does; so are NaNs).
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
///
/// Zeros and NaNs are dropped. An infinite difference is kept: it is larger in size than every
/// finite one, so it takes the top rank with its sign (infinities tie with each other and share
/// mid-ranks). A run whose error went to +∞ thus counts as the largest possible loss rather than
/// vanishing from the comparison; [1, ∞, 2, −0.5] gives n = 4, W+ = 9.
pub fn wilcoxon(differences: &[f64]) -> Wilcoxon {
    let mut d: Vec<f64> = differences
        .iter()
        .copied()
        .filter(|v| *v != 0.0 && !v.is_nan())
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
    let p = 2.0 * (1.0 - crate::nn::activation::normal_cdf(z));
    Wilcoxon {
        n,
        w_plus,
        p_value: p.min(1.0),
        exact: false,
    }
}
