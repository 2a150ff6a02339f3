//! Classical inference from a finished fit state (standard errors, t
//! values, intervals, sigma, R², the overall F test, the log-likelihood),
//! with the public types of [`crate::Inference`].

use faer::{Mat, MatRef};

use super::{Core, CrossProductState, Frame, TriangleState};
use crate::error::{Error, Result};
use crate::inference::from_state::{from_factor, precheck, FactorParts};
use crate::inference::{norm, Inference, InferenceOptions, InferenceRefusal};
use crate::linalg::triangular;
use crate::solver::Fit;

impl Core {
    /// Checks the target index and what can be refused before a factor.
    pub(super) fn check_inference(&self, target: usize, options: &InferenceOptions) -> Result<()> {
        options.check()?;
        if target >= self.k {
            return Err(Error::InvalidParameter {
                name: "target",
                value: target as f64,
                reason: "beyond the state's targets",
            });
        }
        precheck(options, self.usable, self.p + usize::from(self.intercept))
    }

    /// Inference for target `t` from the design's factor `r` (frame
    /// units), the slopes `gamma` with `r gamma = Q^T t`, the residual and
    /// total norms and the state's fits.
    #[allow(clippy::too_many_arguments)]
    fn inference_from(
        &self,
        frame: &Frame,
        r: MatRef<'_, f64>,
        gamma: &[f64],
        [rnorm, tnorm]: [f64; 2],
        fits: &[Fit],
        t: usize,
        options: InferenceOptions,
        meat: Option<MatRef<'_, f64>>,
    ) -> Result<Inference> {
        let p = self.p;
        let fit = &fits[t];
        from_factor(
            FactorParts {
                r,
                gamma,
                beta: fit.model.coefficients().as_slice().unwrap_or(&[]),
                intercept_value: fit.model.intercept(),
                rnorm,
                tnorm,
                col_exps: &frame.exps[..p],
                target_exp: frame.exps[p + t],
                weight_exp: 2 * self.wexp,
                total_weight: self.weight,
                means: &self.means[..p],
                target_mean: self.means[p + t],
                usable_rows: self.usable,
                intercept: self.intercept,
                log_weights: self.log_weights,
                names: self
                    .names
                    .clone()
                    .unwrap_or_else(|| crate::model::default_names(p)),
                solver: fit.report.solver.clone(),
                meat,
            },
            options,
        )
    }
}

/// A rank-deficient finish becomes inference's refusal.
fn as_refusal(e: Error) -> Error {
    match e {
        Error::RankDeficient { rank, columns, .. } => Error::InferenceRefused {
            refusal: InferenceRefusal::RankDeficient { rank, columns },
        },
        other => other,
    }
}

impl TriangleState {
    /// Classical inference for target `target` (0-based) of the QR fit
    /// [`TriangleState::finish`](crate::FitState::finish) gives: standard errors, t values,
    /// p-values and intervals of every coefficient and the intercept,
    /// sigma, R² and adjusted R², the overall F test, the log-likelihood
    /// (see [`crate::inference`] for the conventions). The covariance
    /// `sigma^2 (R^T R)^-1` is formed through `R` in the state's scaled
    /// units, as [`Inference::with_options`] does from the rows; the
    /// numbers agree with it to rounding.
    ///
    /// [`Inference::diagnostics`] of the result refuses any problem (it
    /// needs the rows; see the state's second pass), while
    /// [`Inference::predict`] works.
    ///
    /// ```
    /// use leastline::{FitState, InferenceOptions, TriangleState};
    /// use ndarray::{array, s};
    ///
    /// // Daily output of an invented solar farm against cloud cover and
    /// // panel temperature, logged by two controllers.
    /// let x = array![[0.1, 21.0], [0.5, 19.0], [0.3, 25.0], [0.9, 18.0],
    ///                [0.2, 23.0], [0.7, 20.0], [0.4, 22.0], [0.6, 24.0]];
    /// let y = array![9.7, 7.1, 8.0, 3.9, 8.8, 5.3, 7.6, 5.9];
    /// let mut state = TriangleState::new(2, 1, true)?;
    /// state.absorb_target(x.slice(s![..4, ..]), y.slice(s![..4]), None)?;
    /// state.absorb_target(x.slice(s![4.., ..]), y.slice(s![4..]), None)?;
    /// let inference = state.inference(0, InferenceOptions::new())?;
    /// let cloud = &inference.coefficients[0];
    /// assert!(cloud.lower < cloud.value && cloud.value < cloud.upper);
    /// assert_eq!(inference.residual_df, 5);
    /// println!("{inference}");
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a level outside `(0, 1)` or a target
    /// beyond the state's; [`Error::InferenceRefused`] for a sandwich
    /// covariance ([`InferenceRefusal::NeedsRows`]), no residual degrees of
    /// freedom, or a rank-deficient design; the errors of
    /// [`TriangleState::finish_with`] (no rows, overflow).
    pub fn inference(&self, target: usize, options: InferenceOptions) -> Result<Inference> {
        self.core.check_inference(target, &options)?;
        self.inference_with(target, options, None)
    }

    /// [`TriangleState::inference`] with the middle matrix of a sandwich
    /// covariance that a second pass formed (see
    /// [`crate::inference::from_state::FactorParts::meat`]).
    pub(crate) fn inference_with(
        &self,
        target: usize,
        options: InferenceOptions,
        meat: Option<MatRef<'_, f64>>,
    ) -> Result<Inference> {
        let fits = self.finish_with(None).map_err(as_refusal)?;
        let factor = self.design_factor(&[target])?;
        factor.inference(&self.core, &fits, target, options, meat)
    }

