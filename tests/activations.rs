//! The activation family: published constants and formulas, derivatives against finite
//! differences, finite outputs at extreme inputs, and name parsing.

use approx::assert_relative_eq;
use relume::nn::activation::{normal_cdf, softplus, GELU_TANH_CUBIC, SELU_ALPHA, SELU_LAMBDA};
use relume::Activation;

/// Every activation, plus non-default parameters so each parameter path is exercised.
fn family() -> Vec<Activation> {
    let mut all = Activation::all();
    all.extend([
        Activation::LeakyRelu { slope: 0.2 },
        Activation::Elu { alpha: 0.5 },
        Activation::Celu { alpha: 2.0 },
        Activation::Silu { beta: 1.7 },
        Activation::Softplus { beta: 3.0 },
        Activation::CappedRelu { cap: 1.0 },
        Activation::RandomLeaky {
            lower: 0.1,
            upper: 0.3,
        },
    ]);
    all
}

#[test]
fn selu_constants_are_the_published_ones() {
    // Klambauer et al. 2017, Eq. 14 (λ01 and α01, printed to 16 digits in the paper).
    assert_eq!(SELU_LAMBDA, 1.0507009873554805);
    assert_eq!(SELU_ALPHA, 1.6732632423543772);
    let a = Activation::Selu;
    assert_relative_eq!(a.value(1.0_f64), SELU_LAMBDA, max_relative = 1e-15);
    assert_relative_eq!(
        a.value(-1.0_f64),
        SELU_LAMBDA * SELU_ALPHA * ((-1.0_f64).exp() - 1.0),
        max_relative = 1e-15
    );
}

/// (x, Φ(x), GELU(x)) from tests/data/gelu_mpmath.csv (mpmath at 50 digits; see its README).
fn mpmath_table() -> Vec<(f64, f64, f64)> {
    let text = include_str!("data/gelu_mpmath.csv");
    text.lines()
        .skip(1)
        .map(|line| {
            let v: Vec<f64> = line.split(',').map(|s| s.parse().unwrap()).collect();
            (v[0], v[1], v[2])
        })
        .collect()
}

#[test]
fn exact_gelu_matches_arbitrary_precision_reference() {
    // Hendrycks & Gimpel 2016: GELU(x) = x·Φ(x). Reference: mpmath 1.3.0 at 50 digits.
    let table = mpmath_table();
    assert_eq!(table.len(), 2001);
    let mut worst = 0.0_f64;
    for &(x, _, gelu) in &table {
        worst = worst.max((Activation::Gelu.value(x) - gelu).abs());
    }
    println!("max |GELU - mpmath| = {worst:e}");
    assert!(worst <= 1e-12, "max |GELU - mpmath| = {worst:e}");
}

#[test]
fn normal_cdf_matches_arbitrary_precision_reference_in_both_tails() {
    // Relative accuracy, so the far left tail (Φ(−10) ≈ 7.6e-24) is really checked.
    for (x, phi, _) in mpmath_table() {
        let ours = normal_cdf(x);
        assert!(
            (ours - phi).abs() <= 1e-12 * phi,
            "x = {x}: {ours:e} vs {phi:e}"
        );
    }
}

#[test]
fn exact_gelu_agrees_with_statrs_erf_to_its_accuracy() {
    // Second reference: statrs' erf, GELU = x(1 + erf(x/√2))/2. statrs itself is only good to
    // about 5e-11 here (see tests/data/README.md), so the bound is 1e-10.
    let mut worst = 0.0_f64;
    for i in 0..=20_000 {
        let x = -10.0 + i as f64 * 1e-3;
        let reference = 0.5 * x * (1.0 + statrs::function::erf::erf(x / 2f64.sqrt()));
        worst = worst.max((Activation::Gelu.value(x) - reference).abs());
    }
    println!("max |GELU - statrs| = {worst:e}");
    assert!(worst <= 1e-10, "max |GELU - statrs| = {worst:e}");
}

