//! Every activation, layer and loss checked against finite differences in f64.
//!
//! Reference: a five-point central difference (Abramowitz & Stegun 1964, 25.3.6), independent
//! of the back-propagation code. Tolerance: maximum relative error 1e-6. Test points keep every
//! pre-activation at least 1e-2 from a kink of its activation, and every residual at least 1e-2
//! from a kink of the loss (stricter than the 1e-3 the derivative convention needs).

mod common;

use common::normal_matrix;
use ndarray::{Array2, ArrayView2, Zip};
use relume::nn::layer::{Layer, LayerSpec, Pass};
use relume::{check_gradients, Activation, CheckOptions, Init, Loss, Network};

const TOLERANCE: f64 = 1e-6;
const MARGIN: f64 = 1e-2;

/// 3 → 4 → 4 → 4 → 1 with `act` after the hidden layers listed in `positions` and tanh after
/// the others; optional dropout after every hidden activation.
fn network(act: Activation, positions: &[usize], dropout: f64, seed: u64) -> Network<f64> {
    let mut specs = Vec::new();
    let mut width = 3;
    for p in 0..3 {
        let a = if positions.contains(&p) {
            act
        } else {
            Activation::Tanh
        };
        specs.push(LayerSpec::Affine {
            inputs: width,
            outputs: 4,
            weight_init: a.default_init(),
            // Non-zero biases so no unit sits exactly at a kink by symmetry.
            bias_init: Init::Constant { value: 0.1 },
        });
        specs.push(LayerSpec::Activation {
            width: 4,
            activation: a,
        });
        if dropout > 0.0 {
            specs.push(LayerSpec::Dropout {
                width: 4,
                rate: dropout,
            });
        }
        width = 4;
    }
    specs.push(LayerSpec::Affine {
        inputs: width,
        outputs: 1,
        weight_init: Init::GLOROT,
        bias_init: Init::ZERO,
    });
    let mut net = Network::from_specs(3, &specs).unwrap();
    net.initialize(seed);
    net
}

/// Smallest distance of any activation input to that activation's kinks, at the last forward.
fn kink_distance(net: &Network<f64>) -> f64 {
    let mut nearest = f64::INFINITY;
    for (i, layer) in net.layers().iter().enumerate() {
        if let LayerSpec::Activation { activation, .. } = layer.spec() {
            let input = net.layer_input(i).unwrap();
            for k in activation.kinks() {
                for &v in input.iter() {
                    nearest = nearest.min((v - k).abs());
                }
            }
        }
    }
    nearest
}

/// Smallest distance of any residual to a kink of the loss.
fn loss_kink_distance(loss: Loss, pred: ArrayView2<f64>, y: ArrayView2<f64>) -> f64 {
    let kinks: Vec<f64> = match loss {
        Loss::Mse => vec![],
        Loss::Mae | Loss::Quantile { .. } => vec![0.0],
        Loss::Huber { delta } => vec![-delta, delta],
    };
    let mut nearest = f64::INFINITY;
    Zip::from(&pred).and(&y).for_each(|&p, &t| {
        for k in &kinks {
            nearest = nearest.min((p - t - k).abs());
        }
    });
    nearest
}

/// Finds a seed whose data keeps clear of every kink, then checks the gradients there.
fn check(
    label: &str,
    build: impl Fn(u64) -> Network<f64>,
    loss: Loss,
    options: CheckOptions,
) -> f64 {
    for seed in 0..200 {
        let mut net = build(seed);
        let x = normal_matrix(6, 3, 1000 + seed);
        let y = normal_matrix(6, 1, 2000 + seed);
        let pred = net.forward(x.view(), options.pass).unwrap().to_owned();
        if kink_distance(&net) < MARGIN || loss_kink_distance(loss, pred.view(), y.view()) < MARGIN
        {
            continue;
        }
        let report = check_gradients(&mut net, loss, x.view(), y.view(), options).unwrap();
        let worst = report.max_rel_error();
        println!("{label}: max relative error {worst:.2e} (seed {seed})");
        assert!(worst <= TOLERANCE, "{label}: {:?}", report.worst_tensor());
        return worst;
    }
    panic!("{label}: no seed kept the test points away from kinks");
}

#[test]
fn every_activation_in_first_middle_and_last_hidden_position() {
    for act in Activation::all() {
        for positions in [&[0][..], &[1], &[2], &[0, 1, 2]] {
            check(
                &format!("{act} at {positions:?}"),
                |seed| network(act, positions, 0.0, seed),
                Loss::Mse,
                CheckOptions::default(),
            );
        }
    }
}

