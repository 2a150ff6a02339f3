//! Scores of a grid of penalties in closed form: leave-one-out error,
//! generalized cross-validation, effective degrees of freedom.

use faer::Mat;

use crate::error::{Error, Result};
use crate::linalg::dense;
use crate::observe::{Observer, Stage, Watch};
use crate::passes::loo;
use crate::penalty::PenaltyMap;
use crate::scaled::{exponent, ldexp};
use crate::vocabulary::Criterion;

use super::path::{RidgePath, Side, Spectrum};

/// Scores of every penalty of a grid, and the one that minimises the
/// chosen criterion.
///
/// With weights `w_i`, `W = sum_i w_i`, `n_u` rows of non-zero weight,
/// residuals `e_i = y_i - y^_i` of the fit on all rows, and `H` the hat
/// matrix of the weighted problem (intercept included, `h_ii` its diagonal):
///
/// - leave-one-out: `sum_i w_i (e_i / (1 - h_ii))^2 / W`, the weighted mean
///   squared error of predicting each row from a fit without it (exact
///   for a fixed penalty: the identity `y_i - y^_(-i) = e_i / (1 - h_ii)`);
/// - generalized cross-validation:
///   `(sum_i w_i e_i^2 / W) / (1 - tr(H) / n_u)^2`;
/// - effective degrees of freedom: `tr(H) = sum_k s_k^2 / (s_k^2 + lambda)`
///   plus one for the intercept.
///
/// A score is `+inf` when it is not determined: a row the fit interpolates
/// (`h_ii` within rounding of 1) or `tr(H) >= n_u`.
///
/// With standardised columns the column scales are those of all rows:
/// the closed forms treat the penalty as fixed when a row is left out.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct PenaltyCurve {
    /// The penalties scored, in the caller's order.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub penalties: Vec<f64>,
    /// Effective degrees of freedom of each fit (intercept counted as one).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub effective_df: Vec<f64>,
    /// Weighted residual sum of squares `sum_i w_i e_i^2` of each fit.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub residual_sum_of_squares: Vec<f64>,
    /// Generalized cross-validation score of each penalty (`+inf` where
    /// it is not determined; written as `"inf"` by serde).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub gcv: Vec<f64>,
    /// Leave-one-out error of each penalty, when the criterion asked for
    /// it (computing it costs a pass over the design; `+inf` where it is
    /// not determined).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_floats"))]
    pub loo: Option<Vec<f64>>,
    /// The criterion minimised.
    pub criterion: Criterion,
    /// Position of the minimiser in `penalties` (among equal scores, the
    /// largest penalty).
    pub best_index: usize,
    /// The minimising penalty.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub best_penalty: f64,
}

/// Checks a caller's grid.
pub(crate) fn check_grid(grid: &[f64]) -> Result<()> {
    if grid.is_empty() {
        return Err(Error::InvalidParameter {
            name: "grid",
            value: 0.0,
            reason: "must hold at least one penalty",
        });
    }
    for (index, &value) in grid.iter().enumerate() {
        if !crate::error::finite_nonnegative(value) {
            return Err(Error::InvalidGridPenalty { index, value });
        }
    }
    Ok(())
}

impl RidgePath<'_, '_> {
    /// Scores every penalty of `grid` (caller's units) and picks the one
    /// minimising `criterion`; see [`PenaltyCurve`] for the formulas.
    ///
    /// Cost beyond the path: `O(p)` per penalty for the generalized
    /// cross-validation score and the degrees of freedom. The leave-one-out
    /// error needs every row's leverage: with rows >= columns one more pass
    /// over the design forms `Ẑ V` block by block and scores all penalties
    /// with two products per block (about `2 n p^2 + 4 n p m` flops for `m`
    /// penalties, memory one block per group); with more columns than rows
    /// it comes from the row-side decomposition at `O(n_u^2 m)`.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for an empty grid;
    /// [`Error::InvalidGridPenalty`] for a negative or non-finite entry;
    /// [`Error::NoFiniteScore`] when no penalty has a finite score.
    pub fn curve(&self, grid: &[f64], criterion: Criterion) -> Result<super::PenaltyCurve> {
        self.score(grid, criterion, &Watch::quiet())
    }

