//! The cross-product state: the centered cross-product matrix of
//! `[x, y]`, merged with the pooled-moment correction.

use faer::Mat;
use ndarray::{ArrayView1, ArrayView2};

use super::{check_tolerance, shift_columns, Combined, Core, FitState, StateLayout};
use crate::error::{Error, Result};
use crate::linalg::{cholesky as chol, triangular};
use crate::observe::Watch;
use crate::passes::gram::centered_gram_with;
use crate::prep::{Scaling, Tail};
use crate::problem::Problem;
use crate::scaled::{ldexp, Neumaier};
use crate::solver::{assemble, Fit, Solved};

use super::rows::{reduce_block, TargetSummary};

/// A mergeable fit state holding the centered cross-product matrix
/// `C = sum_i w_i (z_i - m)(z_i - m)^T` of the rows `z_i = (x_i, y_i)`
/// (`(p + k)` square, symmetric; about zero without an intercept), with the
/// total weight, the weighted means and each column's extremes; see the
/// [module documentation](crate::state).
///
/// Cheaper to update than [`crate::TriangleState`] (one symmetric product
/// per block, one addition per merge: `C = C_a + C_b + (W_a W_b / W) d d^T`
/// with `d = m_a - m_b`), but it finishes by Cholesky of `C_xx`: the
/// accuracy of the normal equations, about `16 - 2 log10(cond)` digits. As
/// [`crate::Cholesky`] does, it refuses with [`Error::IllConditioned`] when
/// fewer than `min_digits` (default 4) would survive.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossProductState {
    pub(crate) core: Core,
    /// Symmetric (both halves stored); entry `(i, j)` divided by
    /// `2^(exps[i] + exps[j] + 2 wexp)`.
    pub(crate) c: Mat<f64>,
}

