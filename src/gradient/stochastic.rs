//! Mini-batch stochastic gradient descent.

use rand_chacha::rand_core::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::{finish, setup, Common, Outcome, Tracker};
use crate::error::{Error, Result};
use crate::model::LinearModel;
use crate::observe::{Observer, Watch};
use crate::problem::Problem;
use crate::solver::{Fit, Solver};

/// Mini-batch stochastic gradient descent with seeded shuffling and a
/// decaying step.
///
/// Every epoch shuffles the rows with non-zero weight (Fisher-Yates driven
/// by a ChaCha8 generator seeded with `seed`), cuts them into batches of
/// `batch_size` rows and takes one step per batch along the batch's
/// gradient estimate, scaled so that it is unbiased for the full gradient.
/// In epoch `e` (from 0) the step is `step / (1 + decay * e)`.
///
/// The default first step is `1 / L_b`, where
/// `L_b = n (b - 1) / (b (n - 1)) L + (n - b) / (b (n - 1)) L_max` (the
/// "expected smoothness" of sampling `b` of `n` rows without replacement,
/// a standard bound quoted from memory): `L` is the full curvature (as for
/// [`crate::GradientDescent`]) and `L_max` the largest single-row
/// curvature. It equals `1 / L` for one batch of all rows and shrinks for
/// small batches, whose gradients are noisier.
///
/// After each epoch the loss and gradient are evaluated on all rows (one
/// more read of the design), for the stopping test, the observer and the
/// history, so every number reported is exact, not a running estimate. An
/// epoch therefore reads the design twice: once in shuffled batches, once
/// in order.
///
/// **Reproducible:** the same seed, settings, data and memory layout give
/// identical coefficients, bit for bit, on any number of threads (batches
/// larger than 1,024 rows are split into fixed chunks that run in parallel
/// and are added in a fixed order). Different seeds reach the same optimum
/// to within the tolerance reached.
///
/// **Averaging** (on by default): the coefficients evaluated after each
/// epoch, and returned, are the running average of the iterates since the
/// start of the latest epoch whose number is a power of two (so the average
/// spans at least the latest half of the run and drops the early
/// transient); the iteration itself continues from the last iterate. This
/// Polyak-Ruppert style averaging cancels much of the gradient noise of
/// small batches: in the crate's conditioning example, with batches of 32
/// rows, it reaches a relative gradient of 1e-2 in 2 or 3 epochs instead of
/// 11 to 15 (with 256 rows it makes little difference). With
/// `average = false` the last iterate is evaluated and returned.
///
/// A stochastic method's gradient noise shrinks only as the step decays, so
/// reaching a tight tolerance takes many epochs; the report says whether it
/// was reached. Extra memory: the row permutation (`n` indices) and the
/// average (`p` values).
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
pub struct Stochastic {
    /// Rows per batch (default 64; at least 1).
    pub(crate) batch_size: usize,
    /// Most epochs, each a shuffled pass over the rows (default 100).
    pub(crate) max_iterations: usize,
    /// First step in internal coordinates; `None` (default) uses `1 / L_b`.
    pub(crate) step: Option<f64>,
    /// Step decay per epoch: `step / (1 + decay * epoch)` (default 0.5;
    /// finite and `>= 0`; 0 keeps the step constant).
    pub(crate) decay: f64,
    /// Seed of the shuffling (default 0).
    pub(crate) seed: u64,
    /// Report the average of the iterates instead of the last one
    /// (default `true`; see the type's docs).
    pub(crate) average: bool,
    /// Stop when the relative gradient norm after an epoch is at most this
    /// (default `1e-6`).
    pub(crate) tolerance: f64,
    /// L2 penalty `lambda` on the slopes, in caller units (default 0).
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
            max_iterations: 100,
            step: None,
            decay: 0.5,
            seed: 0,
            average: true,
            tolerance: 1e-6,
            penalty: 0.0,
            start: None,
            history_stride: 1,
            fail_if_not_converged: false,
        }
    }
}

impl Stochastic {
    /// Stochastic at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    /// Rows per batch (default 64; at least 1).
    #[must_use]
    pub fn with_batch_size(mut self, value: usize) -> Self {
        self.batch_size = value;
        self
    }

    /// The `batch_size` setting (see [`Self::with_batch_size`]).
    pub fn batch_size(&self) -> usize {
        self.batch_size
    }

    /// Most epochs, each a shuffled pass over the rows (default 100).
    #[must_use]
    pub fn with_max_iterations(mut self, value: usize) -> Self {
        self.max_iterations = value;
        self
    }