    /// As [`RidgePath::curve`], calling `observer` after every block of
    /// rows of the leave-one-out pass (the only pass over the design the
    /// curve makes; see [`crate::observe`]).
    ///
    /// # Errors
    /// As [`RidgePath::curve`], and [`Error::Stopped`] when the observer
    /// stops the pass.
    pub fn curve_observed(
        &self,
        grid: &[f64],
        criterion: Criterion,
        observer: &dyn Observer,
    ) -> Result<super::PenaltyCurve> {
        self.score(grid, criterion, &Watch::new(observer))
    }

    fn score(
        &self,
        grid: &[f64],
        criterion: Criterion,
        watch: &Watch<'_>,
    ) -> Result<super::PenaltyCurve> {
        let problem = self.problem;
        let units = CurveUnits {
            total_weight: problem.stats.total_weight,
            usable_rows: problem.usable_rows(),
            intercept: problem.has_intercept(),
            target_exp: self.scaling.target_exp,
            weight_exp: exponent(problem.stats.weight_scale),
        };
        let loo = |mus: &[f64]| self.loo_sums(mus, watch);
        penalty_curve(
            &self.spectrum,
            &self.map,
            &units,
            grid,
            criterion,
            Some(&loo),
        )
    }

    /// `sum_i (r_i / (1 - H_ii))^2` in scaled units for each `mu`.
    fn loo_sums(&self, mus: &[f64], watch: &Watch<'_>) -> Result<Vec<f64>> {
        let sp = &self.spectrum;
        let problem = self.problem;
        let m = mus.len();
        let share = if problem.has_intercept() {
            1.0 / problem.stats.total_weight
        } else {
            0.0
        };
        match &sp.side {
            Side::Columns { v, .. } => {
                let r = sp.kept;
                let lev = Mat::<f64>::from_fn(r, m, |k, c| 1.0 / (sp.sq[k] + mus[c]));
                let fitted = Mat::<f64>::from_fn(r, m, |k, c| {
                    sp.sq[k].sqrt() * sp.d[k] / (sp.sq[k] + mus[c])
                });
                let vk = v.as_ref().subcols(0, r);
                watch.begin(Stage::Residuals, problem.rows());
                let sums = loo::loo_sums(
                    problem,
                    &self.scaling,
                    &loo::LooSpectrum {
                        factors: &self.map.factors,
                        v: vk,
                        leverage: lev.as_ref(),
                        fitted: fitted.as_ref(),
                        intercept_share: share,
                    },
                    watch,
                );
                watch.check()?;
                Ok(sums)
            }
            Side::Rows { u, .. } => {
                // Every eigenvector but the intercept's is in `u`, so
                // 1 - H_ii = sum_k u_ik^2 (1 - phi_k) and the residual is
                // sum_k u_ik d_k (1 - phi_k): no cancellation.
                let q = sp.sq.len();
                let nu = u.nrows();
                let u2 = Mat::<f64>::from_fn(nu, q, |i, k| u[(i, k)] * u[(i, k)]);
                let keep = Mat::<f64>::from_fn(q, m, |k, c| 1.0 - sp.phi(k, mus[c]));
                let res_coef = Mat::<f64>::from_fn(q, m, |k, c| sp.d[k] * keep[(k, c)]);
                let one_minus = dense::product(u2.as_ref(), keep.as_ref());
                let resid = dense::product(u.as_ref(), res_coef.as_ref());
                let tiny = 16.0 * f64::EPSILON * (q.max(1) as f64);
                Ok((0..m)
                    .map(|c| {
                        let mut acc = 0.0;
                        for i in 0..nu {
                            let om = one_minus[(i, c)];
                            if om <= tiny {
                                return f64::INFINITY;
                            }
                            let e = resid[(i, c)] / om;
                            acc += e * e;
                        }
                        acc
                    })
                    .collect())
            }
        }
    }
}

