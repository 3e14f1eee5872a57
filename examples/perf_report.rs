//! Performance report: one line per case,
//! `case=NAME step_us=MEDIAN floor_us=MEDIAN ratio=R ratio_lo=L ratio_hi=H allocs_per_step=N`,
//! where the floor is the time of the matrix products the step must do (same shapes, same
//! product, same threads) or, for the activation case, a memcpy of the same buffer.
//! Allocations are counted by a counting global allocator after warm-up.
//!
//! Step and floor are timed in interleaved rounds: each round times a batch of steps and a
//! batch of floors back to back (the order alternating from round to round), so both see the
//! same moment of a shared, noisy machine. `ratio` is the median over rounds of the paired
//! ratio step/floor; `ratio_lo`–`ratio_hi` is a 95% percentile-bootstrap interval of that
//! median (2000 resamples of the rounds, fixed seed). We chose the bootstrap of the median over
//! a t interval on the log-ratios because the noise here comes in bursts (another process
//! taking the core), which gives heavy tails that a mean and its t interval follow but a median
//! does not. `step_us` and `floor_us` are the medians of the per-round times. One-thread jobs
//! are timed by the CPU time of the thread (Linux `CLOCK_THREAD_CPUTIME_ID`), which leaves out
//! the time other processes hold the core; the two-thread case and the one-thread step it is
//! compared with are timed by wall time.
//!
//! The floor uses the crate's own product (`relume::kernels::matmul`); a `gemm=` line per
//! training case times the same products through ndarray's `general_mat_mul` (the
//! matrixmultiply crate), in the same rounds, so a slow product cannot hide behind a good
//! ratio. `wide_b1024_2t` runs on two threads (`relume::kernels::set_threads(2)`) and its
//! rounds also time the one-thread step, for the `speedup` line (same median and interval).
//! Each `activation=` line is timed in rounds paired with ReLU on the same 1024×1024 input; each
//! `activation_l1=` line does the same on the first 4096 elements, which stay in the L1 cache,
//! so it shows the kernel's arithmetic without the memory traffic (`ns_per_element=`).
//!
//! Run: `cargo run --release --example perf_report [-- CASE... --simd avx2 --rounds N]`.
//! `--simd avx2` (or `baseline`) caps the instruction set (`relume::kernels::set_simd_limit`);
//! the header names the CPU, the instruction set in use and the load average at the start.

use ndarray::linalg::general_mat_mul;
use ndarray::{Array2, ArrayView2};
use relume::data::{EncoderSpec, ReadOptions, Table};
use relume::fit::monitor::MonitorConfig;
use relume::kernels::{matmul, set_simd_limit, set_threads, simd_level, Simd};
use relume::nn::layer::{Layer, Pass, Pointwise};
use relume::serve::predict::Cell;
use relume::{Activation, Adam, Loss, Model, NetworkPlan, Optimizer, Predictor, Recipe};
use std::hint::black_box;
use std::time::Instant;

#[path = "support/counting.rs"]
mod counting;

#[global_allocator]
static GLOBAL: counting::Counting = counting::Counting;

/// Per-round timings of a few jobs measured together.
struct Rounds {
    /// `times[j][r]`: microseconds per call of job j in round r.
    times: Vec<Vec<f64>>,
    /// Allocations per call of each job, over the timed rounds.
    allocs: Vec<f64>,
}

/// Which clock a round is timed by.
#[derive(Clone, Copy, PartialEq)]
enum Clock {
    /// CPU time of the calling thread: leaves out the time other processes hold the core, so
    /// one-thread jobs measure the same on a shared machine as on an idle one (up to caches).
    Thread,
    /// Elapsed time: for jobs that use helper threads.
    Wall,
}

