//! The crate's one error type.
//!
//! Every failure is a variant of [`Error`] that carries the numbers needed to
//! find the cause: the row, the column, the parameter or the iteration.

use std::fmt;

use crate::fmt::Num;

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
    #[error("non-finite value {} in the {input} at row {row}{} (rows and columns count from 0)", Num(*value), column.map(|c| format!(", {}", crate::fmt::column(c, column_name.as_deref()))).unwrap_or_default())]
    NonFinite {
        /// The array holding the value.
        input: Input,
        /// Row index (0-based).
        row: usize,
        /// Column index (0-based) for matrices.
        column: Option<usize>,
        /// The column's name, when the problem or model has names.
        column_name: Option<String>,
        /// The offending value.
        value: f64,
    },
    /// A weight that is negative (or not finite).
    #[error("weight {} at row {row} (counting from 0) is invalid: weights must be finite and >= 0", Num(*value))]
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
    #[error("weight {} at row {row} (counting from 0) is positive but too small beside the largest weight {} to be represented in scaled form: set it to 0 or narrow the range of the weights", Num(*value), Num(*largest))]
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
    #[error("the {input}{} spans more than the largest f64 about its mean: its centered values cannot be represented", column.map(|c| format!(" {} (counting from 0)", crate::fmt::column(c, column_name.as_deref()))).unwrap_or_default())]
    SpreadOverflow {
        /// The array holding the values.
        input: Input,
        /// Column index (0-based) for the design.
        column: Option<usize>,
        /// The column's name, when the problem has names.
        column_name: Option<String>,
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
    #[error("the design is rank deficient: numerical rank {rank} of {columns} columns (columns count from 0); {} (relative tolerance {}); the SVD solver gives the minimum-norm fit, a ridge penalty also resolves it", crate::fmt::dependence(dependent, combinations, names.as_deref()), Num(*tolerance))]
    RankDeficient {
        /// Numerical rank of the (centered) design.
        rank: usize,
        /// Number of columns.
        columns: usize,
        /// Columns found to depend on earlier columns (0-based, caller's order).
        dependent: Vec<usize>,
        /// Relative tolerance that was applied.
        tolerance: f64,
        /// For each entry of `dependent`, the independent columns (0-based)
        /// it is, to working precision, a combination of (an empty list for
        /// a column that is constant beside the intercept, or zero); the
        /// whole vector is empty when the factor at hand cannot tell.
        combinations: Vec<Vec<usize>>,
        /// The design's column names, when the problem has names.
        names: Option<Vec<String>>,
    },
    /// A Cholesky factorisation met a pivot that was not positive.
    #[error("the Gram matrix is not positive definite: pivot {pivot} (counting from 0) is {}", Num(*value))]
    NotPositiveDefinite {
        /// Index of the failed pivot (0-based column).
        pivot: usize,
        /// Value of the pivot when it failed.
        value: f64,
    },
    /// The method cannot deliver the accuracy asked of it on this problem.
    #[error("the {method} method expects about {expected_digits:.1} correct digits here (condition number of the Gram matrix {}), fewer than the {} required; use the QR or SVD solver", Num(*condition), Num(*required_digits))]
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
    #[error("parameter `{name}` = {} is invalid: {reason}", Num(*value))]
    InvalidParameter {
        /// Name of the setting.
        name: &'static str,
        /// The value given (as f64; counts are converted).
        value: f64,
        /// What the allowed range is.
        reason: &'static str,
    },
    /// A linear-algebra backend was asked for that this build does not
    /// contain (see [`crate::set_backend`]).
    #[error("the {backend} backend is not compiled into this build: enable the cargo feature lapack-openblas-system or lapack-openblas-static")]
    BackendUnavailable {
        /// The backend's name (`"lapack"`).
        backend: &'static str,
    },
    /// A dense factorisation failed to converge (SVD iterations).
    #[error("the {what} did not converge")]
    NoConvergence {
        /// Which factorisation.
        what: &'static str,
    },
    /// An iterative solver hit its iteration limit before meeting its tolerance.
    #[error("not converged after {iterations} iterations: relative gradient norm {} > tolerance {}", Num(*gradient_norm), Num(*tolerance))]
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
        "diverged at iteration {iteration} with step {}: loss {}; use a smaller step", Num(*step), Num(*loss)
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
        refusal: crate::vocabulary::InferenceRefusal,
    },
    /// A penalty in a grid of penalties is negative or not finite.
    #[error(
        "penalty {} at grid position {index} (counting from 0) is invalid: penalties must be finite and >= 0", Num(*value)
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
        criterion: crate::vocabulary::Criterion,
    },
    /// A penalty criterion that needs the rows was asked of a summary that
    /// does not keep them (a fit state keeps `O(p^2)` numbers, not the
    /// rows each leverage needs).
    #[error("the {criterion} criterion needs every row's leverage, and a fit state does not keep the rows: score with generalized cross-validation, or fit the rows in memory")]
    CriterionNeedsRows {
        /// The criterion refused.
        criterion: crate::vocabulary::Criterion,
    },
    /// A saved form (feature `serde`) with another format tag or version
    /// than this version of the crate reads.
    #[error("the saved {what} has format {found:?} version {version}; this crate reads format {expected:?} version {supported}")]
    SavedFormat {
        /// What was being read ("model", "fit", "inference").
        what: &'static str,
        /// The format tag this crate writes and reads.
        expected: &'static str,
        /// The version this crate writes and reads.
        supported: u32,
        /// The format tag found.
        found: String,
        /// The version found.
        version: u64,
    },
    /// A list of column names whose length is not the number of columns.
    #[error("{found} names were given for {expected} coefficients (one name per design column; the intercept has none)")]
    NameCountMismatch {
        /// Columns of the design (or coefficients of the model).
        expected: usize,
        /// Names given.
        found: usize,
    },
    /// A column name that is empty or repeats an earlier one.
    #[error("column name {name:?} at position {position} (counting from 0) is invalid: {reason}")]
    InvalidName {
        /// Position of the name in the list (0-based).
        position: usize,
        /// The offending name.
        name: String,
        /// What is wrong with it.
        reason: &'static str,
    },
    /// Two fit states (or a state and a block of rows) describe different
    /// problems: their column counts, target counts, intercepts or column
    /// names differ (for names, `left` and `right` are both the index of
    /// the first differing name; for the intercept, 0 means off and 1 on).
    #[error("the fit states differ in their {what}: {left} against {right}")]
    StateMismatch {
        /// What differs.
        what: &'static str,
        /// The value of the state being merged into (or absorbing).
        left: usize,
        /// The value of the other state (or of the block).
        right: usize,
    },
    /// A block of targets has another number of columns than the state fits.
    #[error("the state fits {expected} targets but the block has {found} target columns")]
    TargetCountMismatch {
        /// Targets of the state.
        expected: usize,
        /// Target columns of the block.
        found: usize,
    },
    /// A second pass over a fit state's rows (see
    /// [`crate::state::SecondPass`]) was given other rows than the state
    /// absorbed: a block starting at another row than the next one
    /// expected, more rows than the state holds, or, at the end, fewer rows
    /// or another count of rows with positive weight.
    #[error("the second pass expected {what} {expected} but was given {found}")]
    PassMismatch {
        /// What disagrees ("first row of the block", "rows", "rows with positive weight").
        what: &'static str,
        /// The value the state implies.
        expected: usize,
        /// The value the pass was given.
        found: usize,
    },
    /// A fit state read back (feature `serde`) is inconsistent: a size that
    /// does not match, a number that is not finite, a negative weight, a
    /// non-zero entry below the diagonal of a triangle.
    #[error("invalid fit state: {field} at index {index}: {reason}")]
    InvalidState {
        /// The field of the serialised form.
        field: &'static str,
        /// Index of the offending entry (0 for scalars).
        index: usize,
        /// What is wrong with it.
        reason: &'static str,
    },
    /// The observer asked a fit to stop before it had an answer (a
    /// closed-form fit, or a gradient fit still in its setup passes).
    #[error("stopped by the observer during the {stage} stage after {rows_done} of {rows_total} rows of the pass")]
    Stopped {
        /// The stage running when the observer asked to stop.
        stage: crate::vocabulary::Stage,
        /// Rows of that stage's pass done when it asked (0 for an
        /// iteration).
        rows_done: usize,
        /// Rows of the pass (0 for an iteration).
        rows_total: usize,
    },
}