/// The units a spectrum's scores are formed in: the total weight divided by
/// `2^weight_exp`, the usable rows, the intercept, and the target's scale
/// `2^target_exp` (residuals are in units of `2^(target_exp + weight_exp / 2)`).
pub(crate) struct CurveUnits {
    pub total_weight: f64,
    pub usable_rows: usize,
    pub intercept: bool,
    pub target_exp: i32,
    pub weight_exp: i32,
}

/// The leave-one-out sums `sum_i (r_i / (1 - H_ii))^2` (scaled units) of
/// each uniform penalty, from the rows.
pub(crate) type LooSums<'a> = &'a dyn Fn(&[f64]) -> Result<Vec<f64>>;

/// The [`PenaltyCurve`] of `grid` from a spectrum, its penalty mapping and
/// its units; see [`RidgePath::curve`]. `loo` gives the leave-one-out sums;
/// without it (a fit state, which has no rows) the leave-one-out criterion
/// is refused with [`Error::CriterionNeedsRows`].
///
/// # Errors
/// As [`RidgePath::curve`], and [`Error::CriterionNeedsRows`].
pub(crate) fn penalty_curve(
    spectrum: &Spectrum,
    map: &PenaltyMap,
    units: &CurveUnits,
    grid: &[f64],
    criterion: Criterion,
    loo: Option<LooSums<'_>>,
) -> Result<PenaltyCurve> {
    if criterion == Criterion::LeaveOneOut && loo.is_none() {
        return Err(Error::CriterionNeedsRows { criterion });
    }
    check_grid(grid)?;
    let loss_exp = 2 * units.target_exp;
    let wt = units.total_weight;
    let nu = units.usable_rows as f64;
    let m = grid.len();
    let mus: Vec<f64> = grid.iter().map(|&l| map.scaled(l)).collect();
    let mut effective_df = crate::alloc::with_capacity("penalty curve", m)?;
    let mut rss = crate::alloc::with_capacity("penalty curve", m)?;
    let mut gcv = crate::alloc::with_capacity("penalty curve", m)?;
    // A score in the caller's units from its scaled value: infinite only
    // where it is not determined, an error where it exceeds the range.
    let caller = |scaled: f64, what: &'static str| -> Result<f64> {
        if scaled == f64::INFINITY {
            return Ok(scaled);
        }
        let v = ldexp(scaled, loss_exp);
        if v.is_finite() {
            Ok(v)
        } else {
            Err(Error::Overflow { what })
        }
    };
    for &mu in &mus {
        let df = spectrum.df(mu, units.intercept);
        let r = spectrum.rss(mu);
        let denom = 1.0 - df / nu;
        let score = if denom > 4.0 * f64::EPSILON {
            (r / wt) / (denom * denom)
        } else {
            f64::INFINITY
        };
        gcv.push(caller(score, "generalized cross-validation score")?);
        effective_df.push(df);
        let r_caller = ldexp(r, loss_exp + units.weight_exp);
        if !r_caller.is_finite() {
            return Err(Error::Overflow {
                what: "residual sum of squares",
            });
        }
        rss.push(r_caller);
    }
    let loo = match loo {
        Some(sums) if criterion == Criterion::LeaveOneOut => Some(
            sums(&mus)?
                .into_iter()
                .map(|s| caller(s / wt, "leave-one-out error"))
                .collect::<Result<Vec<f64>>>()?,
        ),
        _ => None,
    };
    let scores = loo.as_ref().unwrap_or(&gcv);
    let mut best: Option<usize> = None;
    for (i, &s) in scores.iter().enumerate() {
        if !s.is_finite() {
            continue;
        }
        best = match best {
            None => Some(i),
            Some(b) if s < scores[b] || (s == scores[b] && grid[i] > grid[b]) => Some(i),
            keep => keep,
        };
    }
    let best_index = best.ok_or(Error::NoFiniteScore {
        penalties: grid.len(),
        criterion,
    })?;
    Ok(PenaltyCurve {
        penalties: grid.to_vec(),
        effective_df,
        residual_sum_of_squares: rss,
        gcv,
        loo,
        criterion,
        best_index,
        best_penalty: grid[best_index],
    })
}
