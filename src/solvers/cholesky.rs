use crate::error::{Error, Result};

use crate::observe::{Observer, Stage, Watch};
use crate::passes::qr::tall_skinny_r;
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::{assemble, check_tolerance, finish_closed_form, Fit, Origin, Solver};
use crate::state::CrossProductState;

use super::dependent_columns;

/// Normal equations solved by Cholesky: the fastest closed form.
///
/// Forms the Gram matrix `G = Z^T Z` of the centered, weighted, scaled design
/// with a symmetric product over row blocks in parallel (half the flops of a
/// general product; extra memory one block and one `p x p` matrix per group,
/// never a copy of the design), factors `G = L L^T` and solves
/// `L L^T b = Z^T y`.
///
/// The Gram matrix has the *square* of the design's condition number, so
/// about `16 - 2 log10(cond)` digits survive. The solver estimates that
/// number from its factor and refuses with [`Error::IllConditioned`] when
/// fewer than `min_digits` (default 4) are expected: use [`crate::Qr`] or
/// [`crate::Svd`] then.
///
/// The estimate is `-log10(eps * c^2)`, with `c` the 1-norm condition number
/// of the factor of the scaled Gram matrix (reported as `condition`). It is
/// a normwise figure for the slopes in scaled units: a slope that is small
/// in those units, or an intercept recovered by centering, can keep fewer
/// digits. On the NIST StRD linear problems the worst coefficient kept up
/// to 2.4 digits fewer than estimated (and up to 1.4 more on others), so
/// ask for `min_digits` a few digits above what you need.
///
/// It is the in-memory face of [`crate::CrossProductState`]: the rows are
/// reduced into that state (one pass) and solved as the state solves. The
/// residual sum of squares comes from the cross products,
/// `y^T y - |L^-1 Z^T y|^2`, unless that difference would cancel more than
/// three digits (R² above 0.999): then a second pass over the rows forms
/// it from the residuals, keeping every digit.
///
/// When the factorisation meets a pivot at rounding level, the solver names
/// the cause: it runs a QR of the design (this error path only) and reports
/// [`Error::RankDeficient`] with the dependent columns if QR finds them,
/// else [`Error::IllConditioned`].
///
/// ```
/// use leastline::{Cholesky, Error, Problem, Solver};
/// use ndarray::Array2;
///
/// // A degree-9 polynomial in x on [0, 1]: the Gram matrix is hopeless.
/// let x = Array2::from_shape_fn((40, 9), |(i, j)| (i as f64 / 39.0).powi(j as i32 + 1));
/// let y = x.column(0).mapv(|t| (3.0 * t).sin());
/// let problem = Problem::new(x.view(), y.view())?;
/// match Cholesky::new().fit(&problem) {
///     Err(Error::IllConditioned { expected_digits, .. }) => assert!(expected_digits < 4.0),
///     other => panic!("expected a refusal, got {other:?}"),
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Cholesky {
    /// Relative rank tolerance (as for [`crate::Qr`]); `None` uses
    /// `max(rows, columns) * eps`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) rank_tolerance: Option<f64>,
    /// Fewest correct significant digits the caller accepts (default 4).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) min_digits: f64,
}

impl Default for Cholesky {
    fn default() -> Self {
        Cholesky {
            rank_tolerance: None,
            min_digits: 4.0,
        }
    }
}

checked_settings!(Cholesky {
    #[serde(with = "crate::serde_float::option_float")]
    rank_tolerance: Option<f64>,
    #[serde(with = "crate::serde_float::float")]
    min_digits: f64,
});

impl Cholesky {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if let Some(t) = self.rank_tolerance {
            check_tolerance("rank_tolerance", t)?;
        }
        if !self.min_digits.is_finite() {
            return Err(Error::InvalidParameter {
                name: "min_digits",
                value: self.min_digits,
                reason: "must be finite",
            });
        }
        Ok(())
    }
}

impl Cholesky {
    /// Cholesky at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Relative rank tolerance (as for [`crate::Qr`]); `None` uses
        /// `max(rows, columns) * eps`.
        with_rank_tolerance / rank_tolerance: optional f64
    }

    crate::settings::setting! {
        /// Fewest correct significant digits the caller accepts (default 4).
        with_min_digits / min_digits: plain f64
    }
}

/// Digits a method with error about `eps * condition` delivers.
pub(crate) fn expected_digits(condition: f64) -> f64 {
    -(f64::EPSILON * condition).log10()
}

impl Solver for Cholesky {
    fn name(&self) -> &str {
        "cholesky"
    }