/// Seconds of CPU time the calling thread has used (Linux `CLOCK_THREAD_CPUTIME_ID`).
#[cfg(target_os = "linux")]
fn thread_seconds() -> f64 {
    #[repr(C)]
    struct Timespec {
        sec: i64,
        nsec: i64,
    }
    extern "C" {
        fn clock_gettime(clock: i32, time: *mut Timespec) -> i32;
    }
    const CLOCK_THREAD_CPUTIME_ID: i32 = 3;
    let mut t = Timespec { sec: 0, nsec: 0 };
    // SAFETY: `t` is a valid, writable timespec (two 64-bit fields on 64-bit Linux); the call
    // only writes it.
    let status = unsafe { clock_gettime(CLOCK_THREAD_CPUTIME_ID, &mut t) };
    assert_eq!(status, 0, "clock_gettime");
    t.sec as f64 + t.nsec as f64 * 1e-9
}

/// Off Linux, elapsed time stands in for thread time.
#[cfg(not(target_os = "linux"))]
fn thread_seconds() -> f64 {
    use std::sync::OnceLock;
    static START: OnceLock<Instant> = OnceLock::new();
    START.get_or_init(Instant::now).elapsed().as_secs_f64()
}

/// Times every job in `rounds` rounds of `iters` calls each, after a warm-up of each job; the
/// jobs run one after the other within a round, starting with a different job every round.
fn interleaved(rounds: usize, iters: usize, clock: Clock, jobs: &mut [&mut dyn FnMut()]) -> Rounds {
    for job in jobs.iter_mut() {
        for _ in 0..iters.max(3) {
            job();
        }
    }
    let n = jobs.len();
    let mut times = vec![Vec::with_capacity(rounds); n];
    let mut allocs = vec![0usize; n];
    for r in 0..rounds {
        for o in 0..n {
            let j = (r + o) % n;
            let before = counting::allocations();
            let (wall, cpu) = (Instant::now(), thread_seconds());
            for _ in 0..iters {
                jobs[j]();
            }
            let seconds = match clock {
                Clock::Thread => thread_seconds() - cpu,
                Clock::Wall => wall.elapsed().as_secs_f64(),
            };
            let elapsed = seconds * 1e6 / iters as f64;
            allocs[j] += counting::allocations() - before;
            times[j].push(elapsed);
        }
    }
    let calls = (rounds * iters) as f64;
    Rounds {
        times,
        allocs: allocs.into_iter().map(|a| a as f64 / calls).collect(),
    }
}

fn median(values: &[f64]) -> f64 {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Median of the paired ratios a[r]/b[r] and its 95% percentile-bootstrap interval
/// (Efron & Tibshirani 1993, ch. 13), 2000 resamples drawn by a fixed-seed xorshift generator.
fn paired_ratio(a: &[f64], b: &[f64]) -> (f64, f64, f64) {
    let ratios: Vec<f64> = a.iter().zip(b).map(|(x, y)| x / y).collect();
    let mut state = 0x9E37_79B9_7F4A_7C15_u64;
    let mut next = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        state
    };
    let n = ratios.len();
    let mut sample = vec![0.0; n];
    let mut medians: Vec<f64> = (0..2000)
        .map(|_| {
            for s in sample.iter_mut() {
                *s = ratios[(next() % n as u64) as usize];
            }
            median(&sample)
        })
        .collect();
    medians.sort_by(f64::total_cmp);
    (median(&ratios), medians[49], medians[1949])
}

fn inputs(rows: usize, cols: usize) -> Array2<f32> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        (((i * 31 + j * 17) % 97) as f32 / 48.5) - 1.0
    })
}

/// Prints a `case=` line from the rounds of a step (job `step`) and its floor (job `floor`).
fn line(case: &str, r: &Rounds, step: usize, floor: usize) {
    let (ratio, lo, hi) = paired_ratio(&r.times[step], &r.times[floor]);
    println!(
        "case={case} step_us={:.2} floor_us={:.2} ratio={ratio:.3} ratio_lo={lo:.3} \
         ratio_hi={hi:.3} allocs_per_step={:.0}",
        median(&r.times[step]),
        median(&r.times[floor]),
        r.allocs[step]
    );
}

