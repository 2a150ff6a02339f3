//! Mini-batch stochastic gradient descent, variance-reduced by default.

use rand_chacha::rand_core::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::{finish, setup, Common, Outcome, Tracker};
use crate::error::{Error, Result};
use crate::model::LinearModel;
use crate::observe::{Observer, Watch};
use crate::problem::Problem;
use crate::solver::{Fit, Solver};

/// Mini-batch stochastic gradient descent with seeded shuffling; by default
/// every batch gradient is corrected by a snapshot taken at the start of
/// its epoch, so that the method converges to the tolerance asked for.
///
/// Every epoch shuffles the rows with non-zero weight (Fisher-Yates driven
/// by a ChaCha8 generator seeded with `seed`), cuts them into batches of
/// `batch_size` rows and takes one step per batch. After each epoch the
/// loss and gradient are evaluated on all rows, for the stopping test, the
/// observer and the history, so every number reported is exact, not a
/// running estimate.
///
/// ## Variance reduction (default)
///
/// The point `s` reached at the end of an epoch is kept as a snapshot, and
/// its full gradient `g(s)` is the one just evaluated for the stopping
/// test. In the next epoch each batch `B` moves the coefficients `x` along
///
/// ```text
/// v = g_B(x) - g_B(s) + g(s) = g(s) + H_B (x - s)
/// ```
///
/// with a constant step, where `g_B` is the batch's gradient estimate
/// (scaled to be unbiased for the full gradient) and `H_B` the batch's
/// estimate of the Hessian. The objective is quadratic, so the difference
/// of the two batch gradients is formed exactly as `H_B (x - s)`, from one
/// read of the batch's rows, with no cancellation. `v` is unbiased for the
/// full gradient `g(x)`, like a plain batch gradient, but its noise is
/// `(H_B - H)(x - s)`: it shrinks as the iterate and the snapshot approach
/// the optimum, instead of staying at the size of the single-row
/// gradients there. That is why a constant step suffices and the error
/// falls by a fixed factor per epoch (linear convergence) once an epoch
/// holds enough batches for the condition number: on well-conditioned
/// problems of 100,000 rows the default settings reach a relative gradient
/// of `1e-6` in about 10 epochs; with one batch per epoch (`batch_size` at
/// least the usable rows) each epoch is one step of full-batch gradient
/// descent.
///
/// Cost: the batches of an epoch read each usable row once (the first
/// batch of an epoch needs no read: its correction is zero), and the full
/// gradient reads the design once more, so an epoch counts two passes in
/// the report's `passes` (one when it has a single batch), exactly as a
/// plain epoch. Setting up reads the design a few more times: column norms,
/// the starting point, the curvature estimates below. Extra memory: the
/// row permutation (`n` indices), the snapshot and a difference vector
/// (`p` values each).
///
/// The default step is `1 / (2 L_b)` (`1 / L` with one batch), where
/// `L_b = n (b - 1) / (b (n - 1)) L + (n - b) / (b (n - 1)) L_max` is the
/// expected smoothness of sampling `b` of `n` rows without replacement:
/// `L` is the full curvature (as for [`crate::GradientDescent`]) and
/// `L_max` the largest single-row curvature. It equals `L` for one batch
/// of all rows and grows for small batches, whose estimates are noisier.
/// Half of `1 / L_b` keeps the expected squared step within the range
/// where the correction's noise cannot undo the progress of an epoch.
/// `decay` and `average` do not apply to this method.
///
/// ## Why `L_b`
///
/// The step bound uses
/// `L_b = n (b - 1) / (b (n - 1)) L + (n - b) / (b (n - 1)) L_max`: `L` is
/// the full curvature (as for [`crate::GradientDescent`]) and `L_max` the
/// largest single-row curvature. `L_b` is the "expected smoothness" of a
/// batch of `b` of the `n` rows drawn without replacement; the derivation
/// (the crate's own, short enough to check here) is: write the loss `f` as
/// the mean of `n` row terms whose curvatures `H_i` are positive
/// semi-definite with largest eigenvalue at most `L_max`, and `H` (largest
/// eigenvalue `L`) their mean. A batch `B` estimates the gradient by its
/// mean over `B`, `g_B`, of curvature `H_B = (1/b) sum_{i in B} H_i`. Row
/// `i` is in `B` with probability `b / n` and two rows `i != j` with
/// probability `b (b - 1) / (n (n - 1))`, so
/// `E[H_B^2] = (n - b) / (b n (n - 1)) sum_i H_i^2 + n (b - 1) / (b (n - 1)) H^2`.
/// As `H_i^2 <= L_max H_i` and `H^2 <= L H` (positive semi-definite order),
/// `E[H_B^2] <= L_b H`, and for `d = w - w*` (`w*` the minimiser)
/// `E |g_B(w) - g_B(w*)|^2 = d' E[H_B^2] d <= L_b d' H d = 2 L_b (f(w) - f(w*))`:
/// the expected-smoothness inequality with constant `L_b`. It equals `L`
/// for one batch of all rows (`b = n`) and `L_max` for single rows
/// (`b = 1`), so the step shrinks for small batches, whose gradients are
/// noisier.
///
/// ## Plain steps (`variance_reduction: false`)
///
/// Each batch moves along its own gradient estimate `g_B(x)`. In epoch `e`
/// (from 0) the step is `step / (1 + decay * e)`, the default first step
/// `1 / L_b`. The noise of such steps does not shrink at the optimum, so
/// they approach it only as the step decays: reaching a tight tolerance
/// takes many epochs, and the report says whether it was reached.
///
/// **Averaging** (on by default, plain steps only): the coefficients
/// evaluated after each epoch, and returned, are the running average of
/// the iterates since the start of the latest epoch whose number is a
/// power of two (so the average spans at least the latest half of the run
/// and drops the early transient); the iteration itself continues from the
/// last iterate. This Polyak-Ruppert style averaging cancels much of the
/// gradient noise of small batches. With `average = false` the last
/// iterate is evaluated and returned. Extra memory: the row permutation
/// and the average (`p` values).
///
/// ## Reproducibility
///
/// The same seed, settings, data and memory layout give identical
/// coefficients, bit for bit, on any number of threads (batches larger
/// than 1,024 rows are split into fixed chunks that run in parallel and
/// are added in a fixed order). Different seeds reach the same optimum to
/// within the tolerance reached.
///
/// ```
/// use leastline::{Problem, Solver, Stochastic};
/// use ndarray::Array2;
///
/// // Delivery times of a courier against distance and parcel count.
/// let x = Array2::from_shape_fn((400, 2), |(i, j)| ((i * (j + 3)) % 17) as f64);
/// let y = x.column(0).mapv(|d| 4.0 + 1.5 * d) + x.column(1).mapv(|c| 0.25 * c);
/// let problem = Problem::new(x.view(), y.view())?;
/// let fit = Stochastic::new().with_max_iterations(50).with_seed(7).fit(&problem)?;
/// assert!((fit.model.coefficients()[0] - 1.5).abs() < 1e-3);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Stochastic {
    /// Rows per batch (default 64; at least 1).
    pub(crate) batch_size: usize,
    /// Most epochs, each a shuffled pass over the rows; `None` (default):
    /// [`Stochastic::epoch_limit`]'s rule.
    pub(crate) max_iterations: Option<usize>,
    /// Step (plain steps: first step) in internal coordinates; `None`
    /// (default) uses `1 / (2 L_b)` with variance reduction and more than
    /// one batch, else `1 / L_b` (see the type's docs).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) step: Option<f64>,
    /// Step decay per epoch of plain steps: `step / (1 + decay * epoch)`
    /// (default 0.5; finite and `>= 0`; 0 keeps the step constant). Not
    /// used with `variance_reduction`, whose step is constant.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) decay: f64,
    /// Seed of the shuffling (default 0).
    pub(crate) seed: u64,
    /// Plain steps only: report the average of the iterates instead of the
    /// last one (default `true`; see the type's docs).
    pub(crate) average: bool,
    /// Correct every batch gradient by the latest epoch's snapshot (default
    /// `true`; see the type's docs). `false`: plain decaying steps with
    /// optional averaging.
    pub(crate) variance_reduction: bool,
    /// Stop when the relative gradient norm after an epoch is at most this
    /// (default `1e-6`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) tolerance: f64,
    /// L2 penalty `lambda` on the slopes, in caller units (default 0).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) penalty: f64,
    /// Starting slopes in caller units (its intercept is ignored).
    pub(crate) start: Option<LinearModel>,
    /// Record the loss every this many epochs, plus the last one
    /// (default 1; 0: no history).
    pub(crate) history_stride: usize,
    /// Return [`Error::NotConverged`] instead of an unconverged fit.
    pub(crate) fail_if_not_converged: bool,
}

