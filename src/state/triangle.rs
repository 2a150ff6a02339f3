//! The triangular-factor state: the `R` of a QR of the centered, weighted
//! rows, merged by stacking two triangles and re-triangularising.

use faer::Mat;
use ndarray::{ArrayView1, ArrayView2};

use super::{check_tolerance, shift_columns, Combined, Core, FitState, Frame, StateLayout};
use crate::error::{Error, Result};
use crate::linalg::qr::{row_stride, stacked_qr, StackedQrWork};
use crate::linalg::triangular;
use crate::observe::Watch;
use crate::passes::qr::tall_skinny_r_with;
use crate::prep::{Scaling, Tail};
use crate::problem::Problem;
use crate::scaled::ldexp;
use crate::solver::{assemble, Fit, Solved};

use super::rows::{reduce_block, TargetSummary};

/// A mergeable fit state holding the triangular factor `R` (`(p + k)`
/// square, upper triangular) of a QR of the rows
/// `sqrt(w_i) (x_i - m, y_i - m_y)` (without an intercept, of
/// `sqrt(w_i) (x_i, y_i)`), with the total weight, the weighted means and
/// each column's extremes; see the [module documentation](crate::state).
///
/// A block is reduced to its own triangle (centered by the block's means,
/// in chunks of rows, by the Householder kernel of [`crate::Qr`]) and
/// merged; merging stacks the two triangles and the correction row
/// `sqrt(W_a W_b / W) (m_a - m_b)` and re-triangularises. `R^T R` is then
/// the centered cross-product matrix of all rows, and the finish solves
/// with `R` as [`crate::Qr`] does: the accuracy of QR, not of the normal
/// equations.
///
/// The trailing `k x k` block of `R` holds each target's residuals: the
/// residual sum of squares of target `t` is the squared norm of its column
/// there, with no second pass over the rows.
#[derive(Debug, Clone, PartialEq)]
pub struct TriangleState {
    pub(crate) core: Core,
    /// Upper triangular, `(p + k)` square; column `j` divided by
    /// `2^core.exps[j]`, rows by `2^core.wexp`.
    pub(crate) r: Mat<f64>,
}

impl TriangleState {
    /// An empty state for `columns` design columns and `targets` targets.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for zero targets; [`Error::NothingToFit`]
    /// for zero columns without an intercept; [`Error::TooLarge`] when the
    /// `(p + k)^2` triangle cannot be allocated.
    pub fn new(columns: usize, targets: usize, intercept: bool) -> Result<Self> {
        let core = Core::new(columns, targets, intercept)?;
        let width = core.width();
        Ok(TriangleState {
            core,
            r: Mat::zeros(width, width),
        })
    }