/// Prints a `gemm` line: our product (job `ours`) against matrixmultiply (job `theirs`).
fn gemm_line(case: &str, r: &Rounds, ours: usize, theirs: usize) {
    let (ratio, lo, hi) = paired_ratio(&r.times[ours], &r.times[theirs]);
    println!(
        "gemm case={case} ours_us={:.2} matrixmultiply_us={:.2} ratio={ratio:.3} \
         ratio_lo={lo:.3} ratio_hi={hi:.3}",
        median(&r.times[ours]),
        median(&r.times[theirs]),
    );
}

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

/// The matrix products one training step of a dense stack must do: per affine layer X·W, and
/// in backward Xᵀ·G, plus G·Wᵀ for every layer but the first.
struct GemmFloor {
    layers: Vec<Operands>,
    grads: Vec<Array2<f32>>,
    product: Product,
}

impl GemmFloor {
    fn new(widths: &[usize], batch: usize, product: Product) -> Self {
        let layers = widths
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
        let grads = widths[1..].iter().map(|&w| inputs(batch, w)).collect();
        GemmFloor {
            layers,
            grads,
            product,
        }
    }

    fn run(&mut self) {
        let product = self.product;
        for (k, (x, w, y, dw, dx)) in self.layers.iter_mut().enumerate() {
            product(x.view(), w.view(), y);
            product(x.t(), self.grads[k].view(), dw);
            if k > 0 {
                product(self.grads[k].view(), w.t(), dx);
            }
        }
        black_box(&self.layers);
    }
}

/// One training step (forward, MSE gradient, backward, Adam) of a ReLU stack.
struct Trainer {
    net: relume::Network<f32>,
    x: Array2<f32>,
    y: Array2<f32>,
    grad: Array2<f32>,
    adam: Adam<f32>,
}

impl Trainer {
    fn new(widths: &[usize], batch: usize) -> Self {
        let net = NetworkPlan::new(widths[0], &widths[1..widths.len() - 1], Activation::Relu)
            .build::<f32>(1)
            .expect("valid plan");
        Trainer {
            net,
            x: inputs(batch, widths[0]),
            y: inputs(batch, 1),
            grad: Array2::zeros((batch, 1)),
            adam: Adam::new(1e-3),
        }
    }

    fn step(&mut self) {
        self.net.clear_gradients();
        let out = self
            .net
            .forward(self.x.view(), Pass::Train)
            .expect("shapes");
        Loss::Mse
            .gradient_into(out, self.y.view(), self.grad.view_mut())
            .expect("shapes");
        self.net.backward_params(self.grad.view()).expect("shapes");
        let (p, g) = self.net.params_and_grads();
        self.adam.step(p, g);
    }
}

/// A one-thread training case: step, our floor and the reference floor in the same rounds.
fn training_case(case: &str, widths: &[usize], batch: usize, iters: usize, rounds: usize) {
    let mut trainer = Trainer::new(widths, batch);
    let mut floor = GemmFloor::new(widths, batch, ours);
    let mut theirs = GemmFloor::new(widths, batch, reference);
    let r = interleaved(
        rounds,
        iters,
        Clock::Thread,
        &mut [&mut || trainer.step(), &mut || floor.run(), &mut || {
            theirs.run()
        }],
    );
    line(case, &r, 0, 1);
    gemm_line(case, &r, 1, 2);
}

/// The wide step at batch 1024 on two threads and on one, all in the same rounds.
fn two_thread_case(rounds: usize) {
    let (widths, batch) = (&[256, 256, 256, 256, 1][..], 1024);
    let mut two = Trainer::new(widths, batch);
    let mut one = Trainer::new(widths, batch);
    let mut floor_two = GemmFloor::new(widths, batch, ours);
    let mut floor_one = GemmFloor::new(widths, batch, ours);
    let mut theirs_two = GemmFloor::new(widths, batch, reference);
    let mut theirs_one = GemmFloor::new(widths, batch, reference);
    let on = |threads: usize, job: &mut dyn FnMut()| {
        set_threads(threads);
        job();
        set_threads(1);
    };
    let r = interleaved(
        rounds,
        5,
        Clock::Wall,
        &mut [
            &mut || on(2, &mut || two.step()),
            &mut || on(2, &mut || floor_two.run()),
            &mut || one.step(),
            &mut || floor_one.run(),
            &mut || on(2, &mut || theirs_two.run()),
            &mut || theirs_one.run(),
        ],
    );
    line("wide_b1024_2t", &r, 0, 1);
    gemm_line("wide_b1024_2t", &r, 1, 4);
    line("wide_b1024_1t", &r, 2, 3);
    gemm_line("wide_b1024_1t", &r, 3, 5);
    let (speedup, lo, hi) = paired_ratio(&r.times[2], &r.times[0]);
    println!(
        "speedup case=wide_b1024 two_threads_over_one={speedup:.3} ratio_lo={lo:.3} \
         ratio_hi={hi:.3}"
    );
}

