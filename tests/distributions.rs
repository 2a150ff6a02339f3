//! Student's t, F and normal distribution functions and quantiles, checked
//! against exact closed forms and identities, a published table, and round
//! trips over the whole range of probabilities and degrees of freedom
//! (issue 10, items 1 and 11).
//!
//! Sources, named beside each check:
//! - closed forms of the t distribution with 1, 2 and 4 degrees of freedom,
//!   of F with 2 numerator or denominator degrees of freedom, and the
//!   finite sums for integer degrees of freedom (Abramowitz and Stegun,
//!   Handbook of Mathematical Functions, 1964, eqs. 26.7.3, 26.7.4 and
//!   26.6.4–26.6.8; each is re-derived in its comment);
//! - the Cornish–Fisher expansion of the t quantile in powers of `1 / df`
//!   (Abramowitz and Stegun 26.7.5);
//! - the asymptotic and Taylor series of the normal tail (Abramowitz and
//!   Stegun 26.2.10 and 26.2.12);
//! - NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.2,
//!   "Critical Values of the Student's t Distribution" (three decimals).

use leastline::inference::{
    fisher_f_quantile, fisher_f_tails, fisher_f_upper_quantile, normal_quantile, normal_tails,
    student_t_quantile, student_t_tails, Tails,
};
use leastline::Error;
use proptest::prelude::*;
use std::f64::consts::{PI, SQRT_2};

/// `|got - want| <= tol * |want|`.
fn close(got: f64, want: f64, tol: f64) -> bool {
    (got - want).abs() <= tol * want.abs()
}

/// Logarithms of probabilities agree to a relative error `tol` in the
/// probability, loosened in proportion to `|ln p|` beyond 100 (an exponent
/// of size `L` carries a rounding error of about `L * 1e-16`).
fn close_ln(got: f64, want: f64, tol: f64) -> bool {
    (got - want).abs() <= tol * (want.abs() / 100.0).max(1.0)
}

/// Tolerance for a quantile whose tail probability is `q` and whose tail
/// has log-slope `slope = |d ln q / d ln x|`: the logarithm of `q` alone
/// carries a rounding error of about `1e-16 |ln q|`, which the quantile
/// inherits divided by the slope (heavy tails, small slope, amplify it).
fn quantile_tol(q: f64, slope: f64) -> f64 {
    5e-14 * (q.ln().abs() / 100.0).max(1.0) / slope.min(1.0)
}

/// Both tails agree in their logarithms (relative `5e-14` in each
/// probability).
fn assert_same_tails(got: Tails, want: Tails, context: &str) {
    assert!(
        close_ln(got.ln_upper, want.ln_upper, 5e-14),
        "{context}: upper {} vs {}",
        got.ln_upper,
        want.ln_upper
    );
    assert!(
        close_ln(got.ln_lower, want.ln_lower, 5e-14),
        "{context}: lower {} vs {}",
        got.ln_lower,
        want.ln_lower
    );
}

/// Probabilities from `1e-300` up to `1 - 1e-15`, both tails densely.
fn probability_grid() -> Vec<f64> {
    let mut ps = vec![];
    for e in [
        -300.0, -250.0, -200.0, -150.0, -100.0, -60.0, -30.0, -16.0, -10.0, -6.0, -3.0, -2.0,
    ] {
        ps.push(10f64.powf(e));
    }
    ps.extend([
        0.025,
        0.05,
        0.1,
        0.2,
        0.25,
        0.3,
        0.4,
        0.45,
        0.49,
        0.5 - 1e-6,
        0.5 - 1e-12,
        0.5,
        0.5 + 1e-12,
        0.5 + 1e-6,
        0.51,
        0.6,
        0.75,
        0.9,
        0.975,
        0.99,
        1.0 - 1e-6,
        1.0 - 1e-10,
        1.0 - 1e-15,
    ]);
    ps
}

// ---------------------------------------------------------------------------
// Exact closed forms of Student's t.

/// One degree of freedom is the Cauchy distribution:
/// `P(T <= t) = 1/2 + atan(t) / pi`, so `P(T > t) = atan(1 / t) / pi` for
/// `t > 0`, and the quantile is `tan(pi (p - 1/2))`, written as
/// `-1 / tan(pi p)` for `p <= 1/4` and `-tan(pi (1/2 - p))` for
/// `1/4 < p < 1/2` so that it is evaluated without cancellation.
#[test]
fn cauchy_closed_form() {
    for t in [1e-300f64, 1e-8, 0.3, 1.0, 2.5, 1e3, 1e10, 1e100, 1e300] {
        let tails = student_t_tails(t, 1.0).unwrap();
        let upper = (1.0 / t).atan() / PI;
        let lower = 0.5 + t.atan() / PI;
        assert!(
            close_ln(tails.ln_upper, upper.ln(), 5e-14),
            "t {t}: {} vs {upper}",
            tails.upper
        );
        assert!(close(tails.lower, lower, 1e-15), "t {t}");
        let mirrored = student_t_tails(-t, 1.0).unwrap();
        assert_eq!(mirrored.lower, tails.upper);
    }
    for p in probability_grid() {
        let q = p.min(1.0 - p);
        let magnitude = if q <= 0.25 {
            1.0 / (PI * q).tan()
        } else {
            (PI * (0.5 - q)).tan()
        };
        let exact = if p < 0.5 { -magnitude } else { magnitude };
        let got = student_t_quantile(p, 1.0).unwrap();
        if p == 0.5 {
            assert_eq!(got, 0.0);
        } else {
            assert!(
                close(got, exact, quantile_tol(q, 1.0)),
                "p {p}: {got} vs {exact}"
            );
        }
    }
}

/// Two degrees of freedom: `P(T <= t) = 1/2 + t / (2 sqrt(2 + t^2))`, so
/// `P(T > t) = 1 / (h (h + t))` with `h = sqrt(2 + t^2)`, and the quantile
/// is `(2p - 1) / sqrt(2 p (1 - p))`.
#[test]
fn two_degrees_closed_form() {
    for t in [1e-300f64, 1e-8, 0.3, 1.0, 2.5, 1e3, 1e10, 1e100, 1e300] {
        let h = t.hypot(SQRT_2);
        let ln_upper = -(h.ln() + (h + t).ln());
        let tails = student_t_tails(t, 2.0).unwrap();
        assert!(close_ln(tails.ln_upper, ln_upper, 5e-14), "t {t}");
        assert!(close(tails.lower, 0.5 + 0.5 * t / h, 1e-15), "t {t}");
    }
    for p in probability_grid() {
        let exact = (2.0 * p - 1.0) / (2.0 * p * (1.0 - p)).sqrt();
        let got = student_t_quantile(p, 2.0).unwrap();
        let q = p.min(1.0 - p);
        assert!(
            close(got, exact, quantile_tol(q, 1.0)) || (p == 0.5 && got == 0.0),
            "p {p}: {got} vs {exact}"
        );
    }
}

