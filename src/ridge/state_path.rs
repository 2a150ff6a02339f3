//! The ridge penalty path from a triangle state: the spectrum of the
//! design's part of `R`, scored at any penalty without the rows.

use faer::Mat;

use super::path::{column_spectrum, default_grid, Spectrum};
use super::selection::{penalty_curve, CurveUnits};
use super::{Criterion, PenaltyCurve};
use crate::error::{Error, Result};
use crate::penalty::{check_penalty, PenaltyMap};
use crate::scaled::ldexp;
use crate::solver::Fit;
use crate::state::triangle::{residual_squares, total_squares};
use crate::state::{Core, Frame, TriangleState};

/// Ridge fits and penalty scores for one target of a [`TriangleState`],
/// for any number of penalties, from one SVD of the state's triangle.
///
/// The state's `R` of the centered, weighted rows `[X y]` gives
/// `R11^T R11 = Z^T Z` (the design's cross products) and, for the target's
/// column, `r12` (its coordinates on the columns) and the squared residual
/// `rho^2` of the least-squares fit (the trailing part of the column).
/// With the SVD `R11 = U S V^T` (in the penalty's coordinates, as
/// [`crate::ridge::RidgePath`] maps them) and `z = U^T r12`:
///
/// ```text
/// RSS(lambda) = rho^2 + sum_k (lambda / (s_k^2 + lambda))^2 z_k^2
/// df(lambda)  = sum_k s_k^2 / (s_k^2 + lambda)   (+ 1 for the intercept)
/// b(lambda)   = V diag(s_k / (s_k^2 + lambda)) z
/// ```
///
/// and generalized cross-validation from these, as in
/// [`PenaltyCurve`]: everything [`crate::ridge::RidgePath`] gives but the
/// leave-one-out error, which needs every row's leverage and is refused
/// ([`Error::CriterionNeedsRows`]). Building costs `O(p^3)`, each penalty
/// `O(p)` for its scores and `O(p^2)` for its coefficients; nothing reads
/// the rows again.
///
/// ```
/// use leastline::ridge::Criterion;
/// use leastline::{FitState, TriangleState};
/// use ndarray::{s, Array1, Array2};
///
/// // Nightly energy use of an invented cold store against four door and
/// // compressor counters that move together, logged by three gateways.
/// let x = Array2::from_shape_fn((90, 4), |(i, j)| {
///     let t = i as f64 / 9.0;
///     t.cos() + 0.02 * ((i * 5 + j * 11) % 7) as f64 + 0.3 * j as f64 * t
/// });
/// let y: Array1<f64> = x.rows().into_iter().enumerate()
///     .map(|(i, r)| 4.0 * r[0] - r[2] + 0.05 * ((i * 13) % 9) as f64)
///     .collect();
/// let mut state = TriangleState::new(4, 1, true)?;
/// for b in 0..3 {
///     let rows = s![b * 30..(b + 1) * 30, ..];
///     state.absorb_target(x.slice(rows), y.slice(s![b * 30..(b + 1) * 30]), None)?;
/// }
/// let path = state.ridge_path(0, true)?;
/// let curve = path.curve(&path.default_grid(30)?, Criterion::GeneralizedCrossValidation)?;
/// let fit = path.fit(curve.best_penalty)?;
/// assert_eq!(fit.report.penalty, curve.best_penalty);
/// assert!(path.curve(&[1.0], Criterion::LeaveOneOut).is_err());
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug)]
pub struct StateRidgePath {
    core: Core,
    frame: Frame,
    target: usize,
    map: PenaltyMap,
    spectrum: Spectrum,
    /// 2-norm condition number of the design's triangle (frame units).
    condition: f64,
    /// The target's centered total sum of squares (frame units).
    total: (f64, i32),
}

