//! The one module of the example that talks to leastline's fitting API.
//!
//! Everything else (reading, reports, plots, progress) works on the plain
//! types defined here ([`Summary`], [`RowTable`], [`Curve`], [`Comparison`],
//! [`Predicted`]), so a change of the library's API is absorbed here.
//!
//! The [`Fitter`] receives the file's rows one block at a time. By default
//! it gathers the blocks into one in-memory design (with fallible
//! allocation) and calls the in-memory solvers when the last block has
//! arrived: the inference, the per-row tables, ridge's chosen penalty, the
//! gradient solvers and the comparison need every row. With
//! `Settings::stream` each block is absorbed into a fit state (a
//! `TriangleState` for qr, svd and ridge at a fixed penalty, a
//! `CrossProductState` for cholesky) and dropped, so memory stays bounded
//! by one block whatever the file's length; the state finishes into the
//! same kind of `Fit`, without the inference.
//!
//! Library calls made here (the list to revisit when the API changes):
//! - `Problem::builder(x, y).with_weights(w).with_intercept(b).build()`, and
//!   `Problem::{design, target, weights, rows, usable_rows}`;
//! - `Solver::fit` of `Qr::new()`, `Qr::refined()`, `Cholesky`, `Svd`,
//!   `Ridge::new(penalty).with_standardize(standardize)`; `Solver::fit_observed` of
//!   `GradientDescent`, `Accelerated`, `Stochastic` (fields `tolerance`,
//!   `max_iterations`/`epochs`, `penalty`, `seed`; `Progress::iteration`,
//!   `Control::Continue`; the observer is a `Fn + Sync` closure);
//! - `RidgePath::{new, default_grid, curve, fit}` with `ridge::Criterion`,
//!   and the `PenaltyCurve` fields;
//! - `Inference::{with_options, with_names, diagnostics, predict}`,
//!   `InferenceOptions::level`, its `Display`, and the fields `options`,
//!   `residual_sd`, `residual_variance`, `critical_value`, `covariance`,
//!   `goodness`, `coefficients`, `intercept`; `Diagnostics` fields;
//! - `LinearModel::{coefficients, intercept, predict, cols}`, the `Fit` and
//!   `FitReport` fields (`rank`, `condition` and `residual_df` are `None`
//!   when the solver does not measure them), `IterationReport` fields;
//! - `Error::{RankDeficient, NonFinite, InvalidWeight, WeightRange, InferenceRefused}`
//!   (turned into column names and file lines);
//! - the crate's serde impls of `Fit` and `Inference` for the saved model
//!   (the library validates a deserialised `Inference` on the way in);
//! - `TriangleState::{new, finish, finish_min_norm, finish_ridge}`,
//!   `CrossProductState::{new, finish}`, `FitState::{absorb_target, layout}`
//!   and `StateLayout::rows` (the streamed path); `FitReport::{sigma,
//!   r_squared}` of the state fits.

use std::fmt;
use std::path::{Path, PathBuf};
use std::time::Instant;

use leastline::ridge::Criterion;
use leastline::{
    Accelerated, Cholesky, Control, CrossProductState, Error, Fit, FitState, GradientDescent,
    Inference, InferenceOptions, Problem, Qr, Ridge, RidgePath, Solver, Stochastic, Svd,
    TriangleState,
};
use ndarray::{Array1, Array2, ArrayView2};
use serde_json::{json, Value};

use crate::args::{PenaltyArg, SolverName};
use crate::read::{Block, Column};

/// Runs of each solver in a comparison; the fastest is reported.
const TIMED_RUNS: usize = 3;

/// Penalties scored when ridge chooses its penalty.
const GRID_POINTS: usize = 60;

/// What to fit and how.
#[derive(Debug, Clone)]
pub struct Settings {
    /// The solver.
    pub solver: SolverName,
    /// Ridge or gradient penalty.
    pub penalty: Option<PenaltyArg>,
    /// Ridge: penalise standardised slopes.
    pub standardize: bool,
    /// Gradient solvers: tolerance.
    pub tolerance: Option<f64>,
    /// Gradient solvers: iteration limit.
    pub max_iterations: Option<usize>,
    /// Stochastic: shuffle seed.
    pub seed: u64,
    /// Fit an intercept.
    pub intercept: bool,
    /// Level of the intervals.
    pub level: f64,
    /// Keep the per-row table (fitted values, leverages, ...) for plots.
    pub keep_rows: bool,
    /// Absorb each block into a fit state instead of gathering the rows
    /// (`--stream`; the flags were checked to allow it).
    pub stream: bool,
}

/// Names of the columns, for messages, reports and the saved model.
#[derive(Debug, Clone)]
pub struct Names {
    /// The target.
    pub target: Column,
    /// The predictors, in design order.
    pub predictors: Vec<Column>,
}

/// A fit that failed or a model file that is not valid.
#[derive(Debug)]
pub enum FitError {
    /// The library refused the fit (or a prediction); the message names
    /// columns and lines where the library named indices.
    Refused { what: String, message: String },
    /// The rows do not fit in memory.
    TooLarge { values: usize },
    /// A saved model cannot be used.
    BadModel { path: PathBuf, message: String },
    /// A saved model cannot be written.
    Write { path: PathBuf, message: String },
}

