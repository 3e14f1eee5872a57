//! The cost of an activation: the order-statistic interval for the median (its coverage,
//! against statrs's binomial distribution and by simulation), the report's structure and JSON
//! names, the accuracy pairing, compare's per-cell thread CPU time, and the command's
//! refusals. No assertion here depends on how fast anything runs.

use rand::SeedableRng;
use rand_distr::{Distribution, Exp};
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::report::cost_svg::{
    accuracy_cost_markdown, cost_markdown, plot_accuracy_cost, plot_cost,
};
use relume::sweep::compare::{
    cost_footnote, markdown, run, summarize, RunResult, SweepPlan, SweepReport, SWEEP_FORMAT,
    SWEEP_VERSION,
};
use relume::sweep::cost::{
    binomial_half_cdf, measure, median_interval_ranks, median_with_interval, model_for_inputs,
    pair_with_accuracy, CostOptions, CostReport, Measure,
};
use relume::{Activation, Overrides};
use statrs::distribution::{Binomial, DiscreteCDF};
use std::process::Command;

/// Quick settings: few rounds and short blocks (the figures are not looked at).
fn quick() -> CostOptions {
    CostOptions {
        batch: 8,
        predict_rows: 16,
        rounds: 7,
        block_seconds: 2e-4,
        seed: 3,
    }
}

fn tiny_report(activations: &[Activation]) -> CostReport {
    let model = model_for_inputs(3, &[8, 8], 1).unwrap();
    measure(&model, activations, &quick()).unwrap()
}

/// The interval [x_(k), x_(n+1-k)] covers the median with probability 1 − 2·P(B ≤ k−1),
/// B ~ Binomial(n, ½) (Conover, Practical Nonparametric Statistics, 3rd ed., §3.2, from
/// memory). Checked against statrs's binomial CDF: the coverage is right, at least 95%, and
/// the interval is the shortest such (one rank further in falls below 95%).
#[test]
fn order_statistic_interval_coverage_matches_the_binomial_distribution() {
    for n in 1..=400usize {
        let b = Binomial::new(0.5, n as u64).unwrap();
        for k in [0, n / 4, n / 2, n] {
            let ours = binomial_half_cdf(n, k);
            assert!((ours - b.cdf(k as u64)).abs() < 1e-10, "n {n} k {k}");
        }
        let Some((lo, hi, coverage)) = median_interval_ranks(n, 0.95) else {
            // Even the widest interval (1, n) misses 95% for n ≤ 5: 1 − 2/2^n < 0.95.
            assert!(n <= 5, "n {n} has no interval");
            assert!(1.0 - 2.0 * b.cdf(0) < 0.95);
            continue;
        };
        assert!(n >= 6);
        assert_eq!(lo + hi, n + 1, "symmetric ranks");
        assert!(lo <= hi);
        let exact = 1.0 - 2.0 * b.cdf(lo as u64 - 1);
        assert!((coverage - exact).abs() < 1e-10, "n {n}");
        assert!(exact >= 0.95, "n {n}: coverage {exact}");
        if lo < n.div_ceil(2) {
            let tighter = 1.0 - 2.0 * b.cdf(lo as u64);
            assert!(tighter < 0.95, "n {n}: rank {} would still cover", lo + 1);
        }
    }
    // The default 31 rounds: ranks 10 and 22, coverage 1 − 2·P(B ≤ 9) ≈ 0.9705.
    let (lo, hi, c) = median_interval_ranks(31, 0.95).unwrap();
    assert_eq!((lo, hi), (10, 22));
    assert!((c - 0.9705).abs() < 1e-3, "{c}");
}

/// Simulated coverage: 4000 samples of 15 draws from the unit exponential (median ln 2).
/// The interval must cover the true median as often as the binomial formula says (n = 15:
/// ranks 4 and 12, 1 − 2·P(B ≤ 3) = 0.9648); ranks one off would give 0.882 or 0.993.
#[test]
fn order_statistic_interval_covers_a_known_median_as_often_as_promised() {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
    let exp = Exp::new(1.0).unwrap();
    let truth = std::f64::consts::LN_2;
    let trials = 4000;
    let mut hits = 0;
    for _ in 0..trials {
        let x: Vec<f64> = (0..15).map(|_| exp.sample(&mut rng)).collect();
        let i = median_with_interval(&x).unwrap();
        assert!(i.lo <= i.median && i.median <= i.hi);
        hits += usize::from(i.lo <= truth && truth <= i.hi);
    }
    let (_, _, promised) = median_interval_ranks(15, 0.95).unwrap();
    let rate = hits as f64 / trials as f64;
    let sd = (promised * (1.0 - promised) / trials as f64).sqrt();
    assert!(
        (rate - promised).abs() < 4.0 * sd,
        "covered {rate}, promised {promised}"
    );
}

