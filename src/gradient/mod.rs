//! Gradient-descent solvers: full-batch ([`GradientDescent`]), accelerated
//! with adaptive restart ([`Accelerated`]) and mini-batch stochastic
//! ([`Stochastic`]).
//!
//! All three minimise the same objective as the ridge solvers,
//!
//! ```text
//! F(b0, b) = (1/2) sum_i w_i (y_i - b0 - x_i . b)^2 + (lambda/2) ||b||^2,
//! ```
//!
//! with `lambda` the `penalty` setting (0 by default: ordinary or weighted
//! least squares). The intercept `b0` is never penalised and is fitted by
//! centering, as everywhere in the crate: `b0 = mean(y) - mean(x) . b` with
//! weighted means, so the iteration runs over the slopes only.
//!
//! ## Internal coordinates
//!
//! The iteration runs on the centered, weighted design with every column
//! standardised: divided by its weighted norm (together with its share of
//! the penalty), so that the Hessian of the internal objective has a unit
//! diagonal. The target is divided by a power of two near its spread and
//! the objective by the total weight. This leaves the minimiser unchanged
//! (coefficients come back in the caller's units) but makes the iteration
//! count independent of the columns' units and offsets, of outliers that
//! stretch a column's range, and of how unevenly a caller-unit penalty
//! treats columns of different scales. Setting up these coordinates costs
//! one read of the design. Consequences for settings:
//!
//! - a fixed `step` is a step in these standardised coordinates, where the
//!   curvature `L` (the largest eigenvalue of the standardised
//!   `X^T W X / sum(w)` plus the penalty) lies between 1 and the number of
//!   columns; the default step is `1 / L` with `L` estimated by power
//!   iteration;
//! - the tolerance is a **relative gradient norm**: the Euclidean norm of the
//!   gradient in the standardised coordinates divided by its norm at
//!   all-zero slopes (the intercept-only model). It does not depend on the
//!   starting point, so a warm start near the optimum converges at once.
//!   When the gradient at zero is exactly zero (a constant target) the test
//!   is on the absolute norm.
//!
//! Solutions are determined to about `tolerance * kappa` relative accuracy,
//! `kappa` the condition number of the standardised `X^T W X` (plus
//! penalty).
//!
//! ## Losses reported
//!
//! Every loss in a report, an observer's [`Progress`](crate::Progress) or an error is the
//! crate's one loss (see [the crate docs](crate#the-loss)), in the
//! caller's units: the weighted mean squared residual
//! `sum_i w_i (y_i - y_hat_i)^2 / sum_i w_i`, plus `lambda ||b||^2 /
//! sum_i w_i` for a penalised fit (the objective minimised, so that it
//! falls as the fit proceeds). Unweighted and unpenalised, that is
//! [`crate::LinearModel::mean_squared_error`] on the training data.
//!
//! ## Honest stopping
//!
//! A fit ends when the relative gradient norm is at most the tolerance
//! (`converged`), at the iteration (epoch) limit (not converged: visible in
//! the report, and an [`Error::NotConverged`] when `fail_if_not_converged`),
//! when the observer asks (`stopped_by_observer`), or with
//! [`Error::Diverged`] as soon as a loss is non-finite or exceeds `10^4`
//! times the larger of the starting loss and the intercept-only loss: no fit
//! with non-finite coefficients is ever returned.

