//! Friedman 1991 (MARS paper), test function #1:
//! y = 10 sin(π x1 x2) + 20 (x3 − 0.5)² + 10 x4 + 5 x5 + N(0, 1), x ~ U[0, 1]^10
//! (x6..x10 are noise inputs). Generated here, seeded.

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// `rows` samples: (x with 10 columns, y with 1 column).
pub fn friedman1(rows: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((rows, 10), |_| rng.random::<f64>());
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| {
        let r = x.row(i);
        let noise: f64 = StandardNormal.sample(&mut rng);
        10.0 * (std::f64::consts::PI * r[0] * r[1]).sin()
            + 20.0 * (r[2] - 0.5).powi(2)
            + 10.0 * r[3]
            + 5.0 * r[4]
            + noise
    });
    (x, y)
}