impl TriangleState {
    /// The ridge path of target `target` (0-based): see [`StateRidgePath`].
    /// With `standardize`, the penalty applies to standardised
    /// coefficients, as in [`crate::Ridge::standardize`] (the column
    /// variances come from the state). Columns constant beside the
    /// intercept take no part and get coefficient 0. Singular values below
    /// `max(usable rows, columns) * eps` times the largest count as zero.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a target beyond the state's;
    /// [`Error::NoRows`], [`Error::AllWeightsZero`];
    /// [`Error::SpreadOverflow`]; [`Error::NoConvergence`] if the SVD fails.
    pub fn ridge_path(&self, target: usize, standardize: bool) -> Result<StateRidgePath> {
        let core = &self.core;
        if target >= core.k {
            return Err(Error::InvalidParameter {
                name: "target",
                value: target as f64,
                reason: "beyond the state's targets",
            });
        }
        let tol = core.default_tolerance();
        let frame = core.frame(tol, false)?;
        let p = core.p;
        let c = p + target;
        let rf = self.framed(&frame);
        let norms: Option<Vec<f64>> = standardize.then(|| {
            (0..p)
                .map(|j| (0..=j).map(|i| rf[(i, j)] * rf[(i, j)]).sum())
                .collect()
        });
        let map = PenaltyMap::from_parts(
            &frame.constant[..p],
            &frame.exps[..p],
            2 * core.wexp,
            core.weight,
            norms.as_deref(),
        );
        let rh = Mat::<f64>::from_fn(p, p, |i, j| rf[(i, j)] * map.factors[j]);
        let r12: Vec<f64> = (0..p).map(|i| rf[(i, c)]).collect();
        let (tail, e) = residual_squares(&rf, p, c);
        let (spectrum, condition) = column_spectrum(
            rh.as_ref(),
            &r12,
            ldexp(tail, e),
            &map.factors,
            tol,
            "state-triangle",
        )?;
        Ok(StateRidgePath {
            core: core.clone(),
            total: total_squares(&rf, c),
            frame,
            target,
            map,
            spectrum,
            condition,
        })
    }
}

impl StateRidgePath {
    /// The singular values of the weighted, centered design in the
    /// penalty's units, non-increasing, as
    /// [`crate::ridge::RidgePath::singular_values`] (one per column).
    pub fn singular_values(&self) -> Vec<f64> {
        self.spectrum.caller_singular_values(&self.map)
    }

    /// Numerical rank of the design (singular values treated as non-zero).
    pub fn rank(&self) -> usize {
        self.spectrum.kept
    }

    /// Effective degrees of freedom at `penalty` (intercept counted as one).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty.
    pub fn effective_df(&self, penalty: f64) -> Result<f64> {
        let lambda = check_penalty("penalty", penalty)?;
        Ok(self
            .spectrum
            .df(self.map.scaled(lambda), self.core.intercept))
    }

    /// The ridge fit of the target at `penalty`, with its residual sum of
    /// squares and R² from the spectrum. The report names the solver
    /// `"ridge-state"` and the factorisation `"svd"`, and carries the rank
    /// of the design; fingerprint 0, as every state fit.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty;
    /// [`Error::Overflow`] if a result is not representable.
    pub fn fit(&self, penalty: f64) -> Result<Fit> {
        let lambda = check_penalty("penalty", penalty)?;
        let mu = self.map.scaled(lambda);
        let (core, frame) = (&self.core, &self.frame);
        let (p, t) = (core.p, self.target);
        let gamma = self
            .spectrum
            .column_coefficients(mu, p)
            .unwrap_or_else(|| vec![0.0; p]);
        let beta = self
            .map
            .to_caller_parts(&frame.exps[..p], frame.exps[p + t], &gamma);
        core.fit(
            frame,
            t,
            ("ridge-state", "svd"),
            beta,
            Some(self.spectrum.kept),
            Some(self.condition),
            (self.spectrum.rss(mu), 0),
            self.total,
            lambda,
        )
    }

    /// A default grid of `count` penalties, by the rule of
    /// [`crate::ridge::RidgePath::default_grid`].
    ///
    /// # Errors
    /// As [`crate::ridge::RidgePath::default_grid`].
    pub fn default_grid(&self, count: usize) -> Result<Vec<f64>> {
        default_grid(&self.singular_values(), self.spectrum.kept, count)
    }

    /// Scores every penalty of `grid` (caller's units): effective degrees
    /// of freedom, residual sum of squares and generalized
    /// cross-validation, with the formulas of [`PenaltyCurve`], and picks
    /// the minimiser of `criterion`.
    ///
    /// # Errors
    /// [`Error::CriterionNeedsRows`] for [`Criterion::LeaveOneOut`] (it
    /// needs every row's leverage); [`Error::InvalidParameter`] for an empty
    /// grid; [`Error::InvalidGridPenalty`] for a negative or non-finite
    /// entry; [`Error::NoFiniteScore`] when no penalty has a finite score.
    pub fn curve(&self, grid: &[f64], criterion: Criterion) -> Result<PenaltyCurve> {
        let units = CurveUnits {
            total_weight: self.core.weight,
            usable_rows: self.core.usable,
            intercept: self.core.intercept,
            target_exp: self.frame.exps[self.core.p + self.target],
            weight_exp: 2 * self.core.wexp,
        };
        penalty_curve(&self.spectrum, &self.map, &units, grid, criterion, None)
    }
}
