//! Training steps, inference and model save/load for the perf-report cases, and the matrix
//! product beside ndarray's `general_mat_mul` (matrixmultiply) on the step's shapes.

use criterion::{criterion_group, criterion_main, Criterion};
use ndarray::linalg::general_mat_mul;
use ndarray::Array2;
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::kernels::matmul;
use relume::nn::layer::Pass;
use relume::serve::predict::Cell;
use relume::{
    Activation, Adam, Loss, Model, NetworkPlan, Optimizer, Predictor, Recipe, TrainConfig,
};
use std::hint::black_box;

fn inputs(rows: usize, cols: usize) -> Array2<f32> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        (((i * 31 + j * 17) % 97) as f32 / 48.5) - 1.0
    })
}

fn step(c: &mut Criterion, name: &str, widths: &[usize], batch: usize) {
    let mut net = NetworkPlan::new(widths[0], &widths[1..widths.len() - 1], Activation::Relu)
        .build::<f32>(1)
        .unwrap();
    let (x, y) = (inputs(batch, widths[0]), inputs(batch, 1));
    let mut grad = Array2::<f32>::zeros((batch, 1));
    let mut adam = Adam::new(1e-3);
    c.bench_function(&format!("train_step_{name}"), |b| {
        b.iter(|| {
            net.clear_gradients();
            let out = net.forward(x.view(), Pass::Train).unwrap();
            Loss::Mse
                .gradient_into(out, y.view(), grad.view_mut())
                .unwrap();
            net.backward_params(grad.view()).unwrap();
            let (p, g) = net.params_and_grads();
            adam.step(p, g);
        })
    });
    c.bench_function(&format!("inference_{name}"), |b| {
        b.iter(|| black_box(net.forward(x.view(), Pass::Infer).unwrap()[(0, 0)]))
    });
}

/// The three products of a 256-wide layer at batch 256 (forward, weight gradient, input
/// gradient), ours and matrixmultiply's.
fn products(c: &mut Criterion) {
    let (x, w, g) = (inputs(256, 256), inputs(256, 256), inputs(256, 256));
    let mut out = Array2::<f32>::zeros((256, 256));
    c.bench_function("product_256_ours", |b| {
        b.iter(|| {
            matmul(x.view(), w.view(), &mut out.view_mut(), false);
            matmul(x.t(), g.view(), &mut out.view_mut(), false);
            matmul(g.view(), w.t(), &mut out.view_mut(), false);
            black_box(out[(0, 0)])
        })
    });
    c.bench_function("product_256_matrixmultiply", |b| {
        b.iter(|| {
            general_mat_mul(1.0, &x, &w, 0.0, &mut out);
            general_mat_mul(1.0, &x.t(), &g, 0.0, &mut out);
            general_mat_mul(1.0, &g, &w.t(), 0.0, &mut out);
            black_box(out[(0, 0)])
        })
    });
}

fn small_model() -> Model {
    let mut csv = String::from("a,b,c,d,e,f,g,h,i,j,y\n");
    for r in 0..300 {
        let v: Vec<String> = (0..10)
            .map(|j| (((r * 7 + j * 13) % 23) as f64 / 23.0).to_string())
            .collect();
        csv += &format!("{},{}\n", v.join(","), r % 7);
    }
    let table = Table::read(csv.as_bytes(), "bench", &ReadOptions::default()).unwrap();
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe::default().with_config(TrainConfig {
        epochs: 2,
        ..TrainConfig::default()
    });
    Model::fit(&table, &spec, &recipe, MonitorConfig::default())
        .unwrap()
        .0
}

fn benches(c: &mut Criterion) {
    step(c, "tabular_b32", &[10, 64, 64, 1], 32);
    step(c, "wide_b256", &[256, 256, 256, 256, 1], 256);
    relume::kernels::set_threads(2);
    step(c, "wide_b1024_2t", &[256, 256, 256, 256, 1], 1024);
    relume::kernels::set_threads(1);
    products(c);
    let model = small_model();
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let row: Vec<Cell> = (0..10).map(|j| Cell::Number(0.1 * j as f64)).collect();
    c.bench_function("row_predict", |b| {
        b.iter(|| black_box(predictor.predict_row(&row, &mut scratch).unwrap().value))
    });
    let dir = std::env::temp_dir().join(format!("relume-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("m.json");
    c.bench_function("model_save", |b| b.iter(|| model.save(&path).unwrap()));
    c.bench_function("model_load", |b| {
        b.iter(|| black_box(Model::load(&path).unwrap()))
    });
    std::fs::remove_dir_all(dir).ok();
}

criterion_group!(steps, benches);
criterion_main!(steps);
