//! Cost of explaining: one row's integrated gradients (ReLU, walked exactly; GELU, by
//! quadrature) beside one row's prediction, and `explain` on 2000 rows × 10 inputs. The model
//! is a 5-member ensemble of 10-64-64-1 networks on Friedman #1 (Friedman 1991), trained
//! briefly: the cost depends on the shapes, not on how well the model fits.

use criterion::{criterion_group, criterion_main, Criterion};
use rand::{Rng, SeedableRng};
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::serve::predict::Cell;
use relume::{explain, Activation, ExplainOptions, Model, Overrides, Predictor};
use std::hint::black_box;
use std::time::Duration;

fn friedman(rows: usize) -> Table {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
    let mut s = (1..=10).map(|i| format!("x{i},")).collect::<String>() + "y\n";
    for _ in 0..rows {
        let x: Vec<f64> = (0..10).map(|_| rng.random::<f64>()).collect();
        let y = 10.0 * (std::f64::consts::PI * x[0] * x[1]).sin()
            + 20.0 * (x[2] - 0.5).powi(2)
            + 10.0 * x[3]
            + 5.0 * x[4];
        for v in &x {
            s += &format!("{v:.5},");
        }
        s += &format!("{y:.5}\n");
    }
    Table::read(s.as_bytes(), "friedman.csv", &ReadOptions::default()).unwrap()
}

fn model(table: &Table, activation: Activation) -> Model {
    let recipe = Overrides {
        activation: Some(activation),
        members: Some(5),
        epochs: Some(30),
        l2: Some(3e-4),
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

fn benches(c: &mut Criterion) {
    let table = friedman(2000);
    let rows: Vec<Vec<Cell<'static>>> = (0..64)
        .map(|r| {
            (1..=10)
                .map(|i| table.column(&format!("x{i}")).unwrap().cell(r))
                .map(|c| match c {
                    Cell::Number(v) => Cell::Number(v),
                    _ => Cell::Missing,
                })
                .collect()
        })
        .collect();
    for activation in [Activation::Relu, Activation::Gelu] {
        let m = model(&table, activation);
        let predictor = Predictor::new(&m);
        let mut scratch = predictor.scratch();
        let mut out = vec![0.0; 10];
        let name = activation.name();
        let mut k = 0;
        c.bench_function(&format!("predict_row_{name}_10in_5members"), |b| {
            b.iter(|| {
                k = (k + 1) % rows.len();
                black_box(predictor.predict_row(&rows[k], &mut scratch).unwrap())
            })
        });
        c.bench_function(&format!("attribute_row_{name}_10in_5members"), |b| {
            b.iter(|| {
                k = (k + 1) % rows.len();
                black_box(
                    predictor
                        .attribute_row(&rows[k], &mut scratch, &mut out)
                        .unwrap(),
                )
            })
        });
        if activation == Activation::Relu {
            let mut group = c.benchmark_group("explain");
            group.sample_size(10);
            group.measurement_time(Duration::from_secs(20));
            group.bench_function("explain_2000rows_10in_5members", |b| {
                b.iter(|| black_box(explain(&m, &table, &ExplainOptions::default()).unwrap()))
            });
            group.finish();
        }
    }
}

criterion_group!(explain_benches, benches);
criterion_main!(explain_benches);
