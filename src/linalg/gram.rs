//! The rank-k update that accumulates a Gram matrix block by block.

use faer::linalg::matmul::matmul;
use faer::reborrow::ReborrowMut;
use faer::{Accum, MatMut, MatRef, Par};

/// Columns per panel of [`lower_gram_add`].
const GRAM_PANEL: usize = 32;

/// `acc += z^T z` on and below the diagonal, by panels of [`GRAM_PANEL`]
/// columns: each panel is one general product of the columns from the
/// panel's first on with the panel's columns (faer's sequential kernel), so
/// only the diagonal blocks compute the part above the diagonal as well.
pub(crate) fn lower_gram_add(mut acc: MatMut<'_, f64>, z: MatRef<'_, f64>) {
    let k = z.ncols();
    let mut j0 = 0;
    while j0 < k {
        let w = GRAM_PANEL.min(k - j0);
        matmul(
            acc.rb_mut().submatrix_mut(j0, j0, k - j0, w),
            Accum::Add,
            z.subcols(j0, k - j0).transpose(),
            z.subcols(j0, w),
            1.0,
            Par::Seq,
        );
        j0 += w;
    }
}
