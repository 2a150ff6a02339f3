//! The crate's one error type.
//!
//! Every failure is a variant of [`Error`] that carries the numbers needed to
//! find the cause: the row, the column, the parameter or the iteration.

use std::fmt;

/// Which input array a validation error refers to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Input {
    /// The design matrix `X` (n rows, p columns).
    Design,
    /// The target vector `y` (length n).
    Target,
    /// The observation weights (length n).
    Weights,
    /// Rows passed to a prediction or evaluation call.
    NewDesign,
    /// Targets passed to an evaluation call.
    NewTarget,
    /// Starting coefficients given to an iterative solver.
    StartingPoint,
    /// Coefficients given to [`crate::LinearModel::new`] (index `p` is the
    /// intercept).
    Coefficients,
}

impl fmt::Display for Input {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Input::Design => "design matrix",
            Input::Target => "target vector",
            Input::Weights => "weights",
            Input::NewDesign => "rows to predict",
            Input::NewTarget => "targets to evaluate",
            Input::StartingPoint => "starting coefficients",
            Input::Coefficients => "model coefficients",
        })
    }
}

/// Everything that can go wrong when validating a problem or fitting a model.
///
/// Variants carry numbers, not prose, so a program can react to them; the
/// `Display` text names the same numbers for people.
#[non_exhaustive]
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Error {
    /// The design has `design_rows` rows but another input has `len` entries.
    #[error("the design has {design_rows} rows but the {input} has {len} entries")]
    LengthMismatch {
        /// Which input disagrees with the design.
        input: Input,
        /// Rows of the design.
        design_rows: usize,
        /// Length of the other input.
        len: usize,
    },
    /// Rows given for prediction have a different number of columns than the fit.
    #[error("the model was fitted on {expected} columns but {found} were given")]
    ColumnCountMismatch {
        /// Columns the model was fitted on.
        expected: usize,
        /// Columns supplied.
        found: usize,
    },
    /// The design has no rows.
    #[error("the design has no rows")]
    NoRows,
    /// The design has no columns and the intercept is switched off: nothing to fit.
    #[error("the design has no columns and the intercept is off: there is nothing to fit")]
    NothingToFit,
    /// A NaN or infinite value; `column` is `None` for vectors.
    #[error("non-finite value {value} in the {input} at row {row}{}", column.map(|c| format!(", column {c}")).unwrap_or_default())]
    NonFinite {
        /// The array holding the value.
        input: Input,
        /// Row index (0-based).
        row: usize,
        /// Column index (0-based) for matrices.
        column: Option<usize>,
        /// The offending value.
        value: f64,
    },
    /// A weight that is negative (or not finite).
    #[error("weight {value} at row {row} is invalid: weights must be finite and >= 0")]
    InvalidWeight {
        /// Row index (0-based).
        row: usize,
        /// The offending weight.
        value: f64,
    },
    /// A positive weight so small beside the largest that, divided by the
    /// internal weight scale (the power of two at or below the largest
    /// weight), it is no longer a normal `f64`: the row could not take its
    /// part in the fit with its own weight. Set it to 0 or rescale the
    /// weights so that they span less than about `1e307`.
    #[error("weight {value:e} at row {row} is positive but too small beside the largest weight {largest:e} to be represented in scaled form: set it to 0 or narrow the range of the weights")]
    WeightRange {
        /// Row index (0-based).
        row: usize,
        /// The offending weight.
        value: f64,
        /// The largest weight.
        largest: f64,
    },
    /// The values of a column (or of the target) span more than the range
    /// of `f64` about their weighted mean, so that the centered values the
    /// solvers work with (`x - mean`) cannot be represented: for example a
    /// column holding both `-1e308` and `1e308`.
    #[error("the {input}{} spans more than the largest f64 about its mean: its centered values cannot be represented", column.map(|c| format!(" column {c}")).unwrap_or_default())]
    SpreadOverflow {
        /// The array holding the values.
        input: Input,
        /// Column index (0-based) for the design.
        column: Option<usize>,
    },
    /// Every weight is zero, so no row takes part in the fit.
    #[error("all {rows} weights are zero: no row takes part in the fit")]
    AllWeightsZero {
        /// Number of rows.
        rows: usize,
    },
    /// An unpenalised solver needs at least as many usable rows as parameters.
    #[error("{usable_rows} rows with non-zero weight cannot determine {parameters} parameters; use a penalised solver or more data")]
    TooFewRows {
        /// Rows with non-zero weight.
        usable_rows: usize,
        /// Parameters to estimate (columns, plus one for the intercept).
        parameters: usize,
    },
    /// Columns that are, to working precision, combinations of other columns
    /// (or constant beside the intercept).
    #[error("the design is rank deficient: numerical rank {rank} of {columns} columns; dependent columns {dependent:?} (tolerance {tolerance:e}); the SVD solver gives the minimum-norm fit, a ridge penalty also resolves it")]
    RankDeficient {
        /// Numerical rank of the (centered) design.
        rank: usize,
        /// Number of columns.
        columns: usize,
        /// Columns found to depend on earlier columns (0-based, caller's order).
        dependent: Vec<usize>,
        /// Relative tolerance that was applied.
        tolerance: f64,
    },
    /// A Cholesky factorisation met a pivot that was not positive.
    #[error("the Gram matrix is not positive definite: pivot {pivot} is {value:e}")]
    NotPositiveDefinite {
        /// Index of the failed pivot (0-based column).
        pivot: usize,
        /// Value of the pivot when it failed.
        value: f64,
    },
    /// The method cannot deliver the accuracy asked of it on this problem.
    #[error("the {method} method expects about {expected_digits:.1} correct digits here (condition estimate {condition:e}), fewer than the {required_digits} required; use the QR or SVD solver")]
    IllConditioned {
        /// The method that refused.
        method: &'static str,
        /// Its condition estimate of the matrix it would factor.
        condition: f64,
        /// Correct significant digits it expects to deliver.
        expected_digits: f64,
        /// The caller's threshold.
        required_digits: f64,
    },
    /// A setting has a value outside its allowed range.
    #[error("parameter `{name}` = {value} is invalid: {reason}")]
    InvalidParameter {
        /// Name of the setting.
        name: &'static str,
        /// The value given (as f64; counts are converted).
        value: f64,
        /// What the allowed range is.
        reason: &'static str,
    },
    /// A dense factorisation failed to converge (SVD iterations).
    #[error("the {what} did not converge")]
    NoConvergence {
        /// Which factorisation.
        what: &'static str,
    },
    /// An iterative solver hit its iteration limit before meeting its tolerance.
    #[error("not converged after {iterations} iterations: relative gradient norm {gradient_norm:e} > tolerance {tolerance:e}")]
    NotConverged {
        /// Iterations (or epochs) run.
        iterations: usize,
        /// Relative gradient norm at the end.
        gradient_norm: f64,
        /// The tolerance asked for.
        tolerance: f64,
    },
    /// An iterative solver diverged: the loss grew without bound or became non-finite.
    #[error(
        "diverged at iteration {iteration} with step {step:e}: loss {loss:e}; use a smaller step"
    )]
    Diverged {
        /// Iteration (or epoch) at which divergence was detected.
        iteration: usize,
        /// Step size in use.
        step: f64,
        /// Loss value seen (may be infinite or NaN).
        loss: f64,
    },
    /// A computed quantity was not finite (a result that cannot be represented).
    #[error("the {what} is not finite: the problem's values exceed the range of f64")]
    Overflow {
        /// What overflowed.
        what: &'static str,
    },
    /// A result computed for one row is not finite: its true value lies
    /// beyond the range of `f64` (a prediction at values near `1e300`, say).
    #[error("the {what} at row {row} is not finite: it exceeds the range of f64")]
    OverflowAt {
        /// What overflowed.
        what: &'static str,
        /// Row index (0-based).
        row: usize,
    },
    /// A working array sized by the input would need more memory than can
    /// be allocated (or more than `usize` can address), or far more than
    /// the method is meant to use (the dual ridge on a tall design).
    #[error("the {what} would need {bytes} bytes, more than can be allocated")]
    TooLarge {
        /// Which working array.
        what: &'static str,
        /// Bytes it would need.
        bytes: u128,
    },
    /// Inference (standard errors, tests, intervals) was refused for a fit;
    /// the refusal says why and carries its numbers.
    #[error("inference refused: {refusal}")]
    InferenceRefused {
        /// Why inference is not available for this fit.
        refusal: crate::inference::InferenceRefusal,
    },
    /// A penalty in a grid of penalties is negative or not finite.
    #[error(
        "penalty {value} at grid position {index} is invalid: penalties must be finite and >= 0"
    )]
    InvalidGridPenalty {
        /// Position in the grid (0-based).
        index: usize,
        /// The offending value.
        value: f64,
    },
    /// Cross-validation needs at least one row with non-zero weight per fold.
    #[error("{usable_rows} rows with non-zero weight cannot fill {folds} folds")]
    TooFewRowsForFolds {
        /// Rows with non-zero weight.
        usable_rows: usize,
        /// Folds asked for.
        folds: usize,
    },
    /// A fit inside cross-validation failed; `error` is the solver's error.
    #[error("the fit that leaves out fold {fold} failed: {error}")]
    FoldFit {
        /// The held-out fold (0-based).
        fold: usize,
        /// What the solver reported.
        error: Box<Error>,
    },
    /// No penalty of a grid has a finite value of the selection criterion.
    #[error("none of the {penalties} penalties has a finite {criterion} score")]
    NoFiniteScore {
        /// Number of penalties scored.
        penalties: usize,
        /// The criterion that was scored.
        criterion: crate::ridge::Criterion,
    },
    /// The observer asked a fit to stop before it had an answer (a
    /// closed-form fit, or a gradient fit still in its setup passes).
    #[error("stopped by the observer during the {stage} stage after {rows_done} of {rows_total} rows of the pass")]
    Stopped {
        /// The stage running when the observer asked to stop.
        stage: crate::observe::Stage,
        /// Rows of that stage's pass done when it asked (0 for an
        /// iteration).
        rows_done: usize,
        /// Rows of the pass (0 for an iteration).
        rows_total: usize,
    },
}

/// Shorthand for results of this crate.
pub type Result<T> = std::result::Result<T, Error>;
