//! The training loop: closed-form solutions it must reach, and the behaviour of batching,
//! validation, early stopping, clipping, the divergence guard and determinism.

mod common;

use common::normal_matrix;
use nalgebra::{DMatrix, DVector};
use ndarray::{Array2, Axis};
use relume::fit::optim::OptimizerChoice;
use relume::fit::train::{clip, EpochRecord, Flow, Observer, StopReason};
use relume::nn::layer::Role;
use relume::{
    train, Activation, Init, LayerSpec, Loss, Network, NetworkPlan, Objective, Penalty,
    TrainConfig, TrainError,
};

fn linear_model(inputs: usize) -> Network<f64> {
    let spec = LayerSpec::Affine {
        inputs,
        outputs: 1,
        weight_init: Init::ZERO,
        bias_init: Init::ZERO,
    };
    Network::from_specs(inputs, &[spec]).unwrap()
}

fn full_batch(penalty: Penalty) -> TrainConfig {
    TrainConfig {
        optimizer: OptimizerChoice::Lbfgs { history: 10 },
        epochs: 1000,
        val_frac: 0.0,
        patience: None,
        objective: Objective::new(Loss::Mse, penalty),
        ..TrainConfig::default()
    }
}

fn to_nalgebra(a: &Array2<f64>) -> DMatrix<f64> {
    DMatrix::from_fn(a.nrows(), a.ncols(), |i, j| a[(i, j)])
}

#[test]
fn l2_linear_model_matches_the_closed_form_ridge_solution() {
    // Hoerl & Kennard 1970: the ridge estimate is (XᵀX + λ'I)⁻¹Xᵀy. Our objective is
    // mean(r²) + λ·Σw² with a free intercept, so on centered data λ' = n·λ. Solved with nalgebra.
    let (n, p, lambda) = (60, 4, 0.05);
    let x = normal_matrix(n, p, 1);
    let beta = [1.5, -2.0, 0.3, 0.8];
    let noise = normal_matrix(n, 1, 2);
    let y = Array2::from_shape_fn((n, 1), |(i, _)| {
        3.0 + (0..p).map(|j| beta[j] * x[(i, j)]).sum::<f64>() + 0.5 * noise[(i, 0)]
    });
    let mut net = linear_model(p);
    let summary = train(
        &mut net,
        x.view(),
        y.view(),
        None,
        &full_batch(Penalty::l2(lambda)),
        &mut [],
    )
    .unwrap();
    println!(
        "ridge: L-BFGS stopped by {:?} after {} iterations",
        summary.stop,
        summary.history.len()
    );

    let (xm, ym) = (x.mean_axis(Axis(0)).unwrap(), y.mean().unwrap());
    let xc = to_nalgebra(&(&x - &xm));
    let yc = DVector::from_iterator(n, y.iter().map(|v| v - ym));
    let lhs = xc.transpose() * &xc + DMatrix::identity(p, p) * (n as f64 * lambda);
    let w = lhs.lu().solve(&(xc.transpose() * yc)).unwrap();
    let b = ym - (0..p).map(|j| w[j] * xm[j]).sum::<f64>();
    for j in 0..p {
        let ours = net.params()[j];
        assert!(
            (ours - w[j]).abs() <= 1e-6 * w[j].abs(),
            "w{j}: {ours} vs {}",
            w[j]
        );
    }
    let ours_b = net.params()[p];
    assert!((ours_b - b).abs() <= 1e-6 * b.abs(), "bias {ours_b} vs {b}");
}

