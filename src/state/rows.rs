//! Rows in memory into a fit state: the one path of every closed-form fit.
//!
//! A block of rows is summarised by the validation pass of a [`Problem`]
//! (weighted means, extremes, the weight scale: in parallel), reduced by
//! the row passes of [`crate::passes`] (fixed partition and fold tree: the
//! same bits for any thread count) in the block's own units, and folded
//! into the state. The in-memory [`crate::Qr`] and [`crate::Cholesky`] are
//! this path with the whole problem as one block.

use ndarray::{ArrayView1, ArrayView2, Axis};

use faer::Mat;

use super::Core;
use crate::error::{Error, Input, Result};
use crate::observe::{Stage, Watch};
use crate::prep::{Scaling, Tail, TargetColumns};
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp, pow2_scale, Neumaier};

/// Means, extremes and scale exponents of a block's targets.
pub(crate) struct TargetSummary {
    pub means: Vec<f64>,
    pub lo: Vec<f64>,
    pub hi: Vec<f64>,
    pub exps: Vec<i32>,
}

impl TargetSummary {
    /// The summary of a problem's own target, in the units of `scaling`.
    pub fn of(problem: &Problem<'_>, scaling: &Scaling) -> Self {
        let st = &problem.stats;
        TargetSummary {
            means: vec![st.target_mean],
            lo: vec![st.target_lo],
            hi: vec![st.target_hi],
            exps: vec![scaling.target_exp],
        }
    }
}

impl Core {
    /// The core of a problem's rows with `targets.means.len()` targets,
    /// in the units of `scaling` (columns) and of the problem's weight
    /// scale (a power of four); with `log_weights`, the sum of the log
    /// weights is formed (one pass over the weights).
    pub(crate) fn of_problem(
        problem: &Problem<'_>,
        scaling: &Scaling,
        targets: TargetSummary,
        names: Option<Vec<String>>,
        log_weights: bool,
    ) -> Core {
        let st = &problem.stats;
        let mut logs = Neumaier::default();
        if let (true, Some(w)) = (log_weights, problem.weights()) {
            for &v in w.iter().filter(|&&v| v > 0.0) {
                logs.add(v.ln());
            }
        }
        let cat = |a: &[f64], b: Vec<f64>| a.iter().copied().chain(b).collect::<Vec<f64>>();
        Core {
            p: problem.columns(),
            k: targets.means.len(),
            intercept: problem.has_intercept(),
            names,
            rows: problem.rows(),
            usable: st.usable_rows,
            weight: st.total_weight,
            wexp: exponent(st.weight_scale) / 2,
            largest_weight: st.largest_weight,
            log_weights: logs.value(),
            means: cat(&st.means, targets.means),
            lo: cat(&st.lo, targets.lo),
            hi: cat(&st.hi, targets.hi),
            exps: scaling
                .scale_exp
                .iter()
                .copied()
                .chain(targets.exps)
                .collect(),
        }
    }
}

/// A block of rows ready to be reduced into a state: its problem (the
/// design and the first target), the lossless scaling (tolerance 0: only
/// columns without any spread are zeroed), the other targets, and the core
/// of the block alone.
pub(crate) struct Block<'a> {
    pub problem: Problem<'a>,
    pub scaling: Scaling,
    /// The targets, their means and inverse scales, when there are several.
    targets: Option<(ArrayView2<'a, f64>, Vec<f64>, Vec<f64>)>,
    pub core: Core,
}

impl Block<'_> {
    /// What follows the design in the block's filled rows.
    pub fn tail(&self) -> Tail<'_> {
        match &self.targets {
            Some((ys, means, inv)) => Tail::Targets(TargetColumns {
                ys: ys.view(),
                means,
                inv,
            }),
            None => Tail::Target,
        }
    }
}

/// What a block of rows brings to a state.
pub(crate) enum Prepared<'a> {
    /// Rows with a non-zero weight: reduce them.
    Rows(Box<Block<'a>>),
    /// No usable row (an empty block, or every weight zero): the core only
    /// counts the rows.
    Empty(Core),
}

/// Adds `base` to the row an error names (rows of a block are numbered in
/// the whole stream), and says `target` for the design errors of a
/// problem built over the targets.
fn in_stream(e: Error, base: usize, over_targets: bool, k: usize) -> Error {
    let at = |row: usize| base.saturating_add(row);
    let input_of = |input: Input| {
        if over_targets && input == Input::Design {
            Input::Target
        } else {
            input
        }
    };
    match e {
        Error::NonFinite {
            input,
            row,
            column,
            column_name,
            value,
        } => {
            let input = input_of(input);
            let column = target_column(input, column, k);
            Error::NonFinite {
                input,
                row: at(row),
                column,
                column_name: column_name.filter(|_| input == Input::Design),
                value,
            }
        }
        Error::SpreadOverflow {
            input,
            column,
            column_name,
        } => {
            let input = input_of(input);
            let column = target_column(input, column, k);
            Error::SpreadOverflow {
                input,
                column,
                column_name: column_name.filter(|_| input == Input::Design),
            }
        }
        Error::InvalidWeight { row, value } => Error::InvalidWeight {
            row: at(row),
            value,
        },
        Error::WeightRange {
            row,
            value,
            largest,
        } => Error::WeightRange {
            row: at(row),
            value,
            largest,
        },
        other => other,
    }
}

