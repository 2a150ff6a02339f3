//! Householder QR of the tall centered design by row blocks (TSQR).
//!
//! Each group of consecutive row blocks keeps a running `k x k` triangle
//! `R`; every block `B` of transformed rows is folded into it by a
//! Householder QR of the stack `[R; B]` that knows the stack's structure
//! (the reflector of column `j` touches row `j` of `R` and the rows of `B`
//! only, so no arithmetic is spent on the zeros of `R`). The groups'
//! triangles are then folded together in a fixed binary tree, in parallel
//! (the same tree for any thread count). `Q` is never formed. This is as
//! stable as one Householder QR of the whole matrix, and needs one
//! block and one triangle of extra memory per thread and tree level instead
//! of a copy of the design.
//!
//! The block is stored row by row (the layout a row-major design is read in
//! cheaply). Columns are factored in panels of [`PANEL`] = 8 columns, which
//! are one cache line of a row: the reflectors of a panel are built with two
//! vectorised passes over the block per column (the second also computes
//! the next column's norm, the first also the products the panel's
//! block-reflector factor `T` needs), and the rest of the block is updated
//! with two matrix products per panel (faer's sequential kernel).

use faer::linalg::matmul::matmul;
use faer::reborrow::{Reborrow, ReborrowMut};
use faer::{Accum, Mat, MatMut, MatRef, Par};

use super::kernels;
use crate::scaled::{exponent, ldexp};

/// Columns per panel of the stacked QR (one 64-byte cache line of a row).
pub(crate) const PANEL: usize = 8;

/// Reflectors of columns whose size is below `2^TINY_EXP` are formed from
/// the column rescaled by a power of two (see [`stacked_qr`]).
const TINY_EXP: i32 = -900;

/// Groups of the TSQR pass (fixed, not the thread count: their triangles
/// are folded in order, so the result does not depend on the threads).
pub(crate) const QR_GROUPS: usize = 16;

/// Row stride of a block with `k` columns: `k` rounded up to whole panels.
pub(crate) fn row_stride(k: usize) -> usize {
    k.div_ceil(PANEL).max(1) * PANEL
}

/// Rows per block of the TSQR pass: twice [`super::BLOCK_BYTES`] of block
/// (within the same bounds as [`super::block_rows`]), about the core's
/// second-level cache. Measured at 1,000,000 x 100 (blocks of 1,260 rows):
/// the pass is 6% faster than with blocks of half the size (fewer panels
/// per row, each panel's block reflector applied to longer columns) and
/// 17% faster than with three-eighths; three times [`super::BLOCK_BYTES`]
/// gains nothing more.
pub(crate) fn qr_block_rows(k: usize) -> usize {
    super::rows_for(2 * super::BLOCK_BYTES, row_stride(k))
}

/// Workspace of [`stacked_qr`], reused across blocks.
pub(crate) struct StackedQrWork {
    w: Mat<f64>,
    /// The current panel, one 64-byte-aligned line of [`PANEL`] values per
    /// row (plus room to align the start).
    panel: Vec<f64>,
    /// A column of zeros for the spare lanes of a column-major block's last
    /// panel.
    zeros: Vec<f64>,
}

impl StackedQrWork {
    pub fn new(k: usize) -> Self {
        StackedQrWork {
            w: Mat::zeros(PANEL, k),
            panel: Vec::new(),
            zeros: Vec::new(),
        }
    }
}

/// A row-major `rows x cols` view of `slice` with row stride `ld`.
/// (Built as the transpose of a column-major view: faer 0.24.4's
/// `from_row_major_slice_with_stride_mut` swaps the strides.)
pub(crate) fn row_major_mut(
    slice: &mut [f64],
    rows: usize,
    cols: usize,
    ld: usize,
) -> MatMut<'_, f64> {
    let used = if rows == 0 { 0 } else { (rows - 1) * ld + cols };
    MatMut::from_column_major_slice_with_stride_mut(&mut slice[..used], cols, rows, ld)
        .transpose_mut()
}

/// A row-major `rows x cols` view of `slice` with row stride `ld`.
pub(crate) fn row_major_ref(slice: &[f64], rows: usize, cols: usize, ld: usize) -> MatRef<'_, f64> {
    let used = if rows == 0 { 0 } else { (rows - 1) * ld + cols };
    MatRef::from_column_major_slice_with_stride(&slice[..used], cols, rows, ld).transpose()
}