    /// Names the design columns (one per column); states merge only with
    /// states of the same names.
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`] when the count differs from the columns.
    pub fn with_names(mut self, names: Vec<String>) -> Result<Self> {
        self.core.set_names(names)?;
        Ok(self)
    }

    /// The state of a problem's rows and target: the in-memory [`crate::Qr`]
    /// (the TSQR pass of the whole problem, in the units of `scaling`).
    pub(crate) fn of_problem(
        problem: &Problem<'_>,
        scaling: &Scaling,
        watch: &Watch<'_>,
    ) -> Result<Self> {
        let r = tall_skinny_r_with(problem, scaling, Tail::Target, watch)?;
        let targets = TargetSummary::of(problem, scaling);
        let names = problem.names().map(<[String]>::to_vec);
        Ok(TriangleState {
            core: Core::of_problem(problem, scaling, targets, names, false),
            r,
        })
    }

    /// Folds a triangle `other` (in the units `other_core` describes) into
    /// this state.
    fn fold(&mut self, other_core: &Core, other: &Mat<f64>) {
        let width = self.core.width();
        match self.core.combine(other_core) {
            Combined::KeepSelf => {}
            Combined::TakeOther { shift, wshift } => {
                self.r = other.clone();
                shift_columns(self.r.as_mut(), &shift, wshift, true);
            }
            Combined::Both {
                self_shift,
                self_wshift,
                other_shift,
                other_wshift,
                factor,
                d,
            } => {
                shift_columns(self.r.as_mut(), &self_shift, self_wshift, true);
                let ld = row_stride(width);
                let extra = usize::from(self.core.intercept);
                let rows = width + extra;
                let mut buf = vec![0.0; rows * ld];
                for i in 0..width {
                    for j in i..width {
                        buf[i * ld + j] = ldexp(other[(i, j)], other_shift[j] + other_wshift);
                    }
                }
                if extra == 1 {
                    let s = factor.sqrt();
                    for j in 0..width {
                        buf[width * ld + j] = s * d[j];
                    }
                }
                let mut work = StackedQrWork::new(width);
                stacked_qr(self.r.as_mut(), &mut buf, ld, rows, &mut work);
            }
        }
    }

    /// The triangle in the frame's units, constant columns zeroed.
    pub(crate) fn framed(&self, frame: &Frame) -> Mat<f64> {
        let (p, width) = (self.core.p, self.core.width());
        Mat::from_fn(width, width, |i, j| {
            if i > j || (j < p && frame.constant[j]) {
                0.0
            } else {
                ldexp(self.r[(i, j)], self.core.exps[j] - frame.exps[j])
            }
        })
    }

    /// The triangle in the frame's units after the rank checks of
    /// [`TriangleState::finish_with`], with the frame and the condition
    /// number of the design's part.
    pub(crate) fn factor(&self, tolerance: Option<f64>) -> Result<(Frame, Mat<f64>, f64)> {
        let core = &self.core;
        let tolerance = match tolerance {
            Some(t) => check_tolerance(t)?,
            None => core.default_tolerance(),
        };
        let frame = core.frame(tolerance, true)?;
        let p = core.p;
        let rf = self.framed(&frame);
        let r11 = rf.as_ref().submatrix(0, 0, p, p);
        let diagonal_clear = (0..p).all(|j| rf[(j, j)].abs() > frame.threshold(j));
        let dependent = if diagonal_clear {
            Vec::new()
        } else {
            crate::linalg::householder::dependent_columns(r11, |j| frame.threshold(j))
        };
        if !dependent.is_empty() {
            return Err(Error::RankDeficient {
                rank: p - dependent.len(),
                columns: p,
                combinations: crate::linalg::householder::combinations(
                    r11,
                    &dependent,
                    &frame.constant,
                ),
                dependent,
                tolerance,
                names: core.names.clone(),
            });
        }
        let condition = crate::linalg::svd::condition(r11, 0.0)?;
        Ok((frame, rf, condition))
    }

    /// The QR fit of every target, with the rank tolerance `tolerance`
    /// (`None`: `max(usable rows, columns) * eps`, as [`crate::Qr`]).
    ///
    /// Column `j` is dependent when `|R_jj|` (after the earlier
    /// independent columns) is at most the tolerance times the bound
    /// `sqrt(W) max|x_j|` of the raw column's weighted norm, or when its
    /// values about the mean are at most the tolerance times `max|x_j|`
    /// (a constant column beside the intercept): the rules of [`crate::Qr`].
    ///
    /// # Errors
    /// [`Error::NoRows`], [`Error::AllWeightsZero`], [`Error::TooFewRows`];
    /// [`Error::RankDeficient`] naming the dependent columns;
    /// [`Error::InvalidParameter`] for a bad tolerance;
    /// [`Error::SpreadOverflow`], [`Error::Overflow`] for results beyond the
    /// range of `f64`.
    pub fn finish_with(&self, tolerance: Option<f64>) -> Result<Vec<Fit>> {
        let (frame, rf, condition) = self.factor(tolerance)?;
        (0..self.core.k)
            .map(|t| {
                let solved = self.solve(&frame, &rf, condition, t);
                assemble(&self.core.origin(), "qr-state", Some("qr"), solved)
            })
            .collect()
    }

    /// The QR solution of target `t` from the triangle `rf` of
    /// [`TriangleState::factor`]: back substitution with `R11`, the
    /// residual sum of squares from the trailing block (no pass over the
    /// rows), R² from the target's column.
    pub(crate) fn solve(&self, frame: &Frame, rf: &Mat<f64>, condition: f64, t: usize) -> Solved {
        let core = &self.core;
        let p = core.p;
        let c = p + t;
        let r11 = rf.as_ref().submatrix(0, 0, p, p);
        let mut gamma: Vec<f64> = (0..p).map(|i| rf[(i, c)]).collect();
        triangular::solve_upper(r11, &mut gamma);
        let beta: Vec<f64> = gamma
            .iter()
            .enumerate()
            .map(|(j, &g)| ldexp(g, frame.exps[c] - frame.exps[j]))
            .collect();
        core.solved(
            frame,
            t,
            beta,
            Some(p),
            Some(condition),
            residual_squares(rf, p, c),
            total_squares(rf, c),
            0.0,
        )
    }
}

impl TriangleState {
    /// The minimum-norm fit of every target through the SVD of the
    /// design's part of the triangle, as [`crate::Svd`]: singular values
    /// above `cutoff` (`None`: `max(usable rows, columns) * eps`) times the
    /// largest are kept, their count is the rank; columns constant beside
    /// the intercept get coefficient 0; the solution is the one of minimum
    /// Euclidean norm in the caller's units.
    ///
    /// # Errors
    /// [`Error::NoRows`], [`Error::AllWeightsZero`], [`Error::TooFewRows`];
    /// [`Error::InvalidParameter`] for a bad cutoff;
    /// [`Error::NoConvergence`] if the SVD fails; [`Error::Overflow`].
    pub fn finish_min_norm(&self, cutoff: Option<f64>) -> Result<Vec<Fit>> {
        let core = &self.core;
        let cutoff = match cutoff {
            Some(t) => check_tolerance(t)?,
            None => core.default_tolerance(),
        };
        let frame = core.frame(core.default_tolerance(), true)?;
        let p = core.p;
        let rf = self.framed(&frame);
        let live: Vec<usize> = (0..p).filter(|&j| !frame.constant[j]).collect();
        let q = live.len();
        let r11 = Mat::<f64>::from_fn(p, q, |i, c| rf[(i, live[c])]);
        let dec = if q > 0 {
            Some(crate::linalg::svd::thin_svd(r11.as_ref())?)
        } else {
            None
        };
        let smax = dec
            .as_ref()
            .and_then(|d| d.s.first().copied())
            .unwrap_or(0.0);
        let rank = dec.as_ref().map_or(0, |d| {
            d.s.iter()
                .take_while(|&&s| s > cutoff * smax && s > 0.0)
                .count()
        });
        if rank == 0 && q > 0 {
            return Err(Error::NoConvergence {
                what: "singular value decomposition",
            });
        }
        let condition = dec
            .as_ref()
            .filter(|_| rank > 0)
            .map_or(1.0, |d| smax / d.s[rank - 1]);
        (0..core.k)
            .map(|t| {
                let c = p + t;
                let rhs: Vec<f64> = (0..p).map(|i| rf[(i, c)]).collect();
                let mut beta = vec![0.0; p];
                let mut resid = rhs.clone();
                if let Some(dec) = &dec {
                    let gamma = crate::linalg::svd::truncated_solve(dec, rank, &rhs);
                    resid = crate::linalg::svd::residuals(r11.as_ref(), &rhs, &gamma);
                    // Minimum norm in caller units (see `Svd`): work in a
                    // common power of two so that the projection is exact.
                    let exps: Vec<i32> = live.iter().map(|&j| frame.exps[j]).collect();
                    let (e_max, unit) = crate::linalg::svd::common_units(&exps);
                    let mut b: Vec<f64> = (0..q).map(|cc| ldexp(gamma[cc], unit[cc])).collect();
                    if rank < q {
                        crate::linalg::svd::project_off_null_space(&mut b, &dec.v, rank, &unit);
                    }
                    for (cc, &j) in live.iter().enumerate() {
                        beta[j] = ldexp(b[cc], frame.exps[c] + e_max);
                    }
                }
                core.fit(
                    &frame,
                    t,
                    ("svd-state", "svd"),
                    beta,
                    Some(rank),
                    Some(condition),
                    with_head(residual_squares(&rf, p, c), &resid),
                    total_squares(&rf, c),
                    0.0,
                )
            })
            .collect()
    }

    /// The ridge fit of every target at the penalty `lambda >= 0`, which
    /// minimises `(1/2) sum_i w_i (y_i - b0 - x_i . b)^2 + (lambda / 2) |b|^2`
    /// (the objective of [`crate::Ridge`] with unstandardised columns): the
    /// triangle `R11` stacked over `sqrt(lambda_j) I` (the penalty in the
    /// state's units) and re-triangularised, so that one state serves any
    /// number of penalties. A penalty whose square root exceeds `2^500` in
    /// the state's units is used as `2^500` (its coefficients are then
    /// below about `1e-300` of their unpenalised size either way).
    ///
    /// The report carries `rank: None` and `residual_df: None` (a
    /// penalised system has full rank), the penalty, and the residual sum of
    /// squares of the penalised coefficients.
    ///
    /// # Errors
    /// [`Error::NoRows`], [`Error::AllWeightsZero`];
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty;
    /// [`Error::Overflow`] (at `lambda = 0` on a rank-deficient design
    /// among others).
    pub fn finish_ridge(&self, lambda: f64) -> Result<Vec<Fit>> {
        let core = &self.core;
        let lambda = crate::penalty::check_penalty("lambda", lambda)?;
        let frame = core.frame(core.default_tolerance(), false)?;
        let (p, width) = (core.p, core.width());
        let rf = self.framed(&frame);
        let mut r = rf.clone();
        let ld = row_stride(width);
        let mut buf = vec![0.0; p.max(1) * ld];
        let root = lambda.sqrt();
        for j in 0..p {
            // A constant column (zero in the triangle) gets a unit
            // penalty: its coefficient is then exactly 0.
            let v = if frame.constant[j] {
                1.0
            } else {
                ldexp(root, -frame.exps[j] - core.wexp)
            };
            buf[j * ld + j] = v.min(crate::scaled::pow2(500));
        }
        if p > 0 {
            let mut work = StackedQrWork::new(width);
            stacked_qr(r.as_mut(), &mut buf, ld, p, &mut work);
        }
        let r11 = r.as_ref().submatrix(0, 0, p, p);
        let condition = crate::linalg::svd::condition(r11, 0.0)?;
        (0..core.k)
            .map(|t| {
                let c = p + t;
                let mut gamma: Vec<f64> = (0..p).map(|i| r[(i, c)]).collect();
                triangular::solve_upper(r11, &mut gamma);
                let resid: Vec<f64> = (0..p)
                    .map(|i| rf[(i, c)] - (i..p).map(|l| rf[(i, l)] * gamma[l]).sum::<f64>())
                    .collect();
                let beta: Vec<f64> = gamma
                    .iter()
                    .enumerate()
                    .map(|(j, &g)| ldexp(g, frame.exps[c] - frame.exps[j]))
                    .collect();
                core.fit(
                    &frame,
                    t,
                    ("ridge-state", "qr"),
                    beta,
                    None,
                    Some(condition),
                    with_head(residual_squares(&rf, p, c), &resid),
                    total_squares(&rf, c),
                    lambda,
                )
            })
            .collect()
    }
}

/// The centered total sum of squares of column `c` of the stacked problem
/// (the target's, in frame units) as `(mantissa, exponent)`: the squared
/// norm of the triangle's column, which keeps the norm of the centered,
/// weighted column.
pub(crate) fn total_squares(r: &Mat<f64>, c: usize) -> (f64, i32) {
    residual_squares(r, 0, c)
}

/// `sum_{i = p}^{c} R_ic^2`: the squared norm of column `c` of the
/// trailing block (the residuals of that target against the design), as
/// `(mantissa, exponent)`.
pub(crate) fn residual_squares(r: &Mat<f64>, p: usize, c: usize) -> (f64, i32) {
    let big = (p..=c).fold(0.0f64, |m, i| m.max(r[(i, c)].abs()));
    if big == 0.0 {
        return (0.0, 0);
    }
    let e = crate::scaled::exponent(big);
    let s: f64 = (p..=c).map(|i| ldexp(r[(i, c)], -e).powi(2)).sum();
    (s, 2 * e)
}

/// A residual sum of squares `(m, e)` of the trailing block plus the
/// squares of `head` (residuals in the design's rows of the triangle, in
/// the same frame units), in the same form.
pub(crate) fn with_head((m, e): (f64, i32), head: &[f64]) -> (f64, i32) {
    let h: f64 = head.iter().map(|r| r * r).sum();
    if h == 0.0 {
        return (m, e);
    }
    let top = if m == 0.0 {
        crate::scaled::exponent(h)
    } else {
        e.max(crate::scaled::exponent(h))
    };
    (ldexp(m, e - top) + ldexp(h, -top), top)
}

impl FitState for TriangleState {
    /// Reduces the block in parallel (the row pass of [`crate::Qr`]: fixed
    /// partition and fold tree, the same bits for any thread count) and
    /// folds its triangle in.
    fn absorb(
        &mut self,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<()> {
        self.absorb_observed(x, y, w, &crate::Unobserved)
    }

    fn absorb_observed(
        &mut self,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
        observer: &dyn crate::Observer,
    ) -> Result<()> {
        let (core, m) = reduce_block(&self.core, x, y, w, observer, tall_skinny_r_with)?;
        self.fold(&core, &m);
        Ok(())
    }

    fn merge(&mut self, other: &Self) -> Result<()> {
        self.core.check_same(&other.core)?;
        self.fold(&other.core, &other.r);
        Ok(())
    }

    /// [`TriangleState::finish_with`] at the default tolerance.
    fn finish(&self) -> Result<Vec<Fit>> {
        self.finish_with(None)
    }

    fn layout(&self) -> StateLayout<'_> {
        self.core.layout()
    }
}