impl fmt::Display for FitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FitError::Refused { what, message } => write!(f, "{what}: {message}"),
            FitError::TooLarge { values } => write!(
                f,
                "cannot hold the data in memory ({values} numbers); fit fewer columns or rows"
            ),
            FitError::BadModel { path, message } => {
                write!(f, "{}: not a usable saved model: {message}", path.display())
            }
            FitError::Write { path, message } => {
                write!(f, "cannot write {}: {message}", path.display())
            }
        }
    }
}

impl std::error::Error for FitError {}

/// Gathers blocks of rows (or absorbs them into a fit state), then fits.
#[derive(Debug)]
pub struct Fitter {
    settings: Settings,
    cols: usize,
    x: Vec<f64>,
    y: Vec<f64>,
    w: Option<Vec<f64>>,
    lines: Vec<u64>,
    /// The fit state of the streamed path (`None` when gathering).
    state: Option<Streaming>,
    /// Blocks received.
    blocks: usize,
}

/// The fit state a streamed fit absorbs its blocks into.
#[derive(Debug)]
enum Streaming {
    /// qr, svd, ridge: the accuracy of QR.
    Triangle(TriangleState),
    /// cholesky: the normal equations.
    Cross(CrossProductState),
}

/// How an iterative fit is going: `(iteration, iteration limit)`. Called
/// from the library's worker threads, hence `Sync`.
pub type Observer<'o> = &'o (dyn Fn(usize, usize) + Sync);

/// Iterations of an iterative fit.
#[derive(Debug, Clone, PartialEq)]
pub struct Iterations {
    /// Iterations (epochs for stochastic) run.
    pub count: usize,
    /// Whether the tolerance was met.
    pub converged: bool,
    /// Relative gradient norm at the end.
    pub gradient_norm: f64,
    /// Full reads of the data.
    pub passes: usize,
}

/// One parameter's uncertainty.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// Standard error.
    pub std_error: f64,
    /// Lower end at the chosen level.
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// Two-sided p-value of "this parameter is 0".
    pub p_value: f64,
}

/// Classical inference, when the fit allows it.
#[derive(Debug, Clone, PartialEq)]
pub struct Uncertainty {
    /// Level of the intervals.
    pub level: f64,
    /// Residual standard deviation.
    pub sigma: f64,
    /// R² (about the mean with an intercept, about zero without).
    pub r_squared: f64,
    /// Adjusted R².
    pub adjusted_r_squared: f64,
    /// Whether R² is about the mean.
    pub centered: bool,
    /// One per predictor.
    pub slopes: Vec<Interval>,
    /// The intercept's, when fitted.
    pub intercept: Option<Interval>,
    /// The crate's own plain-text summary of the inference.
    pub text: String,
}

/// Everything the reports need about one fit.
#[derive(Debug, Clone, PartialEq)]
pub struct Summary {
    /// The flag value asked for.
    pub requested: &'static str,
    /// The solver's own name from its report (`ridge-svd`, ...).
    pub solver: String,
    /// One slope per predictor.
    pub coefficients: Vec<f64>,
    /// The intercept, when fitted.
    pub intercept: Option<f64>,
    /// Weighted residual sum of squares.
    pub rss: f64,
    /// Rows of non-zero weight.
    pub rows_used: usize,
    /// Rows read.
    pub rows_read: usize,
    /// Numerical rank.
    pub rank: Option<usize>,
    /// Predictor columns.
    pub columns: usize,
    /// Condition estimate (`None` when the solver does not estimate one).
    pub condition: Option<f64>,
    /// Residual degrees of freedom.
    pub residual_df: Option<usize>,
    /// The penalty applied.
    pub penalty: f64,
    /// The criterion that chose the penalty, when one did.
    pub chosen_by: Option<&'static str>,
    /// When a criterion chose the penalty: `Some(true)` if it is the
    /// smallest or the largest of the grid (the best may lie beyond).
    pub chosen_at_edge: Option<bool>,
    /// Iterative fits: how the iteration went.
    pub iterations: Option<Iterations>,
    /// Inference, or why the library refused it.
    pub uncertainty: Result<Uncertainty, String>,
    /// Seconds spent in the solver.
    pub seconds: f64,
    /// Streamed fits: the number of blocks absorbed (`None` when the rows
    /// were held in memory).
    pub streamed_blocks: Option<usize>,
    /// The residual standard deviation of the solver's own report (shown
    /// for streamed fits, which have no inference).
    pub sigma: Option<f64>,
    /// R² of the solver's own report.
    pub r_squared: Option<f64>,
}

/// Per-row values for the plots (rows of non-zero weight only).
#[derive(Debug, Clone, PartialEq)]
pub struct RowTable {
    /// Line of each row in the file.
    pub lines: Vec<u64>,
    /// Observed target.
    pub observed: Vec<f64>,
    /// Fitted target.
    pub fitted: Vec<f64>,
    /// Leverage, internally studentized residual and Cook's distance, when
    /// inference is available.
    pub diagnostics: Option<RowDiagnostics>,
    /// Rows left out of the table because their weight is 0.
    pub zero_weight_rows: usize,
}

/// Leverage-based diagnostics of each row of a [`RowTable`].
#[derive(Debug, Clone, PartialEq)]
pub struct RowDiagnostics {
    /// Leverage.
    pub leverage: Vec<f64>,
    /// Internally studentized residual (`None` where undefined).
    pub studentized: Vec<Option<f64>>,
    /// Cook's distance (`None` where undefined).
    pub cooks: Vec<Option<f64>>,
    /// Parameters (columns plus the intercept).
    pub parameters: usize,
}

