//! Ridge regression on tall, wide and ill-conditioned designs, and choosing
//! its penalty.
//!
//! # The objective and the scaling of the penalty
//!
//! Every ridge solver of this crate (and every other solver that takes an
//! L2 penalty) minimises exactly
//!
//! ```text
//! (1/2) sum_i w_i (y_i - b0 - x_i . b)^2  +  (lambda/2) sum_j b_j^2
//! ```
//!
//! over the slopes `b` and the intercept `b0`:
//!
//! - the loss is a weighted **sum**, not a mean: the weights enter as given
//!   (unweighted problems have `w_i = 1`), so multiplying every weight by
//!   `c` acts like dividing `lambda` by `c`, and adding rows makes the same
//!   `lambda` shrink less;
//! - `lambda` is in the caller's units: it compares with the squared
//!   singular values of the weighted centered design
//!   `sqrt(w_i) (x_ij - m_j)` (see [`RidgePath::singular_values`]); a
//!   direction of singular value `s` is shrunk by `s^2 / (s^2 + lambda)`;
//! - the intercept is never penalised (it is fitted by centering with the
//!   weighted means);
//! - with **`standardize`** the penalty is `(lambda/2) sum_j sd_j^2 b_j^2`,
//!   where `sd_j^2 = sum_i w_i (x_ij - m_j)^2 / sum_i w_i` is the weighted
//!   variance of column `j` (with no intercept, `m_j = 0` and `sd_j` is the
//!   weighted root mean square): the same as penalising the coefficients of
//!   standardised columns, so that the penalty treats predictors alike
//!   whatever their units. Coefficients always come back in the caller's
//!   units.
//!
//! Columns that are constant (beside the intercept, to the rounding
//! tolerance `max(n, p) * eps`) take no part and get coefficient 0, the
//! limit of the penalised fit.
//!
//! # Which method when
//!
//! | [`RidgeFactorization`] | what it factors | cost (`n` rows, `p` columns) | use it for |
//! |---|---|---|---|
//! | `Cholesky` | `Z^T Z + lambda I` | `n p^2 + p^3/3` | tall designs, fastest |
//! | `AugmentedQr` | triangle of `[Z; sqrt(lambda) I]` | `2 n p^2 + O(p^3)` | ill-conditioned designs with small `lambda` |
//! | `Svd` | SVD of the design's triangle ([`RidgePath`]) | as `Cholesky` or QR (rows >= columns), as `Dual` (wide) | many penalties from one factorisation |
//! | `Dual` | `Z Z^T + lambda I` (rows) | `n^2 p + n^3/3` | wide designs (`p > n`) |
//!
//! `Z` is the weighted centered design. None of them copies the design or,
//! except `Cholesky`, forms `Z^T Z`; `Dual` never forms anything `p x p`.
//! Every method accepts wide designs (a positive penalty makes the
//! problem determined).
//!
//! **`ByShape`** (the default) decides by shape: when fewer rows have
//! non-zero weight than there are columns it uses `Dual`; otherwise
//! `Cholesky`, and if the Cholesky factor's condition estimate `c` leaves
//! fewer than 8 correct digits (`eps * c^2 > 1e-8`) it refits with
//! `AugmentedQr` (one more pass over the design).
//!
//! At `lambda = 0` ridge is ordinary least squares: `ByShape` and
//! `AugmentedQr` then fit exactly as [`crate::Qr`], `Cholesky` as
//! [`crate::Cholesky`], `Svd` as [`crate::Svd`] (with their errors, such as
//! [`Error::TooFewRows`] and [`Error::RankDeficient`]); `Dual` refuses.
//!
//! # Choosing the penalty
//!
//! [`RidgePath`] decomposes the design once; [`RidgePath::curve`] then
//! scores a whole grid of penalties in closed form (leave-one-out error,
//! generalized cross-validation, effective degrees of freedom) and returns
//! the minimiser with the whole [`PenaltyCurve`]; [`RidgePath::fit`] gives
//! the fit for any penalty at `O(p^2)`. [`RowFolds`] cross-validates any
//! solver, ridge or not, through the [`Solver`] trait.
//!
//! ```
//! use leastline::ridge::{Criterion, Ridge, RidgePath};
//! use leastline::{Problem, Solver};
//! use ndarray::Array2;
//!
//! // Weekly footfall of a garden centre against four overlapping signals.
//! let x = Array2::from_shape_fn((60, 4), |(i, j)| {
//!     let t = i as f64 / 10.0;
//!     t.sin() + 0.05 * ((i * 7 + j * 3) % 5) as f64 + j as f64 * t
//! });
//! let y = x.column(0).mapv(|v| 2.0 * v) - x.column(3).mapv(|v| 0.1 * v);
//! let problem = Problem::new(x.view(), y.view())?;
//!
//! // One fit at a chosen penalty:
//! let fit = Ridge::new(0.5).fit(&problem)?;
//! assert_eq!(fit.report.penalty, 0.5);
//!
//! // Or let leave-one-out cross-validation choose it:
//! let path = RidgePath::new(&problem, true)?;
//! let curve = path.curve(&path.default_grid(50)?, Criterion::LeaveOneOut)?;
//! let best = path.fit(curve.best_penalty)?;
//! println!("lambda {:.3e}, df {:.2}", curve.best_penalty, curve.effective_df[curve.best_index]);
//! assert!(best.model.coefficients().iter().all(|b| b.is_finite()));
//! # Ok::<(), leastline::Error>(())
//! ```