fn row_predict(rounds: usize) {
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
    // Floor: the three row × matrix products of every ensemble member through the crate's
    // product (the predictor averages all members).
    let shapes = [(10, 64), (64, 64), (64, 1)];
    let mut mats: Vec<(Array2<f32>, Array2<f32>, Array2<f32>)> = (0..predictor.member_count())
        .flat_map(|_| shapes)
        .map(|(i, o)| (inputs(1, i), inputs(i, o), Array2::zeros((1, o))))
        .collect();
    let r = interleaved(
        rounds,
        1_000,
        Clock::Thread,
        &mut [
            &mut || {
                black_box(
                    predictor
                        .predict_row(black_box(&row), &mut scratch)
                        .expect("row"),
                );
            },
            &mut || {
                for (x, w, y) in mats.iter_mut() {
                    matmul(x.view(), w.view(), &mut y.view_mut(), false);
                }
                black_box(&mats);
            },
        ],
    );
    line("row_predict", &r, 0, 1);
}

/// The activations the perf report times against ReLU.
const TIMED_ACTIVATIONS: [Activation; 7] = [
    Activation::Gelu,
    Activation::ELU,
    Activation::Selu,
    Activation::SILU,
    Activation::Tanh,
    Activation::Sigmoid,
    Activation::SOFTPLUS,
];

/// The ReLU forward pass against a memcpy of the same buffer, then each smooth activation's
/// forward pass against ReLU's, per element on 1024×1024 f32.
fn activations(rounds: usize) {
    let x = inputs(1024, 1024);
    // Short batches (4 calls, about a millisecond) so that a round rarely straddles a burst.
    let mut relu = Pointwise::<f32>::new(1024, Activation::Relu).expect("layer");
    let mut relu_fwd = || {
        relu.forward(&[], x.view(), Pass::Infer);
        black_box(relu.output());
    };
    let mut copy = Array2::<f32>::zeros((1024, 1024));
    let r = interleaved(
        rounds,
        4,
        Clock::Thread,
        &mut [&mut relu_fwd, &mut || {
            copy.as_slice_mut()
                .expect("contiguous")
                .copy_from_slice(x.as_slice().expect("contiguous"));
            black_box(&copy);
        }],
    );
    line("relu_fwd", &r, 0, 1);
    for act in TIMED_ACTIVATIONS {
        let mut layer = Pointwise::<f32>::new(1024, act).expect("layer");
        let r = interleaved(
            rounds,
            4,
            Clock::Thread,
            &mut [&mut relu_fwd, &mut || {
                layer.forward(&[], x.view(), Pass::Infer);
                black_box(layer.output());
            }],
        );
        let (ratio, lo, hi) = paired_ratio(&r.times[1], &r.times[0]);
        println!(
            "activation={} fwd_us={:.1} relative_to_relu={ratio:.2} relative_lo={lo:.2} \
             relative_hi={hi:.2}",
            act.name(),
            median(&r.times[1])
        );
    }
    // The same kernels on a slice that stays in L1: the arithmetic alone.
    const L1_ELEMENTS: usize = 4096;
    let small = &x.as_slice().expect("contiguous")[..L1_ELEMENTS];
    let (mut relu_out, mut out) = (vec![0.0_f32; L1_ELEMENTS], vec![0.0_f32; L1_ELEMENTS]);
    for act in TIMED_ACTIVATIONS {
        let r = interleaved(
            rounds,
            100,
            Clock::Thread,
            &mut [
                &mut || {
                    Activation::Relu.apply(small, &mut relu_out);
                    black_box(&relu_out);
                },
                &mut || {
                    act.apply(small, &mut out);
                    black_box(&out);
                },
            ],
        );
        let (ratio, lo, hi) = paired_ratio(&r.times[1], &r.times[0]);
        println!(
            "activation_l1={} ns_per_element={:.3} relative_to_relu={ratio:.2} \
             relative_lo={lo:.2} relative_hi={hi:.2}",
            act.name(),
            median(&r.times[1]) * 1e3 / L1_ELEMENTS as f64
        );
    }
}