/// The scores of the penalties ridge tried.
#[derive(Debug, Clone, PartialEq)]
pub struct Curve {
    /// The criterion's name.
    pub criterion: &'static str,
    /// Penalties, ascending.
    pub penalties: Vec<f64>,
    /// The criterion's score of each.
    pub scores: Vec<f64>,
    /// Effective degrees of freedom of each.
    pub effective_df: Vec<f64>,
    /// Position of the chosen penalty.
    pub chosen: usize,
}

/// The result of [`Fitter::finish`].
#[derive(Debug)]
pub struct Fitted {
    /// The numbers for the report.
    pub summary: Summary,
    /// Per-row values, when `keep_rows` was set.
    pub rows: Option<RowTable>,
    /// Ridge's penalty curve, when it chose the penalty.
    pub curve: Option<Curve>,
    /// The model, for predictions and saving.
    pub model: Model,
}

/// One solver's line in a comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct Comparison {
    /// The flag value.
    pub flag: &'static str,
    /// Seconds in the solver.
    pub seconds: f64,
    /// The fit, or the library's refusal.
    pub outcome: Result<Compared, String>,
}

/// The result of [`Fitter::compare`].
#[derive(Debug, Clone, PartialEq)]
pub struct CompareRun {
    /// One line per solver.
    pub rows: Vec<Comparison>,
    /// The flag of the fit the digits are measured against (none when
    /// both QR fits were refused).
    pub reference: Option<&'static str>,
    /// Rows of non-zero weight.
    pub rows_used: usize,
}

/// A successful fit in a comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct Compared {
    /// The solver's own name.
    pub solver: String,
    /// Slopes.
    pub coefficients: Vec<f64>,
    /// Intercept, when fitted.
    pub intercept: Option<f64>,
    /// Weighted residual sum of squares.
    pub rss: f64,
    /// Digits agreeing with the reference fit: the worst over slopes and
    /// intercept of `-log10(|a - b| / |b|)`, capped at 16.
    pub digits: Option<f64>,
    /// Iterative fits.
    pub iterations: Option<Iterations>,
}

/// Predictions for one block of new rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Predicted {
    /// Predicted mean response.
    pub fitted: Vec<f64>,
    /// `[mean lower, mean upper, new lower, new upper]`, when the model
    /// carries inference.
    pub intervals: Option<[Vec<f64>; 4]>,
}

impl Fitter {
    /// A fitter for rows of the predictors of `names`, with or without
    /// weights; with `settings.stream` it holds a fit state instead of rows.
    ///
    /// # Errors
    /// The library's refusal of an empty fit state (`--stream` with no
    /// predictor and no intercept, or a state too large to allocate).
    pub fn new(settings: Settings, names: &Names, weighted: bool) -> Result<Self, FitError> {
        let cols = names.predictors.len();
        let state = if settings.stream {
            let describe = Describe {
                names,
                lines: &[],
                first_row: 0,
            };
            let refused = |e: Error| describe.refused("the data", &e);
            Some(if settings.solver == SolverName::Cholesky {
                Streaming::Cross(
                    CrossProductState::new(cols, 1, settings.intercept).map_err(refused)?,
                )
            } else {
                Streaming::Triangle(
                    TriangleState::new(cols, 1, settings.intercept).map_err(refused)?,
                )
            })
        } else {
            None
        };
        Ok(Fitter {
            settings,
            cols,
            x: Vec::new(),
            y: Vec::new(),
            w: weighted.then(Vec::new),
            lines: Vec::new(),
            state,
            blocks: 0,
        })
    }

    /// Takes one block of rows (with target, and weights when weighted):
    /// into the fit state when streaming, onto the gathered rows otherwise.
    ///
    /// # Errors
    /// The library's refusal of a block (naming its file line), or
    /// [`FitError::TooLarge`] when the gathered rows cannot grow.
    pub fn absorb(&mut self, block: &Block, names: &Names) -> Result<(), FitError> {
        self.blocks += 1;
        if let Some(state) = self.state.as_mut() {
            let Some(y) = &block.y else {
                return Err(FitError::Refused {
                    what: "the data".into(),
                    message: "a block arrived without its target column".into(),
                });
            };
            let w = block.w.as_ref().map(|w| w.view());
            let (result, rows_before) = match state {
                Streaming::Triangle(t) => {
                    let before = t.layout().rows;
                    (t.absorb_target(block.x.view(), y.view(), w), before)
                }
                Streaming::Cross(c) => {
                    let before = c.layout().rows;
                    (c.absorb_target(block.x.view(), y.view(), w), before)
                }
            };
            let describe = Describe {
                names,
                lines: &block.lines,
                first_row: rows_before,
            };
            return result.map_err(|e| describe.refused("the data", &e));
        }
        let n = block.rows();
        let grow = |v: &mut Vec<f64>, extra: usize| -> Result<(), FitError> {
            v.try_reserve(extra).map_err(|_| FitError::TooLarge {
                values: v.len().saturating_add(extra),
            })
        };
        grow(&mut self.x, n.saturating_mul(self.cols))?;
        grow(&mut self.y, n)?;
        self.lines
            .try_reserve(n)
            .map_err(|_| FitError::TooLarge { values: n })?;
        self.x.extend(block.x.iter());
        if let Some(y) = &block.y {
            self.y.extend(y.iter());
        }
        if let (Some(w), Some(bw)) = (self.w.as_mut(), &block.w) {
            grow(w, n)?;
            w.extend(bw.iter());
        }
        self.lines.extend_from_slice(&block.lines);
        Ok(())
    }

