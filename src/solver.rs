//! The solver trait and what every solver returns.

use std::fmt::Debug;

use ndarray::{Array1, ArrayView2};

use crate::error::{Error, Result};
use crate::model::LinearModel;
use crate::observe::{Observer, Stage, Unobserved, Watch};
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp, pow2_scale};

/// A method that fits a linear model to a [`Problem`].
///
/// A solver value holds only its settings: it is immutable, reusable and
/// cheap to clone. The trait is object safe, so a program can keep
/// `Vec<Box<dyn Solver>>` and choose at run time:
///
/// ```
/// use leastline::{Cholesky, Problem, Qr, Solver, Svd};
/// use ndarray::array;
///
/// let x = array![[1.0, 2.0], [2.0, 1.0], [3.0, 5.0], [4.0, 3.0], [5.0, 4.0]];
/// let y = array![5.0, 4.0, 11.0, 9.0, 11.0];
/// let problem = Problem::new(x.view(), y.view())?;
/// let solvers: Vec<Box<dyn Solver>> = vec![Box::new(Qr::new()), Box::new(Cholesky::new()), Box::new(Svd::new())];
/// for solver in &solvers {
///     let fit = solver.fit(&problem)?;
///     println!("{}: {:?}", solver.name(), fit.model.coefficients());
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// Every solver can be watched and stopped through
/// [`fit_observed`](Solver::fit_observed) (see [`crate::observe`]).
pub trait Solver: Send + Sync + Debug {
    /// A short name for reports ("qr", "cholesky", "svd", ...).
    fn name(&self) -> &str;

    /// Fits the model, calling `observer` after every block of rows of
    /// every pass over the design (and after every iteration of the
    /// gradient solvers). Observing does not change the result: it is
    /// bit for bit the one [`fit`](Solver::fit) returns.
    ///
    /// # Errors
    /// As [`fit`](Solver::fit), and [`Error::Stopped`] when the observer
    /// stops a fit that has no answer yet (a closed form, or a gradient
    /// solver in its setup passes); a gradient solver stopped while
    /// iterating returns its current coefficients instead, with
    /// `stopped_by_observer` in the report.
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit>;

    /// Fits the model.
    ///
    /// # Errors
    /// Each solver documents its own; every one returns a typed [`Error`]
    /// rather than a model with non-finite coefficients.
    fn fit(&self, problem: &Problem<'_>) -> Result<Fit> {
        self.fit_observed(problem, &Unobserved)
    }
}

/// A fitted model and the report of how the fit went.
///
/// Saved form (feature `serde`): `{"format": "leastline-fit", "version": 1,
/// "model": ..., "report": ...}` with the model in its own saved form (see
/// [`LinearModel`]) and the report's fields by name, every number a string
/// as in the model's form.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(
    feature = "serde",
    serde(try_from = "saved::FitData", into = "saved::FitData")
)]
pub struct Fit {
    /// Coefficients and intercept in the caller's units.
    pub model: LinearModel,
    /// How the fit went.
    pub report: FitReport,
}

#[cfg(feature = "serde")]
mod saved {
    //! The saved form of a [`Fit`], tagged with its format and version.
    use super::*;

    const FORMAT: &str = "leastline-fit";
    const VERSION: u32 = 1;

    #[derive(serde::Serialize, serde::Deserialize)]
    pub(super) struct FitData {
        format: String,
        version: u64,
        model: LinearModel,
        report: FitReport,
    }

