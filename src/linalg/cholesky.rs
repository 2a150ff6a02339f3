//! Cholesky factorisation of a small symmetric matrix.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::cholesky::llt::factor::{
    cholesky_in_place, cholesky_in_place_scratch, LltRegularization,
};
use faer::reborrow::ReborrowMut;
use faer::{Mat, MatRef, Par};

/// Outcome of [`factor`].
pub(crate) enum Factor {
    /// Lower-triangular `L` with `A = L L^T` (upper part zeroed).
    Ok(Mat<f64>),
    /// The factorisation met a non-positive pivot at this index.
    Failed { pivot: usize },
}

/// Factors the symmetric positive definite `a` (only its lower triangle is read).
pub(crate) fn factor(a: MatRef<'_, f64>) -> Factor {
    let mut l = a.to_owned();
    match factor_in_place(l.as_mut()) {
        Ok(()) => Factor::Ok(l),
        Err(pivot) => Factor::Failed { pivot },
    }
}

/// Factors `a` in place (no copy): its lower triangle becomes `L`, its
/// upper part is zeroed. `Err(pivot)` at a non-positive pivot.
pub(crate) fn factor_in_place(mut l: faer::MatMut<'_, f64>) -> Result<(), usize> {
    #[cfg(feature = "lapack")]
    if super::backend::routes_to_lapack(super::backend::Routine::Cholesky) {
        return super::backend::lapack::cholesky_in_place(l);
    }
    let n = l.nrows();
    let req = cholesky_in_place_scratch::<f64>(n, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    match cholesky_in_place(
        l.rb_mut(),
        LltRegularization::default(),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    ) {
        Ok(_) => {
            for j in 0..n {
                for i in 0..j {
                    l[(i, j)] = 0.0;
                }
            }
            Ok(())
        }
        Err(faer::linalg::cholesky::llt::factor::LltError::NonPositivePivot { index }) => {
            Err(index)
        }
    }
}
