//! Optimizers against the update rules and results of their papers.

use nalgebra::{Matrix2, Vector2};
use relume::fit::optim::{Adam, Lbfgs, LbfgsOutcome, LbfgsProblem, RmsProp, Sgd};
use relume::fit::schedule::Schedule;
use relume::Optimizer;

#[test]
fn first_adam_step_moves_each_parameter_by_lr_whatever_the_gradient_scale() {
    // Kingma & Ba 2015, Sec. 2.1: with bias correction the first step is α·g/(|g| + ε), about
    // ±α for |g| ≫ ε. ε is set to 1e-14 so that ε/|g| ≤ 1e-8 across the whole range 1e-6..1e6.
    let lr = 1e-3;
    let grads: Vec<f64> = (-6..=6)
        .flat_map(|e| [10f64.powi(e), -3.7 * 10f64.powi(e)])
        .collect();
    let mut params = vec![0.5; grads.len()];
    let mut adam = Adam::<f64>::new(lr);
    adam.eps = 1e-14;
    adam.step(&mut params, &grads);
    for (p, g) in params.iter().zip(&grads) {
        let moved = 0.5 - p;
        let rel = (moved - lr * g.signum()).abs() / lr;
        assert!(
            rel <= 1e-6,
            "gradient {g:e}: moved {moved:e}, relative error {rel:e}"
        );
    }
}

#[test]
fn first_adam_step_with_the_default_epsilon_is_lr_times_g_over_g_plus_eps() {
    // The same step with the paper's ε = 1e-8: exactly α·|g|/(|g| + ε), so about 1% short of α
    // at |g| = 1e-6 and within 1e-6 of α from |g| = 1e-2 up.
    let lr = 1e-3;
    for e in -6..=6 {
        let g = 10f64.powi(e);
        let mut p = [0.0];
        Adam::<f64>::new(lr).step(&mut p, &[g]);
        let expected = lr * g / (g + 1e-8);
        assert!(((-p[0]) - expected).abs() <= 1e-15 * lr, "g = {g:e}");
        if e >= -2 {
            assert!(((-p[0]) - lr).abs() <= 1e-6 * lr, "g = {g:e}");
        }
    }
}

/// ∇f for f(θ) = ½·a·θ².
const CURVATURE: f64 = 2.0;

fn quadratic_run(mut opt: impl Optimizer<f64>, steps: usize, start: f64) -> Vec<f64> {
    let mut theta = [start];
    let mut path = vec![start];
    for _ in 0..steps {
        let g = [CURVATURE * theta[0]];
        opt.step(&mut theta, &g);
        path.push(theta[0]);
    }
    path
}

#[test]
fn heavy_ball_matches_the_closed_form_recurrence() {
    // Polyak 1964: v' = μv − ε·aθ, θ' = θ + v'. On a quadratic this is the linear map
    // [θ', v'] = M·[θ, v] with M = [[1 − εa, μ], [−εa, μ]]; the closed form is M^t·[θ0, 0].
    let (lr, mu, start) = (0.05, 0.9, 3.0);
    let path = quadratic_run(Sgd::new(lr).momentum(mu, false), 20, start);
    let m = Matrix2::new(1.0 - lr * CURVATURE, mu, -lr * CURVATURE, mu);
    for (t, &ours) in path.iter().enumerate() {
        let closed = m.pow(t as u32) * Vector2::new(start, 0.0);
        assert!(
            (ours - closed[0]).abs() <= 1e-12 * start,
            "step {t}: {ours} vs {}",
            closed[0]
        );
    }
}

#[test]
fn nesterov_matches_the_closed_form_recurrence() {
    // Sutskever et al. 2013, Eq. 3–4: v' = μv − ε∇f(θ + μv), θ' = θ + v'. On a quadratic:
    // M = [[1 − εa, μ(1 − εa)], [−εa, μ(1 − εa)]]. The optimizer holds Θ = θ + μv (its
    // gradient is taken there), so Θ_t is compared with θ_t + μ·v_t.
    let (lr, mu, start) = (0.05, 0.9, 3.0);
    let path = quadratic_run(Sgd::new(lr).momentum(mu, true), 20, start);
    let k = 1.0 - lr * CURVATURE;
    let m = Matrix2::new(k, mu * k, -lr * CURVATURE, mu * k);
    for (t, &ours) in path.iter().enumerate() {
        let closed = m.pow(t as u32) * Vector2::new(start, 0.0);
        let lookahead = closed[0] + mu * closed[1];
        assert!(
            (ours - lookahead).abs() <= 1e-12 * start,
            "step {t}: {ours} vs {lookahead}"
        );
    }
}

#[test]
fn plain_sgd_is_a_gradient_step() {
    let path = quadratic_run(Sgd::new(0.1), 3, 1.0);
    // θ' = θ − ε·aθ = 0.8θ.
    for (t, v) in path.iter().enumerate() {
        assert!((v - 0.8f64.powi(t as i32)).abs() < 1e-15);
    }
}

#[test]
fn rmsprop_first_step_follows_its_definition() {
    // Tieleman & Hinton 2012: s = ρs + (1 − ρ)g², θ −= ε·g/√s; from s = 0 the first step is
    // ε/√(1 − ρ) in the direction of −g (ε_guard = 1e-8 negligible at |g| = 1).
    let mut p = [0.0];
    RmsProp::<f64>::new(0.01).decay(0.9).step(&mut p, &[1.0]);
    let expected = 0.01 / (0.1f64.sqrt() + 1e-8);
    assert!((-p[0] - expected).abs() < 1e-15);
}