#[test]
fn tanh_gelu_stays_within_1e3_of_exact() {
    // Hendrycks & Gimpel 2016 give the tanh form as an approximation of x·Φ(x).
    assert_eq!(GELU_TANH_CUBIC, 0.044715);
    let mut worst = 0.0_f64;
    for i in 0..=20_000 {
        let x = -10.0 + i as f64 * 1e-3;
        worst = worst.max((Activation::GeluTanh.value(x) - Activation::Gelu.value(x)).abs());
    }
    println!("max |tanh form - exact| = {worst:e}");
    assert!(worst < 1e-3, "max |tanh form - exact| = {worst:e}");
}

#[test]
fn closed_forms_from_the_papers() {
    // Values computed by hand from each paper's definition.
    let x = -0.7_f64;
    let sig = |z: f64| 1.0 / (1.0 + (-z).exp());
    let cases: Vec<(Activation, f64)> = vec![
        (Activation::Relu, 0.0),
        (Activation::LEAKY, 0.01 * x), // Maas et al. 2013
        (Activation::PRELU, 0.25 * x), // He et al. 2015, initial slope
        (Activation::RANDOM_LEAKY, x * (1.0 / 8.0 + 1.0 / 3.0) / 2.0), // Xu et al. 2015, inference
        (Activation::ELU, x.exp() - 1.0), // Clevert et al. 2016
        (
            Activation::Celu { alpha: 2.0 },
            2.0 * ((x / 2.0).exp() - 1.0),
        ), // Barron 2017
        (Activation::SILU, x * sig(x)), // Elfwing et al. 2018
        (Activation::Silu { beta: 2.0 }, x * sig(2.0 * x)), // Ramachandran et al. 2017
        (Activation::Mish, x * (1.0 + x.exp()).ln().tanh()), // Misra 2019
        (Activation::SOFTPLUS, (1.0 + x.exp()).ln()), // Dugas et al. 2001
        (
            Activation::Softplus { beta: 2.0 },
            (1.0 + (2.0 * x).exp()).ln() / 2.0,
        ),
        (Activation::RELU6, 0.0),
        (Activation::Tanh, x.tanh()),
        (Activation::Sigmoid, sig(x)),
        (Activation::Identity, x),
    ];
    for (act, expected) in cases {
        assert_relative_eq!(
            act.value(x),
            expected,
            epsilon = 1e-15,
            max_relative = 1e-13
        );
    }
    assert_eq!(Activation::RELU6.value(7.5_f64), 6.0);
    assert_eq!(Activation::RELU6.value(2.5_f64), 2.5);
}

#[test]
fn derivatives_match_central_differences() {
    // Away from kinks, f'(x) must agree with (f(x+h) - f(x-h)) / 2h in f64.
    let h = 1e-6;
    for act in family() {
        for i in 0..=160 {
            let x = -8.0 + i as f64 * 0.1 + 0.013;
            if act.kinks().iter().any(|k| (x - k).abs() < 1e-3) {
                continue;
            }
            let numeric = (act.value(x + h) - act.value(x - h)) / (2.0 * h);
            let analytic = act.derivative(x);
            assert!(
                (numeric - analytic).abs() <= 1e-7 * (1.0 + analytic.abs()),
                "{act}: x = {x}, analytic {analytic}, numeric {numeric}"
            );
        }
    }
}

#[test]
fn kink_conventions() {
    // Documented conventions at x = 0 (and at the cap).
    assert_eq!(Activation::Relu.derivative(0.0_f64), 0.0);
    assert_eq!(Activation::LEAKY.derivative(0.0_f64), 0.01);
    assert_eq!(Activation::PRELU.derivative(0.0_f64), 0.25);
    assert_eq!(Activation::ELU.derivative(0.0_f64), 1.0);
    assert_eq!(
        Activation::Selu.derivative(0.0_f64),
        SELU_LAMBDA * SELU_ALPHA
    );
    assert_eq!(Activation::RELU6.derivative(0.0_f64), 0.0);
    assert_eq!(Activation::RELU6.derivative(6.0_f64), 0.0);
    assert_eq!(Activation::RELU6.derivative(5.0_f64), 1.0);
    assert_eq!(Activation::Relu.kinks(), vec![0.0]);
    assert_eq!(Activation::RELU6.kinks(), vec![0.0, 6.0]);
    assert!(Activation::Gelu.kinks().is_empty());
}

