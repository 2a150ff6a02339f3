//! The solver trait and what every solver returns.

use std::fmt::Debug;

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
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct Fit {
    /// Coefficients and intercept in the caller's units.
    pub model: LinearModel,
    /// How the fit went.
    pub report: FitReport,
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
    /// Condition estimate of the matrix the solver factored, after exact
    /// power-of-two column scaling: the 1-norm condition number of the
    /// triangular factor of the centered design for QR and Cholesky, the
    /// ratio of the extreme retained singular values for SVD, and that of
    /// the penalised system for ridge. The normal equations' Gram matrix
    /// has about its square. `None` when nothing was factored (the
    /// gradient solvers).
    pub condition: Option<f64>,
    /// Weighted residual sum of squares `sum w_i (y_i - y_hat_i)^2`, formed
    /// from the residuals of the centered problem in scaled units.
    pub residual_sum_of_squares: f64,
    /// Residual degrees of freedom: usable rows minus rank minus the
    /// intercept; `None` when the rank was not measured. (For a penalised
    /// fit this counts the unpenalised parameters; the penalised count is
    /// [`crate::RidgePath::effective_df`].)
    pub residual_df: Option<usize>,
    /// Rows with non-zero weight.
    pub usable_rows: usize,
    /// The L2 penalty applied (0 for unpenalised solvers).
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
    /// Final value of the objective.
    pub final_loss: f64,
    /// Final relative gradient norm.
    pub gradient_norm: f64,
    /// Step size used (the first one for decaying schedules).
    pub step: f64,
    /// The objective at each iteration (possibly thinned).
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
    let rss = crate::linalg::residuals::centered_rss(problem, &beta, target_scale, watch)?;
    let rss = caller_rss(problem, exponent(target_scale), rss)?;
    finish_with_rss(problem, solver, beta, rank, condition, rss, penalty)
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
    if beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    let intercept = intercept_for(problem, &beta);
    if !intercept.is_finite() {
        return Err(Error::Overflow { what: "intercept" });
    }
    if !rss.is_finite() {
        return Err(Error::Overflow {
            what: "residual sum of squares",
        });
    }
    let condition = match condition {
        Some(c) if !c.is_finite() => {
            return Err(Error::Overflow {
                what: "condition estimate",
            })
        }
        other => other,
    };
    // "ridge-<factorisation>" names the ridge solver and its route.
    let (solver, factorization) = match solver.strip_prefix("ridge-") {
        Some(route) => ("ridge", route),
        None => (solver, solver.strip_suffix("-refined").unwrap_or(solver)),
    };
    let residual_df = rank.map(|rank| {
        problem
            .usable_rows()
            .saturating_sub(rank + usize::from(problem.has_intercept()))
    });
    Ok(Fit {
        model: LinearModel::from_parts(ndarray::Array1::from(beta), intercept),
        report: FitReport {
            solver: solver.to_string(),
            rank,
            columns: problem.columns(),
            condition,
            residual_sum_of_squares: rss,
            residual_df,
            usable_rows: problem.usable_rows(),
            penalty,
            factorization: Some(factorization.to_string()),
            iterations: None,
            fingerprint: problem.fingerprint(),
        },
    })
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

/// Checks a user-supplied tolerance.
pub(crate) fn check_tolerance(name: &'static str, value: f64) -> Result<f64> {
    if !value.is_finite() || value < 0.0 {
        return Err(Error::InvalidParameter {
            name,
            value,
            reason: "must be finite and >= 0",
        });
    }
    Ok(value)
}
