//! L-BFGS (Liu & Nocedal 1989) for full-batch training of small tables, with a line search
//! meeting the weak Wolfe conditions (Lewis & Overton 2013, "Nonsmooth optimization via
//! quasi-Newton methods"): rectifier networks are only piecewise smooth, and the weak form
//! keeps the iterates off the kinks.

use std::collections::VecDeque;

/// Limited-memory BFGS settings.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Lbfgs {
    /// Correction pairs kept (m in the paper).
    pub history: usize,
    /// Sufficient-decrease constant c1 of the Wolfe conditions.
    pub c1: f64,
    /// Curvature constant c2 of the Wolfe conditions.
    pub c2: f64,
    /// Stop when the largest gradient entry is at most this.
    pub grad_tol: f64,
    /// Most function evaluations in one line search.
    pub max_line_evals: usize,
}

impl Default for Lbfgs {
    fn default() -> Self {
        Lbfgs {
            history: 10,
            c1: 1e-4,
            c2: 0.9,
            grad_tol: 1e-10,
            max_line_evals: 60,
        }
    }
}

/// How a minimization ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LbfgsOutcome {
    /// The gradient fell below the tolerance.
    Converged,
    /// The iteration callback asked to stop (iteration limit, early stopping).
    Stopped,
    /// No step along the search direction met the Wolfe conditions (usually: at the
    /// precision floor of the objective).
    LineSearchFailed,
    /// The objective was not finite at the starting point.
    NonFiniteStart,
}

/// One line-search trial: step, value, directional derivative.
#[derive(Clone, Copy, Debug)]
struct Trial {
    step: f64,
    value: f64,
    slope: f64,
}

/// A smooth function for [`Lbfgs::minimize`].
pub trait LbfgsProblem {
    /// Returns f(x) and writes ∇f(x) into `grad`. A non-finite value counts as +∞, so the line
    /// search backs away from it.
    fn evaluate(&mut self, x: &[f64], grad: &mut [f64]) -> f64;

    /// Called after each accepted step with the new point and value; returns false to stop.
    fn accept(&mut self, iteration: usize, x: &[f64], value: f64) -> bool;
}

impl Lbfgs {
    /// Minimizes `problem` from `x`, in place.
    pub fn minimize(&self, x: &mut [f64], problem: &mut dyn LbfgsProblem) -> LbfgsOutcome {
        let n = x.len();
        let mut grad = vec![0.0; n];
        let mut value = problem.evaluate(x, &mut grad);
        if !value.is_finite() || grad.iter().any(|g| !g.is_finite()) {
            return LbfgsOutcome::NonFiniteStart;
        }
        let mut pairs: VecDeque<(Vec<f64>, Vec<f64>, f64)> = VecDeque::new();
        let mut direction = vec![0.0; n];
        let mut trial_x = vec![0.0; n];
        let mut trial_grad = vec![0.0; n];
        for iteration in 0.. {
            if max_abs(&grad) <= self.grad_tol {
                return LbfgsOutcome::Converged;
            }
            two_loop(&grad, &pairs, &mut direction);
            let mut slope0 = dot(&grad, &direction);
            if slope0 >= 0.0 {
                // Not a descent direction (curvature information went stale): restart.
                pairs.clear();
                direction.iter_mut().zip(&grad).for_each(|(d, g)| *d = -g);
                slope0 = -dot(&grad, &grad);
            }
            let first_step = if pairs.is_empty() {
                (1.0 / max_abs(&grad).max(1e-300)).min(1.0)
            } else {
                1.0
            };
            let start = Trial {
                step: 0.0,
                value,
                slope: slope0,
            };
            let mut eval = |step: f64, out_grad: &mut Vec<f64>| -> Trial {
                for ((t, xi), d) in trial_x.iter_mut().zip(x.iter()).zip(&direction) {
                    *t = xi + step * d;
                }
                let v = problem.evaluate(&trial_x, out_grad);
                let finite = v.is_finite() && out_grad.iter().all(|g| g.is_finite());
                Trial {
                    step,
                    value: if finite { v } else { f64::INFINITY },
                    slope: if finite {
                        dot(out_grad, &direction)
                    } else {
                        f64::NAN
                    },
                }
            };
            let Some(accepted) =
                self.line_search(start, first_step, &mut |s| eval(s, &mut trial_grad))
            else {
                if pairs.is_empty() {
                    return LbfgsOutcome::LineSearchFailed;
                }
                // Stale curvature pairs can point badly; retry once from steepest descent.
                pairs.clear();
                continue;
            };
            // Re-evaluate at the accepted step so grad matches x exactly.
            let step = accepted.step;
            let mut new_grad = vec![0.0; n];
            let trial = eval(step, &mut new_grad);
            let s: Vec<f64> = direction.iter().map(|d| step * d).collect();
            x.iter_mut().zip(&s).for_each(|(xi, si)| *xi += si);
            let y: Vec<f64> = new_grad.iter().zip(&grad).map(|(a, b)| a - b).collect();
            let sy = dot(&s, &y);
            if sy > 1e-12 * dot(&y, &y).sqrt() * dot(&s, &s).sqrt() {
                if pairs.len() == self.history.max(1) {
                    pairs.pop_front();
                }
                pairs.push_back((s, y, 1.0 / sy));
            }
            grad = new_grad;
            value = trial.value;
            if !problem.accept(iteration, x, value) {
                return LbfgsOutcome::Stopped;
            }
        }
        unreachable!("the iteration loop only ends by returning")
    }

