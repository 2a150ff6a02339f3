//! Extended-precision residual passes for iterative refinement.
//!
//! Double-double arithmetic built on error-free transformations: the sum
//! `a + b` and the product `a * b` of two `f64` are each represented exactly
//! as an unevaluated pair `hi + lo` ([`two_sum`], [`two_product`]). An
//! [`Accumulator`] keeps a running sum and its accumulated rounding errors
//! (the compensated dot product of Ogita, Rump and Oishi), so a dot product
//! comes out as accurate as if it had been computed in twice the working
//! precision and rounded once at the end.
//!
//! The passes that use them (`crate::passes::extended`) read the caller's **original** data, uncentered, so the
//! residual `y_i - b0 - x_i . b` they produce is that of the problem as
//! given, with the intercept explicit. Each value is multiplied by an exact
//! power of two on the way in ([`crate::passes::extended::Units`]: `x_ij / s_j`, `y_i / s_y`, the
//! scales of [`crate::prep::Scaling`]), so that data near the ends of the
//! `f64` range give products and sums of moderate size; coefficients are
//! then in scaled units (`gamma_j = b_j s_j / s_y`, `b0 / s_y`). Rows are
//! processed in fixed chunks in parallel and partial sums are combined in
//! chunk order, so results do not depend on the thread count.

pub(crate) use crate::scaled::two_sum;

/// Splits `a` into two halves of 26 significant bits each (Veltkamp).
#[cfg(not(target_feature = "fma"))]
#[inline]
fn split(a: f64) -> (f64, f64) {
    const FACTOR: f64 = 134_217_729.0; // 2^27 + 1
    let c = FACTOR * a;
    let hi = c - (c - a);
    (hi, a - hi)
}

/// `a * b = p + e` exactly, with `p = fl(a * b)` (Dekker), as long as no
/// intermediate overflows (|a|, |b| below about 2^995) or underflows.
#[cfg(not(target_feature = "fma"))]
#[inline]
pub(crate) fn two_product(a: f64, b: f64) -> (f64, f64) {
    let p = a * b;
    let (ah, al) = split(a);
    let (bh, bl) = split(b);
    let e = ((ah * bh - p) + ah * bl + al * bh) + al * bl;
    (p, e)
}

/// `a * b = p + e` exactly, with `p = fl(a * b)` (one fused multiply-add).
#[cfg(target_feature = "fma")]
#[inline]
pub(crate) fn two_product(a: f64, b: f64) -> (f64, f64) {
    let p = a * b;
    (p, a.mul_add(b, -p))
}

/// A compensated running sum: `hi` is the ordinary floating-point sum and
/// `lo` collects the exact rounding error of every addition.
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct Accumulator {
    hi: f64,
    lo: f64,
}

impl Accumulator {
    /// Adds `v`.
    #[inline]
    pub(crate) fn add(&mut self, v: f64) {
        let (s, e) = two_sum(self.hi, v);
        self.hi = s;
        self.lo += e;
    }

    /// Adds the exact product `a * b`.
    #[inline]
    pub(crate) fn add_product(&mut self, a: f64, b: f64) {
        let (p, e) = two_product(a, b);
        self.add(p);
        self.lo += e;
    }

    /// Adds `w * a * b` (the product `a * b` exactly, then scaled by `w`).
    #[inline]
    pub(crate) fn add_weighted_product(&mut self, w: f64, a: f64, b: f64) {
        if w == 1.0 {
            self.add_product(a, b);
            return;
        }
        let (p, e) = two_product(a, b);
        let (q, f) = two_product(w, p);
        self.add(q);
        self.lo += f + w * e;
    }

    /// Adds another accumulator.
    #[inline]
    pub(crate) fn merge(&mut self, other: Accumulator) {
        self.add(other.hi);
        self.lo += other.lo;
    }

    /// The sum, rounded once to `f64`.
    #[inline]
    pub(crate) fn value(self) -> f64 {
        self.hi + self.lo
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_sum_is_exact() {
        // Identity: with a = 1 and b = 2^-60, the sum rounds to 1 and the
        // error term holds b exactly.
        let b = (-60.0f64).exp2();
        assert_eq!(two_sum(1.0, b), (1.0, b));
        assert_eq!(two_sum(b, 1.0), (1.0, b));
    }

    #[test]
    fn two_product_is_exact() {
        // (1 + 2^-30)^2 = 1 + 2^-29 + 2^-60: the last term is below half an
        // ulp of the rounded product and must appear as the error.
        let a = 1.0 + (-30.0f64).exp2();
        let (p, e) = two_product(a, a);
        assert_eq!(p, 1.0 + (-29.0f64).exp2());
        assert_eq!(e, (-60.0f64).exp2());
    }

    #[test]
    fn accumulator_recovers_cancelled_digits() {
        // 1e16 + 1 - 1e16 is 1 exactly; plain f64 summation gives 0 (or 2).
        let mut acc = Accumulator::default();
        for v in [1e16, 1.0, -1e16] {
            acc.add(v);
        }
        assert_eq!(acc.value(), 1.0);
        // A dot product with massive cancellation: (1 + 2^-30)^2 - (1 + 2^-29) = 2^-60.
        let a = 1.0 + (-30.0f64).exp2();
        let mut acc = Accumulator::default();
        acc.add_product(a, a);
        acc.add(-(1.0 + (-29.0f64).exp2()));
        assert_eq!(acc.value(), (-60.0f64).exp2());
        // Weighted: 3 * (a * a) - 3 * (1 + 2^-29) = 3 * 2^-60.
        let mut acc = Accumulator::default();
        acc.add_weighted_product(3.0, a, a);
        acc.add_weighted_product(3.0, -1.0, 1.0 + (-29.0f64).exp2());
        assert_eq!(acc.value(), 3.0 * (-60.0f64).exp2());
    }
}