//!
//! ## Progress and cancellation
//!
//! Through [`crate::Solver::fit_observed`] (see [`crate::observe`]), an
//! observer sees the setup passes (column norms, the loss at the start, the
//! step estimate: [`Stage::Setup`]) block by block,
//! then a [`Progress`](crate::Progress) of stage
//! [`Stage::Iteration`] (iteration, loss, relative
//! gradient norm, step) at the start and after every iteration or epoch.
//! A stop during the setup is [`Error::Stopped`]; once iterating,
//! [`Control::Stop`] ends the fit at once with the current coefficients
//! (`stopped_by_observer`). A program can show progress and cancel from
//! another thread:
//!
//! ```
//! use std::sync::atomic::{AtomicBool, Ordering};
//! use leastline::{Accelerated, Control, Problem, Progress, Solver};
//! use ndarray::Array2;
//!
//! // Hourly demand of a bakery's oven against three readings.
//! let x = Array2::from_shape_fn((500, 3), |(i, j)| ((i * 7 + j * 13) % 31) as f64);
//! let y = x.column(0).mapv(|a| 2.0 * a) + x.column(2).mapv(|c| 0.5 * c + 1.0);
//! let problem = Problem::new(x.view(), y.view())?;
//! let cancel = AtomicBool::new(false); // set by a user interface, say
//! let watch = |p: &Progress| {
//!     if let (Some(k), Some(loss), Some(g)) = (p.iteration, p.loss, p.gradient_norm) {
//!         if k % 100 == 0 {
//!             eprintln!("{k}: loss {loss:.3e}, gradient {g:.1e}");
//!         }
//!     }
//!     if cancel.load(Ordering::Relaxed) { Control::Stop } else { Control::Continue }
//! };
//! let fit = Accelerated::new().fit_observed(&problem, &watch)?;
//! let report = fit.report.iterations.as_ref().expect("iterative solvers report iterations");
//! assert!(report.converged && !report.stopped_by_observer);
//! # Ok::<(), leastline::Error>(())
//! ```

mod accelerated;
mod full;
mod stochastic;

pub use accelerated::Accelerated;
pub use full::GradientDescent;
pub use stochastic::Stochastic;

use rand_chacha::rand_core::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::error::{Error, Input, Result};
use crate::model::LinearModel;
use crate::observe::{Control, Stage, Watch};
use crate::passes::gradient::{column_norms, max_row_norm, residual_pass, residual_rows, Pass};
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::{intercept_for, Fit, IterationReport};

/// Columns whose power-of-two scale lies beyond `2^±480` are scaled inside
/// the passes (see [`Objective`]).
const EXTREME_SCALE_EXP: u32 = 480;

/// A loss above this multiple of the reference loss counts as divergence.
const DIVERGENCE_FACTOR: f64 = 1e4;
/// Power-iteration steps: at least this many ...
const POWER_MIN: usize = 5;
/// ... and at most this many ...
const POWER_MAX: usize = 30;
/// ... stopping when the estimate changes by less than this fraction.
const POWER_RTOL: f64 = 1e-2;
/// Fixed seed of the power iteration's start vector (not the user's seed).
const POWER_SEED: u64 = 0x6c65_6173_746c_696e;

/// Settings shared by the three solvers, checked.
#[derive(Debug, Clone)]
pub(crate) struct Common<'s> {
    pub tolerance: f64,
    pub step: Option<f64>,
    pub penalty: f64,
    pub start: Option<&'s LinearModel>,
    pub history_stride: usize,
    pub fail_if_not_converged: bool,
}

impl Common<'_> {
    pub fn check(&self) -> Result<()> {
        crate::solver::check_tolerance("tolerance", self.tolerance)?;
        if let Some(step) = self.step {
            if !step.is_finite() || step <= 0.0 {
                return Err(Error::InvalidParameter {
                    name: "step",
                    value: step,
                    reason: "must be finite and > 0",
                });
            }
        }
        crate::penalty::check_penalty("penalty", self.penalty)?;
        Ok(())
    }
}

/// Loss and gradient of the internal objective at one point.
#[derive(Debug, Clone)]
pub(crate) struct Eval {
    /// Internal objective `f` (scaled units, per unit weight).
    pub f: f64,
    /// Gradient of `f`.
    pub grad: Vec<f64>,
    /// `sum_i w_i r_i^2` in scaled units (for the residual sum of squares).
    pub sq: f64,
}

