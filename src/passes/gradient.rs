//! Fused residual-and-gradient passes for the gradient solvers.
//!
//! One pass reads the raw design once and, for a coefficient vector `c`
//! (already divided by the column scales), forms for every row
//!
//! ```text
//! r_i = t_i - sum_j (x_ij - m_j) c_j        (t_i = (y_i - ybar) / s_y, or 0)
//! ```
//!
//! and accumulates `acc_j = sum_i w_i r_i (x_ij - m_j)` and
//! `sq = sum_i w_i r_i^2` (`w_i` the internally scaled weights, `m_j` the
//! weighted column means). The centering is applied on the fly to each
//! value as it is read, so columns with large offsets cost no digits, and
//! no transformed copy of the design (not even one block of it, for
//! row-major designs) is ever formed.
//!
//! Row-major designs are processed row by row (a dot product and an update
//! of `acc` from the same row, which is still in the L1 cache); column-major
//! designs block by block (a column sweep to form the block's residuals, a
//! second sweep over the same block, now in cache, for `acc`); any other
//! layout element by element. Rows are split into a fixed partition of
//! groups (it depends on the shape only, never on the thread count); groups
//! run in parallel and their partial sums are added in group order, so a
//! pass gives the same bits on any number of threads.
//!
//! The hot loops keep eight independent partial sums in a fixed order, so
//! the compiler vectorises them without changing the result; on x86-64 the
//! same source is also compiled for AVX2 and chosen at run time, giving
//! identical bits on both paths (no fused multiply-add is used).

use ndarray::{s, ArrayView2, Axis};
use rayon::prelude::*;

use crate::linalg::{block_groups, GROUPS};
use crate::observe::Watch;
use crate::problem::Problem;

/// Sums from one residual pass (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Pass {
    /// `acc_j = sum_i w_i r_i (x_ij - m_j)`.
    pub acc: Vec<f64>,
    /// `sum_i w_i r_i^2`.
    pub sq: f64,
}

/// Rows handled together by one sequential unit of a mini-batch pass.
const ROW_CHUNK: usize = 1024;

/// Rows per block of the partition (and of a column-major pass's residual
/// vectors): [`crate::linalg::block_rows`].
fn block_len(p: usize) -> usize {
    crate::linalg::block_rows(p)
}

/// What a pass needs besides the design.
#[derive(Clone, Copy)]
struct Inputs<'b, 'a> {
    x: ArrayView2<'a, f64>,
    means: &'b [f64],
    coef: &'b [f64],
    /// Per-column multipliers of `x - m` applied before `coef` (columns
    /// near the ends of the f64 range); `None`: the fast kernels.
    pre: Option<&'b [f64]>,
    problem: &'b Problem<'a>,
    ym: f64,
    inv_sy: f64,
}

impl Inputs<'_, '_> {
    #[inline(always)]
    fn target(&self, i: usize) -> f64 {
        if self.inv_sy == 0.0 {
            0.0
        } else {
            (self.problem.target()[i] - self.ym) * self.inv_sy
        }
    }
}

/// Full residual pass over every row (see the module docs). `coef` has one
/// entry per column; `inv_sy` is `1 / s_y`, or 0 to leave the target out
/// (then the pass computes `acc = -Z^T Z c` in the transformed coordinates).
/// With `pre`, every `x_ij - m_j` is multiplied by `pre_j` first (and
/// `acc` holds the sums of the pre-multiplied values): a plain, exact and
/// slower path for columns near the ends of the f64 range.
pub(crate) fn residual_pass(
    problem: &Problem<'_>,
    coef: &[f64],
    pre: Option<&[f64]>,
    inv_sy: f64,
    watch: Option<&Watch<'_>>,
) -> Pass {
    let x = problem.design();
    let (n, p) = x.dim();
    let inputs = Inputs {
        x,
        means: &problem.stats.means,
        coef,
        pre,
        problem,
        ym: problem.stats.target_mean,
        inv_sy,
    };
    let column_major = p > 1 && x.strides()[0] == 1;
    let groups = block_groups(n, block_len(p), GROUPS);
    let partials: Vec<Pass> = groups
        .par_iter()
        .map(|group| {
            let mut out = Pass {
                acc: vec![0.0; p],
                sq: 0.0,
            };
            for &(r0, r1) in group {
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                if inputs.pre.is_some() {
                    rows_prescaled(&inputs, r0..r1, &mut out);
                } else if column_major {
                    dispatch_block_cols(&inputs, r0, r1, &mut out);
                } else if !dispatch_contiguous(&inputs, r0, r1, &mut out) {
                    dispatch_rows(&inputs, r0..r1, &mut out);
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
                }
            }
            out
        })
        .collect();
    combine(partials, p)
}