    /// The `max_iterations` setting (see [`Self::with_max_iterations`]).
    pub fn max_iterations(&self) -> usize {
        self.max_iterations
    }

    /// First step in internal coordinates; `None` (default) uses `1 / L_b`.
    #[must_use]
    pub fn with_step(mut self, value: f64) -> Self {
        self.step = Some(value);
        self
    }

    /// The `step` setting (see [`Self::with_step`]).
    pub fn step(&self) -> Option<f64> {
        self.step
    }

    /// Step decay per epoch: `step / (1 + decay * epoch)` (default 0.5;
    /// finite and `>= 0`; 0 keeps the step constant).
    #[must_use]
    pub fn with_decay(mut self, value: f64) -> Self {
        self.decay = value;
        self
    }

    /// The `decay` setting (see [`Self::with_decay`]).
    pub fn decay(&self) -> f64 {
        self.decay
    }

    /// Seed of the shuffling (default 0).
    #[must_use]
    pub fn with_seed(mut self, value: u64) -> Self {
        self.seed = value;
        self
    }

    /// The `seed` setting (see [`Self::with_seed`]).
    pub fn seed(&self) -> u64 {
        self.seed
    }

    /// Report the average of the iterates instead of the last one
    /// (default `true`; see the type's docs).
    #[must_use]
    pub fn with_average(mut self, value: bool) -> Self {
        self.average = value;
        self
    }

    /// The `average` setting (see [`Self::with_average`]).
    pub fn average(&self) -> bool {
        self.average
    }

    /// Stop when the relative gradient norm after an epoch is at most this
    /// (default `1e-6`).
    #[must_use]
    pub fn with_tolerance(mut self, value: f64) -> Self {
        self.tolerance = value;
        self
    }

    /// The `tolerance` setting (see [`Self::with_tolerance`]).
    pub fn tolerance(&self) -> f64 {
        self.tolerance
    }

    /// L2 penalty `lambda` on the slopes, in caller units (default 0).
    #[must_use]
    pub fn with_penalty(mut self, value: f64) -> Self {
        self.penalty = value;
        self
    }

    /// The `penalty` setting (see [`Self::with_penalty`]).
    pub fn penalty(&self) -> f64 {
        self.penalty
    }

    /// Starting slopes in caller units (its intercept is ignored).
    #[must_use]
    pub fn with_start(mut self, value: LinearModel) -> Self {
        self.start = Some(value);
        self
    }

    /// The `start` setting (see [`Self::with_start`]).
    pub fn start(&self) -> Option<&LinearModel> {
        self.start.as_ref()
    }

    /// Record the loss every this many epochs, plus the last one
    /// (default 1; 0: no history).
    #[must_use]
    pub fn with_history_stride(mut self, value: usize) -> Self {
        self.history_stride = value;
        self
    }

    /// The `history_stride` setting (see [`Self::with_history_stride`]).
    pub fn history_stride(&self) -> usize {
        self.history_stride
    }

    /// Return [`Error::NotConverged`] instead of an unconverged fit.
    #[must_use]
    pub fn with_fail_if_not_converged(mut self, value: bool) -> Self {
        self.fail_if_not_converged = value;
        self
    }

    /// The `fail_if_not_converged` setting (see [`Self::with_fail_if_not_converged`]).
    pub fn fail_if_not_converged(&self) -> bool {
        self.fail_if_not_converged
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
    /// (counting from 1) and step.
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        if self.batch_size == 0 {
            return Err(Error::InvalidParameter {
                name: "batch_size",
                value: 0.0,
                reason: "must be at least 1",
            });
        }
        if !self.decay.is_finite() || self.decay < 0.0 {
            return Err(Error::InvalidParameter {
                name: "decay",
                value: self.decay,
                reason: "must be finite and >= 0",
            });
        }
        let common = self.common();
        let mut s = setup(problem, &common, &watch)?;
        let rows: Vec<usize> = (0..problem.rows())
            .filter(|&i| problem.scaled_weight(i) > 0.0)
            .collect();
        let n = rows.len();
        let b = self.batch_size.min(n).max(1);
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
                    1.0 / lb
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
        let averaging = self.average;
        let converged = loop {
            let verdict = tracker.observe(epoch, step, &eval)?;
            if verdict.converged || verdict.stop || epoch >= self.max_iterations {
                break verdict.converged;
            }
            step = step0 / (1.0 + self.decay * epoch as f64);
            if epoch.is_power_of_two() {
                // Restart the average: it spans at least the latest half
                // of the epochs run, never the early transient.
                avg_count = 0.0;
            }
            shuffle(&mut rng, &mut order);
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