#[test]
fn median_and_interval_are_ordered_and_refuse_bad_samples() {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
    let exp = Exp::new(0.3).unwrap();
    for n in 6..60 {
        let x: Vec<f64> = (0..n).map(|_| exp.sample(&mut rng)).collect();
        let i = median_with_interval(&x).unwrap();
        assert!(i.lo <= i.median && i.median <= i.hi, "n {n}: {i:?}");
        assert!(x.contains(&i.lo) && x.contains(&i.hi));
    }
    assert!(median_with_interval(&[1.0; 5]).is_none(), "too few");
    assert!(median_with_interval(&[1.0, 2.0, 3.0, f64::NAN, 4.0, 5.0, 6.0]).is_none());
    let even = median_with_interval(&[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]).unwrap();
    assert_eq!((even.lo, even.median, even.hi), (1.0, 3.5, 6.0));
}

#[test]
fn cost_report_has_the_documented_names_and_ordered_intervals() {
    let report = tiny_report(&[Activation::Gelu, Activation::ELU, Activation::Tanh]);
    let json: serde_json::Value = serde_json::from_str(&report.to_json()).unwrap();
    for key in ["cpu", "instruction_set", "clock", "architecture", "rounds"] {
        assert!(json.get(key).is_some(), "top-level {key}");
    }
    assert!(!json["cpu"].as_str().unwrap().is_empty());
    // 16 rows per batch prediction through two hidden layers of 8 units.
    assert_eq!(json["batch_predict_activations"], 16 * (8 + 8));
    let candidates = json["candidates"].as_array().unwrap();
    let names: Vec<&str> = candidates
        .iter()
        .map(|c| c["activation"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        ["relu", "gelu", "elu:1", "tanh"],
        "ReLU is added first"
    );
    for c in candidates {
        for m in ["train_step", "batch_predict", "row_predict"] {
            let f = |suffix: &str| c[format!("{m}_{suffix}")].as_f64().unwrap();
            let (us, lo, hi, ratio) = (f("us"), f("lo"), f("hi"), f("vs_relu"));
            assert!(0.0 < lo && lo <= us && us <= hi, "{m}: {lo} {us} {hi}");
            assert!(f("vs_relu_lo") <= ratio && ratio <= f("vs_relu_hi"));
            if c["activation"] == "relu" {
                assert_eq!((f("vs_relu_lo"), ratio, f("vs_relu_hi")), (1.0, 1.0, 1.0));
            }
        }
    }
    assert_eq!(CostReport::from_json(&report.to_json()).unwrap(), report);
    assert!(CostReport::from_json("{\"format\": \"x\"}").is_err());
    let md = cost_markdown(&report);
    assert!(md.contains(&report.cpu) && md.contains(&report.instruction_set));
    for debug_form in ["Some(", "None", "Avx", "Baseline", " { "] {
        assert!(!md.contains(debug_form), "{debug_form} in\n{md}");
    }
    assert_eq!(md.lines().filter(|l| l.starts_with("| ")).count(), 1 + 4);
    let svg = plot_cost(&report);
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    for m in Measure::ALL {
        assert_eq!(report.candidates[1].time(m).median, {
            let c = &candidates[1];
            c[format!("{}_us", m.name())].as_f64().unwrap()
        });
    }
}

#[test]
fn cost_refuses_bad_settings() {
    let model = model_for_inputs(2, &[4], 0).unwrap();
    let bad = [
        CostOptions {
            rounds: 5,
            ..quick()
        },
        CostOptions {
            batch: 0,
            ..quick()
        },
        CostOptions {
            predict_rows: 0,
            ..quick()
        },
        CostOptions {
            block_seconds: 0.0,
            ..quick()
        },
    ];
    for o in bad {
        assert!(measure(&model, &[Activation::Gelu], &o).is_err(), "{o:?}");
    }
    assert!(measure(&model, &[], &quick()).is_err());
    assert!(model_for_inputs(0, &[4], 0).is_err());
    assert!(model_for_inputs(3, &[0], 0).is_err());
}

fn hand_sweep() -> SweepReport {
    let plan = SweepPlan::grid(
        &[Activation::Relu, Activation::Gelu, Activation::Tanh],
        &[],
        &[],
        3,
        1,
        Overrides::default(),
    );
    let runs = plan
        .cells()
        .iter()
        .map(|c| RunResult {
            candidate: c.candidate,
            seed: c.seed,
            fold: c.fold,
            val_rmse: Some(1.0 + 0.1 * c.candidate as f64 + 0.01 * c.seed as f64),
            best_epoch: 3,
            epochs: 5,
            seconds_per_epoch: 0.01,
            cpu_seconds_per_epoch: Some(0.005),
            dead_fraction: 0.0,
            zero_fraction: 0.0,
            diverged: None,
        })
        .collect();
    SweepReport {
        format: SWEEP_FORMAT.into(),
        version: SWEEP_VERSION,
        plan,
        shard: None,
        runs,
        data: None,
        invocation: None,
        cost_clock: Some("thread CPU time".into()),
    }
}

#[test]
fn accuracy_is_paired_with_cost_by_activation() {
    let sweep = hand_sweep();
    let comparison = summarize(&sweep).unwrap();
    let report = tiny_report(&[Activation::Gelu]);
    let (pairs, missing) = pair_with_accuracy(&report, &comparison, &sweep);
    let labels: Vec<&str> = pairs.iter().map(|p| p.label.as_str()).collect();
    assert_eq!(labels, ["relu", "gelu"]);
    assert_eq!(missing, ["tanh"]);
    for (p, c) in pairs.iter().zip(&comparison.candidates) {
        assert_eq!(p.rmse, c.mean_rmse);
        assert_eq!(p.rmse_ci95, c.ci95);
    }
    assert_eq!(
        pairs[1].row_predict,
        report.candidates[1].time(Measure::RowPredict)
    );
    let md = accuracy_cost_markdown(&pairs, &missing);
    assert!(md.contains("Not timed: tanh"));
    let svg = plot_accuracy_cost(&pairs, &report);
    assert!(svg.contains(">relu<") && svg.contains(">gelu<"));
}

fn small_table() -> Table {
    let mut s = String::from("a,b,y\n");
    for i in 0..120 {
        let (a, b) = ((i as f64 * 0.37).sin(), (i as f64 * 0.61).cos());
        s += &format!("{a},{b},{}\n", (a * b).max(0.0) + 0.5 * a);
    }
    Table::read(s.as_bytes(), "t.csv", &ReadOptions::default()).unwrap()
}

/// Compare records each cell's thread CPU time and says how; a thread cannot use more CPU
/// time than the wall time of the same span (small slack for the two clocks being read a
/// few instructions apart).
#[test]
fn compare_reports_thread_cpu_time_per_cell_and_how_it_was_measured() {
    let plan = SweepPlan::grid(
        &[Activation::Relu, Activation::Gelu],
        &[],
        &[],
        2,
        1,
        Overrides {
            hidden: Some(vec![8]),
            epochs: Some(5),
            ..Overrides::default()
        },
    );
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let report = run(&small_table(), &spec, &plan, None).unwrap();
    let clock = report.cost_clock.clone().expect("Linux has a thread clock");
    assert!(clock.contains("CLOCK_THREAD_CPUTIME_ID"));
    for r in &report.runs {
        let cpu = r.cpu_seconds_per_epoch.expect("measured");
        assert!(
            cpu > 0.0 && cpu <= r.seconds_per_epoch * 1.01 + 1e-5,
            "{r:?}"
        );
    }
    let json: serde_json::Value = serde_json::from_str(&report.to_json()).unwrap();
    assert!(json["runs"][0]["cpu_seconds_per_epoch"].is_f64());
    assert!(
        json["runs"][0]["seconds_per_epoch"].is_f64(),
        "old name kept"
    );
    assert!(json["cost_clock"].is_string());
    let comparison = summarize(&report).unwrap();
    for c in &comparison.candidates {
        let (m, (lo, hi)) = (c.cpu_seconds_per_epoch.unwrap(), c.cpu_ci95.unwrap());
        assert!(lo <= m && m <= hi);
    }
    assert!(markdown(&comparison).contains("thread CPU ms / epoch"));
    assert!(cost_footnote(&comparison).contains("CLOCK_THREAD_CPUTIME_ID"));
    // A report from before the field existed still reads, with no CPU time.
    let mut old = json.clone();
    old.as_object_mut().unwrap().remove("cost_clock");
    for r in old["runs"].as_array_mut().unwrap() {
        r.as_object_mut().unwrap().remove("cpu_seconds_per_epoch");
    }
    let old = SweepReport::from_json(&old.to_string()).unwrap();
    let summary = summarize(&old).unwrap();
    assert!(summary.candidates[0].cpu_seconds_per_epoch.is_none());
    assert!(cost_footnote(&summary).contains("not measured"));
}

fn relume(args: &[&str]) -> (i32, String) {
    let o = Command::new(env!("CARGO_BIN_EXE_relume"))
        .args(args)
        .output()
        .unwrap();
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

#[test]
fn the_command_refuses_what_it_cannot_do() {
    let dir = std::env::temp_dir().join(format!("relume-cost-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let not_sweep = dir.join("x.json");
    std::fs::write(&not_sweep, "{\"format\": \"relume-cost\"}").unwrap();
    let not_sweep = not_sweep.to_str().unwrap();
    let cases: [(&[&str], &str); 7] = [
        (&["cost", "--inputs", "4", "--layers", "8"], "--activations"),
        (
            &[
                "cost",
                "--model",
                "m.json",
                "--inputs",
                "4",
                "--layers",
                "8",
                "--activations",
                "relu",
            ],
            "cannot be used with",
        ),
        (&["cost", "--activations", "relu"], "--model"),
        (
            &[
                "cost",
                "--inputs",
                "4",
                "--layers",
                "8",
                "--activations",
                "relu",
                "--rounds",
                "5",
            ],
            "--rounds 5",
        ),
        (
            &[
                "cost",
                "--inputs",
                "0",
                "--layers",
                "8",
                "--activations",
                "relu",
            ],
            "--inputs 0",
        ),
        (
            &[
                "cost",
                "--inputs",
                "4",
                "--layers",
                "8",
                "--activations",
                "relu",
                "--accuracy",
                not_sweep,
            ],
            "not a sweep report",
        ),
        (
            &[
                "cost",
                "--inputs",
                "4",
                "--layers",
                "8",
                "--activations",
                "relu",
                "--plot",
                "/nonexistent-dir/c.svg",
            ],
            "--plot",
        ),
    ];
    for (args, says) in cases {
        let (code, err) = relume(args);
        assert_eq!(code, 2, "{args:?}: {err}");
        assert!(err.contains(says), "{args:?} should say {says:?}: {err}");
    }
    std::fs::remove_dir_all(dir).ok();
}

#[test]
fn the_command_writes_report_table_and_accuracy_chart() {
    let dir = std::env::temp_dir().join(format!("relume-cost-out-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let at = |name: &str| dir.join(name).to_str().unwrap().to_string();
    std::fs::write(at("cmp.json"), hand_sweep().to_json()).unwrap();
    let (code, err) = relume(&[
        "cost",
        "--inputs",
        "3",
        "--layers",
        "8,8",
        "--activations",
        "gelu,tanh",
        "--rounds",
        "6",
        "--accuracy",
        &at("cmp.json"),
        "--report",
        &at("c.json"),
        "--table",
        &at("c.md"),
        "--plot",
        &at("c.svg"),
    ]);
    assert_eq!(code, 0, "{err}");
    let report = CostReport::from_json(&std::fs::read_to_string(at("c.json")).unwrap()).unwrap();
    let names: Vec<&str> = report
        .candidates
        .iter()
        .map(|c| c.activation.as_str())
        .collect();
    assert_eq!(names, ["relu", "gelu", "tanh"]);
    let md = std::fs::read_to_string(at("c.md")).unwrap();
    assert!(md.contains("validation RMSE") && md.contains(&report.cpu));
    let svg = std::fs::read_to_string(at("c.svg")).unwrap();
    assert!(svg.contains("Accuracy against single-row prediction cost"));
    std::fs::remove_dir_all(dir).ok();
}
