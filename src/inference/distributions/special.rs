//! Elementary special functions used by the distribution code: Stirling's
//! correction to the log-gamma function, differences of log-gammas that
//! keep their relative accuracy when the step is small, `z - ln(1 + z)`
//! without cancellation, and `ln(1 - e^v)`.
//!
//! Everything here is written for positive, finite arguments; the callers
//! validate their inputs first.

use crate::error::{Error, Result};

/// `ln(sqrt(2 pi))`.
pub(super) fn ln_sqrt_2pi() -> f64 {
    0.5 * std::f64::consts::TAU.ln()
}

/// Coefficients of Stirling's series for the log-gamma function,
/// `ln Gamma(x) = (x - 1/2) ln x - x + ln sqrt(2 pi) + sum_k c_k / x^(2k-1)`,
/// `c_k = B_(2k) / (2k (2k - 1))` with the Bernoulli numbers `B_2 = 1/6`,
/// `B_4 = -1/30`, `B_6 = 1/42`, `B_8 = -1/30`, `B_10 = 5/66`,
/// `B_12 = -691/2730`, `B_14 = 7/6`, `B_16 = -3617/510` (Abramowitz and
/// Stegun, Handbook of Mathematical Functions, 1964, eq. 6.1.40 and
/// Table 23.2). For `x >= 10` the first omitted term is below `2e-18`.
const STIRLING: [f64; 8] = [
    1.0 / 12.0,
    -1.0 / 360.0,
    1.0 / 1260.0,
    -1.0 / 1680.0,
    1.0 / 1188.0,
    -691.0 / 360_360.0,
    1.0 / 156.0,
    -3617.0 / 122_400.0,
];

/// Where Stirling's series is used directly.
const STIRLING_FROM: f64 = 10.0;

fn stirling_tail(x: f64) -> f64 {
    let z = 1.0 / (x * x);
    let mut s = 0.0;
    for c in STIRLING.iter().rev() {
        s = s * z + c;
    }
    s / x
}

/// Stirling's correction `delta(x) = ln Gamma(x) - [(x - 1/2) ln x - x +
/// ln sqrt(2 pi)]` for `x > 0`. Below 10 the recurrence
/// `Gamma(x) = Gamma(x + n) / (x (x + 1) ... (x + n - 1))` moves the
/// argument up; the absolute error is then about `1e-15`.
pub(super) fn stirling_delta(x: f64) -> f64 {
    if x >= STIRLING_FROM {
        return stirling_tail(x);
    }
    let n = (STIRLING_FROM - x).ceil();
    let shifted = x + n;
    let mut product = 1.0;
    let mut k = 0.0;
    while k < n {
        product *= x + k;
        k += 1.0;
    }
    stirling_tail(shifted) + (shifted - 0.5) * shifted.ln() - (x - 0.5) * x.ln() - n - product.ln()
}

/// `ln Gamma(x)` for `x > 0` (absolute error about `1e-15`, relative error
/// about `1e-16` for large `x`); the unit tests check Stirling's correction
/// through it.
#[cfg(test)]
pub(super) fn ln_gamma(x: f64) -> f64 {
    (x - 0.5) * x.ln() - x + ln_sqrt_2pi() + stirling_delta(x)
}

/// `ln Gamma(x + h) - ln Gamma(x)` for `x > 0`, `h >= 0`, with a relative
/// error of a few ulps even when `h` is tiny (no difference of two large
/// log-gammas is formed).
pub(super) fn ln_gamma_step(x: f64, h: f64) -> f64 {
    let mut x = x;
    let mut sum = 0.0;
    while x < STIRLING_FROM {
        sum -= (h / x).ln_1p();
        x += 1.0;
    }
    // With x >= 10: h ln x plus the small remainder, which stays right
    // even where h / x underflows.
    sum + h * x.ln() + ln_gamma_step_over_power(x, h)
}

/// `ln Gamma(x + h) - ln Gamma(x) - h ln x` for `x >= 10`, `h >= 0`: small
/// when `h` is small against `x`, and formed without the large `h ln x`:
/// `(h - 1/2) ln(1 + h/x) - x g(h/x) + delta(x + h) - delta(x)` with
/// `g(z) = z - ln(1 + z)`.
pub(super) fn ln_gamma_step_over_power(x: f64, h: f64) -> f64 {
    let q = h / x;
    (h - 0.5) * q.ln_1p() - x * log1p_gap(q) + stirling_delta_step(x, h)
}

/// `delta(x + h) - delta(x)` for `x >= 10`, term by term:
/// `(x + h)^-m - x^-m = x^-m expm1(-m ln(1 + h / x))`.
fn stirling_delta_step(x: f64, h: f64) -> f64 {
    let l1 = (h / x).ln_1p();
    let mut d = 0.0;
    let mut xm = x;
    let x2 = x * x;
    for (k, c) in STIRLING.iter().enumerate() {
        let m = (2 * k + 1) as f64;
        d += c * (-m * l1).exp_m1() / xm;
        xm *= x2;
    }
    d
}

/// `ln(a / (a + b))` for `a, b > 0` without overflow or cancellation.
pub(super) fn ln_share(a: f64, b: f64) -> f64 {
    if a >= b {
        -(b / a).ln_1p()
    } else {
        a.ln() - (b.ln() + (a / b).ln_1p())
    }
}

/// `z - ln(1 + z)` for `z > -1`, accurate to a few ulps relative (a series
/// in `w = z / (2 + z)` near 0, where `ln(1 + z) = 2 atanh(w)`).
pub(super) fn log1p_gap(z: f64) -> f64 {
    if z.abs() <= 0.5 {
        // z - 2 atanh(w) = 2 w^2 / (1 - w) - 2 (w^3/3 + w^5/5 + ...), |w| <= 1/3.
        let w = z / (2.0 + z);
        let w2 = w * w;
        let mut s = 0.0;
        let mut k = 35.0;
        while k >= 3.0 {
            s = s * w2 + 1.0 / k;
            k -= 2.0;
        }
        2.0 * w2 / (1.0 - w) - 2.0 * w * w2 * s
    } else {
        z - z.ln_1p()
    }
}

