//! Small dense products and factorisations used by the ridge solvers and
//! the penalty path: general products, the triangle of a stacked matrix and
//! the eigendecomposition of a symmetric matrix.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::evd::{self_adjoint_evd, self_adjoint_evd_scratch, ComputeEigenvectors};
use faer::linalg::matmul::matmul;
use faer::{Accum, Mat, MatRef, Par};

use crate::error::{Error, Result};

/// The product `a b` (sequential; the callers' matrices are small).
pub(crate) fn product(a: MatRef<'_, f64>, b: MatRef<'_, f64>) -> Mat<f64> {
    let mut out = Mat::<f64>::zeros(a.nrows(), b.ncols());
    if a.ncols() > 0 {
        matmul(out.as_mut(), Accum::Replace, a, b, 1.0, Par::Seq);
    }
    out
}

/// The upper-triangular `k x k` factor `R` of a tall dense matrix `a`
/// (`m x k`, `m >= k`) by Householder QR of a copy; `Q` is not formed.
pub(crate) fn triangle(a: MatRef<'_, f64>) -> Mat<f64> {
    let (m, k) = (a.nrows(), a.ncols());
    // Pad short matrices with zero rows so the factor is always k x k.
    let mut work = Mat::<f64>::zeros(m.max(k), k);
    work.as_mut().subrows_mut(0, m).copy_from(a);
    let triangular = super::householder::reduce_to_square(work.as_mut());
    let r = work.as_ref().subrows(0, k).to_owned();
    if triangular {
        r
    } else {
        super::householder::triangle_of(r.as_ref())
    }
}

/// Eigendecomposition `A = U diag(values) U^T` of a symmetric matrix
/// (only its lower triangle is read), eigenvalues in non-decreasing order.
pub(crate) struct SymmetricEigen {
    /// Eigenvalues, non-decreasing.
    pub values: Vec<f64>,
    /// Orthonormal eigenvectors, one per column, in the order of `values`.
    pub vectors: Mat<f64>,
}

/// Computes the eigendecomposition of the symmetric `a`.
///
/// # Errors
/// [`Error::NoConvergence`] if the iteration fails.
pub(crate) fn symmetric_eigen(a: MatRef<'_, f64>) -> Result<SymmetricEigen> {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::SymmetricEigen) {
        let (values, vectors) = super::backend::lapack::symmetric_eigen(a)?;
        return Ok(SymmetricEigen { values, vectors });
    }
    let n = a.nrows();
    let mut s = faer::diag::Diag::<f64>::zeros(n);
    let mut u = Mat::<f64>::zeros(n, n);
    let req =
        self_adjoint_evd_scratch::<f64>(n, ComputeEigenvectors::Yes, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    self_adjoint_evd(
        a,
        s.as_mut(),
        Some(u.as_mut()),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    )
    .map_err(|_| Error::NoConvergence {
        what: "symmetric eigendecomposition",
    })?;
    let values = (0..n).map(|i| s[i]).collect();
    Ok(SymmetricEigen { values, vectors: u })
}