/// The column an error about `input` names: a target's index only when
/// there are several targets.
fn target_column(input: Input, column: Option<usize>, k: usize) -> Option<usize> {
    match input {
        Input::Target if k > 1 => Some(column.unwrap_or(0)),
        Input::Target => None,
        _ => column,
    }
}

impl<'a> Block<'a> {
    /// Validates and summarises a block for a state whose core is `state`
    /// (rows in errors numbered after the rows it holds).
    ///
    /// # Errors
    /// As [`crate::FitState::absorb`].
    pub fn prepare(
        state: &Core,
        x: ArrayView2<'a, f64>,
        ys: ArrayView2<'a, f64>,
        w: Option<ArrayView1<'a, f64>>,
    ) -> Result<Prepared<'a>> {
        state.check_shapes(&x, &ys, w.as_ref())?;
        let (base, k) = (state.rows, state.k);
        let n = x.nrows();
        let empty = |rows: usize| {
            let mut core = Core::new(state.p, k, state.intercept)?;
            core.rows = rows;
            core.names.clone_from(&state.names);
            Ok(Prepared::Empty(core))
        };
        if n == 0 {
            return empty(0);
        }
        let mut builder =
            Problem::builder(x, ys.index_axis_move(Axis(1), 0)).with_intercept(state.intercept);
        if let Some(w) = w {
            builder = builder.with_weights(w);
        }
        let problem = match builder.build() {
            Ok(problem) => problem,
            Err(Error::AllWeightsZero { .. }) => {
                state.check_values(&x, &ys, w.as_ref())?;
                return empty(n);
            }
            Err(e) => return Err(in_stream(e, base, false, k)),
        };
        // A positive weight too small beside the largest of the union.
        if let (Some(w), true) = (w, state.usable > 0) {
            let largest = state.largest_weight.max(problem.stats.largest_weight);
            let e = exponent(largest);
            let wexp = (e - e.rem_euclid(2)) / 2;
            if let Some((row, &value)) = w
                .iter()
                .enumerate()
                .find(|(_, &v)| v > 0.0 && ldexp(v, -2 * wexp) < f64::MIN_POSITIVE)
            {
                return Err(Error::WeightRange {
                    row: base.saturating_add(row),
                    value,
                    largest,
                });
            }
        }
        let scaling = Scaling::new(&problem, 0.0);
        let (summary, targets) = if k == 1 {
            (TargetSummary::of(&problem, &scaling), None)
        } else {
            let mut over = Problem::builder(ys, ys.index_axis_move(Axis(1), 0))
                .with_intercept(state.intercept);
            if let Some(w) = w {
                over = over.with_weights(w);
            }
            let over = over.build().map_err(|e| in_stream(e, base, true, k))?;
            let st = &over.stats;
            let scales: Vec<f64> = st.centered_max.iter().map(|&c| pow2_scale(c)).collect();
            let inv = scales.iter().map(|s| 1.0 / s).collect();
            let columns = (ys, st.means.clone(), inv);
            let summary = TargetSummary {
                means: st.means.clone(),
                lo: st.lo.clone(),
                hi: st.hi.clone(),
                exps: scales.iter().map(|&s| exponent(s)).collect(),
            };
            (summary, Some(columns))
        };
        let core = Core::of_problem(&problem, &scaling, summary, state.names.clone(), true);
        Ok(Prepared::Rows(Box::new(Block {
            problem,
            scaling,
            targets,
            core,
        })))
    }
}

/// Validates and summarises a block for a state whose core is `state`,
/// then reduces its rows with `pass` (the state kind's row pass, reporting
/// each row block to `observer`): the block's core and matrix, for the
/// state to fold in (an empty matrix when no row is usable, which the fold
/// never reads).
///
/// # Errors
/// As [`crate::FitState::absorb`], with column names; [`Error::Stopped`].
pub(crate) fn reduce_block<'a>(
    state: &Core,
    x: ArrayView2<'a, f64>,
    ys: ArrayView2<'a, f64>,
    w: Option<ArrayView1<'a, f64>>,
    observer: &dyn crate::Observer,
    pass: impl FnOnce(&Problem<'_>, &Scaling, Tail<'_>, &Watch<'_>) -> Result<Mat<f64>>,
) -> Result<(Core, Mat<f64>)> {
    let named = |e: Error| e.name_columns(state.names.as_deref());
    match Block::prepare(state, x, ys, w).map_err(named)? {
        Prepared::Empty(core) => Ok((core, Mat::zeros(0, 0))),
        Prepared::Rows(block) => {
            let watch = Watch::new(observer);
            watch.begin(Stage::Factor, block.problem.rows());
            let m = pass(&block.problem, &block.scaling, block.tail(), &watch)?;
            Ok((block.core, m))
        }
    }
}
