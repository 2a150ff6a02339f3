//! The second pass over the rows a finished state absorbed: per-row
//! leverage, studentized residuals, Cook's distance and leave-one-out
//! residuals block by block, and at the end the sandwich covariances.
//!
//! Both kinds of state are served by one engine: it takes from the state
//! the `p x p` upper-triangular factor `R` of the centered, weighted design
//! in the state's frame (a [`TriangleState`]'s `R11`; for a
//! [`CrossProductState`], `L^T` of the Cholesky factor `L` of the design's
//! cross products, since `L L^T = R^T R`) and each target's slopes. A row
//! `x_i` of weight `w_i` then has the leverage `|z_i|^2` with
//! `z_i = R^-T sqrt(w_i) (x_i - m)` (and `1 / sqrt(W)` for the intercept),
//! shared by every target; residuals, studentized residuals, Cook's
//! distances, leave-one-out residuals and the middle matrices of the
//! sandwich covariances are per target.
//!
//! [`SecondPass`] serves one target ([`TriangleState::second_pass`],
//! [`CrossProductState::second_pass`]); [`ManyTargetsPass`] serves every
//! target of the state in one read of the rows
//! ([`TriangleState::second_pass_many`],
//! [`CrossProductState::second_pass_many`]). The numbers of a target are
//! the same, bit for bit, whichever pass serves it.

use faer::{Mat, MatRef};
use ndarray::{Array1, ArrayView1, ArrayView2, Axis};

use super::inference::DesignFactor;
use super::{scaled_diff, Core, CrossProductState, TriangleState};
use crate::error::{Error, Result};
use crate::inference::{
    CovarianceKind, Inference, InferenceOptions, InferenceRefusal, LEVERAGE_ONE,
};
use crate::linalg::products::solve_upper_transposed;
use crate::scaled::{exponent, ldexp, pow2};

/// Per-row diagnostics of one block of a [`SecondPass`] or
/// [`ManyTargetsPass`] for one target, in the block's order; entry `l` is
/// row `first_row + l` of the whole stream. The definitions are those of
/// [`crate::Diagnostics`] (leverage of the weighted design with its ones
/// column, internally and externally studentized residuals, Cook's
/// distance, `None` where undefined), plus the leave-one-out residual.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct BlockDiagnostics {
    /// Row of the whole stream of the block's first row.
    pub first_row: usize,
    /// The target (0-based, a column of the state's targets) these
    /// residuals belong to.
    pub target: usize,
    /// Leverage (hat value) of every row (0 for rows of weight zero); the
    /// same for every target.
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

/// The finished state a pass reads its factor from.
#[derive(Debug, Clone)]
enum Source {
    Triangle(TriangleState),
    Cross(CrossProductState),
}

impl Source {
    fn core(&self) -> &Core {
        match self {
            Source::Triangle(s) => &s.core,
            Source::Cross(s) => &s.core,
        }
    }

    fn design_factor(&self, targets: &[usize]) -> Result<DesignFactor> {
        match self {
            Source::Triangle(s) => s.design_factor(targets),
            Source::Cross(s) => s.design_factor(targets),
        }
    }

    fn inference_with(
        &self,
        target: usize,
        options: InferenceOptions,
        meat: Option<MatRef<'_, f64>>,
    ) -> Result<Inference> {
        match self {
            Source::Triangle(s) => s.inference_with(target, options, meat),
            Source::Cross(s) => s.inference_with(target, options, meat),
        }
    }
}

/// What the pass keeps for one target.
#[derive(Debug, Clone)]
struct TargetPart {
    target: usize,
    /// Slopes in frame units.
    gamma: Vec<f64>,
    target_exp: i32,
    /// sigma in frame units.
    sigma: f64,
    /// `2^e`, the power of two at or below the residual norm.
    residual_scale: f64,
    /// Middle matrices for leverage powers 0, 1 and 2 (lower halves).
    meat: [Mat<f64>; 3],
}

/// The engine both passes share.
#[derive(Debug, Clone)]
struct Engine {
    source: Source,
    /// The state's core, `rows` counting the rows seen (block checks
    /// number rows from it).
    seen: Core,
    /// The design's factor in frame units (`p x p`, upper triangular).
    r: Mat<f64>,
    col_exps: Vec<i32>,
    /// `1 / sqrt(W)` (frame units) with an intercept, else 0.
    inv_sqrt_w: f64,
    parts: Vec<TargetPart>,
    /// Row and value of the largest leverage.
    max_leverage: Option<(usize, f64)>,
    usable_seen: usize,
}

