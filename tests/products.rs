//! The matrix product against nalgebra's (a general-purpose reference crate), over shapes that
//! hit every path: thin and tiny products (direct), partial register tiles, several depth
//! blocks (k > 256), transposed operands, accumulation, f32 and f64, one and two threads.

use nalgebra::DMatrix;
use ndarray::{Array2, ArrayView2};
use relume::kernels::{matmul, matmul_bias, set_simd_limit, set_threads, simd_level, Simd};
use std::sync::{Mutex, MutexGuard};

fn filled(rows: usize, cols: usize, seed: usize) -> Array2<f64> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        let h = (i * 7919 + j * 104_729 + seed * 1_000_003) % 2003;
        h as f64 / 1001.0 - 1.0
    })
}

fn reference(a: ArrayView2<'_, f64>, b: ArrayView2<'_, f64>) -> DMatrix<f64> {
    let na = DMatrix::from_fn(a.nrows(), a.ncols(), |i, j| a[[i, j]]);
    let nb = DMatrix::from_fn(b.nrows(), b.ncols(), |i, j| b[[i, j]]);
    na * nb
}

/// Checks c = a·b (+ c0) for one shape in f64 and f32, with each operand plain or transposed.
fn check(m: usize, n: usize, k: usize) {
    for (ta, tb, acc) in [
        (false, false, false),
        (true, false, true),
        (false, true, false),
        (true, true, true),
    ] {
        let a_store = if ta { filled(k, m, 1) } else { filled(m, k, 1) };
        let b_store = if tb { filled(n, k, 2) } else { filled(k, n, 2) };
        let a = if ta { a_store.t() } else { a_store.view() };
        let b = if tb { b_store.t() } else { b_store.view() };
        let c0 = filled(m, n, 3);
        let mut want = reference(a, b);
        // Higham's bound for a sum of k products: |error| ≤ γ(k+1) · Σ|a||b| (plus |c0|).
        let mut bound = reference(a.mapv(f64::abs).view(), b.mapv(f64::abs).view());
        bound += DMatrix::from_fn(m, n, |i, j| c0[[i, j]].abs());
        if acc {
            want += DMatrix::from_fn(m, n, |i, j| c0[[i, j]]);
        }
        let mut c = c0.clone();
        matmul(a, b, &mut c.view_mut(), acc);
        if !acc {
            // The bias form: every row of c gets the bias added.
            let bias = filled(1, n, 9).into_raw_vec_and_offset().0;
            let mut cb = c0.clone();
            matmul_bias(a, b, &bias, &mut cb.view_mut());
            for i in 0..m {
                for j in 0..n {
                    let w = want[(i, j)] + bias[j];
                    let tol = f64::EPSILON * (k as f64 + 3.0) * (bound[(i, j)] + bias[j].abs());
                    assert!(
                        (cb[[i, j]] - w).abs() <= tol,
                        "bias {m}×{k}·{k}×{n} at ({i},{j})"
                    );
                }
            }
        }
        let af = a.mapv(|v| v as f32);
        let bf = b.mapv(|v| v as f32);
        let (af, bf) = (
            if ta {
                af.t().as_standard_layout().t().to_owned()
            } else {
                af
            },
            if tb {
                bf.t().as_standard_layout().t().to_owned()
            } else {
                bf
            },
        );
        let mut cf = c0.mapv(|v| v as f32);
        matmul(af.view(), bf.view(), &mut cf.view_mut(), acc);
        for i in 0..m {
            for j in 0..n {
                let w = want[(i, j)];
                let scale = (k as f64 + 2.0) * bound[(i, j)];
                let tol64 = f64::EPSILON * scale;
                // f32 inputs are rounded copies: one more unit roundoff per operand.
                let tol32 = f32::EPSILON as f64 * (scale + 2.0 * bound[(i, j)]);
                assert!(
                    (c[[i, j]] - w).abs() <= tol64,
                    "f64 {m}×{k}·{k}×{n} (ta {ta}, tb {tb}, acc {acc}) at ({i},{j}): {} vs {w}",
                    c[[i, j]]
                );
                assert!(
                    (cf[[i, j]] as f64 - w).abs() <= tol32,
                    "f32 {m}×{k}·{k}×{n} (ta {ta}, tb {tb}, acc {acc}) at ({i},{j}): {} vs {w}",
                    cf[[i, j]]
                );
            }
        }
    }
}

/// The instruction-set cap and the thread count are process-wide settings, and the test harness
/// runs this file's tests in parallel: each test holds this lock while it changes them. (Without
/// it, the cap could change between the one- and two-thread training runs below, and products
/// with and without fused multiply-add round differently.)
static SETTINGS: Mutex<()> = Mutex::new(());

