//! Singular value decomposition of a small dense matrix.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::svd::{svd, svd_scratch, ComputeSvdVectors};
use faer::{Mat, MatRef, Par};

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
    let mut s = faer::diag::Diag::<f64>::zeros(r);
    let mut u = Mat::<f64>::zeros(m, r);
    let mut v = Mat::<f64>::zeros(n, r);
    let req = svd_scratch::<f64>(
        m,
        n,
        ComputeSvdVectors::Thin,
        ComputeSvdVectors::Thin,
        Par::Seq,
        Default::default(),
    );
    let mut mem = MemBuffer::new(req);
    svd(
        a,
        s.as_mut(),
        Some(u.as_mut()),
        Some(v.as_mut()),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    )
    .map_err(|_| Error::NoConvergence {
        what: "singular value decomposition",
    })?;
    let s = (0..r).map(|i| s[i]).collect();
    Ok(Svd { u, s, v })
}

/// The singular values of `a`, non-increasing (no vectors: about a third
/// of the memory of [`thin_svd`]).
///
/// # Errors
/// [`Error::NoConvergence`] if the iteration fails.
pub(crate) fn singular_values(a: MatRef<'_, f64>) -> Result<Vec<f64>> {
    let (m, n) = (a.nrows(), a.ncols());
    let r = m.min(n);
    let mut s = faer::diag::Diag::<f64>::zeros(r);
    let req = svd_scratch::<f64>(
        m,
        n,
        ComputeSvdVectors::No,
        ComputeSvdVectors::No,
        Par::Seq,
        Default::default(),
    );
    let mut mem = MemBuffer::new(req);
    svd(
        a,
        s.as_mut(),
        None,
        None,
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    )
    .map_err(|_| Error::NoConvergence {
        what: "singular value decomposition",
    })?;
    Ok((0..r).map(|i| s[i]).collect())
}
