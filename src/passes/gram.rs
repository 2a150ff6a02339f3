//! The centered Gram matrix `Z^T Z` over row blocks, in parallel.

use faer::reborrow::{IntoConst, ReborrowMut};
use faer::{Mat, MatMut};
use pulp::{Simd, WithSimd};

use crate::error::Result;
use crate::linalg::gram::{gram_row_stride, lower_gram_add, lower_gram_rows_add};
use crate::linalg::kernels::prefetch;
use crate::linalg::{accumulator_groups, block_groups, block_rows, tree_reduce};
use crate::observe::Watch;
use crate::prep::{fill_tail, Scaling, Tail};
use crate::problem::Problem;

#[cfg(target_arch = "x86_64")]
mod lanes;

/// Returns the full symmetric `k x k` matrix `Z^T Z`, where `Z` is the
/// centered, weighted, scaled design (with the target as a last column when
/// `with_target`, so that `Z^T y` and `y^T y` come with it).
///
/// Each group of row blocks accumulates its own lower triangle; groups run
/// in parallel and are summed in a fixed binary tree, so the result does
/// not depend on the thread count. A block is filled in the layout the
/// design can be read in contiguously and sized to stay in the core's
/// second-level cache: a row-major design's block row by row (rows on
/// cache lines, padded to whole vectors) for the crate's own register-tiled
/// kernel ([`crate::linalg::gram::lower_gram_rows_add`], which forms only
/// the tiles on and below the diagonal), a column-major design's column by
/// column for a symmetric rank-k update by panels
/// ([`crate::linalg::gram::lower_gram_add`], faer's sequential kernel).
/// Extra memory: one block and one `k x k` matrix per thread and level of
/// the tree (about `threads * (1 + log2 64)` matrices).
/// A row-major design with at most 16 columns in the block (design and
/// target) skips the block: each row is transformed and multiplied in
/// registers (see `narrow_gram`), which halves the pass at ten columns.
///
/// Reports every block to `watch` (whose pass the caller has begun); a
/// stop skips the blocks not yet started and returns
/// [`crate::Error::Stopped`].
pub(crate) fn centered_gram(
    problem: &Problem<'_>,
    scaling: &Scaling,
    with_target: bool,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    let tail = if with_target {
        Tail::Target
    } else {
        Tail::None
    };
    centered_gram_with(problem, scaling, tail, watch)
}

/// As [`centered_gram`], with the columns after the design given by `tail`
/// (several targets for a cross-product state).
pub(crate) fn centered_gram_with(
    problem: &Problem<'_>,
    scaling: &Scaling,
    tail: Tail<'_>,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    let k = problem.columns() + tail.width();
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, accumulator_groups(problem.rows(), k));
    if let Some(g) = narrow_gram(problem, scaling, &tail, &groups, watch) {
        watch.check()?;
        return Ok(g);
    }
    // A column-major design is read column by column into a `rows x k`
    // block; any other layout row by row into a block of rows.
    let design = problem.design();
    let strides = design.strides();
    let by_columns = strides[0] == 1 && strides[1] != 1;
    let ld = gram_row_stride(k);
    let leaf = |group: &[(usize, usize)]| {
        let mut acc = Mat::<f64>::zeros(k, k);
        if !by_columns {
            // Rows at stride `ld`, the lanes past `k` zero (never written),
            // the first on a cache line (so every row is: `ld` is whole
            // lines of eight values).
            let mut buffer = vec![0.0f64; ld * b + 7];
            let start = buffer.as_ptr().align_offset(64).min(7);
            let rows = &mut buffer[start..start + ld * b];
            for &(r0, r1) in group {
                if !watch.go_on() {
                    break;
                }
                let len = r1 - r0;
                let zt = MatMut::from_column_major_slice_with_stride_mut(
                    &mut rows[..ld * len],
                    k,
                    len,
                    ld,
                );
                fill_tail(problem, scaling, r0, r1, tail, zt.transpose_mut());
                lower_gram_rows_add(acc.as_mut(), rows, ld, len, k);
                watch.rows_done(len);
            }
            return acc;
        }
        // A column-major design: the `len x k` block column by column.
        let mut block = Mat::<f64>::zeros(b, k);
        for &(r0, r1) in group {
            if !watch.go_on() {
                break;
            }
            let len = r1 - r0;
            let mut z = block.as_mut().subrows_mut(0, len);
            fill_tail(problem, scaling, r0, r1, tail, z.rb_mut());
            lower_gram_add(acc.as_mut(), z.into_const());
            watch.rows_done(len);
        }
        acc
    };
    // The panels also fill part of the upper triangle: sum the lower only.
    let merge = |mut a: Mat<f64>, b: Mat<f64>| {
        for j in 0..k {
            for i in j..k {
                a[(i, j)] += b[(i, j)];
            }
        }
        a
    };
    let mut g = tree_reduce(&groups, &leaf, &merge).unwrap_or_else(|| Mat::zeros(k, k));
    watch.check()?;
    for j in 0..k {
        for i in (j + 1)..k {
            g[(j, i)] = g[(i, j)];
        }
    }
    Ok(g)
}

