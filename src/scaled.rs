//! Exact power-of-two scaling and sums that cannot overflow.
//!
//! Every scale factor of the crate is a power of two, so multiplying or
//! dividing by it is exact (as long as the result is a normal number), and
//! no factor is clamped to a range narrower than `f64`'s: data near
//! `1e-310` or `1e308` are scaled exactly like data near 1.

/// Smallest exponent of a normal `f64` (`2^-1022`).
pub(crate) const MIN_EXP: i32 = -1022;
/// Largest exponent of a finite `f64` (`2^1023`).
pub(crate) const MAX_EXP: i32 = 1023;

/// The exponent `e` with `2^e <= |v| < 2^(e+1)`, for a finite non-zero `v`
/// (subnormals included: `exponent(5e-324) == -1074`); 0 for zero and
/// non-finite values.
pub(crate) fn exponent(v: f64) -> i32 {
    if v == 0.0 || !v.is_finite() {
        return 0;
    }
    let bits = v.abs().to_bits();
    let biased = (bits >> 52) as i32;
    if biased == 0 {
        // Subnormal: the value is m * 2^-1074 with m < 2^52.
        let m = bits & ((1u64 << 52) - 1);
        return 63 - m.leading_zeros() as i32 - 1074;
    }
    biased - 1023
}

/// `2^e`, exact for `e` in `[-1074, 1023]`; 0 below, infinity above.
pub(crate) fn pow2(e: i32) -> f64 {
    if e > MAX_EXP {
        f64::INFINITY
    } else if e >= MIN_EXP {
        f64::from_bits(((e + 1023) as u64) << 52)
    } else if e >= -1074 {
        f64::from_bits(1u64 << (e + 1074))
    } else {
        0.0
    }
}

/// `v * 2^e`, rounded once: exact unless the result is subnormal (then
/// correctly rounded) or beyond the range of `f64` (then infinite).
pub(crate) fn ldexp(v: f64, e: i32) -> f64 {
    if v == 0.0 || !v.is_finite() || e == 0 {
        return v;
    }
    let ev = exponent(v);
    let target = ev.saturating_add(e);
    if target > MAX_EXP {
        return v.signum() * f64::INFINITY;
    }
    if target < -1075 {
        return v.signum() * 0.0;
    }
    // Bring v to [1, 2) (exact), then one multiplication by a
    // representable power of two rounds once.
    let u = if ev >= MIN_EXP {
        v * pow2(-ev)
    } else {
        // Subnormal v: two exact steps (2^-ev alone may overflow).
        (v * pow2(1022)) * pow2(-ev - 1022)
    };
    if target >= -1074 {
        // One rounding (2^target is exact, subnormal or not).
        u * pow2(target)
    } else {
        // target == -1075: u / 2 is exact, then one rounding.
        (u * 0.5) * pow2(-1074)
    }
}

/// The power of two at or below `|v|`, with its exponent limited to
/// `[-1022, 1023]` so that its inverse is a finite power of two as well;
/// 1 for zero and non-finite values. Dividing a value of magnitude below
/// `2 * pow2_scale(v)` by it is exact and lands in `[2^-52, 2)` at least.
pub(crate) fn pow2_scale(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return 1.0;
    }
    pow2(exponent(v).clamp(MIN_EXP, MAX_EXP))
}

/// `a + b = s + e` exactly, with `s = fl(a + b)` (Knuth's branch-free
/// form): the crate's one error-free sum, behind every compensated sum
/// ([`Neumaier`], `linalg::extended::Accumulator`, the column summaries of
/// the validation pass).
#[inline(always)]
pub(crate) fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    let bb = s - a;
    let e = (a - (s - bb)) + (b - bb);
    (s, e)
}

/// Compensated (Neumaier) accumulator: the running sum and the exact
/// rounding errors of its additions ([`two_sum`]; the same error as
/// Neumaier's ordered form, without its branch).
#[derive(Clone, Copy, Default, Debug)]
pub(crate) struct Neumaier {
    pub sum: f64,
    pub comp: f64,
}

impl Neumaier {
    #[inline]
    pub fn add(&mut self, v: f64) {
        let (t, e) = two_sum(self.sum, v);
        self.comp += e;
        self.sum = t;
    }

    #[inline]
    pub fn value(self) -> f64 {
        self.sum + self.comp
    }
}

/// A non-negative sum of squares held as `mantissa * 2^exp`, so that it
/// neither overflows nor underflows whatever the magnitude of the terms.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct ScaledSquares {
    /// Sum of the squares of the terms divided by `2^(exp / 2)` each.
    pub mantissa: f64,
    /// Even exponent of the scale.
    pub exp: i32,
}

impl ScaledSquares {
    /// `sum_i w_i v_i^2` over `(w_i, v_i)` with `w_i >= 0` of moderate size
    /// (the crate's scaled weights): the values are divided by a power of
    /// two near their largest magnitude before squaring.
    pub fn weighted(items: impl Iterator<Item = (f64, f64)> + Clone) -> Self {
        let big = items
            .clone()
            .filter(|(w, _)| *w != 0.0)
            .fold(0.0_f64, |m, (_, v)| m.max(v.abs()));
        if big == 0.0 || !big.is_finite() {
            return ScaledSquares {
                mantissa: if big == 0.0 { 0.0 } else { big },
                exp: 0,
            };
        }
        let e = exponent(big);
        let inv = -e;
        let mut acc = Neumaier::default();
        for (w, v) in items {
            if w != 0.0 {
                let s = ldexp(v, inv);
                acc.add(w * s * s);
            }
        }
        ScaledSquares {
            mantissa: acc.value(),
            exp: 2 * e,
        }
    }