/// Residual pass over the listed rows only (a mini-batch), in the order
/// given. The rows are cut into fixed chunks of [`ROW_CHUNK`], processed in
/// parallel when there are several, and added in chunk order: the result
/// depends on the row list only.
pub(crate) fn residual_rows(
    problem: &Problem<'_>,
    coef: &[f64],
    pre: Option<&[f64]>,
    inv_sy: f64,
    rows: &[usize],
) -> Pass {
    let p = problem.columns();
    let inputs = Inputs {
        x: problem.design(),
        means: &problem.stats.means,
        coef,
        pre,
        problem,
        ym: problem.stats.target_mean,
        inv_sy,
    };
    let run = |chunk: &[usize]| {
        let mut out = Pass {
            acc: vec![0.0; p],
            sq: 0.0,
        };
        if inputs.pre.is_some() {
            rows_prescaled(&inputs, chunk.iter().copied(), &mut out);
        } else {
            dispatch_rows(&inputs, chunk.iter().copied(), &mut out);
        }
        out
    };
    if rows.len() <= ROW_CHUNK {
        return run(rows);
    }
    let partials: Vec<Pass> = rows.par_chunks(ROW_CHUNK).map(run).collect();
    combine(partials, p)
}

/// `max_i w_i sum_j ((x_ij - m_j) pre_j inv_scale_j)^2`: the largest squared
/// norm of a row of the transformed design (zero-weight rows excluded).
pub(crate) fn max_row_norm(
    problem: &Problem<'_>,
    inv_scale: &[f64],
    pre: Option<&[f64]>,
    watch: Option<&Watch<'_>>,
) -> f64 {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    groups
        .par_iter()
        .map(|group| {
            let mut best = 0.0_f64;
            for &(r0, r1) in group {
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    let mut s = 0.0;
                    for (j, ((&v, &m), &k)) in x.row(i).iter().zip(means).zip(inv_scale).enumerate()
                    {
                        let d = match pre {
                            Some(pre) => (v - m) * pre[j],
                            None => v - m,
                        };
                        let z = d * k;
                        s += z * z;
                    }
                    best = best.max(w * s);
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
                }
            }
            best
        })
        .reduce(|| 0.0, f64::max)
}

/// `sum_i w_i ((x_ij - m_j) inv_scale_j)^2` for every column: the squared
/// norms of the transformed columns (one pass, fixed partition, partial
/// sums added in group order).
pub(crate) fn column_norms(
    problem: &Problem<'_>,
    inv_scale: &[f64],
    watch: Option<&Watch<'_>>,
) -> Vec<f64> {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    let partials: Vec<Vec<f64>> = groups
        .par_iter()
        .map(|group| {
            let mut acc = vec![0.0; p];
            for &(r0, r1) in group {
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    let row = x.index_axis(Axis(0), i);
                    match row.to_slice() {
                        Some(row) => {
                            for (((a, &v), &m), &k) in
                                acc.iter_mut().zip(row).zip(means).zip(inv_scale)
                            {
                                let z = (v - m) * k;
                                *a += w * z * z;
                            }
                        }
                        None => {
                            for (((a, &v), &m), &k) in
                                acc.iter_mut().zip(row.iter()).zip(means).zip(inv_scale)
                            {
                                let z = (v - m) * k;
                                *a += w * z * z;
                            }
                        }
                    }
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
                }
            }
            acc
        })
        .collect();
    let mut total = vec![0.0; p];
    for part in partials {
        for (t, a) in total.iter_mut().zip(&part) {
            *t += a;
        }
    }
    total
}

/// The plain path with per-column pre-multipliers: `d_ij = (x_ij - m_j)
/// pre_j`, `r_i = t_i - sum_j d_ij c_j`, `acc_j += w_i r_i d_ij`.
fn rows_prescaled(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    let Inputs {
        x,
        means,
        coef,
        pre,
        ..
    } = *inputs;
    let pre = pre.unwrap_or(&[]);
    for i in rows {
        let w = inputs.problem.scaled_weight(i);
        if w == 0.0 {
            continue;
        }
        let row = x.index_axis(Axis(0), i);
        let mut fit = 0.0;
        for (((&v, &m), &c), &a) in row.iter().zip(means).zip(coef).zip(pre) {
            fit += ((v - m) * a) * c;
        }
        let r = inputs.target(i) - fit;
        let u = w * r;
        for (((acc, &v), &m), &a) in out.acc.iter_mut().zip(row.iter()).zip(means).zip(pre) {
            *acc += u * ((v - m) * a);
        }
        out.sq += u * r;
    }
}

