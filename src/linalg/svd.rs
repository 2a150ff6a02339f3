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
