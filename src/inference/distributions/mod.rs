//! Distribution functions and quantiles of Student's t, the F and the
//! standard normal distribution, written for this crate (no special
//! function is borrowed from another crate).
//!
//! **Accuracy.** Tail probabilities have a relative error of about `1e-13`
//! (relative to the smaller tail, which is computed directly, never as
//! `1 - cdf`), for every degree of freedom from below `1e-3` to infinity and
//! every argument; the logarithms in [`Tails`] stay accurate below the
//! smallest double. Quantiles solve `ln(tail) = ln(p)` to a relative error
//! of about `1e-13` in the quantile (times its condition number
//! `|d ln q / d ln x|^-1`, which exceeds 1 only for very heavy tails, e.g.
//! `1 / df` for t far out), for every `p` in `(0, 1)`; near the median the
//! t and normal quantiles are solved on the central mass `P(0 < T < t) =
//! p - 1/2`, so quantiles near 0 keep their relative accuracy too.
//!
//! **Bounded time.** Every series, continued fraction and iteration has a
//! hard cap; hitting one is reported as [`Error::NoConvergence`] (none is
//! hit in the tests, whose worst cases use a small fraction of each cap).
//!
//! **Methods.** Student's t and F are incomplete beta functions
//! (`P(|T| > t) = I_x(df/2, 1/2)` with `x = df / (df + t^2)`, and
//! `P(F > f) = I_x(df2/2, df1/2)` with `x = df2 / (df2 + df1 f)`), computed
//! in `beta.rs`; the normal tail in `normal.rs`; the quantiles by a
//! bracketed Newton iteration in `solve.rs`. Student's t with `df >= 1e25`
//! is evaluated as the normal where `t^4 <= 4e-17 df` (every quantile with
//! a probability above the smallest double, `|t| < 39`, qualifies): the
//! two then differ by less than `1e-17` relative (the first corrections are
//! `(z^2 + 1) / (4 df)` relative for quantiles and about `t^4 / (4 df)` in
//! the logarithm of the tail). Beyond, the incomplete beta function is used
//! (it is accurate up to the largest double as df).

mod beta;
mod normal;
mod solve;
mod special;

use beta::{log_beta_tails, log_prefactor, BetaPoint};
use solve::solve;
use special::{ln_beta, ln_one_minus_exp};

use crate::error::{Error, Result};

/// Student's t with at least this many degrees of freedom is evaluated as
/// the standard normal (see the module documentation).
const T_AS_NORMAL_FROM: f64 = 1e25;
/// F degrees of freedom above this are evaluated at this value: the
/// distributions then agree to far below double precision (the quantiles
/// move by `O(1/df)` relative, below `1e-299`).
const F_DF_CAP: f64 = 1e300;

/// Both tails of a distribution at one point, and their natural
/// logarithms.
///
/// `lower = P(X <= x)` and `upper = P(X > x)`, each computed directly
/// (neither is `1 -` the other unless that loses nothing), so each has a
/// small relative error: about `1e-13` for every degree of freedom and
/// every argument (measured worst case `4e-14`), and `1e-15 |ln p|` for
/// probabilities below `e^-100`, where the rounding of the logarithm
/// itself dominates. `ln_lower` and `ln_upper` keep their accuracy
/// where the probability itself underflows to 0; they are `-inf` exactly
/// when the probability is exactly 0 (an F statistic `<= 0`, or an
/// infinite argument) or when the logarithm itself is below `-f64::MAX`
/// (a normal argument beyond `1.8e154`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tails {
    /// `P(X <= x)`.
    pub lower: f64,
    /// `P(X > x)`.
    pub upper: f64,
    /// `ln P(X <= x)`.
    pub ln_lower: f64,
    /// `ln P(X > x)`.
    pub ln_upper: f64,
}

impl Tails {
    fn from_logs(ln_lower: f64, ln_upper: f64) -> Self {
        Tails {
            lower: ln_lower.exp(),
            upper: ln_upper.exp(),
            ln_lower,
            ln_upper,
        }
    }

    /// A last guard: logarithms of probabilities are `<= 0` (and not NaN).
    fn checked(self, what: &'static str) -> Result<Self> {
        if self.ln_lower <= 0.0 && self.ln_upper <= 0.0 {
            Ok(self)
        } else {
            Err(Error::NoConvergence { what })
        }
    }

