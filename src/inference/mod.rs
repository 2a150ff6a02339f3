//! Inference and diagnostics for a fitted least-squares model: standard
//! errors, tests and intervals for every parameter, classical or
//! heteroskedasticity-consistent (sandwich) covariance, goodness of fit,
//! intervals for predictions at new rows, and per-row diagnostics.
//!
//! Everything is computed **on demand from the data and the fitted
//! coefficients**, never from a solver's internal state: [`Inference::new`]
//! takes the [`Problem`] and the [`Fit`], recomputes the triangular factor
//! `R` of the centered, weighted, column-scaled design with one blocked QR
//! pass (the same pass the QR solver uses; the design is not copied), and
//! forms the residuals from the fit's coefficients in the caller's units.
//! The `n x n` hat matrix is never formed: leverages come from a blocked
//! pass `Z R^-1` over the rows.
//!
//! ```
//! use leastline::{inference::Inference, Problem, Qr, Solver};
//! use ndarray::array;
//!
//! // Bench test of a spring rig: extension (mm) under load (N) at two temperatures (°C).
//! let x = array![[1.0, 20.0], [2.0, 21.0], [3.0, 19.5], [4.0, 22.0], [5.0, 20.5], [6.0, 23.0]];
//! let y = array![2.1, 3.9, 6.2, 7.8, 10.1, 12.2];
//! let problem = Problem::new(x.view(), y.view())?;
//! let fit = Qr::default().fit(&problem)?;
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
//!   is accepted and treated as that estimate);
//! - no residual degrees of freedom are left (`n <= k`);
//! - HC2 or HC3 was asked for and a row has leverage 1 (to within
//!   `1e-10`): those estimators divide by `1 - h_i`.
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

use std::fmt;

use faer::Mat;
use ndarray::Array2;

use crate::error::{Error, Result};
use crate::linalg::leverage::{row_pass, RowPassSpec};
use crate::linalg::products::{congruence, solve_upper_transposed};
use crate::linalg::{qr::tall_skinny_r, residuals::centered_rss, triangular};
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::Fit;

/// `1 - h_i` at or below this counts as a leverage of 1.
pub(crate) const LEVERAGE_ONE: f64 = 1e-10;

/// Which covariance matrix of the estimates feeds the standard errors,
/// tests and intervals.
///
/// With weights, the sandwich estimators are applied to the rows scaled by
/// `sqrt(w_i)`: with `X~` the design with a ones column and `e~_i =
/// sqrt(w_i) e_i`, `(X~^T X~)^-1 X~^T diag(omega_i e~_i^2) X~ (X~^T X~)^-1`
/// where `X~` has rows `sqrt(w_i) (1, x_i)` and `h_i` are the leverages of
/// `X~` (common practice). `n` counts rows with non-zero weight, `k` the
/// parameters.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub enum CovarianceKind {
    /// `sigma^2 (X~^T X~)^-1`: errors of constant variance (up to the weights).
    #[default]
    Classical,
    /// White's sandwich, `omega_i = 1`.
    Hc0,
    /// HC0 scaled by `n / (n - k)`.
    Hc1,
    /// `omega_i = 1 / (1 - h_i)`.
    Hc2,
    /// `omega_i = 1 / (1 - h_i)^2`: the most conservative of the four in small samples.
    Hc3,
}

impl CovarianceKind {
    /// A short name for reports.
    pub fn name(&self) -> &'static str {
        match self {
            CovarianceKind::Classical => "classical",
            CovarianceKind::Hc0 => "HC0 sandwich",
            CovarianceKind::Hc1 => "HC1 sandwich",
            CovarianceKind::Hc2 => "HC2 sandwich",
            CovarianceKind::Hc3 => "HC3 sandwich",
        }
    }

    fn leverage_power(&self) -> Option<i32> {
        match self {
            CovarianceKind::Classical => None,
            CovarianceKind::Hc0 | CovarianceKind::Hc1 => Some(0),
            CovarianceKind::Hc2 => Some(1),
            CovarianceKind::Hc3 => Some(2),
        }
    }
}

/// Settings of an [`Inference`]: the covariance and the confidence level.
///
/// ```
/// use leastline::inference::{CovarianceKind, InferenceOptions};
/// let options = InferenceOptions::default().covariance(CovarianceKind::Hc3).level(0.9);
/// assert_eq!(options.level, 0.9);
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct InferenceOptions {
    /// The covariance of the estimates (default [`CovarianceKind::Classical`]).
    pub covariance: CovarianceKind,
    /// Confidence level of every interval, strictly between 0 and 1 (default 0.95).
    pub level: f64,
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
    /// Sets the covariance kind.
    pub fn covariance(mut self, covariance: CovarianceKind) -> Self {
        self.covariance = covariance;
        self
    }

    /// Sets the confidence level.
    pub fn level(mut self, level: f64) -> Self {
        self.level = level;
        self
    }
}