/// `sqrt(sum v^2)` over column `j` of a row-major block, safe from
/// underflow of the squares.
fn column_norm(b: &[f64], ld: usize, len: usize, j: usize, sum_sq: f64) -> f64 {
    // Below this the squares may have lost digits to underflow.
    const TINY: f64 = 1e-280;
    if sum_sq >= TINY || sum_sq == 0.0 && (0..len).all(|i| b[i * ld + j] == 0.0) {
        return sum_sq.sqrt();
    }
    let big = (0..len).fold(0.0f64, |m, i| m.max(b[i * ld + j].abs()));
    if big == 0.0 {
        return 0.0;
    }
    let s: f64 = (0..len).map(|i| (b[i * ld + j] / big).powi(2)).sum();
    big * s.sqrt()
}

/// Sum of squares of column `j` of a row-major block.
#[inline(always)]
fn column_sum_sq(b: &[f64], ld: usize, len: usize, j: usize) -> f64 {
    let mut acc = [0.0f64; 4];
    let mut i = 0;
    while i + 4 <= len {
        for (l, a) in acc.iter_mut().enumerate() {
            let v = b[(i + l) * ld + j];
            *a += v * v;
        }
        i += 4;
    }
    while i < len {
        let v = b[i * ld + j];
        acc[0] += v * v;
        i += 1;
    }
    (acc[0] + acc[2]) + (acc[1] + acc[3])
}

/// Householder QR of the stack `[R; B]`, in place: `R` (`k x k`, upper
/// triangular, zeros below the diagonal) becomes the triangular factor of
/// the stack; `B` (`len x k`, stored row by row with row stride `ld`, a
/// multiple of [`PANEL`] with zero padding columns) is overwritten by the
/// reflectors.
pub(crate) fn stacked_qr(
    r: MatMut<'_, f64>,
    b: &mut [f64],
    ld: usize,
    len: usize,
    work: &mut StackedQrWork,
) {
    stacked_qr_impl(r, b, Layout::Rows(ld), len, work);
}

/// [`stacked_qr`] for a block stored column by column: `B` is `len x k`
/// with column stride `ld >= len` (the cheap layout to fill from a
/// column-major design).
pub(crate) fn stacked_qr_by_columns(
    r: MatMut<'_, f64>,
    b: &mut [f64],
    ld: usize,
    len: usize,
    work: &mut StackedQrWork,
) {
    stacked_qr_impl(r, b, Layout::Cols(ld), len, work);
}

/// How a block of [`stacked_qr`] is stored.
#[derive(Clone, Copy)]
enum Layout {
    /// Row by row with this row stride (a multiple of [`PANEL`], zero padding).
    Rows(usize),
    /// Column by column with this column stride.
    Cols(usize),
}

