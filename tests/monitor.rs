//! Training diagnostics: dead and dormant units, gradient and update statistics, revival, the
//! run report and its chart.

mod common;

use common::normal_matrix;
use ndarray::{array, Array2};
use relume::fit::monitor::{dormant_scores, Monitor, MonitorConfig, Revival, WarningKind};
use relume::fit::optim::OptimizerChoice;
use relume::report::{plot_run, DataShape, PlotOptions};
use relume::{
    train, Activation, Init, LayerSpec, Network, NetworkPlan, Recipe, RunReport, TrainConfig,
};

fn task(rows: usize, inputs: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    let x = normal_matrix(rows, inputs, seed);
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| x.row(i).iter().map(|v| v.sin()).sum());
    (x, y)
}

/// Trains `net` for `config` with a default monitor probing `x`; returns the monitor.
fn watched(
    net: &mut Network<f64>,
    x: &Array2<f64>,
    y: &Array2<f64>,
    config: MonitorConfig,
    train_config: &TrainConfig,
) -> (Monitor<f64>, relume::TrainSummary) {
    let mut monitor = Monitor::new(x.view(), config);
    let summary = train(
        net,
        x.view(),
        y.view(),
        None,
        train_config,
        &mut [&mut monitor],
    )
    .unwrap();
    (monitor, summary)
}

fn one_epoch(lr: f64) -> TrainConfig {
    TrainConfig {
        epochs: 1,
        lr,
        val_frac: 0.0,
        ..TrainConfig::default()
    }
}

#[test]
fn a_layer_with_bias_minus_100_is_all_dead() {
    let specs = [
        LayerSpec::Affine {
            inputs: 3,
            outputs: 8,
            weight_init: Init::HE,
            bias_init: Init::Constant { value: -100.0 },
        },
        LayerSpec::Activation {
            width: 8,
            activation: Activation::Relu,
        },
        LayerSpec::Affine {
            inputs: 8,
            outputs: 1,
            weight_init: Init::GLOROT,
            bias_init: Init::ZERO,
        },
    ];
    let mut net = Network::<f64>::from_specs(3, &specs).unwrap();
    net.initialize(1);
    let (x, y) = task(200, 3, 1);
    let (monitor, _) = watched(&mut net, &x, &y, MonitorConfig::default(), &one_epoch(1e-3));
    let stats = &monitor.epochs[0].layers[0];
    assert_eq!(stats.dead_fraction, 1.0);
    assert_eq!(stats.zero_fraction, 1.0);
    assert_eq!(stats.dormant_fraction, 1.0);
    assert_eq!(stats.negative_fraction, 1.0);
    let warning = monitor
        .warnings
        .iter()
        .find(|w| w.kind == WarningKind::DeadUnits)
        .unwrap();
    assert!(warning.message.contains("100%"), "{}", warning.message);
    assert!(warning.remedy.contains("leaky"), "{}", warning.remedy);
}

#[test]
fn a_healthy_he_layer_has_few_dead_units_after_one_epoch() {
    // Glorot, Bordes & Bengio 2011: about half the outputs are zero per sample, but few units
    // are zero for every sample.
    let (x, y) = task(2000, 10, 2);
    let mut net = NetworkPlan::new(10, &[64, 64], Activation::Relu)
        .build::<f64>(3)
        .unwrap();
    let (monitor, _) = watched(&mut net, &x, &y, MonitorConfig::default(), &one_epoch(1e-3));
    for s in &monitor.epochs[0].layers {
        println!(
            "layer {}: dead {:.3}, zero {:.3}",
            s.layer, s.dead_fraction, s.zero_fraction
        );
        assert!(s.dead_fraction < 0.05, "{s:?}");
        assert!((0.3..0.7).contains(&s.zero_fraction), "{s:?}");
    }
    assert!(monitor
        .warnings
        .iter()
        .all(|w| w.kind != WarningKind::DeadUnits));
}