/// Why inference was refused for a fit (carried by [`Error::InferenceRefused`]).
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub enum InferenceRefusal {
    /// Some coefficients are not identified: numerical rank below the columns.
    RankDeficient {
        /// Numerical rank of the centered design.
        rank: usize,
        /// Columns of the design.
        columns: usize,
    },
    /// A penalised (ridge) fit: the estimator is biased, so classical and
    /// sandwich intervals would not have their stated coverage.
    Penalised {
        /// The penalty of the fit.
        penalty: f64,
    },
    /// An iterative fit that stopped before converging.
    NotConverged {
        /// Iterations (or epochs) it ran.
        iterations: usize,
    },
    /// No residual degrees of freedom: `usable_rows <= parameters`.
    NoResidualDegreesOfFreedom {
        /// Rows with non-zero weight.
        usable_rows: usize,
        /// Parameters (columns, plus one for the intercept).
        parameters: usize,
    },
    /// HC2 or HC3 needs `1 - h_i > 0`, and this row has leverage 1.
    LeverageOne {
        /// Row index (0-based).
        row: usize,
        /// Its computed leverage.
        leverage: f64,
    },
    /// The fit's report does not match the problem given (another data set?).
    DifferentProblem {
        /// Usable rows recorded in the fit's report.
        fit_rows: usize,
        /// Usable rows of the problem given.
        problem_rows: usize,
    },
}

impl fmt::Display for InferenceRefusal {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            InferenceRefusal::RankDeficient { rank, columns } => write!(
                f,
                "the design has numerical rank {rank} of {columns} columns, so some coefficients are not identified"
            ),
            InferenceRefusal::Penalised { penalty } => write!(
                f,
                "the fit is penalised (penalty {penalty:e}); a penalised estimate is biased and has no valid classical or sandwich intervals"
            ),
            InferenceRefusal::NotConverged { iterations } => write!(
                f,
                "the iterative fit stopped after {iterations} iterations without converging"
            ),
            InferenceRefusal::NoResidualDegreesOfFreedom {
                usable_rows,
                parameters,
            } => write!(
                f,
                "{usable_rows} usable rows leave no residual degrees of freedom for {parameters} parameters"
            ),
            InferenceRefusal::LeverageOne { row, leverage } => write!(
                f,
                "row {row} has leverage {leverage} (one to rounding), where HC2 and HC3 are undefined; use HC0 or HC1"
            ),
            InferenceRefusal::DifferentProblem {
                fit_rows,
                problem_rows,
            } => write!(
                f,
                "the fit used {fit_rows} rows but the problem given has {problem_rows}: pass the problem that was fitted"
            ),
        }
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
    pub value: f64,
    /// Its standard error under the selected covariance.
    pub std_error: f64,
    /// `value / std_error` (infinite when the standard error is 0 and the
    /// value is not; 0 when both are 0).
    pub t: f64,
    /// Two-sided p-value of `value = 0` against Student's t with the
    /// residual degrees of freedom.
    pub p_value: f64,
    /// Lower end of the confidence interval at the chosen level.
    pub lower: f64,
    /// Upper end of the confidence interval at the chosen level.
    pub upper: f64,
}

impl Estimate {
    fn new(value: f64, std_error: f64, df: f64, critical: f64) -> Self {
        let t = ratio(value, std_error);
        Estimate {
            value,
            std_error,
            t,
            p_value: distributions::t_two_sided_p(t, df),
            lower: value - critical * std_error,
            upper: value + critical * std_error,
        }
    }
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

/// Equal to a relative `1e-12` (a value restored from text may differ in
/// its last bits).
fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * a.abs().max(b.abs())
}

/// What prediction and diagnostics need, kept in scaled coordinates.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
struct Basis {
    /// `p x p` upper-triangular factor of the scaled centered design.
    r: Array2<f64>,
    /// Column divisors (powers of two).
    scale: Vec<f64>,
    /// Target divisor (a power of two).
    target_scale: f64,
    /// Internal weight divisor (a power of two).
    weight_scale: f64,
    /// Sum of the scaled weights.
    total_weight: f64,
    /// Column means used for centering (zeros without intercept).
    means: Vec<f64>,
    /// Weighted mean of the target (zero without intercept).
    target_mean: f64,
    /// The middle matrix in orthonormal coordinates (`q x q`), in scaled
    /// units: `sigma~^2 I` for the classical covariance.
    meat: Array2<f64>,
    /// Residual variance in scaled units.
    sigma2_scaled: f64,
    /// Slopes in scaled coordinates.
    gamma: Vec<f64>,
}