#[test]
fn proximal_l1_on_an_orthonormal_design_gives_the_soft_thresholded_ols() {
    // Tibshirani 1996, Sec. 2.2: with orthonormal columns the lasso solution is
    // sign(β̂)(|β̂| − γ)₊ with β̂ the OLS estimate. Our objective mean(r²) + l1·Σ|w| gives
    // γ = n·l1/2. Columns are made orthonormal and orthogonal to the intercept with nalgebra's QR.
    let (n, p) = (40, 6);
    let z = normal_matrix(n, p + 1, 3);
    let mut with_ones = to_nalgebra(&z);
    with_ones.column_mut(0).fill(1.0);
    let q = with_ones.qr().q();
    let x = Array2::from_shape_fn((n, p), |(i, j)| q[(i, j + 1)]);
    let beta = [3.0, -2.0, 0.05, 1.0, -0.02, 0.5];
    let noise = normal_matrix(n, 1, 4);
    let y = Array2::from_shape_fn((n, 1), |(i, _)| {
        4.0 + (0..p).map(|j| beta[j] * x[(i, j)]).sum::<f64>() + 0.01 * noise[(i, 0)]
    });
    let gamma = 0.3;
    let l1 = 2.0 * gamma / n as f64;
    let config = TrainConfig {
        optimizer: OptimizerChoice::Sgd {
            momentum: 0.0,
            nesterov: false,
        },
        lr: 0.4,
        batch: n,
        epochs: 3000,
        val_frac: 0.0,
        patience: None,
        objective: Objective::new(Loss::Mse, Penalty::l1(l1).proximal()),
        ..TrainConfig::default()
    };
    let mut net = linear_model(p);
    train(&mut net, x.view(), y.view(), None, &config, &mut []).unwrap();
    let mut zeros = 0;
    for j in 0..p {
        let ols: f64 = (0..n).map(|i| x[(i, j)] * y[(i, 0)]).sum();
        let expected = ols.signum() * (ols.abs() - gamma).max(0.0);
        let ours = net.params()[j];
        if expected == 0.0 {
            assert_eq!(ours, 0.0, "w{j} must be exactly zero (OLS {ols})");
            zeros += 1;
        } else {
            assert!((ours - expected).abs() < 1e-9, "w{j}: {ours} vs {expected}");
        }
    }
    assert_eq!(zeros, 2);
}

/// Records the parameters after every epoch.
#[derive(Default)]
struct Snapshots {
    params: Vec<Vec<f64>>,
    val: Vec<Option<f64>>,
}

impl Observer<f64> for Snapshots {
    fn after_epoch(&mut self, record: &EpochRecord, net: &mut Network<f64>) -> Flow {
        self.params.push(net.params().to_vec());
        self.val.push(record.val_loss);
        Flow::Continue
    }
}

fn noisy_task(rows: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    let x = normal_matrix(rows, 3, seed);
    let noise = normal_matrix(rows, 1, seed + 100);
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| {
        (2.0 * x[(i, 0)]).sin() + x[(i, 1)] * x[(i, 2)] + 0.3 * noise[(i, 0)]
    });
    (x, y)
}