/// The internal objective
/// `f(d) = [ (1/2) ||z_y - Z K d||^2 + (1/2) sum_j mu_j d_j^2 ] / W`
/// over the standardised coordinates `d` (see the module docs): `Z` is the
/// centered, weighted design, `K` the diagonal of effective inverse column
/// scales chosen so that the Hessian has a unit diagonal, `z_y` the
/// centered, weighted target over its power-of-two scale `s_y`.
pub(crate) struct Objective<'p, 'a> {
    problem: &'p Problem<'a>,
    /// Power-of-two target scale `s_y`.
    target_scale: f64,
    /// Effective inverse column scales `k_j` (0 for constant columns):
    /// the passes multiply `(x_ij - m_j) pre_j` by `d_j k_j`.
    k: Vec<f64>,
    /// Standardising factors `r_j` (0 for constant columns): slope
    /// `b_j = d_j r_j s_y / s_j`.
    r: Vec<f64>,
    /// Per-column pre-multipliers `1 / s_j` applied inside the passes, for
    /// designs with columns near the ends of the f64 range (then `k_j =
    /// r_j`); `None` for every other design (then `k_j = r_j / s_j`, the
    /// faster passes).
    pre: Option<Vec<f64>>,
    /// `log2 s_j` and `log2 s_y`.
    scale_exp: Vec<i32>,
    target_exp: i32,
    /// Total internal weight `W`.
    weight: f64,
    /// Diagonal penalty in internal coordinates (0 for constant columns).
    mu: Vec<f64>,
    /// Columns that carry information (not constant beside the intercept).
    live: Vec<bool>,
    /// `log2` of the multiplier from internal to caller loss, `s_y^2`.
    loss_exp: i32,
    /// Full passes over the design so far.
    pub passes: usize,
    coef: Vec<f64>,
    /// Reports the setup passes block by block; `None` once iterating
    /// (iterations are reported whole, by the [`Tracker`]).
    watch: Option<&'p Watch<'p>>,
}

impl<'p, 'a> Objective<'p, 'a> {
    /// Sets up the coordinates: one pass over the design for the column
    /// norms (reported to `watch` as a setup pass; the caller checks for a
    /// stop).
    pub fn new(problem: &'p Problem<'a>, penalty: f64, watch: &'p Watch<'p>) -> Self {
        let scaling = Scaling::new(problem, problem.default_rank_tolerance());
        let p = problem.columns();
        let weight = problem.stats.total_weight;
        // Squared norms of the columns after the exact power-of-two scaling
        // (no overflow: every scaled value is at most 2 in magnitude).
        watch.begin(Stage::Setup, problem.rows());
        let norms = column_norms(problem, &scaling.inv_scale, Some(watch));
        // Columns near the ends of the range: (x - m) k would leave the
        // range of f64 (or lose digits to underflow), so the passes scale
        // (x - m) by 1 / s_j first.
        let extreme = (0..p).any(|j| {
            !scaling.constant[j] && scaling.scale_exp[j].unsigned_abs() > EXTREME_SCALE_EXP
        });
        let mut k = vec![0.0; p];
        let mut rs = vec![0.0; p];
        let mut mu = vec![0.0; p];
        let mut live = vec![false; p];
        // Penalty on the power-of-two-scaled coordinate:
        // lambda b_j^2 / (ws s_y^2) with b_j = g_j s_y / s_j.
        let penalties = crate::penalty::column_penalties(problem, &scaling, penalty, None);
        for j in 0..p {
            if scaling.constant[j] {
                continue;
            }
            let pen = penalties[j];
            let diag = norms[j] + pen;
            if diag.is_nan() || diag <= 0.0 {
                continue;
            }
            live[j] = true;
            if diag.is_infinite() {
                // An infinite penalty in these units: the slope is 0.
                mu[j] = weight;
                continue;
            }
            // Rescale so that the Hessian's diagonal entry is 1.
            let r = (weight / diag).sqrt();
            rs[j] = r;
            k[j] = if extreme { r } else { scaling.inv_scale[j] * r };
            mu[j] = pen * r * r;
        }
        Objective {
            problem,
            target_scale: scaling.target_scale,
            k,
            r: rs,
            pre: extreme.then(|| scaling.inv_scale.clone()),
            scale_exp: scaling.scale_exp.clone(),
            target_exp: scaling.target_exp,
            weight,
            mu,
            live,
            loss_exp: 2 * scaling.target_exp,
            passes: 1,
            coef: vec![0.0; p],
            watch: Some(watch),
        }
    }

