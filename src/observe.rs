//! Watching a fit as it runs, and stopping it.
//!
//! Every solver's [`crate::Solver::fit_observed`] takes an [`Observer`]. The
//! passes over the design call it after every block of rows (from the
//! rayon worker that finished the block, hence `Sync`), with a
//! [`Progress`] saying which [`Stage`] of the fit is running and how many
//! rows of the current pass are done; the gradient solvers also call it
//! after every iteration or epoch with the loss and the relative gradient
//! norm. Returning [`Control::Stop`] ends the fit: each worker checks
//! before its next block, so a pass ends within about one block per
//! thread.
//!
//! A stopped closed-form fit (and a gradient fit stopped during its setup
//! passes) returns [`crate::Error::Stopped`], since no partial answer
//! exists; a gradient fit stopped while iterating returns its current
//! coefficients with `stopped_by_observer` in its report.
//!
//! Observing never changes a result: the blocks, their order and every
//! sum are the same with and without an observer.

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;

use crate::error::{Error, Result};
pub use crate::vocabulary::Stage;

/// What an observer sees.
///
/// Row passes fill `rows_done` and `rows_total` (the rows of the current
/// pass done so far, one call per block, increasing within the pass, and
/// the rows of the design); iterative stages fill `iteration`, `loss`,
/// `gradient_norm` and `step`. Fields that do not apply are `None`.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub struct Progress {
    /// The part of the fit running.
    pub stage: Stage,
    /// Row passes reported so far in this fit, the current one included
    /// (the passes inside gradient iterations are reported as iterations
    /// and not counted here; see [`crate::IterationReport::passes`]).
    pub pass: usize,
    /// Rows of the current pass done.
    pub rows_done: Option<usize>,
    /// Rows of the design (the end of every pass).
    pub rows_total: Option<usize>,
    /// Gradient solvers: updates made so far (epochs for
    /// [`crate::Stochastic`]; 0 is the starting point). Refinement: the step.
    pub iteration: Option<usize>,
    /// Gradient solvers: the objective per unit weight at the current
    /// coefficients, in the caller's units (see [`crate::gradient`]).
    /// `+inf` when it exceeds the range of `f64`; such a fit then ends with
    /// [`Error::Overflow`].
    pub loss: Option<f64>,
    /// Gradient solvers: the relative gradient norm, as in the stopping test.
    pub gradient_norm: Option<f64>,
    /// Gradient solvers: the step of the last update (the start step at
    /// iteration 0).
    pub step: Option<f64>,
}

impl Progress {
    /// A row-pass event.
    fn rows(state: PassState, pass: usize) -> Self {
        Progress {
            stage: state.stage,
            pass,
            rows_done: Some(state.done),
            rows_total: Some(state.total),
            iteration: state.iteration,
            loss: None,
            gradient_norm: None,
            step: None,
        }
    }
}

/// An observer's answer: go on, or end the fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Control {
    /// Carry on.
    Continue,
    /// End the fit now (see the [module docs](self) for what a stopped fit
    /// returns).
    Stop,
}

/// Something that watches a fit: called after every block of rows of every
/// pass and after every gradient iteration.
///
/// Calls come from rayon's worker threads, one at a time within a fit (the
/// fit holds a lock around each call, so `rows_done` never goes back within
/// a pass): keep the method quick, and start no rayon work inside it (a
/// worker waiting for it could take up another block of the same pass and
/// wait for the lock it holds). Closures `Fn(&Progress) -> Control +
/// Sync` are observers; count with atomics:
///
/// ```
/// use std::sync::atomic::{AtomicUsize, Ordering};
/// use leastline::{Cholesky, Control, Problem, Progress, Solver};
/// use ndarray::Array2;
///
/// // Daily fill levels of a rain barrel against two readings.
/// let x = Array2::from_shape_fn((20_000, 2), |(i, j)| ((i * (j + 3)) % 17) as f64);
/// let y = x.column(0).mapv(|a| 0.5 * a + 2.0);
/// let problem = Problem::new(x.view(), y.view())?;
/// let blocks = AtomicUsize::new(0);
/// let count = |_: &Progress| {
///     blocks.fetch_add(1, Ordering::Relaxed);
///     Control::Continue
/// };
/// let fit = Cholesky::new().fit_observed(&problem, &count)?;
/// assert!(blocks.load(Ordering::Relaxed) >= 2);
/// assert_eq!(fit, Cholesky::new().fit(&problem)?);
/// # Ok::<(), leastline::Error>(())
/// ```
pub trait Observer: Sync {
    /// Looks at the progress; [`Control::Stop`] ends the fit.
    fn observe(&self, progress: &Progress) -> Control;
}