fn stacked_qr_impl(
    mut r: MatMut<'_, f64>,
    b: &mut [f64],
    layout: Layout,
    len: usize,
    work: &mut StackedQrWork,
) {
    let k = r.ncols();
    if len == 0 || k == 0 {
        return;
    }
    let used = match layout {
        Layout::Rows(ld) => len * ld,
        Layout::Cols(ld) => (k - 1) * ld + len,
    };
    let b = &mut b[..used];
    let mut j0 = 0;
    while j0 < k {
        let jn = PANEL.min(k - j0);
        // The panel's columns, gathered into aligned lines: the passes below
        // then read one cache line per row (from the first-level cache for
        // blocks of up to about 600 rows).
        let mut panel = std::mem::take(&mut work.panel);
        if panel.len() < len * PANEL + PANEL {
            panel.resize(len * PANEL + PANEL, 0.0);
        }
        let start = panel.as_ptr().align_offset(64).min(PANEL);
        let pan = &mut panel[start..start + len * PANEL];
        match layout {
            // One 64-byte move per row where the processor has one.
            Layout::Rows(ld) => kernels::dispatch(
                #[inline(always)]
                || {
                    for (line, row) in pan.chunks_exact_mut(PANEL).zip(b.chunks_exact(ld)) {
                        line.copy_from_slice(&row[j0..j0 + PANEL]);
                    }
                },
            ),
            Layout::Cols(ld) => {
                // Row by row, each line written whole (lanes past the last
                // column read a column of zeros).
                if work.zeros.len() < len {
                    work.zeros.resize(len, 0.0);
                }
                let zeros = &work.zeros[..len];
                let cols: [&[f64]; PANEL] = std::array::from_fn(|l| {
                    if l < jn {
                        &b[(j0 + l) * ld..(j0 + l) * ld + len]
                    } else {
                        zeros
                    }
                });
                kernels::dispatch(
                    #[inline(always)]
                    || {
                        for (i, line) in pan.chunks_exact_mut(PANEL).enumerate() {
                            for l in 0..PANEL {
                                line[l] = cols[l][i];
                            }
                        }
                    },
                );
            }
        }
        let mut tau = [0.0f64; PANEL];
        // s[l][c] = v_l . v_c (the reflectors' parts in B), l < c.
        let mut s = [[0.0f64; PANEL]; PANEL];
        let mut sum_sq = kernels::dispatch(
            #[inline(always)]
            || column_sum_sq(pan, PANEL, len, 0),
        );
        for jj in 0..jn {
            let j = j0 + jj;
            let alpha = r[(j, j)];
            let xnorm = column_norm(pan, PANEL, len, jj, sum_sq);
            if xnorm == 0.0 {
                // Nothing below the diagonal: the reflector is the identity.
                if jj + 1 < jn {
                    sum_sq = kernels::dispatch(
                        #[inline(always)]
                        || column_sum_sq(pan, PANEL, len, jj + 1),
                    );
                }
                continue;
            }
            // A column whose remaining norm is near the bottom of the range
            // (the rounding noise of a stack with fewer rows than columns
            // shrinks by about eps per round of reflections): bring it and
            // alpha near 1 by an exact power of two first, so that
            // 1 / (alpha - beta) cannot overflow (as LAPACK's reflector
            // generator rescales).
            let e = exponent(alpha.abs().max(xnorm));
            let (alpha_s, xnorm_s) = if e < TINY_EXP {
                for line in pan.chunks_exact_mut(PANEL) {
                    line[jj] = ldexp(line[jj], -e);
                }
                (ldexp(alpha, -e), ldexp(xnorm, -e))
            } else {
                (alpha, xnorm)
            };
            let beta = -alpha_s.hypot(xnorm_s).copysign(alpha_s);
            let t = (beta - alpha_s) / beta;
            let scal = 1.0 / (alpha_s - beta);
            r[(j, j)] = if e < TINY_EXP { ldexp(beta, e) } else { beta };
            tau[jj] = t;
            // Pass 1: v = B[:, j] * scal; d[l] = v . B[:, j0 + l].
            let d = kernels::dispatch(
                #[inline(always)]
                || panel_scale_dot(pan, PANEL, len, 0, jj, scal),
            );
            s[..jj]
                .iter_mut()
                .zip(&d)
                .for_each(|(row, &dl)| row[jj] = dl);
            let mut tw = [0.0f64; PANEL];
            for l in (jj + 1)..jn {
                let w = r[(j, j0 + l)] + d[l];
                r[(j, j0 + l)] -= t * w;
                tw[l] = t * w;
            }
            if jj + 1 < jn {
                // Pass 2: B[:, j0 + l] -= tw[l] v, and the next column's norm.
                sum_sq = kernels::dispatch(
                    #[inline(always)]
                    || panel_update(pan, PANEL, len, 0, jj, &tw),
                );
            }
        }
        if j0 + jn < k {
            let mut whole = match layout {
                Layout::Rows(ld) => row_major_mut(b, len, ld, ld),
                Layout::Cols(ld) => MatMut::from_column_major_slice_with_stride_mut(b, len, k, ld),
            };
            let trail = whole.rb_mut().subcols_mut(j0 + jn, k - (j0 + jn));
            apply_panel(r.rb_mut(), pan, trail, len, j0, jn, &tau, &s, &mut work.w);
        }
        work.panel = panel;
        j0 += jn;
    }
}

