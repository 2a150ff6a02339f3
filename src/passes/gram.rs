//! The centered Gram matrix `Z^T Z` over row blocks, in parallel.

use faer::reborrow::{IntoConst, ReborrowMut};
use faer::{Mat, MatMut};

use crate::error::Result;
use crate::linalg::gram::{gram_row_stride, lower_gram_add, lower_gram_rows_add};
use crate::linalg::{accumulator_groups, block_groups, block_rows, tree_reduce};
use crate::observe::Watch;
use crate::prep::{fill_tail, Scaling, Tail};
use crate::problem::Problem;

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
}

/// The transformed block's Gram matrix for narrow row-major designs
/// (`k <= 16`, no tail or the problem's target), in one pass that fills no
/// block: each row is loaded as sixteen values, centered, scaled and
/// weighted in registers, and its outer product added to accumulators held
/// in registers, one set per row block, added to the group's sum at the
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
    let job = Narrow {
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
    };
    let leaf = |group: &[(usize, usize)]| {
        let mut acc = [[0.0f64; NARROW]; NARROW];
        for &(r0, r1) in group {
            if !watch.go_on() {
                break;
            }
            let part = crate::linalg::kernels::dispatch(
                #[inline(always)]
                || {
                    if job.w.is_some() {
                        narrow_rows::<true>(&job, k, r0, r1)
                    } else {
                        narrow_rows::<false>(&job, k, r0, r1)
                    }
                },
            );
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

/// [`narrow_block`] for `k` columns in all: as many rows as there are
/// (eight for `k <= 8`, whose spare rows are zeros).
#[inline(always)]
fn narrow_rows<const WEIGHTED: bool>(
    job: &Narrow<'_>,
    k: usize,
    r0: usize,
    r1: usize,
) -> [[f64; NARROW]; NARROW] {
    match k {
        0..=8 => narrow_block::<WEIGHTED, 8, 0>(job, r0, r1),
        9 => narrow_block::<WEIGHTED, 8, 1>(job, r0, r1),
        10 => narrow_block::<WEIGHTED, 8, 2>(job, r0, r1),
        11 => narrow_block::<WEIGHTED, 8, 3>(job, r0, r1),
        12 => narrow_block::<WEIGHTED, 8, 4>(job, r0, r1),
        13 => narrow_block::<WEIGHTED, 8, 5>(job, r0, r1),
        14 => narrow_block::<WEIGHTED, 8, 6>(job, r0, r1),
        15 => narrow_block::<WEIGHTED, 8, 7>(job, r0, r1),
        _ => narrow_block::<WEIGHTED, 8, 8>(job, r0, r1),
    }
}

/// `acc[l] += s * z[l]` for the eight lanes (fused multiply-adds).
#[inline(always)]
fn fma8(acc: &mut [f64; 8], s: f64, z: &[f64; 8]) {
    for l in 0..8 {
        acc[l] = s.mul_add(z[l], acc[l]);
    }
}

/// `acc[r] += s[r] * z` for the first `$rows` rows of a tile (a constant),
/// written out: a loop over the rows is vectorised across them, with
/// gathers and scatters, instead of along the lanes.
macro_rules! outer_rows {
    ($acc:ident, $s:ident, $z:ident, $rows:expr) => {
        if $rows > 0 {
            fma8(&mut $acc[0], $s[0], &$z);
        }
        if $rows > 1 {
            fma8(&mut $acc[1], $s[1], &$z);
        }
        if $rows > 2 {
            fma8(&mut $acc[2], $s[2], &$z);
        }
        if $rows > 3 {
            fma8(&mut $acc[3], $s[3], &$z);
        }
        if $rows > 4 {
            fma8(&mut $acc[4], $s[4], &$z);
        }
        if $rows > 5 {
            fma8(&mut $acc[5], $s[5], &$z);
        }
        if $rows > 6 {
            fma8(&mut $acc[6], $s[6], &$z);
        }
        if $rows > 7 {
            fma8(&mut $acc[7], $s[7], &$z);
        }
    };
}

/// The outer products of the transformed rows `r0..r1`, summed: row `i` of
/// the result holds `sum z_i z_l` for lanes `l <= i`: the first `LO` rows
/// in their first 8 lanes, the `HI` rows from row 8 on in all 16 (`k =
/// LO + HI` when `HI > 0`, so only the rows that exist are formed). Zero-
/// weight rows are skipped.
///
/// Row `i` is read as the sixteen values from its start (the next rows'
/// values, finite like every design value, fill the lanes past `p` and are
/// multiplied by a zero inverse scale: exact zeros); the last rows, whose
/// sixteen values would run past the design, through a zero-padded copy.
/// The target goes into lane `p` by a fused multiply-add with a unit
/// vector (exact: `t * 1 + 0` and `t * 0 + z`).
#[inline(always)]
fn narrow_block<const WEIGHTED: bool, const LO: usize, const HI: usize>(
    job: &Narrow<'_>,
    r0: usize,
    r1: usize,
) -> [[f64; NARROW]; NARROW] {
    let mut lo = [[0.0f64; 8]; 8];
    let mut hi_a = [[0.0f64; 8]; 8];
    let mut hi_b = [[0.0f64; 8]; 8];
    let p = job.p;
    for i in r0..r1 {
        let sw = if WEIGHTED {
            let wi = job.w.map_or(1.0, |w| w[i]) / job.ws;
            if wi == 0.0 {
                continue;
            }
            wi.sqrt()
        } else {
            1.0
        };
        let start = i * p;
        let mut v = [0.0f64; NARROW];
        match job.data.get(start..start + NARROW) {
            Some(s) => v.copy_from_slice(s),
            None => {
                let end = (start + p).min(job.data.len());
                v[..end - start].copy_from_slice(&job.data[start..end]);
            }
        }
        let t = (job.y[i] - job.ym) * job.inv_sy;
        let mut z = [0.0f64; NARROW];
        for l in 0..NARROW {
            let c = t.mul_add(job.unit[l], (v[l] - job.mean[l]) * job.inv[l]);
            z[l] = if WEIGHTED { sw * c } else { c };
        }
        let za: [f64; 8] = std::array::from_fn(|l| z[l]);
        outer_rows!(lo, za, za, LO);
        if HI > 0 {
            let zb: [f64; 8] = std::array::from_fn(|l| z[8 + l]);
            outer_rows!(hi_a, zb, za, HI);
            outer_rows!(hi_b, zb, zb, HI);
        }
    }
    let mut acc = [[0.0f64; NARROW]; NARROW];
    for r in 0..8 {
        acc[r][..8].copy_from_slice(&lo[r]);
        acc[8 + r][..8].copy_from_slice(&hi_a[r]);
        acc[8 + r][8..].copy_from_slice(&hi_b[r]);
    }
    acc
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prep::fill_block;
    use ndarray::{Array1, Array2};

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
                    let mut b = Problem::builder(x.view(), y.view());
                    if weighted {
                        b = b.with_weights(w.view());
                    }
                    let Ok(problem) = b.build() else {
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
}