    /// The gathered rows as arrays (the buffers move; nothing is copied).
    fn gather(self) -> Result<Gathered, FitError> {
        let n = self.lines.len();
        let x = Array2::from_shape_vec((n, self.cols), self.x).map_err(|_| FitError::TooLarge {
            values: n.saturating_mul(self.cols),
        })?;
        Ok(Gathered {
            x,
            y: Array1::from(self.y),
            w: self.w.map(Array1::from),
            lines: self.lines,
            settings: self.settings,
        })
    }

    /// Fits with the chosen solver after the last block.
    pub fn finish(self, names: &Names, observer: Observer<'_>) -> Result<Fitted, FitError> {
        if self.state.is_some() {
            return self.finish_streamed(names);
        }
        let g = self.gather()?;
        let describe = Describe {
            names,
            lines: &g.lines,
            first_row: 0,
        };
        let problem = build_problem(&g.x, &g.y, g.w.as_ref(), g.settings.intercept)
            .map_err(|e| describe.refused("the data", &e))?;
        let s = &g.settings;
        let started = Instant::now();
        let mut curve = None;
        let mut chosen_by = None;
        let fit = match (s.solver, s.penalty) {
            (SolverName::Ridge, None | Some(PenaltyArg::LeaveOneOut | PenaltyArg::Gcv)) => {
                let criterion = match s.penalty {
                    Some(PenaltyArg::Gcv) => Criterion::GeneralizedCrossValidation,
                    _ => Criterion::LeaveOneOut,
                };
                let (fit, c) = choose_penalty(&problem, s.standardize, criterion)
                    .map_err(|e| describe.refused("ridge", &e))?;
                chosen_by = Some(c.criterion);
                curve = Some(c);
                fit
            }
            _ => {
                fit_one(&problem, s, observer).map_err(|e| describe.refused(s.solver.flag(), &e))?
            }
        };
        let seconds = started.elapsed().as_secs_f64();
        let inference =
            Inference::with_options(&problem, &fit, InferenceOptions::new().with_level(s.level))
                .and_then(|i| i.with_names(names.predictors.iter().map(Column::label)));
        let uncertainty = match &inference {
            Ok(i) => Ok(uncertainty(i)),
            Err(Error::InferenceRefused { refusal }) => Err(refusal.to_string()),
            Err(e) => Err(describe.message(e)),
        };
        let rows = if s.keep_rows {
            Some(
                row_table(&problem, &fit, inference.as_ref().ok(), &g.lines)
                    .map_err(|e| describe.refused("the diagnostics", &e))?,
            )
        } else {
            None
        };
        let report = &fit.report;
        let summary = Summary {
            requested: s.solver.flag(),
            solver: report.solver.clone(),
            coefficients: fit.model.coefficients().to_vec(),
            intercept: s.intercept.then(|| fit.model.intercept()),
            rss: report.residual_sum_of_squares,
            rows_used: report.usable_rows,
            rows_read: g.lines.len(),
            rank: report.rank,
            columns: report.columns,
            condition: report.condition,
            residual_df: report.residual_df,
            penalty: report.penalty,
            chosen_by,
            chosen_at_edge: curve
                .as_ref()
                .map(|c| c.chosen == 0 || c.chosen + 1 == c.penalties.len()),
            iterations: iterations_of(&fit),
            uncertainty,
            seconds,
            streamed_blocks: None,
            sigma: report.sigma,
            r_squared: report.r_squared,
        };
        let model = Model {
            target: names.target.clone(),
            predictors: names.predictors.clone(),
            intercept: s.intercept,
            fit,
            inference: inference.ok(),
        };
        Ok(Fitted {
            summary,
            rows,
            curve,
            model,
        })
    }

    /// Finishes the fit state of a streamed fit: the closed form of the
    /// chosen solver, without inference (the rows are gone).
    fn finish_streamed(self, names: &Names) -> Result<Fitted, FitError> {
        let s = &self.settings;
        let describe = Describe {
            names,
            lines: &[],
            first_row: 0,
        };
        let penalty = match s.penalty {
            Some(PenaltyArg::Fixed(v)) => v,
            _ => 0.0,
        };
        let started = Instant::now();
        let (fits, rows_read) = match &self.state {
            Some(Streaming::Triangle(t)) => {
                let fits = match s.solver {
                    SolverName::Svd => t.finish_min_norm(None),
                    SolverName::Ridge => t.finish_ridge(penalty),
                    _ => t.finish(),
                };
                (fits, t.layout().rows)
            }
            Some(Streaming::Cross(c)) => (c.finish(), c.layout().rows),
            None => {
                return Err(FitError::Refused {
                    what: s.solver.flag().into(),
                    message: "no fit state to finish".into(),
                })
            }
        };
        let seconds = started.elapsed().as_secs_f64();
        let fit = fits
            .map_err(|e| describe.refused(s.solver.flag(), &e))?
            .into_iter()
            .next()
            .ok_or_else(|| FitError::Refused {
                what: s.solver.flag().into(),
                message: "the fit state returned no fit".into(),
            })?;
        let report = &fit.report;
        let summary = Summary {
            requested: s.solver.flag(),
            solver: report.solver.clone(),
            coefficients: fit.model.coefficients().to_vec(),
            intercept: s.intercept.then(|| fit.model.intercept()),
            rss: report.residual_sum_of_squares,
            rows_used: report.usable_rows,
            rows_read,
            rank: report.rank,
            columns: report.columns,
            condition: report.condition,
            residual_df: report.residual_df,
            penalty: report.penalty,
            chosen_by: None,
            chosen_at_edge: None,
            iterations: None,
            uncertainty: Err(format!(
                "the rows were streamed in {} block(s) and not kept (--stream); \
                 fit without --stream for them",
                self.blocks
            )),
            seconds,
            streamed_blocks: Some(self.blocks),
            sigma: report.sigma,
            r_squared: report.r_squared,
        };
        let model = Model {
            target: names.target.clone(),
            predictors: names.predictors.clone(),
            intercept: s.intercept,
            fit,
            inference: None,
        };
        Ok(Fitted {
            summary,
            rows: None,
            curve: None,
            model,
        })
    }