/// Lanes of the fused narrow pass: row-major designs whose transformed
/// rows (the columns and the target) are at most this wide.
const NARROW: usize = 16;

/// What the fused narrow pass needs besides the rows.
struct Narrow<'a> {
    /// The design's values, row after row (`p` per row).
    data: &'a [f64],
    p: usize,
    y: &'a [f64],
    w: Option<&'a [f64]>,
    /// Means and inverse scales per lane; zero past the design's columns.
    mean: [f64; NARROW],
    inv: [f64; NARROW],
    /// One in lane `p` (where the target goes) when the target is filled,
    /// else all zero.
    unit: [f64; NARROW],
    ym: f64,
    inv_sy: f64,
    /// The problem's weight scale (a power of four; its inverse may not be
    /// representable, so weights are divided by it, as everywhere).
    ws: f64,
    /// Transformed values a row: `p`, and one more with the target.
    k: usize,
}

/// The fused narrow pass's job for `problem` (see [`narrow_gram`]), `None`
/// for the shapes and layouts it does not take.
fn narrow_job<'a>(problem: &Problem<'a>, scaling: &Scaling, tail: &Tail<'_>) -> Option<Narrow<'a>> {
    let x = problem.design();
    let (n, p) = x.dim();
    let with_target = match tail {
        Tail::None => false,
        Tail::Target => true,
        _ => return None,
    };
    let k = p + usize::from(with_target);
    if p == 0 || k > NARROW || n == 0 || !x.is_standard_layout() {
        return None;
    }
    let mut mean = [0.0; NARROW];
    let mut inv = [0.0; NARROW];
    let mut unit = [0.0; NARROW];
    mean[..p].copy_from_slice(&problem.stats.means[..p]);
    inv[..p].copy_from_slice(&scaling.inv_scale[..p]);
    if with_target {
        unit[p] = 1.0;
    }
    Some(Narrow {
        data: x.to_slice()?,
        p,
        y: problem.target().to_slice()?,
        w: match problem.weights() {
            Some(w) => Some(w.to_slice()?),
            None => None,
        },
        mean,
        inv,
        unit,
        ym: problem.stats.target_mean,
        inv_sy: if with_target {
            1.0 / scaling.target_scale
        } else {
            0.0
        },
        ws: problem.stats.weight_scale,
        k,
    })
}

/// The transformed block's Gram matrix for narrow row-major designs
/// (`k <= 16`, no tail or the problem's target), in one pass that fills no
/// block: rows are transformed a small chunk at a time in the first-level
/// cache and their outer products added to sums held in registers (see
/// [`NarrowBlock`]), one set per row block, added to the group's sum at the
/// block's end (so a sum runs over at most one block of rows before it is
/// rounded into the next level). The same fixed groups and tree as the
/// panelled pass, and the same transformed values as [`fill_tail`]
/// (`sw * ((x - m) * inv)`), added in another order. `None` for other
/// shapes and layouts (the panelled pass).
fn narrow_gram(
    problem: &Problem<'_>,
    scaling: &Scaling,
    tail: &Tail<'_>,
    groups: &[Vec<(usize, usize)>],
    watch: &Watch<'_>,
) -> Option<Mat<f64>> {
    let job = narrow_job(problem, scaling, tail)?;
    let k = job.k;
    let leaf = |group: &[(usize, usize)]| {
        let mut acc = [[0.0f64; NARROW]; NARROW];
        for &(r0, r1) in group {
            if !watch.go_on() {
                break;
            }
            let part = crate::linalg::kernels::dispatch_simd(NarrowBlock { job: &job, r0, r1 });
            add_tile(&mut acc, &part);
            watch.rows_done(r1 - r0);
        }
        acc
    };
    let merge = |mut a: [[f64; NARROW]; NARROW], b: [[f64; NARROW]; NARROW]| {
        add_tile(&mut a, &b);
        a
    };
    let acc = tree_reduce(groups, &leaf, &merge)?;
    // Row `i` of the accumulators holds `sum z_i z_l` for `l <= i`.
    Some(Mat::from_fn(k, k, |i, j| {
        if j <= i {
            acc[i][j]
        } else {
            acc[j][i]
        }
    }))
}

