//! Householder QR of the tall centered design by row blocks (TSQR).
//!
//! Each group of consecutive row blocks is reduced to a `k x k` triangle by
//! Householder QR of `[R; next block]`; the groups' triangles are then
//! stacked and factored once more. `Q` is never formed. This is as stable
//! as one Householder QR of the whole matrix, and needs one block of extra
//! memory per group instead of a copy of the design.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::qr::no_pivoting::factor::{
    qr_in_place, qr_in_place_scratch, recommended_block_size,
};
use faer::{Mat, MatMut, Par};
use rayon::prelude::*;

use super::{block_groups, block_rows, GROUPS};
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;

/// Factors `a` in place (Householder, sequential) and leaves only the upper
/// triangle `R` in its top `k` rows (everything else zeroed).
pub(crate) fn qr_keep_r(mut a: MatMut<'_, f64>) {
    let (m, k) = (a.nrows(), a.ncols());
    if k == 0 || m == 0 {
        return;
    }
    let bs = recommended_block_size::<f64>(m, k);
    let mut h = Mat::<f64>::zeros(bs, m.min(k));
    let req = qr_in_place_scratch::<f64>(m, k, bs, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    qr_in_place(
        a.rb_mut(),
        h.as_mut(),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    );
    for j in 0..k {
        for i in (j + 1)..m {
            a[(i, j)] = 0.0;
        }
    }
}

use faer::reborrow::ReborrowMut;

/// Returns the upper-triangular `k x k` factor `R` with `Z = Q R`, where `Z`
/// is the centered, weighted, scaled design (plus the target as a last
/// column when `with_target`: then `R[..p, p]` is `Q^T y` and `|R[p, p]|`
/// the residual norm of the scaled problem).
pub(crate) fn tall_skinny_r(
    problem: &Problem<'_>,
    scaling: &Scaling,
    with_target: bool,
) -> Mat<f64> {
    let k = problem.cols() + usize::from(with_target);
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, GROUPS);
    let partials: Vec<Mat<f64>> = groups
        .par_iter()
        .map(|group| {
            // Top k rows: the running triangle; below: the next block.
            let mut buf = Mat::<f64>::zeros(k + b, k);
            for &(r0, r1) in group {
                let len = r1 - r0;
                fill_block(
                    problem,
                    scaling,
                    r0,
                    r1,
                    with_target,
                    buf.as_mut().subrows_mut(k, len),
                );
                qr_keep_r(buf.as_mut().subrows_mut(0, k + len));
            }
            buf.as_ref().subrows(0, k).to_owned()
        })
        .collect();
    if partials.len() == 1 {
        return partials
            .into_iter()
            .next()
            .unwrap_or_else(|| Mat::zeros(k, k));
    }
    let mut stacked = Mat::<f64>::zeros(k * partials.len(), k);
    for (g, part) in partials.iter().enumerate() {
        stacked
            .as_mut()
            .subrows_mut(g * k, k)
            .copy_from(part.as_ref());
    }
    qr_keep_r(stacked.as_mut());
    stacked.as_ref().subrows(0, k).to_owned()
}

/// Householder QR of a small dense matrix (copied): returns the thin `Q`
/// (`m x min(m, k)`) by applying the reflectors to the identity.
pub(crate) fn thin_q(a: faer::MatRef<'_, f64>) -> Mat<f64> {
    let (m, k) = (a.nrows(), a.ncols());
    let r = m.min(k);
    if r == 0 {
        return Mat::zeros(m, 0);
    }
    let mut qr = a.to_owned();
    let bs = recommended_block_size::<f64>(m, k);
    let mut h = Mat::<f64>::zeros(bs, r);
    let req = qr_in_place_scratch::<f64>(m, k, bs, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    qr_in_place(
        qr.as_mut(),
        h.as_mut(),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    );
    let mut q = Mat::<f64>::zeros(m, r);
    for j in 0..r {
        q[(j, j)] = 1.0;
    }
    let essentials = qr.as_ref().subcols(0, r);
    let req =
        faer::linalg::householder::apply_block_householder_sequence_on_the_left_in_place_scratch::<
            f64,
        >(m, bs, r);
    let mut mem = MemBuffer::new(req);
    faer::linalg::householder::apply_block_householder_sequence_on_the_left_in_place_with_conj(
        essentials,
        h.as_ref(),
        faer::Conj::No,
        q.as_mut(),
        Par::Seq,
        MemStack::new(&mut mem),
    );
    q
}