/// Takes the settings lock, also after another test failed while holding it.
fn settings() -> MutexGuard<'static, ()> {
    SETTINGS
        .lock()
        .unwrap_or_else(|poisoned| poisoned.into_inner())
}

#[test]
fn products_match_nalgebra_on_every_path() {
    let _settings = settings();
    // Each instruction set this CPU has: every kernel must give the reference result.
    for limit in [Simd::Baseline, Simd::Avx2, Simd::Avx512] {
        set_simd_limit(limit);
        if simd_level() == limit {
            println!("checked {limit:?}");
            check_all();
        }
    }
    set_simd_limit(Simd::Avx512);
}

fn check_all() {
    let dims = [1, 2, 3, 5, 12, 13, 31, 33, 64, 100];
    for &m in &dims {
        for &n in &dims {
            for &k in &[0, 1, 4, 17, 64] {
                check(m, n, k);
            }
        }
    }
    // Several depth blocks and more than one block of rows and columns.
    check(130, 1100, 300);
    check(257, 65, 513);
    check(1024, 1, 256);
}

#[test]
fn products_split_over_two_threads_match_one_thread() {
    let _settings = settings();
    // Large enough to be split (m·n·k ≥ 2¹⁸), with ragged edges.
    let a = filled(517, 300, 4);
    let b = filled(300, 261, 5);
    let mut one = Array2::<f64>::zeros((517, 261));
    let mut two = one.clone();
    set_threads(1);
    matmul(a.view(), b.view(), &mut one.view_mut(), false);
    set_threads(2);
    matmul(a.view(), b.view(), &mut two.view_mut(), false);
    let wide_a = filled(40, 300, 6);
    let wide_b = filled(300, 1400, 7);
    let mut wide_one = Array2::<f64>::zeros((40, 1400));
    let mut wide_two = wide_one.clone();
    matmul(
        wide_a.view(),
        wide_b.view(),
        &mut wide_two.view_mut(),
        false,
    );
    set_threads(1);
    matmul(
        wide_a.view(),
        wide_b.view(),
        &mut wide_one.view_mut(),
        false,
    );
    // The same tiles in the same order per element: bit-identical.
    assert_eq!(one, two);
    assert_eq!(wide_one, wide_two);
    // Whole training steps too: every split (products, element-wise loops, bias gradients,
    // Adam) computes each number exactly as one thread would.
    let weights = |threads: usize| {
        set_threads(threads);
        let x = filled(512, 256, 8).mapv(|v| v as f32);
        let y = filled(512, 1, 9).mapv(|v| v as f32);
        let mut net = relume::NetworkPlan::new(256, &[256, 256], relume::Activation::Relu)
            .build::<f32>(3)
            .unwrap();
        let mut grad = Array2::<f32>::zeros((512, 1));
        let mut adam = relume::Adam::new(1e-3);
        for _ in 0..5 {
            net.clear_gradients();
            let out = net
                .forward(x.view(), relume::nn::layer::Pass::Train)
                .unwrap();
            relume::Loss::Mse
                .gradient_into(out, y.view(), grad.view_mut())
                .unwrap();
            net.backward_params(grad.view()).unwrap();
            let (p, g) = net.params_and_grads();
            relume::Optimizer::step(&mut adam, p, g);
        }
        net.params().to_vec()
    };
    let (single, double) = (weights(1), weights(2));
    set_threads(1);
    assert!(single
        .iter()
        .zip(&double)
        .all(|(a, b)| a.to_bits() == b.to_bits()));
    let want = reference(a.view(), b.view());
    assert!((0..517).all(|i| (0..261).all(|j| (one[[i, j]] - want[(i, j)]).abs() < 1e-11)));
}

#[test]
fn activation_kernels_split_over_two_threads_match_one_thread() {
    let _settings = settings();
    // Long enough for the element-wise loops to be split (at least twice 2¹⁵ elements), with a
    // ragged end; every function of the family, forward and backward.
    let n = 100_003;
    let x: Vec<f32> = (0..n)
        .map(|i| ((i * 7919) % 20_011) as f32 / 1000.0 - 10.0)
        .collect();
    let g: Vec<f32> = (0..n)
        .map(|i| ((i * 31) % 101) as f32 / 50.0 - 1.0)
        .collect();
    for act in relume::Activation::all() {
        let run = |threads: usize| {
            set_threads(threads);
            let (mut y, mut d) = (vec![0.0_f32; n], vec![0.0_f32; n]);
            act.apply(&x, &mut y);
            act.apply_derivative(&x, &g, &mut d);
            (y, d)
        };
        let (one, two) = (run(1), run(2));
        set_threads(1);
        let same = |a: &[f32], b: &[f32]| a.iter().zip(b).all(|(u, v)| u.to_bits() == v.to_bits());
        assert!(same(&one.0, &two.0) && same(&one.1, &two.1), "{act:?}");
    }
}