/// `acc += part`, entry by entry (a block's sums into its group's, and one
/// group's into another's in the tree).
fn add_tile(acc: &mut [[f64; NARROW]; NARROW], part: &[[f64; NARROW]; NARROW]) {
    for (a, b) in acc.iter_mut().zip(part) {
        for (x, y) in a.iter_mut().zip(b) {
            *x += y;
        }
    }
}

/// Transformed rows of a narrow pass's chunk: a chunk (four KiB at
/// [`NARROW`] values a row) stays in the first-level cache between its fill
/// and its products, beside the next chunk's design rows fetched meanwhile
/// (32 and 64 rows measured alike at 10,000,000 x 10; 128 slower).
const CHUNK: usize = 32;

/// A chunk of transformed rows, each on its own cache line pair.
#[repr(align(64))]
struct Chunk([[f64; NARROW]; CHUNK]);

/// The outer products of the transformed rows `r0..r1` of a narrow pass,
/// summed: row `i` of the result holds `sum z_i z_l` for lanes `l <= i`
/// (lanes past the diagonal hold products of their own, not read). Zero-
/// weight rows are skipped.
///
/// The rows are transformed a chunk of [`CHUNK`] at a time into a buffer in
/// the first-level cache (one pass over the design's bytes, in order, the
/// arithmetic in vectors), then multiplied from it by register tiles whose
/// multipliers are broadcast from the buffer as operands of the fused
/// multiply-adds (shuffling the lanes of a row held in registers costs more
/// than the products). Each entry is one chain of fused multiply-adds over
/// the rows in order, whatever the level: the same bits on every level.
/// With AVX-512, the widths `lanes::takes` names go to `lanes::block`
/// instead (eight rows as the lanes of a vector: fewer products a row,
/// each entry summed in eight lanes, so within rounding of the other
/// levels).
///
/// Row `i` is read as the sixteen values from its start (the next rows'
/// values, finite like every design value, fill the lanes past `p` and are
/// multiplied by a zero inverse scale: exact zeros); the last rows, whose
/// sixteen values would run past the design, through a zero-padded copy.
/// The target goes into lane `p` by a fused multiply-add with a unit
/// vector (exact: `t * 1 + 0` and `t * 0 + z`).
struct NarrowBlock<'a, 'b> {
    job: &'a Narrow<'b>,
    r0: usize,
    r1: usize,
}

impl WithSimd for NarrowBlock<'_, '_> {
    type Output = [[f64; NARROW]; NARROW];

    #[inline(always)]
    fn with_simd<S: Simd>(self, simd: S) -> Self::Output {
        // Eight-lane vectors: eight rows as the lanes (see `lanes`).
        #[cfg(target_arch = "x86_64")]
        if S::F64_LANES == 8 {
            if let Some(sums) = lanes::block(self.job, self.r0, self.r1) {
                return sums;
            }
        }
        macro_rules! widths {
            ($w:literal) => {
                match self.job.k {
                    0 | 1 => self.run::<S, $w, 1>(simd),
                    2 => self.run::<S, $w, 2>(simd),
                    3 => self.run::<S, $w, 3>(simd),
                    4 => self.run::<S, $w, 4>(simd),
                    5 => self.run::<S, $w, 5>(simd),
                    6 => self.run::<S, $w, 6>(simd),
                    7 => self.run::<S, $w, 7>(simd),
                    8 => self.run::<S, $w, 8>(simd),
                    9 => self.run::<S, $w, 9>(simd),
                    10 => self.run::<S, $w, 10>(simd),
                    11 => self.run::<S, $w, 11>(simd),
                    12 => self.run::<S, $w, 12>(simd),
                    13 => self.run::<S, $w, 13>(simd),
                    14 => self.run::<S, $w, 14>(simd),
                    15 => self.run::<S, $w, 15>(simd),
                    _ => self.run::<S, $w, 16>(simd),
                }
            };
        }
        if self.job.w.is_some() {
            widths!(true)
        } else {
            widths!(false)
        }
    }
}