    /// `sqrt` of the value, without overflow or underflow of the square.
    pub fn sqrt(self) -> f64 {
        ldexp(self.mantissa.sqrt(), self.exp / 2)
    }
}

/// The weighted mean `sum w_i v_i / sum w_i` (`w_i >= 0`, not all zero),
/// formed from values divided by a power of two near their largest
/// magnitude, so that neither the products nor the sum overflow.
pub(crate) fn weighted_mean(items: impl Iterator<Item = (f64, f64)> + Clone) -> f64 {
    let big = items
        .clone()
        .filter(|(w, _)| *w != 0.0)
        .fold(0.0_f64, |m, (_, v)| m.max(v.abs()));
    let (lo, hi) = items
        .clone()
        .filter(|(w, _)| *w != 0.0)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), (_, v)| {
            (a.min(v), b.max(v))
        });
    if big == 0.0 || !big.is_finite() {
        return 0.0;
    }
    let wmax = items.clone().fold(0.0_f64, |m, (w, _)| m.max(w));
    let (ew, ev) = (-exponent(wmax), -exponent(big));
    let mut sum = Neumaier::default();
    let mut weight = Neumaier::default();
    for (w, v) in items {
        if w != 0.0 {
            let ws = ldexp(w, ew);
            sum.add(ws * ldexp(v, ev));
            weight.add(ws);
        }
    }
    ldexp(sum.value() / weight.value(), -ev).clamp(lo, hi)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exponents_and_powers_are_exact() {
        assert_eq!(exponent(1.0), 0);
        assert_eq!(exponent(1.5), 0);
        assert_eq!(exponent(0.75), -1);
        assert_eq!(exponent(f64::MAX), 1023);
        assert_eq!(exponent(f64::MIN_POSITIVE), -1022);
        assert_eq!(exponent(5e-324), -1074);
        assert_eq!(exponent(3.0 * 5e-324), -1073);
        for e in -1074..=1023 {
            let v = pow2(e);
            assert!(v > 0.0 && v.is_finite());
            assert_eq!(exponent(v), e);
        }
        // 2^e is the power of two: halving steps from 1 reach the same bits.
        let mut v = 1.0_f64;
        for e in (-1074..0).rev() {
            v *= 0.5;
            assert_eq!(v, pow2(e), "{e}");
        }
    }

    #[test]
    fn safe_limits_of_the_stats_pass_are_powers_of_two() {
        assert_eq!(9.745_314_011_4e288, pow2(960));
        assert_eq!(1.026_134_200_324_594_1e-289, pow2(-960));
    }

    #[test]
    fn ldexp_rounds_once() {
        assert_eq!(ldexp(1.5, 1023), 1.5 * pow2(1023));
        assert_eq!(ldexp(1.5, 1024), f64::INFINITY);
        assert_eq!(ldexp(5e-324, 1074), 1.0);
        assert_eq!(ldexp(5e-324, 2097), pow2(1023));
        assert_eq!(ldexp(f64::MAX, -2097), 2.0 * 5e-324);
        assert_eq!(ldexp(-3.0, -1074), -3.0 * pow2(-1074));
        // Round half to even at the bottom of the range: 3 * 2^-1075 is
        // halfway between 2^-1074 and 2^-1073 and rounds to the even 2^-1073.
        assert_eq!(ldexp(3.0, -1075), pow2(-1073));
        assert_eq!(ldexp(1.0, -1076), 0.0);
    }

    #[test]
    fn sums_of_squares_and_means_do_not_overflow() {
        // 1 * v^2 + 1 * v^2 + 2 * v^2 = 4 v^2 with v = 2^1020: the sum
        // 2^2042 exceeds f64, its square root 2^1021 does not.
        let v = pow2(1020);
        let big = [(1.0, v), (1.0, -v), (2.0, v)];
        let s = ScaledSquares::weighted(big.iter().copied());
        assert_eq!(ldexp(s.mantissa, s.exp), f64::INFINITY);
        assert_eq!(s.sqrt(), pow2(1021));
        // Mean (v - v + 2 v) / 4 = v / 2, although v + 2 v overflows.
        assert_eq!(weighted_mean(big.iter().copied()), pow2(1019));
        let big = [(1.0, f64::MAX), (1.0, f64::MAX)];
        assert_eq!(weighted_mean(big.iter().copied()), f64::MAX);
        // Subnormal values: (6000 + 8000) / 2 units of 2^-1074.
        let u = pow2(-1074);
        let tiny = [(1.0, 6000.0 * u), (1.0, 8000.0 * u)];
        assert_eq!(weighted_mean(tiny.iter().copied()), 7000.0 * u);
        let s = ScaledSquares::weighted(tiny.iter().copied());
        assert_eq!(s.sqrt(), 10000.0 * u);
    }
}
