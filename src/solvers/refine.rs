//! Iterative refinement of a least-squares solution with residuals in
//! extended precision (opt-in on the QR path).

use faer::Mat;

use crate::error::Result;
use crate::linalg::triangular;
use crate::observe::{Stage, Watch};
use crate::passes::{
    extended::{self, Units},
    qr::tall_skinny_r_with,
};
use crate::prep::{Scaling, Tail};
use crate::problem::Problem;
use crate::scaled::{ldexp, pow2_scale};

/// Settings of iterative refinement, the opt-in path of [`crate::Qr`] to a
/// solution correct to nearly full double precision.
///
/// Each step computes, in double-double arithmetic from the caller's
/// original data (no centering, intercept explicit), how far the current
/// coefficients and residuals are from satisfying the least-squares
/// conditions `e = y - b0 - X b` and `[1 X]^T W e = 0`, and solves for a
/// correction with the triangle `R` of the QR factorisation (Björck's
/// refinement of the augmented system). The coefficients themselves stay
/// `f64`; the extended precision is spent where digits are lost, in the
/// residuals.
///
/// The correction is solved by the semi-normal equations `R^T R d = ...`
/// (one extra pass over the data per step) when the condition estimate
/// `c` of `R` has `c^2 * eps <= 1e-3`, and otherwise by applying `Q^T`
/// through a repeated QR of the design with the correction as last column
/// (a full QR pass per step; `Q` is never stored). Either way the extra
/// memory is two vectors of `n` entries, never a copy of the design.
///
/// Refinement stops when the largest relative change of a coefficient is at
/// most `tolerance` (the intercept's change measured against the size of
/// `mean(x) . b`, the accuracy it can have when the columns sit far from
/// zero), when a step stops shrinking the change at least by half, or
/// after `max_iterations` steps; a step that would grow it is discarded. A fit
/// that stops shrinking counts as converged when its last change is at the
/// rounding level of the correction's sums, `64 eps sqrt(usable rows)`.
/// The fit report's [`IterationReport`](crate::IterationReport) says how it
/// went (with `max_iterations: 0`: no step, not converged, and the gradient
/// measure of the plain QR solution).
///
/// It cannot recover digits that the `f64` inputs no longer hold: it
/// converges to the exact least-squares solution *of the data as given*.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Refinement {
    /// Most refinement steps (default 10).
    pub(crate) max_iterations: usize,
    /// Stop when no coefficient changes by more than this fraction of
    /// itself (default `4 * f64::EPSILON`, a few units in the last place).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) tolerance: f64,
}

impl Default for Refinement {
    fn default() -> Self {
        Refinement {
            max_iterations: 10,
            tolerance: 4.0 * f64::EPSILON,
        }
    }
}

checked_settings!(Refinement {
    max_iterations: usize,
    #[serde(with = "crate::serde_float::float")]
    tolerance: f64,
});

impl Refinement {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        crate::error::check_finite_nonnegative("refinement.tolerance", self.tolerance)?;
        Ok(())
    }
}

impl Refinement {
    /// Refinement at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Most refinement steps (default 10).
        with_max_iterations / max_iterations: plain usize
    }

    crate::settings::setting! {
        /// Stop when no coefficient changes by more than this fraction of
        /// itself (default `4 * f64::EPSILON`, a few units in the last place).
        with_tolerance / tolerance: plain f64
    }
}

/// The refined solution and how the refinement went.
pub(crate) struct Refined {
    /// Intercept and slopes in the caller's units.
    pub intercept: f64,
    pub beta: Vec<f64>,
    pub steps: usize,
    pub converged: bool,
    /// Largest `|a_j^T W e| / (|W^(1/2) a_j| |W^(1/2) (y - ybar)|)` over
    /// the centered columns `a_j` and the constant, at the start of the
    /// last step (or of the refinement, when no step was run).
    pub gradient: f64,
    /// `sum w~ e^2 / sum w~` (scaled weights, residuals in units of the
    /// target scale `s_y`) of the residual estimate at the start of each
    /// step: multiply by `s_y^2` for the caller's loss.
    pub losses: Vec<f64>,
    /// `sum w~ e^2` of the final residuals in extended precision, in
    /// scaled units (multiply by `s_y^2 ws` for the caller's units).
    pub rss_scaled: f64,
    /// Full reads of the design made by the refinement (residuals, defects,
    /// and the QR passes of ill-conditioned problems).
    pub passes: usize,
}