    /// Ends the setup: the passes from here on are not reported block by
    /// block.
    pub fn end_setup(&mut self) {
        self.watch = None;
    }

    /// Begins a pass, reported when still in the setup.
    fn begin_pass(&self) -> Option<&'p Watch<'p>> {
        if let Some(w) = self.watch {
            w.begin(Stage::Setup, self.problem.rows());
        }
        self.watch
    }

    /// [`crate::Error::Stopped`] when the observer stopped the setup.
    pub fn check(&self) -> Result<()> {
        match self.watch {
            Some(w) => w.check(),
            None => Ok(()),
        }
    }

    /// Whether the observer stopped the setup.
    fn stopped(&self) -> bool {
        self.watch.is_some_and(|w| w.stopped())
    }

    pub fn dim(&self) -> usize {
        self.mu.len()
    }

    /// `log2` of the multiplier from an internal loss `f` (half the
    /// weighted mean squared residual, in scaled units) to the crate's loss
    /// in caller units (the weighted mean squared residual): `2 s_y^2`.
    pub fn caller_loss_exp(&self) -> i32 {
        self.loss_exp + 1
    }

    /// Caller-unit loss for an internal loss (infinite when it exceeds the
    /// range of `f64`): see the [module docs](self).
    pub fn caller_loss(&self, f: f64) -> f64 {
        crate::scaled::ldexp(f, self.caller_loss_exp())
    }

    fn set_coef(&mut self, g: &[f64]) {
        for ((c, &gj), &k) in self.coef.iter_mut().zip(g).zip(&self.k) {
            *c = gj * k;
        }
    }

    /// Turns a pass into the loss and gradient at `g`.
    fn assemble(&self, g: &[f64], pass: Pass, factor: f64) -> Eval {
        let inv_w = 1.0 / self.weight;
        let mut pen = 0.0;
        let grad: Vec<f64> = (0..self.dim())
            .map(|j| {
                pen += self.mu[j] * g[j] * g[j];
                (self.mu[j] * g[j] - factor * self.k[j] * pass.acc[j]) * inv_w
            })
            .collect();
        Eval {
            f: 0.5 * (pass.sq * factor + pen) * inv_w,
            grad,
            sq: pass.sq,
        }
    }

    /// Loss and gradient at `g` (one full pass).
    pub fn eval(&mut self, g: &[f64]) -> Eval {
        self.set_coef(g);
        let watch = self.begin_pass();
        let pass = residual_pass(
            self.problem,
            &self.coef,
            self.pre.as_deref(),
            1.0 / self.target_scale,
            watch,
        );
        self.passes += 1;
        self.assemble(g, pass, 1.0)
    }

    /// Estimate of the loss and gradient from the rows listed, scaled to
    /// the whole problem (`usable rows / batch`): unbiased for uniform
    /// sampling of the usable rows.
    pub fn eval_rows(&mut self, g: &[f64], rows: &[usize]) -> Eval {
        self.set_coef(g);
        let pass = residual_rows(
            self.problem,
            &self.coef,
            self.pre.as_deref(),
            1.0 / self.target_scale,
            rows,
        );
        let factor = self.problem.usable_rows() as f64 / rows.len().max(1) as f64;
        self.assemble(g, pass, factor)
    }

    /// Estimate of `H v` from the rows listed, scaled to the whole problem
    /// as in [`Objective::eval_rows`] (the penalty's share is exact). For
    /// this quadratic objective it equals the difference of the batch
    /// gradients at two points `v` apart, without the cancellation of
    /// subtracting them.
    pub fn hess_rows(&mut self, v: &[f64], rows: &[usize]) -> Vec<f64> {
        self.set_coef(v);
        let pass = residual_rows(self.problem, &self.coef, self.pre.as_deref(), 0.0, rows);
        let factor = self.problem.usable_rows() as f64 / rows.len().max(1) as f64;
        self.assemble(v, pass, factor).grad
    }

