//! Inference and diagnostics for a fitted least-squares model: standard
//! errors, tests and intervals for every parameter, classical or
//! heteroskedasticity-consistent (sandwich) covariance, goodness of fit,
//! intervals for predictions at new rows, and per-row diagnostics.
//!
//! Everything is computed **on demand from the data and the fitted
//! coefficients**, never from a solver's internal state: [`Inference::new`]
//! takes the [`Problem`] and the [`Fit`], recomputes the triangular factor
//! `R` of the centered, weighted, column-scaled design and the target's
//! coordinates `Q^T t` with one blocked QR pass (the same pass the QR
//! solver uses; the design is not copied), and from them the exact
//! least-squares solution, how far the fit's coefficients are from it, and
//! the fit's residual sum of squares (no further pass over the design; the
//! total sum of squares reads the target alone). The `n x n` hat matrix is
//! never formed: leverages come from a blocked pass `Z R^-1` over the rows.
//!
//! Every statistic is formed in the solvers' scaled coordinates (columns
//! and target divided by exact powers of two) and only the final numbers
//! are mapped back to the caller's units, so data near `1e-300` or `1e300`
//! give the same t statistics, p-values and R² as the same data near 1.
//! A number whose true value lies beyond the range of `f64` (a covariance
//! entry, the square of a standard error above about `1.3e154`; a sum of
//! squares of targets near `1e300`) makes inference fail with
//! [`Error::Overflow`]; squares below the smallest `f64` (standard errors
//! below about `1e-162`) are rounded to subnormal numbers or 0 in
//! [`Inference::covariance`] and [`Inference::residual_variance`] only,
//! while the standard errors, t statistics and intervals keep their digits.
//!
//! ## Memory
//!
//! With `q = p + 1`: [`Inference::with_options`] keeps at most about four
//! `q x q` matrices alive (two or three of them the result's), plus one
//! block of rows per worker thread (512 KiB, or 256 rows of a wider design)
//! and, for a sandwich covariance, one `q x q` accumulator per group of
//! rows alive (at most one group per `8 q` rows; see the crate docs,
//! "Memory"). [`Inference::diagnostics`] keeps one `q x q` matrix, a block
//! per thread and a few vectors of `n` numbers; [`Inference::predict`] one
//! `q x q` matrix. On a 6,000 x 2,000 design (92 MiB) this measures 125 MiB
//! for inference with any covariance and 39 MiB for diagnostics
//! (`tests/memory.rs`).
//!
//! ```
//! use leastline::{inference::Inference, Problem, Qr, Solver};
//! use ndarray::array;
//!
//! // Bench test of a spring rig: extension (mm) under load (N) at two temperatures (°C).
//! let x = array![[1.0, 20.0], [2.0, 21.0], [3.0, 19.5], [4.0, 22.0], [5.0, 20.5], [6.0, 23.0]];
//! let y = array![2.1, 3.9, 6.2, 7.8, 10.1, 12.2];
//! let problem = Problem::new(x.view(), y.view())?;
//! let fit = Qr::new().fit(&problem)?;
//! let inference = Inference::new(&problem, &fit)?;
//! let slope = &inference.coefficients[0];
//! assert!(slope.lower < slope.value && slope.value < slope.upper);
//! println!("{inference}");
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## Model and conventions
//!
//! The model is `y_i = b0 + x_i . b + e_i` with independent errors of
//! variance `sigma^2 / w_i` (weights are precisions; unweighted means
//! `w_i = 1`). Rows of weight zero take no part: they do not count in `n`.
//! With `n` usable rows and `k = p + 1` parameters (`p` without an
//! intercept), the residual degrees of freedom are `n - k` and
//! `sigma^2` is estimated by `sum_i w_i e_i^2 / (n - k)`.
//!
//! Parameters are indexed like the design's columns: index `j < p` is
//! column `j`, and the intercept, when fitted, comes **last** (index `p`) in
//! [`Inference::covariance`].
//!
//! ## When inference is refused
//!
//! [`Error::InferenceRefused`] with an [`InferenceRefusal`] that says why:
//! - the fit is **rank deficient** (the report's rank is below the number of
//!   columns, or the design's factor has a negligible pivot): some
//!   combinations of the coefficients are not identified by the data, so
//!   they have no standard error;
//! - the fit is **penalised** (ridge, `report.penalty > 0`): the penalised
//!   estimator is biased towards zero, and a covariance around a biased
//!   estimate does not give intervals with their stated coverage, so no
//!   classical or sandwich standard errors are offered;
//! - an **iterative fit did not converge**: its coefficients are not the
//!   least-squares estimate the formulas assume (a converged iterative fit
//!   is accepted when it is close enough to that estimate, see below);
//! - the fit is **far from the least-squares solution**: inference computes
//!   the exact solution of the problem from its own factorisation and
//!   measures the distance of the fit's coefficients (intercept included)
//!   from it in standard errors, beyond the rounding level of the
//!   comparison ([`Inference::fit_distance`]); above [`MAX_FIT_DISTANCE`]
//!   (0.1: intervals would be shifted by a tenth of their half-width) it
//!   refuses. This catches an iterative fit flagged converged at a loose
//!   tolerance, or a fit made inaccurate by the normal equations;
//! - the fit belongs to **another problem**: the fit's report records the
//!   problem's [`Problem::fingerprint`], and a problem with another one is
//!   refused (also by [`Inference::predict`]'s sibling
//!   [`Inference::diagnostics`]);
//! - no residual degrees of freedom are left (`n <= k`);
//! - HC2 or HC3 was asked for and a row has leverage 1 (to within
//!   `1e-10`): those estimators divide by `1 - h_i`.
//!
//! ## Exact fits
//!
//! When the residuals are exactly zero (`sigma = 0`), every standard error
//! is 0, each estimate's `t` is `+inf` or `-inf` (0 for an estimate of 0)
//! with p-value 0, the overall F statistic is `+inf`, and the
//! log-likelihood is `+inf` (AIC and BIC `-inf`). A fit exact to the
//! precision of `f64` without being exactly so (R² is 1 to rounding) can
//! likewise have a `t` or F statistic beyond the range of `f64`: `+-inf`
//! too. A sandwich covariance can give a standard error of exactly 0 when
//! the residuals vanish at every row where a parameter has leverage; its
//! `t` is then `+-inf` (and the overall F statistic may be `+inf`). These
//! are the only non-finite numbers inference returns; with the
//! `serde` feature they are written as the strings `"inf"` and `"-inf"`
//! and read back exactly.
//!
//! ## Cautions
//!
//! The intervals and p-values assume the model is right: a linear mean,
//! independent errors, and (for the classical covariance and for prediction
//! intervals) a constant error variance up to the weights and roughly normal
//! errors. Look at the residuals ([`Inference::diagnostics`]) before
//! trusting them. A small p-value is evidence of association in these data,
//! not of cause and effect.

