//! Penalties: part of the objective's value and gradient (checked by finite differences),
//! weights-only by default, and proximal L1 giving exact zeros.

mod common;

use common::normal_matrix;
use relume::fit::penalty::Penalty;
use relume::nn::layer::Role;
use relume::{check_gradients, Activation, CheckOptions, Loss, NetworkPlan, Objective};

#[test]
fn penalty_gradients_pass_the_finite_difference_check() {
    // The checker differentiates loss + penalty numerically (five-point stencil).
    let x = normal_matrix(6, 3, 11);
    let y = normal_matrix(6, 1, 12);
    let all_roles = Penalty {
        biases: true,
        slopes: true,
        ..Penalty::elastic(0.01, 0.02)
    };
    for penalty in [
        Penalty::l1(0.01),
        Penalty::l2(0.05),
        Penalty::elastic(0.01, 0.02),
        all_roles,
    ] {
        let mut net = NetworkPlan::new(3, &[4, 4], Activation::PRELU)
            .build::<f64>(3)
            .unwrap();
        // Biases away from zero so the L1 kink is not at a test point.
        for t in net.tensors() {
            if t.role == Role::Bias {
                for (k, p) in t.range.enumerate() {
                    net.params_mut()[p] = 0.1 + 0.01 * k as f64;
                }
            }
        }
        let objective = Objective::new(Loss::Mse, penalty);
        let report = check_gradients(
            &mut net,
            objective,
            x.view(),
            y.view(),
            CheckOptions::default(),
        )
        .unwrap();
        println!(
            "{penalty:?}: max relative error {:.2e}",
            report.max_rel_error()
        );
        assert!(
            report.max_rel_error() <= 1e-6,
            "{:?}",
            report.worst_tensor()
        );
    }
}

#[test]
fn only_weights_are_penalized_by_default() {
    let net = NetworkPlan::new(3, &[4], Activation::PRELU)
        .build::<f64>(1)
        .unwrap();
    let penalty = Penalty::l2(1.0);
    let ranges = penalty.ranges(&net);
    let weights: usize = net
        .tensors()
        .iter()
        .filter(|t| t.role == Role::Weight)
        .map(|t| t.range.len())
        .sum();
    assert_eq!(ranges.iter().map(|r| r.len()).sum::<usize>(), weights);
    let expected: f64 = ranges
        .iter()
        .flat_map(|r| net.params()[r.clone()].iter())
        .map(|w| w * w)
        .sum();
    assert!((penalty.value(net.params(), &ranges) - expected).abs() < 1e-12);
    let with_biases = Penalty {
        biases: true,
        ..penalty
    };
    assert!(with_biases.ranges(&net).len() > ranges.len());
}

#[test]
fn proximal_step_is_the_soft_threshold() {
    // Tibshirani 1996 / Daubechies et al. 2004: prox of t·|w| is sign(w)·max(|w| − t, 0).
    let penalty = Penalty::l1(0.5).proximal();
    let mut w = vec![1.0, -0.2, 0.04, -3.0, 0.0];
    let all = [0..2, 2..5];
    penalty.apply_proximal(&mut w, &all, 0.1);
    assert_eq!(w, vec![0.95, -0.15000000000000002, 0.0, -2.95, 0.0]);
    // Proximal L1 stays out of the gradient.
    let mut g = vec![0.0; 2];
    let both = [0..1, 1..2];
    penalty.add_gradient(&[1.0, -1.0], &mut g, &both);
    assert_eq!(g, vec![0.0, 0.0]);
    assert!(Penalty::l1(-1.0).validate().is_err());
}