    /// # Errors
    /// [`Error::TooFewRows`]; [`Error::RankDeficient`];
    /// [`Error::IllConditioned`]; [`Error::NotPositiveDefinite`] if a pivot
    /// fails without rank deficiency or ill-conditioning to explain it;
    /// [`Error::InvalidParameter`] for bad settings; [`Error::Overflow`].
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        problem.require_determined()?;
        let tolerance = match self.rank_tolerance {
            Some(t) => check_tolerance("rank_tolerance", t)?,
            None => problem.default_rank_tolerance(),
        };
        if !self.min_digits.is_finite() {
            return Err(Error::InvalidParameter {
                name: "min_digits",
                value: self.min_digits,
                reason: "must be finite",
            });
        }
        let p = problem.columns();
        let scaling = Scaling::new(problem, tolerance);
        watch.begin(Stage::Factor, problem.rows());
        // The one path: the problem's rows reduced into a cross-product
        // state (in parallel), solved as the state solves.
        let state = CrossProductState::of_problem(problem, &scaling, &watch)?;
        let (frame, cf, l, condition) = match state.factor(Some(tolerance), Some(self.min_digits)) {
            Ok(parts) => parts,
            // A failed or noise-level factorisation: the rows can say why.
            Err(Error::NotPositiveDefinite { pivot, value }) => {
                let failed = Some((pivot, value));
                return Err(self.diagnose(problem, &scaling, tolerance, p, failed, &watch));
            }
            Err(Error::RankDeficient { dependent, .. }) => {
                let failed = dependent.first().map(|&j| (j, 0.0));
                return Err(self.diagnose(problem, &scaling, tolerance, p, failed, &watch));
            }
            Err(Error::IllConditioned { .. }) => {
                return Err(self.diagnose(problem, &scaling, tolerance, p, None, &watch));
            }
            Err(e) => return Err(e),
        };
        let solved = state.solve(&frame, &cf, &l, condition, 0);
        // The residual sum of squares `C_yy - |L^-1 C_xy|^2` from the cross
        // products loses about `log10(tss / rss)` digits to cancellation:
        // kept when that is at most three (R² up to 0.999), else formed
        // again by a pass over the rows, which keeps every digit.
        if cancellation_digits(solved.rss, solved.tss) <= CROSS_PRODUCT_RSS_DIGITS {
            return assemble(&Origin::of(problem), "cholesky", Some("cholesky"), solved);
        }
        finish_closed_form(
            problem,
            self.name(),
            solved.beta,
            Some(p),
            Some(condition),
            scaling.target_scale,
            0.0,
            &watch,
        )
    }
}

/// Digits the residual sum of squares from the cross products may lose to
/// cancellation before the solver forms it again from the rows.
const CROSS_PRODUCT_RSS_DIGITS: f64 = 3.0;

/// `log10(tss / rss)` for sums given as `(m, e)` (value `m 2^e`): the
/// digits lost when `rss` is formed as `tss` minus the explained part
/// (infinite for a zero `rss` beside a positive `tss`, 0 for a zero `tss`).
fn cancellation_digits((rm, re): (f64, i32), (tm, te): (f64, i32)) -> f64 {
    if tm.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
        return 0.0;
    }
    if rm.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
        return f64::INFINITY;
    }
    (tm / rm).log10() + f64::from(te - re) * std::f64::consts::LOG10_2
}

impl Cholesky {
    /// Explains a failed or noise-level factorisation: rank deficiency if a
    /// QR of the design finds dependent columns, else ill-conditioning.
    fn diagnose(
        &self,
        problem: &Problem<'_>,
        scaling: &Scaling,
        tolerance: f64,
        p: usize,
        failed: Option<(usize, f64)>,
        watch: &Watch<'_>,
    ) -> Error {
        watch.begin(Stage::Factor, problem.rows());
        let r = match tall_skinny_r(problem, scaling, false, watch) {
            Ok(r) => r,
            Err(stopped) => return stopped,
        };
        let dependent = dependent_columns(problem, scaling, r.as_ref(), tolerance);
        if !dependent.is_empty() {
            return Error::RankDeficient {
                rank: p - dependent.len(),
                columns: p,
                combinations: super::combinations(r.as_ref(), &dependent, &scaling.constant),
                dependent,
                tolerance,
                names: problem.names().map(<[String]>::to_vec),
            };
        }
        let condition = match crate::linalg::svd::condition(r.as_ref(), 0.0) {
            Ok(c) => c,
            Err(e) => return e,
        };
        let gram_condition = condition * condition;
        let digits = expected_digits(gram_condition);
        if digits < self.min_digits || failed.is_none() {
            return Error::IllConditioned {
                method: "normal equations",
                condition: gram_condition,
                expected_digits: digits,
                required_digits: self.min_digits,
            };
        }
        let (pivot, value) = failed.unwrap_or((0, 0.0));
        Error::NotPositiveDefinite { pivot, value }
    }
}