mod cholesky;
mod dual;
mod folds;
pub(crate) mod path;
mod qr;
pub(crate) mod selection;
mod state_path;

pub use crate::vocabulary::Criterion;
pub use folds::{HeldOutError, RowFolds};
pub use path::RidgePath;
pub use selection::PenaltyCurve;
pub use state_path::StateRidgePath;

use crate::error::{Error, Result};
use crate::observe::{Observer, Watch};
use crate::penalty::check_penalty;
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::{finish_closed_form, Fit, Solver};
use crate::solvers::{Cholesky, Qr, Svd};

/// Digits below which `ByShape` abandons the Cholesky fit for the augmented QR.
const AUTO_MIN_DIGITS: f64 = 8.0;

/// How [`Ridge`] solves the penalised problem; see the
/// [module docs](self#which-method-when).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub enum RidgeFactorization {
    /// Chosen by shape (and, for tall designs, by the Cholesky factor's
    /// condition).
    #[default]
    ByShape,
    /// Cholesky factorisation of the penalised Gram matrix.
    Cholesky,
    /// QR of the design's triangle stacked over `sqrt(lambda) I`.
    AugmentedQr,
    /// Singular value decomposition of the design (see [`RidgePath`]).
    Svd,
    /// The `n x n` system of the rows (rows of non-zero weight only), for
    /// more columns than rows. Memory: up to four `n_u x n_u` accumulators
    /// (one when `8 n_u^2` exceeds 256 MiB) and one block of columns. On a
    /// design with more usable rows than columns it is refused with
    /// [`Error::TooLarge`] once its row system would exceed both the
    /// design's size and 64 MiB (the primal methods are far smaller then).
    Dual,
}

/// Ridge regression: least squares with an L2 penalty on the slopes.
///
/// Minimises `(1/2) sum_i w_i (y_i - b0 - x_i . b)^2 + (lambda/2) |b|^2`
/// (see the [module docs](self) for the exact scaling, `standardize` and the
/// methods). Accepts designs with more columns than rows.
///
/// The report's `penalty` is `lambda`; its `solver`
/// is `"ridge"` and `factorization` names the route taken (`"cholesky"`,
/// `"qr"`, `"svd"`, `"dual"`);
/// `condition` is that of the penalised system (of `[Z; sqrt(lambda) I]`
/// for the primal methods, square root of that of `Z Z^T + lambda I` for
/// `Dual`); `rank` is the numerical rank of the design for `Svd`, and
/// `None` for the other methods, which do not measure it (the penalised
/// system itself always has full rank).
///
/// ```
/// use leastline::ridge::{Ridge, RidgeFactorization};
/// use leastline::{Problem, Solver};
/// use ndarray::Array2;
///
/// // 8 soil samples, 20 spectral bands: more columns than rows.
/// let x = Array2::from_shape_fn((8, 20), |(i, j)| ((i + 1) as f64 * (j + 2) as f64).sqrt().fract());
/// let y = x.column(3).to_owned() * 2.0 + 1.0;
/// let problem = Problem::new(x.view(), y.view())?;
/// let dual = Ridge::new(0.1).with_factorization(RidgeFactorization::Dual).fit(&problem)?;
/// let svd = Ridge::new(0.1).with_factorization(RidgeFactorization::Svd).fit(&problem)?;
/// for (a, b) in dual.model.coefficients().iter().zip(svd.model.coefficients()) {
///     assert!((a - b).abs() < 1e-9);
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Ridge {
    /// The penalty `lambda >= 0`, in the caller's units.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) penalty: f64,
    /// Penalise `sd_j * b_j` instead of `b_j` (default `false`).
    pub(crate) standardize: bool,
    /// How to solve (default [`RidgeFactorization::ByShape`]).
    pub(crate) factorization: RidgeFactorization,
}

checked_settings!(Ridge {
    #[serde(with = "crate::serde_float::float")]
    penalty: f64,
    standardize: bool,
    factorization: RidgeFactorization,
});

