//! Preprocessing shared by every solver: centering by the weighted means,
//! row weighting by `sqrt(w)`, and exact power-of-two column scaling.
//!
//! A solver never materialises a transformed copy of the whole design unless
//! its algorithm needs one; it asks [`fill_block`] for the transformed rows of
//! one block at a time.

use faer::MatMut;

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
pub(crate) fn fill_block(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r0: usize,
    r1: usize,
    with_target: bool,
    mut out: MatMut<'_, f64>,
) {
    let x = crate::linalg::as_faer(&problem.design());
    let y = problem.target();
    let means = &problem.stats.means;
    let p = x.ncols();
    let ym = problem.stats.target_mean;
    let inv_sy = 1.0 / scaling.target_scale;
    for (local, i) in (r0..r1).enumerate() {
        let sw = problem.scaled_weight(i).sqrt();
        for (j, &v) in x.row(i).iter().enumerate() {
            out[(local, j)] = sw * ((v - means[j]) * scaling.inv_scale[j]);
        }
        if with_target {
            out[(local, p)] = sw * ((y[i] - ym) * inv_sy);
        }
    }
}
