//! The command's loss, schedule, clipping, dropout, L1 and revival options: what each does, what
//! the model file and `evaluate` say about it, and the combinations that are refused.

mod common;

use common::cli::{fails, ok, path, relume};

use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use std::path::Path;

/// Synthetic table (for these tests only): y = 3·x1 + sin(3·x2) + (0.2 + x1)·e with e ~ N(0, 1)
/// (the spread grows with x1), plus, with probability `outliers`, a gross error drawn from
/// U(20, 40) added to y. Returns the CSV path and the noise-free median 3·x1 + sin(3·x2) per row.
fn table(name: &str, rows: usize, seed: u64, spread: bool, outliers: f64) -> (String, Vec<f64>) {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut text = String::from("x1,x2,y\n");
    let mut median = Vec::new();
    for _ in 0..rows {
        let (a, b): (f64, f64) = (rng.random(), rng.random());
        let e: f64 = StandardNormal.sample(&mut rng);
        let centre = 3.0 * a + (3.0 * b).sin();
        let scale = if spread { 0.2 + a } else { 0.3 };
        let mut y = centre + scale * e;
        if rng.random::<f64>() < outliers {
            y += rng.random_range(20.0..40.0);
        }
        text += &format!("{a},{b},{y}\n");
        median.push(centre);
    }
    let p = path(name);
    std::fs::write(&p, text).unwrap();
    (p, median)
}

/// The `prediction` column of a prediction file.
fn predictions(file: &str) -> Vec<f64> {
    let text = std::fs::read_to_string(file).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let k = header.iter().position(|h| *h == "prediction").unwrap();
    lines
        .map(|l| l.split(',').nth(k).unwrap().parse().unwrap())
        .collect()
}

fn targets(file: &str) -> Vec<f64> {
    let text = std::fs::read_to_string(file).unwrap();
    text.lines()
        .skip(1)
        .map(|l| l.rsplit(',').next().unwrap().parse().unwrap())
        .collect()
}

fn json(file: &str) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(file).unwrap()).unwrap()
}

#[test]
fn a_quantile_model_puts_the_asked_share_of_held_out_targets_below_it() {
    // Koenker & Bassett 1978: minimizing the pinball loss at τ estimates the conditional τ
    // quantile, so on fresh rows about τ of the targets fall below the prediction. The band
    // [0.85, 0.95] is the issue's; with 3000 held-out rows the binomial sd is 0.005.
    let (train, _) = table("het.csv", 800, 1, true, 0.0);
    let (test, _) = table("het_test.csv", 3000, 2, true, 0.0);
    let model = path("q90.json");
    let (_, err) = ok(&[
        "train",
        "--data",
        &train,
        "--target",
        "y",
        "--loss",
        "quantile:0.9",
        "--members",
        "2",
        "--out",
        &model,
    ]);
    assert!(err.contains("loss: quantile:0.9"), "{err}");
    assert!(
        !err.contains("worse than the mean"),
        "a quantile model's R² is no warning: {err}"
    );
    let inspect =
        String::from_utf8_lossy(&relume(&["inspect", "--model", &model]).stdout).to_string();
    assert!(
        inspect.contains("predicts the 0.9 quantile"),
        "inspect names the quantile: {inspect}"
    );
    let report = path("q90_eval.json");
    let o = relume(&[
        "evaluate", "--model", &model, "--data", &test, "--report", &report,
    ]);
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{out}");
    assert!(out.contains("pinball") && out.contains("below"), "{out}");
    let j = json(&report);
    let below = j["share_below"].as_f64().unwrap();
    assert!((0.85..=0.95).contains(&below), "share below {below}");
    assert_eq!(j["quantile"].as_f64(), Some(0.9));
    assert!(j["pinball_loss"].as_f64().unwrap() > 0.0);
    // The share agrees with a count over the written predictions.
    let file = path("q90_pred.csv");
    ok(&[
        "predict", "--model", &model, "--data", &test, "--out", &file,
    ]);
    let (p, t) = (predictions(&file), targets(&test));
    let counted = p.iter().zip(&t).filter(|(p, t)| t <= p).count() as f64 / t.len() as f64;
    assert!((counted - below).abs() < 1e-9, "{counted} vs {below}");
}

