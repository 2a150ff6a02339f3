use faer::Mat;
use ndarray::Array1;

use crate::error::{Error, Result};
use crate::model::LinearModel;
use crate::observe::{Observer, Stage, Watch};
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::scaled::ldexp;
use crate::solver::{
    assemble, caller_rss, check_tolerance, finish_with_rss, Fit, IterationReport, Origin, Solver,
};
use crate::state::TriangleState;

use super::refine::{refine, Refinement};

/// Householder QR of the centered design: the default solver.
///
/// Factors `Z = Q R`, where `Z` is the design centered by its weighted
/// means, rows weighted by `sqrt(w)` and columns scaled by exact powers of
/// two, with the target appended as a last column; then solves `R b = Q^T y`
/// by back substitution. `Q` is never formed. Row blocks are factored in
/// parallel and their triangles combined (TSQR), so the extra memory is one
/// block per group plus the small triangles, never a copy of the design.
///
/// Keeps the condition number of the design (the normal equations square
/// it): the accurate choice for general use.
///
/// It is the in-memory face of [`crate::TriangleState`]: the rows are
/// reduced into that state in one parallel pass and finished as the state
/// finishes. The residual sum of squares is the squared norm of the
/// triangle's last column below the design's rows (the target's distance
/// to the column space), so the design is read once.
///
/// **Rank:** column `j` is reported dependent when `|R_jj|` is at most
/// `rank_tolerance` times an upper bound of the raw column's weighted norm
/// (`sqrt(sum w) * max|x_j|`), or when its centered values are at most
/// `rank_tolerance * max|x_j|` (a constant column beside the intercept).
/// The default tolerance is `max(usable rows, columns) * f64::EPSILON`.
///
/// **Refinement (opt-in):** with [`Qr::with_refinement`] (or [`Qr::refined`])
/// the solution is refined iteratively with residuals computed in
/// double-double arithmetic from the original data, the intercept
/// included, until it is the least-squares solution of the data as given
/// to nearly full double precision; see [`Refinement`] for the method and
/// its cost. The report's `iterations` then holds the number of steps,
/// whether the tolerance was met, the final loss `RSS / (2 sum w)`, the
/// relative gradient `max_j |a_j^T W e| / (|W^(1/2) a_j| |W^(1/2) (y - ybar)|)`
/// over the centered columns `a_j` and the constant (0 at the exact
/// solution; evaluated at the start of the last step) as `gradient_norm`, and `sum w e^2 / (2 sum w)` of the residual estimate at
/// the start of each step as `loss_history`. The residual sum of squares in the
/// report is then computed from extended-precision residuals of the
/// returned coefficients.
///
/// ```
/// use leastline::{Problem, Qr, Solver};
/// use ndarray::array;
///
/// let x = array![[0.0], [1.0], [2.0], [3.0]];
/// let y = array![1.0, 3.0, 5.0, 7.0];
/// let fit = Qr::new().fit(&Problem::new(x.view(), y.view())?)?;
/// assert!((fit.model.coefficients()[0] - 2.0).abs() < 1e-14);
/// assert!((fit.model.intercept() - 1.0).abs() < 1e-14);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, Default, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Qr {
    /// Relative rank tolerance; `None` uses `max(rows, columns) * eps`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) rank_tolerance: Option<f64>,
    /// Iterative refinement in extended precision; `None` (default) for
    /// plain QR.
    pub(crate) refinement: Option<Refinement>,
}

checked_settings!(Qr {
    #[serde(with = "crate::serde_float::option_float")]
    rank_tolerance: Option<f64>,
    refinement: Option<Refinement>,
});

impl Qr {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if let Some(t) = self.rank_tolerance {
            check_tolerance("rank_tolerance", t)?;
        }
        if let Some(r) = &self.refinement {
            r.check()?;
        }
        Ok(())
    }
}

impl Qr {
    /// Qr at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Relative rank tolerance; `None` uses `max(rows, columns) * eps`.
        with_rank_tolerance / rank_tolerance: optional f64
    }

    crate::settings::setting! {
        /// Iterative refinement in extended precision; `None` (default) for
        /// plain QR.
        with_refinement / refinement: optional Refinement
    }
}