impl NarrowBlock<'_, '_> {
    #[inline(always)]
    fn run<S: Simd, const WEIGHTED: bool, const K: usize>(
        &self,
        simd: S,
    ) -> [[f64; NARROW]; NARROW] {
        let job = self.job;
        let p = job.p;
        let mut acc = [[0.0f64; NARROW]; NARROW];
        let mut chunk = Chunk([[0.0f64; NARROW]; CHUNK]);
        // The per-lane constants as vectors (the first `nv` used: the
        // vectors that hold the `K` lanes).
        let l = S::F64_LANES;
        let nv = K.div_ceil(l);
        let zero = simd.splat_f64s(0.0);
        let mut mean = [zero; NARROW];
        let mut inv = [zero; NARROW];
        let mut unit = [zero; NARROW];
        for v in 0..nv {
            mean[v] = load::<S>(&job.mean[v * l..(v + 1) * l]);
            inv[v] = load::<S>(&job.inv[v * l..(v + 1) * l]);
            unit[v] = load::<S>(&job.unit[v * l..(v + 1) * l]);
        }
        // The last rows' values, zero-padded (zeroed once: the lanes past
        // `p` keep finite values of earlier rows, multiplied by zero).
        let mut padded = [0.0f64; NARROW];
        // A chunk's centered, scaled targets and square-root weights, as
        // vectors over the rows (the same operations as one row at a
        // time), taken by the rows as broadcast operands.
        let mut targets = [0.0f64; CHUNK];
        let mut roots = [1.0f64; CHUNK];
        let mut i = self.r0;
        while i < self.r1 {
            let m = (self.r1 - i).min(CHUNK);
            for (t, &y) in targets[..m].iter_mut().zip(&job.y[i..i + m]) {
                *t = (y - job.ym) * job.inv_sy;
            }
            if WEIGHTED {
                if let Some(w) = job.w {
                    for (s, &wr) in roots[..m].iter_mut().zip(&w[i..i + m]) {
                        *s = (wr / job.ws).sqrt();
                    }
                }
            }
            let mut len = 0;
            for r in 0..m {
                // Weights are at least zero: the root is zero exactly when
                // the scaled weight is.
                if WEIGHTED && roots[r] == 0.0 {
                    continue;
                }
                let start = (i + r) * p;
                let values = match job.data.get(start..start + NARROW) {
                    Some(s) => s,
                    None => {
                        let end = (start + p).min(job.data.len());
                        padded[..end - start].copy_from_slice(&job.data[start..end]);
                        &padded[..]
                    }
                };
                let t = simd.splat_f64s(targets[r]);
                let s = simd.splat_f64s(roots[r]);
                let z = &mut chunk.0[len];
                for v in 0..nv {
                    let x = load::<S>(&values[v * l..(v + 1) * l]);
                    let centered = simd.mul_f64s(simd.sub_f64s(x, mean[v]), inv[v]);
                    // Only the last vector holds the target's lane (`K - 1`).
                    let mut c = if v + 1 == nv {
                        simd.mul_add_f64s(t, unit[v], centered)
                    } else {
                        centered
                    };
                    if WEIGHTED {
                        c = simd.mul_f64s(s, c);
                    }
                    store::<S>(&mut z[v * l..(v + 1) * l], c);
                }
                len += 1;
            }
            i += m;
            // The next chunk's rows, fetched while this chunk's products
            // run (they read only the first-level cache, so the hardware's
            // prefetchers, which follow demand reads, would stall).
            let ahead = job.data.get(i * p..).unwrap_or(&[]);
            products::<S, K>(simd, &chunk.0[..len], ahead, p, &mut acc);
        }
        acc
    }
}

