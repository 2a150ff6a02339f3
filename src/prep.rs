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

use crate::problem::Problem;
use crate::scaled::{exponent, ldexp, pow2_scale};

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
    /// `log2(scale[j])`.
    pub scale_exp: Vec<i32>,
    /// `log2(target_scale)`.
    pub target_exp: i32,
}

impl Scaling {
    /// Scales every column by the power of two at or below its largest
    /// centered magnitude. A column whose centered magnitude is at most
    /// `tolerance` times its raw magnitude is numerically constant: beside
    /// an intercept it carries no information, and it is zeroed.
    pub fn new(problem: &Problem<'_>, tolerance: f64) -> Self {
        let st = &problem.stats;
        let p = problem.columns();
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
        let target_scale = pow2_scale(st.target_centered_max);
        Scaling {
            scale_exp: scale.iter().map(|&s| exponent(s)).collect(),
            scale,
            inv_scale,
            target_exp: exponent(target_scale),
            target_scale,
            constant,
        }
    }

    /// A slope in the caller's units from its scaled value:
    /// `gamma * s_y / s_j`, rounded once (no spurious overflow or
    /// underflow of the ratio of the scales).
    pub fn to_caller(&self, j: usize, gamma: f64) -> f64 {
        ldexp(gamma, self.target_exp - self.scale_exp[j])
    }

    /// A slope in scaled units from its caller value: `b * s_j / s_y`.
    pub fn to_scaled(&self, j: usize, beta: f64) -> f64 {
        ldexp(beta, self.scale_exp[j] - self.target_exp)
    }

    /// Upper bound on the norm of column j of the *raw* weighted design,
    /// expressed in scaled units: `sqrt(W) * max|x_j| / scale_j`. Rank tests
    /// compare pivots against it.
    pub fn raw_norm_bound(&self, problem: &Problem<'_>, j: usize) -> f64 {
        problem.stats.total_weight.sqrt() * (problem.stats.raw_max[j] / self.scale[j])
    }
}

/// Writes rows `r0..r1` of the transformed design into `out`:
/// `out[i - r0, j] = sqrt(w_i) (x_ij - m_j) / s_j`, and when `with_target`,
/// `out[i - r0, p] = sqrt(w_i) (y_i - ybar) / s_y`.
///
/// Any layout of `out` works; the cheap ones are a row-major `out` (or the
/// transposed view of a column-major `k x len` block) for a row-major
/// design, and a column-major `out` for a column-major design: both read
/// and write contiguously. A column-major `out` from a row-major design, and
/// a row-major `out` from a column-major design, are transposed in tiles of
/// [`TILE`] rows that stay in the first-level cache.
/// Every path computes the same values bit for bit. Rows of weight zero
/// are written as exact zeros, whatever their values (a value far outside
/// the usable rows' range could overflow once scaled, and 0 * inf is NaN).
pub(crate) fn fill_block(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r0: usize,
    r1: usize,
    with_target: bool,
    mut out: MatMut<'_, f64>,
) {
    fill_block_rows(problem, scaling, r0, r1, with_target, out.rb_mut());
    if problem.weights().is_some() {
        for (local, i) in (r0..r1).enumerate() {
            if problem.scaled_weight(i) == 0.0 {
                out.rb_mut().row_mut(local).fill(0.0);
            }
        }
    }
}

