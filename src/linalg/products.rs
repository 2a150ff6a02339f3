//! Small dense products used by inference: congruences `V M V^T`,
//! quadratic forms and symmetric positive definite solves.

use faer::linalg::matmul::matmul;
use faer::reborrow::ReborrowMut;
use faer::{Accum, Mat, MatMut, MatRef, Par};

use super::cholesky::{factor, Factor};
use super::triangular::solve_lower;

/// Rows per tile of [`congruence_into`].
const CONGRUENCE_TILE: usize = 64;

/// `out = scale * V M V^T` (`M = I` when `None`), made exactly symmetric,
/// by tiles of rows of `V`: extra memory one tile (`64 x k`), never a `k x k`
/// intermediate.
pub(crate) fn congruence_into(
    mut out: MatMut<'_, f64>,
    v: MatRef<'_, f64>,
    m: Option<MatRef<'_, f64>>,
    scale: f64,
) {
    let (rows, inner) = (v.nrows(), v.ncols());
    let mut tile = Mat::<f64>::zeros(CONGRUENCE_TILE.min(rows.max(1)), inner);
    let mut r0 = 0;
    while r0 < rows {
        let h = CONGRUENCE_TILE.min(rows - r0);
        let vt = v.subrows(r0, h);
        let lhs = match m {
            Some(m) => {
                let mut t = tile.as_mut().subrows_mut(0, h);
                matmul(t.rb_mut(), Accum::Replace, vt, m, 1.0, Par::Seq);
                tile.as_ref().subrows(0, h)
            }
            None => vt,
        };
        matmul(
            out.rb_mut().subrows_mut(r0, h),
            Accum::Replace,
            lhs,
            v.transpose(),
            scale,
            Par::Seq,
        );
        r0 += h;
    }
    for j in 0..rows {
        for i in (j + 1)..rows {
            let s = 0.5 * (out[(i, j)] + out[(j, i)]);
            out[(i, j)] = s;
            out[(j, i)] = s;
        }
    }
}

/// `g^T M g` for a square symmetric `M`.
pub(crate) fn quadratic_form(m: MatRef<'_, f64>, g: &[f64]) -> f64 {
    let mut acc = 0.0;
    for (j, gj) in g.iter().enumerate() {
        let mut col = 0.0;
        for (i, gi) in g.iter().enumerate() {
            col += m[(i, j)] * gi;
        }
        acc += col * gj;
    }
    acc
}

/// `g^T A^-1 g` for a symmetric positive definite `A` (Cholesky); `None`
/// when `A` is not numerically positive definite.
pub(crate) fn inverse_quadratic_form(a: MatRef<'_, f64>, g: &[f64]) -> Option<f64> {
    if g.is_empty() {
        return Some(0.0);
    }
    match factor(a) {
        Factor::Ok(l) => {
            let mut x = g.to_vec();
            solve_lower(l.as_ref(), &mut x);
            Some(x.iter().map(|v| v * v).sum())
        }
        Factor::Failed { .. } => None,
    }
}

/// Solves `R^T x = b` in place for upper-triangular `R`.
pub(crate) fn solve_upper_transposed(r: MatRef<'_, f64>, b: &mut [f64]) {
    if !b.is_empty() {
        solve_lower(r.transpose(), b);
    }
}

/// Product `R g` for upper-triangular `R`.
pub(crate) fn upper_times(r: MatRef<'_, f64>, g: &[f64]) -> Vec<f64> {
    let n = g.len();
    (0..n)
        .map(|i| (i..n).map(|j| r[(i, j)] * g[j]).sum())
        .collect()
}