impl Ridge {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        check_penalty("penalty", self.penalty)?;
        if self.penalty == 0.0 && self.factorization == RidgeFactorization::Dual {
            return Err(Error::InvalidParameter {
                name: "penalty",
                value: 0.0,
                reason: "the dual method needs a positive penalty",
            });
        }
        Ok(())
    }
}

impl Ridge {
    crate::settings::setting! {
        /// The penalty `lambda >= 0`, in the caller's units.
        with_penalty / penalty: plain f64
    }

    crate::settings::setting! {
        /// Penalise `sd_j * b_j` instead of `b_j` (default `false`).
        with_standardize / standardize: plain bool
    }

    crate::settings::setting! {
        /// How to solve (default [`RidgeFactorization::ByShape`]).
        with_factorization / factorization: plain RidgeFactorization
    }
}

impl Ridge {
    /// Ridge with penalty `penalty`, unstandardised, method `ByShape`.
    pub fn new(penalty: f64) -> Self {
        Ridge {
            penalty,
            standardize: false,
            factorization: RidgeFactorization::ByShape,
        }
    }
}

/// Slopes in caller units from one of the primal or dual methods.
pub(crate) struct Solution {
    pub beta: Vec<f64>,
    /// 2-norm condition number of the scaled, centered design (see
    /// [`crate::FitReport::condition`]); `None` from the dual route, which
    /// factors no `p x p` matrix of the design.
    pub design_condition: Option<f64>,
    /// Condition estimate of the penalised system factored (routing only).
    pub system_condition: f64,
    pub method: &'static str,
}

impl Solver for Ridge {
    fn name(&self) -> &str {
        "ridge"
    }

    /// # Errors
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty (or
    /// `Dual` at penalty 0); at penalty 0 the errors of the least-squares
    /// solver used; [`Error::NotPositiveDefinite`] if a penalised system
    /// fails to factor (a penalty at rounding level of the design's scale);
    /// [`Error::NoConvergence`] if an SVD or eigen iteration fails;
    /// [`Error::Overflow`] if a result is not representable.
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let lambda = check_penalty("penalty", self.penalty)?;
        if lambda == 0.0 {
            return self.unpenalised(problem, observer);
        }
        let watch = Watch::new(observer);
        if self.factorization == RidgeFactorization::Svd {
            return RidgePath::build(problem, self.standardize, &watch)?.fit(lambda);
        }
        let scaling = Scaling::new(problem, problem.default_rank_tolerance());
        let p = problem.columns();
        if p == 0 {
            return finish_closed_form(
                problem,
                "ridge-qr",
                Vec::new(),
                Some(0),
                Some(1.0),
                scaling.target_scale,
                lambda,
                &watch,
            );
        }
        let sol = match self.factorization {
            RidgeFactorization::Cholesky => {
                cholesky::solve(problem, &scaling, self.standardize, lambda, &watch)?
            }
            RidgeFactorization::AugmentedQr => {
                qr::solve(problem, &scaling, self.standardize, lambda, &watch)?
            }
            RidgeFactorization::Dual => {
                dual::solve(problem, &scaling, self.standardize, lambda, &watch)?
            }
            _ => {
                if problem.usable_rows() < p {
                    dual::solve(problem, &scaling, self.standardize, lambda, &watch)?
                } else {
                    let fast = cholesky::solve(problem, &scaling, self.standardize, lambda, &watch);
                    match fast {
                        Err(stopped @ Error::Stopped { .. }) => return Err(stopped),
                        Ok(s)
                            if digits(s.system_condition * s.system_condition)
                                >= AUTO_MIN_DIGITS =>
                        {
                            s
                        }
                        _ => qr::solve(problem, &scaling, self.standardize, lambda, &watch)?,
                    }
                }
            }
        };
        finish_closed_form(
            problem,
            &format!("ridge-{}", sol.method),
            sol.beta,
            None,
            sol.design_condition,
            scaling.target_scale,
            lambda,
            &watch,
        )
    }
}

/// Correct digits a method with error `eps * condition` delivers.
fn digits(condition: f64) -> f64 {
    -(f64::EPSILON * condition).log10()
}

impl Ridge {
    /// Penalty 0: ordinary least squares by the matching plain solver.
    fn unpenalised(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let mut fit = match self.factorization {
            RidgeFactorization::Dual => {
                return Err(Error::InvalidParameter {
                    name: "penalty",
                    value: 0.0,
                    reason: "the dual method needs a positive penalty",
                })
            }
            RidgeFactorization::Cholesky => Cholesky::new().fit_observed(problem, observer)?,
            RidgeFactorization::Svd => Svd::new().fit_observed(problem, observer)?,
            _ => Qr::new().fit_observed(problem, observer)?,
        };
        fit.report.solver = self.name().to_string();
        Ok(fit)
    }
}