impl Error {
    /// The same error with the column named where it points at a column
    /// of a design (or of rows to predict) by index alone.
    pub(crate) fn name_columns(self, names: Option<&[String]>) -> Error {
        let Some(list) = names else {
            return self;
        };
        match self {
            Error::NonFinite {
                input: input @ (Input::Design | Input::NewDesign),
                row,
                column: Some(c),
                value,
                column_name: None,
            } => Error::NonFinite {
                input,
                row,
                column: Some(c),
                value,
                column_name: list.get(c).cloned(),
            },
            Error::SpreadOverflow {
                input: Input::Design,
                column: Some(c),
                column_name: None,
            } => Error::SpreadOverflow {
                input: Input::Design,
                column: Some(c),
                column_name: list.get(c).cloned(),
            },
            Error::RankDeficient {
                rank,
                columns,
                dependent,
                tolerance,
                combinations,
                names: None,
            } => Error::RankDeficient {
                rank,
                columns,
                dependent,
                tolerance,
                combinations,
                names: Some(list.to_vec()),
            },
            other => other,
        }
    }
}

/// Shorthand for results of this crate.
pub type Result<T> = std::result::Result<T, Error>;

/// Whether `value` is finite and `>= 0`: the one test of every weight,
/// penalty, tolerance and other quantity that must be a non-negative number.
#[inline]
pub(crate) fn finite_nonnegative(value: f64) -> bool {
    value.is_finite() && value >= 0.0
}

/// `value` when it is finite and `>= 0`.
///
/// # Errors
/// [`Error::InvalidParameter`] naming `name` otherwise.
pub(crate) fn check_finite_nonnegative(name: &'static str, value: f64) -> Result<f64> {
    if !finite_nonnegative(value) {
        return Err(Error::InvalidParameter {
            name,
            value,
            reason: "must be finite and >= 0",
        });
    }
    Ok(value)
}
