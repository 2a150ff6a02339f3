//! Extended-precision residual passes for iterative refinement, built on
//! the double-double kernels of [`crate::linalg::extended`].
//!
//! They read the caller's **original** data, uncentered, so the residual
//! `y_i - b0 - x_i . b` they produce is that of the problem as given, with
//! the intercept explicit (see the kernels' module for the scaling by exact
//! powers of two and the fixed chunk order).

use ndarray::Axis;
use rayon::prelude::*;

use crate::error::Result;
use crate::linalg::extended::Accumulator;
use crate::observe::Watch;
use crate::problem::{row_chunk, Problem};

/// The exact power-of-two multipliers applied to the data on the way in.
#[derive(Debug, Clone)]
pub(crate) struct Units {
    /// `1 / s_j` per column.
    pub col: Vec<f64>,
    /// `1 / s_y`.
    pub target: f64,
}

/// `y_i - b0 - x_i . beta - e_i` in extended precision (scaled units),
/// rounded once.
#[inline]
fn row_residual(
    row: ndarray::ArrayView1<'_, f64>,
    y: f64,
    units: &Units,
    b0: f64,
    beta: &[f64],
    e: f64,
) -> f64 {
    let mut acc = Accumulator::default();
    acc.add(y * units.target);
    acc.add(-b0);
    for ((&v, &b), &a) in row.iter().zip(beta).zip(&units.col) {
        acc.add_product(-(v * a), b);
    }
    acc.add(-e);
    acc.value()
}

/// Residuals `y_i / s_y - b0 - sum_j (x_ij / s_j) beta_j` of the original
/// problem (scaled units), each computed in extended precision and rounded
/// once (every row, weighted or not). Reports every chunk to `watch`
/// (whose pass the caller has begun).
pub(crate) fn residuals(
    problem: &Problem<'_>,
    units: &Units,
    b0: f64,
    beta: &[f64],
    watch: &Watch<'_>,
) -> Result<Vec<f64>> {
    let x = problem.design();
    let y = problem.target();
    let mut out = vec![0.0; problem.rows()];
    out.par_chunks_mut(row_chunk(problem.columns()))
        .enumerate()
        .for_each(|(c, chunk)| {
            if !watch.go_on() {
                return;
            }
            let r0 = c * row_chunk(problem.columns());
            for (k, o) in chunk.iter_mut().enumerate() {
                let i = r0 + k;
                *o = row_residual(x.index_axis(Axis(0), i), y[i], units, b0, beta, 0.0);
            }
            watch.rows_done(chunk.len());
        });
    watch.check()?;
    Ok(out)
}

/// Weighted sum of squares `sum_i w~_i r_i^2` (scaled weights), compensated.
pub(crate) fn weighted_sum_of_squares(problem: &Problem<'_>, r: &[f64]) -> f64 {
    let parts: Vec<Accumulator> = r
        .par_chunks(row_chunk(problem.columns()))
        .enumerate()
        .map(|(c, chunk)| {
            let r0 = c * row_chunk(problem.columns());
            let mut acc = Accumulator::default();
            for (k, &v) in chunk.iter().enumerate() {
                let w = problem.scaled_weight(r0 + k);
                if w != 0.0 {
                    acc.add_weighted_product(w, v, v);
                }
            }
            acc
        })
        .collect();
    let mut total = Accumulator::default();
    for p in parts {
        total.merge(p);
    }
    total.value()
}

/// What one refinement step needs from a pass over the original data, for
/// the augmented system `e + A theta = y`, `A^T W e = 0` with
/// `A = [1, X]` (the column of ones only with an intercept).
#[derive(Debug, Clone)]
pub(crate) struct Defects {
    /// `f_i = y_i - b0 - x_i . beta - e_i` (extended precision, rounded).
    pub f: Vec<f64>,
    /// `sum_i w_i f_i` (scaled weights).
    pub weighted_f: f64,
    /// `-sum_i w_i e_i` (scaled weights): the intercept's row of `-A^T W e`.
    pub g0: f64,
    /// `-sum_i w_i x_ij e_i` (scaled weights), extended precision.
    pub g: Vec<f64>,
    /// `sum_i w_i (x_ij - m_j) f_i` (working precision; `m` the centering
    /// means; scaled units).
    pub centered_xf: Vec<f64>,
    /// `sum_i w_i (x_ij - m_j)`: zero up to the rounding of the means.
    pub centered_x: Vec<f64>,
}