#[test]
fn finite_inputs_give_finite_values_and_derivatives() {
    let probes64: [f64; 9] = [
        1e300, -1e300, 1e4, -1e4, 710.0, -710.0, 1e-300, -1e-300, 0.0,
    ];
    let probes32 = [1e4_f32, -1e4, 89.0, -89.0, 3e38, -3e38, 1e-38, 0.0];
    for act in family() {
        for &x in &probes64 {
            let (v, d) = (act.value(x), act.derivative(x));
            assert!(v.is_finite() && d.is_finite(), "{act} at {x:e}: {v}, {d}");
        }
        for &x in &probes32 {
            let (v, d) = (act.value(x), act.derivative(x));
            assert!(
                v.is_finite() && d.is_finite(),
                "{act} at {x:e} (f32): {v}, {d}"
            );
        }
    }
    // Far out, every derivative has reached its limit: it equals the derivative at ±1000
    // (the asymptotic slope: 1, 0, the negative slope, or SELU's scale). GELU's f32 derivative
    // once gave 2.8 at 3e38, its density term floored at the smallest exponent.
    for act in family() {
        for sign in [1.0_f64, -1.0] {
            let s32 = sign as f32;
            let near32 = act.derivative(s32 * 1e3_f32);
            let near64 = act.derivative(sign * 1e3_f64);
            for far in [s32 * 1e4_f32, s32 * 3e38_f32] {
                let d = act.derivative(far);
                assert!(
                    (d - near32).abs() <= 1e-6 * (1.0 + near32.abs()),
                    "{act} derivative at {far:e} (f32): {d}, at ±1e3: {near32}"
                );
            }
            for far in [sign * 1e4_f64, sign * 1e300] {
                let d = act.derivative(far);
                assert!(
                    (d - near64).abs() <= 1e-12 * (1.0 + near64.abs()),
                    "{act} derivative at {far:e}: {d}, at ±1e3: {near64}"
                );
            }
        }
    }
    // And the limits are the right ones.
    assert_eq!(Activation::Gelu.value(1e300_f64), 1e300);
    assert_eq!(Activation::GeluTanh.value(-1e300_f64), 0.0);
    assert_eq!(Activation::SOFTPLUS.value(1e4_f32), 1e4);
    assert_eq!(Activation::Mish.derivative(1e4_f32), 1.0);
    assert_eq!(softplus(-1e300_f64), 0.0);
}

#[test]
fn names_round_trip_and_bad_names_are_refused() {
    for act in family() {
        let text = act.to_string();
        let parsed: Activation = text.parse().unwrap();
        assert_eq!(parsed, act, "{text}");
    }
    assert_eq!(
        "leaky-relu:0.1".parse::<Activation>().unwrap(),
        Activation::LeakyRelu { slope: 0.1 }
    );
    assert_eq!(
        "prelu-shared".parse::<Activation>().unwrap(),
        Activation::Prelu {
            init: 0.25,
            shared: true
        }
    );
    let unknown = "relu7".parse::<Activation>().unwrap_err().to_string();
    assert!(
        unknown.contains("relu7") && unknown.contains("leaky-relu"),
        "{unknown}"
    );
    assert!("elu:-1".parse::<Activation>().is_err());
    assert!("elu:abc".parse::<Activation>().is_err());
    assert!("relu:3".parse::<Activation>().is_err());
    assert!("random-leaky:0.5:0.1".parse::<Activation>().is_err());
}

#[test]
fn default_initializers_follow_the_family() {
    use relume::{Draw, Fan, Init};
    assert_eq!(Activation::Relu.default_init(), Init::HE);
    assert_eq!(
        Activation::LEAKY.default_init(),
        Init::He {
            draw: Draw::Normal,
            fan: Fan::In,
            slope: 0.01
        }
    );
    assert_eq!(Activation::Selu.default_init(), Init::LECUN);
    assert_eq!(Activation::Tanh.default_init(), Init::GLOROT);
    assert_eq!(Activation::Sigmoid.default_init(), Init::GLOROT);
}