/// `acc[i][l] += sum_r z[r][i] z[r][l]` for rows `i < K` and the lanes `l`
/// of every vector that holds a lane `<= i`, over the rows `z` in order.
///
/// The sums are one vector each (row `i` times the vector of lanes from
/// `v L`, for `i >= v L`), kept in registers through the rows: with sixteen
/// lanes of vectors in 32 registers (AVX-512) all of them at once (at most
/// 24), so that one row's products are independent of each other; with
/// narrower vectors those of one vector of lanes at a time. Loaded and
/// stored by value with constant indices (`K` and the lanes are constants),
/// so never borrowed; the multipliers are broadcast from the rows.
#[inline(always)]
fn products<S: Simd, const K: usize>(
    simd: S,
    z: &[[f64; NARROW]],
    ahead: &[f64],
    p: usize,
    acc: &mut [[f64; NARROW]; NARROW],
) {
    let l = S::F64_LANES;
    let nv = K.div_ceil(l);
    if l >= 8 {
        tile::<S, K>(simd, z, 0, nv, ahead, p, acc);
    } else {
        for v in 0..nv {
            let ahead = if v == 0 { ahead } else { &[] };
            tile::<S, K>(simd, z, v, v + 1, ahead, p, acc);
        }
    }
}

/// [`products`] for the vectors of lanes `v0..v1`: the sums `acc[i][v L..v
/// L + L]` for `i` from `v L` to `K`.
#[inline(always)]
fn tile<S: Simd, const K: usize>(
    simd: S,
    z: &[[f64; NARROW]],
    v0: usize,
    v1: usize,
    ahead: &[f64],
    p: usize,
    acc: &mut [[f64; NARROW]; NARROW],
) {
    let l = S::F64_LANES;
    assert!(K <= NARROW && v1 * l <= NARROW && v1 - v0 <= 2);
    let zero = simd.splat_f64s(0.0);
    let mut t = [[zero; K]; 2];
    for v in v0..v1 {
        for i in v * l..K {
            t[v - v0][i] = load::<S>(&acc[i][v * l..(v + 1) * l]);
        }
    }
    for (r, row) in z.iter().enumerate() {
        // The `r`-th row ahead: its first value, the one a cache line on
        // and its last (a row of up to sixteen values lies on at most three
        // lines).
        prefetch(ahead, r * p);
        if p > 8 {
            prefetch(ahead, r * p + 8);
        }
        prefetch(ahead, r * p + p - 1);
        for v in v0..v1 {
            let zv = load::<S>(&row[v * l..(v + 1) * l]);
            for i in v * l..K {
                t[v - v0][i] = simd.mul_add_f64s(simd.splat_f64s(row[i]), zv, t[v - v0][i]);
            }
        }
    }
    for v in v0..v1 {
        for i in v * l..K {
            store::<S>(&mut acc[i][v * l..(v + 1) * l], t[v - v0][i]);
        }
    }
}

/// One vector from the `L` values of `s` (a plain load: pulp's partial
/// loads go through a table of masked loads).
#[inline(always)]
fn load<S: Simd>(s: &[f64]) -> S::f64s {
    pulp::bytemuck::pod_read_unaligned(pulp::bytemuck::cast_slice(s))
}

