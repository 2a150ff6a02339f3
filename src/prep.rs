//! Preprocessing shared by every solver: centering by the weighted means,
//! row weighting by `sqrt(w)`, and exact power-of-two column scaling.
//!
//! A solver never materialises a transformed copy of the whole design unless
//! its algorithm needs one; it asks [`fill_block`] for the transformed rows of
//! one block at a time.

use faer::reborrow::ReborrowMut;
use faer::MatMut;
use ndarray::s;

use crate::linalg::kernels;

use crate::problem::{pow2_scale, Problem};

/// Column scaling of the centered, weighted design (powers of two, so the
/// scaling itself is exact).
#[derive(Debug, Clone)]
pub(crate) struct Scaling {
    /// Divisor of column j (a power of two).
    pub scale: Vec<f64>,
    /// `1 / scale[j]`, or 0 for columns treated as numerically constant.
    pub inv_scale: Vec<f64>,
    /// Divisor of the centered target (a power of two).
    pub target_scale: f64,
    /// Columns whose centered values are rounding noise (see [`Scaling::new`]).
    pub constant: Vec<bool>,
}

impl Scaling {
    /// Scales every column by the power of two at or below its largest
    /// centered magnitude. A column whose centered magnitude is at most
    /// `tolerance` times its raw magnitude is numerically constant: beside
    /// an intercept it carries no information, and it is zeroed.
    pub fn new(problem: &Problem<'_>, tolerance: f64) -> Self {
        let st = &problem.stats;
        let p = problem.cols();
        let mut scale = Vec::with_capacity(p);
        let mut inv_scale = Vec::with_capacity(p);
        let mut constant = Vec::with_capacity(p);
        for j in 0..p {
            let is_constant = st.centered_max[j] <= tolerance * st.raw_max[j];
            let s = pow2_scale(st.centered_max[j]);
            scale.push(s);
            inv_scale.push(if is_constant { 0.0 } else { 1.0 / s });
            constant.push(is_constant);
        }
        Scaling {
            scale,
            inv_scale,
            target_scale: pow2_scale(st.target_centered_max),
            constant,
        }
    }

    /// Upper bound on the norm of column j of the *raw* weighted design,
    /// expressed in scaled units: `sqrt(W) * max|x_j| / scale_j`. Rank tests
    /// compare pivots against it.
    pub fn raw_norm_bound(&self, problem: &Problem<'_>, j: usize) -> f64 {
        problem.stats.total_weight.sqrt() * problem.stats.raw_max[j] / self.scale[j]
    }
}

/// Writes rows `r0..r1` of the transformed design into `out`:
/// `out[i - r0, j] = sqrt(w_i) (x_ij - m_j) / s_j`, and when `with_target`,
/// `out[i - r0, p] = sqrt(w_i) (y_i - ybar) / s_y`.
///
/// Any layout of `out` works; the cheap ones are a row-major `out` (or the
/// transposed view of a column-major `k x len` block) for a row-major
/// design, and a column-major `out` for a column-major design: both read
/// and write contiguously. A column-major `out` from a row-major design is
/// transposed in tiles of [`TILE`] rows that stay in the first-level cache.
/// Every path computes the same values bit for bit.
pub(crate) fn fill_block(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r0: usize,
    r1: usize,
    with_target: bool,
    mut out: MatMut<'_, f64>,
) {
    let x = problem.design();
    let y = problem.target();
    let p = x.ncols();
    let len = r1 - r0;
    if len == 0 {
        return;
    }
    let means = &problem.stats.means[..];
    let inv = &scaling.inv_scale[..];
    let ym = problem.stats.target_mean;
    let inv_sy = 1.0 / scaling.target_scale;
    let xb = x.slice(s![r0..r1, ..]);
    let row_contiguous = p <= 1 || xb.strides()[1] == 1;
    let col_contiguous = len <= 1 || xb.strides()[0] == 1;

    // Row-major output from a row-major design: one contiguous row at a time.
    if row_contiguous && (out.col_stride() == 1 || out.ncols() <= 1) {
        let done = kernels::dispatch(
            #[inline(always)]
            || {
                for (local, xr) in xb.rows().into_iter().enumerate() {
                    let i = r0 + local;
                    let (Some(xs), Some(o)) = (
                        xr.to_slice(),
                        out.rb_mut()
                            .row_mut(local)
                            .try_as_row_major_mut()
                            .map(|r| r.as_slice_mut()),
                    ) else {
                        return false;
                    };
                    let sw = problem.scaled_weight(i).sqrt();
                    kernels::center_scale(xs, means, inv, sw, o);
                    if with_target {
                        o[p] = sw * ((y[i] - ym) * inv_sy);
                    }
                }
                true
            },
        );
        if done {
            return;
        }
    }

    if out.row_stride() == 1 || out.nrows() <= 1 {
        let cols: Option<Vec<&mut [f64]>> = out
            .rb_mut()
            .subrows_mut(0, len)
            .col_iter_mut()
            .map(|c| c.try_as_col_major_mut().map(|c| c.as_slice_mut()))
            .collect();
        if let Some(mut cols) = cols {
            if with_target {
                for (local, o) in cols[p].iter_mut().enumerate() {
                    let i = r0 + local;
                    *o = problem.scaled_weight(i).sqrt() * ((y[i] - ym) * inv_sy);
                }
            }
            if col_contiguous {
                // Column-major design and output: one contiguous column at a time.
                let sw: Vec<f64> = (r0..r1).map(|i| problem.scaled_weight(i).sqrt()).collect();
                let done = kernels::dispatch(
                    #[inline(always)]
                    || {
                        for (j, o) in cols.iter_mut().take(p).enumerate() {
                            let Some(xs) = xb.column(j).to_slice() else {
                                return false;
                            };
                            let (m, is) = (means[j], inv[j]);
                            for ((o, &v), &w) in o.iter_mut().zip(xs).zip(&sw) {
                                *o = w * ((v - m) * is);
                            }
                        }
                        true
                    },
                );
                if done {
                    return;
                }
            }
            if row_contiguous {
                // Row-major design, column-major output: transpose by tiles.
                let done = kernels::dispatch(
                    #[inline(always)]
                    || {
                        let mut t0 = 0;
                        while t0 < len {
                            let h = TILE.min(len - t0);
                            let mut rows: [&[f64]; TILE] = [&[]; TILE];
                            let mut sw = [0.0f64; TILE];
                            for r in 0..h {
                                let Some(xs) = xb.row(t0 + r).to_slice() else {
                                    return false;
                                };
                                rows[r] = xs;
                                sw[r] = problem.scaled_weight(r0 + t0 + r).sqrt();
                            }
                            for (j, o) in cols.iter_mut().take(p).enumerate() {
                                let (m, is) = (means[j], inv[j]);
                                let o = &mut o[t0..t0 + h];
                                for r in 0..h {
                                    o[r] = sw[r] * ((rows[r][j] - m) * is);
                                }
                            }
                            t0 += h;
                        }
                        true
                    },
                );
                if done {
                    return;
                }
            }
        }
    }

    // Any other layout.
    for (local, i) in (r0..r1).enumerate() {
        let sw = problem.scaled_weight(i).sqrt();
        for (j, &v) in x.row(i).iter().enumerate() {
            out[(local, j)] = sw * ((v - means[j]) * inv[j]);
        }
        if with_target {
            out[(local, p)] = sw * ((y[i] - ym) * inv_sy);
        }
    }
}

/// Rows per tile of the transposing fill (a tile of a 100-column design is
/// 25 KiB: it stays in the first-level cache).
pub(crate) const TILE: usize = 32;