    fn mirrored(self) -> Self {
        Tails {
            lower: self.upper,
            upper: self.lower,
            ln_lower: self.ln_upper,
            ln_upper: self.ln_lower,
        }
    }
}

fn check_probability(name: &'static str, probability: f64) -> Result<()> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(Error::InvalidParameter {
            name,
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
    // Half of a subnormal df would lose its digits (or vanish).
    if df < 2.0 * f64::MIN_POSITIVE {
        return Err(Error::InvalidParameter {
            name,
            value: df,
            reason:
                "degrees of freedom must be at least 4.5e-308 (twice the smallest normal double)",
        });
    }
    Ok(())
}

fn check_argument(name: &'static str, value: f64) -> Result<()> {
    if value.is_nan() {
        return Err(Error::InvalidParameter {
            name,
            value,
            reason: "must not be NaN",
        });
    }
    Ok(())
}

// ---------------------------------------------------------------------------
// Student's t and the normal, split at 0: upper tail and central mass.

/// For `x >= 0`: `ln P(X > x)`, `ln P(0 < X < x)` and `ln(x f(x))` (`f` the
/// density), for Student's t with `df` degrees of freedom (the normal when
/// `df` is infinite or at least [`T_AS_NORMAL_FROM`]).
#[derive(Debug, Clone, Copy)]
struct Split {
    ln_upper: f64,
    ln_central: f64,
    ln_x_density: f64,
}

fn symmetric_split(x: f64, df: f64) -> Result<Split> {
    let half = -std::f64::consts::LN_2;
    if x == 0.0 {
        return Ok(Split {
            ln_upper: half,
            ln_central: f64::NEG_INFINITY,
            ln_x_density: f64::NEG_INFINITY,
        });
    }
    if x == f64::INFINITY {
        return Ok(Split {
            ln_upper: f64::NEG_INFINITY,
            ln_central: half,
            ln_x_density: f64::NEG_INFINITY,
        });
    }
    if df >= T_AS_NORMAL_FROM && x <= (4e-17 * df).powf(0.25) {
        let (ln_upper, ln_central) = normal::ln_upper_and_central(x)?;
        return Ok(Split {
            ln_upper,
            ln_central,
            ln_x_density: x.ln() + normal::ln_density(x),
        });
    }
    let a = 0.5 * df;
    let pt = t_point(x, df);
    let pair = log_beta_tails(a, 0.5, pt)?;
    Ok(Split {
        // P(T > t) = I_x(df/2, 1/2) / 2, P(0 < T < t) = (1 - I_x) / 2.
        ln_upper: pair.lower + half,
        ln_central: pair.upper + half,
        // d P(T > t) / d ln t = -x^a y^(1/2) / B(a, 1/2).
        ln_x_density: log_prefactor(a, 0.5, pt),
    })
}

/// `ln(1 + p / q)` for positive `p`, `q`, without overflow.
fn ln_1p_ratio(p: f64, q: f64) -> f64 {
    let r = p / q;
    if r.is_finite() {
        r.ln_1p()
    } else {
        p.ln() - q.ln()
    }
}

/// The incomplete-beta point of a statistic `w > 0` (an F value, or `t^2`
/// for Student's t, with `d1 = 1`): `P(F > w) = I_x(d2/2, d1/2)` with
/// `x = d2 / (d2 + d1 w)`, odds `r = y / x = d1 w / d2`. `lambda` is left
/// to the caller. The logarithms relative to the mean are chosen among two
/// exact forms each, so that no two large logarithms are subtracted:
/// `ln(x / x0) = ln x + ln(1 + d1/d2) = -ln w + ln(1 + d2/d1) - ln(1 + 1/r)`
/// and `ln(y / y0) = ln y + ln(1 + d2/d1) = ln w + ln(1 + d1/d2) - ln(1 + r)`.
fn statistic_point(w: f64, ln_w: f64, d1: f64, d2: f64) -> BetaPoint {
    let ratio = d1 / d2;
    let direct = ratio * w;
    let (r, ln_r) = if ratio.is_normal() && direct.is_normal() {
        (direct, direct.ln())
    } else {
        let ln_r = d1.ln() - d2.ln() + ln_w;
        (ln_r.exp(), ln_r)
    };
    let mut pt = BetaPoint::from_odds(r, ln_r);
    pt.ln_x_rel = if d1 <= d2 || r <= 1.0 {
        pt.ln_x + ln_1p_ratio(d1, d2)
    } else {
        -ln_w + ln_1p_ratio(d2, d1) - (1.0 / r).ln_1p()
    };
    pt.ln_y_rel = if d1 <= d2 && r <= 1.0 {
        ln_w + ln_1p_ratio(d1, d2) - r.ln_1p()
    } else {
        pt.ln_y + ln_1p_ratio(d2, d1)
    };
    pt
}

