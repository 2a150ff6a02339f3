//! Fused residual passes over the design.

use ndarray::Axis;
use rayon::prelude::*;

use crate::problem::{Problem, STATS_CHUNK};

/// Weighted residual sum of squares of the centered problem for slopes
/// `beta` (caller's units): `sum_i w_i ((y_i - ybar) - sum_j (x_ij - m_j) beta_j)^2`.
///
/// Each residual is formed from centered values, so large column offsets
/// cost no digits; the sum is scaled by `scale` (a power of two near the
/// target's spread) so that it neither overflows nor underflows. One read
/// of the design, in parallel over fixed row chunks.
pub(crate) fn centered_rss(problem: &Problem<'_>, beta: &[f64], scale: f64) -> f64 {
    let x = problem.design();
    let y = problem.target();
    let means = &problem.stats.means;
    let ym = problem.stats.target_mean;
    let n = problem.rows();
    let inv = 1.0 / scale;
    let chunks: Vec<usize> = (0..n.div_ceil(STATS_CHUNK)).collect();
    let parts: Vec<f64> = chunks
        .par_iter()
        .map(|&c| {
            let r0 = c * STATS_CHUNK;
            let r1 = (r0 + STATS_CHUNK).min(n);
            let mut acc = 0.0;
            for i in r0..r1 {
                let w = problem.scaled_weight(i);
                if w == 0.0 {
                    continue;
                }
                let row = x.index_axis(Axis(0), i);
                let mut fit = 0.0;
                for (j, &v) in row.iter().enumerate() {
                    fit += (v - means[j]) * beta[j];
                }
                let r = ((y[i] - ym) - fit) * inv;
                acc += w * r * r;
            }
            acc
        })
        .collect();
    let s: f64 = parts.iter().sum();
    s * scale * scale * problem.stats.weight_scale
}