/// Pass 1 of a panel column: scales column `j0 + jj` into the reflector `v`
/// and returns `v . B[:, j0 + l]` for every lane `l` other than `jj` (lane `jj`
/// holds `v` against the column before scaling; it is not read).
#[inline(always)]
fn panel_scale_dot(
    b: &mut [f64],
    ld: usize,
    len: usize,
    j0: usize,
    jj: usize,
    scal: f64,
) -> [f64; PANEL] {
    // Two rows at a time into two sets of lane accumulators.
    let mut d0 = [0.0f64; PANEL];
    let mut d1 = [0.0f64; PANEL];
    let b = &mut b[..len * ld];
    let mut pairs = b.chunks_exact_mut(2 * ld);
    for pair in &mut pairs {
        let (r0, r1) = pair.split_at_mut(ld);
        let s0: &mut [f64; PANEL] = match (&mut r0[j0..j0 + PANEL]).try_into() {
            Ok(seg) => seg,
            Err(_) => return [0.0; PANEL],
        };
        let s1: &mut [f64; PANEL] = match (&mut r1[j0..j0 + PANEL]).try_into() {
            Ok(seg) => seg,
            Err(_) => return [0.0; PANEL],
        };
        // Each line is read whole before lane `jj` is stored (loading a line
        // right after storing one of its lanes would stall on every row: a
        // wide load cannot be forwarded from a narrow store). Lane `jj` of
        // `d` then holds `v . x_jj` instead of `v . v`, which no caller reads.
        let v0 = s0[jj] * scal;
        let v1 = s1[jj] * scal;
        let (a0, a1) = (*s0, *s1);
        for l in 0..PANEL {
            d0[l] = v0.mul_add(a0[l], d0[l]);
            d1[l] = v1.mul_add(a1[l], d1[l]);
        }
        s0[jj] = v0;
        s1[jj] = v1;
    }
    let rest = pairs.into_remainder();
    if rest.len() >= j0 + PANEL {
        let seg = &mut rest[j0..j0 + PANEL];
        let v = seg[jj] * scal;
        for l in 0..PANEL {
            d0[l] = v.mul_add(seg[l], d0[l]);
        }
        seg[jj] = v;
    }
    let mut out = [0.0f64; PANEL];
    for l in 0..PANEL {
        out[l] = d0[l] + d1[l];
    }
    out
}

/// Pass 2 of a panel column: `B[:, j0 + l] -= tw[l] v` with `v` in column
/// `j0 + jj`; returns the sum of squares of the updated column `j0 + jj + 1`.
#[inline(always)]
fn panel_update(
    b: &mut [f64],
    ld: usize,
    len: usize,
    j0: usize,
    jj: usize,
    tw: &[f64; PANEL],
) -> f64 {
    let next = (jj + 1).min(PANEL - 1);
    let (mut q0, mut q1) = ([0.0f64; PANEL], [0.0f64; PANEL]);
    let b = &mut b[..len * ld];
    let mut pairs = b.chunks_exact_mut(2 * ld);
    for pair in &mut pairs {
        let (r0, r1) = pair.split_at_mut(ld);
        let s0: &mut [f64; PANEL] = match (&mut r0[j0..j0 + PANEL]).try_into() {
            Ok(seg) => seg,
            Err(_) => return 0.0,
        };
        let s1: &mut [f64; PANEL] = match (&mut r1[j0..j0 + PANEL]).try_into() {
            Ok(seg) => seg,
            Err(_) => return 0.0,
        };
        let v0 = s0[jj];
        let v1 = s1[jj];
        // The squares of every lane are summed (lane `next` is the chain
        // wanted; the others cost nothing in a vector), so that the
        // updated lines are not loaded a second time.
        for l in 0..PANEL {
            let u0 = (-tw[l]).mul_add(v0, s0[l]);
            let u1 = (-tw[l]).mul_add(v1, s1[l]);
            s0[l] = u0;
            s1[l] = u1;
            q0[l] = u0.mul_add(u0, q0[l]);
            q1[l] = u1.mul_add(u1, q1[l]);
        }
    }
    let (mut a0, a1) = (q0[next], q1[next]);
    let rest = pairs.into_remainder();
    if rest.len() >= j0 + PANEL {
        let seg = &mut rest[j0..j0 + PANEL];
        let v = seg[jj];
        for l in 0..PANEL {
            seg[l] = (-tw[l]).mul_add(v, seg[l]);
        }
        a0 = seg[next].mul_add(seg[next], a0);
    }
    a0 + a1
}