/// Inference for a fitted least-squares model: every number is a public
/// field; [`fmt::Display`] prints a plain-text summary.
///
/// See the [module documentation](crate::inference) for the model, the
/// conventions and the cautions.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
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
    pub covariance: Array2<f64>,
    /// `sigma^2`, the residual variance `sum w e^2 / df` (caller units),
    /// whatever the covariance kind.
    pub residual_variance: f64,
    /// `sigma`, its square root.
    pub residual_sd: f64,
    /// Residual degrees of freedom `n - k`.
    pub residual_df: usize,
    /// Rows with non-zero weight, `n`.
    pub usable_rows: usize,
    /// Parameters `k`: columns plus one for the intercept.
    pub parameters: usize,
    /// The Student t quantile used for every interval at the chosen level.
    pub critical_value: f64,
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

impl Inference {
    /// Inference with the default options: classical covariance, 95% intervals.
    ///
    /// # Errors
    /// As [`Inference::with_options`].
    pub fn new(problem: &Problem<'_>, fit: &Fit) -> Result<Self> {
        Self::with_options(problem, fit, InferenceOptions::default())
    }

    /// Inference for `fit`, which must have been fitted to `problem`.
    ///
    /// Cost: one blocked QR pass over the design (about `2 n p^2` flops)
    /// and one residual pass; a sandwich covariance adds one more pass
    /// (`about 2 n p^2`). The design is never copied.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a level outside `(0, 1)`;
    /// [`Error::ColumnCountMismatch`] when the fit has a different number of
    /// columns than the problem; [`Error::Overflow`] for non-finite
    /// coefficients or sums of squares; [`Error::InferenceRefused`] for a
    /// rank-deficient, penalised or unconverged fit, no residual degrees of
    /// freedom, a leverage of 1 under HC2/HC3, or a fit of another problem.
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
        let p = problem.cols();
        if fit.model.cols() != p {
            return Err(Error::ColumnCountMismatch {
                expected: fit.model.cols(),
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
        if report.rank < p {
            return Err(refuse(InferenceRefusal::RankDeficient {
                rank: report.rank,
                columns: p,
            }));
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
        let r = tall_skinny_r(problem, &scaling, false);
        let dependent = crate::solvers::dependent_columns(problem, &scaling, r.as_ref(), tolerance);
        if !dependent.is_empty() {
            return Err(refuse(InferenceRefusal::RankDeficient {
                rank: p - dependent.len(),
                columns: p,
            }));
        }
        let sy = scaling.target_scale;
        let ws = problem.stats.weight_scale;
        let w_scaled = problem.stats.total_weight;
        let gamma: Vec<f64> = beta
            .iter()
            .zip(&scaling.scale)
            .map(|(b, s)| b * (s / sy))
            .collect();

        // Residual and total sums of squares in caller units; their scaled
        // versions differ by the exact factor sy^2 * ws.
        let rss = centered_rss(problem, &beta, sy);
        let tss = centered_rss(problem, &vec![0.0; p], sy);
        if !rss.is_finite() || !tss.is_finite() {
            return Err(Error::Overflow {
                what: "residual sum of squares",
            });
        }
        let unit = sy * sy * ws;
        let sigma2_scaled = rss / unit / dff;
        let residual_variance = rss / dff;

        // Middle matrix in orthonormal coordinates.
        let q = k;
        let meat: Mat<f64> = match options.covariance.leverage_power() {
            None => Mat::<f64>::from_fn(q, q, |i, j| if i == j { sigma2_scaled } else { 0.0 }),
            Some(power) => {
                let pass = row_pass(
                    problem,
                    &scaling,
                    RowPassSpec {
                        r: r.as_ref(),
                        gamma: &gamma,
                        beta: &beta,
                        intercept_weight: has_intercept.then_some(w_scaled),
                        meat_power: Some(power),
                        keep_rows: false,
                        leverage_one: LEVERAGE_ONE,
                    },
                );
                if power > 0 {
                    if let Some((row, h)) = pass.max_leverage {
                        if 1.0 - h <= LEVERAGE_ONE {
                            return Err(refuse(InferenceRefusal::LeverageOne { row, leverage: h }));
                        }
                    }
                }
                let mut m = pass.meat.unwrap_or_else(|| Mat::zeros(q, q));
                if options.covariance == CovarianceKind::Hc1 {
                    let c = n as f64 / dff;
                    for j in 0..q {
                        for i in 0..q {
                            m[(i, j)] *= c;
                        }
                    }
                }
                m
            }
        };

        // V maps orthonormal coordinates to (slopes, intercept) in caller units.
        let rinv = triangular::inverse_upper(r.as_ref());
        let mut v = Mat::<f64>::zeros(q, q);
        for j in 0..p {
            let f = sy / scaling.scale[j];
            for c in j..p {
                v[(j, c)] = f * rinv[(j, c)];
            }
        }
        if has_intercept {
            let mut t: Vec<f64> = (0..p)
                .map(|j| problem.stats.means[j] * (sy / scaling.scale[j]))
                .collect();
            solve_upper_transposed(r.as_ref(), &mut t);
            for (c, tc) in t.iter().enumerate() {
                v[(p, c)] = -tc;
            }
            v[(p, p)] = sy / w_scaled.sqrt();
        }
        let cov = congruence(v.as_ref(), meat.as_ref());
        let covariance = Array2::from_shape_fn((q, q), |(i, j)| cov[(i, j)]);
        if covariance.iter().any(|c| !c.is_finite()) {
            return Err(Error::Overflow {
                what: "covariance matrix",
            });
        }

        let critical = student_t_quantile(0.5 + 0.5 * options.level, dff)?;
        let se = |i: usize| cov[(i, i)].max(0.0).sqrt();
        let coefficients: Vec<Estimate> = (0..p)
            .map(|j| Estimate::new(beta[j], se(j), dff, critical))
            .collect();
        let intercept = has_intercept.then(|| Estimate::new(intercept_value, se(p), dff, critical));

        let goodness = goodness::compute(goodness::Inputs {
            problem,
            r: r.as_ref(),
            gamma: &gamma,
            meat: meat.as_ref(),
            classical: options.covariance == CovarianceKind::Classical,
            rss,
            tss,
            unit,
            df,
            parameters: k,
        });
        let collinearity = goodness::collinearity(r.as_ref(), rinv.as_ref(), has_intercept)?;

        let basis = Basis {
            r: Array2::from_shape_fn((p, p), |(i, j)| r[(i, j)]),
            scale: scaling.scale.clone(),
            target_scale: sy,
            weight_scale: ws,
            total_weight: w_scaled,
            means: problem.stats.means.clone(),
            target_mean: problem.stats.target_mean,
            meat: Array2::from_shape_fn((q, q), |(i, j)| meat[(i, j)]),
            sigma2_scaled,
            gamma,
        };
        Ok(Inference {
            options,
            solver: report.solver.clone(),
            names: (0..p).map(|j| format!("x{j}")).collect(),
            coefficients,
            intercept,
            covariance,
            residual_variance,
            residual_sd: residual_variance.sqrt(),
            residual_df: df,
            usable_rows: n,
            parameters: k,
            critical_value: critical,
            goodness,
            collinearity,
            basis,
        })
    }

    /// Replaces the column names used by the summary.
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`] unless there is one name per column.
    pub fn with_names<S: Into<String>>(
        mut self,
        names: impl IntoIterator<Item = S>,
    ) -> Result<Self> {
        let names: Vec<String> = names.into_iter().map(Into::into).collect();
        if names.len() != self.coefficients.len() {
            return Err(Error::ColumnCountMismatch {
                expected: self.coefficients.len(),
                found: names.len(),
            });
        }
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

    fn basis_meat(&self) -> Mat<f64> {
        let q = self.basis.meat.nrows();
        Mat::from_fn(q, q, |i, j| self.basis.meat[[i, j]])
    }

    fn check_problem(&self, problem: &Problem<'_>) -> Result<Scaling> {
        let p = self.coefficients.len();
        if problem.cols() != p {
            return Err(Error::ColumnCountMismatch {
                expected: p,
                found: problem.cols(),
            });
        }
        let scaling = Scaling::new(problem, problem.default_rank_tolerance());
        let same = problem.usable_rows() == self.usable_rows
            && problem.has_intercept() == self.intercept.is_some()
            && scaling.scale == self.basis.scale
            && scaling.target_scale == self.basis.target_scale
            && problem.stats.weight_scale == self.basis.weight_scale
            && close(problem.stats.total_weight, self.basis.total_weight)
            && close(problem.stats.target_mean, self.basis.target_mean)
            && problem
                .stats
                .means
                .iter()
                .zip(&self.basis.means)
                .all(|(&a, &b)| close(a, b));
        if !same {
            return Err(refuse(InferenceRefusal::DifferentProblem {
                fit_rows: self.usable_rows,
                problem_rows: problem.usable_rows(),
            }));
        }
        Ok(scaling)
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
        let mut fit = Qr::default().fit(&problem).unwrap();
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
        let fit = Qr::default().fit(&problem).unwrap();
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
        let fit = Qr::default().fit(&problem).unwrap();
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