#[test]
fn the_median_quantile_model_matches_the_mae_model() {
    // The pinball loss at τ = 0.5 is half the absolute error (Koenker & Bassett 1978), so both
    // estimate the conditional median. L-BFGS without a penalty is nearly indifferent to the
    // factor 1/2; what remains is the path of a non-convex fit. Tolerance (ours): the mean
    // absolute difference of the two models' predictions is under 10% of the target's sd (0.027
    // measured on 2026-12-02 against a target sd of 1.17), and both stay near the true median.
    let (train, _) = table("med.csv", 800, 3, true, 0.0);
    let (test, truth) = table("med_test.csv", 1000, 4, true, 0.0);
    let mut preds = Vec::new();
    for loss in ["mae", "quantile:0.5"] {
        let model = path(&format!("med_{loss}.json"));
        let out = path(&format!("med_{loss}.csv"));
        ok(&[
            "train",
            "--data",
            &train,
            "--target",
            "y",
            "--loss",
            loss,
            "--l2",
            "0",
            "--members",
            "1",
            "--epochs",
            "60",
            "--optimizer",
            "lbfgs",
            "--out",
            &model,
        ]);
        ok(&["predict", "--model", &model, "--data", &test, "--out", &out]);
        preds.push(predictions(&out));
    }
    let t = targets(&test);
    let mean = t.iter().sum::<f64>() / t.len() as f64;
    let sd = (t.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / t.len() as f64).sqrt();
    let diff = preds[0]
        .iter()
        .zip(&preds[1])
        .map(|(a, b)| (a - b).abs())
        .sum::<f64>()
        / t.len() as f64;
    assert!(
        diff < 0.1 * sd,
        "mean |mae − quantile:0.5| = {diff}, sd {sd}"
    );
    for p in &preds {
        let off = p
            .iter()
            .zip(&truth)
            .map(|(a, b)| (a - b).abs())
            .sum::<f64>()
            / p.len() as f64;
        assert!(off < 0.25 * sd, "mean distance to the true median {off}");
    }
}

#[test]
fn the_huber_loss_resists_gross_outliers_in_the_target() {
    // Huber 1964: a loss that grows linearly beyond δ bounds each row's pull, so 5% gross
    // errors in the training target move the fit far less than under squared error.
    let (train, _) = table("outliers.csv", 600, 5, false, 0.05);
    let (clean, _) = table("clean.csv", 1000, 6, false, 0.0);
    let mut rmse = Vec::new();
    for loss in ["mse", "huber"] {
        let model = path(&format!("o_{loss}.json"));
        let report = path(&format!("o_{loss}_eval.json"));
        ok(&[
            "train",
            "--data",
            &train,
            "--target",
            "y",
            "--loss",
            loss,
            "--members",
            "1",
            "--out",
            &model,
        ]);
        let o = relume(&[
            "evaluate", "--model", &model, "--data", &clean, "--report", &report,
        ]);
        assert!(o.status.success());
        rmse.push(json(&report)["rmse"].as_f64().unwrap());
    }
    assert!(
        rmse[1] < rmse[0],
        "huber clean RMSE {} should beat mse {}",
        rmse[1],
        rmse[0]
    );
}

