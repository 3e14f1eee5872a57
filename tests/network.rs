//! The network: construction errors, shapes, flat views, determinism and precision casts.

mod common;

use common::normal_matrix;
use ndarray::Array2;
use relume::nn::layer::Role;
use relume::{Activation, ConfigError, Init, LayerSpec, Loss, Network, NetworkPlan, Pass};

#[test]
fn plan_builds_the_expected_stack() {
    let net = NetworkPlan::new(10, &[64, 32], Activation::Relu)
        .dropout(0.1)
        .build::<f32>(1)
        .unwrap();
    let kinds: Vec<String> = net.specs().iter().map(|s| s.kind()).collect();
    assert_eq!(
        kinds,
        ["affine", "relu", "dropout", "affine", "relu", "dropout", "affine"]
    );
    assert_eq!(net.param_count(), 10 * 64 + 64 + 64 * 32 + 32 + 32 + 1);
    assert_eq!(net.params().len(), net.param_count());
    assert_eq!(net.grads().len(), net.param_count());
    // Tensor ranges tile the flat vector in order.
    let mut next = 0;
    for t in net.tensors() {
        assert_eq!(t.range.start, next);
        assert_eq!(t.range.len(), t.shape.0 * t.shape.1);
        next = t.range.end;
    }
    assert_eq!(next, net.param_count());
    // Biases start at zero.
    for t in net.tensors().iter().filter(|t| t.role == Role::Bias) {
        assert!(net.params()[t.range.clone()].iter().all(|&b| b == 0.0));
    }
}

#[test]
fn plan_picks_the_initializer_per_activation_and_gives_he_the_leaky_gain() {
    let weight_init = |act: Activation, init: Option<Init>| {
        let mut plan = NetworkPlan::new(4, &[8], act);
        plan.init = init;
        match plan.specs().unwrap()[0] {
            LayerSpec::Affine { weight_init, .. } => weight_init,
            _ => unreachable!(),
        }
    };
    assert_eq!(weight_init(Activation::Relu, None), Init::HE);
    assert_eq!(weight_init(Activation::Selu, None), Init::LECUN);
    assert_eq!(weight_init(Activation::Tanh, None), Init::GLOROT);
    let he_leaky = weight_init(Activation::LeakyRelu { slope: 0.2 }, Some(Init::HE));
    assert_eq!(he_leaky.variance(100, 8).unwrap(), 2.0 / (1.04 * 100.0));
}

#[test]
fn prelu_plan_learns_slopes() {
    let net = NetworkPlan::new(3, &[5], Activation::PRELU)
        .build::<f64>(1)
        .unwrap();
    let slopes: Vec<_> = net
        .tensors()
        .into_iter()
        .filter(|t| t.role == Role::Slope)
        .collect();
    assert_eq!(slopes.len(), 1);
    assert_eq!(slopes[0].shape, (1, 5));
    assert!(net.params()[slopes[0].range.clone()]
        .iter()
        .all(|&a| a == 0.25));
}

#[test]
fn bad_configurations_are_errors_not_panics() {
    assert!(Network::<f32>::new(0).is_err());
    let mut net = Network::<f32>::new(3).unwrap();
    let err = net
        .push(
            LayerSpec::Activation {
                width: 4,
                activation: Activation::Relu,
            }
            .build()
            .unwrap(),
        )
        .unwrap_err();
    assert_eq!(
        err,
        ConfigError::WidthMismatch {
            layer: 0,
            kind: "relu".into(),
            expected: 4,
            got: 3
        }
    );
    assert!(err.to_string().contains("layer 0"));
    assert!(LayerSpec::Dropout {
        width: 3,
        rate: 1.0
    }
    .build::<f32>()
    .is_err());
    assert!(LayerSpec::Activation {
        width: 3,
        activation: Activation::Elu { alpha: -1.0 }
    }
    .build::<f32>()
    .is_err());
    assert!(NetworkPlan::new(3, &[0], Activation::Relu)
        .build::<f32>(1)
        .is_err());
    assert!(NetworkPlan::new(3, &[4], Activation::Relu)
        .dropout(1.5)
        .build::<f32>(1)
        .is_err());
}

