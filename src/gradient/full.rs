//! Full-batch gradient descent.

use super::{finish, setup, Common, Outcome, Tracker};
use crate::error::Result;
use crate::model::LinearModel;
use crate::observe::{Observer, Watch};
use crate::problem::Problem;
use crate::solver::{Fit, Solver};

/// Full-batch gradient descent with a fixed step.
///
/// Each iteration reads the design once: residuals and gradient are formed
/// together over row blocks in parallel, without a transformed copy of the
/// design. The default step is `1 / L`, with `L` the largest eigenvalue of
/// the Hessian (`X^T W X / sum(w)` in the internal standardised coordinates,
/// plus the penalty's share) estimated by 5 to 30 power-iteration passes
/// before the first step. Power iteration approaches `L` from below and any
/// estimate above `L / 2` keeps the step under the stability limit `2 / L`;
/// with such a step the loss never increases from one iteration to the next.
///
/// Iterations needed grow with the condition number `kappa` of the
/// standardised `X^T W X`: about `kappa * ln(1 / tolerance)`. For
/// ill-conditioned designs use [`crate::Accelerated`] (about
/// `sqrt(kappa)`), or a closed-form solver when `p` is small.
///
/// Settings, losses and the relative-gradient tolerance are described in
/// the [module docs](crate::gradient). Gradient solvers factor nothing, so
/// the report's `rank`, `condition` and `residual_df` are `None`
/// (collinearity is not tested: without a penalty, a collinear design
/// converges slowly to one of its many solutions; inference measures the
/// rank itself and refuses it). Unpenalised, a problem with fewer usable
/// rows than parameters is refused with [`crate::Error::TooFewRows`].
///
/// ```
/// use leastline::{GradientDescent, Problem, Solver};
/// use ndarray::array;
///
/// // Daily energy use of a small workshop against machine hours.
/// let x = array![[2.0], [3.5], [5.0], [6.0], [8.0]];
/// let y = array![11.8, 15.2, 19.1, 21.0, 26.2];
/// let problem = Problem::new(x.view(), y.view())?;
/// let solver = GradientDescent::new().with_tolerance(1e-10);
/// let fit = solver.fit(&problem)?;
/// let report = fit.report.iterations.as_ref().expect("iterative solver");
/// assert!(report.converged);
/// assert!((fit.model.coefficients()[0] - 2.4).abs() < 0.1);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct GradientDescent {
    /// Stop when the relative gradient norm is at most this (default `1e-6`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) tolerance: f64,
    /// Most updates (default 10,000).
    pub(crate) max_iterations: usize,
    /// Fixed step in internal coordinates; `None` (default) uses `1 / L`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) step: Option<f64>,
    /// L2 penalty `lambda` on the slopes, in caller units (default 0).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub(crate) penalty: f64,
    /// Starting slopes in caller units (its intercept is ignored); `None`
    /// starts from zero slopes.
    pub(crate) start: Option<LinearModel>,
    /// Record the loss every this many iterations, plus the last one
    /// (default 1: every iteration; 0: no history).
    pub(crate) history_stride: usize,
    /// Return [`crate::Error::NotConverged`] instead of an unconverged fit
    /// (default `false`).
    pub(crate) fail_if_not_converged: bool,
}

impl Default for GradientDescent {
    fn default() -> Self {
        GradientDescent {
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

checked_settings!(GradientDescent {
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

impl GradientDescent {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> crate::Result<()> {
        self.common().check()
    }
}

impl GradientDescent {
    /// GradientDescent at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Stop when the relative gradient norm is at most this (default `1e-6`).
        with_tolerance / tolerance: plain f64
    }

    crate::settings::setting! {
        /// Most updates (default 10,000).
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
        /// Starting slopes in caller units (its intercept is ignored); `None`
        /// starts from zero slopes.
        with_start / start: borrowed LinearModel
    }

    crate::settings::setting! {
        /// Record the loss every this many iterations, plus the last one
        /// (default 1: every iteration; 0: no history).
        with_history_stride / history_stride: plain usize
    }

    crate::settings::setting! {
        /// Return [`crate::Error::NotConverged`] instead of an unconverged fit
        /// (default `false`).
        with_fail_if_not_converged / fail_if_not_converged: plain bool
    }
}

impl GradientDescent {
    pub(crate) fn common(&self) -> Common<'_> {
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

impl Solver for GradientDescent {
    fn name(&self) -> &str {
        "gradient-descent"
    }

    /// Fits the model, calling `observer` after every block of the setup
    /// passes, then at the start and after every iteration with the
    /// iteration number, loss and relative gradient norm; the fit ends at
    /// once, with the current coefficients, when the observer returns
    /// [`crate::Control::Stop`] while iterating (with
    /// [`crate::Error::Stopped`] during the setup).
    ///
    /// ```
    /// use std::sync::Mutex;
    /// use leastline::{Control, GradientDescent, Problem, Progress, Solver};
    /// use ndarray::array;
    ///
    /// let x = array![[1.0, 0.3], [2.0, 0.1], [3.0, 0.8], [4.0, 0.4], [5.0, 0.9]];
    /// let y = array![3.2, 4.1, 7.9, 8.2, 11.5];
    /// let problem = Problem::new(x.view(), y.view())?;
    /// let losses = Mutex::new(Vec::new());
    /// let fit = GradientDescent::new().fit_observed(&problem, &|p: &Progress| {
    ///     if let Some(loss) = p.loss {
    ///         losses.lock().expect("no observer panicked").push(loss);
    ///     }
    ///     if p.iteration == Some(3) { Control::Stop } else { Control::Continue }
    /// })?;
    /// let report = fit.report.iterations.as_ref().expect("iterative solver");
    /// assert!(report.stopped_by_observer && report.iterations == 3);
    /// assert_eq!(losses.lock().expect("no observer panicked").len(), 4);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] for a negative or non-finite
    /// tolerance or penalty, or a step that is not finite and positive;
    /// [`crate::Error::ColumnCountMismatch`] or [`crate::Error::NonFinite`]
    /// for a bad starting model; [`crate::Error::Diverged`] (iteration, step
    /// and loss) when the loss becomes non-finite or grows past `10^4` times
    /// its reference; [`crate::Error::NotConverged`] at the iteration limit
    /// when `fail_if_not_converged`; [`crate::Error::TooFewRows`] without a
    /// penalty and with fewer usable rows than parameters;
    /// [`crate::Error::Overflow`] for a coefficient, the residual sum of
    /// squares or a loss beyond the range of `f64`; [`crate::Error::Stopped`]
    /// when the observer stops a setup pass.
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
        let mut gamma = s.gamma;
        let mut eval = s.eval;
        let mut k = 0;
        let converged = loop {
            let verdict = tracker.observe(k, step, &eval)?;
            if verdict.converged || verdict.stop || k >= self.max_iterations {
                break verdict.converged;
            }
            for (g, d) in gamma.iter_mut().zip(&eval.grad) {
                *g -= step * d;
            }
            eval = s.objective.eval(&gamma);
            k += 1;
        };
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
                step,
                restarts: 0,
            },
        )
    }
}