/// `ln(1 - e^v)` for `v <= 0` (M. Maechler's switch at `-ln 2`).
pub(super) fn ln_one_minus_exp(v: f64) -> f64 {
    if v > -std::f64::consts::LN_2 {
        (-v.exp_m1()).ln()
    } else {
        (-v.exp()).ln_1p()
    }
}

/// `ln B(a, b)` for `a, b > 0`, from Stirling's form: `ln B` is
/// `ln sqrt(2 pi) + (a - 1/2) ln a + (b - 1/2) ln b - (a + b - 1/2) ln(a + b)`
/// plus `delta(a) + delta(b) - delta(a + b)`, rearranged so that no large
/// terms cancel.
pub(super) fn ln_beta(a: f64, b: f64) -> f64 {
    ln_sqrt_2pi() + (a - 0.5) * ln_share(a, b) + (b - 0.5) * ln_share(b, a) - 0.5 * ln_sum(a, b)
        + stirling_delta(a)
        + stirling_delta(b)
        - stirling_delta(a + b)
}

/// The continued fraction `b0 + a1 / (b1 + a2 / (b2 + ...))`, with
/// `term(k) = (a_k, b_k)`, by the modified Lentz method (W. J. Lentz,
/// Applied Optics 15, 1976; I. J. Thompson and A. R. Barnett, J. Comput.
/// Phys. 64, 1986): stops when a step changes the value by less than an
/// ulp; `what` names the fraction when `max_terms` are not enough.
pub(super) fn continued_fraction(
    b0: f64,
    mut term: impl FnMut(f64) -> (f64, f64),
    max_terms: usize,
    what: &'static str,
) -> Result<f64> {
    const TINY: f64 = 1e-300;
    let mut f = if b0 == 0.0 { TINY } else { b0 };
    let mut c = f;
    let mut d = 0.0;
    for k in 1..=max_terms {
        let (num, den) = term(k as f64);
        d = den + num * d;
        if d == 0.0 {
            d = TINY;
        }
        c = den + num / c;
        if c == 0.0 {
            c = TINY;
        }
        d = 1.0 / d;
        let delta = c * d;
        f *= delta;
        if (delta - 1.0).abs() <= f64::EPSILON {
            return Ok(f);
        }
    }
    Err(Error::NoConvergence { what })
}

/// `ln(a + b)` for positive `a`, `b` without overflow.
pub(super) fn ln_sum(a: f64, b: f64) -> f64 {
    let (hi, lo) = if a >= b { (a, b) } else { (b, a) };
    hi.ln() + (lo / hi).ln_1p()
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    /// ln Gamma at integers is ln((n - 1)!), exact in rational arithmetic.
    #[test]
    fn ln_gamma_matches_factorials() {
        let mut factorial = 1.0f64;
        for n in 1..=30u32 {
            let x = f64::from(n);
            let got = ln_gamma(x);
            let want = factorial.ln();
            assert!(
                (got - want).abs() <= 4e-15 * want.abs().max(1.0),
                "{n}: {got} {want}"
            );
            factorial *= x;
        }
        // Gamma(1/2) = sqrt(pi).
        let half = ln_gamma(0.5) - 0.5 * std::f64::consts::PI.ln();
        assert!(half.abs() < 2e-15, "{half}");
    }

    #[test]
    fn log_gamma_step_agrees_with_differences() {
        for &(x, h) in &[(0.5, 0.25), (3.0, 1.0), (12.5, 0.5), (1e-3, 0.7)] {
            let direct = ln_gamma(x + h) - ln_gamma(x);
            let step = ln_gamma_step(x, h);
            assert!((direct - step).abs() < 1e-14 * direct.abs().max(1.0));
        }
        // Gamma(x + 1) = x Gamma(x).
        for &x in &[1e-300, 1e-8, 0.3, 7.0, 1e6, 1e200] {
            let got = ln_gamma_step(x, 1.0);
            assert!((got - x.ln()).abs() <= 2e-15 * x.ln().abs().max(1.0), "{x}");
        }
    }

    #[test]
    fn log_gamma_step_over_power_agrees() {
        for &(x, h) in &[(10.0, 0.5), (37.5, 1e-3), (1e6, 0.3), (1e250, 1e-300)] {
            let direct = ln_gamma_step(x, h) - h * x.ln();
            let formed = ln_gamma_step_over_power(x, h);
            assert!(
                (direct - formed).abs() <= 1e-13 * (h * x.ln()).abs().max(1e-300),
                "{x} {h}"
            );
        }
        // ln Gamma(x + 1) - ln Gamma(x) - ln x = 0.
        assert!(ln_gamma_step_over_power(1e200, 1.0).abs() < 1e-14);
    }

    #[test]
    fn log1p_gap_is_continuous_and_positive() {
        for &z in &[-0.9, -0.5, -1e-3, -1e-12, 1e-200, 1e-8, 0.3, 0.5, 2.0] {
            let g = log1p_gap(z);
            assert!(g >= 0.0);
            if z.abs() > 1e-3 {
                let direct = z - z.ln_1p();
                assert!((g - direct).abs() <= 1e-13 * direct, "{z}: {g} {direct}");
            }
        }
        // Continuity across the switch at 0.5.
        let below = log1p_gap(0.5);
        let above = log1p_gap(0.500_000_000_000_001);
        assert!((below - above).abs() < 1e-14);
    }
}
