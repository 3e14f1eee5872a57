//! The demo job: train a ReLU regressor on the bundled cold-store table and report how close
//! its held-out error comes to the noise floor of the formula that made the data.
//!
//! Run: `cargo run --release --example demo [-- path/to/table.csv]`.
//! The table must have the demo's columns (see examples/data/README.md).

use ndarray::{Array1, Array2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use relume::{Activation, Adam, Loss, NetworkPlan, Optimizer, Pass};
use std::error::Error;

const FEATURES: [&str; 4] = ["outdoor_c", "setpoint_c", "door_openings_per_h", "load_t"];
const TARGET: &str = "power_kw";
/// Noise SD of the generating formula (examples/make_demo_data.rs).
const NOISE_SD_KW: f64 = 0.25;
const SEED: u64 = 7;

fn load(path: &str) -> Result<(Array2<f32>, Array1<f32>), Box<dyn Error>> {
    let mut reader = csv::Reader::from_path(path).map_err(|e| format!("{path}: {e}"))?;
    let headers = reader.headers()?.clone();
    let column = |name: &str| {
        headers
            .iter()
            .position(|h| h == name)
            .ok_or_else(|| format!("{path}: no column named '{name}'"))
    };
    let feature_cols = FEATURES
        .iter()
        .map(|f| column(f))
        .collect::<Result<Vec<_>, _>>()?;
    let target_col = column(TARGET)?;
    let (mut xs, mut ys) = (Vec::new(), Vec::new());
    for (i, record) in reader.records().enumerate() {
        let record = record?;
        let line = i + 2;
        let cell = |c: usize| -> Result<f32, String> {
            let text = record.get(c).unwrap_or("");
            text.trim().parse::<f32>().map_err(|_| {
                format!(
                    "{path}: line {line}, column '{}': '{text}' is not a number",
                    &headers[c]
                )
            })
        };
        for &c in &feature_cols {
            xs.push(cell(c)?);
        }
        ys.push(cell(target_col)?);
    }
    let rows = ys.len();
    Ok((
        Array2::from_shape_vec((rows, FEATURES.len()), xs)?,
        Array1::from(ys),
    ))
}

/// Column means and standard deviations of the training rows (constant columns get SD 1).
fn scaling(x: &Array2<f32>) -> (Array1<f32>, Array1<f32>) {
    let mean = x.mean_axis(Axis(0)).expect("at least one row");
    let sd = x
        .std_axis(Axis(0), 0.0)
        .mapv(|s| if s > 0.0 { s } else { 1.0 });
    (mean, sd)
}

fn main() -> Result<(), Box<dyn Error>> {
    let default_path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");
    let path = std::env::args()
        .nth(1)
        .unwrap_or_else(|| default_path.to_string());
    let (x, y) = load(&path)?;
    let rows = x.nrows();
    println!("{path}: {rows} rows, features {FEATURES:?}, target {TARGET}");

    // Seeded 80/20 holdout split.
    let mut order: Vec<usize> = (0..rows).collect();
    order.shuffle(&mut rand_chacha::ChaCha8Rng::seed_from_u64(SEED));
    let (train_idx, val_idx) = order.split_at(rows * 4 / 5);
    let (x_train, x_val) = (x.select(Axis(0), train_idx), x.select(Axis(0), val_idx));
    let (y_train, y_val) = (y.select(Axis(0), train_idx), y.select(Axis(0), val_idx));

    // Scale inputs and target with the training rows only.
    let (x_mean, x_sd) = scaling(&x_train);
    let (y_mean, y_sd) = (y_train.mean().unwrap_or(0.0), y_train.std(0.0).max(1e-12));
    let scale_x = |m: &Array2<f32>| (m - &x_mean) / &x_sd;
    let (xs_train, xs_val) = (scale_x(&x_train), scale_x(&x_val));
    let ys_train = ((&y_train - y_mean) / y_sd).insert_axis(Axis(1));

    let mut net =
        NetworkPlan::new(FEATURES.len(), &[32, 32], Activation::Relu).build::<f32>(SEED)?;
    let mut adam = Adam::new(3e-3);
    let (epochs, batch) = (150, 32);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(SEED + 1);
    let mut batch_order: Vec<usize> = (0..xs_train.nrows()).collect();
    let mut grad = Array2::zeros((batch, 1));
    for epoch in 0..epochs {
        adam.set_learning_rate(3e-3 * (1.0 - 0.9 * epoch as f64 / epochs as f64));
        batch_order.shuffle(&mut rng);
        for chunk in batch_order.chunks(batch) {
            let (xb, yb) = (
                xs_train.select(Axis(0), chunk),
                ys_train.select(Axis(0), chunk),
            );
            net.zero_grads();
            let out = net.forward(xb.view(), Pass::Train)?;
            let mut g = grad.slice_mut(ndarray::s![..chunk.len(), ..]);
            Loss::Mse.gradient_into(out, yb.view(), g.view_mut())?;
            net.backward(g.view())?;
            let (params, grads) = net.params_and_grads();
            adam.step(params, grads);
        }
    }

    let pred = net
        .predict(xs_val.view())?
        .column(0)
        .mapv(|p| p * y_sd + y_mean);
    let rmse = |p: &Array1<f32>| ((p - &y_val).mapv(|e| e * e).mean().unwrap_or(0.0)).sqrt();
    let baseline = Array1::from_elem(y_val.len(), y_mean);
    println!("trained 4-32-32-1 ReLU, {epochs} epochs, batch {batch}, Adam");
    println!(
        "held-out RMSE        {:.3} kW ({} rows)",
        rmse(&pred),
        y_val.len()
    );
    println!("predict-the-mean RMSE {:.3} kW", rmse(&baseline));
    println!("noise floor (formula) {NOISE_SD_KW:.3} kW");
    println!();
    println!("Cautions: validate on held-out data from your own process before use; predictions");
    println!("outside the training range are extrapolation; keep a human and domain review in the");
    println!("loop; follow local regulations and defer to licensed professionals.");
    Ok(())
}
