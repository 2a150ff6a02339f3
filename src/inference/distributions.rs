//! Quantiles and tail probabilities of the Student t, F and normal
//! distributions, all evaluated by the `statrs` crate (no special function
//! is written here): these functions only validate their arguments, pick
//! the distribution and guard the edges so that nothing panics.

use statrs::distribution::{ContinuousCDF, FisherSnedecor, Normal, StudentsT};
use statrs::function::beta::checked_beta_reg;

use crate::error::{Error, Result};

fn check_probability(probability: f64) -> Result<()> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(Error::InvalidParameter {
            name: "probability",
            value: probability,
            reason: "must lie strictly between 0 and 1",
        });
    }
    Ok(())
}

fn check_df(name: &'static str, df: f64, allow_infinite: bool) -> Result<()> {
    let ok = df > 0.0 && (df.is_finite() || (allow_infinite && df == f64::INFINITY));
    if !ok {
        return Err(Error::InvalidParameter {
            name,
            value: df,
            reason: if allow_infinite {
                "degrees of freedom must be > 0 (infinity allowed)"
            } else {
                "degrees of freedom must be finite and > 0"
            },
        });
    }
    Ok(())
}

/// The value `t` with `P(T <= t) = probability` for Student's t with `df`
/// degrees of freedom; `df = f64::INFINITY` gives the standard normal
/// quantile.
///
/// For a two-sided interval at level `L`, use `probability = (1 + L) / 2`.
///
/// ```
/// use leastline::inference::student_t_quantile;
/// let t = student_t_quantile(0.975, 10.0)?;
/// assert!((t - 2.228).abs() < 5e-4);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `probability` is not strictly between
/// 0 and 1 or `df` is not positive.
pub fn student_t_quantile(probability: f64, df: f64) -> Result<f64> {
    check_probability(probability)?;
    check_df("df", df, true)?;
    if df.is_infinite() {
        let normal = Normal::new(0.0, 1.0).map_err(|_| Error::InvalidParameter {
            name: "df",
            value: df,
            reason: "standard normal unavailable",
        })?;
        return Ok(normal.inverse_cdf(probability));
    }
    let t = StudentsT::new(0.0, 1.0, df).map_err(|_| Error::InvalidParameter {
        name: "df",
        value: df,
        reason: "degrees of freedom must be > 0",
    })?;
    Ok(t.inverse_cdf(probability))
}

/// The value `f` with `P(F <= f) = probability` for the F distribution with
/// `df1` (numerator) and `df2` (denominator) degrees of freedom.
///
/// ```
/// use leastline::inference::fisher_f_quantile;
/// let f = fisher_f_quantile(0.95, 1.0, 10.0)?;
/// assert!((f - 4.96).abs() < 5e-3);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `probability` is not strictly between
/// 0 and 1 or a degree of freedom is not finite and positive.
pub fn fisher_f_quantile(probability: f64, df1: f64, df2: f64) -> Result<f64> {
    check_probability(probability)?;
    check_df("df1", df1, false)?;
    check_df("df2", df2, false)?;
    let f = FisherSnedecor::new(df1, df2).map_err(|_| Error::InvalidParameter {
        name: "df1",
        value: df1,
        reason: "degrees of freedom must be finite and > 0",
    })?;
    Ok(f.inverse_cdf(probability))
}

/// Two-sided p-value `P(|T| >= |t|)` for Student's t with `df > 0` degrees
/// of freedom (`statrs` survival function). `t` may be infinite.
pub(crate) fn t_two_sided_p(t: f64, df: f64) -> f64 {
    if t.is_nan() {
        return 1.0;
    }
    match StudentsT::new(0.0, 1.0, df) {
        Ok(dist) => (2.0 * dist.sf(t.abs())).clamp(0.0, 1.0),
        Err(_) => 1.0,
    }
}

/// Upper tail `P(F >= f)` for the F distribution, as the regularised
/// incomplete beta function `I_x(df2 / 2, df1 / 2)` with
/// `x = df2 / (df2 + df1 f)` (`statrs`); forming `x` directly keeps
/// small p-values accurate.
pub(crate) fn f_upper_tail(f: f64, df1: f64, df2: f64) -> f64 {
    if f.is_nan() || f <= 0.0 {
        return 1.0;
    }
    if f.is_infinite() {
        return 0.0;
    }
    let x = df2 / (df2 + df1 * f);
    checked_beta_reg(0.5 * df2, 0.5 * df1, x.clamp(0.0, 1.0)).map_or(1.0, |p| p.clamp(0.0, 1.0))
}
