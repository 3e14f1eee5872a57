//! Helpers shared by the integration tests.
#![allow(dead_code)]

pub mod cli;

use ndarray::Array2;
use ndarray_rand::rand_distr::StandardNormal;
use ndarray_rand::RandomExt;
use rand::SeedableRng;
use relume::{Activation, Init, LayerSpec, Network, Scalar};

/// A rows × cols matrix of independent N(0, 1) draws, from a seed.
pub fn normal_matrix(rows: usize, cols: usize, seed: u64) -> Array2<f64> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    Array2::random_using((rows, cols), StandardNormal, &mut rng)
}

/// `depth` blocks of (affine width→width with `init` and zero bias, then `activation`).
pub fn square_stack<F: Scalar>(
    width: usize,
    depth: usize,
    init: Init,
    activation: Activation,
    seed: u64,
) -> Network<F> {
    let mut specs = Vec::new();
    for _ in 0..depth {
        specs.push(LayerSpec::Affine {
            inputs: width,
            outputs: width,
            weight_init: init,
            bias_init: Init::ZERO,
        });
        specs.push(LayerSpec::Activation { width, activation });
    }
    let mut net = Network::from_specs(width, &specs).unwrap();
    net.initialize(seed);
    net
}

/// Mean of the squares of all entries.
pub fn second_moment(a: &Array2<f64>) -> f64 {
    a.iter().map(|v| v * v).sum::<f64>() / a.len() as f64
}
