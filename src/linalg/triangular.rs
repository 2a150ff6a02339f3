//! Triangular solves and condition estimates.

use faer::linalg::triangular_inverse::{invert_lower_triangular, invert_upper_triangular};
use faer::linalg::triangular_solve::{
    solve_lower_triangular_in_place, solve_upper_triangular_in_place,
};
use faer::{Mat, MatRef, Par};

/// Solves `R x = b` in place for upper-triangular `R`.
pub(crate) fn solve_upper(r: MatRef<'_, f64>, b: &mut [f64]) {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::TriangularSolve)
        && super::backend::lapack::solve_triangular(r, b, true)
    {
        return;
    }
    let n = b.len();
    let mut rhs = Mat::<f64>::from_fn(n, 1, |i, _| b[i]);
    solve_upper_triangular_in_place(r, rhs.as_mut(), Par::Seq);
    for (i, v) in b.iter_mut().enumerate() {
        *v = rhs[(i, 0)];
    }
}

/// Solves `L x = b` in place for lower-triangular `L`.
pub(crate) fn solve_lower(l: MatRef<'_, f64>, b: &mut [f64]) {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::TriangularSolve)
        && super::backend::lapack::solve_triangular(l, b, false)
    {
        return;
    }
    let n = b.len();
    let mut rhs = Mat::<f64>::from_fn(n, 1, |i, _| b[i]);
    solve_lower_triangular_in_place(l, rhs.as_mut(), Par::Seq);
    for (i, v) in b.iter_mut().enumerate() {
        *v = rhs[(i, 0)];
    }
}

/// The 1-norm (largest column sum of magnitudes).
pub(crate) fn norm1(a: MatRef<'_, f64>) -> f64 {
    (0..a.ncols())
        .map(|j| (0..a.nrows()).map(|i| a[(i, j)].abs()).sum::<f64>())
        .fold(0.0, f64::max)
}

/// Writes the inverse of the upper-triangular `r` into `dst` (same size).
pub(crate) fn inverse_upper_into(dst: faer::MatMut<'_, f64>, r: MatRef<'_, f64>) {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::TriangularInverse) {
        return super::backend::lapack::inverse_upper_into(dst, r);
    }
    invert_upper_triangular(dst, r, Par::Seq);
}

/// Inverse of an upper-triangular matrix.
pub(crate) fn inverse_upper(r: MatRef<'_, f64>) -> Mat<f64> {
    let n = r.nrows();
    let mut inv = Mat::<f64>::zeros(n, n);
    inverse_upper_into(inv.as_mut(), r);
    inv
}

/// Exact 1-norm condition number `|R|_1 |R^-1|_1` of a non-singular
/// upper-triangular matrix (`O(k^3 / 3)`, negligible beside the
/// factorisation of a tall design). Infinite when a diagonal entry is zero.
pub(crate) fn condition_upper(r: MatRef<'_, f64>) -> f64 {
    if r.nrows() == 0 {
        return 1.0;
    }
    if (0..r.nrows()).any(|i| r[(i, i)] == 0.0) {
        return f64::INFINITY;
    }
    norm1(r) * norm1(inverse_upper(r).as_ref())
}

/// Exact 1-norm condition number of a lower-triangular matrix.
pub(crate) fn condition_lower(l: MatRef<'_, f64>) -> f64 {
    let n = l.nrows();
    if n == 0 {
        return 1.0;
    }
    if (0..n).any(|i| l[(i, i)] == 0.0) {
        return f64::INFINITY;
    }
    let mut inv = Mat::<f64>::zeros(n, n);
    invert_lower_triangular(inv.as_mut(), l, Par::Seq);
    norm1(l) * norm1(inv.as_ref())
}