/// The incomplete-beta point for `|T| = t > 0`: `x = df / (df + t^2)`,
/// with `lambda` as for F with `f = t^2`, `df1 = 1`.
fn t_point(t: f64, df: f64) -> BetaPoint {
    let mut pt = statistic_point(t * t, 2.0 * t.ln(), 1.0, df);
    // 1 - 1/t^2 and 1 - t^2 in factored form: exact near t = 1.
    pt.lambda = if t >= 1.0 {
        0.5 * df * (((t - 1.0) * (1.0 + 1.0 / t) / t) * pt.y)
    } else {
        -0.5 * (((1.0 - t) * (1.0 + t)) * pt.x)
    };
    pt
}

/// `x > 0` with `P(X > x) = q`, `0 < q < 1/2` (t or normal).
fn symmetric_upper_root(q: f64, df: f64) -> Result<f64> {
    let what = "Student t quantile iteration (evaluation limit)";
    let root = if q >= 0.25 {
        // Near the median: solve on the central mass, whose target is exact.
        let c = 0.5 - q;
        let ln_density_at_0 = if df >= T_AS_NORMAL_FROM {
            -special::ln_sqrt_2pi()
        } else {
            -0.5 * df.ln() - ln_beta(0.5 * df, 0.5)
        };
        let start = c * (-ln_density_at_0).exp();
        solve(
            |x| {
                let s = symmetric_split(x, df)?;
                Ok((s.ln_central, (s.ln_x_density - s.ln_central).exp()))
            },
            c.ln(),
            true,
            start,
            what,
        )?
    } else {
        let ln_q = q.ln();
        let z = normal::start_upper_ln(ln_q);
        // Cornish-Fisher expansion of the t quantile (Abramowitz and
        // Stegun 26.7.5), two terms: a start only.
        let start = if df >= T_AS_NORMAL_FROM {
            z
        } else {
            let z2 = z * z;
            z + z * (z2 + 1.0) / (4.0 * df) + z * ((5.0 * z2 + 16.0) * z2 + 3.0) / (96.0 * df * df)
        };
        solve(
            |x| {
                let s = symmetric_split(x, df)?;
                Ok((s.ln_upper, -(s.ln_x_density - s.ln_upper).exp()))
            },
            ln_q,
            false,
            start,
            what,
        )?
    };
    root.value("Student t quantile (beyond the largest double)")
}

/// Quantile for t (or normal): `p` validated.
fn symmetric_quantile(p: f64, df: f64) -> Result<f64> {
    if p == 0.5 {
        return Ok(0.0);
    }
    if p > 0.5 {
        // 1 - p is exact for p in [1/2, 1].
        symmetric_upper_root(1.0 - p, df)
    } else {
        Ok(-symmetric_upper_root(p, df)?)
    }
}

fn symmetric_tails(x: f64, df: f64) -> Result<Tails> {
    let s = symmetric_split(x.abs(), df)?;
    // P(X <= |x|) = 1 - P(X > |x|), at least 1/2: nothing is lost.
    let tails = Tails::from_logs(ln_one_minus_exp(s.ln_upper), s.ln_upper)
        .checked("Student t or normal tails (non-finite value)")?;
    Ok(if x < 0.0 { tails.mirrored() } else { tails })
}

