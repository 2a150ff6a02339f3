//! Singular value decomposition of a small dense matrix.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::svd::{svd, svd_scratch, ComputeSvdVectors};
use faer::{Mat, MatMut, MatRef, Par};

use crate::error::{Error, Result};

/// Thin SVD `A = U diag(s) V^T` with `s` non-increasing.
pub(crate) struct Svd {
    pub u: Mat<f64>,
    pub s: Vec<f64>,
    pub v: Mat<f64>,
}

/// Computes the thin SVD of `a`.
///
/// # Errors
/// [`Error::NoConvergence`] if the iteration fails.
pub(crate) fn thin_svd(a: MatRef<'_, f64>) -> Result<Svd> {
    let (m, n) = (a.nrows(), a.ncols());
    let r = m.min(n);
    let mut u = Mat::<f64>::zeros(m, r);
    let mut v = Mat::<f64>::zeros(n, r);
    let s = run(a, Some((u.as_mut(), v.as_mut())))?;
    Ok(Svd { u, s, v })
}

/// The singular values of `a`, non-increasing (no vectors: about a third
/// of the memory of [`thin_svd`]).
///
/// # Errors
/// [`Error::NoConvergence`] if the iteration fails.
pub(crate) fn singular_values(a: MatRef<'_, f64>) -> Result<Vec<f64>> {
    run(a, None)
}

/// faer's SVD of `a`, writing the thin vectors when asked; returns the
/// singular values.
fn run(
    a: MatRef<'_, f64>,
    vectors: Option<(MatMut<'_, f64>, MatMut<'_, f64>)>,
) -> Result<Vec<f64>> {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::Svd) {
        return super::backend::lapack::svd(a, vectors);
    }
    let (m, n) = (a.nrows(), a.ncols());
    let r = m.min(n);
    let mut s = faer::diag::Diag::<f64>::zeros(r);
    let compute = if vectors.is_some() {
        ComputeSvdVectors::Thin
    } else {
        ComputeSvdVectors::No
    };
    let req = svd_scratch::<f64>(m, n, compute, compute, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    let (u, v) = match vectors {
        Some((u, v)) => (Some(u), Some(v)),
        None => (None, None),
    };
    svd(
        a,
        s.as_mut(),
        u,
        v,
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    )
    .map_err(|_| Error::NoConvergence {
        what: "singular value decomposition",
    })?;
    Ok((0..r).map(|i| s[i]).collect())
}

/// The 2-norm condition number `s_max / s_min` from singular values in
/// non-increasing order, over those above `cutoff * s_max` (the retained
/// ones; a zero is never retained); 1 when there are none.
pub(crate) fn condition_from_values(s: &[f64], cutoff: f64) -> f64 {
    let smax = s.first().copied().unwrap_or(0.0);
    if smax <= 0.0 || !smax.is_finite() {
        return 1.0;
    }
    let smin = s
        .iter()
        .copied()
        .take_while(|&v| v > cutoff * smax && v > 0.0)
        .last()
        .unwrap_or(smax);
    smax / smin
}

/// The 2-norm condition number of `a` (a `p x p` triangle of the design,
/// with the design's singular values) over the singular values above
/// `cutoff` times the largest: see [`crate::FitReport::condition`].
///
/// # Errors
/// [`Error::NoConvergence`] if the SVD iteration fails.
pub(crate) fn condition(a: MatRef<'_, f64>, cutoff: f64) -> Result<f64> {
    if a.ncols() == 0 {
        return Ok(1.0);
    }
    Ok(condition_from_values(&singular_values(a)?, cutoff))
}

/// The same number from the design's Gram matrix `g = Z^T Z` (`p x p`,
/// symmetric positive semi-definite, so its singular values are its
/// eigenvalues, the squares of the design's singular values):
/// `sqrt(l_max / l_min)` over the eigenvalues above `max(cutoff^2, 2 p eps)`
/// times the largest (below `2 p eps` an eigenvalue of a rounded Gram
/// matrix is noise).
///
/// # Errors
/// [`Error::NoConvergence`] if the SVD iteration fails.
pub(crate) fn condition_from_gram(g: MatRef<'_, f64>, cutoff: f64) -> Result<f64> {
    let p = g.ncols();
    if p == 0 {
        return Ok(1.0);
    }
    let l = singular_values(g)?;
    let floor = (cutoff * cutoff).max(2.0 * p as f64 * f64::EPSILON);
    Ok(condition_from_values(&l, floor).sqrt())
}

/// `gamma = V_r S_r^-1 U_r^T rhs` over the first `rank` singular triplets
/// of `dec`: the minimum-norm solution in the scaled coordinates.
pub(crate) fn truncated_solve(dec: &Svd, rank: usize, rhs: &[f64]) -> Vec<f64> {
    let mut gamma = vec![0.0; dec.v.nrows()];
    for i in 0..rank {
        let coef: f64 = rhs
            .iter()
            .enumerate()
            .map(|(k, r)| dec.u[(k, i)] * r)
            .sum::<f64>()
            / dec.s[i];
        for (c, g) in gamma.iter_mut().enumerate() {
            *g += dec.v[(c, i)] * coef;
        }
    }
    gamma
}

/// `rhs - a x`, entry by entry (the residuals of a truncated solve in the
/// rows of a triangle).
pub(crate) fn residuals(a: MatRef<'_, f64>, rhs: &[f64], x: &[f64]) -> Vec<f64> {
    rhs.iter()
        .enumerate()
        .map(|(i, &r)| r - (0..a.ncols()).map(|c| a[(i, c)] * x[c]).sum::<f64>())
        .collect()
}

/// From the column scale exponents `e_c` of the live columns: `e_max =
/// max(-e_c)` and `unit_c = -e_c - e_max`, so that `gamma_c 2^unit_c` is a
/// coefficient in the caller's units divided by the common power of two
/// `2^(e_y + e_max)` (in range, and the same factor for every column, so a
/// projection in these units is one in the caller's).
pub(crate) fn common_units(scale_exps: &[i32]) -> (i32, Vec<i32>) {
    let e_max = scale_exps.iter().map(|&e| -e).max().unwrap_or(0);
    (e_max, scale_exps.iter().map(|&e| -e - e_max).collect())
}

/// Makes `b` the minimum-norm member of `b + null space`, where the null
/// space of the scaled problem is spanned by columns `rank..` of `v`; in
/// the units of `b` a null vector `n` becomes `n_c 2^unit_c`.
pub(crate) fn project_off_null_space(b: &mut [f64], v: &Mat<f64>, rank: usize, unit: &[i32]) {
    let q = b.len();
    let k = v.ncols() - rank;
    let mut a = Mat::<f64>::from_fn(q, k, |c, i| crate::scaled::ldexp(v[(c, rank + i)], unit[c]));
    // Column scaling does not change the range; it keeps the QR well scaled.
    for i in 0..k {
        let norm = (0..q).map(|c| a[(c, i)] * a[(c, i)]).sum::<f64>().sqrt();
        if norm > 0.0 {
            for c in 0..q {
                a[(c, i)] /= norm;
            }
        }
    }
    let qm = super::qr::thin_q(a.as_ref());
    for i in 0..qm.ncols() {
        let dot: f64 = (0..q).map(|c| qm[(c, i)] * b[c]).sum();
        for c in 0..q {
            b[c] -= qm[(c, i)] * dot;
        }
    }
}
