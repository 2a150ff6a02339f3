//! The linear-algebra seam: every dense factorisation and product of the
//! crate goes through this module, and only this module names the backend
//! (faer; the passes of [`crate::passes`] use its matrix type and block
//! products too). A LAPACK backend can replace these functions behind a cargo
//! feature without touching any solver.
//!
//! Pure kernels: nothing here sees a `Problem`, a `Scaling` or an observer
//! (the passes over a problem's rows live in [`crate::passes`] and call
//! these). It offers:
//! - [`qr`]: the structured Householder QR of a triangle stacked on a block
//!   of rows (the step of TSQR and of merging two triangles);
//! - [`gram`]: the rank-k update of a Gram matrix by one block;
//! - [`cholesky`], [`svd`], [`triangular`], [`householder`]: small dense
//!   factorisations;
//! - [`dense`], [`products`]: small products, congruences, symmetric eigen;
//! - [`extended`]: double-double sums and products;
//! - [`kernels`]: run-time dispatched SIMD loops;
//! - the fixed row-block partition ([`block_groups`], [`block_rows`]) and
//!   the fixed fold tree ([`tree_reduce`]) every pass uses.

pub(crate) mod backend;
pub(crate) mod cholesky;
pub(crate) mod dense;
pub(crate) mod extended;
pub(crate) mod gram;
pub(crate) mod householder;
pub(crate) mod kernels;
pub(crate) mod products;
pub(crate) mod qr;
pub(crate) mod svd;
pub(crate) mod triangular;

use faer::MatRef;
use ndarray::ArrayView2;

/// Views an ndarray matrix as a faer matrix without copying, whatever its
/// strides (row-major, column-major, sliced, transposed, negative strides).
#[allow(dead_code)]
pub(crate) fn as_faer<'a>(x: &ArrayView2<'a, f64>) -> MatRef<'a, f64> {
    let (n, p) = x.dim();
    let strides = x.strides();
    // SAFETY: ndarray guarantees that `ptr + i*rs + j*cs` is a valid element
    // for every i < n, j < p of this view, and the view borrows the data for
    // 'a; faer accepts arbitrary (also negative) strides.
    unsafe { MatRef::from_raw_parts(x.as_ptr(), n, p, strides[0], strides[1]) }
}

/// Views an owned ndarray matrix as a mutable faer matrix without copying.
pub(crate) fn as_faer_mut(x: &mut ndarray::Array2<f64>) -> faer::MatMut<'_, f64> {
    let (n, p) = x.dim();
    let (rs, cs) = (x.strides()[0], x.strides()[1]);
    // SAFETY: the array owns `n x p` elements at `ptr + i*rs + j*cs`, and
    // the mutable borrow of `x` makes the view exclusive for its lifetime.
    unsafe { faer::MatMut::from_raw_parts_mut(x.as_mut_ptr(), n, p, rs, cs) }
}

/// Bytes of one block of rows: the crate's one block size. Every pass over
/// rows (the validation pass, the Gram, QR, residual, leverage and
/// leave-one-out passes, the gradient passes' partition and mini-batch
/// chunks, the column blocks of the wide-design products) cuts its rows, of
/// `k` numbers each, into blocks of [`block_rows`]`(k)` rows, so that it stays in a core's
/// second-level cache and the memory of a pass does not grow with the
/// width of the design faster than its own `k x k` results.
pub(crate) const BLOCK_BYTES: usize = 1 << 19;

/// Fewest rows in a block: a block of a wide design (more than 256
/// columns) exceeds [`BLOCK_BYTES`] and holds this many rows, so that the
/// QR and Gram passes, which sweep a `k x k` triangle or matrix once per
/// block, amortise that sweep over enough rows. (Those passes run only on
/// designs with at least as many rows as columns, so a block stays below
/// the `k x k` results it is folded into.)
const MIN_BLOCK_ROWS: usize = 256;

/// Most rows in a block (narrow designs).
const MAX_BLOCK_ROWS: usize = 4096;

/// Rows per block of `k` numbers per row: [`BLOCK_BYTES`] of block, within
/// `[256, 4096]` rows.
pub(crate) fn block_rows(k: usize) -> usize {
    rows_for(BLOCK_BYTES, k)
}

/// Rows of `k` numbers in `bytes` of block, within `[256, 4096]` rows.
pub(crate) fn rows_for(bytes: usize, k: usize) -> usize {
    (bytes / (8 * k.max(1))).clamp(MIN_BLOCK_ROWS, MAX_BLOCK_ROWS)
}

/// Groups of a pass in which every group holds a `k x k` accumulator: at
/// most one group per `8 k` rows (and at most [`GROUPS`]), so that the
/// accumulators alive at once (about `threads * (1 + log2 groups)` of them,
/// see [`tree_reduce`]) never outweigh the design, and a design with fewer
/// than `16 k` rows, or fewer than [`SERIAL_VALUES`] values, is reduced by
/// one group.
pub(crate) fn accumulator_groups(n: usize, k: usize) -> usize {
    if n.saturating_mul(k) < SERIAL_VALUES {
        return 1;
    }
    (n / (8 * k.max(1))).clamp(1, GROUPS)
}

/// Values (rows times numbers per row) below which a pass runs on the
/// calling thread as one group: handing work to the thread pool costs
/// microseconds per task, as much as reducing tens of thousands of values,
/// and a caller feeding a fit state many small blocks (a query engine's
/// batches) would pay it on every block.
pub(crate) const SERIAL_VALUES: usize = 1 << 18;

/// Splits `0..n` into consecutive ranges of `block` rows, grouped into at
/// most `max_groups` groups of consecutive blocks. The grouping depends on
/// `n` and `block` only, never on the thread count, so reductions over
/// groups are deterministic.
pub(crate) fn block_groups(n: usize, block: usize, max_groups: usize) -> Vec<Vec<(usize, usize)>> {
    let blocks: Vec<(usize, usize)> = (0..n.div_ceil(block))
        .map(|b| (b * block, ((b + 1) * block).min(n)))
        .collect();
    let groups = blocks.len().clamp(1, max_groups.max(1));
    let per = blocks.len().div_ceil(groups).max(1);
    blocks.chunks(per).map(|c| c.to_vec()).collect()
}

/// Number of groups used by the parallel passes (fixed, not the thread count).
pub(crate) const GROUPS: usize = 64;

/// Computes one partial result per group (`leaf`) and folds them (`merge`)
/// in a fixed binary tree, in parallel. The tree's shape depends on the
/// number of groups only, so the result does not depend on the thread
/// count; and since each level of the tree waits for at most one finished
/// half, only about `threads * log2(groups)` partial results are alive at
/// once (not one per group). `None` for no groups.
pub(crate) fn tree_reduce<T, L, M>(groups: &[Vec<(usize, usize)>], leaf: &L, merge: &M) -> Option<T>
where
    T: Send,
    L: Fn(&[(usize, usize)]) -> T + Sync,
    M: Fn(T, T) -> T + Sync,
{
    match groups.len() {
        0 => None,
        1 => Some(leaf(&groups[0])),
        len => {
            let (left, right) = groups.split_at(len / 2);
            let (a, b) = rayon::join(
                || tree_reduce(left, leaf, merge),
                || tree_reduce(right, leaf, merge),
            );
            match (a, b) {
                (Some(a), Some(b)) => Some(merge(a, b)),
                (a, None) => a,
                (None, b) => b,
            }
        }
    }
}