/// A synthetic regression table, `rows` × 20 inputs in [−1, 1), from a fixed formula (for
/// timing only): y = Σⱼ sin(3·x_j)/(j + 1) + x₀·x₁.
fn synthetic(rows: usize) -> (Array2<f32>, Array2<f32>) {
    let x = Array2::from_shape_fn((rows, 20), |(i, j)| {
        (((i.wrapping_mul(2_654_435_761) ^ (j * 40_503)) % 20_000) as f32 / 10_000.0) - 1.0
    });
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| {
        let row = x.row(i);
        let waves: f32 = row
            .iter()
            .enumerate()
            .map(|(j, &v)| (3.0 * v).sin() / (j + 1) as f32)
            .sum();
        waves + row[0] * row[1]
    });
    (x, y)
}

/// Peak resident memory of this process so far (Linux `VmHWM`), in MB.
fn peak_rss_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|kb| kb.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Child process of the `scaling` case: three epochs of the default large-table training
/// (Adam, batch 32, 20 → 64 → 64 → 1 ReLU, 20% validation) on `rows` synthetic rows; prints
/// the median epoch time and the peak resident memory before and after training.
fn scaling_child(rows: usize) {
    let (x, y) = synthetic(rows);
    let data_mb = peak_rss_mb();
    let mut net = NetworkPlan::new(20, &[64, 64], Activation::Relu)
        .build::<f32>(1)
        .expect("valid plan");
    let config = relume::TrainConfig {
        epochs: 3,
        patience: None,
        ..relume::TrainConfig::default()
    };
    let summary =
        relume::train(&mut net, x.view(), y.view(), None, &config, &mut []).expect("training");
    let seconds: Vec<f64> = summary.history.iter().map(|e| e.seconds).collect();
    println!(
        "scaling rows={rows} cols=20 epoch_s={:.4} train_rows={} peak_rss_after_data_mb={data_mb:.1} \
         peak_rss_mb={:.1}",
        median(&seconds),
        summary.rows.0,
        peak_rss_mb()
    );
}

/// Training cost against table size: one child process per size, so each peak is its own.
fn scaling() {
    let exe = std::env::current_exe().expect("own path");
    for rows in [10_000, 100_000, 1_000_000] {
        let out = std::process::Command::new(&exe)
            .args(["--scaling-child", &rows.to_string()])
            .output()
            .expect("child run");
        print!("{}", String::from_utf8_lossy(&out.stdout));
    }
}