/// Largest relative change of a parameter: `|d_k| / max(|t_k|, |t_k +
/// d_k|, floor_k)` (0 for `d_k = 0`), where `floor_k` is the attainable
/// magnitude of the parameter's error scale (0 for the slopes).
fn relative_change(theta: &[f64], delta: &[f64], floor: &[f64]) -> f64 {
    theta
        .iter()
        .zip(delta)
        .zip(floor)
        .map(|((&t, &d), &fl)| {
            let den = t.abs().max((t + d).abs()).max(fl);
            if d == 0.0 {
                0.0
            } else if den == 0.0 {
                f64::INFINITY
            } else {
                d.abs() / den
            }
        })
        .fold(0.0, f64::max)
}

/// Refines `(intercept, beta)` (caller's units) for `problem`, given the
/// triangle `r11` of its centered, weighted, scaled design and the
/// condition estimate of `r11`.
///
/// Everything runs in the scaled units of `scaling` (`x_ij / s_j`,
/// `y_i / s_y`, exact powers of two; the intercept in units of `s_y`), so
/// that data near the ends of the `f64` range refine like data near 1.
#[allow(clippy::too_many_arguments)]
pub(crate) fn refine(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r11: &Mat<f64>,
    condition: f64,
    settings: &Refinement,
    intercept: f64,
    beta: Vec<f64>,
    watch: &Watch<'_>,
) -> Result<Refined> {
    crate::error::check_finite_nonnegative("refinement.tolerance", settings.tolerance)?;
    let p = problem.columns();
    let with_intercept = problem.has_intercept();
    let units = Units {
        col: scaling.scale.iter().map(|s| 1.0 / s).collect(),
        target: 1.0 / scaling.target_scale,
    };
    // Means in scaled units (exact).
    let means: Vec<f64> = (0..p)
        .map(|j| problem.stats.means[j] * units.col[j])
        .collect();
    let mut gamma: Vec<f64> = (0..p).map(|j| scaling.to_scaled(j, beta[j])).collect();
    let mut b0 = ldexp(intercept, -scaling.target_exp);
    let total_weight = problem.stats.total_weight;
    let semi_normal = condition * condition * f64::EPSILON <= 1e-3;
    // Column norms of the scaled design (the column norms of R).
    let col_norm: Vec<f64> = (0..p)
        .map(|j| {
            (0..=j)
                .map(|i| r11[(i, j)] * r11[(i, j)])
                .sum::<f64>()
                .sqrt()
        })
        .collect();

    let y_norm = crate::problem::centered_target_sum_of_squares(problem, units.target).sqrt();
    let n = problem.rows();
    watch.begin_step(Stage::Refinement, Some(0), n);
    let mut e = extended::residuals(problem, &units, b0, &gamma, watch)?;
    let mut prev = f64::INFINITY;
    // The rounding level of a correction: sums over the usable rows in
    // working precision lose about eps sqrt(n) of their size.
    let noise = 64.0 * f64::EPSILON * (problem.usable_rows() as f64).sqrt().max(1.0);
    let mut out = Refined {
        intercept: 0.0,
        beta: Vec::new(),
        steps: 0,
        converged: false,
        gradient: 0.0,
        losses: Vec::new(),
        rss_scaled: 0.0,
        passes: 1,
    };
    let mut step = 0;
    loop {
        watch.begin_step(Stage::Refinement, Some(step), n);
        let d = extended::defects(problem, &units, b0, &gamma, &e, watch)?;
        out.passes += 1;
        if !d.is_finite() {
            break;
        }
        // Split off the intercept: with s_i = sqrt(w_i), the correction of
        // the fitted constant is c = (s^T W^(1/2) f - g0) / W, and the slopes
        // solve the augmented system of the centered design.
        let c = if with_intercept {
            (d.weighted_f - d.g0) / total_weight
        } else {
            0.0
        };
        let g0 = if with_intercept { d.g0 } else { 0.0 };
        let gc: Vec<f64> = (0..p).map(|j| d.g[j] - means[j] * g0).collect();
        // Gradient measure for the report: |a_j^T W e| / (|a_j| |y - ybar|)
        // over the (weighted, centered) columns and the constant, in [0, 1].
        let e_ss = extended::weighted_sum_of_squares(problem, &e);
        out.losses.push(e_ss / total_weight);
        out.gradient = if y_norm == 0.0 {
            0.0
        } else {
            let mut worst = if with_intercept {
                g0.abs() / (total_weight.sqrt() * y_norm)
            } else {
                0.0
            };
            for j in 0..p {
                let den = col_norm[j] * y_norm;
                if den > 0.0 {
                    worst = worst.max(gc[j].abs() / den);
                }
            }
            worst
        };
        if step >= settings.max_iterations {
            break;
        }
        step += 1;
        let fc_max =
            d.f.iter()
                .enumerate()
                .map(|(i, &fi)| problem.scaled_weight(i).sqrt() * (fi - c).abs())
                .fold(0.0, f64::max);
        // A power of two that brings the correction's data near 1.
        let t = if fc_max > 0.0 {
            pow2_scale(fc_max)
        } else {
            pow2_scale(gc.iter().fold(0.0, |m: f64, v| m.max(v.abs())))
        };
        let gcs: Vec<f64> = gc.iter().map(|g| g / t).collect();
        let mut dgamma: Vec<f64>;
        if semi_normal {
            // R^T R d = Z^T h - g  with h = W^(1/2) (f - c) / t.
            dgamma = (0..p)
                .map(|j| (d.centered_xf[j] - c * d.centered_x[j]) / t - gcs[j])
                .collect();
            triangular::solve_lower(r11.as_ref().transpose(), &mut dgamma);
            triangular::solve_upper(r11.as_ref(), &mut dgamma);
        } else {
            // d = R^-1 (Q^T h - R^-T g), Q^T h from a QR with h as last column.
            let fc: Vec<f64> = d.f.iter().map(|&fi| fi - c).collect();
            watch.begin_step(Stage::Refinement, Some(step), n);
            let rf = tall_skinny_r_with(problem, scaling, Tail::Vector(&fc, 1.0 / t), watch)?;
            out.passes += 1;
            let r = rf.as_ref().submatrix(0, 0, p, p);
            let mut u = gcs;
            triangular::solve_lower(r.transpose(), &mut u);
            dgamma = (0..p).map(|j| rf[(j, p)] - u[j]).collect();
            triangular::solve_upper(r, &mut dgamma);
        }
        let d_gamma: Vec<f64> = dgamma.iter().map(|v| v * t).collect();
        let d_b0 = if with_intercept {
            c - means.iter().zip(&d_gamma).map(|(m, b)| m * b).sum::<f64>()
        } else {
            0.0
        };
        if d_gamma.iter().any(|v| !v.is_finite()) || !d_b0.is_finite() {
            break;
        }
        let mut theta = gamma.clone();
        let mut delta = d_gamma.clone();
        let mut floor = vec![0.0; p];
        if with_intercept {
            theta.push(b0);
            delta.push(d_b0);
            // The intercept is mean(y) - mean(x) . b: it cannot be known
            // better than the rounding of those products, so its change is
            // measured against their size, not its own.
            floor.push(
                means
                    .iter()
                    .zip(&gamma)
                    .map(|(m, g)| (m * g).abs())
                    .sum::<f64>(),
            );
        }
        let change = relative_change(&theta, &delta, &floor);
        out.steps = step;
        if change > prev {
            // Growing corrections: keep the previous iterate. It is the
            // solution if its own correction was at the noise floor.
            out.converged = prev <= noise;
            break;
        }
        for (g, dg) in gamma.iter_mut().zip(&d_gamma) {
            *g += dg;
        }
        b0 += d_b0;
        if change <= settings.tolerance {
            out.converged = true;
            break;
        }
        if change > 0.5 * prev {
            // Stagnation: converged at the noise floor.
            out.converged = change <= noise;
            break;
        }
        watch.begin_step(Stage::Refinement, Some(step), n);
        extended::update_residuals(problem, &units, &mut e, &d.f, c, &d_gamma, watch)?;
        out.passes += 1;
        prev = change;
    }
    watch.begin(Stage::Residuals, n);
    let residuals = extended::residuals(problem, &units, b0, &gamma, watch)?;
    out.passes += 1;
    out.rss_scaled = extended::weighted_sum_of_squares(problem, &residuals);
    out.intercept = ldexp(b0, scaling.target_exp);
    out.beta = (0..p).map(|j| scaling.to_caller(j, gamma[j])).collect();
    Ok(out)
}
