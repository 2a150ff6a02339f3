//! The small vocabulary enums that the error type and several modules
//! share: which stage of a fit was running ([`Stage`]), which score picks a
//! ridge penalty ([`Criterion`]), and why inference was refused
//! ([`InferenceRefusal`]).
//!
//! A leaf module: it imports nothing from the crate but `serde_float` (for
//! the saved form), so `error` can name these types without depending on
//! the modules that use them. Each is re-exported where callers find it:
//! `observe::Stage`, `ridge::Criterion`, `inference::InferenceRefusal`.

use std::fmt;

/// What part of a fit is running.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Stage {
    /// Reading the rows into the factorisation: the Gram matrix (Cholesky,
    /// ridge by Cholesky), the triangular factor (QR, SVD, ridge by QR or
    /// SVD, and the Cholesky solver's diagnosis of a failed factor), or the
    /// passes of the dual ridge on a wide design (column norms, the row
    /// Gram, `Z^T alpha`; the last two read every row in each column block
    /// and so report their rows once, at the end of the pass).
    Factor,
    /// A residual pass: the residual sum of squares of a fit, or the
    /// leave-one-out errors of [`crate::RidgePath::curve_observed`].
    Residuals,
    /// A pass of an iterative-refinement step ([`crate::Qr::refined`]);
    /// [`Progress::iteration`](crate::Progress::iteration) is the step.
    Refinement,
    /// The gradient solvers' setup: column norms, the loss at the start
    /// and the step-size estimate.
    Setup,
    /// A gradient iteration (an epoch for [`crate::Stochastic`]) has ended;
    /// no rows are counted.
    Iteration,
}

impl fmt::Display for Stage {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Stage::Factor => "factoring",
            Stage::Residuals => "residual pass",
            Stage::Refinement => "refinement",
            Stage::Setup => "setup",
            Stage::Iteration => "iteration",
        })
    }
}

/// The score that picks the penalty.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Criterion {
    /// Leave-one-out cross-validation error, exact for each penalty (one
    /// extra pass over the design when rows >= columns).
    LeaveOneOut,
    /// Generalized cross-validation: the leave-one-out formula with every
    /// leverage replaced by their mean; costs nothing beyond the path.
    GeneralizedCrossValidation,
}

impl Criterion {
    /// The criterion in words, as messages print it.
    pub fn label(self) -> &'static str {
        match self {
            Criterion::LeaveOneOut => "leave-one-out",
            Criterion::GeneralizedCrossValidation => "generalized cross-validation",
        }
    }
}

impl fmt::Display for Criterion {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.label())
    }
}

/// Why inference was refused for a fit (carried by [`crate::Error::InferenceRefused`]).
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
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
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
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        leverage: f64,
    },
    /// The fit's report does not match the problem given (another data set?).
    DifferentProblem {
        /// Usable rows recorded in the fit's report.
        fit_rows: usize,
        /// Usable rows of the problem given.
        problem_rows: usize,
    },
    /// The problem given is not the one the fit (or the inference) was
    /// computed from: its [`crate::Problem::fingerprint`] differs.
    DifferentData {
        /// The fingerprint recorded at fit time.
        recorded: u64,
        /// The fingerprint of the problem given.
        given: u64,
    },
    /// The fit's coefficients are further from the exact least-squares
    /// solution than [`crate::inference::MAX_FIT_DISTANCE`] standard errors (beyond
    /// rounding): intervals around them would be shifted.
    FarFromSolution {
        /// The distance in standard errors (see [`crate::Inference::fit_distance`];
        /// `+inf` when the exact solution fits the data exactly and the
        /// fit does not).
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        distance: f64,
        /// The bound, [`crate::inference::MAX_FIT_DISTANCE`].
        #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
        bound: f64,
    },
    /// A sandwich covariance was asked of a fit state: it needs every
    /// row's residual and leverage, which a state does not keep (the
    /// second pass over the same blocks gives it).
    NeedsRows {
        /// The covariance asked for.
        covariance: CovarianceKind,
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
            InferenceRefusal::DifferentData { recorded, given } => write!(
                f,
                "the problem given (fingerprint {given:016x}) is not the one that was fitted (fingerprint {recorded:016x}): pass the problem that was fitted"
            ),
            InferenceRefusal::FarFromSolution { distance, bound } => write!(
                f,
                "the fit's coefficients are {distance:.3e} standard errors from the exact least-squares solution (at most {bound} accepted): fit with a closed-form solver, or tighten the iterative tolerance"
            ),
            InferenceRefusal::NeedsRows { covariance } => write!(
                f,
                "the {} covariance needs every row's residual and leverage, which a fit state does not keep: feed the blocks again to the state's second pass",
                covariance.name()
            ),
        }
    }
}

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
}