/// The value `t` with `P(T <= t) = probability` for Student's t with `df`
/// degrees of freedom; `df = f64::INFINITY` gives the standard normal
/// quantile.
///
/// For a two-sided interval at level `L`, use `probability = (1 + L) / 2`.
/// By symmetry, the `t` with upper tail `P(T > t) = u` is
/// `-student_t_quantile(u, df)`, which reaches upper tails far below
/// `1e-16`.
///
/// # Accuracy
/// Any `df > 0` (fractional, tiny, huge or infinite) and any `probability`
/// in `(0, 1)`: the relative error of the quantile is about `1e-13`
/// (measured worst case `5e-14`), divided by `df` in the heavy tails of
/// `df < 1`, where the quantile itself is that sensitive to the
/// probability. Near the median (`probability` close to 1/2) the quantile
/// keeps its relative accuracy: it is solved on `P(0 < T < t)`, whose
/// target `probability - 1/2` is exact. The computation is a bracketed
/// Newton iteration with a hard cap on its steps (at most 17 are used).
///
/// ```
/// use leastline::inference::student_t_quantile;
/// // With 2 degrees of freedom the quantile has the closed form
/// // (2p - 1) / sqrt(2 p (1 - p)).
/// let p = 0.975;
/// let t = student_t_quantile(p, 2.0)?;
/// let exact = (2.0 * p - 1.0) / (2.0 * p * (1.0 - p)).sqrt();
/// assert!((t - exact).abs() <= 1e-13 * exact);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `probability` is not strictly between
/// 0 and 1 or `df` is not positive (or is NaN); [`Error::Overflow`] when
/// the quantile exceeds the largest double (only for `df` well below 1,
/// where the tails are extremely heavy).
pub fn student_t_quantile(probability: f64, df: f64) -> Result<f64> {
    check_probability("probability", probability)?;
    check_df("df", df, true)?;
    symmetric_quantile(probability, df)
}

/// `P(T <= t)` and `P(T > t)` (and their logarithms) for Student's t with
/// `df` degrees of freedom; `df = f64::INFINITY` gives the standard normal.
/// `t` may be infinite.
///
/// ```
/// use leastline::inference::student_t_tails;
/// // One degree of freedom is the Cauchy distribution: P(T > t) = 1/2 - atan(t) / pi.
/// let tails = student_t_tails(3.0, 1.0)?;
/// let exact = 0.5 - 3.0f64.atan() / std::f64::consts::PI;
/// assert!((tails.upper - exact).abs() <= 1e-14 * exact);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `t` is NaN or `df` is not positive.
pub fn student_t_tails(t: f64, df: f64) -> Result<Tails> {
    check_argument("t", t)?;
    check_df("df", df, true)?;
    symmetric_tails(t, df)
}

/// The value `z` with `P(Z <= z) = probability` for the standard normal.
///
/// ```
/// use leastline::inference::{normal_quantile, normal_tails};
/// let z = normal_quantile(0.975)?;
/// let back = normal_tails(z)?;
/// assert!((back.upper - 0.025).abs() <= 1e-15);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `probability` is not strictly between
/// 0 and 1.
pub fn normal_quantile(probability: f64) -> Result<f64> {
    check_probability("probability", probability)?;
    symmetric_quantile(probability, f64::INFINITY)
}

/// `P(Z <= z)` and `P(Z > z)` (and their logarithms) for the standard
/// normal. `z` may be infinite.
///
/// # Errors
/// [`Error::InvalidParameter`] when `z` is NaN.
pub fn normal_tails(z: f64) -> Result<Tails> {
    check_argument("z", z)?;
    symmetric_tails(z, f64::INFINITY)
}

// ---------------------------------------------------------------------------
// F.

/// `ln P(F <= f)`, `ln P(F > f)` and `ln(f density(f))` for `f > 0` finite.
#[derive(Debug, Clone, Copy)]
struct FSplit {
    ln_lower: f64,
    ln_upper: f64,
    ln_x_density: f64,
}