impl Default for Stochastic {
    fn default() -> Self {
        Stochastic {
            batch_size: 64,
            max_iterations: None,
            step: None,
            decay: 0.5,
            seed: 0,
            average: true,
            variance_reduction: true,
            tolerance: 1e-6,
            penalty: 0.0,
            start: None,
            history_stride: 1,
            fail_if_not_converged: false,
        }
    }
}

/// Epochs a fit may run when `max_iterations` is unset, at least.
const DEFAULT_EPOCHS: usize = 100;

/// Batch steps a fit may take when `max_iterations` is unset, at least:
/// the default iteration limit of [`crate::GradientDescent`], so that a
/// problem of few batches an epoch gets the budget of steps (and at most
/// the reads of the design) of a full-gradient fit.
const DEFAULT_STEPS: usize = 10_000;

/// Fraction of `1 / L_b` taken as the default step with variance
/// reduction and more than one batch per epoch (with one batch the step is
/// full-batch gradient descent's `1 / L`).
const STEP_FRACTION: f64 = 0.5;

checked_settings!(Stochastic {
    batch_size: usize,
    max_iterations: Option<usize>,
    #[serde(with = "crate::serde_float::option_float")]
    step: Option<f64>,
    #[serde(with = "crate::serde_float::float")]
    decay: f64,
    seed: u64,
    average: bool,
    variance_reduction: bool,
    #[serde(with = "crate::serde_float::float")]
    tolerance: f64,
    #[serde(with = "crate::serde_float::float")]
    penalty: f64,
    start: Option<LinearModel>,
    history_stride: usize,
    fail_if_not_converged: bool,
});