fn combine(partials: Vec<Pass>, p: usize) -> Pass {
    let mut total = Pass {
        acc: vec![0.0; p],
        sq: 0.0,
    };
    for part in partials {
        for (t, a) in total.acc.iter_mut().zip(&part.acc) {
            *t += a;
        }
        total.sq += part.sq;
    }
    total
}

/// The vector kernels, in two versions that give identical bits: a portable
/// one (eight partial sums in an array, which the compiler may vectorise
/// but never reorders) and an AVX2 one (the same eight partial sums in two
/// 256-bit registers, same operations, same order, no fused multiply-add).
mod simd {
    /// Portable versions.
    pub(super) mod portable {
        #[inline(always)]
        fn combine(s: &[f64; 8], tail: f64) -> f64 {
            (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
        }

        /// `sum_j (x_j - m_j) c_j` (`m`, `c` at least as long as `x`).
        #[inline(always)]
        pub fn centered_dot(x: &[f64], m: &[f64], c: &[f64]) -> f64 {
            let n = x.len();
            let (m, c) = (&m[..n], &c[..n]);
            let main = n - n % 8;
            let mut s = [0.0_f64; 8];
            for k in (0..main).step_by(8) {
                for l in 0..8 {
                    s[l] += (x[k + l] - m[k + l]) * c[k + l];
                }
            }
            let mut tail = 0.0;
            for k in main..n {
                tail += (x[k] - m[k]) * c[k];
            }
            combine(&s, tail)
        }

        /// `sum_i (x_i - m) u_i` (`u` at least as long as `x`).
        #[inline(always)]
        pub fn shifted_dot(x: &[f64], m: f64, u: &[f64]) -> f64 {
            let n = x.len();
            let u = &u[..n];
            let main = n - n % 8;
            let mut s = [0.0_f64; 8];
            for k in (0..main).step_by(8) {
                for l in 0..8 {
                    s[l] += (x[k + l] - m) * u[k + l];
                }
            }
            let mut tail = 0.0;
            for k in main..n {
                tail += (x[k] - m) * u[k];
            }
            combine(&s, tail)
        }

        /// `acc_j += u (x_j - m_j)`.
        #[inline(always)]
        pub fn centered_axpy(acc: &mut [f64], u: f64, x: &[f64], m: &[f64]) {
            for ((a, &v), &mj) in acc.iter_mut().zip(x).zip(m) {
                *a += u * (v - mj);
            }
        }
    }

    /// AVX2 versions (x86-64 only; callers check the CPU first).
    #[cfg(target_arch = "x86_64")]
    pub(super) mod avx2 {
        use std::arch::x86_64::{
            _mm256_add_pd, _mm256_loadu_pd, _mm256_mul_pd, _mm256_set1_pd, _mm256_setzero_pd,
            _mm256_storeu_pd, _mm256_sub_pd,
        };

