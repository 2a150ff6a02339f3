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