#[test]
fn f32_kernels_stay_close_to_the_f64_reference() {
    // f32 uses vectorizable approximations of exp, exp − 1 and erfc (see Scalar); f64 uses libm.
    use relume::Scalar;
    let mut worst_exp = 0.0_f64;
    for i in 0..=17_500 {
        let x = -87.0 + i as f64 * 0.01;
        let (ours, exact) = ((x as f32).kernel_exp() as f64, (x as f32 as f64).exp());
        worst_exp = worst_exp.max((ours - exact).abs() / exact);
    }
    println!("f32 kernel exp: worst relative error {worst_exp:.2e}");
    assert!(worst_exp <= 3e-7);
    // The f64 path of every smooth activation is libm's (exp, expm1, erfc, tanh, ln_1p), so it
    // is the reference here. Error is measured as |f32 − f64| / (1 + |f64|): relative for large
    // values, absolute near 0. The bound 5e-7 is about 4 units in the last place at 1.
    for act in [
        Activation::Gelu,
        Activation::ELU,
        Activation::Elu { alpha: 0.5 },
        Activation::Selu,
        Activation::CELU,
        Activation::SILU,
        Activation::Silu { beta: 1.7 },
        Activation::Tanh,
        Activation::Sigmoid,
        Activation::SOFTPLUS,
        Activation::Softplus { beta: 3.0 },
    ] {
        let (mut worst, mut at) = (0.0_f64, (0.0, "value"));
        for i in 0..=8000 {
            let x = -20.0 + i as f64 * 0.005;
            let xf = x as f32;
            for (what, ours, exact) in [
                ("value", act.value(xf) as f64, act.value(xf as f64)),
                (
                    "derivative",
                    act.derivative(xf) as f64,
                    act.derivative(xf as f64),
                ),
            ] {
                let error = (ours - exact).abs() / (1.0 + exact.abs());
                if error > worst {
                    (worst, at) = (error, (x, what));
                }
            }
        }
        println!(
            "{act} in f32: worst error {worst:.2e} ({} at x = {})",
            at.1, at.0
        );
        assert!(worst <= 5e-7, "{act}: {worst:e}");
    }
    assert!(f32::NAN.kernel_exp().is_nan());
    assert_eq!((-1e4_f32).kernel_exp_m1(), -1.0);
}

#[test]
fn slice_kernels_give_the_same_bits_on_every_instruction_set() {
    // The element-wise kernels use no fused multiply-add, so each lane computes exactly the
    // scalar IEEE operations whatever the vector width: results must not depend on the CPU.
    use relume::kernels::{set_simd_limit, simd_level, Simd};
    let x: Vec<f32> = (0..4099).map(|i| (i as f32 - 2049.0) * 0.0123).collect();
    let g: Vec<f32> = (0..4099)
        .map(|i| ((i * 37) % 101) as f32 / 50.0 - 1.0)
        .collect();
    let run = |act: Activation| {
        let (mut y, mut d) = (vec![0.0_f32; x.len()], vec![0.0_f32; x.len()]);
        act.apply(&x, &mut y);
        act.apply_derivative(&x, &g, &mut d);
        (y, d)
    };
    for act in family() {
        set_simd_limit(Simd::Baseline);
        let reference = run(act);
        // The slice kernels compute what `value` and `derivative` do for one element (the
        // single-row predictor and the layers must agree).
        for (i, (&v, &gv)) in x.iter().zip(&g).enumerate() {
            assert_eq!(reference.0[i], act.value(v), "{act:?} value at {v}");
            assert_eq!(
                reference.1[i],
                gv * act.derivative(v),
                "{act:?} derivative at {v}"
            );
        }
        for limit in [Simd::Avx2, Simd::Avx512] {
            set_simd_limit(limit);
            if simd_level() != limit {
                continue;
            }
            let (y, d) = run(act);
            let same =
                |a: &[f32], b: &[f32]| a.iter().zip(b).all(|(u, v)| u.to_bits() == v.to_bits());
            assert!(
                same(&y, &reference.0) && same(&d, &reference.1),
                "{act:?} on {limit:?}"
            );
        }
    }
    set_simd_limit(Simd::Avx512);
}
