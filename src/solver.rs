//! The solver trait and what every solver returns.

use std::fmt::Debug;

use crate::error::{Error, Result};
use crate::model::LinearModel;
use crate::problem::Problem;

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
/// let solvers: Vec<Box<dyn Solver>> = vec![Box::new(Qr::default()), Box::new(Cholesky::default()), Box::new(Svd::default())];
/// for solver in &solvers {
///     let fit = solver.fit(&problem)?;
///     println!("{}: {:?}", solver.name(), fit.model.coefficients());
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
pub trait Solver: Send + Sync + Debug {
    /// A short name for reports ("qr", "cholesky", "svd", ...).
    fn name(&self) -> &str;

    /// Fits the model.
    ///
    /// # Errors
    /// Each solver documents its own; every one returns a typed [`Error`]
    /// rather than a model with non-finite coefficients.
    fn fit(&self, problem: &Problem<'_>) -> Result<Fit>;
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
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct FitReport {
    /// The solver's name.
    pub solver: String,
    /// Numerical rank of the centered design (columns that carry information).
    pub rank: usize,
    /// Columns of the design.
    pub columns: usize,
    /// Condition estimate of the centered design after exact power-of-two
    /// column scaling: the 1-norm condition number of its triangular factor
    /// for QR and Cholesky, the ratio of the extreme retained singular values
    /// for SVD. The normal equations' Gram matrix has about its square.
    pub condition: f64,
    /// Weighted residual sum of squares `sum w_i (y_i - y_hat_i)^2`, formed
    /// from the residuals of the centered problem.
    pub residual_sum_of_squares: f64,
    /// Residual degrees of freedom: usable rows minus rank minus the intercept.
    pub residual_df: usize,
    /// Rows with non-zero weight.
    pub usable_rows: usize,
    /// The L2 penalty applied (0 for unpenalised solvers).
    pub penalty: f64,
    /// Iterative solvers: how the iteration went; `None` for closed forms.
    pub iterations: Option<IterationReport>,
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
/// residuals and refuses non-finite results.
pub(crate) fn finish_closed_form(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    rank: usize,
    condition: f64,
    target_scale: f64,
    penalty: f64,
) -> Result<Fit> {
    // Refuse before spending a pass over the design.
    if beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    let rss = crate::linalg::residuals::centered_rss(problem, &beta, target_scale);
    finish_with_rss(problem, solver, beta, rank, condition, rss, penalty)
}

/// As [`finish_closed_form`], for solvers that already know the weighted
/// residual sum of squares (caller's units) from their factorisation, so
/// that no pass over the design is needed (the ridge path scores many
/// penalties from one decomposition).
pub(crate) fn finish_with_rss(
    problem: &Problem<'_>,
    solver: &str,
    beta: Vec<f64>,
    rank: usize,
    condition: f64,
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
    // A residual sum of squares beyond the f64 range (values near 1e300)
    // is reported as infinite; NaN would mean a lost value.
    if rss.is_nan() {
        return Err(Error::Overflow {
            what: "residual sum of squares",
        });
    }
    let residual_df = problem
        .usable_rows()
        .saturating_sub(rank + usize::from(problem.has_intercept()));
    Ok(Fit {
        model: LinearModel::new(ndarray::Array1::from(beta), intercept),
        report: FitReport {
            solver: solver.to_string(),
            rank,
            columns: problem.cols(),
            condition,
            residual_sum_of_squares: rss,
            residual_df,
            usable_rows: problem.usable_rows(),
            penalty,
            iterations: None,
        },
    })
}

/// The intercept `mean(y) - mean(x) . beta` (0 without an intercept).
pub(crate) fn intercept_for(problem: &Problem<'_>, beta: &[f64]) -> f64 {
    if !problem.has_intercept() {
        return 0.0;
    }
    let mut acc = problem.stats.target_mean;
    for (m, b) in problem.stats.means.iter().zip(beta) {
        acc -= m * b;
    }
    acc
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
