//! Accelerated gradient descent with adaptive restart.

use super::{finish, setup, Common, Outcome, Tracker};
use crate::error::Result;
use crate::model::LinearModel;
use crate::observe::{Observer, Watch};
use crate::problem::Problem;
use crate::solver::{Fit, Solver};

/// Nesterov's accelerated gradient descent with adaptive restart.
///
/// Each iteration extrapolates along the last move with the momentum
/// `(t_k - 1) / t_{k+1}`, `t_{k+1} = (1 + sqrt(1 + 4 t_k^2)) / 2`, and takes a
/// gradient step from the extrapolated point. Because the objective is
/// quadratic its gradient is affine, so the gradient at the extrapolated
/// point is the same extrapolation of the last two gradients: one read of
/// the design per iteration, as for [`crate::GradientDescent`].
///
/// Restart (momentum reset to zero) happens when
/// - the step direction points uphill (the gradient at the extrapolated
///   point has a positive inner product with the move just made), or
/// - the loss would rise: then the trial point is discarded and a plain
///   gradient step taken instead (one extra pass).
///
/// So with the default step `1 / L` (estimated as for
/// [`crate::GradientDescent`]) the loss never increases here either. The
/// report counts restarts and passes. Iterations needed grow like
/// `sqrt(kappa) * ln(1 / tolerance)` rather than `kappa * ln(1 / tolerance)`.
///
/// Settings, losses and the tolerance: see the [module docs](crate::gradient).
///
/// ```
/// use leastline::{Accelerated, Problem, Solver};
/// use ndarray::array;
///
/// let x = array![[1.0, 10.0], [2.0, 9.0], [3.0, 11.5], [4.0, 12.0], [5.0, 10.5], [6.0, 13.0]];
/// let y = array![4.0, 5.1, 8.2, 9.9, 10.1, 13.8];
/// let problem = Problem::new(x.view(), y.view())?;
/// let fit = Accelerated::new().with_tolerance(1e-10).fit(&problem)?;
/// assert!(fit.report.iterations.as_ref().is_some_and(|r| r.converged));
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Accelerated {
    /// Stop when the relative gradient norm is at most this (default `1e-6`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) tolerance: f64,
    /// Most accepted updates (default 10,000).
    pub(crate) max_iterations: usize,
    /// Fixed step in internal coordinates; `None` (default) uses `1 / L`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) step: Option<f64>,
    /// L2 penalty `lambda` on the slopes, in caller units (default 0).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) penalty: f64,
    /// Starting slopes in caller units (its intercept is ignored).
    pub(crate) start: Option<LinearModel>,
    /// Record the loss every this many iterations, plus the last one
    /// (default 1; 0: no history).
    pub(crate) history_stride: usize,
    /// Return [`crate::Error::NotConverged`] instead of an unconverged fit.
    pub(crate) fail_if_not_converged: bool,
}

impl Default for Accelerated {
    fn default() -> Self {
        Accelerated {
            tolerance: 1e-6,
            max_iterations: 10_000,
            step: None,
            penalty: 0.0,
            start: None,
            history_stride: 1,
            fail_if_not_converged: false,
        }
    }
}

checked_settings!(Accelerated {
    #[serde(with = "crate::serde_float::float")]
    tolerance: f64,
    max_iterations: usize,
    #[serde(with = "crate::serde_float::option_float")]
    step: Option<f64>,
    #[serde(with = "crate::serde_float::float")]
    penalty: f64,
    start: Option<LinearModel>,
    history_stride: usize,
    fail_if_not_converged: bool,
});

impl Accelerated {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> crate::Result<()> {
        self.common().check()
    }
}

impl Accelerated {
    /// Accelerated at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Stop when the relative gradient norm is at most this (default `1e-6`).
        with_tolerance / tolerance: plain f64
    }

    crate::settings::setting! {
        /// Most accepted updates (default 10,000).
        with_max_iterations / max_iterations: plain usize
    }

    crate::settings::setting! {
        /// Fixed step in internal coordinates; `None` (default) uses `1 / L`.
        with_step / step: optional f64
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
        /// Record the loss every this many iterations, plus the last one
        /// (default 1; 0: no history).
        with_history_stride / history_stride: plain usize
    }

    crate::settings::setting! {
        /// Return [`crate::Error::NotConverged`] instead of an unconverged fit.
        with_fail_if_not_converged / fail_if_not_converged: plain bool
    }
}

impl Accelerated {
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

impl Solver for Accelerated {
    fn name(&self) -> &str {
        "accelerated"
    }

    /// Fits the model, calling `observer` at the start and after every
    /// accepted iteration; [`crate::Control::Stop`] ends the fit at the current
    /// coefficients (see [`crate::GradientDescent`]'s `fit_observed`).
    ///
    /// # Errors
    /// As [`crate::GradientDescent`]'s `fit_observed`.
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        let common = self.common();
        let mut s = setup(problem, &common, &watch)?;
        let step = s.full_batch_step(self.step)?;
        let mut tracker = Tracker::new(
            &watch,
            &common,
            &s.objective,
            s.grad_zero,
            s.f_zero,
            s.eval.f,
        );
        let p = s.gamma.len();
        let mut x = s.gamma;
        let mut eval = s.eval;
        let mut x_prev = x.clone();
        let mut g_prev = eval.grad.clone();
        let mut t = 1.0_f64;
        let mut restarts = 0;
        let mut k = 0;
        let mut y = vec![0.0; p];
        let mut gy = vec![0.0; p];
        let converged = loop {
            let verdict = tracker.observe(k, step, &eval)?;
            if verdict.converged || verdict.stop || k >= self.max_iterations {
                break verdict.converged;
            }
            let t_next = 0.5 * (1.0 + (1.0 + 4.0 * t * t).sqrt());
            let beta = (t - 1.0) / t_next;
            for j in 0..p {
                y[j] = x[j] + beta * (x[j] - x_prev[j]);
                gy[j] = eval.grad[j] + beta * (eval.grad[j] - g_prev[j]);
            }
            let mut trial: Vec<f64> = y.iter().zip(&gy).map(|(a, d)| a - step * d).collect();
            let mut trial_eval = s.objective.eval(&trial);
            let mut t_new = t_next;
            // NaN compares false: a non-finite trial is kept and the
            // tracker reports the divergence.
            if trial_eval.f > eval.f && beta > 0.0 {
                restarts += 1;
                t_new = 1.0;
                trial = x
                    .iter()
                    .zip(&eval.grad)
                    .map(|(a, d)| a - step * d)
                    .collect();
                trial_eval = s.objective.eval(&trial);
            } else {
                let uphill: f64 = gy
                    .iter()
                    .zip(trial.iter().zip(&x))
                    .map(|(d, (a, b))| d * (a - b))
                    .sum();
                if uphill > 0.0 {
                    restarts += 1;
                    t_new = 1.0;
                }
            }
            x_prev = std::mem::replace(&mut x, trial);
            g_prev = std::mem::replace(&mut eval, trial_eval).grad;
            t = t_new;
            k += 1;
        };
        finish(
            problem,
            self.name(),
            &common,
            &s.objective,
            tracker,
            Outcome {
                gamma: x,
                eval,
                converged,
                step,
                restarts,
            },
        )
    }
}