impl Engine {
    fn new(source: Source, targets: &[usize]) -> Result<Engine> {
        let core = source.core();
        for &t in targets {
            core.check_inference(t, &InferenceOptions::new())?;
        }
        let factor = source.design_factor(targets)?;
        let p = core.p;
        let q = p + usize::from(core.intercept);
        let df = (core.usable - q) as f64;
        let matrices = targets.len().saturating_mul(3);
        crate::alloc::reserve_matrices("second-pass middle matrices", q, q, matrices)?;
        let parts = factor
            .targets
            .into_iter()
            .map(|solve| TargetPart {
                target: solve.target,
                gamma: solve.gamma,
                target_exp: factor.frame.exps[p + solve.target],
                sigma: solve.rnorm / df.sqrt(),
                residual_scale: pow2(exponent(solve.rnorm.max(f64::MIN_POSITIVE)).max(-1022)),
                meat: [Mat::zeros(q, q), Mat::zeros(q, q), Mat::zeros(q, q)],
            })
            .collect();
        let mut seen = core.clone();
        seen.rows = 0;
        Ok(Engine {
            seen,
            r: factor.r,
            col_exps: factor.frame.exps[..p].to_vec(),
            inv_sqrt_w: if core.intercept {
                1.0 / core.weight.sqrt()
            } else {
                0.0
            },
            parts,
            max_leverage: None,
            usable_seen: 0,
            source,
        })
    }