    /// Every number of a saved report must be finite (as in a report the
    /// solvers make), and the condition estimate at least 1.
    fn check_report(r: &FitReport) -> Result<()> {
        let it = r.iterations.as_ref();
        let mut numbers: Vec<(&'static str, f64)> = vec![
            ("report.residual_sum_of_squares", r.residual_sum_of_squares),
            ("report.penalty", r.penalty),
        ];
        if let Some(c) = r.condition {
            numbers.push(("report.condition", c));
        }
        if let Some(sigma) = r.sigma {
            numbers.push(("report.sigma", sigma));
        }
        if let Some(r2) = r.r_squared {
            if !r2.is_finite() || r2 > 1.0 {
                return Err(Error::InvalidParameter {
                    name: "report.r_squared",
                    value: r2,
                    reason: "must be finite and at most 1 in a saved fit",
                });
            }
        }
        if let Some(it) = it {
            numbers.push(("report.iterations.final_loss", it.final_loss));
            numbers.push(("report.iterations.gradient_norm", it.gradient_norm));
            numbers.push(("report.iterations.step", it.step));
        }
        let history = it.into_iter().flat_map(|it| it.loss_history.iter());
        let bad = numbers
            .into_iter()
            .chain(history.map(|&v| ("report.iterations.loss_history", v)))
            .find(|(_, v)| !crate::error::finite_nonnegative(*v));
        if let Some((name, value)) = bad {
            return Err(Error::InvalidParameter {
                name,
                value,
                reason: "must be finite and >= 0 in a saved fit",
            });
        }
        Ok(())
    }

    impl From<Fit> for FitData {
        fn from(fit: Fit) -> Self {
            FitData {
                format: FORMAT.to_string(),
                version: u64::from(VERSION),
                model: fit.model,
                report: fit.report,
            }
        }
    }

    impl TryFrom<FitData> for Fit {
        type Error = Error;
        fn try_from(d: FitData) -> Result<Fit> {
            crate::serde_float::check_tag("fit", FORMAT, VERSION, &d.format, d.version)?;
            check_report(&d.report)?;
            if d.report.columns != d.model.columns() {
                return Err(Error::ColumnCountMismatch {
                    expected: d.report.columns,
                    found: d.model.columns(),
                });
            }
            Ok(Fit {
                model: d.model,
                report: d.report,
            })
        }
    }
}

impl Fit {
    /// Predictions for every row of `x` (`m x p`, any layout): the model's
    /// [`LinearModel::predict`].
    ///
    /// # Errors
    /// As [`LinearModel::predict`].
    pub fn predict(&self, x: ArrayView2<'_, f64>) -> Result<Array1<f64>> {
        self.model.predict(x)
    }