impl Defects {
    /// Whether every number came out finite.
    pub(crate) fn is_finite(&self) -> bool {
        self.weighted_f.is_finite()
            && self.g0.is_finite()
            && self.f.iter().all(|v| v.is_finite())
            && self.g.iter().all(|v| v.is_finite())
            && self.centered_xf.iter().all(|v| v.is_finite())
    }
}

struct DefectPart {
    weighted_f: Accumulator,
    g0: Accumulator,
    g: Vec<Accumulator>,
    centered_xf: Vec<f64>,
    centered_x: Vec<f64>,
}

/// One pass over the original data computing the [`Defects`] of the current
/// solution `(b0, beta)` and residual estimate `e` (scaled units).
/// Reports every chunk to `watch` (whose pass the caller has begun).
pub(crate) fn defects(
    problem: &Problem<'_>,
    units: &Units,
    b0: f64,
    beta: &[f64],
    e: &[f64],
    watch: &Watch<'_>,
) -> Result<Defects> {
    let x = problem.design();
    let y = problem.target();
    let p = problem.columns();
    let means = &problem.stats.means;
    let mut f = vec![0.0; problem.rows()];
    let parts: Vec<DefectPart> = f
        .par_chunks_mut(row_chunk(problem.columns()))
        .enumerate()
        .map(|(c, chunk)| {
            let r0 = c * row_chunk(problem.columns());
            let mut part = DefectPart {
                weighted_f: Accumulator::default(),
                g0: Accumulator::default(),
                g: vec![Accumulator::default(); p],
                centered_xf: vec![0.0; p],
                centered_x: vec![0.0; p],
            };
            if !watch.go_on() {
                return part;
            }
            for (k, out) in chunk.iter_mut().enumerate() {
                let i = r0 + k;
                let row = x.index_axis(Axis(0), i);
                let w = problem.scaled_weight(i);
                if w == 0.0 {
                    // No part in the fit (and its residual may not be finite).
                    *out = 0.0;
                    continue;
                }
                let fi = row_residual(row, y[i], units, b0, beta, e[i]);
                *out = fi;
                part.weighted_f.add(w * fi);
                part.g0.add_product(-w, e[i]);
                for (j, &v) in row.iter().enumerate() {
                    let a = units.col[j];
                    part.g[j].add_weighted_product(w, -(v * a), e[i]);
                    let d = (v - means[j]) * a;
                    part.centered_xf[j] += w * d * fi;
                    part.centered_x[j] += w * d;
                }
            }
            watch.rows_done(chunk.len());
            part
        })
        .collect();
    watch.check()?;
    let mut weighted_f = Accumulator::default();
    let mut g0 = Accumulator::default();
    let mut g = vec![Accumulator::default(); p];
    let mut centered_xf = vec![0.0; p];
    let mut centered_x = vec![0.0; p];
    for part in parts {
        weighted_f.merge(part.weighted_f);
        g0.merge(part.g0);
        for j in 0..p {
            g[j].merge(part.g[j]);
            centered_xf[j] += part.centered_xf[j];
            centered_x[j] += part.centered_x[j];
        }
    }
    Ok(Defects {
        f,
        weighted_f: weighted_f.value(),
        g0: g0.value(),
        g: g.into_iter().map(Accumulator::value).collect(),
        centered_xf,
        centered_x,
    })
}

/// Applies a correction to the residual estimate:
/// `e_i += (f_i - c) - (x_i - m) . d_beta` (working precision, scaled units).
/// Reports every chunk to `watch` (whose pass the caller has begun).
pub(crate) fn update_residuals(
    problem: &Problem<'_>,
    units: &Units,
    e: &mut [f64],
    f: &[f64],
    c: f64,
    d_beta: &[f64],
    watch: &Watch<'_>,
) -> Result<()> {
    let x = problem.design();
    let means = &problem.stats.means;
    e.par_chunks_mut(row_chunk(problem.columns()))
        .enumerate()
        .for_each(|(ci, chunk)| {
            if !watch.go_on() {
                return;
            }
            let r0 = ci * row_chunk(problem.columns());
            for (k, ei) in chunk.iter_mut().enumerate() {
                let i = r0 + k;
                let row = x.index_axis(Axis(0), i);
                let mut fit = 0.0;
                for (((&v, &m), &d), &a) in row.iter().zip(means).zip(d_beta).zip(&units.col) {
                    fit += ((v - m) * a) * d;
                }
                *ei += (f[i] - c) - fit;
            }
            watch.rows_done(chunk.len());
        });
    watch.check()
}