fn f_split(f: f64, df1: f64, df2: f64) -> Result<FSplit> {
    let (d1, d2) = (df1.min(F_DF_CAP), df2.min(F_DF_CAP));
    let (a, b) = (0.5 * d2, 0.5 * d1);
    let mut pt = statistic_point(f, f.ln(), d1, d2);
    // lambda = a y - b x = (df1 / 2)(f - 1) x = (df2 / 2)(1 - 1/f) y: a
    // product, no cancellation; the second form where x may underflow.
    pt.lambda = if f >= 1.0 {
        a * (((f - 1.0) / f) * pt.y)
    } else {
        -b * ((1.0 - f) * pt.x)
    };
    let pair = log_beta_tails(a, b, pt)?;
    Ok(FSplit {
        // P(F > f) = I_x(df2/2, df1/2).
        ln_lower: pair.upper,
        ln_upper: pair.lower,
        ln_x_density: log_prefactor(a, b, pt),
    })
}

fn check_f_args(df1: f64, df2: f64) -> Result<()> {
    check_df("df1", df1, false)?;
    check_df("df2", df2, false)
}

/// `P(F <= f)` and `P(F > f)` (and their logarithms) for the F
/// distribution with `df1` (numerator) and `df2` (denominator) degrees of
/// freedom. `f <= 0` gives `lower = 0`, `f = +inf` gives `upper = 0`.
/// Degrees of freedom above `1e300` are treated as `1e300`.
///
/// ```
/// use leastline::inference::fisher_f_tails;
/// // With 2 numerator degrees of freedom, P(F > f) = (1 + 2 f / n)^(-n/2).
/// let (f, n) = (3.5, 12.0);
/// let tails = fisher_f_tails(f, 2.0, n)?;
/// let exact = (1.0 + 2.0 * f / n).powf(-0.5 * n);
/// assert!((tails.upper - exact).abs() <= 1e-13 * exact);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// [`Error::InvalidParameter`] when `f` is NaN or a degree of freedom is
/// not finite and positive (the limit `df2 = inf`, `df1 F` chi-square, is
/// not offered: use a large finite `df2`, e.g. `1e300`).
pub fn fisher_f_tails(f: f64, df1: f64, df2: f64) -> Result<Tails> {
    check_argument("f", f)?;
    check_f_args(df1, df2)?;
    if f <= 0.0 {
        return Ok(Tails::from_logs(f64::NEG_INFINITY, 0.0));
    }
    if f == f64::INFINITY {
        return Ok(Tails::from_logs(0.0, f64::NEG_INFINITY));
    }
    let s = f_split(f, df1, df2)?;
    Tails::from_logs(s.ln_lower, s.ln_upper).checked("F tails (non-finite value)")
}

/// A starting value for the F quantile with standard normal deviate `z`
/// (positive for upper quantiles): Paulson's normal approximation to the
/// cube root of F (E. Paulson, Annals of Mathematical Statistics 13,
/// 1942), solved for F; 1 when it has no positive solution.
fn f_start(z: f64, df1: f64, df2: f64) -> f64 {
    let (ca, cb) = (2.0 / (9.0 * df1), 2.0 / (9.0 * df2));
    // ((1 - cb) w - (1 - ca))^2 = z^2 (cb w^2 + ca), w = F^(1/3).
    let qa = (1.0 - cb) * (1.0 - cb) - z * z * cb;
    let qb = -2.0 * (1.0 - ca) * (1.0 - cb);
    let qc = (1.0 - ca) * (1.0 - ca) - z * z * ca;
    let disc = qb * qb - 4.0 * qa * qc;
    if qa > 0.0 && disc >= 0.0 {
        let root = disc.sqrt();
        let w = if z >= 0.0 {
            (-qb + root) / (2.0 * qa)
        } else {
            (-qb - root) / (2.0 * qa)
        };
        if w > 0.0 && w.is_finite() {
            return w * w * w;
        }
    }
    1.0
}

/// `f` with `P(F <= f) = p` (`lower`) or `P(F > f) = p` (not `lower`).
fn f_root(p: f64, lower: bool, df1: f64, df2: f64) -> Result<f64> {
    let ln_p = p.ln();
    // p <= 1/2 here: z > 0 with P(Z > z) = p.
    let z = normal::start_upper_ln(ln_p);
    let start = f_start(if lower { -z } else { z }, df1, df2);
    let root = solve(
        |x| {
            let s = f_split(x, df1, df2)?;
            Ok(if lower {
                (s.ln_lower, (s.ln_x_density - s.ln_lower).exp())
            } else {
                (s.ln_upper, -(s.ln_x_density - s.ln_upper).exp())
            })
        },
        ln_p,
        lower,
        start,
        "F quantile iteration (evaluation limit)",
    )?;
    root.value("F quantile (beyond the largest double)")
}

