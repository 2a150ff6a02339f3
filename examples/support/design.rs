//! The seeded design shared by the bench example, the scaling example and
//! the criterion benches.
//!
//! Scenario (invented): a test rig logs `p` strain gauges, each sitting on
//! its own large baseline (100, 200, ... units) with a small spread, and the
//! measured deflection is a fixed linear mix of the gauges plus noise. The
//! large baselines make centering matter; the columns are well conditioned
//! once centered, so every solver (the normal equations too) succeeds.

use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// `n x p` row-major design and its target, from `seed`.
pub fn make_data(n: usize, p: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let baselines: Vec<f64> = (0..p).map(|j| 100.0 * (j as f64 + 1.0)).collect();
    let spreads: Vec<f64> = (0..p).map(|j| 1.0 + (j % 7) as f64).collect();
    let mix: Vec<f64> = (0..p).map(|j| ((j % 5) as f64 - 2.0) * 0.5).collect();
    let mut x = Array2::<f64>::zeros((n, p));
    let mut y = Array1::<f64>::zeros(n);
    for (mut row, yi) in x.rows_mut().into_iter().zip(y.iter_mut()) {
        let mut acc = 3.0;
        for (j, v) in row.iter_mut().enumerate() {
            *v = baselines[j] + spreads[j] * rng.random_range(-1.0..1.0);
            acc += mix[j] * *v;
        }
        *yi = acc + rng.random_range(-1.0..1.0);
    }
    (x, y)
}