impl CrossProductState {
    /// An empty state for `columns` design columns and `targets` targets.
    ///
    /// # Errors
    /// As [`crate::TriangleState::new`].
    pub fn new(columns: usize, targets: usize, intercept: bool) -> Result<Self> {
        let core = Core::new(columns, targets, intercept)?;
        let width = core.width();
        Ok(CrossProductState {
            core,
            c: Mat::zeros(width, width),
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

    /// The state of a problem's rows and target: the in-memory
    /// [`crate::Cholesky`] (the Gram pass of the whole problem, in the
    /// units of `scaling`).
    pub(crate) fn of_problem(
        problem: &Problem<'_>,
        scaling: &Scaling,
        watch: &Watch<'_>,
    ) -> Result<Self> {
        let c = centered_gram_with(problem, scaling, Tail::Target, watch)?;
        let targets = TargetSummary::of(problem, scaling);
        let names = problem.names().map(<[String]>::to_vec);
        Ok(CrossProductState {
            core: Core::of_problem(problem, scaling, targets, names, false),
            c,
        })
    }

    fn fold(&mut self, other_core: &Core, other: &Mat<f64>) {
        let width = self.core.width();
        let shifted = |m: &Mat<f64>, shift: &[i32], wshift: i32| {
            let mut m = m.clone();
            shift_columns(m.as_mut(), shift, wshift, false);
            shift_columns(m.as_mut().transpose_mut(), shift, wshift, false);
            m
        };
        match self.core.combine(other_core) {
            Combined::KeepSelf => {}
            Combined::TakeOther { shift, wshift } => {
                self.c = shifted(other, &shift, wshift);
            }
            Combined::Both {
                self_shift,
                self_wshift,
                other_shift,
                other_wshift,
                factor,
                d,
            } => {
                let a = shifted(&self.c, &self_shift, self_wshift);
                let b = shifted(other, &other_shift, other_wshift);
                self.c = Mat::from_fn(width, width, |i, j| {
                    a[(i, j)] + b[(i, j)] + factor * (d[i] * d[j])
                });
            }
        }
    }

    /// The cross products in the frame's units and the Cholesky factor `L`
    /// of their design block, after the checks of
    /// [`CrossProductState::finish_with`], with the frame and the
    /// condition number of `L`.
    #[allow(clippy::type_complexity)]
    pub(crate) fn factor(
        &self,
        tolerance: Option<f64>,
        min_digits: Option<f64>,
    ) -> Result<(super::Frame, Mat<f64>, Mat<f64>, f64)> {
        let core = &self.core;
        let tolerance = match tolerance {
            Some(t) => check_tolerance(t)?,
            None => core.default_tolerance(),
        };
        let min_digits = min_digits.unwrap_or(4.0);
        if !min_digits.is_finite() {
            return Err(Error::InvalidParameter {
                name: "min_digits",
                value: min_digits,
                reason: "must be finite",
            });
        }
        let frame = core.frame(tolerance, true)?;
        let (p, width) = (core.p, core.width());
        let live = |j: usize| j >= p || !frame.constant[j];
        let cf = Mat::<f64>::from_fn(width, width, |i, j| {
            if live(i) && live(j) {
                ldexp(
                    self.c[(i, j)],
                    core.exps[i] - frame.exps[i] + core.exps[j] - frame.exps[j],
                )
            } else {
                0.0
            }
        });
        let constant: Vec<usize> = (0..p).filter(|&j| frame.constant[j]).collect();
        if !constant.is_empty() {
            return Err(Error::RankDeficient {
                rank: p - constant.len(),
                columns: p,
                // Constant columns combine nothing.
                combinations: vec![Vec::new(); constant.len()],
                dependent: constant,
                tolerance,
                names: core.names.clone(),
            });
        }
        let g11 = cf.as_ref().submatrix(0, 0, p, p);
        let l = match chol::factor(g11) {
            chol::Factor::Ok(l) => l,
            chol::Factor::Failed { pivot } => {
                return Err(Error::NotPositiveDefinite {
                    pivot,
                    value: g11[(pivot, pivot)],
                })
            }
        };
        let condition = crate::linalg::svd::condition(l.as_ref(), 0.0)?;
        let noise = (0..p).any(|j| l[(j, j)] * l[(j, j)] <= 4.0 * f64::EPSILON * g11[(j, j)]);
        let digits = -(f64::EPSILON * condition * condition).log10();
        if noise || digits < min_digits {
            return Err(Error::IllConditioned {
                method: "normal equations",
                condition: condition * condition,
                expected_digits: digits,
                required_digits: min_digits,
            });
        }
        Ok((frame, cf, l, condition))
    }

    /// The Cholesky fit of every target, with the rank tolerance
    /// `tolerance` (`None`: `max(usable rows, columns) * eps`; it decides
    /// which columns are constant beside the intercept) and the fewest
    /// digits accepted, `min_digits` (`None`: 4), as [`crate::Cholesky`].
    ///
    /// # Errors
    /// [`Error::NoRows`], [`Error::AllWeightsZero`], [`Error::TooFewRows`];
    /// [`Error::RankDeficient`] naming constant columns;
    /// [`Error::IllConditioned`] when fewer than `min_digits` digits would
    /// survive (or a pivot is at rounding level);
    /// [`Error::NotPositiveDefinite`] at a failed pivot;
    /// [`Error::InvalidParameter`] for bad settings; [`Error::Overflow`].
    pub fn finish_with(&self, tolerance: Option<f64>, min_digits: Option<f64>) -> Result<Vec<Fit>> {
        let (frame, cf, l, condition) = self.factor(tolerance, min_digits)?;
        (0..self.core.k)
            .map(|t| {
                let solved = self.solve(&frame, &cf, &l, condition, t);
                assemble(
                    &self.core.origin(),
                    "cholesky-state",
                    Some("cholesky"),
                    solved,
                )
            })
            .collect()
    }

    /// The normal-equations solution of target `t` from the cross products
    /// `cf` and the factor `l` of [`CrossProductState::factor`], with the
    /// residual sum of squares `C_yy - |L^-1 C_xy|^2` (never below zero).
    pub(crate) fn solve(
        &self,
        frame: &super::Frame,
        cf: &Mat<f64>,
        l: &Mat<f64>,
        condition: f64,
        t: usize,
    ) -> Solved {
        let core = &self.core;
        let p = core.p;
        let c = p + t;
        let mut q: Vec<f64> = (0..p).map(|i| cf[(i, c)]).collect();
        triangular::solve_lower(l.as_ref(), &mut q);
        let mut acc = Neumaier::default();
        acc.add(cf[(c, c)]);
        for v in &q {
            acc.add(-v * v);
        }
        let rss = acc.value().max(0.0);
        let mut gamma = q;
        triangular::solve_upper(l.as_ref().transpose(), &mut gamma);
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
            (rss, 0),
            (cf[(c, c)], 0),
            0.0,
        )
    }
}

impl FitState for CrossProductState {
    /// Forms the block's centered cross products in parallel (the row
    /// pass of [`crate::Cholesky`]: fixed partition and summation tree, the
    /// same bits for any thread count) and folds them in.
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
        let (core, m) = reduce_block(&self.core, x, y, w, observer, centered_gram_with)?;
        self.fold(&core, &m);
        Ok(())
    }

    fn merge(&mut self, other: &Self) -> Result<()> {
        self.core.check_same(&other.core)?;
        self.fold(&other.core, &other.c);
        Ok(())
    }

    /// [`CrossProductState::finish_with`] at the default settings.
    fn finish(&self) -> Result<Vec<Fit>> {
        self.finish_with(None, None)
    }

    fn layout(&self) -> StateLayout<'_> {
        self.core.layout()
    }
}