#[test]
fn early_stopping_restores_the_best_validation_weights() {
    let (x, y) = noisy_task(120, 5);
    let mut net = NetworkPlan::new(3, &[64, 64], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    let config = TrainConfig {
        lr: 1e-2,
        epochs: 400,
        patience: Some(15),
        ..TrainConfig::default()
    };
    let mut snaps = Snapshots::default();
    let summary = train(
        &mut net,
        x.view(),
        y.view(),
        None,
        &config,
        &mut [&mut snaps],
    )
    .unwrap();
    assert_eq!(
        summary.stop,
        StopReason::EarlyStop,
        "a small noisy task overfits"
    );
    assert!(summary.history.len() <= summary.best_epoch + 16);
    let best = snaps
        .val
        .iter()
        .map(|v| v.unwrap())
        .fold(f64::INFINITY, f64::min);
    assert_eq!(summary.best_val_loss, Some(best));
    assert_eq!(net.params(), snaps.params[summary.best_epoch].as_slice());
    assert_eq!(summary.rows, (96, 24));
}

#[test]
fn a_caller_given_validation_set_is_used_as_is() {
    let (x, y) = noisy_task(50, 6);
    let (vx, vy) = noisy_task(30, 7);
    let mut net = NetworkPlan::new(3, &[8], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    let config = TrainConfig {
        epochs: 3,
        patience: None,
        ..TrainConfig::default()
    };
    let summary = train(
        &mut net,
        x.view(),
        y.view(),
        Some((vx.view(), vy.view())),
        &config,
        &mut [],
    )
    .unwrap();
    assert_eq!(summary.rows, (50, 30));
    let last = summary.history.last().unwrap();
    let mut check = net.clone();
    // The reported validation loss is the loss of the kept weights on the given set.
    let out = check.predict(vx.view()).unwrap();
    let loss = Loss::Mse.value(out.view(), vy.view()).unwrap();
    assert_eq!(Some(loss), summary.best_val_loss);
    assert!(last.val_loss.is_some());
}

#[test]
fn the_last_partial_batch_is_trained_on() {
    let (x, y) = noisy_task(70, 8);
    let mut net = NetworkPlan::new(3, &[8], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    let config = TrainConfig {
        epochs: 2,
        batch: 32,
        val_frac: 0.0,
        ..TrainConfig::default()
    };
    let summary = train(&mut net, x.view(), y.view(), None, &config, &mut []).unwrap();
    // 70 rows in batches of 32: 32 + 32 + 6.
    assert!(summary.history.iter().all(|e| e.steps == 3));
}

#[test]
fn same_seed_and_data_give_bit_identical_weights() {
    let (x, y) = noisy_task(200, 9);
    let (x, y) = (x.mapv(|v| v as f32), y.mapv(|v| v as f32));
    let run = |seed: u64| {
        let mut net = NetworkPlan::new(3, &[16, 16], Activation::RANDOM_LEAKY)
            .dropout(0.1)
            .build::<f32>(seed)
            .unwrap();
        let config = TrainConfig {
            epochs: 5,
            seed,
            ..TrainConfig::default()
        };
        train(&mut net, x.view(), y.view(), None, &config, &mut []).unwrap();
        net.params().to_vec()
    };
    let a = run(3);
    assert_eq!(a, run(3));
    assert_ne!(a, run(4));
}

#[test]
fn gradient_clipping_by_value_and_by_global_norm() {
    // Pascanu, Mikolov & Bengio 2013: if ‖g‖ > c, g ← c·g/‖g‖.
    let mut g = vec![3.0_f64, 4.0];
    let before = clip(&mut g, None, Some(1.0));
    assert_eq!(before, 5.0);
    assert!((g[0] - 0.6).abs() < 1e-15 && (g[1] - 0.8).abs() < 1e-15);
    let mut g = vec![3.0_f64, -4.0, 0.5];
    clip(&mut g, Some(1.0), None);
    assert_eq!(g, vec![1.0, -1.0, 0.5]);
    let mut g = vec![0.3_f64, 0.4];
    clip(&mut g, None, Some(1.0));
    assert_eq!(g, vec![0.3, 0.4], "below the threshold nothing changes");
}

#[test]
fn clipping_keeps_every_step_norm_bounded_in_training() {
    let (x, y) = noisy_task(64, 10);
    let mut net = NetworkPlan::new(3, &[16], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    struct MaxNorm(f64);
    impl Observer<f64> for MaxNorm {
        fn after_step(&mut self, _: &relume::fit::train::StepRecord, net: &Network<f64>) {
            let norm = net.grads().iter().map(|g| g * g).sum::<f64>().sqrt();
            self.0 = self.0.max(norm);
        }
    }
    let mut seen = MaxNorm(0.0);
    let config = TrainConfig {
        epochs: 5,
        clip_norm: Some(0.01),
        ..TrainConfig::default()
    };
    let summary = train(
        &mut net,
        x.view(),
        y.view(),
        None,
        &config,
        &mut [&mut seen],
    )
    .unwrap();
    assert!(seen.0 <= 0.01 * (1.0 + 1e-12), "clipped norm {}", seen.0);
    assert!(
        summary.history[0].grad_norm_max > 0.01,
        "raw norms are reported before clipping"
    );
    assert!(summary.history[0].clipped_steps > 0);
}

fn exploding_config(max_rollbacks: usize) -> TrainConfig {
    TrainConfig {
        optimizer: OptimizerChoice::Sgd {
            momentum: 0.9,
            nesterov: false,
        },
        lr: 1e4,
        epochs: 5,
        val_frac: 0.0,
        max_rollbacks,
        ..TrainConfig::default()
    }
}

/// Trains a fresh f32 network with a rate that surely explodes; returns it with the outcome.
fn exploding_run(max_rollbacks: usize) -> (Network<f32>, Result<relume::TrainSummary, TrainError>) {
    let (x, y) = noisy_task(64, 11);
    let (x, y) = (x.mapv(|v| v as f32), y.mapv(|v| v as f32));
    let mut net = NetworkPlan::new(3, &[16, 16], Activation::Relu)
        .build::<f32>(2)
        .unwrap();
    let outcome = train(
        &mut net,
        x.view(),
        y.view(),
        None,
        &exploding_config(max_rollbacks),
        &mut [],
    );
    (net, outcome)
}

#[test]
fn the_guard_rolls_back_and_halves_the_rate_until_training_is_stable() {
    let (net, outcome) = exploding_run(40);
    let summary = outcome.unwrap();
    println!(
        "guard: {} roll-backs, final rate {:e}",
        summary.rollbacks.len(),
        summary.history.last().unwrap().lr
    );
    assert!(!summary.rollbacks.is_empty());
    assert!(net.params().iter().all(|p| p.is_finite()));
    let lr = summary.history.last().unwrap().lr;
    assert_eq!(lr, 1e4 * 0.5f64.powi(summary.rollbacks.len() as i32));
    assert!(summary.history.iter().all(|e| e.train_loss.is_finite()));
}

#[test]
fn the_guard_gives_up_with_a_clear_error_and_a_finite_model() {
    let (net, outcome) = exploding_run(2);
    let err = outcome.unwrap_err();
    let text = err.to_string();
    println!("{text}");
    let TrainError::Diverged {
        epoch,
        location,
        rollbacks,
        ..
    } = &err
    else {
        panic!("expected divergence, got {err:?}");
    };
    assert_eq!(*rollbacks, 2);
    assert!(*epoch < 5);
    assert!(location.contains("layer"), "{location}");
    for needle in ["epoch ", "step", "layer", "lower", "clip", "leaky"] {
        assert!(text.contains(needle), "message lacks '{needle}': {text}");
    }
    assert!(net.params().iter().all(|p| p.is_finite()));
}

#[test]
fn bad_training_data_is_an_error_naming_the_cell() {
    let (mut x, y) = noisy_task(20, 12);
    x[(7, 2)] = f64::NAN;
    let mut net = NetworkPlan::new(3, &[4], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    let err = train(
        &mut net,
        x.view(),
        y.view(),
        None,
        &TrainConfig::default(),
        &mut [],
    )
    .unwrap_err();
    assert!(err.to_string().contains("row 7, column 2"), "{err}");
    let err = train(
        &mut net,
        x.slice(ndarray::s![..0, ..]),
        y.slice(ndarray::s![..0, ..]),
        None,
        &TrainConfig::default(),
        &mut [],
    )
    .unwrap_err();
    assert!(err.to_string().contains("no rows"), "{err}");
    let bad = TrainConfig {
        lr: -1.0,
        ..TrainConfig::default()
    };
    assert!(train(&mut net, x.view(), y.view(), None, &bad, &mut []).is_err());
    let _ = Role::Weight;
}

#[test]
fn training_on_listed_rows_matches_training_on_their_copies() {
    // The rows are taken by index, not copied out; the result must be the same bits, for the
    // mini-batch loop and for L-BFGS (whose full batch is gathered once).
    use relume::fit::train::train_on_rows;
    let x = normal_matrix(900, 4, 31).mapv(|v| v as f32);
    let y = x
        .map_axis(Axis(1), |r| r[0] * 2.0 - r[1] + r[2] * r[3])
        .insert_axis(Axis(1));
    let train_rows: Vec<usize> = (0..900).filter(|i| i % 5 != 2).rev().collect();
    let val_rows: Vec<usize> = (0..900).filter(|i| i % 5 == 2).collect();
    for optimizer in [
        OptimizerChoice::Adam { amsgrad: false },
        OptimizerChoice::Lbfgs { history: 8 },
    ] {
        let config = TrainConfig {
            epochs: 6,
            batch: 16,
            optimizer,
            ..TrainConfig::default()
        };
        let plan = NetworkPlan::new(4, &[12, 12], Activation::Relu);
        let mut by_index = plan.build::<f32>(5).unwrap();
        let mut by_copy = plan.build::<f32>(5).unwrap();
        let a = train_on_rows(
            &mut by_index,
            x.view(),
            y.view(),
            &train_rows,
            &val_rows,
            &config,
            &mut [],
        )
        .unwrap();
        let (xt, yt) = (
            x.select(Axis(0), &train_rows),
            y.select(Axis(0), &train_rows),
        );
        let (xv, yv) = (x.select(Axis(0), &val_rows), y.select(Axis(0), &val_rows));
        let b = train(
            &mut by_copy,
            xt.view(),
            yt.view(),
            Some((xv.view(), yv.view())),
            &config,
            &mut [],
        )
        .unwrap();
        assert_eq!(by_index.params(), by_copy.params(), "{optimizer:?}");
        assert_eq!(a.best_epoch, b.best_epoch);
        assert_eq!(a.best_val_loss, b.best_val_loss);
        assert_eq!(a.rows, b.rows);
    }
    // Standardizer fitted on listed rows = fitted on their copy.
    let fitted = relume::Standardizer::fit_rows(x.view(), &train_rows);
    assert_eq!(
        fitted,
        relume::Standardizer::fit(x.select(Axis(0), &train_rows).view())
    );
    // A row past the end is an error, not a panic.
    let mut net = NetworkPlan::new(4, &[3], Activation::Relu)
        .build::<f32>(1)
        .unwrap();
    let err = train_on_rows(
        &mut net,
        x.view(),
        y.view(),
        &[0, 900],
        &[],
        &TrainConfig::default(),
        &mut [],
    )
    .unwrap_err();
    assert!(err.to_string().contains("row 900"), "{err}");
}