mod diagnostics;
mod distributions;
pub(crate) mod from_state;
mod goodness;
mod predict;
mod summary;

pub use diagnostics::Diagnostics;
pub use distributions::{
    fisher_f_quantile, fisher_f_tails, fisher_f_upper_quantile, normal_quantile, normal_tails,
    student_t_quantile, student_t_tails, Tails,
};
pub use goodness::{Collinearity, GoodnessOfFit, OverallTest};
pub use predict::Predictions;

pub use crate::vocabulary::InferenceRefusal;

use faer::Mat;
use ndarray::Array2;

use crate::error::{Error, Result};
use crate::linalg::products::{congruence_into, solve_upper_transposed};
use crate::linalg::triangular;
use crate::passes::leverage::{row_pass, RowPassSpec};
use crate::passes::qr::tall_skinny_r;
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp};
use crate::solver::Fit;

/// `1 - h_i` at or below this counts as a leverage of 1.
pub(crate) const LEVERAGE_ONE: f64 = 1e-10;

/// Largest [`Inference::fit_distance`] accepted: a fit whose coefficients
/// lie further from the exact least-squares solution (in standard errors,
/// beyond rounding) is refused with [`InferenceRefusal::FarFromSolution`].
pub const MAX_FIT_DISTANCE: f64 = 0.1;

pub use crate::vocabulary::CovarianceKind;

/// The power of `1 - h_i` in a sandwich covariance's row weights (`None`
/// for the classical covariance).
fn leverage_power(kind: &CovarianceKind) -> Option<i32> {
    match kind {
        CovarianceKind::Classical => None,
        CovarianceKind::Hc0 | CovarianceKind::Hc1 => Some(0),
        CovarianceKind::Hc2 => Some(1),
        CovarianceKind::Hc3 => Some(2),
    }
}

/// Settings of an [`Inference`]: the covariance and the confidence level.
///
/// ```
/// use leastline::inference::{CovarianceKind, InferenceOptions};
/// let options = InferenceOptions::new().with_covariance(CovarianceKind::Hc3).with_level(0.9);
/// assert_eq!(options.level(), 0.9);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct InferenceOptions {
    /// The covariance of the estimates (default [`CovarianceKind::Classical`]).
    pub(crate) covariance: CovarianceKind,
    /// Confidence level of every interval, strictly between 0 and 1 (default 0.95).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) level: f64,
}

checked_settings!(InferenceOptions {
    covariance: CovarianceKind,
    #[serde(with = "crate::serde_float::float")]
    level: f64,
});

impl InferenceOptions {
    /// Checks the settings (as inference does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(Error::InvalidParameter {
                name: "level",
                value: self.level,
                reason: "must lie strictly between 0 and 1",
            });
        }
        Ok(())
    }
}

impl Default for InferenceOptions {
    fn default() -> Self {
        InferenceOptions {
            covariance: CovarianceKind::Classical,
            level: 0.95,
        }
    }
}

impl InferenceOptions {
    crate::settings::setting! {
        /// The covariance of the estimates (default [`CovarianceKind::Classical`]).
        with_covariance / covariance: plain CovarianceKind
    }

    crate::settings::setting! {
        /// Confidence level of every interval, strictly between 0 and 1 (default 0.95).
        with_level / level: plain f64
    }
}

impl InferenceOptions {
    /// Classical covariance at the 95% level; change them with the
    /// `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }
}

fn refuse(refusal: InferenceRefusal) -> Error {
    Error::InferenceRefused { refusal }
}

/// Inference for one parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct Estimate {
    /// The estimate, in the caller's units.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub value: f64,
    /// Its standard error under the selected covariance.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub std_error: f64,
    /// `value / std_error`, formed in scaled units (so it does not depend
    /// on the units of the data); `+inf` or `-inf` when the standard error
    /// is 0 and the value is not (an exact fit; or a sandwich covariance
    /// whose residuals vanish wherever this parameter has leverage), or
    /// when the fit is exact to the precision of `f64` and the ratio
    /// exceeds the range (R² is then 1); 0 when value and standard error
    /// are both 0.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub t: f64,
    /// Two-sided p-value of `value = 0` against Student's t with the
    /// residual degrees of freedom.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub p_value: f64,
    /// Lower end of the confidence interval at the chosen level.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub lower: f64,
    /// Upper end of the confidence interval at the chosen level.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub upper: f64,
}