#[test]
fn shape_errors_name_the_array() {
    let mut net = NetworkPlan::new(3, &[4], Activation::Relu)
        .build::<f64>(1)
        .unwrap();
    let err = net.backward(Array2::zeros((2, 1)).view()).unwrap_err();
    assert!(err.to_string().contains("before any forward"), "{err}");
    let err = net
        .forward(Array2::zeros((2, 5)).view(), Pass::Infer)
        .unwrap_err();
    assert!(err.to_string().contains("network input"), "{err}");
    net.forward(Array2::zeros((2, 3)).view(), Pass::Train)
        .unwrap();
    let err = net.backward(Array2::zeros((3, 1)).view()).unwrap_err();
    assert!(err.to_string().contains("output gradient"), "{err}");
    let err = Loss::Mse
        .value(
            Array2::<f64>::zeros((2, 1)).view(),
            Array2::zeros((3, 1)).view(),
        )
        .unwrap_err();
    assert!(err.to_string().contains("loss target"), "{err}");
}

#[test]
fn same_seed_same_network_bit_for_bit() {
    let plan = NetworkPlan::new(6, &[16, 16], Activation::RANDOM_LEAKY).dropout(0.2);
    let x = normal_matrix(32, 6, 3).mapv(|v| v as f32);
    let run = |seed| {
        let mut net = plan.build::<f32>(seed).unwrap();
        let out = net.forward(x.view(), Pass::Train).unwrap().to_owned();
        (net.params().to_vec(), out)
    };
    let (a, out_a) = run(7);
    let (b, out_b) = run(7);
    let (c, _) = run(8);
    assert_eq!(a, b);
    assert_eq!(out_a, out_b, "training-mode noise is seeded too");
    assert_ne!(a, c);
}

#[test]
fn gradients_accumulate_until_cleared() {
    let mut net = NetworkPlan::new(3, &[4], Activation::Gelu)
        .build::<f64>(2)
        .unwrap();
    let x = normal_matrix(5, 3, 1);
    let g = Array2::ones((5, 1));
    net.forward(x.view(), Pass::Train).unwrap();
    net.backward(g.view()).unwrap();
    let once = net.grads().to_vec();
    net.backward(g.view()).unwrap();
    for (twice, once) in net.grads().iter().zip(&once) {
        assert!((twice - 2.0 * once).abs() <= 1e-12 * once.abs().max(1.0));
    }
    net.clear_gradients();
    assert!(net.grads().iter().all(|&v| v == 0.0));
}

#[test]
fn loss_gradients_match_central_differences_of_the_loss() {
    // d loss / d θ against the central difference (L(θ+h) − L(θ−h)) / 2h, in f64.
    let mut net = NetworkPlan::new(3, &[5], Activation::Gelu)
        .build::<f64>(4)
        .unwrap();
    let x = normal_matrix(6, 3, 2);
    let y = normal_matrix(6, 1, 3);
    // Stale gradients must not leak into the result.
    net.grads_mut().fill(7.0);
    let loss = net.loss_gradients(Loss::Mse, x.view(), y.view()).unwrap();
    let grads = net.grads().to_vec();
    assert!(loss > 0.0);
    for (k, &analytic) in grads.iter().enumerate() {
        let h = 1e-5;
        let at = |net: &mut relume::Network<f64>, v: f64| {
            net.params_mut()[k] = v;
            let out = net.forward(x.view(), Pass::Train).unwrap().to_owned();
            Loss::Mse.value(out.view(), y.view()).unwrap()
        };
        let p = net.params()[k];
        let numeric = (at(&mut net, p + h) - at(&mut net, p - h)) / (2.0 * h);
        at(&mut net, p);
        assert!(
            (numeric - analytic).abs() <= 1e-6 * numeric.abs().max(1.0),
            "{k}"
        );
    }
}

#[test]
fn casting_between_precisions_keeps_the_function() {
    let net32 = NetworkPlan::new(4, &[8, 8], Activation::Mish)
        .build::<f32>(5)
        .unwrap();
    let mut net64 = net32.cast::<f64>();
    let mut back = net64.cast::<f32>();
    assert_eq!(back.params(), net32.params());
    let x = normal_matrix(10, 4, 2);
    let y64 = net64.predict(x.view()).unwrap();
    let y32 = back.predict(x.mapv(|v| v as f32).view()).unwrap();
    for (a, b) in y64.iter().zip(y32.iter()) {
        assert!((a - *b as f64).abs() < 1e-5, "{a} vs {b}");
    }
}

#[test]
fn batch_size_changes_reuse_buffers_and_give_row_independent_results() {
    let mut net = NetworkPlan::new(3, &[8], Activation::Relu)
        .build::<f64>(4)
        .unwrap();
    let x = normal_matrix(9, 3, 8);
    let all = net.predict(x.view()).unwrap();
    let part = net.predict(x.slice(ndarray::s![2..5, ..])).unwrap();
    assert_eq!(part, all.slice(ndarray::s![2..5, ..]));
    let again = net.predict(x.view()).unwrap();
    assert_eq!(all, again);
}