    /// Fits with every solver (unpenalised; ridge at penalty 0) and measures
    /// each against the refined QR fit (plain QR if that one fails).
    pub fn compare(self, names: &Names) -> Result<CompareRun, FitError> {
        if self.state.is_some() {
            return Err(FitError::Refused {
                what: "the comparison".into(),
                message: "it needs every row, and --stream keeps none".into(),
            });
        }
        let g = self.gather()?;
        let describe = Describe {
            names,
            lines: &g.lines,
            first_row: 0,
        };
        let problem = build_problem(&g.x, &g.y, g.w.as_ref(), g.settings.intercept)
            .map_err(|e| describe.refused("the data", &e))?;
        let mut out: Vec<(Comparison, Option<Fit>)> = Vec::new();
        for solver in ALL_SOLVERS {
            let settings = Settings {
                solver,
                penalty: None,
                standardize: false,
                ..g.settings.clone()
            };
            // The best of up to three runs (fewer when one takes over a
            // second): the first run also pays for starting threads.
            let mut seconds = f64::INFINITY;
            let mut result;
            let mut runs = 0;
            loop {
                let started = Instant::now();
                result = if solver == SolverName::Ridge {
                    Ridge::new(0.0).fit(&problem)
                } else {
                    fit_one(&problem, &settings, &|_, _| {})
                };
                let took = started.elapsed().as_secs_f64();
                seconds = seconds.min(took);
                runs += 1;
                if runs == TIMED_RUNS || took > 1.0 || result.is_err() {
                    break;
                }
            }
            let (outcome, fit) = match result {
                Ok(fit) => (
                    Ok(Compared {
                        solver: fit.report.solver.clone(),
                        coefficients: fit.model.coefficients().to_vec(),
                        intercept: settings.intercept.then(|| fit.model.intercept()),
                        rss: fit.report.residual_sum_of_squares,
                        digits: None,
                        iterations: iterations_of(&fit),
                    }),
                    Some(fit),
                ),
                Err(e) => (Err(describe.message(&e)), None),
            };
            out.push((
                Comparison {
                    flag: solver.flag(),
                    seconds,
                    outcome,
                },
                fit,
            ));
        }
        let pick = |flag: &str| {
            out.iter()
                .find(|(c, f)| c.flag == flag && f.is_some())
                .and_then(|(_, f)| f.clone())
        };
        let (reference, reference_flag) = match (pick("qr-refined"), pick("qr")) {
            (Some(f), _) => (Some(f), Some("qr-refined")),
            (None, Some(f)) => (Some(f), Some("qr")),
            (None, None) => (None, None),
        };
        let rows = out
            .into_iter()
            .map(|(mut c, fit)| {
                if let (Ok(done), Some(fit), Some(r)) = (c.outcome.as_mut(), fit, &reference) {
                    done.digits = Some(agreement(&fit, r, g.settings.intercept));
                }
                c
            })
            .collect();
        Ok(CompareRun {
            rows,
            reference: reference_flag,
            rows_used: problem.usable_rows(),
        })
    }
}

/// The rows of a [`Fitter`] as arrays.
struct Gathered {
    x: Array2<f64>,
    y: Array1<f64>,
    w: Option<Array1<f64>>,
    lines: Vec<u64>,
    settings: Settings,
}

/// Every solver, in the order of the comparison.
const ALL_SOLVERS: [SolverName; 8] = [
    SolverName::Qr,
    SolverName::QrRefined,
    SolverName::Cholesky,
    SolverName::Svd,
    SolverName::Ridge,
    SolverName::Gradient,
    SolverName::Accelerated,
    SolverName::Stochastic,
];

fn build_problem<'a>(
    x: &'a Array2<f64>,
    y: &'a Array1<f64>,
    w: Option<&'a Array1<f64>>,
    intercept: bool,
) -> Result<Problem<'a>, Error> {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    b.build()
}