impl Stochastic {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if self.batch_size == 0 {
            return Err(Error::InvalidParameter {
                name: "batch_size",
                value: 0.0,
                reason: "must be at least 1",
            });
        }
        crate::error::check_finite_nonnegative("decay", self.decay)?;
        self.common().check()
    }
}

impl Stochastic {
    /// Stochastic at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    /// The most epochs a fit of `problem` may run: `max_iterations` when
    /// set; otherwise 100, or as many epochs as make 10,000 batch steps
    /// (the default iteration limit of [`crate::GradientDescent`]) where
    /// that is more, i.e. where an epoch holds fewer than 100 batches of
    /// the rows with non-zero weight. Small problems need it: with 20 rows
    /// in batches of one an epoch is 20 steps, and the epochs to converge
    /// grow as the epochs shorten (a survey of 60 well-conditioned problems
    /// of 20 rows and 1 to 8 columns needed up to 173 epochs in batches of
    /// one, 248 in batches of seven, 250 in one batch; 100,000 rows need
    /// about 10). The budget of reads of the design stays within that of a
    /// full-gradient fit: an epoch of `m` batches reads the design twice
    /// (once with one batch), so the limit is at most 10,000 reads.
    ///
    /// ```
    /// use leastline::{Problem, Stochastic};
    /// use ndarray::{Array1, Array2};
    ///
    /// let x = Array2::from_shape_fn((20, 2), |(i, j)| (i * (j + 2) % 7) as f64);
    /// let y = Array1::from_shape_fn(20, |i| i as f64);
    /// let problem = Problem::new(x.view(), y.view())?;
    /// // 20 rows in one batch of the default 64: one step an epoch.
    /// assert_eq!(Stochastic::new().epoch_limit(&problem), 10_000);
    /// // Batches of one: 20 steps an epoch.
    /// assert_eq!(Stochastic::new().with_batch_size(1).epoch_limit(&problem), 500);
    /// assert_eq!(Stochastic::new().with_max_iterations(40).epoch_limit(&problem), 40);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    pub fn epoch_limit(&self, problem: &Problem<'_>) -> usize {
        let usable = (0..problem.rows())
            .filter(|&i| problem.scaled_weight(i) > 0.0)
            .count();
        self.epoch_limit_for(usable)
    }

    /// [`Self::epoch_limit`] for `usable` rows with non-zero weight.
    fn epoch_limit_for(&self, usable: usize) -> usize {
        self.max_iterations.unwrap_or_else(|| {
            let b = self.batch_size.clamp(1, usable.max(1));
            let batches = usable.div_ceil(b).max(1);
            DEFAULT_EPOCHS.max(DEFAULT_STEPS.div_ceil(batches))
        })
    }

    crate::settings::setting! {
        /// Rows per batch (default 64; at least 1).
        with_batch_size / batch_size: plain usize
    }

    crate::settings::setting! {
        /// Most epochs, each a shuffled pass over the rows. Unset (the
        /// default), a fit may run [`Self::epoch_limit`]'s number: 100, or
        /// more on problems whose epochs hold fewer than 100 batches.
        with_max_iterations / max_iterations: optional usize
    }

    crate::settings::setting! {
        /// First step in internal coordinates; `None` (default) uses `1 / L_b`.
        with_step / step: optional f64
    }

    crate::settings::setting! {
        /// Step decay per epoch: `step / (1 + decay * epoch)` (default 0.5;
        /// finite and `>= 0`; 0 keeps the step constant).
        with_decay / decay: plain f64
    }

    crate::settings::setting! {
        /// Seed of the shuffling (default 0).
        with_seed / seed: plain u64
    }

    crate::settings::setting! {
        /// Plain steps only: report the average of the iterates instead of the
        /// last one (default `true`; see the type's docs).
        with_average / average: plain bool
    }

    crate::settings::setting! {
        /// Correct every batch gradient by the latest epoch's snapshot (default
        /// `true`; see the type's docs). `false`: plain decaying steps with
        /// optional averaging.
        with_variance_reduction / variance_reduction: plain bool
    }

    crate::settings::setting! {
        /// Stop when the relative gradient norm after an epoch is at most this
        /// (default `1e-6`).
        with_tolerance / tolerance: plain f64
    }

    crate::settings::setting! {
        /// L2 penalty `lambda` on the slopes, in caller units (default 0).
        with_penalty / penalty: plain f64
    }

    crate::settings::setting! {
        /// Starting slopes in caller units (its intercept is ignored).
        with_start / start: borrowed LinearModel
    }

    crate::settings::setting! {
        /// Record the loss every this many epochs, plus the last one
        /// (default 1; 0: no history).
        with_history_stride / history_stride: plain usize
    }

    crate::settings::setting! {
        /// Return [`Error::NotConverged`] instead of an unconverged fit.
        with_fail_if_not_converged / fail_if_not_converged: plain bool
    }
}