/// Applies the panel's block reflector `I - V T V^T` (transposed) to the
/// columns right of the panel, in `R` and in `B`.
#[allow(clippy::too_many_arguments, clippy::needless_range_loop)]
fn apply_panel(
    mut r: MatMut<'_, f64>,
    pan: &[f64],
    mut trail: MatMut<'_, f64>,
    len: usize,
    j0: usize,
    jn: usize,
    tau: &[f64; PANEL],
    s: &[[f64; PANEL]; PANEL],
    w_store: &mut Mat<f64>,
) {
    let k = r.ncols();
    let c0 = j0 + jn;
    let nt = k - c0;
    // T (upper triangular): T[i][i] = tau_i,
    // T[0..i, i] = -tau_i T[0..i, 0..i] (V^T v_i).
    let mut tm = [[0.0f64; PANEL]; PANEL];
    for i in 0..jn {
        tm[i][i] = tau[i];
        let mut col = [0.0f64; PANEL];
        for (l, c) in col.iter_mut().enumerate().take(i) {
            *c = -tau[i] * s[l][i];
        }
        for row in 0..i {
            let mut acc = 0.0;
            for l in row..i {
                acc += tm[row][l] * col[l];
            }
            tm[row][i] = acc;
        }
    }
    let v = row_major_ref(pan, len, jn, PANEL);
    // W = R[panel rows, trail] + V^T B[:, trail]
    let mut w = w_store.as_mut().submatrix_mut(0, 0, jn, nt);
    w.copy_from(r.rb().submatrix(j0, c0, jn, nt));
    matmul(
        w.rb_mut(),
        Accum::Add,
        v.transpose(),
        trail.rb(),
        1.0,
        Par::Seq,
    );
    // W = T^T W and R[panel rows, trail] -= W, a column at a time:
    // `(T^T w)_i = sum_l T[l][i] w_l` over `l <= i` in increasing `l` (the
    // rows of `T` are zero left of the diagonal, so a whole row is added at
    // each `l`: the same sums in the same order as term by term, as vectors).
    for c in 0..nt {
        let mut wc = [0.0f64; PANEL];
        match w.rb().col(c).try_as_col_major() {
            Some(col) => wc[..jn].copy_from_slice(&col.as_slice()[..jn]),
            None => {
                for (i, x) in wc.iter_mut().enumerate().take(jn) {
                    *x = w[(i, c)];
                }
            }
        }
        let mut out = [0.0f64; PANEL];
        for (l, &wl) in wc.iter().enumerate().take(jn) {
            for i in 0..PANEL {
                out[i] += tm[l][i] * wl;
            }
        }
        match w.rb_mut().col_mut(c).try_as_col_major_mut() {
            Some(col) => col.as_slice_mut()[..jn].copy_from_slice(&out[..jn]),
            None => {
                for (i, &x) in out.iter().enumerate().take(jn) {
                    w[(i, c)] = x;
                }
            }
        }
        match r
            .rb_mut()
            .col_mut(c0 + c)
            .subrows_mut(j0, jn)
            .try_as_col_major_mut()
        {
            Some(col) => {
                for (ri, &x) in col.as_slice_mut().iter_mut().zip(&out) {
                    *ri -= x;
                }
            }
            None => {
                for (i, &x) in out.iter().enumerate().take(jn) {
                    r[(j0 + i, c0 + c)] -= x;
                }
            }
        }
    }
    // B[:, trail] -= V W.
    matmul(trail.rb_mut(), Accum::Add, v, w.rb(), -1.0, Par::Seq);
}