/// Four degrees of freedom. With `t = 2 tan(theta)` and `s = sin(theta) =
/// t / sqrt(4 + t^2)`, `P(0 < T < t) = (3/4)(s - s^3/3)` (the integral of
/// `cos^3` over `B(2, 1/2) = 4/3`), so `P(T > t) = (1 - s)^2 (2 + s) / 4`,
/// with `1 - s = 4 / (h (h + t))`, `h = sqrt(4 + t^2)`.
///
/// The quantile solves the cubic `s^3 - 3s + 2 - 4q = 0` (`q` the upper
/// tail): with `s = 2 cos(phi)`, `cos(3 phi) = 2q - 1`, so `s = 2 cos(pi/3 +
/// beta)` with `beta = (2/3) asin(sqrt(q))`; equivalently `s = -2 sin(gamma)`,
/// `gamma = (2/3) asin((2q - 1) / (sqrt(2) (sqrt(q) + sqrt(1 - q))))`
/// (accurate near the median), and `1 - s = 2 sin^2(beta/2) + sqrt(3)
/// sin(beta)` (accurate far out). Then `t = 2 s / sqrt((1 - s)(1 + s))`.
#[test]
fn four_degrees_closed_form() {
    for t in [1e-300f64, 1e-8, 0.3, 1.0, 2.5, 1e3, 1e10, 1e100, 1e300] {
        let h = t.hypot(2.0);
        let s = t / h;
        let ln_one_minus_s = 4f64.ln() - h.ln() - (h + t).ln();
        let ln_upper = 2.0 * ln_one_minus_s + (2.0 + s).ln() - 4f64.ln();
        let tails = student_t_tails(t, 4.0).unwrap();
        assert!(close_ln(tails.ln_upper, ln_upper, 5e-14), "t {t}");
    }
    for p in probability_grid() {
        if p == 0.5 {
            continue;
        }
        let q = p.min(1.0 - p);
        let beta = (2.0 / 3.0) * q.sqrt().asin();
        let gamma =
            (2.0 / 3.0) * ((2.0 * q - 1.0) / (SQRT_2 * (q.sqrt() + (1.0 - q).sqrt()))).asin();
        let s = -2.0 * gamma.sin();
        let one_minus_s = if q < 0.1 {
            2.0 * (0.5 * beta).sin().powi(2) + 3f64.sqrt() * beta.sin()
        } else {
            1.0 - s
        };
        let magnitude = 2.0 * s / (one_minus_s * (2.0 - one_minus_s)).sqrt();
        let exact = if p < 0.5 { -magnitude } else { magnitude };
        let got = student_t_quantile(p, 4.0).unwrap();
        assert!(
            close(got, exact, quantile_tol(q, 1.0)),
            "p {p}: {got} vs {exact}"
        );
    }
}

/// Integer degrees of freedom have finite sums for the central mass
/// `A = P(|T| < t)` (Abramowitz and Stegun 26.7.3 and 26.7.4), with
/// `theta = atan(t / sqrt(df))`:
/// even `df`: `A = sin(theta) [1 + (1/2) cos^2 + (1*3)/(2*4) cos^4 + ... +
/// (1*3*...*(df-3))/(2*4*...*(df-2)) cos^(df-2)]`;
/// odd `df > 1`: `A = (2/pi) [theta + sin(theta) cos(theta) (1 + (2/3) cos^2 +
/// ... + (2*4*...*(df-3))/(1*3*...*(df-2)) cos^(df-3))]`.
/// Compared where neither side loses digits to a subtraction (`0.01 <= A <= 0.99`).
#[test]
fn integer_degrees_finite_sums() {
    for df in 3..=40u32 {
        let n = f64::from(df);
        for t in [0.02, 0.1, 0.5, 1.0, 1.7, 2.5, 4.0, 6.0] {
            let theta = (t / n.sqrt()).atan();
            let c2 = theta.cos().powi(2);
            let central = if df % 2 == 0 {
                let (mut sum, mut term) = (1.0, 1.0);
                for k in 1..df / 2 {
                    let k = f64::from(k);
                    term *= (2.0 * k - 1.0) / (2.0 * k) * c2;
                    sum += term;
                }
                theta.sin() * sum
            } else {
                let (mut sum, mut term) = (1.0, 1.0);
                for k in 1..(df - 1) / 2 {
                    let k = f64::from(k);
                    term *= (2.0 * k) / (2.0 * k + 1.0) * c2;
                    sum += term;
                }
                2.0 / PI * (theta + theta.sin() * theta.cos() * sum)
            };
            if !(0.01..=0.99).contains(&central) {
                continue;
            }
            let tails = student_t_tails(t, n).unwrap();
            let upper = 0.5 * (1.0 - central);
            // The reference loses up to 100x to 1 - A (A <= 0.99).
            assert!(
                close(tails.upper, upper, 1e-13),
                "df {df} t {t}: {} vs {upper}",
                tails.upper
            );
            assert!(
                close(tails.lower - 0.5, 0.5 * central, 1e-13),
                "df {df} t {t}"
            );
            // The quantile of the central mass: p = 1/2 + A/2.
            let back = student_t_quantile(0.5 + 0.5 * central, n).unwrap();
            assert!(close(back, t, 1e-13), "df {df} t {t}: quantile {back}");
        }
    }
}

// ---------------------------------------------------------------------------
// The normal distribution and the large-df limit.