/// The fit of one solver with the settings' penalty and iteration limits.
fn fit_one(problem: &Problem<'_>, s: &Settings, observer: Observer<'_>) -> Result<Fit, Error> {
    let penalty = match s.penalty {
        Some(PenaltyArg::Fixed(v)) => v,
        _ => 0.0,
    };
    // Only the iterations move the bar; the closed forms' row blocks and
    // the gradient solvers' setup passes carry no iteration number.
    let watch = |limit: usize| {
        move |p: &leastline::Progress| {
            if let Some(iteration) = p.iteration {
                observer(iteration, limit);
            }
            Control::Continue
        }
    };
    match s.solver {
        SolverName::Qr => Qr::new().fit(problem),
        SolverName::QrRefined => Qr::refined().fit(problem),
        SolverName::Cholesky => Cholesky::new().fit(problem),
        SolverName::Svd => Svd::new().fit(problem),
        SolverName::Ridge => Ridge::new(penalty)
            .with_standardize(s.standardize)
            .fit(problem),
        SolverName::Gradient => {
            let mut g = GradientDescent::new().with_penalty(penalty);
            if let Some(t) = s.tolerance {
                g = g.with_tolerance(t);
            }
            if let Some(m) = s.max_iterations {
                g = g.with_max_iterations(m);
            }
            g.fit_observed(problem, &watch(g.max_iterations()))
        }
        SolverName::Accelerated => {
            let mut g = Accelerated::new().with_penalty(penalty);
            if let Some(t) = s.tolerance {
                g = g.with_tolerance(t);
            }
            if let Some(m) = s.max_iterations {
                g = g.with_max_iterations(m);
            }
            g.fit_observed(problem, &watch(g.max_iterations()))
        }
        SolverName::Stochastic => {
            let mut g = Stochastic::new().with_penalty(penalty).with_seed(s.seed);
            if let Some(t) = s.tolerance {
                g = g.with_tolerance(t);
            }
            if let Some(m) = s.max_iterations {
                g = g.with_max_iterations(m);
            }
            g.fit_observed(problem, &watch(g.epoch_limit(problem)))
        }
    }
}

/// Ridge with the penalty that minimises `criterion` over the default grid.
fn choose_penalty(
    problem: &Problem<'_>,
    standardize: bool,
    criterion: Criterion,
) -> Result<(Fit, Curve), Error> {
    let path = RidgePath::new(problem, standardize)?;
    let grid = path.default_grid(GRID_POINTS)?;
    let scored = path.curve(&grid, criterion)?;
    let fit = path.fit(scored.best_penalty)?;
    let (name, scores) = match criterion {
        Criterion::GeneralizedCrossValidation => ("generalized cross-validation", scored.gcv),
        _ => (
            "leave-one-out",
            scored.loo.unwrap_or_else(|| vec![f64::NAN; grid.len()]),
        ),
    };
    Ok((
        fit,
        Curve {
            criterion: name,
            penalties: scored.penalties,
            scores,
            effective_df: scored.effective_df,
            chosen: scored.best_index,
        },
    ))
}

fn iterations_of(fit: &Fit) -> Option<Iterations> {
    fit.report.iterations.as_ref().map(|it| Iterations {
        count: it.iterations,
        converged: it.converged,
        gradient_norm: it.gradient_norm,
        passes: it.passes,
    })
}

fn uncertainty(i: &Inference) -> Uncertainty {
    let interval = |e: &leastline::inference::Estimate| Interval {
        std_error: e.std_error,
        lower: e.lower,
        upper: e.upper,
        p_value: e.p_value,
    };
    Uncertainty {
        level: i.options.level(),
        sigma: i.residual_sd,
        r_squared: i.goodness.r_squared,
        adjusted_r_squared: i.goodness.adjusted_r_squared,
        centered: i.goodness.centered,
        slopes: i.coefficients.iter().map(interval).collect(),
        intercept: i.intercept.as_ref().map(interval),
        text: i.to_string(),
    }
}

fn row_table(
    problem: &Problem<'_>,
    fit: &Fit,
    inference: Option<&Inference>,
    lines: &[u64],
) -> Result<RowTable, Error> {
    let fitted = fit.model.predict(problem.design())?;
    let diagnostics = inference.map(|i| i.diagnostics(problem)).transpose()?;
    let keep: Vec<usize> = match problem.weights() {
        Some(w) => (0..problem.rows()).filter(|&i| w[i] > 0.0).collect(),
        None => (0..problem.rows()).collect(),
    };
    let y = problem.target();
    Ok(RowTable {
        lines: keep.iter().map(|&i| lines[i]).collect(),
        observed: keep.iter().map(|&i| y[i]).collect(),
        fitted: keep.iter().map(|&i| fitted[i]).collect(),
        diagnostics: diagnostics.map(|d| RowDiagnostics {
            leverage: keep.iter().map(|&i| d.leverage[i]).collect(),
            studentized: keep.iter().map(|&i| d.studentized[i]).collect(),
            cooks: keep.iter().map(|&i| d.cooks_distance[i]).collect(),
            parameters: d.parameters,
        }),
        zero_weight_rows: problem.rows() - keep.len(),
    })
}

/// Digits of agreement of `fit` with `reference`.
fn agreement(fit: &Fit, reference: &Fit, intercept: bool) -> f64 {
    let a = fit.model.coefficients();
    let b = reference.model.coefficients();
    let mut pairs: Vec<(f64, f64)> = a.iter().copied().zip(b.iter().copied()).collect();
    if intercept {
        pairs.push((fit.model.intercept(), reference.model.intercept()));
    }
    pairs
        .into_iter()
        .map(|(a, b)| digits(a, b))
        .fold(16.0, f64::min)
}

/// `-log10(|a - b| / |b|)` in `[0, 16]` (16 when equal).
pub fn digits(a: f64, b: f64) -> f64 {
    let err = (a - b).abs();
    if err == 0.0 {
        return 16.0;
    }
    let scale = if b == 0.0 { 1.0 } else { b.abs() };
    (-(err / scale).log10()).clamp(0.0, 16.0)
}

