//! The second pass over a finished [`TriangleState`]'s rows: per-row
//! leverage, studentized residuals, Cook's distance and leave-one-out
//! residuals block by block, and at the end the sandwich covariances.

use faer::Mat;
use ndarray::{Array1, ArrayView1, ArrayView2, Axis};

use super::{scaled_diff, Core, TriangleState};
use crate::error::{Error, Result};
use crate::inference::{
    norm, CovarianceKind, Inference, InferenceOptions, InferenceRefusal, LEVERAGE_ONE,
};
use crate::linalg::products::solve_upper_transposed;
use crate::linalg::triangular;
use crate::scaled::{exponent, ldexp, pow2};

/// Per-row diagnostics of one block of a [`SecondPass`], in the block's
/// order; entry `l` is row `first_row + l` of the whole stream. The
/// definitions are those of [`crate::Diagnostics`] (leverage of the
/// weighted design with its ones column, internally and externally
/// studentized residuals, Cook's distance, `None` where undefined), plus
/// the leave-one-out residual.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct BlockDiagnostics {
    /// Row of the whole stream of the block's first row.
    pub first_row: usize,
    /// Leverage (hat value) of every row (0 for rows of weight zero).
    pub leverage: Array1<f64>,
    /// Residuals `y_i - y_hat_i` in the caller's units (unweighted).
    pub residuals: Array1<f64>,
    /// Internally studentized residuals.
    pub studentized: Vec<Option<f64>>,
    /// Externally studentized (deleted) residuals.
    pub deleted_studentized: Vec<Option<f64>>,
    /// Cook's distances.
    pub cooks_distance: Vec<Option<f64>>,
    /// Leave-one-out residuals `e_i / (1 - h_i)` in the caller's units
    /// (unweighted): the target minus the prediction of the fit to every
    /// other row (an exact identity, no refit is run). A row of weight zero
    /// takes no part in the fit, so its value is its residual; `None` for a
    /// row of leverage 1 (to within `1e-10`).
    pub leave_one_out: Vec<Option<f64>>,
}

/// A second pass over the rows a [`TriangleState`] absorbed, for one
/// target: fed the same blocks again, in the same order, with the row
/// number of each block's first row in the whole stream, it gives each
/// block's [`BlockDiagnostics`] as it goes, and at the end
/// ([`SecondPass::inference`]) the inference of
/// [`TriangleState::inference`] with any covariance of
/// [`CovarianceKind`], the sandwich ones included.
///
/// Memory: the state's triangle, three `q x q` middle matrices (`q` the
/// parameters, one per leverage power of the sandwich kinds) and the
/// block's results; never the rows seen before.
///
/// The numbers are those of [`Inference::diagnostics`] and
/// [`Inference::with_options`] on the whole problem, to rounding.
#[derive(Debug, Clone)]
pub struct SecondPass {
    state: TriangleState,
    /// The state's core, `rows` counting the rows seen (block checks
    /// number rows from it).
    seen: Core,
    target: usize,
    /// The design's factor in frame units (`p x p`).
    r: Mat<f64>,
    /// Slopes in frame units.
    gamma: Vec<f64>,
    col_exps: Vec<i32>,
    target_exp: i32,
    /// `1 / sqrt(W)` (frame units) with an intercept, else 0.
    inv_sqrt_w: f64,
    /// sigma in frame units.
    sigma: f64,
    /// `2^e`, the power of two at or below the residual norm.
    residual_scale: f64,
    /// Middle matrices for leverage powers 0, 1 and 2 (lower halves).
    meat: [Mat<f64>; 3],
    /// Row and value of the largest leverage.
    max_leverage: Option<(usize, f64)>,
    usable_seen: usize,
}