/// Taylor series `Phi(z) - 1/2 = (1 / sqrt(2 pi)) sum_n (-1)^n z^(2n+1) /
/// (2^n n! (2n + 1))` (Abramowitz and Stegun 26.2.10), summed in full for
/// `z <= 1`; and the asymptotic series `P(Z > z) = phi(z) / z (1 - 1/z^2 +
/// 3/z^4 - 15/z^6 + 105/z^8 - 945/z^10 + ...)` (26.2.12), whose omitted
/// terms are below `1e-15` relative for `z >= 40`.
#[test]
fn normal_series_and_asymptotics() {
    let ln_sqrt_2pi = 0.5 * (2.0 * PI).ln();
    for z in [1e-300f64, 1e-10, 1e-3, 0.1, 0.5, 0.9, 1.0] {
        let (mut sum, mut term, mut n) = (0.0f64, z, 0.0f64);
        while term.abs() > 1e-18 * sum.abs() || n < 1.0 {
            sum += term / (2.0 * n + 1.0);
            n += 1.0;
            term *= -z * z / (2.0 * n);
        }
        let central = sum / (2.0 * PI).sqrt();
        let tails = normal_tails(z).unwrap();
        assert!(close(tails.upper, 0.5 - central, 1e-15), "z {z}");
        // Near the median the quantile inverts the central mass exactly.
        let back = normal_quantile(0.5 + central).unwrap();
        if central > 1e-17 {
            // 1/2 + central is rounded: compare through the rounded value.
            let rounded = (0.5 + central) - 0.5;
            assert!(close(back, z * rounded / central, 1e-13), "z {z}: {back}");
        }
    }
    for z in [40.0, 100.0, 1e3, 1e6, 1e100, 1e150] {
        let w = 1.0 / (z * z);
        let series =
            1.0 - w * (1.0 - 3.0 * w * (1.0 - 5.0 * w * (1.0 - 7.0 * w * (1.0 - 9.0 * w))));
        let ln_upper = -0.5 * z * z - ln_sqrt_2pi - z.ln() + series.ln();
        let tails = normal_tails(z).unwrap();
        assert!(close_ln(tails.ln_upper, ln_upper, 5e-14), "z {z}");
        let mirrored = normal_tails(-z).unwrap();
        assert_eq!(mirrored.ln_lower, tails.ln_upper);
    }
}

/// Inverse of the Taylor series near the median: with `c = sqrt(2 pi) (p -
/// 1/2)`, `z = c + c^3/6 + 7 c^5/120 + 127 c^7/5040 + ...` (the series
/// reversion of 26.2.10); for `|p - 1/2| <= 1e-4` the omitted terms are
/// below `1e-30` relative.
#[test]
fn normal_quantile_near_the_median() {
    for d in [1e-17, 1e-15, 1e-12, 1e-9, 1e-6, 1e-4, -1e-4, -1e-9, -5e-17] {
        let p: f64 = 0.5 + d;
        let delta = p - 0.5; // exact
        let c = (2.0 * PI).sqrt() * delta;
        let c2 = c * c;
        let exact = c * (1.0 + c2 / 6.0 + 7.0 * c2 * c2 / 120.0 + 127.0 * c2 * c2 * c2 / 5040.0);
        let got = normal_quantile(p).unwrap();
        assert!(
            close(got, exact, 1e-14),
            "p - 1/2 = {delta}: {got} vs {exact}"
        );
    }
}

/// The Cornish–Fisher expansion of the t quantile (Abramowitz and Stegun
/// 26.7.5): `t = z + g1/df + g2/df^2 + g3/df^3 + g4/df^4 + O(df^-5)` with
/// `g1 = (z^3 + z)/4`, `g2 = (5z^5 + 16z^3 + 3z)/96`, `g3 = (3z^7 + 19z^5 +
/// 17z^3 - 15z)/384`, `g4 = (79z^9 + 776z^7 + 1482z^5 - 1920z^3 - 945z)/92160`.
fn cornish_fisher(z: f64, df: f64) -> f64 {
    let z2 = z * z;
    let g1 = z * (z2 + 1.0) / 4.0;
    let g2 = z * ((5.0 * z2 + 16.0) * z2 + 3.0) / 96.0;
    let g3 = z * (((3.0 * z2 + 19.0) * z2 + 17.0) * z2 - 15.0) / 384.0;
    let g4 = z * ((((79.0 * z2 + 776.0) * z2 + 1482.0) * z2 - 1920.0) * z2 - 945.0) / 92160.0;
    let v = 1.0 / df;
    z + v * (g1 + v * (g2 + v * (g3 + v * g4)))
}

/// For large df the t quantile follows the expansion to double precision
/// (its first omitted term is below `1e-17` relative for `df >= 1e4` and
/// `|z| <= 8`), in the tails and near the median alike; and t with an
/// infinite df is the normal.
#[test]
fn large_df_follows_the_expansion() {
    for df in [
        1e4, 1e5, 1e7, 2e7, 1e8, 1e10, 1e12, 1e15, 1e20, 1e24, 1e30, 1e300,
    ] {
        for p in [
            1e-15,
            1e-6,
            0.001,
            0.025,
            0.3,
            0.5 - 1e-9,
            0.5 + 1e-13,
            0.6,
            0.975,
            0.999_999,
        ] {
            let z = normal_quantile(p).unwrap();
            let want = cornish_fisher(z, df);
            let got = student_t_quantile(p, df).unwrap();
            assert!(close(got, want, 2e-14), "df {df} p {p}: {got} vs {want}");
        }
    }
    for p in probability_grid() {
        let z = normal_quantile(p).unwrap();
        assert_eq!(student_t_quantile(p, f64::INFINITY).unwrap(), z);
        // At df = 1e12 and 1e15 the t quantile is the normal one to 1e-12.
        for df in [1e12, 1e15] {
            let t = student_t_quantile(p, df).unwrap();
            assert!(
                close(t, z, 1e-12 + (z * z + 1.0) / (4.0 * df)),
                "df {df} p {p}"
            );
        }
    }
}

/// The tails of t with `df = 1e20` (incomplete beta functions) and of the
/// normal (its own series and continued fraction) agree: they differ by
/// `O(z^4 / df)`, below `1e-16` here. Two independent computations.
#[test]
fn normal_tails_match_t_with_huge_df() {
    for z in [
        1e-200, 1e-5, 0.3, 1.0, 1.9, 2.0, 2.1, 3.0, 5.0, 8.0, 15.0, 25.0, 38.0,
    ] {
        let t = student_t_tails(z, 1e20).unwrap();
        assert_same_tails(t, normal_tails(z).unwrap(), &format!("z {z}"));
    }
}

// ---------------------------------------------------------------------------
// Exact closed forms and identities of F.

/// `F(1, n)` is `t(n)^2`: `P(F > t^2) = 2 P(T > t)`, and the upper quantile
/// of F at `u` is the square of the t quantile at upper tail `u / 2`. For
/// `n >= 1e25` the t side is evaluated by the normal code and the F side by
/// the incomplete beta function: independent computations.
#[test]
fn f_with_one_numerator_degree_is_t_squared() {
    for n in [0.5, 1.0, 3.0, 10.0, 1e3, 1e6, 1e10, 1e20, 1e30, 1e300] {
        // Dyadic t, so that t^2 is exact.
        for t in [0.015_625, 0.5, 1.0, 1.5, 3.0, 10.0, 1024.0, 2f64.powi(100)] {
            let f = fisher_f_tails(t * t, 1.0, n).unwrap();
            let s = student_t_tails(t, n).unwrap();
            assert!(
                close_ln(f.ln_upper, s.ln_upper + 2f64.ln(), 5e-14),
                "n {n} t {t}: {} vs {}",
                f.ln_upper,
                s.ln_upper + 2f64.ln()
            );
        }
        for u in [1e-300, 1e-100, 1e-20, 1e-5, 0.05, 0.5, 0.9] {
            let f = fisher_f_upper_quantile(u, 1.0, n);
            let t = student_t_quantile(0.5 * u, n).map(|t| t * t);
            match (f, t) {
                (Ok(f), Ok(t2)) if t2.is_finite() => {
                    let slope = 0.5 * n.min(1.0);
                    assert!(
                        close(f, t2, 2.0 * quantile_tol(u, slope)),
                        "n {n} u {u}: {f} vs {t2}"
                    )
                }
                // Beyond the largest double, as F or already as t.
                (Err(Error::Overflow { .. }), Ok(t2)) => assert!(t2.is_infinite(), "n {n} u {u}"),
                (Err(Error::Overflow { .. }), Err(Error::Overflow { .. })) => {}
                other => panic!("n {n} u {u}: {other:?}"),
            }
        }
    }
}