/// `a / b` with `0 / 0 = 0` and `a / 0 = ±inf`.
pub(crate) fn ratio(a: f64, b: f64) -> f64 {
    if b == 0.0 {
        if a == 0.0 {
            0.0
        } else {
            a.signum() * f64::INFINITY
        }
    } else {
        a / b
    }
}

/// What prediction and diagnostics need, kept in scaled coordinates.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
struct Basis {
    /// `p x p` upper-triangular factor of the scaled centered design.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array2"))]
    r: Array2<f64>,
    /// Column divisors (powers of two).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    scale: Vec<f64>,
    /// Target divisor (a power of two).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    target_scale: f64,
    /// Internal weight divisor (a power of two).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    weight_scale: f64,
    /// Sum of the scaled weights.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    total_weight: f64,
    /// Column means used for centering (zeros without intercept).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    means: Vec<f64>,
    /// Weighted mean of the target (zero without intercept).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    target_mean: f64,
    /// The middle matrix of a sandwich covariance in orthonormal
    /// coordinates (`q x q`, scaled units divided by `2^meat_exp`); `None`
    /// for the classical covariance, whose middle matrix is `sigma~^2 I`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_array2"))]
    meat: Option<Array2<f64>>,
    /// The power of two the middle matrix is divided by.
    meat_exp: i32,
    /// Residual standard deviation in scaled units.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    sigma_scaled: f64,
    /// Slopes in scaled coordinates.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    gamma: Vec<f64>,
    /// The fingerprint of the problem.
    fingerprint: u64,
}

/// Inference for a fitted least-squares model: every number is a public
/// field; [`std::fmt::Display`] prints a plain-text summary.
///
/// See the [module documentation](crate::inference) for the model, the
/// conventions, the cautions and the memory used. Deserialised values
/// (feature `serde`) are checked for consistent sizes and finite numbers.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(
    feature = "serde",
    serde(
        try_from = "serde_check::InferenceData",
        into = "serde_check::InferenceData"
    )
)]
#[non_exhaustive]
pub struct Inference {
    /// The settings used.
    pub options: InferenceOptions,
    /// The solver that produced the fit.
    pub solver: String,
    /// A name per column for the summary (default `x0`, `x1`, ...).
    pub names: Vec<String>,
    /// One entry per column of the design.
    pub coefficients: Vec<Estimate>,
    /// The intercept, when fitted.
    pub intercept: Option<Estimate>,
    /// Covariance of the estimates in the caller's units, `k x k`: columns
    /// in the design's order, then the intercept (when fitted) last.
    /// Entries are squares of standard errors: below about `1e-308` they
    /// are subnormal or 0 (see the module docs).
    pub covariance: Array2<f64>,
    /// `sigma^2`, the residual variance `sum w e^2 / df` (caller units),
    /// whatever the covariance kind (subnormal or 0 below about `1e-308`).
    pub residual_variance: f64,
    /// `sigma`, its square root (formed in scaled units, so it keeps its
    /// digits when the variance underflows).
    pub residual_sd: f64,
    /// Residual degrees of freedom `n - k`.
    pub residual_df: usize,
    /// Rows with non-zero weight, `n`.
    pub usable_rows: usize,
    /// Parameters `k`: columns plus one for the intercept.
    pub parameters: usize,
    /// The Student t quantile used for every interval at the chosen level.
    pub critical_value: f64,
    /// How far the fit's coefficients (intercept included) are from the
    /// exact least-squares solution of the problem, in standard errors: the
    /// norm `sqrt(d^T C^-1 d)` of the difference `d` under the classical
    /// covariance `C` of the exact solution (so each coefficient is at most
    /// this many of its standard errors away), less the rounding level of
    /// the comparison (and never below 0). At most [`MAX_FIT_DISTANCE`].
    pub fit_distance: f64,
    /// R², the overall test and the likelihood-based criteria.
    pub goodness: GoodnessOfFit,
    /// Variance inflation factors and condition number.
    pub collinearity: Collinearity,
    basis: Basis,
}

impl Fit {
    /// Inference for this fit with the default options (classical
    /// covariance, 95% intervals); shorthand for [`Inference::new`].
    ///
    /// # Errors
    /// As [`Inference::with_options`].
    pub fn inference(&self, problem: &Problem<'_>) -> Result<Inference> {
        Inference::new(problem, self)
    }
}

/// The exponents mapping each parameter from scaled to caller units: a
/// slope `b_j = gamma_j 2^(e_y - e_j)`, the intercept `b0 = b0~ 2^e_y`.
fn unit_exponents(scaling: &Scaling, p: usize, intercept: bool) -> Vec<i32> {
    let mut u: Vec<i32> = (0..p)
        .map(|j| scaling.target_exp - scaling.scale_exp[j])
        .collect();
    if intercept {
        u.push(scaling.target_exp);
    }
    u
}

