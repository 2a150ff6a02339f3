//! A fused pass over the design that scores leave-one-out errors of a
//! penalised fit for a whole grid of penalties at once.
//!
//! With the SVD `Ẑ = U S V^T` of the centered, weighted, scaled design (its
//! columns multiplied by factors `f_j`), the product `A = Ẑ V` gives, row by
//! row, the leverages `h_i(mu) = sum_k A_ik^2 / (s_k^2 + mu)` and the fitted
//! values `sum_k A_ik s_k d_k / (s_k^2 + mu)` (with `d = U^T t`). Each block
//! of rows forms `A` for its rows and then both quantities for every
//! penalty with one product each; nothing of size `n` is stored.

use faer::linalg::matmul::matmul;
use faer::{Accum, Mat, MatRef, Par};
use rayon::prelude::*;

use crate::linalg::{block_groups, block_rows, GROUPS};
use crate::observe::Watch;
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;

/// The spectral quantities the pass needs.
pub(crate) struct LooSpectrum<'m> {
    /// Column factors `f_j` (length `p`).
    pub factors: &'m [f64],
    /// Right singular vectors kept (`p x r`).
    pub v: MatRef<'m, f64>,
    /// `r x m`: `1 / (s_k^2 + mu_m)`.
    pub leverage: MatRef<'m, f64>,
    /// `r x m`: `s_k d_k / (s_k^2 + mu_m)`.
    pub fitted: MatRef<'m, f64>,
    /// `w_i` times this is the intercept's share of the leverage of row
    /// `i` (`1 / sum w` with an intercept, 0 without).
    pub intercept_share: f64,
}

/// For each penalty `m`, the sum over rows with non-zero weight of
/// `(r_i / (1 - H_ii))^2` in scaled units, where `r_i` is the weighted
/// residual of the full fit and `H_ii` the leverage including the
/// intercept; `+inf` where some `1 - H_ii` is at rounding level (a row the
/// fit interpolates, whose leave-one-out error is not determined).
/// Reports every block to `watch` (whose pass the caller has begun; the
/// caller checks for a stop).
pub(crate) fn loo_sums(
    problem: &Problem<'_>,
    scaling: &Scaling,
    spec: &LooSpectrum<'_>,
    watch: &Watch<'_>,
) -> Vec<f64> {
    let p = problem.columns();
    let r = spec.v.ncols();
    let m = spec.leverage.ncols();
    let k = p + 1;
    // The block and the four products formed from it, within one block's
    // worth of bytes.
    let b = block_rows(k + 2 * r + 2 * m);
    let tiny = 16.0 * f64::EPSILON * (r.max(1) as f64);
    let groups = block_groups(problem.rows(), b, GROUPS);
    let partials: Vec<Vec<f64>> = groups
        .par_iter()
        .map(|group| {
            let mut acc = vec![0.0; m];
            let mut buf = Mat::<f64>::zeros(b, k);
            let mut a = Mat::<f64>::zeros(b, r);
            let mut a2 = Mat::<f64>::zeros(b, r);
            let mut lev = Mat::<f64>::zeros(b, m);
            let mut fit = Mat::<f64>::zeros(b, m);
            for &(r0, r1) in group {
                if !watch.go_on() {
                    break;
                }
                let len = r1 - r0;
                fill_block(
                    problem,
                    scaling,
                    r0,
                    r1,
                    true,
                    buf.as_mut().subrows_mut(0, len),
                );
                for (j, &f) in spec.factors.iter().enumerate() {
                    for i in 0..len {
                        buf[(i, j)] *= f;
                    }
                }
                if r > 0 {
                    let z = buf.as_ref().submatrix(0, 0, len, p);
                    matmul(
                        a.as_mut().subrows_mut(0, len),
                        Accum::Replace,
                        z,
                        spec.v,
                        1.0,
                        Par::Seq,
                    );
                    for c in 0..r {
                        for i in 0..len {
                            let v = a[(i, c)];
                            a2[(i, c)] = v * v;
                        }
                    }
                    matmul(
                        lev.as_mut().subrows_mut(0, len),
                        Accum::Replace,
                        a2.as_ref().subrows(0, len),
                        spec.leverage,
                        1.0,
                        Par::Seq,
                    );
                    matmul(
                        fit.as_mut().subrows_mut(0, len),
                        Accum::Replace,
                        a.as_ref().subrows(0, len),
                        spec.fitted,
                        1.0,
                        Par::Seq,
                    );
                }
                for i in 0..len {
                    let w = problem.scaled_weight(r0 + i);
                    if w == 0.0 {
                        continue;
                    }
                    let t = buf[(i, p)];
                    let base = 1.0 - w * spec.intercept_share;
                    for (c, total) in acc.iter_mut().enumerate() {
                        let (h, f) = if r > 0 {
                            (lev[(i, c)], fit[(i, c)])
                        } else {
                            (0.0, 0.0)
                        };
                        let one_minus = base - h;
                        if one_minus <= tiny {
                            *total = f64::INFINITY;
                        } else {
                            let e = (t - f) / one_minus;
                            *total += e * e;
                        }
                    }
                }
                watch.rows_done(len);
            }
            acc
        })
        .collect();
    let mut out = vec![0.0; m];
    for part in &partials {
        for (o, v) in out.iter_mut().zip(part) {
            *o += v;
        }
    }
    out
}
