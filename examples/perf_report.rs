//! Performance report: one line per case,
//! `case=NAME step_us=MEDIAN floor_us=MEDIAN ratio=R allocs_per_step=N`,
//! where the floor is the time of the matrix products the step must do (same shapes, same
//! GEMM library, same threads) or, for the activation case, a memcpy of the same buffer.
//! Allocations are counted by a counting global allocator after warm-up.
//!
//! The floor uses the crate's own product (`relume::kernels::matmul`); a `gemm=` line per
//! training case times the same products through ndarray's `general_mat_mul` (the
//! matrixmultiply crate), so a slow product cannot hide behind a good ratio. `wide_b1024_2t`
//! runs on two threads (`relume::kernels::set_threads(2)`) and is also timed on one, for the
//! speed-up line.
//!
//! Run: `cargo run --release --example perf_report`. Times are medians over repeated batches
//! of iterations measured in this run, so the ratios compare like with like on a noisy machine.

use ndarray::linalg::general_mat_mul;
use ndarray::{Array2, ArrayView2};
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::kernels::{matmul, set_threads};
use relume::nn::layer::{Layer, Pass, Pointwise};
use relume::serve::predict::Cell;
use relume::{Activation, Adam, Loss, Model, NetworkPlan, Optimizer, Predictor, Recipe};
use std::hint::black_box;
use std::time::Instant;

#[path = "support/counting.rs"]
mod counting;

#[global_allocator]
static GLOBAL: counting::Counting = counting::Counting;

/// Median microseconds per call of `f`, over `reps` batches of `iters` calls, after warm-up;
/// and the allocations per call during the timed batches.
fn measure(iters: usize, reps: usize, mut f: impl FnMut()) -> (f64, f64) {
    for _ in 0..iters.max(3) {
        f();
    }
    let before = counting::allocations();
    let mut times = Vec::with_capacity(reps);
    for _ in 0..reps {
        let t = Instant::now();
        for _ in 0..iters {
            f();
        }
        times.push(t.elapsed().as_secs_f64() * 1e6 / iters as f64);
    }
    let allocs = (counting::allocations() - before) as f64 / (iters * reps) as f64;
    times.sort_by(f64::total_cmp);
    (times[reps / 2], allocs)
}

fn inputs(rows: usize, cols: usize) -> Array2<f32> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        (((i * 31 + j * 17) % 97) as f32 / 48.5) - 1.0
    })
}

fn line(case: &str, step: f64, floor: f64, allocs: f64) {
    println!(
        "case={case} step_us={step:.2} floor_us={floor:.2} ratio={:.3} allocs_per_step={allocs:.0}",
        step / floor
    );
}

/// Time of the GEMMs one training step of a dense stack must do: per affine layer X·W, and in
/// backward Xᵀ·G, plus G·Wᵀ for every layer but the first.
/// One affine layer's operands: X, W, Y = X·W, dW, dX.
type Operands = (
    Array2<f32>,
    Array2<f32>,
    Array2<f32>,
    Array2<f32>,
    Array2<f32>,
);

/// A product c = a·b into `c` (ours, or the reference library's).
type Product = fn(ArrayView2<'_, f32>, ArrayView2<'_, f32>, &mut Array2<f32>);

fn ours(a: ArrayView2<'_, f32>, b: ArrayView2<'_, f32>, c: &mut Array2<f32>) {
    matmul(a, b, &mut c.view_mut(), false);
}

fn reference(a: ArrayView2<'_, f32>, b: ArrayView2<'_, f32>, c: &mut Array2<f32>) {
    general_mat_mul(1.0, &a, &b, 0.0, c);
}

fn gemm_floor(widths: &[usize], batch: usize, iters: usize, product: Product) -> f64 {
    let layers: Vec<Operands> = widths
        .windows(2)
        .map(|w| {
            (
                inputs(batch, w[0]),          // X
                inputs(w[0], w[1]),           // W
                Array2::zeros((batch, w[1])), // Y
                Array2::zeros((w[0], w[1])),  // dW
                Array2::zeros((batch, w[0])), // dX
            )
        })
        .collect();
    let mut layers = layers;
    let grads: Vec<Array2<f32>> = widths[1..].iter().map(|&w| inputs(batch, w)).collect();
    let (t, _) = measure(iters, 15, || {
        for (k, (x, w, y, dw, dx)) in layers.iter_mut().enumerate() {
            product(x.view(), w.view(), y);
            product(x.t(), grads[k].view(), dw);
            if k > 0 {
                product(grads[k].view(), w.t(), dx);
            }
        }
        black_box(&layers);
    });
    t
}