/// Turns the library's indices into column names and file lines.
struct Describe<'n> {
    names: &'n Names,
    /// File line of rows `first_row..first_row + lines.len()` (a block of
    /// a streamed fit, or every row).
    lines: &'n [u64],
    /// The library's row number of `lines[0]`.
    first_row: usize,
}

impl Describe<'_> {
    fn column(&self, j: usize) -> String {
        self.names
            .predictors
            .get(j)
            .map_or_else(|| format!("column {j}"), |c| format!("`{}`", c.label()))
    }

    fn line(&self, row: usize) -> String {
        row.checked_sub(self.first_row)
            .and_then(|k| self.lines.get(k))
            .map_or_else(|| format!("row {row}"), |l| format!("line {l}"))
    }

    fn message(&self, e: &Error) -> String {
        match e {
            Error::RankDeficient {
                rank,
                columns,
                dependent,
                tolerance,
                combinations,
                ..
            } => {
                let said: Vec<String> = dependent
                    .iter()
                    .enumerate()
                    .map(|(k, &j)| match combinations.get(k) {
                        Some(list) if list.is_empty() => format!("{} is constant", self.column(j)),
                        Some(list) => {
                            let of: Vec<String> = list.iter().map(|&i| self.column(i)).collect();
                            format!("{} is a combination of {}", self.column(j), of.join(", "))
                        }
                        None => format!("{} depends on the columns before it", self.column(j)),
                    })
                    .collect();
                format!(
                    "the predictors are linearly dependent (numerical rank {rank} of {columns}, \
                     relative tolerance {tolerance:.1e}): {}; drop one, or use --solver svd or ridge",
                    said.join("; ")
                )
            }
            Error::NonFinite {
                row, column, value, ..
            } => format!(
                "{}{}: value {value} is not finite",
                self.line(*row),
                column
                    .map(|c| format!(", {}", self.column(c)))
                    .unwrap_or_default()
            ),
            Error::InvalidWeight { row, value } => {
                format!("{}: weight {value} is not valid ({e})", self.line(*row))
            }
            Error::WeightRange {
                row,
                value,
                largest,
            } => format!(
                "{}: weight {value:e} is positive but too small beside the largest weight \
                 {largest:e} to be held with it; set it to 0 or narrow the range of the weights",
                self.line(*row)
            ),
            _ => e.to_string(),
        }
    }

    fn refused(&self, what: &str, e: &Error) -> FitError {
        FitError::Refused {
            what: what.to_string(),
            message: self.message(e),
        }
    }
}

/// The fitted model: what prediction needs, and what is saved.
#[derive(Debug, Clone)]
pub struct Model {
    target: Column,
    predictors: Vec<Column>,
    intercept: bool,
    fit: Fit,
    inference: Option<Inference>,
}

/// Identifies the saved-model files of this example.
const MODEL_KIND: &str = "leastline fit_csv model";
/// Version of the file layout.
const MODEL_VERSION: u64 = 1;

impl Model {
    /// The target column of the fit.
    pub fn target(&self) -> &Column {
        &self.target
    }

    /// The predictor columns, in the order the model expects.
    pub fn predictors(&self) -> &[Column] {
        &self.predictors
    }

    /// The level of the intervals, when the model has them.
    pub fn level(&self) -> Option<f64> {
        self.inference.as_ref().map(|i| i.options.level())
    }

    /// Predictions (and intervals when available) for the rows of `x`.
    pub fn predict(&self, x: ArrayView2<'_, f64>, lines: &[u64]) -> Result<Predicted, FitError> {
        let names = Names {
            target: self.target.clone(),
            predictors: self.predictors.clone(),
        };
        let describe = Describe {
            names: &names,
            lines,
            first_row: 0,
        };
        let refused = |e: Error| describe.refused("prediction", &e);
        match &self.inference {
            Some(i) => {
                let p = i.predict(x).map_err(refused)?;
                Ok(Predicted {
                    fitted: p.fitted.to_vec(),
                    intervals: Some([
                        p.mean_lower.to_vec(),
                        p.mean_upper.to_vec(),
                        p.prediction_lower.to_vec(),
                        p.prediction_upper.to_vec(),
                    ]),
                })
            }
            None => Ok(Predicted {
                fitted: self.fit.model.predict(x).map_err(refused)?.to_vec(),
                intervals: None,
            }),
        }
    }

