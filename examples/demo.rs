//! The demo job: train a ReLU regressor on the bundled cold-store table and report how close
//! its held-out error comes to the noise floor of the formula that made the data.
//!
//! Run: `cargo run --release --example demo [-- path/to/table.csv]`.
//! The table must have the demo's columns (see examples/data/README.md).

use ndarray::{Array1, Array2, Axis};
use relume::Recipe;
use std::error::Error;

const FEATURES: [&str; 4] = ["outdoor_c", "setpoint_c", "door_openings_per_h", "load_t"];
const TARGET: &str = "power_kw";
/// Noise SD of the generating formula (examples/make_demo_data.rs).
const NOISE_SD_KW: f64 = 0.25;
/// Seed of the held-out split.
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

fn main() -> Result<(), Box<dyn Error>> {
    let default_path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/data/cold_store.csv");
    let path = std::env::args()
        .nth(1)
        .unwrap_or_else(|| default_path.to_string());
    let (x, y) = load(&path)?;
    let rows = x.nrows();
    println!("{path}: {rows} rows, features {FEATURES:?}, target {TARGET}");

    // Seeded 80/20 split: the test rows are never seen in training.
    let (train_idx, test_idx) = relume::train::holdout_indices(rows, rows / 5, SEED);
    let pick = |m: &Array2<f32>, idx: &[usize]| m.select(Axis(0), idx);
    let y = y.insert_axis(Axis(1));
    let (x_train, y_train) = (pick(&x, &train_idx), pick(&y, &train_idx));
    let (x_test, y_test) = (pick(&x, &test_idx), pick(&y, &test_idx));

    // The default recipe: scaling, architecture, optimizer and early stopping chosen for us.
    let recipe = Recipe::default();
    let mut trained = recipe.fit(x_train.view(), y_train.view())?;
    let summary = &trained.summary;
    println!(
        "trained {} units {:?}, {} epochs (best {}), stopped by {:?}",
        recipe.activation_for(x_train.nrows()),
        recipe.hidden,
        summary.history.len(),
        summary.best_epoch,
        summary.stop
    );

    let pred = trained.predict(x_test.view())?;
    let rmse = |p: &Array2<f32>| ((p - &y_test).mapv(|e| e * e).mean().unwrap_or(0.0)).sqrt();
    let mean = y_train.mean().unwrap_or(0.0);
    let baseline = Array2::from_elem(y_test.dim(), mean);
    println!(
        "held-out RMSE         {:.3} kW ({} rows)",
        rmse(&pred),
        y_test.nrows()
    );
    println!("predict-the-mean RMSE {:.3} kW", rmse(&baseline));
    println!("noise floor (formula) {NOISE_SD_KW:.3} kW");
    println!();
    println!("Cautions: validate on held-out data from your own process before use; predictions");
    println!("outside the training range are extrapolation; keep a human and domain review in the");
    println!("loop; follow local regulations and defer to licensed professionals.");
    Ok(())
}
