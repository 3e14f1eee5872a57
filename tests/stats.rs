//! Statistics used by the activation comparison, against a reference crate (statrs), a
//! reference library's values (SciPy, tests/data/wilcoxon_scipy.txt) and brute force.

use relume::stats::{incomplete_beta, ln_gamma, mean_sd_ci95, t_cdf, t_quantile, wilcoxon};
use statrs::distribution::{ContinuousCDF, StudentsT};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::ln_gamma as statrs_ln_gamma;

#[test]
fn ln_gamma_and_incomplete_beta_match_statrs() {
    for i in 1..200 {
        let x = i as f64 * 0.173;
        let (a, b) = (statrs_ln_gamma(x), ln_gamma(x));
        assert!(
            (a - b).abs() <= 1e-12 * a.abs().max(1.0),
            "x = {x}: {a} vs {b}"
        );
    }
    for &(a, b) in &[
        (0.5, 0.5),
        (2.0, 3.0),
        (0.5, 10.0),
        (15.0, 0.5),
        (40.0, 40.0),
    ] {
        for i in 1..20 {
            let x = i as f64 / 20.0;
            let (r, o) = (beta_reg(a, b, x), incomplete_beta(x, a, b));
            assert!((r - o).abs() <= 1e-12, "I_{x}({a}, {b}): {r} vs {o}");
        }
    }
}

#[test]
fn t_distribution_matches_statrs() {
    for df in [1.0, 2.0, 4.0, 9.0, 29.0, 120.0] {
        let reference = StudentsT::new(0.0, 1.0, df).unwrap();
        for &p in &[0.6, 0.9, 0.95, 0.975, 0.995] {
            let (r, o) = (reference.inverse_cdf(p), t_quantile(p, df));
            assert!(
                (r - o).abs() <= 1e-8 * r.abs(),
                "df {df}, p {p}: {r} vs {o}"
            );
        }
        for &t in &[-3.0, -0.5, 0.0, 1.3, 4.0] {
            let (r, o) = (reference.cdf(t), t_cdf(t, df));
            assert!((r - o).abs() <= 1e-12, "df {df}, t {t}: {r} vs {o}");
        }
    }
}

#[test]
fn t_interval_matches_a_statrs_computation() {
    let v = [1.02, 0.97, 1.10, 1.05, 0.99];
    let (mean, sd, half) = mean_sd_ci95(&v);
    let m = v.iter().sum::<f64>() / 5.0;
    let s = (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / 4.0).sqrt();
    let q = StudentsT::new(0.0, 1.0, 4.0).unwrap().inverse_cdf(0.975);
    assert!((mean - m).abs() < 1e-15 && (sd - s).abs() < 1e-15);
    assert!((half - q * s / 5f64.sqrt()).abs() < 1e-9, "{half}");
}

#[test]
fn wilcoxon_matches_scipy() {
    let text = include_str!("data/wilcoxon_scipy.txt");
    for line in text.lines().filter(|l| !l.starts_with('#')) {
        let parts: Vec<&str> = line.split_whitespace().collect();
        let (name, method) = (parts[0], parts[1]);
        let statistic: f64 = parts[2].parse().unwrap();
        let p: f64 = parts[3].parse().unwrap();
        let d: Vec<f64> = parts[4..].iter().map(|v| v.parse().unwrap()).collect();
        let ours = wilcoxon(&d);
        let total = ours.n as f64 * (ours.n as f64 + 1.0) / 2.0;
        let min_w = ours.w_plus.min(total - ours.w_plus);
        println!(
            "{name}: W+ {} p {:.6} (SciPy {p:.6}, {method})",
            ours.w_plus, ours.p_value
        );
        assert_eq!(min_w, statistic, "{name}");
        assert_eq!(ours.exact, method == "exact", "{name}");
        assert!(
            (ours.p_value - p).abs() <= 1e-9,
            "{name}: {} vs {p}",
            ours.p_value
        );
    }
}

#[test]
fn exact_wilcoxon_distribution_equals_brute_force() {
    // Every one of the 2ⁿ sign patterns of ranks 1..n is equally likely under the null.
    let d = [0.3, -1.1, 2.0, 0.7, -0.2, 1.4, 0.9, -2.5];
    let ours = wilcoxon(&d);
    let mut abs: Vec<f64> = d.iter().map(|v: &f64| v.abs()).collect();
    abs.sort_by(f64::total_cmp);
    let rank = |v: f64| abs.iter().position(|a| *a == v.abs()).unwrap() as f64 + 1.0;
    let observed: f64 = d.iter().filter(|v| **v > 0.0).map(|&v| rank(v)).sum();
    assert_eq!(ours.w_plus, observed);
    let n = d.len();
    let (mut low, mut high) = (0, 0);
    for mask in 0..(1u32 << n) {
        let w: f64 = (0..n)
            .filter(|i| mask >> i & 1 == 1)
            .map(|i| i as f64 + 1.0)
            .sum();
        low += usize::from(w <= observed);
        high += usize::from(w >= observed);
    }
    let p = (2.0 * low.min(high) as f64 / (1u32 << n) as f64).min(1.0);
    assert!((ours.p_value - p).abs() < 1e-15, "{} vs {p}", ours.p_value);
}