/// Uniform integer in `0..n` (`n >= 1`), by a widening multiply with
/// rejection (no modulo bias). Written out here so that the shuffles of a
/// seed never change with the version of a general-purpose crate.
fn below(rng: &mut ChaCha8Rng, n: u64) -> u64 {
    let threshold = n.wrapping_neg() % n;
    loop {
        let m = u128::from(rng.next_u64()) * u128::from(n);
        if (m as u64) >= threshold {
            return (m >> 64) as u64;
        }
    }
}

/// Fisher-Yates shuffle.
fn shuffle(rng: &mut ChaCha8Rng, v: &mut [usize]) {
    for i in (1..v.len()).rev() {
        let j = below(rng, i as u64 + 1) as usize;
        v.swap(i, j);
    }
}

impl Stochastic {
    fn common(&self) -> Common<'_> {
        Common {
            tolerance: self.tolerance,
            step: self.step,
            penalty: self.penalty,
            start: self.start.as_ref(),
            history_stride: self.history_stride,
            fail_if_not_converged: self.fail_if_not_converged,
        }
    }
}

impl Solver for Stochastic {
    fn name(&self) -> &str {
        "stochastic"
    }

    /// Fits the model, calling `observer` at the start and after every
    /// epoch (with the full-data loss and relative gradient norm);
    /// [`crate::Control::Stop`] ends the fit at the current coefficients.
    ///
    /// # Errors
    /// As [`crate::GradientDescent`]'s `fit_observed`, plus
    /// [`Error::InvalidParameter`] for `batch_size` 0 or a negative or
    /// non-finite `decay`. A non-finite coefficient inside an epoch is
    /// reported at once as [`Error::Diverged`] with that epoch's number
    /// (counting from 1) and step, and with the batch's loss estimate for
    /// plain steps or no loss with variance reduction (whose batches form
    /// no loss).
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        if self.batch_size == 0 {
            return Err(Error::InvalidParameter {
                name: "batch_size",
                value: 0.0,
                reason: "must be at least 1",
            });
        }
        crate::error::check_finite_nonnegative("decay", self.decay)?;
        let common = self.common();
        let mut s = setup(problem, &common, &watch)?;
        let rows: Vec<usize> = (0..problem.rows())
            .filter(|&i| problem.scaled_weight(i) > 0.0)
            .collect();
        let n = rows.len();
        let b = self.batch_size.min(n).max(1);
        let max_epochs = self.epoch_limit_for(n);
        let step0 = match self.step {
            Some(step) => step,
            None => {
                let l = s.objective.lipschitz();
                s.objective.check()?;
                let l_max = s.objective.row_lipschitz();
                s.objective.check()?;
                let lb = if b >= n || n < 2 {
                    l
                } else {
                    let (nf, bf) = (n as f64, b as f64);
                    nf * (bf - 1.0) / (bf * (nf - 1.0)) * l + (nf - bf) / (bf * (nf - 1.0)) * l_max
                };
                if lb > 0.0 && lb.is_finite() {
                    if self.variance_reduction && b < n {
                        STEP_FRACTION / lb
                    } else {
                        1.0 / lb
                    }
                } else {
                    1.0
                }
            }
        };
        s.objective.end_setup();
        let mut tracker = Tracker::new(
            &watch,
            &common,
            &s.objective,
            s.grad_zero,
            s.f_zero,
            s.eval.f,
        );
        let mut rng = ChaCha8Rng::seed_from_u64(self.seed);
        let mut order = rows;
        let mut gamma = s.gamma;
        let mut eval = s.eval;
        let mut epoch = 0;
        let mut step = step0;
        let mut avg = gamma.clone();
        let mut avg_count = 0.0_f64;
        let reduced = self.variance_reduction;
        let averaging = self.average && !reduced;
        let converged = loop {
            let verdict = tracker.observe(epoch, step, &eval)?;
            if verdict.converged || verdict.stop || epoch >= max_epochs {
                break verdict.converged;
            }
            shuffle(&mut rng, &mut order);
            if reduced {
                // `gamma` is the snapshot and `eval.grad` its full
                // gradient. Batch step: g_B(x) - g_B(snapshot) + g(snapshot)
                // = g(snapshot) + H_B (x - snapshot) for this quadratic.
                let snapshot = gamma.clone();
                let mut diff = vec![0.0; gamma.len()];
                let mut first = true;
                let mut read = false;
                for batch in order.chunks(b) {
                    let correction = if first {
                        // At the snapshot the correction is exactly zero.
                        None
                    } else {
                        for ((d, g), s0) in diff.iter_mut().zip(&gamma).zip(&snapshot) {
                            *d = g - s0;
                        }
                        read = true;
                        Some(s.objective.hess_rows(&diff, batch))
                    };
                    first = false;
                    match correction {
                        Some(h) => {
                            for ((g, d), c) in gamma.iter_mut().zip(&eval.grad).zip(&h) {
                                *g -= step * (d + c);
                            }
                        }
                        None => {
                            for (g, d) in gamma.iter_mut().zip(&eval.grad) {
                                *g -= step * d;
                            }
                        }
                    }
                    if gamma.iter().any(|g| !g.is_finite()) {
                        return Err(Error::Diverged {
                            iteration: epoch + 1,
                            step,
                            loss: f64::INFINITY,
                        });
                    }
                }
                if read {
                    s.objective.passes += 1;
                }
                eval = s.objective.eval(&gamma);
                epoch += 1;
                continue;
            }
            step = step0 / (1.0 + self.decay * epoch as f64);
            if epoch.is_power_of_two() {
                // Restart the average: it spans at least the latest half
                // of the epochs run, never the early transient.
                avg_count = 0.0;
            }
            for batch in order.chunks(b) {
                let est = s.objective.eval_rows(&gamma, batch);
                for (g, d) in gamma.iter_mut().zip(&est.grad) {
                    *g -= step * d;
                }
                if gamma.iter().any(|g| !g.is_finite()) {
                    return Err(Error::Diverged {
                        iteration: epoch + 1,
                        step,
                        loss: s.objective.caller_loss(est.f),
                    });
                }
                if averaging {
                    avg_count += 1.0;
                    let inv = 1.0 / avg_count;
                    for (a, g) in avg.iter_mut().zip(&gamma) {
                        *a += (g - *a) * inv;
                    }
                }
            }
            s.objective.passes += 1;
            eval = s.objective.eval(if averaging { &avg } else { &gamma });
            epoch += 1;
        };
        let gamma = if averaging && epoch > 0 { avg } else { gamma };
        finish(
            problem,
            self.name(),
            &common,
            &s.objective,
            tracker,
            Outcome {
                gamma,
                eval,
                converged,
                step: step0,
                restarts: 0,
            },
        )
    }
}