/// Euclidean norm without overflow or underflow of the squares.
pub(crate) fn norm(v: impl Iterator<Item = f64> + Clone) -> f64 {
    let big = v.clone().fold(0.0_f64, |m, x| m.max(x.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    let e = exponent(big);
    let s: f64 = v.map(|x| ldexp(x, -e).powi(2)).sum();
    ldexp(s.sqrt(), e)
}

/// Fills the intercept's row of `v` (the map from orthonormal coordinates
/// to slopes and intercept in scaled units): `-a^T R^-1`, then
/// `1 / sqrt(W)`, with `a` the scaled column means.
fn intercept_row(v: &mut Mat<f64>, r: faer::MatRef<'_, f64>, a: &[f64], sqrt_w: f64) {
    let p = r.ncols();
    let mut t = a.to_vec();
    solve_upper_transposed(r, &mut t);
    for (c, tc) in t.iter().enumerate() {
        v[(p, c)] = -tc;
    }
    v[(p, p)] = 1.0 / sqrt_w;
}

/// Maps `covariance` (scaled units divided by `2^cov_exp`) to caller units
/// in place, with the exponents `units` of every parameter (columns, then
/// the intercept), and forms every [`Estimate`] at the confidence level:
/// `values` are the slopes and the intercept (when fitted) in caller units,
/// `scaled` the slopes and the intercept in scaled units. Returns the
/// slopes' estimates, the intercept's and the t quantile.
fn estimates_from_covariance(
    covariance: &mut Array2<f64>,
    cov_exp: i32,
    units: &[i32],
    values: (&[f64], Option<f64>),
    scaled: (&[f64], f64),
    level: f64,
    dff: f64,
) -> Result<(Vec<Estimate>, Option<Estimate>, f64)> {
    let variances_m: Vec<f64> = (0..units.len()).map(|i| covariance[[i, i]]).collect();
    for ((i, j), c) in covariance.indexed_iter_mut() {
        *c = ldexp(*c, units[i] + units[j] + cov_exp);
    }
    if covariance.iter().any(|c| !c.is_finite()) {
        return Err(Error::Overflow {
            what: "covariance matrix",
        });
    }
    let critical = student_t_quantile(0.5 + 0.5 * level, dff)?;
    let caller: Vec<f64> = values.0.iter().copied().chain(values.1).collect();
    let inner: Vec<f64> = scaled
        .0
        .iter()
        .copied()
        .chain(values.1.map(|_| scaled.1))
        .collect();
    let mut estimates = Vec::with_capacity(caller.len());
    for i in 0..caller.len() {
        // se~ = se_m 2^(cov_exp / 2); t and the interval formed from
        // se_m and the exponents (nothing underflows on the way).
        let se_m = variances_m[i].max(0.0).sqrt();
        let half = cov_exp / 2;
        let t = ldexp(ratio(inner[i], se_m), -half);
        let se = ldexp(se_m, units[i] + half);
        let margin = critical * se;
        let e = Estimate {
            value: caller[i],
            std_error: se,
            t,
            p_value: distributions::t_two_sided_p(t, dff),
            lower: caller[i] - margin,
            upper: caller[i] + margin,
        };
        if !(e.lower.is_finite() && e.upper.is_finite()) {
            return Err(Error::Overflow {
                what: "confidence interval",
            });
        }
        estimates.push(e);
    }
    let intercept = if values.1.is_some() {
        estimates.pop()
    } else {
        None
    };
    Ok((estimates, intercept, critical))
}

/// The residual variance and its square root in caller units from
/// `sigma~ = sigma_m 2^sigma_exp` (scaled units), the target's exponent
/// `ey` and the weights' `ws_exp`: `sigma^2 = sigma~^2 s_y^2 ws`, with
/// `sqrt(ws)` split into an even power.
fn residual_spread(sigma_m: f64, sigma_exp: i32, ey: i32, ws_exp: i32) -> Result<(f64, f64)> {
    let variance_exp = 2 * ey + ws_exp;
    let residual_variance = ldexp(sigma_m * sigma_m, variance_exp + 2 * sigma_exp);
    let residual_sd = ldexp(
        sigma_m * f64::from(1 << ws_exp.rem_euclid(2)).sqrt(),
        ey + ws_exp.div_euclid(2) + sigma_exp,
    );
    if !residual_variance.is_finite() || !residual_sd.is_finite() {
        return Err(Error::Overflow {
            what: "residual variance",
        });
    }
    Ok((residual_variance, residual_sd))
}

impl Inference {
    /// Inference with the default options: classical covariance, 95% intervals.
    ///
    /// # Errors
    /// As [`Inference::with_options`].
    pub fn new(problem: &Problem<'_>, fit: &Fit) -> Result<Self> {
        Self::with_options(problem, fit, InferenceOptions::new())
    }

    /// Inference for `fit`, which must have been fitted to `problem`.
    ///
    /// Cost: one blocked QR pass over the design (about `2 n p^2` flops)
    /// and one read of the target; a sandwich covariance adds one more pass
    /// (`about 2 n p^2`). The design is never copied. The residual sum of
    /// squares is the fit's own (refined fits form it in extended
    /// precision) when it agrees with the factorisation's to rounding.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a level outside `(0, 1)`;
    /// [`Error::ColumnCountMismatch`] when the fit has a different number of
    /// columns than the problem; [`Error::Overflow`] for a covariance, sum
    /// of squares or interval end beyond the range of `f64`;
    /// [`Error::InferenceRefused`] for a rank-deficient, penalised or
    /// unconverged fit, a fit far from the least-squares solution, no
    /// residual degrees of freedom, a leverage of 1 under HC2/HC3, or a fit
    /// of another problem.
    pub fn with_options(
        problem: &Problem<'_>,
        fit: &Fit,
        options: InferenceOptions,
    ) -> Result<Self> {
        if !(options.level > 0.0 && options.level < 1.0) {
            return Err(Error::InvalidParameter {
                name: "level",
                value: options.level,
                reason: "must lie strictly between 0 and 1",
            });
        }
        let p = problem.columns();
        if fit.model.columns() != p {
            return Err(Error::ColumnCountMismatch {
                expected: fit.model.columns(),
                found: p,
            });
        }
        let report = &fit.report;
        if report.usable_rows != problem.usable_rows() || report.columns != p {
            return Err(refuse(InferenceRefusal::DifferentProblem {
                fit_rows: report.usable_rows,
                problem_rows: problem.usable_rows(),
            }));
        }
        if report.fingerprint != problem.fingerprint() {
            return Err(refuse(InferenceRefusal::DifferentData {
                recorded: report.fingerprint,
                given: problem.fingerprint(),
            }));
        }
        if report.penalty != 0.0 {
            return Err(refuse(InferenceRefusal::Penalised {
                penalty: report.penalty,
            }));
        }
        if let Some(it) = &report.iterations {
            if !it.converged {
                return Err(refuse(InferenceRefusal::NotConverged {
                    iterations: it.iterations,
                }));
            }
        }
        if let Some(rank) = report.rank {
            if rank < p {
                return Err(refuse(InferenceRefusal::RankDeficient { rank, columns: p }));
            }
        }
        let beta: Vec<f64> = fit.model.coefficients().to_vec();
        let intercept_value = fit.model.intercept();
        if beta.iter().any(|b| !b.is_finite()) || !intercept_value.is_finite() {
            return Err(Error::Overflow {
                what: "coefficient vector",
            });
        }
        let has_intercept = problem.has_intercept();
        let k = p + usize::from(has_intercept);
        let n = problem.usable_rows();
        if n <= k {
            return Err(refuse(InferenceRefusal::NoResidualDegreesOfFreedom {
                usable_rows: n,
                parameters: k,
            }));
        }
        let df = n - k;
        let dff = df as f64;

        let tolerance = problem.default_rank_tolerance();
        let scaling = Scaling::new(problem, tolerance);
        // Memory: at most five (p + 1) x (p + 1) matrices are alive at once,
        // three of them the result's (see the module docs).
        crate::alloc::reserve_matrices("inference matrices", k + 1, k + 1, 5)?;
        let (basis_r, qty, rnorm) = {
            let full = tall_skinny_r(problem, &scaling, true, &crate::observe::Watch::quiet())?;
            (
                Array2::from_shape_fn((p, p), |(i, j)| full[(i, j)]),
                (0..p).map(|i| full[(i, p)]).collect::<Vec<f64>>(),
                full[(p, p)].abs(),
            )
        };
        let r = crate::linalg::as_faer(&basis_r.view());
        let dependent = crate::prep::dependent_columns(problem, &scaling, r, tolerance);
        if !dependent.is_empty() {
            return Err(refuse(InferenceRefusal::RankDeficient {
                rank: p - dependent.len(),
                columns: p,
            }));
        }
        // The unit-column condition number first: its SVD workspace is the
        // largest of the pass, and nothing else of size p^2 is alive yet.
        let unit_condition = goodness::condition_number(r)?;
        // V maps orthonormal coordinates to (slopes, intercept) in scaled
        // units: R^-1 on the slopes, the intercept's row from the means
        // (filled below).
        let q = k;
        let mut v = Mat::<f64>::zeros(q, q);
        triangular::inverse_upper_into(v.as_mut().submatrix_mut(0, 0, p, p), r);
        let condition = if p == 0 {
            1.0
        } else {
            triangular::norm1(r) * triangular::norm1(v.as_ref().submatrix(0, 0, p, p))
        };
        let collinearity = goodness::collinearity(
            r,
            v.as_ref().submatrix(0, 0, p, p),
            unit_condition,
            has_intercept,
        );
        let ey = scaling.target_exp;
        let ws_exp = exponent(problem.stats.weight_scale);
        let w_scaled = problem.stats.total_weight;
        let gamma: Vec<f64> = (0..p).map(|j| scaling.to_scaled(j, beta[j])).collect();
        // Scaled means a_j = m_j / s_j (below about 2^54 for a column that
        // is not constant) and the intercept in units of s_y.
        let a: Vec<f64> = (0..p)
            .map(|j| ldexp(problem.stats.means[j], -scaling.scale_exp[j]))
            .collect();
        let ybar = ldexp(problem.stats.target_mean, -ey);
        let b0 = ldexp(intercept_value, -ey);

        // Distance from the exact solution: with u = Q^T t - R gamma (the
        // slopes' part in orthonormal coordinates) and c0 the intercept's
        // departure from mean(y) - mean(x) . b, the fit's residual sum of
        // squares is |t - Z gamma|^2 + W c0^2 = rnorm^2 + |u_full|^2.
        let mut u: Vec<f64> = qty.clone();
        for (i, ui) in u.iter_mut().enumerate() {
            for j in i..p {
                *ui -= r[(i, j)] * gamma[j];
            }
        }
        let ag: f64 = a.iter().zip(&gamma).map(|(x, g)| x * g).sum();
        let c0 = if has_intercept { b0 - (ybar - ag) } else { 0.0 };
        let sqrt_w = w_scaled.sqrt();
        let dist_num = norm(u.iter().copied().chain(std::iter::once(c0 * sqrt_w)));
        let t_norm = norm(qty.iter().copied().chain(std::iter::once(rnorm)));
        let rg_norm = norm((0..p).map(|i| (i..p).map(|j| (r[(i, j)] * gamma[j]).abs()).sum()));
        let intercept_size = if has_intercept {
            (ybar.abs()
                + a.iter()
                    .zip(&gamma)
                    .map(|(x, g)| (x * g).abs())
                    .sum::<f64>()
                + b0.abs())
                * sqrt_w
        } else {
            0.0
        };
        let floor = 2.0
            * (p + 1) as f64
            * f64::EPSILON
            * (condition.min(1.0 / f64::EPSILON) * (t_norm + rg_norm) + intercept_size);
        // The fit's residual norm |t - Z gamma| in scaled units: ours from
        // the factor, or the fit's own when it agrees to rounding (refined
        // fits form it in extended precision). Norms, not squares, so that
        // nothing underflows.
        let rss_norm_ours = rnorm.hypot(dist_num);
        let rss_fit = ldexp(report.residual_sum_of_squares, -(2 * ey + ws_exp));
        let rss_norm_fit = rss_fit.sqrt();
        let tolerance_norm = floor + 2.0 * f64::EPSILON * rss_norm_ours;
        // (The fit's value is used when it is 0 or keeps every digit in
        // scaled units: a subnormal one has lost some.)
        let rss_norm = if rss_fit.is_finite()
            && (rss_fit == 0.0 || rss_fit >= f64::MIN_POSITIVE / f64::EPSILON)
            && (rss_norm_fit - rss_norm_ours).abs() <= tolerance_norm
        {
            rss_norm_fit
        } else {
            rss_norm_ours
        };
        if !rss_norm.is_finite() {
            return Err(Error::Overflow {
                what: "residual sum of squares",
            });
        }
        // sigma~ = sigma_m 2^sigma_exp with sigma_m in [1, 2) (or 0).
        let sigma_scaled = rss_norm / dff.sqrt();
        let sigma_exp = exponent(sigma_scaled);
        let sigma_m = ldexp(sigma_scaled, -sigma_exp);
        // The distance is measured in standard errors of the exact fit
        // (whose residual sum of squares is rnorm^2: the fit's own is larger
        // by the distance itself).
        let excess = (dist_num - floor).max(0.0);
        let fit_distance = if excess == 0.0 {
            0.0
        } else {
            ratio(excess, rnorm / dff.sqrt())
        };
        // (NaN cannot arise here; the comparison refuses it all the same.)
        if fit_distance.is_nan() || fit_distance > MAX_FIT_DISTANCE {
            return Err(refuse(InferenceRefusal::FarFromSolution {
                distance: fit_distance,
                bound: MAX_FIT_DISTANCE,
            }));
        }

        // Middle matrix in orthonormal coordinates (None: sigma~^2 I), kept
        // as the result's array and viewed by faer. The residuals are
        // divided by 2^residual_exp (near the largest) first, so that the
        // products of small residuals and small leverage coordinates do not
        // underflow; the covariance carries the factor back as an exponent.
        let residual_exp = exponent(rss_norm.max(f64::MIN_POSITIVE));
        let meat: Option<Array2<f64>> = match leverage_power(&options.covariance) {
            None => None,
            Some(power) => {
                let pass = row_pass(
                    problem,
                    &scaling,
                    RowPassSpec {
                        r,
                        gamma: &gamma,
                        intercept_weight: has_intercept.then_some(w_scaled),
                        meat_power: Some(power),
                        residual_scale: crate::scaled::pow2(residual_exp.max(-1022)),
                        keep_rows: false,
                        leverage_one: LEVERAGE_ONE,
                    },
                )?;
                if power > 0 {
                    if let Some((row, h)) = pass.max_leverage {
                        if 1.0 - h <= LEVERAGE_ONE {
                            return Err(refuse(InferenceRefusal::LeverageOne { row, leverage: h }));
                        }
                    }
                }
                let c = if options.covariance == CovarianceKind::Hc1 {
                    n as f64 / dff
                } else {
                    1.0
                };
                pass.meat
                    .map(|m| Array2::from_shape_fn((q, q), |(i, j)| c * m[(i, j)]))
                    .or_else(|| Some(Array2::zeros((q, q))))
            }
        };

        if has_intercept {
            intercept_row(&mut v, r, &a, sqrt_w);
        }
        // The covariance, formed in scaled units (up to the power of two
        // 2^cov_exp) straight into the result's array (by tiles: no other
        // q x q matrix), then mapped back.
        let mut covariance = Array2::<f64>::zeros((q, q));
        let cov_exp = if meat.is_some() {
            2 * residual_exp
        } else {
            2 * sigma_exp
        };
        congruence_into(
            crate::linalg::as_faer_mut(&mut covariance),
            v.as_ref(),
            meat.as_ref().map(|m| crate::linalg::as_faer(&m.view())),
            if meat.is_some() {
                1.0
            } else {
                sigma_m * sigma_m
            },
        );
        drop(v);
        let units = unit_exponents(&scaling, p, has_intercept);
        let (coefficients, intercept, critical) = estimates_from_covariance(
            &mut covariance,
            cov_exp,
            &units,
            (&beta, has_intercept.then_some(intercept_value)),
            (&gamma, b0),
            options.level,
            dff,
        )?;

        let (residual_variance, residual_sd) = residual_spread(sigma_m, sigma_exp, ey, ws_exp)?;
        let inv_sy = 1.0 / scaling.target_scale;
        let tss_scaled = crate::problem::centered_target_sum_of_squares(problem, inv_sy);
        let goodness = goodness::compute(goodness::Inputs {
            n,
            centered: has_intercept,
            log_weights: goodness::log_weights(problem),
            r,
            gamma: &gamma,
            meat: meat.as_ref().map(|m| crate::linalg::as_faer(&m.view())),
            meat_exp: 2 * residual_exp,
            sigma_scaled,
            rss_norm,
            tss_scaled,
            t_norm,
            sum_exp: 2 * ey + ws_exp,
            df,
            parameters: k,
        })?;

        let basis = Basis {
            r: basis_r,
            scale: scaling.scale.clone(),
            target_scale: scaling.target_scale,
            weight_scale: problem.stats.weight_scale,
            total_weight: w_scaled,
            means: problem.stats.means.clone(),
            target_mean: problem.stats.target_mean,
            meat,
            meat_exp: 2 * residual_exp,
            sigma_scaled,
            gamma,
            fingerprint: problem.fingerprint(),
        };
        Ok(Inference {
            options,
            solver: report.solver.clone(),
            names: match problem.names() {
                Some(names) => names.to_vec(),
                None if fit.model.columns() == p => fit.model.names().to_vec(),
                None => crate::model::default_names(p),
            },
            coefficients,
            intercept,
            covariance,
            residual_variance,
            residual_sd,
            residual_df: df,
            usable_rows: n,
            parameters: k,
            critical_value: critical,
            fit_distance,
            goodness,
            collinearity,
            basis,
        })
    }

    /// Replaces the column names used by the summary (an inference takes
    /// those of its problem, see [`crate::ProblemBuilder::with_names`], or
    /// else those of the fit's model; this overrides them).
    ///
    /// # Errors
    /// [`Error::NameCountMismatch`] unless there is one name per column;
    /// [`Error::InvalidName`] for an empty or repeated name.
    pub fn with_names<S: Into<String>>(
        mut self,
        names: impl IntoIterator<Item = S>,
    ) -> Result<Self> {
        let names: Vec<String> = names.into_iter().map(Into::into).collect();
        crate::model::check_names(&names, self.coefficients.len())?;
        self.names = names;
        Ok(self)
    }

    /// Standard errors of every parameter (columns, then the intercept).
    pub fn std_errors(&self) -> Vec<f64> {
        self.estimates().map(|e| e.std_error).collect()
    }

    /// Every parameter's estimate in covariance order (columns, then the intercept).
    pub fn estimates(&self) -> impl Iterator<Item = &Estimate> {
        self.coefficients.iter().chain(self.intercept.iter())
    }

    fn basis_r(&self) -> Mat<f64> {
        let p = self.basis.r.nrows();
        Mat::from_fn(p, p, |i, j| self.basis.r[[i, j]])
    }

    /// The middle matrix (`None`: `sigma~^2 I`).
    fn basis_meat(&self) -> Option<Mat<f64>> {
        self.basis.meat.as_ref().map(|m| {
            let q = m.nrows();
            Mat::from_fn(q, q, |i, j| m[[i, j]])
        })
    }

    fn check_problem(&self, problem: &Problem<'_>) -> Result<Scaling> {
        let p = self.coefficients.len();
        if problem.columns() != p {
            return Err(Error::ColumnCountMismatch {
                expected: p,
                found: problem.columns(),
            });
        }
        if problem.fingerprint() != self.basis.fingerprint {
            return Err(refuse(InferenceRefusal::DifferentData {
                recorded: self.basis.fingerprint,
                given: problem.fingerprint(),
            }));
        }
        Ok(Scaling::new(problem, problem.default_rank_tolerance()))
    }
}

#[cfg(feature = "serde")]
mod serde_check {
    //! Deserialised inference is untrusted: every size and number is
    //! checked before an [`Inference`] exists.
    use super::*;

    pub(super) const FORMAT: &str = "leastline-inference";
    pub(super) const VERSION: u32 = 1;

    /// The saved form: the public fields, the private basis, and a format
    /// tag and version at the head.
    #[derive(serde::Serialize, serde::Deserialize)]
    pub(super) struct InferenceData {
        format: String,
        version: u64,
        options: InferenceOptions,
        solver: String,
        names: Vec<String>,
        coefficients: Vec<Estimate>,
        intercept: Option<Estimate>,
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array2"))]
        covariance: Array2<f64>,
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        residual_variance: f64,
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        residual_sd: f64,
        residual_df: usize,
        usable_rows: usize,
        parameters: usize,
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        critical_value: f64,
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        fit_distance: f64,
        goodness: GoodnessOfFit,
        collinearity: Collinearity,
        basis: Basis,
    }

    impl From<Inference> for InferenceData {
        fn from(i: Inference) -> Self {
            InferenceData {
                format: FORMAT.to_string(),
                version: u64::from(VERSION),
                options: i.options,
                solver: i.solver,
                names: i.names,
                coefficients: i.coefficients,
                intercept: i.intercept,
                covariance: i.covariance,
                residual_variance: i.residual_variance,
                residual_sd: i.residual_sd,
                residual_df: i.residual_df,
                usable_rows: i.usable_rows,
                parameters: i.parameters,
                critical_value: i.critical_value,
                fit_distance: i.fit_distance,
                goodness: i.goodness,
                collinearity: i.collinearity,
                basis: i.basis,
            }
        }
    }

    fn bad(reason: &'static str) -> Error {
        Error::InvalidParameter {
            name: "inference",
            value: f64::NAN,
            reason,
        }
    }

    fn power_of_two(v: f64) -> bool {
        v > 0.0 && v.is_finite() && crate::scaled::pow2(exponent(v)) == v
    }

    impl TryFrom<InferenceData> for Inference {
        type Error = Error;

        fn try_from(d: InferenceData) -> Result<Self> {
            crate::serde_float::check_tag("inference", FORMAT, VERSION, &d.format, d.version)?;
            crate::model::check_names(&d.names, d.coefficients.len())?;
            let p = d.coefficients.len();
            let q = p + usize::from(d.intercept.is_some());
            let b = &d.basis;
            let finite = |v: &[f64]| v.iter().all(|x| x.is_finite());
            let shapes = d.names.len() == p
                && d.parameters == q
                && d.covariance.dim() == (q, q)
                && b.r.dim() == (p, p)
                && b.scale.len() == p
                && b.means.len() == p
                && b.gamma.len() == p
                && b.meat.as_ref().is_none_or(|m| m.dim() == (q, q))
                && d.collinearity.vif.len() == p
                && d.usable_rows > q
                && d.residual_df == d.usable_rows - q;
            if !shapes {
                return Err(bad("inconsistent sizes in a deserialised inference"));
            }
            let numbers = finite(d.covariance.as_slice().unwrap_or(&[f64::NAN]))
                && finite(b.r.as_slice().unwrap_or(&[f64::NAN]))
                && b.meat
                    .as_ref()
                    .is_none_or(|m| finite(m.as_slice().unwrap_or(&[f64::NAN])))
                && finite(&b.means)
                && finite(&b.gamma)
                && b.scale.iter().all(|&s| power_of_two(s))
                && power_of_two(b.target_scale)
                && power_of_two(b.weight_scale)
                && b.total_weight > 0.0
                && b.total_weight.is_finite()
                && b.target_mean.is_finite()
                && b.sigma_scaled >= 0.0
                && b.sigma_scaled.is_finite()
                && b.meat_exp.unsigned_abs() <= 4400
                && (0..p).all(|i| b.r[(i, i)] != 0.0)
                && d.critical_value.is_finite()
                && d.critical_value > 0.0
                && d.residual_variance.is_finite()
                && d.residual_sd.is_finite()
                && d.fit_distance.is_finite()
                && d.options.level > 0.0
                && d.options.level < 1.0
                && d.coefficients.iter().chain(d.intercept.iter()).all(|e| {
                    e.value.is_finite()
                        && e.std_error.is_finite()
                        && e.lower.is_finite()
                        && e.upper.is_finite()
                        && !e.t.is_nan()
                        && e.p_value.is_finite()
                });
            if !numbers {
                return Err(bad("a number in a deserialised inference is out of range"));
            }
            Ok(Inference {
                options: d.options,
                solver: d.solver,
                names: d.names,
                coefficients: d.coefficients,
                intercept: d.intercept,
                covariance: d.covariance,
                residual_variance: d.residual_variance,
                residual_sd: d.residual_sd,
                residual_df: d.residual_df,
                usable_rows: d.usable_rows,
                parameters: d.parameters,
                critical_value: d.critical_value,
                fit_distance: d.fit_distance,
                goodness: d.goodness,
                collinearity: d.collinearity,
                basis: d.basis,
            })
        }
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::solver::IterationReport;
    use crate::{Qr, Solver};
    use ndarray::array;

    #[test]
    fn unconverged_iterative_fits_are_refused_and_converged_ones_accepted() {
        let x = array![[1.0], [2.0], [3.0], [4.0], [5.0]];
        let y = array![2.0, 4.1, 5.9, 8.2, 9.9];
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let mut fit = Qr::new().fit(&problem).unwrap();
        let mut it = IterationReport {
            iterations: 40,
            converged: false,
            stopped_by_observer: false,
            final_loss: 0.0,
            gradient_norm: 1e-3,
            step: 0.1,
            loss_history: Vec::new(),
            passes: 41,
            restarts: 0,
        };
        fit.report.iterations = Some(it.clone());
        assert_eq!(
            Inference::new(&problem, &fit).unwrap_err(),
            Error::InferenceRefused {
                refusal: InferenceRefusal::NotConverged { iterations: 40 }
            }
        );
        it.converged = true;
        fit.report.iterations = Some(it);
        assert!(Inference::new(&problem, &fit).is_ok());
    }

    #[test]
    fn intercept_only_model_has_no_overall_test() {
        let x = ndarray::Array2::<f64>::zeros((4, 0));
        let y = array![1.0, 2.0, 4.0, 3.0];
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let fit = Qr::new().fit(&problem).unwrap();
        let inf = Inference::new(&problem, &fit).unwrap();
        let b0 = inf.intercept.unwrap();
        assert_eq!(b0.value, 2.5);
        // Standard error of a mean: s / sqrt(n), s^2 = 5 / 3 (exact identity).
        assert!((b0.std_error - (5.0_f64 / 3.0 / 4.0).sqrt()).abs() < 1e-15);
        assert!(inf.goodness.overall.is_none());
        assert_eq!(inf.goodness.r_squared, 0.0);
        let d = inf.diagnostics(&problem).unwrap();
        assert!((d.leverage.sum() - 1.0).abs() < 1e-15);
        let _ = inf.to_string();
    }

    #[test]
    fn exact_fits_give_zero_errors_without_nan() {
        let x = array![[1.0], [2.0], [3.0], [4.0]];
        let y = array![3.0, 5.0, 7.0, 9.0];
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let fit = Qr::new().fit(&problem).unwrap();
        let inf = Inference::new(&problem, &fit).unwrap();
        for e in inf.estimates() {
            assert!(!e.t.is_nan() && !e.p_value.is_nan() && !e.std_error.is_nan());
        }
        assert!(!inf.goodness.log_likelihood.is_nan());
        let d = inf.diagnostics(&problem).unwrap();
        assert!(d.studentized.iter().all(|v| v.is_none_or(|v| !v.is_nan())));
        let _ = inf.to_string();
    }
}