/// Two numerator degrees of freedom: `P(F > f) = (1 + 2f/n)^(-n/2)`, whose
/// exact inverse is `f = (n/2) (u^(-2/n) - 1)`; two denominator degrees of
/// freedom: `P(F <= f) = (1 + 2/(d f))^(-d/2)` (since `1/F` is `F(2, d)`).
#[test]
fn f_with_two_degrees_closed_form() {
    for n in [0.3f64, 1.0, 2.0, 7.0, 50.0, 1e4, 1e8, 1e15, 1e300] {
        for f in [1e-10f64, 0.01, 0.5, 1.0, 3.0, 20.0, 1e3, 1e10] {
            let ln_upper = -0.5 * n * (2.0 * f / n).ln_1p();
            let tails = fisher_f_tails(f, 2.0, n).unwrap();
            assert!(
                close_ln(tails.ln_upper, ln_upper, 5e-14),
                "F(2, {n}) at {f}"
            );
            if (n * f).is_finite() {
                let ln_lower = -0.5 * n * (2.0 / (n * f)).ln_1p();
                let tails = fisher_f_tails(f, n, 2.0).unwrap();
                assert!(
                    close_ln(tails.ln_lower, ln_lower, 5e-14),
                    "F({n}, 2) at {f}"
                );
            }
        }
        for u in [1e-300f64, 1e-30, 1e-3, 0.05, 0.5, 0.95, 1.0 - 1e-12] {
            // (n/2) expm1(v), v = -(2/n) ln u; for v below 1e-200 (where v
            // itself may be subnormal) its two-term expansion is exact.
            let v = (2.0 / n) * -u.ln();
            let exact = if v < 1e-200 {
                -u.ln() * (1.0 + 0.5 * v)
            } else {
                0.5 * n * v.exp_m1()
            };
            let got = match fisher_f_upper_quantile(u, 2.0, n) {
                Err(Error::Overflow { .. }) => {
                    assert!(
                        exact.is_infinite(),
                        "F(2, {n}) upper {u}: refused, exact {exact}"
                    );
                    continue;
                }
                other => other.unwrap(),
            };
            let slope = (0.5 * n).min(1.0);
            assert!(
                close(got, exact, quantile_tol(u, slope)),
                "F(2, {n}) upper {u}: {got} vs {exact}"
            );
            // The same point through the lower-tail quantile, where 1 - u is exact.
            if u >= 0.5 {
                let got = fisher_f_quantile(1.0 - u, 2.0, n).unwrap();
                assert!(
                    close(got, exact, quantile_tol(u, slope)),
                    "F(2, {n}) lower {}",
                    1.0 - u
                );
            }
        }
    }
}

/// With an even numerator df `2m` the upper tail is a finite sum:
/// `P(F > f) = x^(n/2) sum_(k<m) ((n/2)_k / k!) y^k`, `x = n / (n + 2m f)`,
/// `y = 1 - x` (Abramowitz and Stegun 26.5.6, 26.6.4: the incomplete beta
/// function with an integer parameter). The terms are positive, but the sum
/// is formed as `exp(-(n/2) ln(1 + r) + ln(sum))`, whose two logarithms
/// (each carrying about `1e-16` of its size) can be large and cancel: the
/// reference's own error bound is part of the tolerance.
#[test]
fn f_with_even_numerator_finite_sum() {
    let cases: &[(f64, f64)] = &[
        (4.0, 7.0),
        (10.0, 3.5),
        (10.0, 1e6),
        (30.0, 55.5),
        (200.0, 1e9),
        (2000.0, 1e9),
        (2000.0, 2001.0),
        (4000.0, 1e12),
    ];
    for &(d1, n) in cases {
        let m = (d1 / 2.0) as usize;
        let a = 0.5 * n;
        // f spanning the bulk: the mean is about 1, the spread about sqrt(2/d1 + 2/n).
        let spread = (2.0 / d1 + 2.0 / n).sqrt();
        for z in [
            -6.0, -2.5, -1.99, -1.0, -0.1, 0.0, 0.05, 1.0, 2.01, 3.0, 8.0,
        ] {
            let f = (1.0 + z * spread).max(1e-3);
            let r = d1 * f / n;
            let y = r / (1.0 + r);
            // Compensated sum of the positive terms, scaled by the largest.
            let mut terms = Vec::with_capacity(m);
            let mut ln_term = 0.0f64;
            for k in 0..m {
                if k > 0 {
                    let kf = k as f64;
                    ln_term += ((a + kf - 1.0) / kf).ln() + y.ln();
                }
                terms.push(ln_term);
            }
            let top = terms.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
            let (mut sum, mut carry) = (0.0f64, 0.0f64);
            for lt in &terms {
                let v = (lt - top).exp() - carry;
                let s = sum + v;
                carry = (s - sum) - v;
                sum = s;
            }
            let head = -a * r.ln_1p();
            let ln_upper = head + top + sum.ln();
            let reference_error = 8.0 * f64::EPSILON * (head.abs() + top.abs() + m as f64);
            let tails = fisher_f_tails(f, d1, n).unwrap();
            let tol = 5e-14 * (ln_upper.abs() / 100.0).max(1.0) + reference_error;
            assert!(
                (tails.ln_upper - ln_upper).abs() <= tol,
                "F({d1}, {n}) at {f}: {} vs {ln_upper} (tolerance {tol:e})",
                tails.ln_upper
            );
        }
    }
}