    /// One block: the diagnostics of every target the engine serves, in
    /// the order of `parts`. On error the engine is unchanged.
    fn absorb(
        &mut self,
        first_row: usize,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<Vec<BlockDiagnostics>> {
        let core = self.source.core();
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
        let p = core.p;
        let q = p + usize::from(core.intercept);
        let wexp2 = 2 * core.wexp;
        let df = (core.usable - q) as f64;
        let kf = q as f64;
        let mut leverage = Array1::<f64>::zeros(n);
        let mut out = Vec::with_capacity(self.parts.len());
        for part in &self.parts {
            out.push(BlockDiagnostics {
                first_row,
                target: part.target,
                leverage: Array1::zeros(0),
                residuals: Array1::zeros(n),
                studentized: crate::alloc::with_capacity("studentized residuals", n)?,
                deleted_studentized: crate::alloc::with_capacity("deleted residuals", n)?,
                cooks_distance: crate::alloc::with_capacity("Cook's distances", n)?,
                leave_one_out: crate::alloc::with_capacity("leave-one-out residuals", n)?,
            });
        }
        let mut meats: Vec<[Mat<f64>; 3]> = self.parts.iter().map(|t| t.meat.clone()).collect();
        let mut max_leverage = self.max_leverage;
        let mut usable = 0;
        let mut d = vec![0.0; p];
        let mut z = vec![0.0; q];
        for i in 0..n {
            let row = first_row + i;
            let wi = w.as_ref().map_or(1.0, |w| w[i]);
            let sw = ldexp(wi, -wexp2).sqrt();
            usable += usize::from(wi > 0.0);
            // Centered, scaled design values; the leverage is shared.
            for j in 0..p {
                d[j] = scaled_diff(x[(i, j)], core.means[j], self.col_exps[j]);
                z[j] = sw * d[j];
            }
            solve_upper_transposed(self.r.as_ref(), &mut z[..p]);
            if core.intercept {
                z[p] = sw * self.inv_sqrt_w;
            }
            let h: f64 = z.iter().map(|v| v * v).sum();
            if max_leverage.is_none_or(|(_, m)| h > m) {
                max_leverage = Some((row, h));
            }
            leverage[i] = h;
            let gap = 1.0 - h;
            for ((part, meat), out) in self.parts.iter().zip(&mut meats).zip(&mut out) {
                let t = part.target;
                let ey = part.target_exp;
                let fit: f64 = d.iter().zip(&part.gamma).map(|(d, g)| d * g).sum();
                // The residual in units of 2^ey.
                let u = scaled_diff(y[(i, t)], core.means[p + t], ey) - fit;
                let residual = ldexp(u, ey);
                if !residual.is_finite() {
                    return Err(Error::OverflowAt {
                        what: "residual",
                        row,
                    });
                }
                out.residuals[i] = residual;
                out.leave_one_out
                    .push((gap > LEVERAGE_ONE).then(|| residual / gap));
                let e_w = sw * u;
                // Middle matrices: (e / c)^2 (1 - h)^-power z z^T.
                let e = e_w / part.residual_scale;
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
                let sigma = part.sigma;
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
        }
        for (part, meat) in self.parts.iter_mut().zip(meats) {
            part.meat = meat;
        }
        if let Some((last, rest)) = out.split_last_mut() {
            for o in rest {
                o.leverage = leverage.clone();
            }
            last.leverage = leverage;
        }
        self.max_leverage = max_leverage;
        self.usable_seen += usable;
        self.seen.rows = end;
        Ok(out)
    }

    /// The inference of `parts[index]` (see [`SecondPass::inference`]).
    fn inference(&self, index: usize, options: InferenceOptions) -> Result<Inference> {
        let core = self.source.core();
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
        let part = &self.parts[index];
        let power = match options.covariance {
            CovarianceKind::Classical => {
                return self.source.inference_with(part.target, options, None);
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
        let q = part.meat[0].nrows();
        let scale = if options.covariance == CovarianceKind::Hc1 {
            core.usable as f64 / (core.usable - q) as f64
        } else {
            1.0
        };
        let m = &part.meat[power];
        let full = Mat::<f64>::from_fn(q, q, |a, b| scale * m[(a.max(b), a.min(b))]);
        self.source
            .inference_with(part.target, options, Some(full.as_ref()))
    }
}

/// A second pass over the rows a finished state ([`TriangleState`] or
/// [`CrossProductState`]) absorbed, for one target: fed the same blocks
/// again, in the same order, with the row number of each block's first row
/// in the whole stream, it gives each block's [`BlockDiagnostics`] as it
/// goes, and at the end ([`SecondPass::inference`]) the inference of the
/// state's own `inference` with any covariance of [`CovarianceKind`], the
/// sandwich ones included. [`ManyTargetsPass`] serves every target at once.
///
/// Memory: the state, three `q x q` middle matrices (`q` the parameters,
/// one per leverage power of the sandwich kinds) and the block's results;
/// never the rows seen before.
///
/// The numbers are those of [`Inference::diagnostics`] and
/// [`Inference::with_options`] on the whole problem, to rounding (with the
/// accuracy of the normal equations for a cross-product state).
#[derive(Debug, Clone)]
pub struct SecondPass {
    engine: Engine,
}

/// A second pass over the rows a finished state absorbed that serves every
/// target of the state in one read of the rows: each block gives one
/// [`BlockDiagnostics`] per target (the leverage is computed once), and at
/// the end [`ManyTargetsPass::inference`] gives each target's inference
/// with any covariance. A target's numbers are those of a [`SecondPass`]
/// for it, bit for bit.
///
/// Memory: the state, `3 k` middle matrices of `q x q` (`k` targets, `q`
/// parameters) and the block's results.
///
/// ```
/// use leastline::inference::{CovarianceKind, InferenceOptions};
/// use leastline::{CrossProductState, FitState};
/// use ndarray::{array, s};
///
/// // An invented orchard's daily water use and fruit drop against the
/// // afternoon temperature, logged in two batches.
/// let x = array![[21.0], [25.5], [19.0], [28.0], [23.5], [30.0], [26.0]];
/// let ys = array![
///     [410.0, 3.1],
///     [455.0, 4.0],
///     [388.0, 2.2],
///     [497.0, 4.9],
///     [431.0, 3.0],
///     [520.0, 5.8],
///     [466.0, 4.1],
/// ];
/// let mut state = CrossProductState::new(1, 2, true)?;
/// state.absorb(x.slice(s![..4, ..]), ys.slice(s![..4, ..]), None)?;
/// state.absorb(x.slice(s![4.., ..]), ys.slice(s![4.., ..]), None)?;
///
/// let mut pass = state.second_pass_many()?;
/// let first = pass.absorb(0, x.slice(s![..3, ..]), ys.slice(s![..3, ..]), None)?;
/// let second = pass.absorb(3, x.slice(s![3.., ..]), ys.slice(s![3.., ..]), None)?;
/// assert_eq!((first.len(), first[1].target), (2, 1));
/// assert_eq!(first[0].leverage, first[1].leverage);
/// let leverage = first[0].leverage.sum() + second[0].leverage.sum();
/// assert!((leverage - 2.0).abs() < 1e-12);
/// let drop = pass.inference(1, InferenceOptions::new().with_covariance(CovarianceKind::Hc1))?;
/// assert!(drop.coefficients[0].std_error > 0.0);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct ManyTargetsPass {
    engine: Engine,
}

/// A pass for one target of `source`.
fn one(source: Source, target: usize) -> Result<SecondPass> {
    Ok(SecondPass {
        engine: Engine::new(source, &[target])?,
    })
}

/// A pass for every target of `source`.
fn many(source: Source) -> Result<ManyTargetsPass> {
    let targets: Vec<usize> = (0..source.core().k).collect();
    Ok(ManyTargetsPass {
        engine: Engine::new(source, &targets)?,
    })
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
        one(Source::Triangle(self.clone()), target)
    }

    /// Starts the second pass over this state's rows for every target at
    /// once; see [`ManyTargetsPass`].
    ///
    /// # Errors
    /// As [`TriangleState::second_pass`].
    pub fn second_pass_many(&self) -> Result<ManyTargetsPass> {
        many(Source::Triangle(self.clone()))
    }
}

impl CrossProductState {
    /// Starts the second pass over this state's rows for target `target`
    /// (0-based); see [`SecondPass`]. The leverage comes from the Cholesky
    /// factor `L` of the design's cross products (`L^T` in the role of the
    /// triangle's `R`).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a target beyond the state's;
    /// [`Error::InferenceRefused`] for no residual degrees of freedom or
    /// constant columns; the errors of [`CrossProductState::finish_with`]
    /// at its default settings ([`Error::IllConditioned`] among them).
    pub fn second_pass(&self, target: usize) -> Result<SecondPass> {
        one(Source::Cross(self.clone()), target)
    }

    /// Starts the second pass over this state's rows for every target at
    /// once; see [`ManyTargetsPass`].
    ///
    /// # Errors
    /// As [`CrossProductState::second_pass`].
    pub fn second_pass_many(&self) -> Result<ManyTargetsPass> {
        many(Source::Cross(self.clone()))
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
    /// `first_row` of the whole stream, and returns its diagnostics for the
    /// pass's target.
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
        let mut out = self.engine.absorb(first_row, x, y, w)?;
        // One part: one result.
        out.pop().ok_or(Error::PassMismatch {
            what: "targets served",
            expected: 1,
            found: 0,
        })
    }

    /// Rows taken so far.
    pub fn rows_seen(&self) -> usize {
        self.engine.seen.rows
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
    /// for HC2 or HC3 when a row has leverage 1; the errors of the state's
    /// `inference` ([`TriangleState::inference`],
    /// [`CrossProductState::inference`]).
    pub fn inference(&self, options: InferenceOptions) -> Result<Inference> {
        self.engine.inference(0, options)
    }
}

impl ManyTargetsPass {
    /// Takes the next block of the rows the state absorbed (design `x`,
    /// every target `y`, the same weights), whose first row is row
    /// `first_row` of the whole stream, and returns its diagnostics, one
    /// [`BlockDiagnostics`] per target in the order of the state's targets.
    ///
    /// # Errors
    /// As [`SecondPass::absorb`]. On error the pass is unchanged.
    pub fn absorb(
        &mut self,
        first_row: usize,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<Vec<BlockDiagnostics>> {
        self.engine.absorb(first_row, x, y, w)
    }

    /// Rows taken so far.
    pub fn rows_seen(&self) -> usize {
        self.engine.seen.rows
    }

    /// Targets served (every target of the state).
    pub fn targets(&self) -> usize {
        self.engine.parts.len()
    }

    /// The inference of target `target` (0-based) with the covariance
    /// `options` asks for, once every row has been seen; see
    /// [`SecondPass::inference`].
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a target beyond the state's; as
    /// [`SecondPass::inference`].
    pub fn inference(&self, target: usize, options: InferenceOptions) -> Result<Inference> {
        if target >= self.targets() {
            return Err(Error::InvalidParameter {
                name: "target",
                value: target as f64,
                reason: "beyond the state's targets",
            });
        }
        self.engine.inference(target, options)
    }
}