/// Reddi et al. 2018, Theorem 1: the online problem f_t(x) = C·x when t mod 3 = 1, else −x,
/// on x ∈ [−1, 1] with C = 3, β1 = 0, β2 = 1/(1 + C²), α_t = α/√t. The best fixed point is
/// x = −1; Adam drifts to +1, AMSGrad does not. Returns the final x.
fn reddi_online_problem(amsgrad: bool) -> f64 {
    let c = 3.0;
    let mut opt = Adam::<f64>::new(0.5).amsgrad(amsgrad);
    opt.beta1 = 0.0;
    opt.beta2 = 1.0 / (1.0 + c * c);
    let mut x = [0.0];
    for t in 1..=30_000 {
        opt.set_learning_rate(0.5 / (t as f64).sqrt());
        let g = if t % 3 == 1 { c } else { -1.0 };
        opt.step(&mut x, &[g]);
        x[0] = x[0].clamp(-1.0, 1.0);
    }
    x[0]
}

#[test]
fn amsgrad_escapes_the_counterexample_where_adam_fails() {
    let (adam, ams) = (reddi_online_problem(false), reddi_online_problem(true));
    println!("Reddi et al. counterexample: Adam ends at {adam:.3}, AMSGrad at {ams:.3}");
    assert!(adam > 0.9, "Adam should drift to +1, got {adam}");
    assert!(
        ams < -0.5,
        "AMSGrad should head for the optimum -1, got {ams}"
    );
}

#[test]
fn adamw_decay_is_decoupled_from_the_gradient() {
    // Loshchilov & Hutter 2019: AdamW shrinks θ by lr·λ·θ outside the adaptive step, while L2
    // in the gradient is normalized away by Adam. For a parameter whose loss gradient is 0:
    let (lr, lambda, theta) = (1e-2, 0.1, 2.0);
    let mut decoupled = [theta];
    Adam::<f64>::new(lr)
        .decoupled_decay(lambda)
        .step(&mut decoupled, &[0.0]);
    assert!((decoupled[0] - theta * (1.0 - lr * lambda)).abs() < 1e-15);
    let mut coupled = [theta];
    // L2 penalty λ/2·θ² in the gradient: g = λθ; Adam's first step moves it by ≈ lr.
    Adam::<f64>::new(lr).step(&mut coupled, &[lambda * theta]);
    assert!((theta - coupled[0] - lr).abs() < 1e-8);
    assert!((decoupled[0] - coupled[0]).abs() > 1e-3);
}

struct Rosenbrock {
    evaluations: usize,
}

impl LbfgsProblem for Rosenbrock {
    fn evaluate(&mut self, x: &[f64], grad: &mut [f64]) -> f64 {
        self.evaluations += 1;
        let (a, b) = (x[0], x[1]);
        grad[0] = -2.0 * (1.0 - a) - 400.0 * a * (b - a * a);
        grad[1] = 200.0 * (b - a * a);
        (1.0 - a).powi(2) + 100.0 * (b - a * a).powi(2)
    }
    fn accept(&mut self, iteration: usize, _: &[f64], _: f64) -> bool {
        iteration < 500
    }
}

#[test]
fn lbfgs_finds_the_rosenbrock_minimum() {
    // Rosenbrock 1960: f(a, b) = (1 − a)² + 100(b − a²)² has its minimum 0 at (1, 1); the
    // classic start is (−1.2, 1). Liu & Nocedal 1989 solve it in a few dozen iterations.
    let mut x = [-1.2, 1.0];
    let mut problem = Rosenbrock { evaluations: 0 };
    let outcome = Lbfgs::default().minimize(&mut x, &mut problem);
    println!(
        "Rosenbrock: {outcome:?} at {x:?} after {} evaluations",
        problem.evaluations
    );
    assert!(matches!(
        outcome,
        LbfgsOutcome::Converged | LbfgsOutcome::LineSearchFailed
    ));
    assert!(
        (x[0] - 1.0).abs() < 1e-8 && (x[1] - 1.0).abs() < 1e-8,
        "{x:?}"
    );
    assert!(problem.evaluations < 200);
}

#[test]
fn schedules_follow_their_formulas() {
    let base = 0.1;
    let step = Schedule::Step {
        every: 10,
        factor: 0.5,
    }
    .start(base);
    assert_eq!(step.rate(0), 0.1);
    assert_eq!(step.rate(9), 0.1);
    assert_eq!(step.rate(10), 0.05);
    assert_eq!(step.rate(25), 0.025);
    let exp = Schedule::Exponential { gamma: 0.9 }.start(base);
    assert!((exp.rate(3) - 0.1 * 0.729).abs() < 1e-15);
    let cos = Schedule::Cosine {
        warmup: 5,
        total: 105,
        floor: 0.0,
    }
    .start(base);
    assert!((cos.rate(0) - 0.02).abs() < 1e-15);
    assert!((cos.rate(4) - 0.1).abs() < 1e-15);
    assert!((cos.rate(5) - 0.1).abs() < 1e-15);
    assert!(
        (cos.rate(55) - 0.05).abs() < 1e-12,
        "half way: {}",
        cos.rate(55)
    );
    assert!(cos.rate(105).abs() < 1e-15);
    let mut plateau = Schedule::Plateau {
        patience: 2,
        factor: 0.5,
        min_fraction: 0.2,
    }
    .start(base);
    for loss in [1.0, 0.9, 0.9, 0.9] {
        plateau.observe(loss);
    }
    assert_eq!(
        plateau.rate(4),
        0.05,
        "cut after two epochs without improvement"
    );
    for _ in 0..10 {
        plateau.observe(0.9);
    }
    assert!(
        (plateau.rate(14) - 0.02).abs() < 1e-15,
        "never below the floor"
    );
}