/// The value `f` with `P(F <= f) = probability` for the F distribution with
/// `df1` (numerator) and `df2` (denominator) degrees of freedom.
///
/// ```
/// use leastline::inference::{fisher_f_quantile, student_t_quantile};
/// // F(1, n) is the square of t(n): its quantile at p is the square of
/// // the t quantile at (1 + p) / 2.
/// let f = fisher_f_quantile(0.95, 1.0, 10.0)?;
/// let t = student_t_quantile(0.975, 10.0)?;
/// assert!((f - t * t).abs() <= 1e-13 * f);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// Quantiles below the smallest positive normal double (possible only for
/// tiny `probability` and small `df1`) are returned as 0.
///
/// # Accuracy
/// Any finite `df1, df2 > 0` and any `probability` in `(0, 1)`: the
/// relative error of the quantile is about `1e-13` (divided by the tail's
/// log-slope `|d ln P / d ln f|` where that is below 1, i.e. very heavy
/// tails). Where both degrees of freedom are so large that the distribution
/// function rises from `1e-300` to `1 - 1e-16` between two neighbouring
/// doubles, the double nearest the exact quantile is returned. Degrees of
/// freedom above `1e300` are treated as `1e300`.
///
/// # Errors
/// [`Error::InvalidParameter`] when `probability` is not strictly between
/// 0 and 1 or a degree of freedom is not finite and positive;
/// [`Error::Overflow`] when the quantile exceeds the largest double (only
/// for very small `df2`).
pub fn fisher_f_quantile(probability: f64, df1: f64, df2: f64) -> Result<f64> {
    check_probability("probability", probability)?;
    check_f_args(df1, df2)?;
    if probability <= 0.5 {
        f_root(probability, true, df1, df2)
    } else {
        // 1 - p is exact for p in [1/2, 1].
        f_root(1.0 - probability, false, df1, df2)
    }
}

/// The value `f` with upper tail `P(F > f) = upper`: the critical value of
/// an F test at significance level `upper`, for levels far below `1e-16`
/// too.
///
/// ```
/// use leastline::inference::fisher_f_upper_quantile;
/// // With 2 numerator degrees of freedom the upper tail is
/// // (1 + 2 f / n)^(-n/2), so f = (n / 2) (u^(-2/n) - 1).
/// let (u, n) = (1e-30, 20.0);
/// let f = fisher_f_upper_quantile(u, 2.0, n)?;
/// let exact = 0.5 * n * (u.powf(-2.0 / n) - 1.0);
/// assert!((f - exact).abs() <= 1e-12 * exact);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Errors
/// As [`fisher_f_quantile`], with `upper` in place of `probability`.
pub fn fisher_f_upper_quantile(upper: f64, df1: f64, df2: f64) -> Result<f64> {
    check_probability("upper", upper)?;
    check_f_args(df1, df2)?;
    if upper <= 0.5 {
        f_root(upper, false, df1, df2)
    } else {
        f_root(1.0 - upper, true, df1, df2)
    }
}

/// Two-sided p-value `P(|T| >= |t|)` for Student's t with `df > 0` degrees
/// of freedom. `t` may be infinite; NaN `t` or invalid `df` give 1.
pub(crate) fn t_two_sided_p(t: f64, df: f64) -> f64 {
    if t.is_nan() || df.is_nan() || df <= 0.0 {
        return 1.0;
    }
    match symmetric_split(t.abs(), df) {
        Ok(s) => (s.ln_upper + std::f64::consts::LN_2).exp().clamp(0.0, 1.0),
        Err(_) => 1.0,
    }
}

/// Upper tail `P(F >= f)` for the F distribution (1 for `f <= 0` or NaN, 0
/// for `f = +inf`, 1 for invalid degrees of freedom).
pub(crate) fn f_upper_tail(f: f64, df1: f64, df2: f64) -> f64 {
    if f.is_nan() || f <= 0.0 {
        return 1.0;
    }
    match fisher_f_tails(f, df1, df2) {
        Ok(t) => t.upper.clamp(0.0, 1.0),
        Err(_) => 1.0,
    }
}