/// A 5-member ensemble (no penalty grid) on 5000 synthetic rows, 20 epochs each, trained on a
/// 2-thread rayon pool and on a 1-thread pool in alternating rounds (wall time): the ratio
/// says whether members really run in parallel; the members must come out equal.
fn ensemble(rounds: usize) {
    use relume::fit::ensemble::fit_ensemble;
    let (x, y) = synthetic(5000);
    let recipe = Recipe {
        members: 5,
        choose_penalty: false,
        ..Recipe::default()
    }
    .with_config(relume::TrainConfig {
        epochs: 20,
        patience: None,
        ..relume::TrainConfig::default()
    });
    let train: Vec<usize> = (0..4000).collect();
    let stop: Vec<usize> = (4000..5000).collect();
    let fit = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("pool");
        let t = Instant::now();
        let e = pool
            .install(|| {
                fit_ensemble(
                    &recipe,
                    x.view(),
                    y.view(),
                    &train,
                    &stop,
                    MonitorConfig::default(),
                    &|_, _| {},
                )
            })
            .expect("ensemble");
        let params: Vec<Vec<f32>> = e
            .members
            .iter()
            .map(|m| m.network.params().to_vec())
            .collect();
        (t.elapsed().as_secs_f64(), params)
    };
    let (mut two, mut one) = (Vec::new(), Vec::new());
    for r in 0..rounds {
        let order = if r % 2 == 0 { [2, 1] } else { [1, 2] };
        let mut got = Vec::new();
        for threads in order {
            let (t, params) = fit(threads);
            if threads == 2 {
                two.push(t)
            } else {
                one.push(t)
            }
            got.push(params);
        }
        assert!(got[0] == got[1], "members differ between 1 and 2 threads");
    }
    let (ratio, lo, hi) = paired_ratio(&two, &one);
    println!(
        "ensemble members=5 rows=4000 epochs=20 two_threads_s={:.2} one_thread_s={:.2} \
         ratio={ratio:.3} ratio_lo={lo:.3} ratio_hi={hi:.3} same_members=true",
        median(&two),
        median(&one)
    );
}

/// The CPU model from /proc/cpuinfo (Linux), or "unknown".
fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split(':').nth(1))
                .map(|m| m.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into())
}

/// Whether the CPU has AVX-512F (whatever the cap).
fn has_avx512() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::is_x86_feature_detected!("avx512f")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

fn main() {
    // Arguments: case names to run (all when none), `--simd LEVEL`, `--rounds N`.
    let mut only = Vec::new();
    let mut rounds = 51;
    let mut args = std::env::args().skip(1);
    while let Some(arg) = args.next() {
        match arg.as_str() {
            "--simd" => match args.next().as_deref() {
                Some("avx512") => set_simd_limit(Simd::Avx512),
                Some("avx2") => set_simd_limit(Simd::Avx2),
                Some("baseline") => set_simd_limit(Simd::Baseline),
                other => panic!("--simd takes avx512, avx2 or baseline, not {other:?}"),
            },
            "--scaling-child" => {
                let rows = args.next().and_then(|n| n.parse().ok()).expect("row count");
                scaling_child(rows);
                return;
            }
            "--rounds" => {
                rounds = args
                    .next()
                    .and_then(|n| n.parse().ok())
                    .filter(|&n: &usize| n >= 5)
                    .expect("--rounds takes a number ≥ 5")
            }
            _ => only.push(arg),
        }
    }
    let load = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    println!(
        "# relume perf report: CPU {} ({} logical CPUs), instruction set in use {:?} \
         (AVX-512F on this CPU: {}), {rounds} interleaved rounds timed by thread CPU time \
         (wall time for wide_b1024_*), one thread except _2t, load average at start {}",
        cpu_model(),
        std::thread::available_parallelism().map_or(1, |n| n.get()),
        simd_level(),
        has_avx512(),
        load.split_whitespace()
            .take(3)
            .collect::<Vec<_>>()
            .join(" ")
    );
    set_threads(1);
    let wanted = |case: &str| only.is_empty() || only.iter().any(|c| c == case);
    if wanted("tabular_b32") {
        training_case("tabular_b32", &[10, 64, 64, 1], 32, 100, rounds);
    }
    if wanted("wide_b256") {
        training_case("wide_b256", &[256, 256, 256, 256, 1], 256, 2, rounds);
    }
    if wanted("wide_b1024_2t") {
        two_thread_case(rounds);
    }
    if wanted("row_predict") {
        row_predict(rounds);
    }
    if wanted("relu_fwd") {
        activations(rounds);
    }
    // Long cases, run only when named.
    if only.iter().any(|c| c == "scaling") {
        scaling();
    }
    if only.iter().any(|c| c == "ensemble") {
        ensemble(rounds.min(21));
    }
}