fn fill_block_rows(
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
                kernels::for_each_row(
                    xb,
                    #[inline(always)]
                    |local, xs| {
                        let i = r0 + local;
                        let Some(o) = out
                            .rb_mut()
                            .row_mut(local)
                            .try_as_row_major_mut()
                            .map(|r| r.as_slice_mut())
                        else {
                            return false;
                        };
                        let sw = problem.scaled_weight(i).sqrt();
                        kernels::center_scale(xs, means, inv, sw, o);
                        if with_target {
                            o[p] = sw * ((y[i] - ym) * inv_sy);
                        }
                        true
                    },
                )
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

    // Column-major design, row-major output: transpose by tiles (each
    // column's segment of a tile is read contiguously).
    if col_contiguous && (out.col_stride() == 1 || out.ncols() <= 1) {
        let rows: Option<Vec<&mut [f64]>> = out
            .rb_mut()
            .subrows_mut(0, len)
            .row_iter_mut()
            .map(|r| r.try_as_row_major_mut().map(|r| r.as_slice_mut()))
            .collect();
        if let Some(mut rows) = rows {
            let sw: Vec<f64> = (r0..r1).map(|i| problem.scaled_weight(i).sqrt()).collect();
            let done = kernels::dispatch(
                #[inline(always)]
                || {
                    let mut t0 = 0;
                    while t0 < len {
                        let h = TILE.min(len - t0);
                        for j in 0..p {
                            let Some(xs) = xb.column(j).to_slice() else {
                                return false;
                            };
                            let (m, is) = (means[j], inv[j]);
                            for r in 0..h {
                                rows[t0 + r][j] = sw[t0 + r] * ((xs[t0 + r] - m) * is);
                            }
                        }
                        t0 += h;
                    }
                    true
                },
            );
            if done {
                if with_target {
                    for (local, o) in rows.iter_mut().enumerate() {
                        let i = r0 + local;
                        o[p] = sw[local] * ((y[i] - ym) * inv_sy);
                    }
                }
                return;
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

/// What the columns after the design hold in a filled block.
#[derive(Clone, Copy)]
pub(crate) enum Tail<'v> {
    /// Nothing: the block is the design alone.
    None,
    /// The problem's target, centered, weighted and scaled.
    Target,
    /// `sqrt(w_i) v_i * inv_scale` from a caller's vector (one entry per
    /// row of the problem).
    Vector(&'v [f64], f64),
    /// Several targets: `sqrt(w_i) (y_it - m_t) * inv_t` for each column
    /// `t` of `ys` (one row per row of the problem).
    Targets(TargetColumns<'v>),
}

impl Tail<'_> {
    /// Columns the tail adds after the design.
    pub fn width(&self) -> usize {
        match self {
            Tail::None => 0,
            Tail::Target | Tail::Vector(..) => 1,
            Tail::Targets(t) => t.ys.ncols(),
        }
    }
}

/// Targets filled after the design (see [`Tail::Targets`]): the values,
/// their weighted means (0 without an intercept) and the inverses of their
/// power-of-two scales.
#[derive(Clone, Copy)]
pub(crate) struct TargetColumns<'v> {
    pub ys: ndarray::ArrayView2<'v, f64>,
    pub means: &'v [f64],
    pub inv: &'v [f64],
}

/// Writes rows `r0..r1` of the transformed design and its tail into `out`
/// (`r1 - r0` rows, `p + tail.width()` columns, any layout). The target
/// columns are formed as [`fill_block`] forms the problem's target, so that
/// one target filled as [`Tail::Targets`] has the bits of [`Tail::Target`].
pub(crate) fn fill_tail(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r0: usize,
    r1: usize,
    tail: Tail<'_>,
    mut out: MatMut<'_, f64>,
) {
    let p = problem.columns();
    let after = match tail {
        Tail::None => return fill_block(problem, scaling, r0, r1, false, out),
        Tail::Target => return fill_block(problem, scaling, r0, r1, true, out),
        Tail::Vector(..) | Tail::Targets(_) => tail,
    };
    fill_block(
        problem,
        scaling,
        r0,
        r1,
        false,
        out.rb_mut().subcols_mut(0, p),
    );
    for (local, i) in (r0..r1).enumerate() {
        let sw = problem.scaled_weight(i).sqrt();
        match after {
            Tail::Vector(v, inv_scale) => out[(local, p)] = sw * (v[i] * inv_scale),
            Tail::Targets(t) => {
                for (c, ((y, &m), &inv)) in
                    t.ys.columns()
                        .into_iter()
                        .zip(t.means)
                        .zip(t.inv)
                        .enumerate()
                {
                    // Rows of weight zero stay exact zeros (see `fill_block`).
                    out[(local, p + c)] = if sw == 0.0 {
                        0.0
                    } else {
                        sw * ((y[i] - m) * inv)
                    };
                }
            }
            Tail::None | Tail::Target => {}
        }
    }
}

/// Columns of the design that are numerically dependent on earlier ones,
/// from a factor `r` with `r^T r = Z^T Z` (`p x p`): a column is dependent
/// when its distance to the span of the earlier independent columns is at
/// most `tolerance` times an upper bound of the raw column's weighted norm,
/// or when it is numerically constant beside the intercept.
pub(crate) fn dependent_columns(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r: faer::MatRef<'_, f64>,
    tolerance: f64,
) -> Vec<usize> {
    let p = r.ncols();
    let threshold = |j: usize| {
        if scaling.constant[j] {
            f64::INFINITY
        } else {
            tolerance * scaling.raw_norm_bound(problem, j)
        }
    };
    // Fast path: the diagonal of a triangle bounds each column's distance to
    // the span of *all* earlier columns from below, so if every pivot is
    // large no column is dependent.
    let triangular = (0..p).all(|j| (0..j).all(|i| r[(j, i)] == 0.0));
    if triangular && (0..p).all(|j| r[(j, j)].abs() > threshold(j)) {
        return Vec::new();
    }
    crate::linalg::householder::dependent_columns(r, threshold)
}

/// Rows per tile of the transposing fill (a tile of a 100-column design is
/// 25 KiB: it stays in the first-level cache).
pub(crate) const TILE: usize = 32;

#[cfg(test)]
mod tests {
    use super::*;
    use faer::Mat;
    use ndarray::{Array1, Array2, ShapeBuilder};

    /// Every layout path of `fill_block` writes the same bits as the
    /// formula `sqrt(w_i) ((x_ij - m_j) / s_j)` evaluated in the same order.
    #[test]
    fn fill_paths_agree_bit_for_bit() {
        let (n, p) = (70, 11);
        let x = Array2::from_shape_fn((n, p), |(i, j)| {
            ((i * 37 + j * 11) % 23) as f64 * 0.37 + 50.0 * j as f64
        });
        let y = Array1::from_shape_fn(n, |i| (i % 9) as f64 * 1.3 - 4.0);
        let w = Array1::from_shape_fn(n, |i| 0.25 + (i % 5) as f64);
        let mut xf = Array2::<f64>::zeros((n, p).f());
        xf.assign(&x);
        let mut big = Array2::<f64>::zeros((2 * n, 2 * p));
        big.slice_mut(s![..;2, ..;2]).assign(&x);
        let views = [x.view(), xf.view(), big.slice(s![..;2, ..;2])];
        let (r0, r1) = (9, 61);
        let len = r1 - r0;
        let mut reference: Option<Mat<f64>> = None;
        for v in views {
            let problem = Problem::builder(v, y.view())
                .with_weights(w.view())
                .build()
                .expect("valid");
            let scaling = Scaling::new(&problem, 1e-12);
            // Expected values straight from the definition.
            let ws = problem.stats.weight_scale;
            let expect = Mat::<f64>::from_fn(len, p + 1, |l, j| {
                let i = r0 + l;
                let sw = (w[i] / ws).sqrt();
                if j < p {
                    sw * ((x[(i, j)] - problem.stats.means[j]) * scaling.inv_scale[j])
                } else {
                    sw * ((y[i] - problem.stats.target_mean) * (1.0 / scaling.target_scale))
                }
            });
            // Column-major and row-major outputs.
            let mut col = Mat::<f64>::zeros(len, p + 1);
            fill_block(&problem, &scaling, r0, r1, true, col.as_mut());
            let mut row = Mat::<f64>::zeros(p + 1, len);
            fill_block(
                &problem,
                &scaling,
                r0,
                r1,
                true,
                row.as_mut().transpose_mut(),
            );
            assert_eq!(col, expect);
            assert_eq!(row.transpose().to_owned(), expect);
            match &reference {
                None => reference = Some(expect),
                Some(r) => assert_eq!(r, &expect),
            }
        }
    }
}
