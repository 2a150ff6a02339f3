//! Exact least squares in rational arithmetic (test support).
//!
//! An independent reference for "the best any solver can do with these
//! inputs": every `f64` is a dyadic rational, so the normal equations of the
//! `f64` data can be formed and solved with no rounding at all, using the
//! arbitrary-precision rationals of the `num-rational` crate (a
//! general-purpose dev-dependency; nothing of the library is used here).
//! The exact solution is rounded once to `f64` at the end.
//!
//! The normal equations are fine here because nothing is rounded: their
//! squared condition number costs no digits in exact arithmetic.

#![allow(dead_code)]

use ndarray::{ArrayView1, ArrayView2};
use num_bigint::BigInt;
use num_rational::BigRational;
use num_traits::{ToPrimitive, Zero};

/// `v = m * 2^e` with integer `m` (exact decomposition of a finite `f64`).
fn decompose(v: f64) -> (BigInt, i32) {
    assert!(v.is_finite(), "non-finite value {v} in exact solve");
    if v == 0.0 {
        return (BigInt::zero(), 0);
    }
    let (mantissa, exponent, sign) = num_traits::float::FloatCore::integer_decode(v);
    (
        BigInt::from(sign) * BigInt::from(mantissa),
        i32::from(exponent),
    )
}

/// A column of `f64` as integers times one common power of two:
/// `col[i] = ints[i] * 2^e` exactly.
fn integer_column(values: impl Iterator<Item = f64>) -> (Vec<BigInt>, i32) {
    let parts: Vec<(BigInt, i32)> = values.map(decompose).collect();
    let e = parts
        .iter()
        .filter(|(m, _)| !m.is_zero())
        .map(|p| p.1)
        .min()
        .unwrap_or(0);
    let ints = parts
        .into_iter()
        .map(|(m, k)| m << ((k - e) as usize))
        .collect();
    (ints, e)
}

fn pow2(e: i32) -> BigRational {
    let one = BigInt::from(1);
    if e >= 0 {
        BigRational::from_integer(one << (e as usize))
    } else {
        BigRational::new(one.clone(), one << ((-e) as usize))
    }
}

/// Exact least-squares solution of `min |y - b0 - X b|` for the `f64` data
/// as given (`b0` omitted when `intercept` is false), each entry rounded to
/// the nearest `f64`. Parameters in the order `[b0,] b1, ..., bp`.
///
/// Every column is an integer vector times a power of two, so the normal
/// equations are formed in big-integer arithmetic and solved by exact
/// rational Gauss-Jordan elimination.
///
/// Panics if the design (with the column of ones) is exactly singular.
pub fn least_squares(x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>, intercept: bool) -> Vec<f64> {
    solve(x, y, intercept).0
}

/// The exact residual sum of squares `|y - b0 - X b|^2` at the exact
/// least-squares solution of the `f64` data as given, rounded once.
pub fn residual_sum_of_squares(
    x: ArrayView2<'_, f64>,
    y: ArrayView1<'_, f64>,
    intercept: bool,
) -> f64 {
    solve(x, y, intercept).1
}

/// The solution (rounded) and the residual sum of squares (rounded).
fn solve(x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>, intercept: bool) -> (Vec<f64>, f64) {
    let (n, p) = x.dim();
    let mut cols: Vec<(Vec<BigInt>, i32)> = Vec::new();
    if intercept {
        cols.push((vec![BigInt::from(1); n], 0));
    }
    for j in 0..p {
        cols.push(integer_column(x.column(j).iter().copied()));
    }
    let k = cols.len();
    let (yi, ye) = integer_column(y.iter().copied());
    let dot = |a: &[BigInt], b: &[BigInt]| -> BigInt {
        a.iter()
            .zip(b)
            .fold(BigInt::zero(), |acc, (u, v)| acc + u * v)
    };
    // Normal equations in the integer columns: theta_int = theta_j 2^(e_j - e_y).
    let mut m: Vec<Vec<BigRational>> = (0..k)
        .map(|a| {
            let mut row: Vec<BigRational> = (0..k)
                .map(|b| BigRational::from_integer(dot(&cols[a].0, &cols[b].0)))
                .collect();
            row.push(BigRational::from_integer(dot(&cols[a].0, &yi)));
            row
        })
        .collect();
    // Gauss-Jordan elimination (exact, so any non-zero pivot will do).
    for c in 0..k {
        let piv = (c..k)
            .find(|&r| !m[r][c].is_zero())
            .unwrap_or_else(|| panic!("exactly singular design at column {c}"));
        m.swap(c, piv);
        let pivot_row = m[c].clone();
        for (r, row) in m.iter_mut().enumerate() {
            if r == c || row[c].is_zero() {
                continue;
            }
            let f = &row[c] / &pivot_row[c];
            for (e, pv) in row.iter_mut().zip(&pivot_row).skip(c) {
                *e -= &f * pv;
            }
        }
    }
    let theta: Vec<f64> = (0..k)
        .map(|c| {
            let theta = &m[c][k] / &m[c][c] * pow2(ye - cols[c].1);
            theta
                .to_f64()
                .unwrap_or_else(|| panic!("exact solution entry {c} not representable"))
        })
        .collect();
    // Residuals in the integer units of y: r = yi - sum_c t_c cols_c, with
    // t_c = m[c][k] / m[c][c] (exact), then RSS = sum r^2 2^(2 ye).
    let t: Vec<BigRational> = (0..k).map(|c| &m[c][k] / &m[c][c]).collect();
    let mut rss = BigRational::zero();
    for (i, y) in yi.iter().enumerate().take(n) {
        let mut r = BigRational::from_integer(y.clone());
        for (c, tc) in t.iter().enumerate() {
            r -= tc * BigRational::from_integer(cols[c].0[i].clone());
        }
        rss += &r * &r;
    }
    let rss = (rss * pow2(2 * ye))
        .to_f64()
        .unwrap_or_else(|| panic!("exact residual sum of squares not representable"));
    (theta, rss)
}
