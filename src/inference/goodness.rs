//! Goodness of fit, the overall test and collinearity measures.

use faer::MatRef;

use super::distributions::f_upper_tail;
use super::ratio;
use crate::error::{Error, Result};
use crate::linalg::products::{inverse_quadratic_form, upper_times};
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp};

/// How well the model fits, and the overall test that every slope is zero.
///
/// **R² with an intercept** is centered: `1 - RSS / TSS` with
/// `TSS = sum w (y - ybar_w)^2`. **Without an intercept** it is
/// *uncentered*: `TSS = sum w y^2` (sums of squares about zero, which is
/// what a model forced through the origin explains); `centered` is then
/// `false`. The two are not comparable with each other.
///
/// **Likelihood** (Gaussian errors with variance `sigma^2 / w_i`, at the
/// maximum-likelihood `sigma^2 = RSS / n`):
/// `log L = -n/2 (ln(2 pi) + ln(RSS / n) + 1) + 1/2 sum ln w_i`
/// over the usable rows (the last term is 0 without weights).
/// `AIC = -2 log L + 2 m` and `BIC = -2 log L + m ln n`, where
/// `m = likelihood_parameters` **counts the residual variance**: the
/// coefficients, the intercept and `sigma^2`. An exact fit (`RSS = 0`)
/// has `log L = +inf` (and AIC, BIC `-inf`): the only non-finite values
/// here, written as strings by serde (see [`crate::inference`]).
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct GoodnessOfFit {
    /// R², centered or uncentered (see `centered`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub r_squared: f64,
    /// `1 - (1 - R²) (n - i) / (n - k)` with `i = 1` for a centered and
    /// `i = 0` for an uncentered R².
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub adjusted_r_squared: f64,
    /// Whether the sums of squares are about the weighted mean (`true`,
    /// model with intercept) or about zero (`false`, no intercept).
    pub centered: bool,
    /// Total sum of squares (centered or not, as R²), weighted.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub total_sum_of_squares: f64,
    /// Sum of squares explained by the slopes, `||R gamma||^2` in caller
    /// units: equals `TSS - RSS` at the least-squares solution.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub regression_sum_of_squares: f64,
    /// Weighted residual sum of squares of the fit's coefficients.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub residual_sum_of_squares: f64,
    /// The test that every slope is zero; `None` without slopes, or when a
    /// sandwich middle matrix is singular.
    pub overall: Option<OverallTest>,
    /// Gaussian log-likelihood at the estimates (`+inf` for an exact fit).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub log_likelihood: f64,
    /// Akaike's information criterion (`-inf` for an exact fit).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub aic: f64,
    /// Schwarz's Bayesian information criterion (`-inf` for an exact fit).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub bic: f64,
    /// Parameters counted by AIC and BIC: `k + 1` (the variance counts).
    pub likelihood_parameters: usize,
}

/// The F test that every slope is zero (the intercept is not tested).
///
/// It is the Wald statistic `b^T C^-1 b / p` for the slopes `b` with the
/// selected covariance `C`. With the classical covariance it equals the
/// usual ratio `(SS_regression / p) / (RSS / (n - k))` of sums of squares;
/// with a sandwich covariance it is the heteroskedasticity-consistent Wald
/// test. Referred to the F distribution with `p` and `n - k` degrees of
/// freedom.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct OverallTest {
    /// The F statistic (`+inf` for a fit exact to the precision of `f64`,
    /// see [`crate::inference`]).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub statistic: f64,
    /// Numerator degrees of freedom (the number of slopes).
    pub df_model: usize,
    /// Denominator degrees of freedom (residual).
    pub df_residual: usize,
    /// Upper-tail probability.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub p_value: f64,
}