/// Thin `Q` of a small dense matrix (see [`super::householder::thin_q`]).
pub(crate) fn thin_q(a: faer::MatRef<'_, f64>) -> Mat<f64> {
    super::householder::thin_q(a)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// The triangle of the row-major `n x k` matrix `z`, folded by blocks of
    /// `block` rows stored row by row.
    fn fold_row_blocks(z: &[f64], n: usize, k: usize, block: usize) -> Mat<f64> {
        let ld = row_stride(k);
        let mut r = Mat::<f64>::zeros(k, k);
        let mut work = StackedQrWork::new(k);
        let mut r0 = 0;
        while r0 < n {
            let len = block.min(n - r0);
            let mut buf = vec![0.0; len * ld];
            for i in 0..len {
                buf[i * ld..i * ld + k].copy_from_slice(&z[(r0 + i) * k..(r0 + i + 1) * k]);
            }
            stacked_qr(r.as_mut(), &mut buf, ld, len, &mut work);
            r0 += len;
        }
        r
    }

    /// Wide blocks (few rows, many columns) fold correctly too.
    #[test]
    fn wide_blocks_fold_correctly() {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for &(n, k, block) in &[
            (1700usize, 1600usize, 32usize),
            (1700, 1600, 64),
            (1700, 1100, 32),
            (1300, 1200, 256),
        ] {
            let z: Vec<f64> = (0..n * k).map(|_| rng.random_range(-1.0..1.0)).collect();
            let r = fold_row_blocks(&z, n, k, block);
            let bad = (0..k)
                .flat_map(|i| (0..k).map(move |j| (i, j)))
                .find(|&(i, j)| !r[(i, j)].is_finite());
            assert!(
                bad.is_none(),
                "{n}x{k} block {block}: non-finite R at {bad:?}"
            );
            for &(i, j) in &[(0usize, 0usize), (5, 900), (k - 1, k - 1), (k / 2, k - 3)] {
                let rtr: f64 = (0..k).map(|l| r[(l, i)] * r[(l, j)]).sum();
                let ztz: f64 = (0..n).map(|l| z[l * k + i] * z[l * k + j]).sum();
                assert!(
                    (rtr - ztz).abs() <= 1e-9 * n as f64,
                    "{n}x{k} block {block} ({i},{j}): {rtr} vs {ztz}"
                );
            }
        }
    }

    /// Stacks of random blocks: `R^T R` must equal `Z^T Z` (an identity of
    /// any QR, `Z = Q R` with orthogonal `Q`), and `|R|` must match
    /// nalgebra's Householder QR of the whole matrix row by row.
    #[test]
    fn stacked_qr_matches_gram_and_nalgebra() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        for &(n, k, block) in &[
            (50usize, 5usize, 16usize),
            (20, 9, 20),
            (300, 21, 300),
            (300, 21, 64),
            (90, 17, 200),
            (40, 9, 3),
        ] {
            let z: Vec<f64> = (0..n * k).map(|_| rng.random_range(-1.0..1.0)).collect();
            let r = fold_row_blocks(&z, n, k, block);
            // The same stack stored column by column gives the same factor.
            let mut work = StackedQrWork::new(k);
            let mut rc = Mat::<f64>::zeros(k, k);
            let mut r0 = 0;
            while r0 < n {
                let len = block.min(n - r0);
                let mut buf = vec![0.0; k * len];
                for i in 0..len {
                    for j in 0..k {
                        buf[j * len + i] = z[(r0 + i) * k + j];
                    }
                }
                stacked_qr_by_columns(rc.as_mut(), &mut buf, len, len, &mut work);
                r0 += len;
            }
            for i in 0..k {
                for j in 0..k {
                    assert!(
                        (r[(i, j)] - rc[(i, j)]).abs() <= 1e-13 * (n as f64),
                        "{n}x{k} cols R[{i},{j}]"
                    );
                }
            }
            for i in 0..k {
                for j in 0..k {
                    let rtr: f64 = (0..k).map(|l| r[(l, i)] * r[(l, j)]).sum();
                    let ztz: f64 = (0..n).map(|l| z[l * k + i] * z[l * k + j]).sum();
                    assert!(
                        (rtr - ztz).abs() <= 1e-12 * n as f64,
                        "{n}x{k} ({i},{j}): {rtr} vs {ztz}"
                    );
                    if i > j {
                        assert_eq!(r[(i, j)], 0.0);
                    }
                }
            }
            let zm = nalgebra::DMatrix::from_row_slice(n, k, &z);
            let rn = zm.qr().r();
            for i in 0..k {
                let sign = (r[(i, i)] * rn[(i, i)]).signum();
                for j in i..k {
                    assert!(
                        (r[(i, j)] - sign * rn[(i, j)]).abs() <= 1e-12 * (n as f64).sqrt(),
                        "{n}x{k} R[{i},{j}]"
                    );
                }
            }
        }
    }
}