    /// Bracketing line search for the weak Wolfe conditions (Lewis & Overton 2013, Sec. 4.2):
    /// f(t) ≤ f(0) + c1·t·f'(0) and f'(t) ≥ c2·f'(0). Unlike the strong form it accepts a
    /// step past a kink where the slope turns positive, so on ReLU networks it does not get
    /// pinned to the kinks. If the budget runs out, the last step that met the first condition
    /// is taken (None if there was none).
    fn line_search(
        &self,
        start: Trial,
        first_step: f64,
        eval: &mut dyn FnMut(f64) -> Trial,
    ) -> Option<Trial> {
        let (mut low, mut high) = (0.0_f64, f64::INFINITY);
        let mut sufficient: Option<Trial> = None;
        let mut step = first_step;
        for _ in 0..self.max_line_evals {
            let trial = eval(step);
            // A NaN value fails the first condition too.
            let decreased = trial.value <= start.value + self.c1 * step * start.slope;
            if !decreased {
                high = step;
            } else if trial.slope < self.c2 * start.slope {
                low = step;
                sufficient = Some(trial);
            } else {
                return Some(trial);
            }
            step = if high.is_finite() {
                0.5 * (low + high)
            } else {
                2.0 * low
            };
        }
        sufficient
    }
}

/// Two-loop recursion (Nocedal & Wright, Algorithm 7.4): direction = −H·grad.
fn two_loop(grad: &[f64], pairs: &VecDeque<(Vec<f64>, Vec<f64>, f64)>, direction: &mut [f64]) {
    direction.iter_mut().zip(grad).for_each(|(d, g)| *d = -g);
    let mut alphas = Vec::with_capacity(pairs.len());
    for (s, y, rho) in pairs.iter().rev() {
        let alpha = rho * dot(s, direction);
        direction
            .iter_mut()
            .zip(y)
            .for_each(|(d, yi)| *d -= alpha * yi);
        alphas.push(alpha);
    }
    if let Some((s, y, _)) = pairs.back() {
        let gamma = dot(s, y) / dot(y, y);
        direction.iter_mut().for_each(|d| *d *= gamma);
    }
    for ((s, y, rho), alpha) in pairs.iter().zip(alphas.iter().rev()) {
        let beta = rho * dot(y, direction);
        direction
            .iter_mut()
            .zip(s)
            .for_each(|(d, si)| *d += (alpha - beta) * si);
    }
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn max_abs(a: &[f64]) -> f64 {
    a.iter().fold(0.0, |m, v| m.max(v.abs()))
}