        /// As [`super::portable::centered_dot`].
        ///
        /// # Safety
        /// The CPU must support AVX2.
        #[inline]
        #[target_feature(enable = "avx2")]
        pub unsafe fn centered_dot(x: &[f64], m: &[f64], c: &[f64]) -> f64 {
            let n = x.len();
            let (m, c) = (&m[..n], &c[..n]);
            let main = n - n % 8;
            let (px, pm, pc) = (x.as_ptr(), m.as_ptr(), c.as_ptr());
            let mut a0 = _mm256_setzero_pd();
            let mut a1 = _mm256_setzero_pd();
            let mut k = 0;
            while k < main {
                // SAFETY: k + 8 <= main <= n, the length of all three slices.
                unsafe {
                    let d0 = _mm256_sub_pd(_mm256_loadu_pd(px.add(k)), _mm256_loadu_pd(pm.add(k)));
                    let d1 = _mm256_sub_pd(
                        _mm256_loadu_pd(px.add(k + 4)),
                        _mm256_loadu_pd(pm.add(k + 4)),
                    );
                    a0 = _mm256_add_pd(a0, _mm256_mul_pd(d0, _mm256_loadu_pd(pc.add(k))));
                    a1 = _mm256_add_pd(a1, _mm256_mul_pd(d1, _mm256_loadu_pd(pc.add(k + 4))));
                }
                k += 8;
            }
            let mut s = [0.0_f64; 8];
            // SAFETY: `s` has room for two groups of four.
            unsafe {
                _mm256_storeu_pd(s.as_mut_ptr(), a0);
                _mm256_storeu_pd(s.as_mut_ptr().add(4), a1);
            }
            let mut tail = 0.0;
            for k in main..n {
                tail += (x[k] - m[k]) * c[k];
            }
            (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
        }

        /// As [`super::portable::shifted_dot`].
        ///
        /// # Safety
        /// The CPU must support AVX2.
        #[inline]
        #[target_feature(enable = "avx2")]
        pub unsafe fn shifted_dot(x: &[f64], m: f64, u: &[f64]) -> f64 {
            let n = x.len();
            let u = &u[..n];
            let main = n - n % 8;
            let (px, pu) = (x.as_ptr(), u.as_ptr());
            let vm = _mm256_set1_pd(m);
            let mut a0 = _mm256_setzero_pd();
            let mut a1 = _mm256_setzero_pd();
            let mut k = 0;
            while k < main {
                // SAFETY: k + 8 <= main <= n, the length of both slices.
                unsafe {
                    let d0 = _mm256_sub_pd(_mm256_loadu_pd(px.add(k)), vm);
                    let d1 = _mm256_sub_pd(_mm256_loadu_pd(px.add(k + 4)), vm);
                    a0 = _mm256_add_pd(a0, _mm256_mul_pd(d0, _mm256_loadu_pd(pu.add(k))));
                    a1 = _mm256_add_pd(a1, _mm256_mul_pd(d1, _mm256_loadu_pd(pu.add(k + 4))));
                }
                k += 8;
            }
            let mut s = [0.0_f64; 8];
            // SAFETY: `s` has room for two groups of four.
            unsafe {
                _mm256_storeu_pd(s.as_mut_ptr(), a0);
                _mm256_storeu_pd(s.as_mut_ptr().add(4), a1);
            }
            let mut tail = 0.0;
            for k in main..n {
                tail += (x[k] - m) * u[k];
            }
            (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
        }

        /// As [`super::portable::centered_axpy`].
        ///
        /// # Safety
        /// The CPU must support AVX2.
        #[inline]
        #[target_feature(enable = "avx2")]
        pub unsafe fn centered_axpy(acc: &mut [f64], u: f64, x: &[f64], m: &[f64]) {
            let n = acc.len().min(x.len()).min(m.len());
            let main = n - n % 4;
            let (pa, px, pm) = (acc.as_mut_ptr(), x.as_ptr(), m.as_ptr());
            let vu = _mm256_set1_pd(u);
            let mut k = 0;
            while k < main {
                // SAFETY: k + 4 <= main <= n, within all three slices.
                unsafe {
                    let d = _mm256_sub_pd(_mm256_loadu_pd(px.add(k)), _mm256_loadu_pd(pm.add(k)));
                    let v = _mm256_add_pd(_mm256_loadu_pd(pa.add(k)), _mm256_mul_pd(vu, d));
                    _mm256_storeu_pd(pa.add(k), v);
                }
                k += 4;
            }
            for k in main..n {
                acc[k] += u * (x[k] - m[k]);
            }
        }
    }

    /// `sum_j (x_j - m_j) c_j`; `AVX` only where AVX2 was detected.
    #[inline(always)]
    pub(super) fn centered_dot<const AVX: bool>(x: &[f64], m: &[f64], c: &[f64]) -> f64 {
        #[cfg(target_arch = "x86_64")]
        if AVX {
            // SAFETY: `AVX` is true only in code reached after detection.
            return unsafe { avx2::centered_dot(x, m, c) };
        }
        portable::centered_dot(x, m, c)
    }

    /// `sum_i (x_i - m) u_i`; `AVX` only where AVX2 was detected.
    #[inline(always)]
    pub(super) fn shifted_dot<const AVX: bool>(x: &[f64], m: f64, u: &[f64]) -> f64 {
        #[cfg(target_arch = "x86_64")]
        if AVX {
            // SAFETY: as above.
            return unsafe { avx2::shifted_dot(x, m, u) };
        }
        portable::shifted_dot(x, m, u)
    }

    /// `acc_j += u (x_j - m_j)`; `AVX` only where AVX2 was detected.
    #[inline(always)]
    pub(super) fn centered_axpy<const AVX: bool>(acc: &mut [f64], u: f64, x: &[f64], m: &[f64]) {
        #[cfg(target_arch = "x86_64")]
        if AVX {
            // SAFETY: as above.
            return unsafe { avx2::centered_axpy(acc, u, x, m) };
        }
        portable::centered_axpy(acc, u, x, m)
    }
}

/// One row: residual, then `acc += w r (x - m)`; returns `w r^2`.
#[inline(always)]
fn row_update<const AVX: bool>(
    row: &[f64],
    means: &[f64],
    coef: &[f64],
    t: f64,
    w: f64,
    acc: &mut [f64],
) -> f64 {
    let r = t - simd::centered_dot::<AVX>(row, means, coef);
    let u = w * r;
    simd::centered_axpy::<AVX>(acc, u, row, means);
    u * r
}

#[inline(always)]
fn rows_impl<const AVX: bool>(
    inputs: &Inputs<'_, '_>,
    rows: impl Iterator<Item = usize>,
    out: &mut Pass,
) {
    let Inputs { x, means, coef, .. } = *inputs;
    for i in rows {
        let w = inputs.problem.scaled_weight(i);
        if w == 0.0 {
            continue;
        }
        let t = inputs.target(i);
        let row = x.index_axis(Axis(0), i);
        if let Some(slice) = row.to_slice() {
            out.sq += row_update::<AVX>(slice, means, coef, t, w, &mut out.acc);
        } else {
            // Strided rows (column-major mini-batches, other layouts).
            let mut fit = 0.0;
            for ((&v, &m), &c) in row.iter().zip(means).zip(coef) {
                fit += (v - m) * c;
            }
            let r = t - fit;
            let u = w * r;
            for ((a, &v), &m) in out.acc.iter_mut().zip(row.iter()).zip(means) {
                *a += u * (v - m);
            }
            out.sq += u * r;
        }
    }
}

/// Rows of a design stored row after row without gaps, with a contiguous
/// target (and weights): plain slices, no per-row indexing.
#[inline(always)]
fn contiguous_impl<const AVX: bool, const WEIGHTED: bool>(
    inputs: &Inputs<'_, '_>,
    data: &[f64],
    y: &[f64],
    w: &[f64],
    out: &mut Pass,
) {
    let p = inputs.means.len();
    let inv_ws = 1.0 / inputs.problem.stats.weight_scale;
    let (ym, inv_sy) = (inputs.ym, inputs.inv_sy);
    let mut sq = 0.0;
    for (k, (row, &yi)) in data.chunks_exact(p).zip(y).enumerate() {
        let wi = if WEIGHTED { w[k] * inv_ws } else { 1.0 };
        if WEIGHTED && wi == 0.0 {
            continue;
        }
        let t = if inv_sy == 0.0 {
            0.0
        } else {
            (yi - ym) * inv_sy
        };
        sq += row_update::<AVX>(row, inputs.means, inputs.coef, t, wi, &mut out.acc);
    }
    out.sq += sq;
}

/// The contiguous row-major path for rows `r0..r1`; `false` (nothing done)
/// if the block, the target or the weights are not contiguous.
#[inline(always)]
fn contiguous_any<const AVX: bool>(
    inputs: &Inputs<'_, '_>,
    r0: usize,
    r1: usize,
    out: &mut Pass,
) -> bool {
    let block = inputs.x.slice_move(s![r0..r1, ..]);
    let target = inputs.problem.target().slice_move(s![r0..r1]);
    let (Some(data), Some(y)) = (block.to_slice(), target.to_slice()) else {
        return false;
    };
    match inputs.problem.weights() {
        None => contiguous_impl::<AVX, false>(inputs, data, y, &[], out),
        Some(w) => match w.slice_move(s![r0..r1]).to_slice() {
            Some(w) => contiguous_impl::<AVX, true>(inputs, data, y, w, out),
            None => return false,
        },
    }
    true
}

#[inline(always)]
fn block_cols_impl<const AVX: bool>(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    let Inputs { x, means, coef, .. } = *inputs;
    let len = r1 - r0;
    let mut r: Vec<f64> = (r0..r1).map(|i| inputs.target(i)).collect();
    let block = x.slice(s![r0..r1, ..]);
    for (j, col) in block.axis_iter(Axis(1)).enumerate() {
        let (m, c) = (means[j], coef[j]);
        match col.to_slice() {
            Some(col) => {
                for (ri, &v) in r.iter_mut().zip(col) {
                    *ri -= (v - m) * c;
                }
            }
            None => {
                for (ri, &v) in r.iter_mut().zip(col.iter()) {
                    *ri -= (v - m) * c;
                }
            }
        }
    }
    let mut u = vec![0.0; len];
    for (k, (uk, &rk)) in u.iter_mut().zip(&r).enumerate() {
        let w = inputs.problem.scaled_weight(r0 + k);
        // A row of weight zero takes no part, whatever its values (its
        // residual may be infinite, and 0 * inf is NaN).
        if w != 0.0 {
            *uk = w * rk;
            out.sq += *uk * rk;
        }
    }
    for (j, col) in block.axis_iter(Axis(1)).enumerate() {
        let m = means[j];
        out.acc[j] += match col.to_slice() {
            Some(col) => simd::shifted_dot::<AVX>(col, m, &u),
            None => col.iter().zip(&u).map(|(&v, &uk)| (v - m) * uk).sum(),
        };
    }
}

// The three paths compiled once more with AVX2 enabled, so that the
// element-wise loops between the vector kernels use it too.

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn rows_avx2(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    rows_impl::<true>(inputs, rows, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn block_cols_avx2(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    block_cols_impl::<true>(inputs, r0, r1, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn contiguous_avx2(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    contiguous_any::<true>(inputs, r0, r1, out)
}

/// Whether the AVX2 kernels may run (the standard library caches the answer).
#[inline]
fn has_avx2() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Runs the contiguous row-major path if the block qualifies; `false` if not
/// (nothing was done).
fn dispatch_contiguous(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    if inputs.means.is_empty() {
        return false;
    }
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: the CPU supports AVX2 (checked just above); the function
        // has no other requirement.
        return unsafe { contiguous_avx2(inputs, r0, r1, out) };
    }
    contiguous_any::<false>(inputs, r0, r1, out)
}

fn dispatch_rows(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: as in `dispatch_contiguous`.
        unsafe { rows_avx2(inputs, rows, out) };
        return;
    }
    rows_impl::<false>(inputs, rows, out)
}

fn dispatch_block_cols(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: as in `dispatch_contiguous`.
        unsafe { block_cols_avx2(inputs, r0, r1, out) };
        return;
    }
    block_cols_impl::<false>(inputs, r0, r1, out)
}

#[cfg(test)]
mod tests {
    use super::simd::portable;

    /// Deterministic values of assorted sizes and signs.
    fn values(n: usize, seed: u64) -> Vec<f64> {
        let mut state = seed.wrapping_mul(0x9e37_79b9_7f4a_7c15) | 1;
        (0..n)
            .map(|_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                let u = (state >> 11) as f64 / (1u64 << 53) as f64;
                (u - 0.5) * 10f64.powi((state % 7) as i32 - 3)
            })
            .collect()
    }

    #[test]
    fn avx2_kernels_give_the_portable_bits() {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            use super::simd::avx2;
            for n in [0, 1, 3, 7, 8, 9, 15, 16, 17, 100, 257] {
                let (x, m, c) = (values(n, 1), values(n, 2), values(n, 3));
                // SAFETY: AVX2 is available (checked above).
                let (d, s) = unsafe {
                    (
                        avx2::centered_dot(&x, &m, &c),
                        avx2::shifted_dot(&x, 0.25, &c),
                    )
                };
                assert_eq!(d.to_bits(), portable::centered_dot(&x, &m, &c).to_bits());
                assert_eq!(s.to_bits(), portable::shifted_dot(&x, 0.25, &c).to_bits());
                let mut a1 = values(n, 4);
                let mut a2 = a1.clone();
                // SAFETY: as above.
                unsafe { avx2::centered_axpy(&mut a1, -1.5, &x, &m) };
                portable::centered_axpy(&mut a2, -1.5, &x, &m);
                assert_eq!(a1, a2);
            }
        }
    }

    #[test]
    fn portable_dot_matches_a_plain_sum() {
        // Identity up to rounding: same terms, different grouping.
        let (x, m, c) = (values(100, 5), values(100, 6), values(100, 7));
        let plain: f64 = (0..100).map(|k| (x[k] - m[k]) * c[k]).sum();
        let scale: f64 = (0..100).map(|k| ((x[k] - m[k]) * c[k]).abs()).sum();
        assert!((portable::centered_dot(&x, &m, &c) - plain).abs() <= 1e-14 * scale);
    }
}