impl TriangleState {
    /// Starts the second pass over this state's rows for target `target`
    /// (0-based); see [`SecondPass`].
    ///
    /// ```
    /// use leastline::inference::{CovarianceKind, InferenceOptions};
    /// use leastline::{FitState, TriangleState};
    /// use ndarray::{array, s};
    ///
    /// // Minutes a bakery's invented oven takes to heat against the
    /// // kitchen's morning temperature, logged in two batches.
    /// let x = array![[4.0], [9.0], [12.0], [7.0], [15.0], [2.0], [10.0], [6.0]];
    /// let y = array![31.0, 26.5, 24.0, 28.2, 21.9, 33.1, 25.8, 29.0];
    /// let mut state = TriangleState::new(1, 1, true)?;
    /// state.absorb_target(x.slice(s![..5, ..]), y.slice(s![..5]), None)?;
    /// state.absorb_target(x.slice(s![5.., ..]), y.slice(s![5..]), None)?;
    ///
    /// let mut pass = state.second_pass(0)?;
    /// let first = pass.absorb_target(0, x.slice(s![..5, ..]), y.slice(s![..5]), None)?;
    /// let second = pass.absorb_target(5, x.slice(s![5.., ..]), y.slice(s![5..]), None)?;
    /// let leverage = first.leverage.sum() + second.leverage.sum();
    /// assert!((leverage - 2.0).abs() < 1e-12);
    /// let robust = pass.inference(InferenceOptions::new().with_covariance(CovarianceKind::Hc3))?;
    /// assert!(robust.coefficients[0].std_error > 0.0);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a target beyond the state's;
    /// [`Error::InferenceRefused`] for no residual degrees of freedom or a
    /// rank-deficient design; the errors of [`TriangleState::finish_with`].
    pub fn second_pass(&self, target: usize) -> Result<SecondPass> {
        let core = &self.core;
        core.check_inference(target, &InferenceOptions::new())?;
        let refusal = |e: Error| match e {
            Error::RankDeficient { rank, columns, .. } => Error::InferenceRefused {
                refusal: InferenceRefusal::RankDeficient { rank, columns },
            },
            other => other,
        };
        let (frame, rf, _) = self.factor(None).map_err(refusal)?;
        let p = core.p;
        let q = p + usize::from(core.intercept);
        let c = p + target;
        let r = Mat::<f64>::from_fn(p, p, |i, j| rf[(i, j)]);
        let mut gamma: Vec<f64> = (0..p).map(|i| rf[(i, c)]).collect();
        triangular::solve_upper(r.as_ref(), &mut gamma);
        let rnorm = norm((p..=c).map(|i| rf[(i, c)]));
        let df = (core.usable - q) as f64;
        crate::alloc::reserve_matrices("second-pass middle matrices", q, q, 3)?;
        let mut seen = core.clone();
        seen.rows = 0;
        Ok(SecondPass {
            state: self.clone(),
            seen,
            target,
            r,
            gamma,
            col_exps: frame.exps[..p].to_vec(),
            target_exp: frame.exps[c],
            inv_sqrt_w: if core.intercept {
                1.0 / core.weight.sqrt()
            } else {
                0.0
            },
            sigma: rnorm / df.sqrt(),
            residual_scale: pow2(exponent(rnorm.max(f64::MIN_POSITIVE)).max(-1022)),
            meat: [Mat::zeros(q, q), Mat::zeros(q, q), Mat::zeros(q, q)],
            max_leverage: None,
            usable_seen: 0,
        })
    }
}

