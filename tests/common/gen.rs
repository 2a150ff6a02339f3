//! Seeded random problems for the integration tests.
#![allow(dead_code)]

use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A seeded generator (ChaCha8: the same stream on every platform).
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// One standard normal draw (Box-Muller).
pub fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.random::<f64>();
    let u2: f64 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// An `n x p` matrix of standard normal entries.
pub fn normal_matrix(rng: &mut ChaCha8Rng, n: usize, p: usize) -> Array2<f64> {
    Array2::from_shape_fn((n, p), |_| normal(rng))
}

/// A vector of standard normal entries.
pub fn normal_vector(rng: &mut ChaCha8Rng, n: usize) -> Array1<f64> {
    Array1::from_shape_fn(n, |_| normal(rng))
}

/// Weights uniform in [0.2, 3).
pub fn weights(rng: &mut ChaCha8Rng, n: usize) -> Array1<f64> {
    Array1::from_shape_fn(n, |_| 0.2 + 2.8 * rng.random::<f64>())
}

/// A noise-free problem: design with column offsets and spreads, known
/// coefficients and intercept.
pub struct Known {
    pub x: Array2<f64>,
    pub y: Array1<f64>,
    pub beta: Array1<f64>,
    pub intercept: f64,
}

/// Builds `y = intercept + X beta` exactly-ish (one rounding per term).
pub fn known(seed: u64, n: usize, p: usize, with_intercept: bool) -> Known {
    let mut r = rng(seed);
    let mut x = normal_matrix(&mut r, n, p);
    for j in 0..p {
        let offset = 10.0 * normal(&mut r);
        let spread = (2.0 * normal(&mut r)).exp();
        x.column_mut(j).mapv_inplace(|v| offset + spread * v);
    }
    let beta = normal_vector(&mut r, p);
    let intercept = if with_intercept {
        5.0 * normal(&mut r)
    } else {
        0.0
    };
    let y = x.dot(&beta) + intercept;
    Known {
        x,
        y,
        beta,
        intercept,
    }
}

/// Largest relative difference, scaled by the largest magnitude of `b`.
pub fn rel_diff(a: &[f64], b: &[f64]) -> f64 {
    let scale = b
        .iter()
        .fold(0.0_f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    a.iter()
        .zip(b)
        .fold(0.0_f64, |m, (x, y)| m.max((x - y).abs()))
        / scale
}
