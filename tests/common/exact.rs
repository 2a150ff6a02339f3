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

fn rat(v: f64) -> BigRational {
    BigRational::from_float(v).unwrap_or_else(|| panic!("non-finite value {v} in exact solve"))
}

/// Exact least-squares solution of `min |y - b0 - X b|` for the `f64` data
/// as given (`b0` omitted when `intercept` is false), each entry rounded to
/// the nearest `f64`. Parameters in the order `[b0,] b1, ..., bp`.
///
/// Panics if the design (with the column of ones) is exactly singular.
pub fn least_squares(x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>, intercept: bool) -> Vec<f64> {
    let (n, p) = x.dim();
    let k = p + usize::from(intercept);
    let rows: Vec<Vec<BigRational>> = (0..n)
        .map(|i| {
            let mut r = Vec::with_capacity(k);
            if intercept {
                r.push(BigRational::from_integer(BigInt::from(1)));
            }
            r.extend((0..p).map(|j| rat(x[[i, j]])));
            r
        })
        .collect();
    let ys: Vec<BigRational> = y.iter().map(|&v| rat(v)).collect();
    // Augmented normal equations [X^T X | X^T y].
    let mut m: Vec<Vec<BigRational>> = (0..k)
        .map(|a| {
            let mut row: Vec<BigRational> = (0..k)
                .map(|b| {
                    rows.iter()
                        .fold(BigRational::zero(), |acc, r| acc + &r[a] * &r[b])
                })
                .collect();
            row.push(
                rows.iter()
                    .zip(&ys)
                    .fold(BigRational::zero(), |acc, (r, yi)| acc + &r[a] * yi),
            );
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
    (0..k)
        .map(|c| {
            (&m[c][k] / &m[c][c])
                .to_f64()
                .unwrap_or_else(|| panic!("exact solution entry {c} not representable"))
        })
        .collect()
}