/// `F(d, d)` and `1 / F(d, d)` have the same distribution, so `P(F <= 1) =
/// 1/2` exactly, and `P(F <= f) = P(F > 1 / f)`. At `f = 1` the point is
/// at the mean, where large `d` use the quadrature.
#[test]
fn f_with_equal_degrees_is_symmetric_in_log() {
    for d in [
        0.3, 1.0, 7.0, 1999.0, 2001.0, 1e4, 1e6, 1e9, 1e15, 1e100, 1e300,
    ] {
        let at_one = fisher_f_tails(1.0, d, d).unwrap();
        assert!(close(at_one.lower, 0.5, 1e-14), "d {d}: {}", at_one.lower);
        assert!(close(at_one.upper, 0.5, 1e-14), "d {d}: {}", at_one.upper);
        // Dyadic f, so that 1/f is exact.
        for f in [0.25, 0.5, 0.875, 1.0 + 2f64.powi(-20), 1.5, 4.0, 64.0] {
            let here = fisher_f_tails(f, d, d).unwrap();
            let there = fisher_f_tails(1.0 / f, d, d).unwrap();
            assert!(
                close_ln(here.ln_lower, there.ln_upper, 1e-13),
                "d {d} f {f}"
            );
        }
    }
}

/// Fisher's z: `(1/2) ln F` for `F(d, d)` has mean 0 and variance `1 / d`
/// up to relative corrections of order `1 / d` (Abramowitz and Stegun
/// 26.6.15 for the normal approximation to Fisher's z); for `d >= 1e20`
/// they are below double precision, so `P(F > f) = P(Z > sqrt(d) ln(f) / 2)`.
/// This checks the large-df F code (quadrature near the mean, continued
/// fraction beyond) against the normal code.
#[test]
fn f_with_huge_equal_degrees_is_lognormal() {
    for d in [1e20f64, 1e30, 1e100, 1e300] {
        let scale = d.sqrt();
        for z in [
            -30.0f64, -5.0, -2.5, -1.999, -1.0, -0.2, 0.1, 0.7, 1.5, 2.0, 2.2, 4.0, 9.0, 37.0,
        ] {
            // The double nearest the wanted point, and its exact z.
            let f = (2.0 * z / scale).exp();
            let z_exact = 0.5 * (f - 1.0).ln_1p() * scale;
            let t = fisher_f_tails(f, d, d).unwrap();
            assert_same_tails(
                t,
                normal_tails(z_exact).unwrap(),
                &format!("d {d} z {z_exact}"),
            );
        }
    }
}

// ---------------------------------------------------------------------------
// A published table.

/// NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.2,
/// "Critical Values of the Student's t Distribution": the `t` exceeded with
/// probability `alpha`, printed to three decimals (columns 0.10, 0.05,
/// 0.025, 0.01, 0.005; the last row is df = infinity). Tolerance: half a
/// unit in the last printed place.
#[test]
// 2.718 (df 11, alpha 0.01) is a table entry, not Euler's number.
#[allow(clippy::approx_constant)]
fn nist_t_table() {
    let alphas = [0.10, 0.05, 0.025, 0.01, 0.005];
    let table: &[(f64, [f64; 5])] = &[
        (1.0, [3.078, 6.314, 12.706, 31.821, 63.657]),
        (2.0, [1.886, 2.920, 4.303, 6.965, 9.925]),
        (3.0, [1.638, 2.353, 3.182, 4.541, 5.841]),
        (4.0, [1.533, 2.132, 2.776, 3.747, 4.604]),
        (5.0, [1.476, 2.015, 2.571, 3.365, 4.032]),
        (6.0, [1.440, 1.943, 2.447, 3.143, 3.707]),
        (7.0, [1.415, 1.895, 2.365, 2.998, 3.499]),
        (8.0, [1.397, 1.860, 2.306, 2.896, 3.355]),
        (9.0, [1.383, 1.833, 2.262, 2.821, 3.250]),
        (10.0, [1.372, 1.812, 2.228, 2.764, 3.169]),
        (11.0, [1.363, 1.796, 2.201, 2.718, 3.106]),
        (12.0, [1.356, 1.782, 2.179, 2.681, 3.055]),
        (13.0, [1.350, 1.771, 2.160, 2.650, 3.012]),
        (14.0, [1.345, 1.761, 2.145, 2.624, 2.977]),
        (15.0, [1.341, 1.753, 2.131, 2.602, 2.947]),
        (16.0, [1.337, 1.746, 2.120, 2.583, 2.921]),
        (17.0, [1.333, 1.740, 2.110, 2.567, 2.898]),
        (18.0, [1.330, 1.734, 2.101, 2.552, 2.878]),
        (19.0, [1.328, 1.729, 2.093, 2.539, 2.861]),
        (20.0, [1.325, 1.725, 2.086, 2.528, 2.845]),
        (21.0, [1.323, 1.721, 2.080, 2.518, 2.831]),
        (22.0, [1.321, 1.717, 2.074, 2.508, 2.819]),
        (23.0, [1.319, 1.714, 2.069, 2.500, 2.807]),
        (24.0, [1.318, 1.711, 2.064, 2.492, 2.797]),
        (25.0, [1.316, 1.708, 2.060, 2.485, 2.787]),
        (26.0, [1.315, 1.706, 2.056, 2.479, 2.779]),
        (27.0, [1.314, 1.703, 2.052, 2.473, 2.771]),
        (28.0, [1.313, 1.701, 2.048, 2.467, 2.763]),
        (29.0, [1.311, 1.699, 2.045, 2.462, 2.756]),
        (30.0, [1.310, 1.697, 2.042, 2.457, 2.750]),
        (40.0, [1.303, 1.684, 2.021, 2.423, 2.704]),
        (60.0, [1.296, 1.671, 2.000, 2.390, 2.660]),
        (100.0, [1.290, 1.660, 1.984, 2.364, 2.626]),
        (f64::INFINITY, [1.282, 1.645, 1.960, 2.326, 2.576]),
    ];
    for (df, row) in table {
        for (alpha, printed) in alphas.iter().zip(row) {
            let t = student_t_quantile(1.0 - alpha, *df).unwrap();
            assert!(
                (t - printed).abs() <= 5.0e-4 + 1e-12,
                "df {df} alpha {alpha}: {t} vs printed {printed}"
            );
            // F(1, df) at level alpha is the square of the two-sided t
            // critical value: the same table gives F to about 2 t 5e-4.
            if df.is_finite() && *alpha <= 0.05 {
                let f = fisher_f_upper_quantile(2.0 * alpha, 1.0, *df).unwrap();
                assert!(
                    (f - printed * printed).abs() <= 1e-3 * printed + 1e-9,
                    "F(1, {df})"
                );
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Round trips over the whole range.

/// `d ln P(X > x) / d ln x` by a central difference: the condition number
/// that turns a relative error in a tail probability into one in a quantile.
fn log_slope(ln_upper: impl Fn(f64) -> f64, x: f64) -> f64 {
    let h = 1e-6;
    (ln_upper(x * (1.0 + h)) - ln_upper(x * (1.0 - h))) / ((1.0 + h) / (1.0 - h)).ln()
}

/// How far `ln p` lies outside the range of `ln tail` over the double `x`
/// and its two neighbours: 0 when `x` is one of the doubles nearest the
/// exact quantile. Near a distribution that is nearly a step (huge df) the
/// tail can change by a large factor from one double to the next; this
/// measure asks only for the best double, and elsewhere it is the plain
/// error of `ln tail(x)`.
fn bracket_error(ln_tail: impl Fn(f64) -> f64, x: f64, ln_p: f64) -> f64 {
    let values = [ln_tail(x.next_down()), ln_tail(x), ln_tail(x.next_up())];
    let lo = values.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = values.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    (ln_p - hi).max(lo - ln_p).max(0.0) / (ln_p.abs() / 100.0).max(1.0)
}

/// `cdf(quantile(p))` against `p` for Student's t, on the smaller tail, or
/// (near the median) on the distribution function itself, whose relative
/// rounding is then about 1e-16 (the relative accuracy of quantiles near
/// the median is checked against closed forms above).
fn t_round_trip_error(p: f64, t: f64, df: f64) -> f64 {
    if (0.25..=0.75).contains(&p) {
        bracket_error(|x| student_t_tails(x, df).unwrap().lower.ln(), t, p.ln())
    } else if p < 0.5 {
        bracket_error(|x| student_t_tails(x, df).unwrap().ln_lower, t, p.ln())
    } else {
        bracket_error(
            |x| student_t_tails(x, df).unwrap().ln_upper,
            t,
            (1.0 - p).ln(),
        )
    }
}

/// `cdf(quantile(p))` against `p` for F, on the smaller tail.
fn f_round_trip_error(p: f64, f: f64, d1: f64, d2: f64) -> f64 {
    if p <= 0.5 {
        bracket_error(|x| fisher_f_tails(x, d1, d2).unwrap().ln_lower, f, p.ln())
    } else {
        bracket_error(
            |x| fisher_f_tails(x, d1, d2).unwrap().ln_upper,
            f,
            (1.0 - p).ln(),
        )
    }
}

/// `cdf(quantile(p)) = p` and `quantile(cdf(x)) = x` for Student's t over
/// probabilities from `1e-300` to `1 - 1e-15` and df from 0.1 to 1e300 and
/// infinity. A quantile beyond the largest double (heavy tails at small df)
/// must be refused with `Error::Overflow`, and only then.
#[test]
fn t_round_trips() {
    let mut worst_p = 0.0f64;
    let mut worst_x = 0.0f64;
    for df in [
        0.1,
        0.3,
        0.5,
        1.0,
        1.5,
        2.5,
        3.0,
        7.0,
        12.5,
        30.0,
        100.0,
        999.0,
        1e4,
        1e6,
        2e7,
        1e9,
        1e12,
        1e16,
        1e24,
        1e26,
        1e100,
        1e300,
        f64::INFINITY,
    ] {
        for p in probability_grid() {
            let t = match student_t_quantile(p, df) {
                Ok(t) => t,
                Err(Error::Overflow { .. }) => {
                    let beyond = student_t_tails(f64::MAX, df).unwrap().upper;
                    assert!(
                        beyond > p.min(1.0 - p),
                        "df {df} p {p}: refused but reachable"
                    );
                    continue;
                }
                Err(e) => panic!("df {df} p {p}: {e}"),
            };
            assert!(t.is_finite(), "df {df} p {p}");
            if p == 0.5 {
                assert_eq!(t, 0.0);
                continue;
            }
            let tl = student_t_tails(t, df).unwrap();
            let err = t_round_trip_error(p, t, df);
            worst_p = worst_p.max(err);
            assert!(
                err <= 1e-12,
                "df {df} p {p}: t {t}, cdf(quantile) error {err:e}"
            );
            // And back from the smaller tail at t (away from the median,
            // where the tail is a double with a relative rounding error).
            let tail = tl.lower.min(tl.upper);
            if tail > 0.0 && tail < 0.25 {
                let back = student_t_quantile(tail, df).unwrap().abs();
                let slope = log_slope(|x| student_t_tails(x, df).unwrap().ln_upper, t.abs()).abs();
                let err = ((back - t.abs()) / t).abs() * slope.min(1.0)
                    / (tail.ln().abs() / 100.0).max(1.0);
                worst_x = worst_x.max(err);
                assert!(
                    err <= 1e-12,
                    "df {df} t {t}: quantile(cdf) error {err:e} (slope {slope})"
                );
            }
        }
    }
    println!("t: worst cdf(quantile) {worst_p:e}; worst quantile(cdf) x min(1, slope) {worst_x:e}");
}

/// The same round trips for F, over df1 and df2 from 0.1 to 1e300, for the
/// lower-tail quantile and the upper-tail quantile.
#[test]
fn f_round_trips() {
    let dfs = [
        0.1, 0.7, 1.0, 2.0, 5.0, 30.0, 1e3, 2500.0, 1e6, 1e9, 1e15, 1e100, 1e300,
    ];
    let mut worst_p = 0.0f64;
    let mut worst_x = 0.0f64;
    for &d1 in &dfs {
        for &d2 in &dfs {
            for p in probability_grid() {
                let f = match fisher_f_quantile(p, d1, d2) {
                    Ok(f) => f,
                    Err(Error::Overflow { .. }) => {
                        let beyond = fisher_f_tails(f64::MAX, d1, d2).unwrap().upper;
                        assert!(
                            beyond > 1.0 - p,
                            "F({d1}, {d2}) p {p}: refused but reachable"
                        );
                        continue;
                    }
                    Err(e) => panic!("F({d1}, {d2}) p {p}: {e}"),
                };
                assert!(f.is_finite() && f >= 0.0, "F({d1}, {d2}) p {p}");
                if f < f64::MIN_POSITIVE {
                    // Below the smallest normal double: the lower tail there
                    // must indeed exceed p.
                    let at = fisher_f_tails(f64::MIN_POSITIVE, d1, d2).unwrap().lower;
                    assert!(at >= p, "F({d1}, {d2}) p {p}: 0 returned but {at} < p");
                    continue;
                }
                let tl = fisher_f_tails(f, d1, d2).unwrap();
                let err = f_round_trip_error(p, f, d1, d2);
                worst_p = worst_p.max(err);
                assert!(err <= 1e-12, "F({d1}, {d2}) p {p}: f {f}, error {err:e}");
                // Back from the smaller tail at f, through the quantile of that tail.
                let lower_side = tl.lower <= tl.upper;
                let tail = tl.lower.min(tl.upper);
                if tail > 0.0 {
                    let back = if lower_side {
                        fisher_f_quantile(tail, d1, d2).unwrap()
                    } else {
                        fisher_f_upper_quantile(tail, d1, d2).unwrap()
                    };
                    let slope = if lower_side {
                        log_slope(|x| fisher_f_tails(x, d1, d2).unwrap().ln_lower, f).abs()
                    } else {
                        log_slope(|x| fisher_f_tails(x, d1, d2).unwrap().ln_upper, f).abs()
                    };
                    let err = ((back - f) / f).abs() * slope.min(1.0)
                        / (tail.ln().abs() / 100.0).max(1.0);
                    worst_x = worst_x.max(err);
                    assert!(
                        err <= 1e-12,
                        "F({d1}, {d2}) f {f}: quantile(cdf) error {err:e} (slope {slope})"
                    );
                }
            }
        }
    }
    println!("F: worst cdf(quantile) {worst_p:e}; worst quantile(cdf) x min(1, slope) {worst_x:e}");
}

// ---------------------------------------------------------------------------
// Regressions from issue 10.

/// `student_t_quantile(0.975, 1e7)` was 1.8266: it is the normal quantile
/// `z` (1.960 in the df = infinity row of the NIST/SEMATECH t table checked
/// above) plus the t expansion, `z + z (z^2 + 1) / (4 df) + ...`, whose
/// first correction is about 2.37e-7 here, to 1e-12 relative (the
/// expansion's omitted terms are below 1e-27 here). The normal quantile
/// comes from `normal_quantile`, itself checked by its round trip to 1e-15
/// and against the normal series above.
#[test]
fn issue_10_t_quantile_at_ten_million_df() {
    let z = normal_quantile(0.975).unwrap();
    assert!(close(normal_tails(z).unwrap().upper, 0.025, 1e-14));
    let df = 1e7;
    let z2 = z * z;
    let expansion =
        z + z * (z2 + 1.0) / (4.0 * df) + z * ((5.0 * z2 + 16.0) * z2 + 3.0) / (96.0 * df * df);
    let t = student_t_quantile(0.975, df).unwrap();
    assert!(close(t, expansion, 1e-13), "{t} vs {expansion}");
    assert!((t - 1.8266).abs() > 0.1);
}

/// At 20,000,000 degrees of freedom and beyond the quantile returns (it
/// looped before), in the tails and near the median, where it was off by
/// up to 1e5 relative.
#[test]
fn issue_10_large_df_returns_and_is_right_near_the_median() {
    for df in [2e7, 2e7 + 0.5, 1e8, 3e9, 1e11] {
        for p in [0.5 + 1e-15, 0.5 + 1e-9, 0.5 - 1e-4, 0.55, 0.9, 0.975, 0.995] {
            let z = normal_quantile(p).unwrap();
            let t = student_t_quantile(p, df).unwrap();
            assert!(close(t, cornish_fisher(z, df), 2e-14), "df {df} p {p}");
        }
        for p in [0.9, 0.95, 0.99] {
            let f = fisher_f_quantile(p, 1.0, df).unwrap();
            let t = student_t_quantile(0.5 + 0.5 * p, df).unwrap();
            assert!(close(f, t * t, 5e-14), "F(1, {df}) at {p}");
            // Large df on both sides: F(d, d) is symmetric in ln F, so its
            // quantiles at p and 1 - p are reciprocal.
            let up = fisher_f_quantile(p, df, df).unwrap();
            let down = fisher_f_quantile(1.0 - p, df, df).unwrap();
            assert!(close(up * down, 1.0, 5e-14), "F({df}, {df}) at {p}");
        }
    }
}

/// Probabilities near 1e-300 (which panicked) give finite quantiles whose
/// tails round-trip, for t, F and the normal.
#[test]
fn issue_10_tiny_probabilities_do_not_panic() {
    for p in [1e-300, 2.2e-308, 5e-324] {
        for df in [1.0, 3.0, 30.0, 1e3, 1e7, 1e15, f64::INFINITY] {
            let t = match student_t_quantile(p, df) {
                Ok(t) => t,
                Err(Error::Overflow { .. }) => {
                    // Only where the quantile is indeed beyond the largest double.
                    assert!(
                        student_t_tails(f64::MAX, df).unwrap().upper > p,
                        "df {df} p {p}"
                    );
                    continue;
                }
                Err(e) => panic!("df {df} p {p}: {e}"),
            };
            assert!(t.is_finite() && t < 0.0, "df {df} p {p}");
            let back = student_t_tails(t, df).unwrap();
            if p >= f64::MIN_POSITIVE {
                assert!(close_ln(back.ln_lower, p.ln(), 1e-12), "df {df} p {p}");
            }
            let upper = student_t_quantile(1.0 - 1e-16, df).unwrap();
            assert!(upper.is_finite() && upper > 0.0);
        }
        for (d1, d2) in [
            (3.0, 40.0),
            (40.0, 3.0),
            (1e6, 1e6),
            (2.0, 1e12),
            (1.0, 1e3),
        ] {
            let lo = fisher_f_quantile(p, d1, d2).unwrap();
            let hi = fisher_f_upper_quantile(p, d1, d2).unwrap();
            assert!(
                lo.is_finite() && hi.is_finite() && lo < hi,
                "F({d1}, {d2}) p {p}"
            );
            if p >= f64::MIN_POSITIVE {
                let back = fisher_f_tails(hi, d1, d2).unwrap();
                assert!(
                    close_ln(back.ln_upper, p.ln(), 1e-12),
                    "F({d1}, {d2}) p {p}"
                );
            }
        }
        let z = normal_quantile(p).unwrap();
        assert!(z.is_finite() && z < -37.0);
        // With one degree of freedom in both places the upper quantile at
        // 1e-300 is about (2 / (pi p))^2: beyond the largest double, refused.
        assert!(matches!(
            fisher_f_upper_quantile(p, 1.0, 1.0),
            Err(Error::Overflow { .. })
        ));
    }
}

/// Cases that broke earlier drafts of the solver: distributions so narrow
/// that the distribution function is nearly a step between neighbouring
/// doubles (the best double must be returned), an evaluation noisy at
/// 1e-13 (a tiny df against a huge one), far tails where the log-slope is
/// a ratio of two astronomically small probabilities, and statistics whose
/// `x = df2 / (df2 + df1 f)` underflows.
#[test]
fn hard_cases_for_the_quantile_iteration() {
    let cases: &[(f64, f64, f64)] = &[
        (
            0.498_884_487_460_012_24,
            2.140_528_961_340_421_4e35,
            2.176_260_267_525_699e292,
        ),
        (
            0.498_884_487_460_012_24,
            2.536_747_468_442_016_6e43,
            1.052_156_479_846_900_5e82,
        ),
        (0.499_99, 1e20, 1e20),
        (0.5 + 1e-9, 1e26, 1e26),
        (0.001, 1e236, 0.003_162_277_660_168_379_4),
        (1e-6, 1e6, 1e9),
        (1e-300, 30.0, 1e300),
        (0.001, 1e20, 0.003_162_277_660_168_379_4),
    ];
    for &(p, d1, d2) in cases {
        let f = fisher_f_quantile(p, d1, d2).unwrap();
        let err = f_round_trip_error(p, f, d1, d2);
        assert!(err <= 1e-12, "F({d1}, {d2}) p {p}: f {f}, error {err:e}");
        // The same point through the upper quantile: its lower tail is
        // 1 - upper, exact in floating point.
        let upper = 1.0 - p;
        if upper < 1.0 {
            let u = fisher_f_upper_quantile(upper, d1, d2).unwrap();
            let err = f_round_trip_error(1.0 - upper, u, d1, d2);
            assert!(
                err <= 1e-12,
                "F({d1}, {d2}) upper {upper}: f {u}, error {err:e}"
            );
        }
    }
    // Heavy upper tails (tiny df2): the upper quantile is beyond the
    // largest double, a typed refusal, not a loop.
    for d1 in [3.0, 1e3, 1e6] {
        assert!(matches!(
            fisher_f_quantile(1.0 - 1e-6, d1, 0.03),
            Err(Error::Overflow { .. })
        ));
    }
}

#[test]
fn invalid_arguments_are_typed_errors_naming_the_parameter() {
    let named = |r: Result<f64, Error>, want: &str| match r {
        Err(Error::InvalidParameter { name, .. }) => assert_eq!(name, want),
        other => panic!("expected InvalidParameter({want}), got {other:?}"),
    };
    for p in [0.0, 1.0, -0.5, 1.5, f64::NAN, f64::INFINITY] {
        named(student_t_quantile(p, 5.0), "probability");
        named(normal_quantile(p), "probability");
        named(fisher_f_quantile(p, 2.0, 3.0), "probability");
        named(fisher_f_upper_quantile(p, 2.0, 3.0), "upper");
    }
    for df in [0.0, -1.0, f64::NAN, f64::NEG_INFINITY] {
        named(student_t_quantile(0.9, df), "df");
        named(fisher_f_quantile(0.9, df, 3.0), "df1");
        named(fisher_f_quantile(0.9, 3.0, df), "df2");
    }
    // Subnormal degrees of freedom (half of them would vanish).
    named(student_t_quantile(0.9, 1e-310), "df");
    named(fisher_f_quantile(0.9, 3.0, 5e-324), "df2");
    // The F distribution takes finite degrees of freedom only.
    named(fisher_f_quantile(0.9, f64::INFINITY, 3.0), "df1");
    named(fisher_f_quantile(0.9, 3.0, f64::INFINITY), "df2");
    assert!(matches!(
        student_t_tails(f64::NAN, 3.0),
        Err(Error::InvalidParameter { name: "t", .. })
    ));
    assert!(matches!(
        fisher_f_tails(f64::NAN, 3.0, 4.0),
        Err(Error::InvalidParameter { name: "f", .. })
    ));
    assert!(matches!(
        normal_tails(f64::NAN),
        Err(Error::InvalidParameter { name: "z", .. })
    ));
    // Edges that are not errors: tiny df (every quantile away from the
    // median is beyond the largest double), infinite arguments, F <= 0.
    // With df = 1e-300 nearly all the mass is beyond any finite t: both
    // tails at t = 3 are 1/2 to double precision (they differ by ~1e-297).
    let tiny = student_t_tails(3.0, 1e-300).unwrap();
    assert!((tiny.upper - 0.5).abs() < 1e-15 && (tiny.lower - 0.5).abs() < 1e-15);
    assert!(matches!(
        student_t_quantile(0.9, 1e-300),
        Err(Error::Overflow { .. })
    ));
    let f = fisher_f_tails(2.0, 1e-300, 1e-300).unwrap();
    assert!(f.lower > 0.0 && f.upper > 0.0 && (f.lower + f.upper - 1.0).abs() < 1e-15);
    let t = student_t_tails(f64::INFINITY, 3.0).unwrap();
    assert_eq!((t.lower, t.upper), (1.0, 0.0));
    let f = fisher_f_tails(-2.0, 3.0, 4.0).unwrap();
    assert_eq!((f.lower, f.upper), (0.0, 1.0));
}

// ---------------------------------------------------------------------------
// Property test: random probabilities and degrees of freedom.

fn cases() -> u32 {
    std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(64)
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: cases(),
        // A hang guard, not a speed test: a case takes microseconds.
        timeout: 60_000,
        ..ProptestConfig::default()
    })]

    /// `cdf(quantile(p, df)) = p` for random `p` (log-uniform down to
    /// 1e-300, either tail) and random `df` (log-uniform from 0.05 to 1e300,
    /// or infinite), for t and for F.
    #[test]
    fn quantile_inverts_the_distribution_function(
        log_p in -300.0f64..-0.302,
        upper_side in any::<bool>(),
        log_df in -1.3f64..300.0,
        log_df2 in -1.3f64..300.0,
        infinite in 0u8..8,
    ) {
        let small = 10f64.powf(log_p);
        // 1 - small is a double distinct from 1 only for small >= 2^-53.
        let p = if upper_side { 1.0 - small.max(1e-15) } else { small };
        let df = if infinite == 0 { f64::INFINITY } else { 10f64.powf(log_df) };
        match student_t_quantile(p, df) {
            Ok(t) => {
                prop_assert!(t.is_finite());
                let err = t_round_trip_error(p, t, df);
                prop_assert!(err <= 1e-12, "t: df {} p {} t {} err {:e}", df, p, t, err);
            }
            Err(Error::Overflow { .. }) => {
                let beyond = student_t_tails(f64::MAX, df).unwrap().upper;
                prop_assert!(beyond > small);
            }
            Err(e) => prop_assert!(false, "t: df {} p {}: {}", df, p, e),
        }
        let (d1, d2) = (10f64.powf(log_df), 10f64.powf(log_df2));
        match fisher_f_quantile(p, d1, d2) {
            Ok(f) if f >= f64::MIN_POSITIVE => {
                let err = f_round_trip_error(p, f, d1, d2);
                prop_assert!(err <= 1e-12, "F({}, {}) p {} f {} err {:e}", d1, d2, p, f, err);
            }
            Ok(f) => prop_assert!(f == 0.0),
            Err(Error::Overflow { .. }) => {
                let beyond = fisher_f_tails(f64::MAX, d1, d2).unwrap().upper;
                prop_assert!(beyond > 1.0 - p);
            }
            Err(e) => prop_assert!(false, "F({}, {}) p {}: {}", d1, d2, p, e),
        }
    }
}