    /// The design's factor `R11` and the slopes and norms of `targets`,
    /// in the frame's units, after the rank checks of the finish.
    pub(super) fn design_factor(&self, targets: &[usize]) -> Result<DesignFactor> {
        let (frame, rf, _) = self.factor(None).map_err(as_refusal)?;
        let p = self.core.p;
        let r = Mat::<f64>::from_fn(p, p, |i, j| rf[(i, j)]);
        let solves = targets
            .iter()
            .map(|&t| {
                let c = p + t;
                let mut gamma: Vec<f64> = (0..p).map(|i| rf[(i, c)]).collect();
                triangular::solve_upper(r.as_ref(), &mut gamma);
                TargetSolve {
                    target: t,
                    gamma,
                    rnorm: norm((p..=c).map(|i| rf[(i, c)])),
                    tnorm: norm((0..=c).map(|i| rf[(i, c)])),
                }
            })
            .collect();
        Ok(DesignFactor {
            frame,
            r,
            targets: solves,
        })
    }
}

impl CrossProductState {
    /// Classical inference for target `target` (0-based) of the Cholesky
    /// fit [`CrossProductState::finish`](crate::FitState::finish) gives, as
    /// [`TriangleState::inference`]: `(R^T R)^-1` is formed through the
    /// Cholesky factor `R = L^T` of the design's cross products (the
    /// accuracy of the normal equations; refused, as the finish, when too
    /// few digits would survive).
    ///
    /// ```
    /// use leastline::{CrossProductState, FitState, InferenceOptions};
    /// use ndarray::array;
    ///
    /// // Queue length at an invented ferry terminal against the hour's
    /// // bookings.
    /// let x = array![[12.0], [30.0], [22.0], [41.0], [8.0], [35.0]];
    /// let y = array![5.1, 11.8, 9.2, 16.5, 3.4, 14.1];
    /// let mut state = CrossProductState::new(1, 1, true)?;
    /// state.absorb_target(x.view(), y.view(), None)?;
    /// let inference = state.inference(0, InferenceOptions::new().with_level(0.9))?;
    /// assert!(inference.goodness.r_squared > 0.9);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// As [`TriangleState::inference`], and those of
    /// [`CrossProductState::finish_with`] ([`Error::IllConditioned`] among
    /// them).
    pub fn inference(&self, target: usize, options: InferenceOptions) -> Result<Inference> {
        self.core.check_inference(target, &options)?;
        self.inference_with(target, options, None)
    }

    /// [`CrossProductState::inference`] with the middle matrix of a
    /// sandwich covariance that a second pass formed.
    pub(crate) fn inference_with(
        &self,
        target: usize,
        options: InferenceOptions,
        meat: Option<MatRef<'_, f64>>,
    ) -> Result<Inference> {
        let fits = self.finish_with(None, None).map_err(as_refusal)?;
        let factor = self.design_factor(&[target])?;
        factor.inference(&self.core, &fits, target, options, meat)
    }

    /// The factor `R = L^T` of the design's cross products and the slopes
    /// and norms of `targets`, in the frame's units, after the checks of
    /// the finish.
    pub(super) fn design_factor(&self, targets: &[usize]) -> Result<DesignFactor> {
        let (frame, cf, l, _) = self.factor(None, None).map_err(as_refusal)?;
        let p = self.core.p;
        let r = Mat::<f64>::from_fn(p, p, |i, j| l[(j, i)]);
        let solves = targets
            .iter()
            .map(|&t| {
                let c = p + t;
                let mut qty: Vec<f64> = (0..p).map(|i| cf[(i, c)]).collect();
                triangular::solve_lower(l.as_ref(), &mut qty);
                let mut acc = crate::scaled::Neumaier::default();
                acc.add(cf[(c, c)]);
                for v in &qty {
                    acc.add(-v * v);
                }
                let rnorm = acc.value().max(0.0).sqrt();
                let tnorm = cf[(c, c)].max(0.0).sqrt();
                let mut gamma = qty;
                triangular::solve_upper(r.as_ref(), &mut gamma);
                TargetSolve {
                    target: t,
                    gamma,
                    rnorm,
                    tnorm,
                }
            })
            .collect();
        Ok(DesignFactor {
            frame,
            r,
            targets: solves,
        })
    }
}

/// What inference and the second pass take from a finished state: the
/// frame, the `p x p` upper-triangular factor of the centered, weighted
/// design (the triangle's `R11`, or `L^T` of the cross products'
/// Cholesky factor) and, for each target asked for, its solve.
pub(super) struct DesignFactor {
    pub frame: Frame,
    pub r: Mat<f64>,
    pub targets: Vec<TargetSolve>,
}

/// One target's slopes (`R gamma = Q^T t`) and residual and total norms,
/// in the frame's units.
pub(super) struct TargetSolve {
    pub target: usize,
    pub gamma: Vec<f64>,
    pub rnorm: f64,
    pub tnorm: f64,
}

impl DesignFactor {
    /// The inference of `target` (which must be among the factor's
    /// targets) from the state's `fits`.
    fn inference(
        &self,
        core: &Core,
        fits: &[Fit],
        target: usize,
        options: InferenceOptions,
        meat: Option<MatRef<'_, f64>>,
    ) -> Result<Inference> {
        let solve =
            self.targets
                .iter()
                .find(|s| s.target == target)
                .ok_or(Error::InvalidParameter {
                    name: "target",
                    value: target as f64,
                    reason: "beyond the state's targets",
                })?;
        core.inference_from(
            &self.frame,
            self.r.as_ref(),
            &solve.gamma,
            [solve.rnorm, solve.tnorm],
            fits,
            target,
            options,
            meat,
        )
    }
}
