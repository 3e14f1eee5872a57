//! Common practice, no source: a small ReLU network fits one period of a sine closely, a wider
//! one almost exactly. A plain full-batch loop with Adam; the full trainer has its own tests.

use ndarray::Array2;
use relume::{Activation, Adam, Loss, NetworkPlan, Optimizer, Pass};

/// Trains a 1→h→h→1 ReLU network on 256 points of sin(x) over [−π, π]; returns the final MSE.
fn fit_sine(hidden: usize, steps: usize, seed: u64) -> f64 {
    let n = 256;
    let pi = std::f64::consts::PI;
    let x = Array2::from_shape_fn((n, 1), |(i, _)| -pi + 2.0 * pi * i as f64 / (n - 1) as f64);
    let y = x.mapv(f64::sin);
    let mut net = NetworkPlan::new(1, &[hidden, hidden], Activation::Relu)
        .build::<f64>(seed)
        .unwrap();
    let mut adam = Adam::new(1e-2);
    let mut grad = Array2::zeros((n, 1));
    for step in 0..steps {
        // Linear decay to 1% of the starting rate over the run.
        adam.set_learning_rate(1e-2 * (1.0 - 0.99 * step as f64 / steps as f64));
        net.clear_gradients();
        let out = net.forward(x.view(), Pass::Train).unwrap();
        Loss::Mse
            .gradient_into(out, y.view(), grad.view_mut())
            .unwrap();
        net.backward(grad.view()).unwrap();
        let (params, grads) = net.params_and_grads();
        adam.step(params, grads);
    }
    let out = net.predict(x.view()).unwrap();
    Loss::Mse.value(out.view(), y.view()).unwrap()
}

#[test]
fn relu_1_8_8_1_fits_a_sine_period_to_mse_5e3() {
    // Worst of three seeds, so a lucky draw cannot carry the check.
    let mse = (1..=3).map(|s| fit_sine(8, 3000, s)).fold(0.0, f64::max);
    println!("1-8-8-1 ReLU on sin: worst MSE over 3 seeds {mse:.2e}");
    assert!(mse <= 5e-3, "MSE {mse}");
}

#[test]
fn relu_1_64_64_1_fits_a_sine_period_to_mse_5e4() {
    let mse = (1..=3).map(|s| fit_sine(64, 3000, s)).fold(0.0, f64::max);
    println!("1-64-64-1 ReLU on sin: worst MSE over 3 seeds {mse:.2e}");
    assert!(mse <= 5e-4, "MSE {mse}");
}