impl<F> Observer for F
where
    F: Fn(&Progress) -> Control + Sync,
{
    fn observe(&self, progress: &Progress) -> Control {
        self(progress)
    }
}

/// The observer that watches nothing and never stops a fit
/// ([`crate::Solver::fit`] uses it).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Unobserved;

impl Observer for Unobserved {
    fn observe(&self, _: &Progress) -> Control {
        Control::Continue
    }
}

/// Where the current pass stands.
#[derive(Debug, Clone, Copy)]
struct PassState {
    stage: Stage,
    iteration: Option<usize>,
    done: usize,
    total: usize,
}

/// A fit's link to its observer, shared by the workers of every pass:
/// counts the rows of the current pass, serialises the observer's calls
/// and carries the stop flag.
pub(crate) struct Watch<'o> {
    observer: Option<&'o dyn Observer>,
    stop: AtomicBool,
    passes: AtomicUsize,
    state: Mutex<PassState>,
    /// Where the first stop was asked for.
    stopped_at: Mutex<Option<PassState>>,
}

impl<'o> Watch<'o> {
    /// A watch reporting to `observer`.
    pub fn new(observer: &'o dyn Observer) -> Self {
        Watch {
            observer: Some(observer),
            ..Watch::quiet()
        }
    }

    /// A watch with no observer: it never calls anything and never stops.
    pub fn quiet() -> Self {
        let state = PassState {
            stage: Stage::Factor,
            iteration: None,
            done: 0,
            total: 0,
        };
        Watch {
            observer: None,
            stop: AtomicBool::new(false),
            passes: AtomicUsize::new(0),
            state: Mutex::new(state),
            stopped_at: Mutex::new(None),
        }
    }

    /// Whether a stop was asked for.
    pub fn stopped(&self) -> bool {
        self.stop.load(Ordering::Relaxed)
    }

    /// Passes begun so far.
    pub fn passes(&self) -> usize {
        self.passes.load(Ordering::Relaxed)
    }

    /// Begins a pass of `total` rows.
    pub fn begin(&self, stage: Stage, total: usize) {
        self.begin_step(stage, None, total);
    }

    /// Begins a pass of `total` rows that belongs to an iteration (a
    /// refinement step).
    pub fn begin_step(&self, stage: Stage, iteration: Option<usize>, total: usize) {
        self.passes.fetch_add(1, Ordering::Relaxed);
        let mut state = self.state.lock().unwrap_or_else(|e| e.into_inner());
        *state = PassState {
            stage,
            iteration,
            done: 0,
            total,
        };
    }

    /// Whether a worker may start its next block.
    #[inline]
    pub fn go_on(&self) -> bool {
        !self.stopped()
    }

    /// Counts `rows` more rows of the current pass done and tells the
    /// observer.
    pub fn rows_done(&self, rows: usize) {
        let Some(observer) = self.observer else {
            return;
        };
        let mut state = self.state.lock().unwrap_or_else(|e| e.into_inner());
        state.done = (state.done + rows).min(state.total);
        let progress = Progress::rows(*state, self.passes());
        if observer.observe(&progress) == Control::Stop {
            self.note_stop(*state);
        }
    }

    /// Tells the observer about an iteration (gradient solvers); returns
    /// its answer.
    pub fn iteration(&self, iteration: usize, loss: f64, gradient_norm: f64, step: f64) -> Control {
        let Some(observer) = self.observer else {
            return Control::Continue;
        };
        let _guard = self.state.lock().unwrap_or_else(|e| e.into_inner());
        observer.observe(&Progress {
            stage: Stage::Iteration,
            pass: self.passes(),
            rows_done: None,
            rows_total: None,
            iteration: Some(iteration),
            loss: Some(loss),
            gradient_norm: Some(gradient_norm),
            step: Some(step),
        })
    }

    fn note_stop(&self, state: PassState) {
        let mut at = self.stopped_at.lock().unwrap_or_else(|e| e.into_inner());
        if at.is_none() {
            *at = Some(state);
        }
        self.stop.store(true, Ordering::Relaxed);
    }

    /// [`Error::Stopped`] once a stop was asked for.
    pub fn check(&self) -> Result<()> {
        if !self.stopped() {
            return Ok(());
        }
        let at = *self.stopped_at.lock().unwrap_or_else(|e| e.into_inner());
        let state = at.unwrap_or(PassState {
            stage: Stage::Iteration,
            iteration: None,
            done: 0,
            total: 0,
        });
        Err(Error::Stopped {
            stage: state.stage,
            rows_done: state.done,
            rows_total: state.total,
        })
    }
}