/// Stores `v` into the `L` values of `s` (a plain store).
#[inline(always)]
fn store<S: Simd>(s: &mut [f64], v: S::f64s) {
    pulp::bytemuck::cast_slice_mut::<f64, S::f64s>(s)[0] = v;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prep::fill_block;
    use ndarray::{Array1, Array2};

    /// The problem of `x` and `y`, with the weights `w` if given.
    fn build<'a>(
        x: &'a Array2<f64>,
        y: &'a Array1<f64>,
        w: Option<&'a Array1<f64>>,
    ) -> crate::error::Result<Problem<'a>> {
        let mut b = Problem::builder(x.view(), y.view());
        if let Some(w) = w {
            b = b.with_weights(w.view());
        }
        b.build()
    }

    /// The panelled Gram over blocks equals `Z^T Z` summed straight from
    /// the filled rows (the same numbers in another order: equal to
    /// rounding), for shapes around the panel and block sizes.
    #[test]
    fn gram_matches_direct_sum() {
        // Narrow row-major shapes take the fused pass (the last rows of
        // each through the padded copy), wider ones the panelled pass.
        for &(n, p) in &[
            (5usize, 2usize),
            (700, 33),
            (3000, 65),
            (1200, 31),
            (1, 1),
            (9000, 7),
            (5000, 8),
            (4097, 10),
            (333, 15),
            (20, 16),
        ] {
            let x = Array2::from_shape_fn((n, p), |(i, j)| {
                (((i * 7919 + j * 104_729) % 1009) as f64 / 1009.0 - 0.5) + j as f64
            });
            let y = Array1::from_shape_fn(n, |i| (i % 13) as f64);
            let problem = Problem::new(x.view(), y.view()).expect("valid");
            let scaling = Scaling::new(&problem, 1e-12);
            let g = centered_gram(&problem, &scaling, true, &Watch::quiet()).expect("unstopped");
            let mut z = Mat::<f64>::zeros(n, p + 1);
            fill_block(&problem, &scaling, 0, n, true, z.as_mut());
            for i in 0..=p {
                for j in 0..=p {
                    let direct: f64 = (0..n).map(|r| z[(r, i)] * z[(r, j)]).sum();
                    let tol = 1e-12 * n as f64;
                    assert!((g[(i, j)] - direct).abs() <= tol, "{n}x{p} ({i},{j})");
                }
            }
        }
    }

    /// The fused narrow pass with weights (zeros among them) and with or
    /// without the target equals the sums of the filled rows (the other
    /// code path, `fill_block`), for every width it takes, with the
    /// design's columns offset far from zero (centering is exact enough
    /// only if the means are subtracted before the products).
    #[test]
    fn narrow_pass_matches_filled_rows() {
        for p in 1..=16usize {
            for &n in &[1usize, 3, 17, 4100] {
                let x = Array2::from_shape_fn((n, p), |(i, j)| {
                    1e6 * (j as f64 + 1.0)
                        + (((i * 7919 + j * 104_729) % 1009) as f64 / 1009.0 - 0.5)
                });
                let y = Array1::from_shape_fn(n, |i| (i % 13) as f64 - 6.0);
                let w = Array1::from_shape_fn(n, |i| {
                    if i % 5 == 3 {
                        0.0
                    } else {
                        0.5 + (i % 7) as f64
                    }
                });
                for weighted in [false, true] {
                    let Ok(problem) = build(&x, &y, weighted.then_some(&w)) else {
                        continue;
                    };
                    let scaling = Scaling::new(&problem, 0.0);
                    for with_target in [false, true] {
                        if with_target && p == 16 {
                            continue;
                        }
                        let k = p + usize::from(with_target);
                        let g = centered_gram(&problem, &scaling, with_target, &Watch::quiet())
                            .expect("unstopped");
                        let mut z = Mat::<f64>::zeros(n, k);
                        fill_block(&problem, &scaling, 0, n, with_target, z.as_mut());
                        for i in 0..k {
                            for j in 0..k {
                                let direct: f64 = (0..n).map(|r| z[(r, i)] * z[(r, j)]).sum();
                                let scale: f64 =
                                    (0..n).map(|r| (z[(r, i)] * z[(r, j)]).abs()).sum();
                                assert!(
                                    (g[(i, j)] - direct).abs() <= 1e-13 * scale.max(1e-300) * n as f64,
                                    "{n}x{p} weighted {weighted} target {with_target} ({i},{j}): {} vs {direct}",
                                    g[(i, j)]
                                );
                                assert_eq!(g[(i, j)].to_bits(), g[(j, i)].to_bits());
                            }
                        }
                    }
                }
            }
        }
    }
    /// Every entry of the fused narrow pass's block sums, on and below the
    /// diagonal, is one chain of fused multiply-adds over the transformed
    /// rows in order (the transformation written out here as `fill_tail`
    /// does it): bit for bit, at every level the processor runs, for every
    /// width, with and without weights (zeros among them, across chunk
    /// boundaries) and the target, over ranges that end in the last rows
    /// (the zero-padded copy) and start inside the design. Where the
    /// AVX-512 kernel of eight rows as lanes takes the job (`lanes`), it
    /// is checked bit for bit against its own model written out here: a
    /// chain a lane over the rows `r0 + q, r0 + q + 8, ...` (zero-weight
    /// rows included as zeros), the lanes added in its fixed order.
    #[test]
    fn narrow_block_is_one_fused_chain_per_entry_at_every_level() {
        use crate::linalg::kernels::{dispatch_simd_at, Level};
        for p in 1..=16usize {
            let n = 150;
            let x = Array2::from_shape_fn((n, p), |(i, j)| {
                -3e3 * (j as f64 + 1.0) + (((i * 7919 + j * 104_729) % 1009) as f64 / 97.0)
            });
            let y = Array1::from_shape_fn(n, |i| ((i * 31) % 17) as f64 - 8.5);
            let w = Array1::from_shape_fn(n, |i| {
                if i % 7 == 2 || (30..36).contains(&i) {
                    0.0
                } else {
                    0.25 + (i % 5) as f64
                }
            });
            for weighted in [false, true] {
                let problem = build(&x, &y, weighted.then_some(&w)).expect("valid");
                let scaling = Scaling::new(&problem, 0.0);
                for with_target in [false, true] {
                    let tail = if with_target {
                        Tail::Target
                    } else {
                        Tail::None
                    };
                    let Some(job) = narrow_job(&problem, &scaling, &tail) else {
                        assert!(with_target && p == 16, "p {p} target {with_target}");
                        continue;
                    };
                    let k = job.k;
                    let st = &problem.stats;
                    for &(r0, r1) in &[(0usize, n), (5, 37), (100, n), (n - 1, n), (64, 64)] {
                        let mut want = [[0.0f64; NARROW]; NARROW];
                        // The AVX-512 kernel's model (see `lanes`): lane
                        // `(r - r0) mod 8` of each entry, zero-weight rows
                        // included as zero lanes.
                        let mut lane_sums = [[[0.0f64; 8]; NARROW]; NARROW];
                        for r in r0..r1 {
                            let wr = if weighted {
                                w[r] / st.weight_scale
                            } else {
                                1.0
                            };
                            let sw = wr.sqrt();
                            let mut z = [0.0f64; NARROW];
                            for j in 0..p {
                                z[j] = sw * ((x[(r, j)] - st.means[j]) * scaling.inv_scale[j]);
                            }
                            if with_target {
                                z[p] = sw * ((y[r] - st.target_mean) / scaling.target_scale);
                            }
                            let q = (r - r0) % 8;
                            for i in 0..k {
                                for l in 0..=i {
                                    lane_sums[i][l][q] = z[i].mul_add(z[l], lane_sums[i][l][q]);
                                    if wr != 0.0 {
                                        want[i][l] = z[i].mul_add(z[l], want[i][l]);
                                    }
                                }
                            }
                        }
                        let mut want_lanes = [[0.0f64; NARROW]; NARROW];
                        for i in 0..k {
                            for l in 0..=i {
                                let s = &lane_sums[i][l];
                                want_lanes[i][l] = ((s[0] + s[1]) + (s[2] + s[3]))
                                    + ((s[4] + s[5]) + (s[6] + s[7]));
                            }
                        }
                        for level in Level::ALL {
                            let Some(got) =
                                dispatch_simd_at(level, NarrowBlock { job: &job, r0, r1 })
                            else {
                                continue;
                            };
                            #[cfg(target_arch = "x86_64")]
                            let by_lanes = level == Level::V4 && lanes::takes(&job);
                            #[cfg(not(target_arch = "x86_64"))]
                            let by_lanes = false;
                            let want = if by_lanes { &want_lanes } else { &want };
                            for i in 0..k {
                                for l in 0..=i {
                                    assert_eq!(
                                        got[i][l].to_bits(),
                                        want[i][l].to_bits(),
                                        "{} p {p} weighted {weighted} target {with_target} rows {r0}..{r1} ({i},{l}): {} vs {}",
                                        level.name(),
                                        got[i][l],
                                        want[i][l]
                                    );
                                }
                            }
                        }
                    }
                }
            }
        }
    }
}