    fn to_json(&self, with_inference: bool) -> Result<String, String> {
        let column = |c: &Column| json!({ "name": c.name, "unit": c.unit });
        let fit = serde_json::to_value(&self.fit).map_err(|e| e.to_string())?;
        let inference = match (&self.inference, with_inference) {
            (Some(i), true) => serde_json::to_value(i).map_err(|e| e.to_string())?,
            _ => Value::Null,
        };
        let doc = json!({
            "kind": MODEL_KIND,
            "version": MODEL_VERSION,
            "target": column(&self.target),
            "predictors": self.predictors.iter().map(column).collect::<Vec<_>>(),
            "intercept": self.intercept,
            "fit": fit,
            "inference": inference,
        });
        serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())
    }

    /// Writes the model as JSON. Returns a warning when the intervals
    /// could not be saved faithfully (they are then left out).
    pub fn save(&self, path: &Path) -> Result<Option<String>, FitError> {
        let write_error = |message: String| FitError::Write {
            path: path.to_path_buf(),
            message,
        };
        let mut text = self.to_json(true).map_err(write_error)?;
        let mut warning = None;
        // What is written must load back: a value JSON cannot hold (an
        // infinite criterion of an exact fit) would not.
        if let Err(e) = Model::from_json(path, &text) {
            if self.inference.is_none() {
                return Err(write_error(e.to_string()));
            }
            text = self.to_json(false).map_err(write_error)?;
            Model::from_json(path, &text).map_err(|e| write_error(e.to_string()))?;
            warning = Some(format!(
                "the intervals were left out of {}: {e}",
                path.display()
            ));
        }
        std::fs::write(path, text).map_err(|e| write_error(e.to_string()))?;
        Ok(warning)
    }

    /// Reads a model written by [`Model::save`], checking it on the way in.
    pub fn load(path: &Path) -> Result<Model, FitError> {
        let text = std::fs::read_to_string(path).map_err(|e| FitError::BadModel {
            path: path.to_path_buf(),
            message: e.to_string(),
        })?;
        Model::from_json(path, &text)
    }

    fn from_json(path: &Path, text: &str) -> Result<Model, FitError> {
        let bad = |message: String| FitError::BadModel {
            path: path.to_path_buf(),
            message,
        };
        let doc: Value = serde_json::from_str(text).map_err(|e| bad(e.to_string()))?;
        if doc.get("kind").and_then(Value::as_str) != Some(MODEL_KIND) {
            return Err(bad(format!("`kind` is not \"{MODEL_KIND}\"")));
        }
        if doc.get("version").and_then(Value::as_u64) != Some(MODEL_VERSION) {
            return Err(bad(format!("`version` is not {MODEL_VERSION}")));
        }
        let column = |v: &Value| -> Option<Column> {
            let name = v.get("name")?.as_str()?.trim().to_string();
            let unit = match v.get("unit")? {
                Value::Null => None,
                Value::String(s) => Some(s.clone()),
                _ => return None,
            };
            (!name.is_empty()).then_some(Column {
                field: 0,
                name,
                unit,
            })
        };
        let target = doc
            .get("target")
            .and_then(column)
            .ok_or_else(|| bad("`target` needs a non-empty `name` and a `unit`".into()))?;
        let predictors: Vec<Column> = doc
            .get("predictors")
            .and_then(Value::as_array)
            .ok_or_else(|| bad("`predictors` is not a list".into()))?
            .iter()
            .map(column)
            .collect::<Option<_>>()
            .ok_or_else(|| bad("each predictor needs a non-empty `name` and a `unit`".into()))?;
        for (k, c) in predictors.iter().enumerate() {
            if predictors[..k].iter().any(|d| d.name == c.name) {
                return Err(bad(format!("predictor `{}` is listed twice", c.name)));
            }
        }
        let intercept = doc
            .get("intercept")
            .and_then(Value::as_bool)
            .ok_or_else(|| bad("`intercept` is not true or false".into()))?;
        let fit: Fit = serde_json::from_value(doc.get("fit").cloned().unwrap_or(Value::Null))
            .map_err(|e| bad(format!("`fit`: {e}")))?;
        let p = predictors.len();
        let model = &fit.model;
        if model.columns() != p {
            return Err(bad(format!(
                "`fit` has {} coefficients for {p} predictors",
                model.columns()
            )));
        }
        if model.coefficients().iter().any(|v| !v.is_finite()) || !model.intercept().is_finite() {
            return Err(bad("`fit` holds a coefficient that is not finite".into()));
        }
        if !intercept && model.intercept() != 0.0 {
            return Err(bad("`intercept` is false but the fit has one".into()));
        }
        let inference = match doc.get("inference") {
            None | Some(Value::Null) => None,
            Some(v) => {
                let i: Inference = serde_json::from_value(v.clone())
                    .map_err(|e| bad(format!("`inference`: {e}")))?;
                check_inference(&i, &fit, intercept)
                    .map_err(|m| bad(format!("`inference`: {m}")))?;
                Some(i)
            }
        };
        Ok(Model {
            target,
            predictors,
            intercept,
            fit,
            inference,
        })
    }
}

/// The public numbers of a decoded `Inference`, checked against the fit.
fn check_inference(i: &Inference, fit: &Fit, intercept: bool) -> Result<(), String> {
    if i.coefficients.len() != fit.model.columns() || i.intercept.is_some() != intercept {
        return Err("its parameters do not match the fit".into());
    }
    let same = |a: f64, b: f64| (a - b).abs() <= 1e-12 * a.abs().max(b.abs());
    let slopes_match = i
        .coefficients
        .iter()
        .zip(fit.model.coefficients())
        .all(|(e, &b)| same(e.value, b));
    let intercept_matches = i
        .intercept
        .as_ref()
        .is_none_or(|e| same(e.value, fit.model.intercept()));
    if !slopes_match || !intercept_matches {
        return Err("its estimates differ from the fit's coefficients".into());
    }
    let level = i.options.level();
    if !(level > 0.0 && level < 1.0) {
        return Err(format!("level {level} is not between 0 and 1"));
    }
    if !(i.critical_value.is_finite() && i.critical_value > 0.0) {
        return Err("the critical value is not a finite positive number".into());
    }
    if !(i.residual_variance.is_finite() && i.residual_variance >= 0.0) {
        return Err("the residual variance is not a finite number >= 0".into());
    }
    if i.covariance.iter().any(|v| !v.is_finite()) {
        return Err("the covariance holds a value that is not finite".into());
    }
    Ok(())
}