#[test]
fn every_loss() {
    for loss in [
        Loss::Mse,
        Loss::Mae,
        Loss::Huber { delta: 0.5 },
        Loss::Quantile { tau: 0.3 },
    ] {
        check(
            &format!("loss {loss:?}"),
            |seed| network(Activation::Relu, &[0, 1, 2], 0.0, seed),
            loss,
            CheckOptions::default(),
        );
    }
}

#[test]
fn prelu_slopes_per_unit_and_shared() {
    for shared in [false, true] {
        let act = Activation::Prelu { init: 0.25, shared };
        let worst = check(
            &format!("{act}"),
            |seed| {
                let mut net = network(act, &[0, 1, 2], 0.0, seed);
                // Move the slopes off their common start so each one is checked on its own.
                for t in net.tensors() {
                    if t.role == relume::nn::layer::Role::Slope {
                        for (k, p) in t.range.enumerate() {
                            net.params_mut()[p] = 0.1 + 0.07 * k as f64;
                        }
                    }
                }
                net
            },
            Loss::Mse,
            CheckOptions::default(),
        );
        assert!(worst.is_finite());
    }
}

#[test]
fn dropout_and_random_slopes_with_a_held_draw() {
    check(
        "dropout 0.3 after ReLU",
        |seed| network(Activation::Relu, &[0, 1, 2], 0.3, seed),
        Loss::Mse,
        CheckOptions::default(),
    );
    check(
        "random-leaky while training",
        |seed| network(Activation::RANDOM_LEAKY, &[0, 1, 2], 0.0, seed),
        Loss::Mse,
        CheckOptions::default(),
    );
}

#[test]
fn dropout_masks_in_training_and_is_the_identity_at_inference() {
    let mut net = network(Activation::Relu, &[0, 1, 2], 0.5, 1);
    let x = normal_matrix(64, 3, 9);
    let train = net.forward(x.view(), Pass::Train).unwrap().to_owned();
    let infer_a = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    let infer_b = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
    assert_ne!(train, infer_a);
    assert_eq!(infer_a, infer_b);
}

/// A softplus layer whose derivative is deliberately 2% off.
#[derive(Debug)]
struct WrongSoftplus {
    out: Array2<f64>,
    grad: Array2<f64>,
}

impl Layer<f64> for WrongSoftplus {
    fn spec(&self) -> LayerSpec {
        LayerSpec::Activation {
            width: 4,
            activation: Activation::SOFTPLUS,
        }
    }
    fn input_width(&self) -> usize {
        4
    }
    fn output_width(&self) -> usize {
        4
    }
    fn forward(&mut self, _: &[f64], input: ArrayView2<f64>, _: Pass) {
        self.out = input.mapv(|x| Activation::SOFTPLUS.value(x));
    }
    fn output(&self) -> ArrayView2<'_, f64> {
        self.out.view()
    }
    fn input_grad(&self) -> ArrayView2<'_, f64> {
        self.grad.view()
    }
    fn backward(
        &mut self,
        _: &[f64],
        _: &mut [f64],
        input: ArrayView2<f64>,
        grad_out: ArrayView2<f64>,
    ) -> ArrayView2<'_, f64> {
        self.grad = &grad_out * &input.mapv(|x| 1.02 * Activation::SOFTPLUS.derivative(x));
        self.grad.view()
    }
}

#[test]
fn a_wrong_derivative_is_caught() {
    let mut net = Network::<f64>::new(3).unwrap();
    net.push(
        LayerSpec::Affine {
            inputs: 3,
            outputs: 4,
            weight_init: Init::HE,
            bias_init: Init::ZERO,
        }
        .build()
        .unwrap(),
    )
    .unwrap();
    net.push(Box::new(WrongSoftplus {
        out: Array2::zeros((0, 0)),
        grad: Array2::zeros((0, 0)),
    }))
    .unwrap();
    net.push(
        LayerSpec::Affine {
            inputs: 4,
            outputs: 1,
            weight_init: Init::GLOROT,
            bias_init: Init::ZERO,
        }
        .build()
        .unwrap(),
    )
    .unwrap();
    net.initialize(3);
    let x = normal_matrix(6, 3, 1);
    let y = normal_matrix(6, 1, 2);
    let report = check_gradients(
        &mut net,
        Loss::Mse,
        x.view(),
        y.view(),
        CheckOptions::default(),
    )
    .unwrap();
    let worst = report.worst_tensor().unwrap();
    println!(
        "wrong derivative: {} max relative error {:.3e}",
        worst.label, worst.max_rel_error
    );
    assert!(report.max_rel_error() > 1e-3);
    // The affine layer after the bad one is unaffected; the ones before it are flagged.
    assert!(
        report.tensors[0].max_rel_error > 1e-3,
        "{:?}",
        report.tensors[0]
    );
    assert!(
        report.tensors[2].max_rel_error <= TOLERANCE,
        "{:?}",
        report.tensors[2]
    );
}