#[test]
fn dormant_scores_match_a_hand_computation() {
    // Sokar et al. 2023, Eq. 1: s_i = E|h_i| / ((1/H) Σ_k E|h_k|).
    // Column means of |h|: 0.1, 1, 2; layer mean 3.1/3; scores 0.3/3.1, 3/3.1, 6/3.1.
    let h = array![[0.1, -1.0, 2.0], [-0.1, 1.0, 2.0]];
    let s = dormant_scores(h.view());
    let expected = [0.3 / 3.1, 3.0 / 3.1, 6.0 / 3.1];
    for (a, b) in s.iter().zip(expected) {
        assert!((a - b).abs() < 1e-15, "{s:?}");
    }
    // τ = 0.1: only the first unit (0.0968) is dormant; none is dead.
    assert_eq!(s.iter().filter(|&&v| v <= 0.1).count(), 1);
    let silent = array![[0.0, 0.0], [0.0, 0.0]];
    assert_eq!(dormant_scores(silent.view()), vec![0.0, 0.0]);
}

#[test]
fn revival_brings_back_dead_units_and_training_goes_on() {
    // Sokar et al. 2023 (ReDo): re-initialize dormant units' incoming weights, zero their
    // outgoing weights, reset their optimizer state.
    let (x, y) = task(1000, 4, 4);
    let mut net = NetworkPlan::new(4, &[32, 32], Activation::Relu)
        .build::<f64>(5)
        .unwrap();
    // Kill half the units of the first hidden layer.
    let bias = net
        .tensors()
        .into_iter()
        .find(|t| t.layer == 0 && t.name == "bias")
        .unwrap();
    for p in bias.range.start..bias.range.start + 16 {
        net.params_mut()[p] = -100.0;
    }
    let config = MonitorConfig {
        revival: Some(Revival {
            every: 1,
            tau: 0.0,
            seed: 9,
        }),
        ..MonitorConfig::default()
    };
    let train_config = TrainConfig {
        epochs: 6,
        lr: 3e-3,
        val_frac: 0.0,
        ..TrainConfig::default()
    };
    let (monitor, summary) = watched(&mut net, &x, &y, config, &train_config);
    let first = &monitor.epochs[0].layers[0];
    let second = &monitor.epochs[1].layers[0];
    println!(
        "dead before revival {:.3}, revived {}, dead after {:.3}",
        first.dead_fraction, first.revived, second.dead_fraction
    );
    assert!(first.dead_fraction >= 0.5);
    assert!(first.revived >= 16);
    assert!(second.dead_fraction < 0.1, "{second:?}");
    let losses: Vec<f64> = summary.history.iter().map(|e| e.train_loss).collect();
    println!("training losses {losses:?}");
    assert!(
        losses.windows(2).skip(1).all(|w| w[1] < w[0]),
        "loss keeps falling: {losses:?}"
    );
}

#[test]
fn gradient_norm_and_update_ratio_match_a_hand_computation() {
    // 2 → 2 (ReLU) → 1, one row x = (1, 2), y = 1, plain SGD at 0.1, one step.
    // z = x·W1 + b1 = (1.0, 0.6) > 0; ŷ = 1.0·1 − 0.6·2 = −0.2; dL/dŷ = 2(ŷ − y) = −2.4;
    // δ = −2.4·(1, −2) = (−2.4, 4.8); dW1 = xᵀδ = [[−2.4, 4.8], [−4.8, 9.6]], ‖dW1‖ = 12;
    // ‖W1‖ = √0.54, so the update ratio is 0.1·12/√0.54.
    let specs = [
        LayerSpec::Affine {
            inputs: 2,
            outputs: 2,
            weight_init: Init::ZERO,
            bias_init: Init::ZERO,
        },
        LayerSpec::Activation {
            width: 2,
            activation: Activation::Relu,
        },
        LayerSpec::Affine {
            inputs: 2,
            outputs: 1,
            weight_init: Init::ZERO,
            bias_init: Init::ZERO,
        },
    ];
    let mut net = Network::<f64>::from_specs(2, &specs).unwrap();
    net.params_mut()
        .copy_from_slice(&[0.5, -0.3, 0.2, 0.4, 0.1, 0.1, 1.0, -2.0, 0.0]);
    let (x, y) = (array![[1.0, 2.0]], array![[1.0]]);
    let config = TrainConfig {
        optimizer: OptimizerChoice::Sgd {
            momentum: 0.0,
            nesterov: false,
        },
        lr: 0.1,
        epochs: 1,
        batch: 1,
        val_frac: 0.0,
        ..TrainConfig::default()
    };
    let (monitor, _) = watched(&mut net, &x, &y, MonitorConfig::default(), &config);
    let stats = &monitor.epochs[0].layers[0];
    assert!(
        (stats.grad_norm - 12.0).abs() < 1e-12,
        "{}",
        stats.grad_norm
    );
    let ratio = 0.1 * 12.0 / 0.54f64.sqrt();
    assert!(
        (stats.update_ratio - ratio).abs() < 1e-12,
        "{} vs {ratio}",
        stats.update_ratio
    );
    assert!(monitor
        .warnings
        .iter()
        .any(|w| w.kind == WarningKind::UpdateTooLarge));
}