/// How close the columns are to being linearly dependent.
///
/// **VIF:** `VIF_j = 1 / (1 - R_j^2)`, where `R_j^2` is from regressing
/// column `j` on the others with an intercept; equivalently the `j`-th
/// diagonal entry of the inverse of the columns' (weighted) correlation
/// matrix, computed here from the triangular factor as
/// `||R e_j||^2 ||e_j^T R^-1||^2` (scale-free). Without an intercept the
/// columns are not centered and the VIFs are of the uncentered cross
/// products (`centered` is `false`); they are then not the usual ones.
///
/// **Condition number:** the number of [`crate::FitReport::condition`]:
/// the ratio of the largest to the smallest singular value of the
/// (centered, weighted) design after exact power-of-two column scaling
/// (every column divided by the power of two at or below its largest
/// centered magnitude, so that column lengths stay within a factor of two
/// of their largest entry). Each fit, its inference and its summary show
/// the same value.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct Collinearity {
    /// Variance inflation factor of every column.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub vif: Vec<f64>,
    /// 2-norm condition number of the power-of-two scaled design (see
    /// [`crate::FitReport::condition`]).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub condition_number: f64,
    /// Whether the columns were centered (model with intercept).
    pub centered: bool,
}

pub(crate) struct Inputs<'a> {
    /// Rows with non-zero weight.
    pub n: usize,
    /// Whether the model has an intercept (centered sums of squares).
    pub centered: bool,
    /// `sum ln w_i` over the usable rows (0 without weights).
    pub log_weights: f64,
    pub r: MatRef<'a, f64>,
    pub gamma: &'a [f64],
    /// The middle matrix of a sandwich covariance divided by `2^meat_exp`;
    /// `None`: classical (`sigma~^2 I`).
    pub meat: Option<MatRef<'a, f64>>,
    pub meat_exp: i32,
    /// Residual standard deviation, residual norm `sqrt(RSS)` and the
    /// target's norm `|t|` from the factorisation, in scaled units.
    pub sigma_scaled: f64,
    pub rss_norm: f64,
    pub t_norm: f64,
    /// The total sum of squares from the target alone, scaled units.
    pub tss_scaled: f64,
    /// `log2` of the caller units per scaled unit of a sum of squares.
    pub sum_exp: i32,
    pub df: usize,
    pub parameters: usize,
}

/// The square of `norm` (scaled units) in the caller's units, `2^exp` per
/// scaled unit, without underflow or overflow on the way.
fn caller_square(norm: f64, exp: i32, what: &'static str) -> Result<f64> {
    if norm == 0.0 {
        return Ok(0.0);
    }
    let e = exponent(norm);
    let m = ldexp(norm, -e);
    let v = ldexp(m * m, exp + 2 * e);
    if v.is_finite() {
        Ok(v)
    } else {
        Err(Error::Overflow { what })
    }
}