    /// `H v` with `H` the Hessian of `f` (one full pass).
    fn hess_vec(&mut self, v: &[f64]) -> Vec<f64> {
        self.set_coef(v);
        let watch = self.begin_pass();
        let pass = residual_pass(self.problem, &self.coef, self.pre.as_deref(), 0.0, watch);
        self.passes += 1;
        let inv_w = 1.0 / self.weight;
        (0..self.dim())
            .map(|j| (self.mu[j] * v[j] - self.k[j] * pass.acc[j]) * inv_w)
            .collect()
    }

    /// Estimate of `L`, the largest eigenvalue of the Hessian, by power
    /// iteration from a fixed pseudo-random start: `||H v_k||` with `v_k`
    /// of unit norm, which approaches `L` from below.
    pub fn lipschitz(&mut self) -> f64 {
        let p = self.dim();
        let mut rng = ChaCha8Rng::seed_from_u64(POWER_SEED);
        let mut v: Vec<f64> = (0..p)
            .map(|j| {
                let u = (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64);
                if self.live[j] {
                    2.0 * u - 1.0
                } else {
                    0.0
                }
            })
            .collect();
        let mut norm = norm2(&v);
        if norm == 0.0 {
            return 0.0;
        }
        v.iter_mut().for_each(|x| *x /= norm);
        let mut est = 0.0;
        for k in 0..POWER_MAX {
            let hv = self.hess_vec(&v);
            if self.stopped() {
                return est;
            }
            norm = norm2(&hv);
            if norm == 0.0 || !norm.is_finite() {
                return norm;
            }
            let change = (norm - est).abs();
            est = norm;
            v = hv.into_iter().map(|x| x / norm).collect();
            if k + 1 >= POWER_MIN && change <= POWER_RTOL * est {
                break;
            }
        }
        est
    }

    /// The largest curvature of a single-row term: `max_i (n_u / W) w_i
    /// ||z_i||^2` plus the penalty's share (one full pass).
    pub fn row_lipschitz(&mut self) -> f64 {
        self.passes += 1;
        let watch = self.begin_pass();
        let rows = max_row_norm(self.problem, &self.k, self.pre.as_deref(), watch);
        let mu_max = self.mu.iter().fold(0.0_f64, |a, &b| a.max(b));
        (self.problem.usable_rows() as f64 * rows + mu_max) / self.weight
    }

    /// The starting point in internal coordinates.
    pub fn start(&self, start: Option<&LinearModel>) -> Result<Vec<f64>> {
        let p = self.dim();
        let Some(model) = start else {
            return Ok(vec![0.0; p]);
        };
        if model.columns() != p {
            return Err(Error::ColumnCountMismatch {
                expected: p,
                found: model.columns(),
            });
        }
        let mut g = vec![0.0; p];
        for (j, &b) in model.coefficients().iter().enumerate() {
            if !b.is_finite() {
                return Err(Error::NonFinite {
                    input: Input::StartingPoint,
                    row: j,
                    column: None,
                    column_name: None,
                    value: b,
                });
            }
            if self.r[j] > 0.0 {
                g[j] = crate::scaled::ldexp(b, self.scale_exp[j] - self.target_exp) / self.r[j];
                if !g[j].is_finite() {
                    return Err(Error::Overflow {
                        what: "starting point in the solver's internal coordinates",
                    });
                }
            }
        }
        Ok(g)
    }

    /// Slopes in caller units.
    pub fn caller_slopes(&self, g: &[f64]) -> Vec<f64> {
        (0..self.dim())
            .map(|j| crate::scaled::ldexp(g[j] * self.r[j], self.target_exp - self.scale_exp[j]))
            .collect()
    }
}