impl SecondPass {
    /// [`SecondPass::absorb`] for a state of one target, `y` a vector.
    ///
    /// # Errors
    /// As [`SecondPass::absorb`].
    pub fn absorb_target(
        &mut self,
        first_row: usize,
        x: ArrayView2<'_, f64>,
        y: ArrayView1<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<BlockDiagnostics> {
        self.absorb(first_row, x, y.insert_axis(Axis(1)), w)
    }

    /// Takes the next block of the rows the state absorbed (design `x`,
    /// every target `y`, the same weights), whose first row is row
    /// `first_row` of the whole stream, and returns its diagnostics.
    ///
    /// # Errors
    /// [`Error::PassMismatch`] when `first_row` is not the next row
    /// expected or the block runs past the state's rows; the shape and
    /// value errors of [`crate::FitState::absorb`] naming the row in the
    /// whole stream; [`Error::OverflowAt`] for a residual beyond the range
    /// of `f64`. On error the pass is unchanged.
    pub fn absorb(
        &mut self,
        first_row: usize,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<BlockDiagnostics> {
        let core = &self.state.core;
        if first_row != self.seen.rows {
            return Err(Error::PassMismatch {
                what: "first row of the block",
                expected: self.seen.rows,
                found: first_row,
            });
        }
        self.seen.check_block(&x, &y, w.as_ref())?;
        let n = x.nrows();
        let end = first_row.saturating_add(n);
        if end > core.rows {
            return Err(Error::PassMismatch {
                what: "rows",
                expected: core.rows,
                found: end,
            });
        }
        let (p, t) = (core.p, self.target);
        let q = p + usize::from(core.intercept);
        let wexp2 = 2 * core.wexp;
        let ym = core.means[p + t];
        let ey = self.target_exp;
        let sigma = self.sigma;
        let df = (core.usable - q) as f64;
        let kf = q as f64;
        let mut out = BlockDiagnostics {
            first_row,
            leverage: Array1::zeros(n),
            residuals: Array1::zeros(n),
            studentized: crate::alloc::with_capacity("studentized residuals", n)?,
            deleted_studentized: crate::alloc::with_capacity("deleted residuals", n)?,
            cooks_distance: crate::alloc::with_capacity("Cook's distances", n)?,
            leave_one_out: crate::alloc::with_capacity("leave-one-out residuals", n)?,
        };
        let mut meat = self.meat.clone();
        let mut max_leverage = self.max_leverage;
        let mut usable = 0;
        let mut z = vec![0.0; q];
        for i in 0..n {
            let row = first_row + i;
            let wi = w.as_ref().map_or(1.0, |w| w[i]);
            let sw = ldexp(wi, -wexp2).sqrt();
            usable += usize::from(wi > 0.0);
            // Centered, scaled values; the residual in units of 2^ey.
            let mut fit = 0.0;
            for j in 0..p {
                let d = scaled_diff(x[(i, j)], core.means[j], self.col_exps[j]);
                fit += d * self.gamma[j];
                z[j] = sw * d;
            }
            let u = scaled_diff(y[(i, t)], ym, ey) - fit;
            solve_upper_transposed(self.r.as_ref(), &mut z[..p]);
            if core.intercept {
                z[p] = sw * self.inv_sqrt_w;
            }
            let h: f64 = z.iter().map(|v| v * v).sum();
            if max_leverage.is_none_or(|(_, m)| h > m) {
                max_leverage = Some((row, h));
            }
            let residual = ldexp(u, ey);
            if !residual.is_finite() {
                return Err(Error::OverflowAt {
                    what: "residual",
                    row,
                });
            }
            out.leverage[i] = h;
            out.residuals[i] = residual;
            let gap = 1.0 - h;
            out.leave_one_out
                .push((gap > LEVERAGE_ONE).then(|| residual / gap));
            let e_w = sw * u;
            // Middle matrices: (e / c)^2 (1 - h)^-power z z^T.
            let e = e_w / self.residual_scale;
            for (power, m) in meat.iter_mut().enumerate() {
                let c = match power {
                    0 => e,
                    _ if gap <= LEVERAGE_ONE => 0.0,
                    1 => e / gap.sqrt(),
                    _ => e / gap,
                };
                if c == 0.0 {
                    continue;
                }
                for b in 0..q {
                    let zb = c * z[b];
                    for a in b..q {
                        m[(a, b)] += (c * z[a]) * zb;
                    }
                }
            }
            if wi <= 0.0 || gap <= LEVERAGE_ONE || sigma == 0.0 {
                out.studentized.push(None);
                out.deleted_studentized.push(None);
                out.cooks_distance.push(None);
                continue;
            }
            let e = e_w / sigma;
            let r_i = e / gap.sqrt();
            out.studentized.push(Some(r_i));
            out.cooks_distance.push(Some(r_i * r_i * h / (kf * gap)));
            let s2_i = if df >= 2.0 {
                (df - e * e / gap) / (df - 1.0)
            } else {
                0.0
            };
            out.deleted_studentized
                .push((s2_i > 0.0).then(|| e / (s2_i.sqrt() * gap.sqrt())));
        }
        self.meat = meat;
        self.max_leverage = max_leverage;
        self.usable_seen += usable;
        self.seen.rows = end;
        Ok(out)
    }

    /// Rows taken so far.
    pub fn rows_seen(&self) -> usize {
        self.seen.rows
    }

    /// The inference of the target with the covariance `options` asks for
    /// (any [`CovarianceKind`]; the sandwich kinds from the rows this pass
    /// has seen), once every row the state absorbed has been seen: the
    /// numbers of [`Inference::with_options`] on the whole problem.
    ///
    /// # Errors
    /// [`Error::PassMismatch`] when fewer rows, or another count of rows
    /// with positive weight, were seen than the state absorbed;
    /// [`Error::InvalidParameter`] for a level outside `(0, 1)`;
    /// [`Error::InferenceRefused`] with [`InferenceRefusal::LeverageOne`]
    /// for HC2 or HC3 when a row has leverage 1; the errors of
    /// [`TriangleState::inference`].
    pub fn inference(&self, options: InferenceOptions) -> Result<Inference> {
        let core = &self.state.core;
        if self.seen.rows != core.rows {
            return Err(Error::PassMismatch {
                what: "rows",
                expected: core.rows,
                found: self.seen.rows,
            });
        }
        if self.usable_seen != core.usable {
            return Err(Error::PassMismatch {
                what: "rows with positive weight",
                expected: core.usable,
                found: self.usable_seen,
            });
        }
        options.check()?;
        let power = match options.covariance {
            CovarianceKind::Classical => {
                return self.state.inference(self.target, options);
            }
            CovarianceKind::Hc0 | CovarianceKind::Hc1 => 0,
            CovarianceKind::Hc2 => 1,
            CovarianceKind::Hc3 => 2,
        };
        if power > 0 {
            if let Some((row, leverage)) = self.max_leverage {
                if 1.0 - leverage <= LEVERAGE_ONE {
                    return Err(Error::InferenceRefused {
                        refusal: InferenceRefusal::LeverageOne { row, leverage },
                    });
                }
            }
        }
        let q = self.meat[0].nrows();
        let scale = if options.covariance == CovarianceKind::Hc1 {
            core.usable as f64 / (core.usable - q) as f64
        } else {
            1.0
        };
        let m = &self.meat[power];
        let full = Mat::<f64>::from_fn(q, q, |a, b| scale * m[(a.max(b), a.min(b))]);
        self.state
            .inference_with(self.target, options, Some(full.as_ref()))
    }
}