#[test]
fn the_run_report_round_trips_and_keeps_its_field_names() {
    let (x, y) = task(300, 3, 6);
    let recipe = Recipe {
        hidden: vec![16, 16],
        ..Recipe::default()
    };
    let (_, report) = recipe
        .fit_reported(x.view(), y.view(), MonitorConfig::default(), &mut [])
        .unwrap();
    let text = report.to_json();
    assert!(
        RunReport::from_json(&text).unwrap() == report,
        "round trip changed the report"
    );
    assert!(
        report.epochs[1].layers[0].grad_norm > 0.0,
        "L-BFGS iterations count as steps"
    );
    let value: serde_json::Value = serde_json::from_str(&text).unwrap();
    let epoch = &value["epochs"][0];
    for key in ["epoch", "train_loss", "val_loss", "lr", "layers"] {
        assert!(epoch.get(key).is_some(), "epoch entry lacks {key}");
    }
    let layer = &epoch["layers"][0];
    for key in [
        "dead_fraction",
        "zero_fraction",
        "dormant_fraction",
        "grad_norm",
    ] {
        assert!(layer[key].is_number(), "layer entry lacks {key}");
    }
    assert_eq!(value["format"], "relume-run-report");
    assert_eq!(value["data"]["train_rows"], 240);
    assert_eq!(epoch["layers"].as_array().unwrap().len(), 2);
    assert!(RunReport::from_json("{}").is_err());
    let _ = DataShape {
        train_rows: 0,
        val_rows: 0,
        inputs: 0,
        outputs: 0,
    };
}

#[test]
fn the_chart_draws_both_losses_and_every_layer() {
    let (x, y) = task(1500, 3, 7);
    let recipe = Recipe {
        hidden: vec![16, 16],
        ..Recipe::default()
    };
    let (_, report) = recipe
        .fit_reported(x.view(), y.view(), MonitorConfig::default(), &mut [])
        .unwrap();
    for log_loss in [true, false] {
        let svg = plot_run(
            &report,
            PlotOptions {
                log_loss,
                ..PlotOptions::default()
            },
        );
        assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
        assert_eq!(
            svg.matches("<polyline").count(),
            4,
            "train, validation, two layers"
        );
        assert!(svg.contains("hidden layer 1 (relu)") && svg.contains("hidden layer 2 (relu)"));
        assert!(svg.contains("validation") && svg.contains("best epoch"));
    }
    // A long activation label still fits: its legend text ends inside the chart's width
    // (estimated at 6.6 px per character of 12 px sans-serif, as the chart sizes it).
    let mut long = report.clone();
    for e in &mut long.epochs {
        for l in &mut e.layers {
            l.activation = "random-leaky:0.125:0.333".to_string();
        }
    }
    let svg = plot_run(&long, PlotOptions::default());
    // The number in the quotes that open `text`.
    let number = |text: &str| -> f64 { text.split('"').next().unwrap().parse().unwrap() };
    let width = number(svg.split("width=\"").nth(1).unwrap());
    let name = "hidden layer 2 (random-leaky:0.125:0.333)";
    let before = &svg[..svg.find(&format!(">{name}<")).expect("legend entry")];
    let x = number(before.rsplit("<text x=\"").next().unwrap());
    assert!(
        x + 6.6 * name.len() as f64 <= width,
        "legend ends at {} of {width}",
        x + 6.6 * name.len() as f64
    );
    if let Ok(dir) = std::env::var("RELUME_PLOT_DIR") {
        std::fs::write(
            format!("{dir}/run.svg"),
            plot_run(&report, PlotOptions::default()),
        )
        .unwrap();
    }
}