/// Euclidean norm without overflow for moderate vectors.
pub(crate) fn norm2(v: &[f64]) -> f64 {
    let big = v.iter().fold(0.0_f64, |a, &b| a.max(b.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    let s: f64 = v.iter().map(|x| (x / big) * (x / big)).sum();
    big * s.sqrt()
}

/// What the tracker decided after one observation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Verdict {
    pub converged: bool,
    pub stop: bool,
}

/// Records the history, calls the observer and applies the stopping and
/// divergence tests.
pub(crate) struct Tracker<'o> {
    watch: &'o Watch<'o>,
    tolerance: f64,
    stride: usize,
    /// Norm dividing the gradient norm.
    denominator: f64,
    /// Internal loss above which the run counts as diverged.
    limit: f64,
    loss_exp: i32,
    history: Vec<f64>,
    last_recorded: Option<usize>,
    pub last: Option<(usize, f64, f64)>,
    pub stopped: bool,
}

impl<'o> Tracker<'o> {
    /// `f_zero` and `grad_zero` describe the objective at all-zero slopes,
    /// `f_start` the starting point.
    pub fn new(
        watch: &'o Watch<'o>,
        common: &Common<'_>,
        objective: &Objective<'_, '_>,
        grad_zero: f64,
        f_zero: f64,
        f_start: f64,
    ) -> Self {
        let reference = f_zero.max(f_start).max(f64::MIN_POSITIVE);
        Tracker {
            watch,
            tolerance: common.tolerance,
            stride: common.history_stride,
            denominator: if grad_zero > 0.0 && grad_zero.is_finite() {
                grad_zero
            } else {
                1.0
            },
            limit: DIVERGENCE_FACTOR * reference,
            loss_exp: objective.caller_loss_exp(),
            history: Vec::new(),
            last_recorded: None,
            last: None,
            stopped: false,
        }
    }

    /// Relative gradient norm of an evaluation.
    pub fn relative(&self, eval: &Eval) -> f64 {
        norm2(&eval.grad) / self.denominator
    }

    /// The divergence test alone (used inside stochastic epochs).
    pub fn check_finite(&self, iteration: usize, step: f64, f: f64, g: &[f64]) -> Result<()> {
        if !f.is_finite() || f > self.limit || g.iter().any(|v| !v.is_finite()) {
            return Err(Error::Diverged {
                iteration,
                step,
                loss: crate::scaled::ldexp(f, self.loss_exp),
            });
        }
        Ok(())
    }

    /// Observes the point after `iteration` updates.
    ///
    /// # Errors
    /// [`Error::Diverged`] for a non-finite or runaway loss or gradient.
    pub fn observe(&mut self, iteration: usize, step: f64, eval: &Eval) -> Result<Verdict> {
        self.check_finite(iteration, step, eval.f, &eval.grad)?;
        let loss = crate::scaled::ldexp(eval.f, self.loss_exp);
        let rel = self.relative(eval);
        if self.stride > 0 && iteration.is_multiple_of(self.stride) {
            self.history.push(loss);
            self.last_recorded = Some(iteration);
        }
        self.last = Some((iteration, loss, rel));
        let control = self.watch.iteration(iteration, loss, rel, step);
        let stop = control == Control::Stop;
        self.stopped |= stop;
        Ok(Verdict {
            converged: rel <= self.tolerance,
            stop,
        })
    }

    fn into_history(mut self) -> (Vec<f64>, Option<(usize, f64, f64)>, bool) {
        if let Some((k, loss, _)) = self.last {
            if self.stride > 0 && self.last_recorded != Some(k) {
                self.history.push(loss);
            }
        }
        (self.history, self.last, self.stopped)
    }
}

/// Everything the solvers hand to [`finish`].
pub(crate) struct Outcome {
    pub gamma: Vec<f64>,
    pub eval: Eval,
    pub converged: bool,
    pub step: f64,
    pub restarts: usize,
}

