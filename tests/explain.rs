//! Explaining a trained model: permutation importance, partial dependence, integrated
//! gradients, against outside checks named beside each test.

use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{Activation, Model, Overrides, Predictor};

/// A seeded table: `inputs` uniform columns x1.., a text column `site`, and the target
/// `y = f(x) + site offset` (no noise unless `f` adds it).
fn table(rows: usize, inputs: usize, seed: u64, f: impl Fn(&[f64]) -> f64) -> Table {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut s = (1..=inputs).map(|i| format!("x{i},")).collect::<String>() + "site,y\n";
    for _ in 0..rows {
        let x: Vec<f64> = (0..inputs).map(|_| rng.random::<f64>()).collect();
        let site = rng.random_range(0..3usize);
        let y = f(&x) + [0.0, 1.0, -0.5][site];
        for v in &x {
            s += &format!("{v:.6},");
        }
        s += &format!("{},{y:.6}\n", ["north", "south", "east"][site]);
    }
    Table::read(s.as_bytes(), "synthetic.csv", &ReadOptions::default()).unwrap()
}

fn train(table: &Table, activation: Activation, members: usize, epochs: usize) -> Model {
    let recipe = Overrides {
        activation: Some(activation),
        hidden: Some(vec![24, 24]),
        epochs: Some(epochs),
        members: Some(members),
        ..Overrides::default()
    }
    .recipe();
    let spec = EncoderSpec {
        target: "y".to_string(),
        ..EncoderSpec::default()
    };
    Model::fit(table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

fn cells(table: &Table, predictor: &Predictor, row: usize) -> Vec<Cell<'static>> {
    // Leaked strings keep the test simple: a few hundred short cells.
    predictor
        .feature_names()
        .iter()
        .map(|name| {
            let c = table.column(name).unwrap().cell(row);
            match c {
                Cell::Text(t) => Cell::Text(Box::leak(t.to_string().into_boxed_str())),
                Cell::Number(v) => Cell::Number(v),
                Cell::Missing => Cell::Missing,
            }
        })
        .collect()
}

/// Completeness (Sundararajan, Taly & Yan 2017, the axiom of that name): the attributions
/// add up to prediction − baseline, within 1e-3 relative, for every activation (kinked ones
/// walked exactly, smooth ones by quadrature), on an ensemble.
#[test]
fn attributions_are_complete_for_every_activation() {
    let data = table(160, 3, 1, |x| (3.0 * x[0]).sin() + x[1] * x[2] * 2.0);
    for activation in Activation::all() {
        let model = train(&data, activation, 2, 40);
        let predictor = Predictor::new(&model);
        let mut scratch = predictor.scratch();
        let mut out = vec![0.0; predictor.feature_names().len()];
        let mut worst = 0.0_f64;
        for r in 0..40 {
            let row = cells(&data, &predictor, r);
            let a = predictor
                .attribute_row(&row, &mut scratch, &mut out)
                .unwrap();
            let change = a.prediction.value - a.baseline;
            let gap = (out.iter().sum::<f64>() - change).abs();
            worst = worst.max(gap / change.abs().max(1e-3));
        }
        println!(
            "{}: worst relative completeness gap {worst:.2e}",
            activation.name()
        );
        assert!(worst <= 1e-3, "{}: {worst}", activation.name());
    }
}
