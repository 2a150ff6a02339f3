//! Fused residual passes over the design.

use ndarray::{s, Axis};
use rayon::prelude::*;

use crate::error::Result;
use crate::linalg::kernels;
use crate::observe::Watch;
use crate::problem::{row_chunk, Problem};

/// Weighted residual sum of squares of the centered problem for slopes
/// `beta` (caller's units), in scaled units:
/// `sum_i w~_i (((y_i - ybar) - sum_j (x_ij - m_j) beta_j) / scale)^2`
/// with the scaled weights `w~` (multiply by `scale^2 ws` for the caller's
/// units).
///
/// Each residual is formed from centered values, so large column offsets
/// cost no digits; it is divided by `scale` (a power of two near the
/// target's spread) before squaring, so that the sum neither overflows nor
/// underflows. One read
/// of the design, in parallel over fixed row chunks; a row-major design is
/// read row by row with a vectorised dot product, a column-major one column
/// by column with a vectorised update of the chunk's residuals.
///
/// Reports every chunk to `watch` (whose pass the caller has begun); a
/// stop skips the chunks not yet started and returns [`crate::Error::Stopped`].
pub(crate) fn centered_rss(
    problem: &Problem<'_>,
    beta: &[f64],
    scale: f64,
    watch: &Watch<'_>,
) -> Result<f64> {
    let n = problem.rows();
    let p = problem.columns();
    let inv = 1.0 / scale;
    let beta = &beta[..p];
    let chunk = row_chunk(problem.columns());
    let chunks: Vec<usize> = (0..n.div_ceil(chunk)).collect();
    let parts: Vec<f64> = chunks
        .par_iter()
        .map(|&c| {
            let r0 = c * chunk;
            let r1 = (r0 + chunk).min(n);
            if !watch.go_on() {
                return 0.0;
            }
            let part = chunk_rss(problem, beta, inv, r0, r1);
            watch.rows_done(r1 - r0);
            part
        })
        .collect();
    watch.check()?;
    Ok(parts.iter().sum())
}

/// The part of [`centered_rss`] from rows `r0..r1`.
fn chunk_rss(problem: &Problem<'_>, beta: &[f64], inv: f64, r0: usize, r1: usize) -> f64 {
    let x = problem.design();
    let y = problem.target();
    let means = &problem.stats.means[..];
    let ym = problem.stats.target_mean;
    let p = problem.columns();
    let beta = &beta[..p];
    {
        {
            let xb = x.slice(s![r0..r1, ..]);
            let strides = xb.strides();
            if p > 1 && strides[0] == 1 && strides[1] != 1 {
                // Column-major: residuals of the chunk, one column at a time.
                let mut res: Vec<f64> = (r0..r1).map(|i| y[i] - ym).collect();
                let done = kernels::dispatch(
                    #[inline(always)]
                    || {
                        for (j, col) in xb.axis_iter(Axis(1)).enumerate() {
                            let Some(xs) = col.to_slice() else {
                                return false;
                            };
                            let (m, b) = (means[j], beta[j]);
                            for (r, &v) in res.iter_mut().zip(xs) {
                                *r -= (v - m) * b;
                            }
                        }
                        true
                    },
                );
                if done {
                    let mut acc = 0.0;
                    for (local, r) in res.iter().enumerate() {
                        let w = problem.scaled_weight(r0 + local);
                        if w == 0.0 {
                            continue;
                        }
                        let r = r * inv;
                        acc += w * r * r;
                    }
                    return acc;
                }
            }
            kernels::dispatch(
                #[inline(always)]
                || {
                    let mut acc = 0.0;
                    let mut add = |i: usize, fit: f64| {
                        let w = problem.scaled_weight(i);
                        if w != 0.0 {
                            let r = ((y[i] - ym) - fit) * inv;
                            acc += w * r * r;
                        }
                    };
                    let len = r1 - r0;
                    let mut local = 0;
                    if let (Some(all), true) = (xb.to_slice(), p > 0) {
                        // Packed rows: four at a time, four independent sums.
                        for four in all.chunks_exact(4 * p) {
                            let (a, rest) = four.split_at(p);
                            let (b, rest) = rest.split_at(p);
                            let (c, d) = rest.split_at(p);
                            let fits = kernels::centered_dot4([a, b, c, d], means, beta);
                            for (q, fit) in fits.into_iter().enumerate() {
                                add(r0 + local + q, fit);
                            }
                            local += 4;
                        }
                    }
                    for l in local..len {
                        let row = xb.row(l);
                        let fit = match row.to_slice() {
                            Some(xs) => kernels::centered_dot(xs, means, beta),
                            None => row
                                .iter()
                                .zip(means)
                                .zip(beta)
                                .map(|((&v, &m), &b)| (v - m) * b)
                                .sum(),
                        };
                        add(r0 + l, fit);
                    }
                    acc
                },
            )
        }
    }
}

/// Sum of every element of the design: one streaming read, parallel over
/// fixed row chunks (the bandwidth floor of a pass over the design).
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
pub(crate) fn design_sum(problem: &Problem<'_>) -> f64 {
    let x = problem.design();
    let n = problem.rows();
    let chunk = row_chunk(problem.columns());
    let chunks: Vec<usize> = (0..n.div_ceil(chunk)).collect();
    chunks
        .par_iter()
        .map(|&c| {
            let r0 = c * chunk;
            let r1 = (r0 + chunk).min(n);
            let xb = x.slice(s![r0..r1, ..]);
            kernels::dispatch(
                #[inline(always)]
                || {
                    let mut acc = [0.0; kernels::LANES];
                    let by_columns = xb.ncols() > 1 && xb.strides()[0] == 1;
                    if let Some(all) = xb.as_slice_memory_order() {
                        kernels::accumulate(all, &mut acc);
                    } else if by_columns {
                        for col in xb.columns() {
                            match col.to_slice() {
                                Some(xs) => kernels::accumulate(xs, &mut acc),
                                None => acc[0] += col.sum(),
                            }
                        }
                    } else {
                        for row in xb.rows() {
                            match row.to_slice() {
                                Some(xs) => kernels::accumulate(xs, &mut acc),
                                None => acc[0] += row.sum(),
                            }
                        }
                    }
                    kernels::reduce(acc)
                },
            )
        })
        .sum()
}