/// Builds the fit and its report from the final state.
///
/// # Errors
/// [`Error::NotConverged`] when asked for and the tolerance was not met (a
/// stop by the observer is not an error); [`Error::Overflow`] if a
/// coefficient is not representable in caller units.
pub(crate) fn finish(
    problem: &Problem<'_>,
    name: &str,
    common: &Common<'_>,
    objective: &Objective<'_, '_>,
    tracker: Tracker<'_>,
    outcome: Outcome,
) -> Result<Fit> {
    let tolerance = common.tolerance;
    let (history, last, stopped) = tracker.into_history();
    let (iterations, final_loss, gradient_norm) =
        last.unwrap_or((0, objective.caller_loss(outcome.eval.f), 0.0));
    if common.fail_if_not_converged && !outcome.converged && !stopped {
        return Err(Error::NotConverged {
            iterations,
            gradient_norm,
            tolerance,
        });
    }
    let beta = objective.caller_slopes(&outcome.gamma);
    if beta.iter().any(|b| !b.is_finite()) {
        return Err(Error::Overflow {
            what: "coefficient vector",
        });
    }
    if !final_loss.is_finite() || history.iter().any(|l| !l.is_finite()) {
        return Err(Error::Overflow { what: "loss" });
    }
    let solved = crate::solver::Solved {
        intercept: intercept_for(problem, &beta),
        beta,
        // Nothing is factored: the rank and condition are not measured (so
        // no residual degrees of freedom and no sigma).
        rank: None,
        condition: None,
        rss: (
            outcome.eval.sq,
            crate::solver::rss_exponent(problem, objective.loss_exp / 2),
        ),
        tss: problem.centered_target_squares(),
        penalty: common.penalty,
    };
    let origin = crate::solver::Origin::of(problem);
    let mut fit = crate::solver::assemble(&origin, name, None, solved)?;
    fit.report.iterations = Some(IterationReport {
        iterations,
        converged: outcome.converged,
        stopped_by_observer: stopped,
        final_loss,
        gradient_norm,
        step: outcome.step,
        loss_history: history,
        passes: objective.passes,
        restarts: outcome.restarts,
    });
    Ok(fit)
}

/// Shared start of every fit: the objective, the starting point, its
/// evaluation and the gradient norm and loss at all-zero slopes.
pub(crate) struct Setup<'p, 'a> {
    pub objective: Objective<'p, 'a>,
    pub gamma: Vec<f64>,
    pub eval: Eval,
    pub grad_zero: f64,
    pub f_zero: f64,
}

impl Setup<'_, '_> {
    /// The full-batch step: the caller's fixed step, else `1 / L` with `L`
    /// from power iteration (1 when `L` is not a positive finite number).
    /// Ends the setup.
    ///
    /// # Errors
    /// [`Error::Stopped`] when the observer stopped the power iteration.
    pub(crate) fn full_batch_step(&mut self, fixed: Option<f64>) -> Result<f64> {
        let step = match fixed {
            Some(step) => step,
            None => {
                let l = self.objective.lipschitz();
                self.objective.check()?;
                if l > 0.0 && l.is_finite() {
                    1.0 / l
                } else {
                    1.0
                }
            }
        };
        self.objective.end_setup();
        Ok(step)
    }
}

/// The setup passes, reported to `watch` block by block.
///
/// # Errors
/// [`Error::Stopped`] when the observer stops a setup pass, besides the
/// settings' and the problem's errors.
pub(crate) fn setup<'p, 'a>(
    problem: &'p Problem<'a>,
    common: &Common<'_>,
    watch: &'p Watch<'p>,
) -> Result<Setup<'p, 'a>> {
    common.check()?;
    if common.penalty == 0.0 {
        // Unpenalised: as the closed forms, at least as many usable rows as
        // parameters, or the minimiser is not unique.
        problem.require_determined()?;
    }
    let mut objective = Objective::new(problem, common.penalty, watch);
    objective.check()?;
    let gamma = objective.start(common.start)?;
    let eval = objective.eval(&gamma);
    objective.check()?;
    let (grad_zero, f_zero) = if gamma.iter().all(|&g| g == 0.0) {
        (norm2(&eval.grad), eval.f)
    } else {
        let zero = objective.eval(&vec![0.0; gamma.len()]);
        objective.check()?;
        (norm2(&zero.grad), zero.f)
    };
    Ok(Setup {
        objective,
        gamma,
        eval,
        grad_zero,
        f_zero,
    })
}