fn training_step(case: &str, widths: &[usize], batch: usize, iters: usize) -> f64 {
    let mut net = NetworkPlan::new(widths[0], &widths[1..widths.len() - 1], Activation::Relu)
        .build::<f32>(1)
        .expect("valid plan");
    let x = inputs(batch, widths[0]);
    let y = inputs(batch, 1);
    let mut grad = Array2::<f32>::zeros((batch, 1));
    let mut adam = Adam::new(1e-3);
    let (step, allocs) = measure(iters, 15, || {
        net.clear_gradients();
        let out = net.forward(x.view(), Pass::Train).expect("shapes");
        Loss::Mse
            .gradient_into(out, y.view(), grad.view_mut())
            .expect("shapes");
        net.backward_params(grad.view()).expect("shapes");
        let (p, g) = net.params_and_grads();
        adam.step(p, g);
    });
    let floor = gemm_floor(widths, batch, iters, ours);
    line(case, step, floor, allocs);
    let theirs = gemm_floor(widths, batch, iters, reference);
    println!(
        "gemm case={case} ours_us={floor:.2} matrixmultiply_us={theirs:.2} ratio={:.3}",
        floor / theirs
    );
    step
}

fn row_predict() {
    let mut csv = String::from("a,b,c,d,e,f,g,h,i,j,y\n");
    for r in 0..300 {
        let v: Vec<f64> = (0..10)
            .map(|j| ((r * 7 + j * 13) % 23) as f64 / 23.0)
            .collect();
        let y: f64 = v.iter().sum();
        let cells: Vec<String> = v.iter().map(|x| x.to_string()).collect();
        csv += &format!("{},{y}\n", cells.join(","));
    }
    let table = Table::read(csv.as_bytes(), "perf", &ReadOptions::default()).expect("table");
    let spec = EncoderSpec {
        target: "y".into(),
        ..EncoderSpec::default()
    };
    let recipe = Recipe {
        hidden: vec![64, 64],
        ..Recipe::default()
    }
    .with_config(relume::TrainConfig {
        epochs: 2,
        ..relume::TrainConfig::default()
    });
    let (model, _) = Model::fit(&table, &spec, &recipe, MonitorConfig::default()).expect("fit");
    let predictor = Predictor::new(&model);
    let mut scratch = predictor.scratch();
    let row: Vec<Cell> = (0..10).map(|j| Cell::Number(0.1 * j as f64)).collect();
    let (step, allocs) = measure(20_000, 15, || {
        black_box(
            predictor
                .predict_row(black_box(&row), &mut scratch)
                .expect("row"),
        );
    });
    // Floor: the three row × matrix products through the crate's product.
    let shapes = [(10, 64), (64, 64), (64, 1)];
    let mats: Vec<(Array2<f32>, Array2<f32>, Array2<f32>)> = shapes
        .iter()
        .map(|&(i, o)| (inputs(1, i), inputs(i, o), Array2::zeros((1, o))))
        .collect();
    let mut mats = mats;
    let (floor, _) = measure(20_000, 15, || {
        for (x, w, y) in mats.iter_mut() {
            matmul(x.view(), w.view(), &mut y.view_mut(), false);
        }
        black_box(&mats);
    });
    line("row_predict", step, floor, allocs);
}

fn activation_forward(act: Activation, x: ArrayView2<'_, f32>) -> (f64, f64) {
    let mut layer = Pointwise::<f32>::new(x.ncols(), act).expect("layer");
    measure(20, 15, || {
        layer.forward(&[], x, Pass::Infer);
        black_box(layer.output());
    })
}

fn main() {
    println!(
        "# relume perf report ({} logical CPUs, kernels for {:?}; one thread except _2t)",
        std::thread::available_parallelism().map_or(1, |n| n.get()),
        relume::kernels::simd_level()
    );
    set_threads(1);
    // Optional arguments name the cases to run (all when none), e.g. for profiling one case.
    let only: Vec<String> = std::env::args().skip(1).collect();
    let wanted = |case: &str| only.is_empty() || only.iter().any(|c| c == case);
    if wanted("tabular_b32") {
        training_step("tabular_b32", &[10, 64, 64, 1], 32, 2000);
    }
    if wanted("wide_b256") {
        training_step("wide_b256", &[256, 256, 256, 256, 1], 256, 20);
    }
    if wanted("wide_b1024_2t") {
        set_threads(2);
        let two = training_step("wide_b1024_2t", &[256, 256, 256, 256, 1], 1024, 5);
        set_threads(1);
        let one = training_step("wide_b1024_1t", &[256, 256, 256, 256, 1], 1024, 5);
        println!(
            "speedup case=wide_b1024 two_threads_over_one={:.3}",
            one / two
        );
    }
    if wanted("row_predict") {
        row_predict();
    }
    if !wanted("relu_fwd") {
        return;
    }
    let x = inputs(1024, 1024);
    let (relu, allocs) = activation_forward(Activation::Relu, x.view());
    let mut copy = Array2::<f32>::zeros((1024, 1024));
    let (floor, _) = measure(20, 15, || {
        copy.as_slice_mut()
            .expect("contiguous")
            .copy_from_slice(x.as_slice().expect("contiguous"));
        black_box(&copy);
    });
    line("relu_fwd", relu, floor, allocs);
    for act in [Activation::Gelu, Activation::ELU, Activation::Selu] {
        let (t, _) = activation_forward(act, x.view());
        println!(
            "activation={} fwd_us={t:.1} relative_to_relu={:.2}",
            act.name(),
            t / relu
        );
    }
}