pub(crate) fn compute(inp: Inputs<'_>) -> Result<GoodnessOfFit> {
    let p = inp.r.ncols();
    let n = inp.n as f64;
    let centered = inp.centered;
    let dff = inp.df as f64;
    // |t| from the target alone when its square is a normal number (the
    // compensated sum is the more accurate), else from the factorisation.
    let tss_norm = if inp.tss_scaled >= f64::MIN_POSITIVE / f64::EPSILON {
        inp.tss_scaled.sqrt()
    } else {
        inp.t_norm
    };
    let rss_norm = inp.rss_norm;
    let r_squared = if tss_norm > 0.0 {
        let q = rss_norm / tss_norm;
        1.0 - q * q
    } else if rss_norm == 0.0 {
        1.0
    } else {
        f64::NEG_INFINITY
    };
    let lost = if centered { 1.0 } else { 0.0 };
    let adjusted_r_squared = 1.0 - (1.0 - r_squared) * ((n - lost) / dff);
    let rg = upper_times(inp.r, inp.gamma);
    let ess_norm = super::norm(rg.iter().copied());
    let overall = if p == 0 {
        None
    } else {
        let wald = match inp.meat {
            // Classical: M = sigma~^2 I.
            None => {
                let q = ratio(ess_norm, inp.sigma_scaled);
                Some(q * q)
            }
            Some(meat) => {
                let half = inp.meat_exp / 2;
                let rgs: Vec<f64> = rg.iter().map(|&v| ldexp(v, -half)).collect();
                inverse_quadratic_form(meat.submatrix(0, 0, p, p), &rgs)
            }
        };
        wald.map(|w| {
            let statistic = w / p as f64;
            OverallTest {
                statistic,
                df_model: p,
                df_residual: inp.df,
                p_value: f_upper_tail(statistic, p as f64, dff),
            }
        })
    };
    let ln2 = std::f64::consts::LN_2;
    let log_weights = inp.log_weights;
    let two_pi = 2.0 * std::f64::consts::PI;
    // ln(RSS / n) = 2 ln |r| - ln n + sum_exp ln 2: no overflow or underflow.
    let log_rss = 2.0 * rss_norm.ln() - n.ln() + f64::from(inp.sum_exp) * ln2;
    let log_likelihood = -0.5 * n * (two_pi.ln() + log_rss + 1.0) + 0.5 * log_weights;
    let m = inp.parameters + 1;
    let total = if inp.tss_scaled >= f64::MIN_POSITIVE / f64::EPSILON {
        let v = ldexp(inp.tss_scaled, inp.sum_exp);
        if !v.is_finite() {
            return Err(Error::Overflow {
                what: "total sum of squares",
            });
        }
        v
    } else {
        caller_square(tss_norm, inp.sum_exp, "total sum of squares")?
    };
    Ok(GoodnessOfFit {
        r_squared,
        adjusted_r_squared,
        centered,
        total_sum_of_squares: total,
        regression_sum_of_squares: caller_square(
            ess_norm,
            inp.sum_exp,
            "regression sum of squares",
        )?,
        residual_sum_of_squares: caller_square(rss_norm, inp.sum_exp, "residual sum of squares")?,
        overall,
        log_likelihood,
        aic: -2.0 * log_likelihood + 2.0 * m as f64,
        bic: -2.0 * log_likelihood + m as f64 * n.ln(),
        likelihood_parameters: m,
    })
}

/// Column norms of the triangle `r` (those of the design it factors).
fn column_norms(r: MatRef<'_, f64>) -> Vec<f64> {
    (0..r.ncols())
        .map(|j| (0..=j).map(|i| r[(i, j)] * r[(i, j)]).sum::<f64>().sqrt())
        .collect()
}

/// The 2-norm condition number of the scaled design, from the singular
/// values of its triangle `R`: the number of [`crate::FitReport::condition`].
pub(super) fn condition_number(r: MatRef<'_, f64>) -> Result<f64> {
    crate::linalg::svd::condition(r, 0.0)
}

/// The collinearity measures, from `R`, its inverse and the condition
/// number of [`condition_number`].
pub(super) fn collinearity(
    r: MatRef<'_, f64>,
    rinv: MatRef<'_, f64>,
    condition_number: f64,
    centered: bool,
) -> Collinearity {
    let p = r.ncols();
    let col_norm = column_norms(r);
    let vif: Vec<f64> = (0..p)
        .map(|j| {
            let row: f64 = (j..p).map(|c| rinv[(j, c)] * rinv[(j, c)]).sum();
            col_norm[j] * col_norm[j] * row
        })
        .collect();
    Collinearity {
        vif,
        condition_number,
        centered,
    }
}

/// `sum ln w_i` over the usable rows of `problem`, from the scaled
/// weights (`ln w_i = ln w~_i + ln ws`); 0 without weights.
pub(super) fn log_weights(problem: &Problem<'_>) -> f64 {
    match problem.weights() {
        Some(_) => {
            let ws = f64::from(exponent(problem.stats.weight_scale)) * std::f64::consts::LN_2;
            (0..problem.rows())
                .map(|i| problem.scaled_weight(i))
                .filter(|&v| v > 0.0)
                .map(|v| v.ln() + ws)
                .sum()
        }
        None => 0.0,
    }
}