impl Qr {
    /// QR with iterative refinement at its default settings: the most
    /// accurate solver of the crate (see [`Refinement`]).
    ///
    /// ```
    /// use leastline::{Problem, Qr, Solver};
    /// use ndarray::array;
    ///
    /// // A quadratic calibration curve of a pressure gauge.
    /// let x = array![[1.0, 1.0], [2.0, 4.0], [3.0, 9.0], [4.0, 16.0], [5.0, 25.0]];
    /// let y = array![2.05, 2.98, 4.11, 5.02, 5.94];
    /// let fit = Qr::refined().fit(&Problem::new(x.view(), y.view())?)?;
    /// let steps = fit.report.iterations.as_ref().map_or(0, |it| it.iterations);
    /// assert!(steps >= 1);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    pub fn refined() -> Self {
        Qr {
            refinement: Some(Refinement::new()),
            ..Qr::new()
        }
    }
}

impl Solver for Qr {
    /// `"qr"`, or `"qr-refined"` when refinement is on.
    fn name(&self) -> &str {
        if self.refinement.is_some() {
            "qr-refined"
        } else {
            "qr"
        }
    }

    /// # Errors
    /// [`Error::TooFewRows`]; [`Error::RankDeficient`] naming the dependent
    /// columns; [`Error::InvalidParameter`] for a bad tolerance;
    /// [`Error::Overflow`] if a coefficient is not representable. With
    /// refinement, [`Error::InvalidParameter`] for a bad refinement
    /// tolerance.
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        problem.require_determined()?;
        let tolerance = match self.rank_tolerance {
            Some(t) => check_tolerance("rank_tolerance", t)?,
            None => problem.default_rank_tolerance(),
        };
        let p = problem.columns();
        let scaling = Scaling::new(problem, tolerance);
        watch.begin(Stage::Factor, problem.rows());
        // The one path: the problem's rows reduced into a triangle state
        // (in parallel), finished as a state finishes.
        let state = TriangleState::of_problem(problem, &scaling, &watch)?;
        let (frame, rf, condition) = state.factor(Some(tolerance))?;
        let solved = state.solve(&frame, &rf, condition, 0);
        let Some(settings) = &self.refinement else {
            // The residual sum of squares is the triangle's: no pass over
            // the rows.
            return assemble(&Origin::of(problem), "qr", Some("qr"), solved);
        };
        let r11: Mat<f64> = rf.as_ref().submatrix(0, 0, p, p).to_owned();
        let refined = refine(
            problem,
            &scaling,
            &r11,
            condition,
            settings,
            solved.intercept,
            solved.beta,
            &watch,
        )?;
        if !refined.intercept.is_finite() {
            return Err(Error::Overflow { what: "intercept" });
        }
        // The residual sum of squares from the extended-precision residuals
        // of the returned coefficients.
        let rss = caller_rss(problem, scaling.target_exp, refined.rss_scaled)?;
        let mut fit = finish_with_rss(
            problem,
            self.name(),
            refined.beta.clone(),
            Some(p),
            Some(condition),
            rss,
            0.0,
        )?;
        fit.model = LinearModel::fitted(
            problem.names(),
            Array1::from(refined.beta),
            refined.intercept,
        );
        let loss_exp = 2 * scaling.target_exp;
        let losses: Vec<f64> = refined.losses.iter().map(|&l| ldexp(l, loss_exp)).collect();
        // The crate's loss: the weighted mean squared residual.
        let final_loss = ldexp(refined.rss_scaled / problem.stats.total_weight, loss_exp);
        if !final_loss.is_finite() || losses.iter().any(|l| !l.is_finite()) {
            return Err(Error::Overflow { what: "loss" });
        }
        fit.report.iterations = Some(IterationReport {
            iterations: refined.steps,
            converged: refined.converged,
            stopped_by_observer: false,
            final_loss,
            gradient_norm: refined.gradient,
            step: 1.0,
            loss_history: losses,
            passes: refined.passes,
            restarts: 0,
        });
        Ok(fit)
    }
}