#[test]
fn schedules_and_revivals_show_in_the_run_report_and_chart() {
    let (train, _) = table("sched.csv", 400, 7, false, 0.0);
    let (model, report, plot) = (path("s.json"), path("s_run.json"), path("s.svg"));
    ok(&[
        "train",
        "--data",
        &train,
        "--target",
        "y",
        "--optimizer",
        "adam",
        "--epochs",
        "12",
        "--patience",
        "50",
        "--members",
        "1",
        "--schedule",
        "step:4:0.5",
        "--revive-every",
        "3",
        "--revive-tau",
        "1",
        "--clip-norm",
        "5",
        "--clip-value",
        "1",
        "--dropout",
        "0.1",
        "--l1",
        "1e-4",
        "--l2",
        "1e-4",
        "--l1-proximal",
        "--out",
        &model,
        "--report",
        &report,
        "--plot",
        &plot,
    ]);
    let r = json(&report);
    let changes: Vec<(u64, f64)> = r["rate_changes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| (c["epoch"].as_u64().unwrap(), c["lr"].as_f64().unwrap()))
        .collect();
    // step:4:0.5 halves the base rate 3e-3 at epochs 4 and 8.
    assert_eq!(changes.len(), 2, "{changes:?}");
    assert_eq!(changes[0].0, 4);
    assert!((changes[0].1 - 1.5e-3).abs() < 1e-12);
    assert_eq!(changes[1].0, 8);
    // τ = 1 counts about half of every layer's units as dormant (a score ≤ 1 is at most the
    // layer mean), so every third epoch revives some.
    let revivals = r["revivals"].as_array().unwrap();
    let epochs: Vec<u64> = revivals
        .iter()
        .map(|v| v["epoch"].as_u64().unwrap())
        .collect();
    assert!(
        !epochs.is_empty() && epochs.iter().all(|e| (e + 1) % 3 == 0),
        "{epochs:?}"
    );
    let config = &r["config"];
    assert_eq!(config["clip_norm"].as_f64(), Some(5.0));
    assert_eq!(config["clip_value"].as_f64(), Some(1.0));
    assert_eq!(config["objective"]["penalty"]["l1_mode"], "proximal");
    assert!(
        r["network"].to_string().contains("dropout"),
        "dropout layers"
    );
    let svg = std::fs::read_to_string(&plot).unwrap();
    assert!(
        svg.contains("rate changed (2)") && svg.contains("units revived"),
        "chart marks"
    );
}

#[test]
fn options_that_cannot_apply_or_are_out_of_range_are_refused() {
    let (small, _) = table("refuse.csv", 200, 8, false, 0.0);
    let out = path("never.json");
    let train = |extra: &[&str]| {
        let mut args = vec!["train", "--data", &small, "--target", "y", "--out", &out];
        args.extend_from_slice(extra);
        fails(&args)
    };
    // L-BFGS (the default on this small table) takes no schedule, clipping or rate.
    let err = train(&["--schedule", "cosine:100"]);
    assert!(
        err.contains("--schedule") && err.contains("L-BFGS"),
        "{err}"
    );
    let err = train(&["--clip-norm", "1", "--lr", "0.01"]);
    assert!(err.contains("--clip-norm") && err.contains("--lr"), "{err}");
    let err = train(&["--optimizer", "lbfgs", "--l1", "0.01", "--l1-proximal"]);
    assert!(err.contains("--l1-proximal"), "{err}");
    let err = train(&["--schedule", "sawtooth"]);
    assert!(err.contains("sawtooth") && err.contains("cosine"), "{err}");
    let err = train(&["--schedule", "step"]);
    assert!(err.contains("step:20"), "{err}");
    let err = train(&["--loss", "quantile:1.5"]);
    assert!(err.contains("tau"), "{err}");
    let err = train(&["--dropout", "1"]);
    assert!(err.contains("--dropout"), "{err}");
    let err = train(&["--revive-every", "0"]);
    assert!(err.contains("--revive-every"), "{err}");
    let err = train(&["--revive-tau", "0.5"]);
    assert!(err.contains("--revive-every"), "{err}");
    let err = train(&["--optimizer", "adam", "--clip-norm", "-1"]);
    assert!(
        err.contains("clip_norm") || err.contains("clip-norm"),
        "{err}"
    );
    // compare takes the same options and refuses the same way.
    let err = fails(&[
        "compare",
        "--data",
        &small,
        "--target",
        "y",
        "--activations",
        "relu",
        "--schedule",
        "step:5",
    ]);
    assert!(err.contains("--schedule"), "{err}");
    assert!(!Path::new(&out).exists(), "nothing is written on refusal");
}