    /// The fitted values `y_hat_i = intercept + x_i . coefficients` of every
    /// row of `problem` (rows of weight zero included), computed when
    /// called; nothing is stored in the fit.
    ///
    /// ```
    /// use leastline::{Problem, Qr, Solver};
    /// use ndarray::array;
    ///
    /// // Loaves baked against oven hours at a village bakery.
    /// let x = array![[1.0], [2.0], [3.0], [4.0]];
    /// let y = array![12.0, 19.0, 31.0, 38.0];
    /// let problem = Problem::new(x.view(), y.view())?;
    /// let fit = Qr::new().fit(&problem)?;
    /// let fitted = fit.fitted_values(&problem)?;
    /// let residuals = fit.residuals(&problem)?;
    /// for i in 0..4 {
    ///     assert!((fitted[i] + residuals[i] - y[i]).abs() < 1e-12);
    /// }
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`] when the problem has another number
    /// of columns than the model; [`Error::OverflowAt`] naming the first
    /// row whose fitted value exceeds the range of `f64`.
    pub fn fitted_values(&self, problem: &Problem<'_>) -> Result<Array1<f64>> {
        self.model.predict(problem.design())
    }

    /// The residuals `y_i - y_hat_i` of every row of `problem` (rows of
    /// weight zero included; unweighted), computed when called.
    ///
    /// # Errors
    /// As [`Fit::fitted_values`]; [`Error::OverflowAt`] also names the
    /// first row whose residual exceeds the range of `f64`.
    pub fn residuals(&self, problem: &Problem<'_>) -> Result<Array1<f64>> {
        let fitted = self.fitted_values(problem)?;
        let y = problem.target();
        let mut out = Array1::zeros(fitted.len());
        for (i, (o, (&f, &v))) in out.iter_mut().zip(fitted.iter().zip(y)).enumerate() {
            let r = v - f;
            if !r.is_finite() {
                return Err(Error::OverflowAt {
                    what: "residual",
                    row: i,
                });
            }
            *o = r;
        }
        Ok(out)
    }
}

/// How a fit went: numbers a caller should look at before trusting it.
///
/// Every number here is finite: a value whose true size lies beyond the
/// range of `f64` (a residual sum of squares of targets near `1e300`, say)
/// makes the fit fail with [`Error::Overflow`] instead.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct FitReport {
    /// The solver's name.
    pub solver: String,
    /// Numerical rank of the centered design (columns that carry
    /// information), as measured by the solver's factorisation; `None`
    /// when the solver does not measure it (the gradient solvers, and the
    /// ridge methods other than `Svd`, whose penalised systems always have
    /// full rank).
    pub rank: Option<usize>,
    /// Columns of the design.
    pub columns: usize,
    /// The condition number of the design, one definition for every
    /// solver: the 2-norm condition number `s_max / s_min` (largest over
    /// smallest singular value) of the weighted design, centered by its
    /// weighted means when an intercept is fitted, after exact power-of-two
    /// column scaling (each column divided by the power of two at or below
    /// its largest centered magnitude). When the design is rank deficient
    /// (the SVD solver, ridge), `s_min` is the smallest retained singular
    /// value (above the rank tolerance times `s_max`).
    ///
    /// Each closed-form solver computes it from the `p x p` matrix it
    /// already has (the triangle `R` for QR, the Cholesky factor of the
    /// Gram matrix, which has the same singular values, the SVD's values;
    /// for ridge the design's triangle or the eigenvalues of its Gram
    /// matrix, not the penalised system's), and [`crate::Collinearity`]
    /// reports the same number. The normal equations' Gram matrix has its
    /// square. `None` when no `p x p` matrix of the design is factored: the
    /// gradient solvers, and ridge through the dual (row) system.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub condition: Option<f64>,
    /// Weighted residual sum of squares `sum w_i (y_i - y_hat_i)^2`, formed
    /// from the residuals of the centered problem in scaled units.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub residual_sum_of_squares: f64,
    /// Residual degrees of freedom: usable rows minus rank minus the
    /// intercept; `None` when the rank was not measured. (For a penalised
    /// fit this counts the unpenalised parameters; the penalised count is
    /// [`crate::RidgePath::effective_df`].)
    pub residual_df: Option<usize>,
    /// Residual standard error `sqrt(residual_sum_of_squares / residual_df)`
    /// (weighted residuals, caller's units); `None` when the residual
    /// degrees of freedom are unknown (gradient solvers) or zero (an exact
    /// fit of as many rows as parameters).
    #[cfg_attr(
        feature = "serde",
        serde(default, with = "crate::serde_float::option_float")
    )]
    pub sigma: Option<f64>,
    /// Coefficient of determination `1 - RSS / TSS`, where TSS is the
    /// weighted sum of squares of the target about its weighted mean (about
    /// 0 for a fit without intercept), both formed from values divided by
    /// exact powers of two, so that data at any scale give the same value.
    /// It is the R² of [`crate::GoodnessOfFit::r_squared`]. `None` when TSS
    /// is zero (a constant target with an intercept, an all-zero target
    /// without) or when the ratio exceeds the range of `f64`.
    #[cfg_attr(
        feature = "serde",
        serde(default, with = "crate::serde_float::option_float")
    )]
    pub r_squared: Option<f64>,
    /// Rows with non-zero weight.
    pub usable_rows: usize,
    /// The L2 penalty applied (0 for unpenalised solvers).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub penalty: f64,
    /// The factorisation a closed-form fit used: `"qr"`, `"cholesky"`,
    /// `"svd"`, or for [`crate::Ridge`] the one its
    /// [`crate::RidgeFactorization`] chose (`"cholesky"`, `"qr"`, `"svd"`,
    /// `"dual"`); `None` for the gradient solvers, which factor nothing.
    #[cfg_attr(feature = "serde", serde(default))]
    pub factorization: Option<String>,
    /// Iterative solvers: how the iteration went; `None` for closed forms.
    pub iterations: Option<IterationReport>,
    /// The [`Problem::fingerprint`] of the problem the fit was computed
    /// from: inference refuses a problem with another fingerprint.
    #[cfg_attr(feature = "serde", serde(default))]
    pub fingerprint: u64,
}

/// How an iterative fit went.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct IterationReport {
    /// Iterations (full-batch) or epochs (stochastic) run.
    pub iterations: usize,
    /// Whether the tolerance was met.
    pub converged: bool,
    /// Whether an observer asked the fit to stop.
    pub stopped_by_observer: bool,
    /// Final value of the crate's loss (the weighted mean squared residual,
    /// plus the penalty term for penalised fits: see
    /// [the crate docs](crate#the-loss)).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub final_loss: f64,
    /// Final relative gradient norm.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub gradient_norm: f64,
    /// Step size used (the first one for decaying schedules).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub step: f64,
    /// The loss (as [`IterationReport::final_loss`]) at each iteration
    /// (possibly thinned).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub loss_history: Vec<f64>,
    /// Full reads of the design, including those spent estimating the step
    /// (an epoch of mini-batches counts as one).
    pub passes: usize,
    /// Momentum restarts (accelerated methods; 0 otherwise).
    pub restarts: usize,
}

/// Turns slopes computed by a closed-form solver into a [`Fit`]: adds the
/// intercept, computes the residual sum of squares from the centered
/// residuals (one pass, watched) and refuses non-finite results.
#[allow(clippy::too_many_arguments)]
pub(crate) fn finish_closed_form(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    rank: Option<usize>,
    condition: Option<f64>,
    target_scale: f64,
    penalty: f64,
    watch: &Watch<'_>,
) -> Result<Fit> {
    // Refuse before spending a pass over the design.
    if beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    watch.begin(Stage::Residuals, problem.rows());
    let scaled = crate::passes::residuals::centered_rss(problem, &beta, target_scale, watch)?;
    finish_with_scaled_rss(
        problem,
        solver,
        beta,
        (rank, condition),
        target_scale,
        (scaled, 0),
        penalty,
    )
}

/// As [`finish_closed_form`], with the weighted residual sum of squares
/// already known in the scaled problem's units (residuals in units of
/// `target_scale`, weights of the weight scale) as `(m, e)`, value `m 2^e`:
/// from a triangle's trailing entries, with no pass over the design.
pub(crate) fn finish_with_scaled_rss(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    (rank, condition): (Option<usize>, Option<f64>),
    target_scale: f64,
    (m, e): (f64, i32),
    penalty: f64,
) -> Result<Fit> {
    let e = e.saturating_add(rss_exponent(problem, exponent(target_scale)));
    let rss = ldexp(m, e);
    finish_parts(
        problem,
        solver,
        beta,
        rank,
        condition,
        (rss, (m, e)),
        penalty,
    )
}

/// The exponent `e` with caller-unit sums of squares `= scaled * 2^e`, for
/// residuals in units of `2^target_exp` and the problem's weight scale.
pub(crate) fn rss_exponent(problem: &Problem<'_>, target_exp: i32) -> i32 {
    2 * target_exp + exponent(problem.stats.weight_scale)
}

/// The residual standard error and R² of a fit whose weighted residual sum
/// of squares is `m 2^e` (caller's units), with `residual_df` degrees of
/// freedom, and the centered total sum of squares of the target given as
/// `(tm, te)` (value `tm 2^te`, same units): see [`FitReport::sigma`] and
/// [`FitReport::r_squared`].
fn spread_from(
    (m, e): (f64, i32),
    (tm, te): (f64, i32),
    residual_df: Option<usize>,
) -> (Option<f64>, Option<f64>) {
    let sigma = residual_df.filter(|&df| df > 0).map(|df| {
        let v = m / df as f64;
        if v == 0.0 {
            return 0.0;
        }
        // sqrt(u 2^t) with u in [1, 4) and t even: no overflow or underflow
        // of the square on the way.
        let ev = exponent(v);
        let (mut u, mut t) = (ldexp(v, -ev), e + ev);
        if t.rem_euclid(2) == 1 {
            u *= 2.0;
            t -= 1;
        }
        ldexp(u.sqrt(), t / 2)
    });
    let sigma = sigma.filter(|s| s.is_finite());
    let r_squared = if tm > 0.0 && tm.is_finite() {
        if m == 0.0 {
            Some(1.0)
        } else {
            let (a, b) = (exponent(m), exponent(tm));
            let ratio = ldexp(ldexp(m, -a) / ldexp(tm, -b), a - b + e - te);
            Some(1.0 - ratio).filter(|r| r.is_finite())
        }
    } else {
        None
    };
    (sigma, r_squared)
}

/// What a finished [`Fit`] records of the rows it came from: an in-memory
/// [`Problem`] or a fit state.
pub(crate) struct Origin<'a> {
    pub names: Option<&'a [String]>,
    pub columns: usize,
    pub usable_rows: usize,
    pub intercept: bool,
    /// The problem's fingerprint (0 for a fit state's fits).
    pub fingerprint: u64,
}

impl<'a> Origin<'a> {
    /// The origin of a fit of `problem`.
    pub fn of(problem: &'a Problem<'_>) -> Self {
        Origin {
            names: problem.names(),
            columns: problem.columns(),
            usable_rows: problem.usable_rows(),
            intercept: problem.has_intercept(),
            fingerprint: problem.fingerprint(),
        }
    }
}

/// The numbers of a closed-form fit of one target, before they become a
/// [`Fit`] (see [`assemble`]).
pub(crate) struct Solved {
    /// Slopes in the caller's units.
    pub beta: Vec<f64>,
    pub intercept: f64,
    pub rank: Option<usize>,
    pub condition: Option<f64>,
    /// The weighted residual sum of squares as `(m, e)`, value `m 2^e` in
    /// the caller's units (the scaled form keeps every digit of a value
    /// that would be subnormal).
    pub rss: (f64, i32),
    /// The centered (or, without an intercept, raw) weighted total sum of
    /// squares of the target, in the same form and units.
    pub tss: (f64, i32),
    pub penalty: f64,
}

/// The one way every fit, in memory or from a fit state, closed-form or
/// iterative (which adds its iteration report), becomes a [`Fit`]: refuses non-finite numbers with
/// [`Error::Overflow`], and derives the residual degrees of freedom, the
/// residual standard error and R² from the scaled sums of squares.
pub(crate) fn assemble(
    origin: &Origin<'_>,
    solver: &str,
    factorization: Option<&str>,
    solved: Solved,
) -> Result<Fit> {
    if solved.beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    if !solved.intercept.is_finite() {
        return Err(Error::Overflow { what: "intercept" });
    }
    let rss = ldexp(solved.rss.0, solved.rss.1);
    if !rss.is_finite() {
        return Err(Error::Overflow {
            what: "residual sum of squares",
        });
    }
    if solved.condition.is_some_and(|c| !c.is_finite()) {
        return Err(Error::Overflow {
            what: "condition estimate",
        });
    }
    let residual_df = solved.rank.map(|rank| {
        origin
            .usable_rows
            .saturating_sub(rank + usize::from(origin.intercept))
    });
    let (sigma, r_squared) = spread_from(solved.rss, solved.tss, residual_df);
    Ok(Fit {
        model: LinearModel::fitted(
            origin.names,
            ndarray::Array1::from(solved.beta),
            solved.intercept,
        ),
        report: FitReport {
            solver: solver.to_string(),
            rank: solved.rank,
            columns: origin.columns,
            condition: solved.condition,
            residual_sum_of_squares: rss,
            residual_df,
            sigma,
            r_squared,
            usable_rows: origin.usable_rows,
            penalty: solved.penalty,
            factorization: factorization.map(str::to_string),
            iterations: None,
            fingerprint: origin.fingerprint,
        },
    })
}

/// The weighted residual sum of squares in the caller's units from its
/// value in scaled units (`sum w~ (r / s_y)^2` with `s_y = 2^target_exp`).
///
/// # Errors
/// [`Error::Overflow`] when the value exceeds the range of `f64` (or is
/// not a number).
pub(crate) fn caller_rss(problem: &Problem<'_>, target_exp: i32, scaled: f64) -> Result<f64> {
    let ws = exponent(problem.stats.weight_scale);
    let rss = ldexp(scaled, 2 * target_exp + ws);
    if !rss.is_finite() {
        return Err(Error::Overflow {
            what: "residual sum of squares",
        });
    }
    Ok(rss)
}

/// As [`finish_closed_form`], for solvers that already know the weighted
/// residual sum of squares (caller's units, finite) from their
/// factorisation, so that no pass over the design is needed (the ridge
/// path scores many penalties from one decomposition).
pub(crate) fn finish_with_rss(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    rank: Option<usize>,
    condition: Option<f64>,
    rss: f64,
    penalty: f64,
) -> Result<Fit> {
    finish_parts(
        problem,
        solver,
        beta,
        rank,
        condition,
        (rss, (rss, 0)),
        penalty,
    )
}

/// The common end of [`finish_closed_form`] and [`finish_with_rss`]: the
/// residual sum of squares in caller's units and as `(m, e)` with value
/// `m 2^e` (the scaled form keeps every digit of a value that would be
/// subnormal in caller's units).
fn finish_parts(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    rank: Option<usize>,
    condition: Option<f64>,
    (rss, rss_parts): (f64, (f64, i32)),
    penalty: f64,
) -> Result<Fit> {
    if beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    if !rss.is_finite() {
        return Err(Error::Overflow {
            what: "residual sum of squares",
        });
    }
    let intercept = intercept_for(problem, &beta);
    // "ridge-<factorisation>" names the ridge solver and its route.
    let (solver, factorization) = match solver.strip_prefix("ridge-") {
        Some(route) => ("ridge", route),
        None => (solver, solver.strip_suffix("-refined").unwrap_or(solver)),
    };
    let solved = Solved {
        beta,
        intercept,
        rank,
        condition,
        rss: rss_parts,
        tss: problem.centered_target_squares(),
        penalty,
    };
    assemble(&Origin::of(problem), solver, Some(factorization), solved)
}

/// The intercept `mean(y) - mean(x) . beta` (0 without an intercept).
///
/// Formed directly; when a product `m_j b_j` leaves the range of `f64`
/// (columns and coefficients near the ends of the range), formed again in
/// units of the target scale, where every term is moderate.
pub(crate) fn intercept_for(problem: &Problem<'_>, beta: &[f64]) -> f64 {
    if !problem.has_intercept() {
        return 0.0;
    }
    let st = &problem.stats;
    let mut acc = st.target_mean;
    for (m, b) in st.means.iter().zip(beta) {
        acc -= m * b;
    }
    if acc.is_finite() {
        return acc;
    }
    // m_j b_j = (m_j / s_j) (b_j s_j / s_y) s_y, with |m_j / s_j| below
    // about 2^54 for every column that is not constant.
    let ey = exponent(pow2_scale(st.target_centered_max));
    let mut sum = 0.0;
    for (j, (m, b)) in st.means.iter().zip(beta).enumerate() {
        let ej = exponent(pow2_scale(st.centered_max[j]));
        sum += ldexp(*m, -ej) * ldexp(*b, ej - ey);
    }
    st.target_mean - ldexp(sum, ey)
}

/// Checks a user-supplied tolerance: finite and `>= 0` (the crate's one
/// check, [`crate::error::check_finite_nonnegative`]).
pub(crate) use crate::error::check_finite_nonnegative as check_tolerance;
