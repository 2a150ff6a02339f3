//! The ridge penalty path from a triangle state (issue 12).
//!
//! References, named beside each check:
//! - this crate's in-memory [`RidgePath`] on the same rows (itself checked
//!   against nalgebra and leave-one-out refits in `tests/ridge_selection.rs`);
//! - nalgebra as an independent library: the caller-unit penalised normal
//!   equations `(Xc^T W Xc + lambda P) b = Xc^T W yc`, the residual sum of
//!   squares and the trace of the hat matrix formed from the raw rows.

mod common;

use common::gen;
use leastline::ridge::{Criterion, RidgePath};
use leastline::{Error, FitState, Problem, TriangleState};
use nalgebra::{DMatrix, DVector};
use ndarray::{s, Array1, Array2};

/// `-log10` of the relative difference, capped at 16.
fn digits(a: f64, b: f64) -> f64 {
    if a == b {
        return 16.0;
    }
    let scale = if b == 0.0 { 1.0 } else { b.abs() };
    (-((a - b).abs() / scale).log10()).min(16.0)
}

/// A weighted design of `p` columns with mixed scales and offsets (with
/// `collinear`, column 2 nearly a multiple of column 0), and a noisy target.
fn data(seed: u64, n: usize, p: usize, collinear: bool) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    let mut r = gen::rng(seed);
    let mut x = gen::normal_matrix(&mut r, n, p);
    let scales = [1e3, 1e-2, 7.0, 0.3, 1e5];
    for j in 0..p {
        let (s, off) = (scales[j % 5], 40.0 * scales[j % 5]);
        x.column_mut(j).mapv_inplace(|v| off + s * v);
    }
    if collinear && p >= 3 {
        let near: Array1<f64> = (0..n)
            .map(|i| x[(i, 0)] * 1e-5 + 1e-3 * gen::normal(&mut r))
            .collect();
        x.column_mut(2).assign(&near);
    }
    let y: Array1<f64> = (0..n)
        .map(|i| 5.0 + 0.01 * x[(i, 0)] - 30.0 * x[(i, 1)] + 2.0 * gen::normal(&mut r))
        .collect();
    let w = gen::weights(&mut r, n);
    (x, y, w)
}

/// The state of the rows absorbed in `blocks` nearly equal blocks.
fn state(
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
    blocks: usize,
) -> TriangleState {
    let n = x.nrows();
    let mut st = TriangleState::new(x.ncols(), 1, intercept).expect("state");
    let size = n.div_ceil(blocks);
    let mut a = 0;
    while a < n {
        let b = (a + size).min(n);
        st.absorb_target(
            x.slice(s![a..b, ..]),
            y.slice(s![a..b]),
            w.map(|w| w.slice(s![a..b])),
        )
        .expect("absorb");
        a = b;
    }
    st
}

fn problem<'a>(
    x: &'a Array2<f64>,
    y: &'a Array1<f64>,
    w: Option<&'a Array1<f64>>,
    intercept: bool,
) -> Problem<'a> {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    b.build().expect("problem")
}

/// The state's curve, choice and fits equal the in-memory path's: 12
/// digits with an intercept (11.5 without: offsets 40 times the spread
/// leave a design of condition about 1e4, and the in-memory path's
/// Cholesky triangle and residual pass round differently from the state's
/// QR; measured 11.6, coefficients 9.6) on every generalized cross-validation score, residual sum of
/// squares and effective degrees of freedom of a 40-penalty grid, the
/// same chosen penalty, and 11 digits on the coefficients of the chosen
/// fit (relative to the largest; 9 without an intercept), on designs of condition up to about
/// 1e7 without an intercept (offsets 40 times the spread), weighted and not, with and without an
/// intercept and standardisation, in 1, 3 and 7 blocks.
#[test]
fn state_path_equals_the_in_memory_path() {
    let mut worst = [16.0f64; 4];
    let mut curve_worst = [16.0f64; 3];
    for seed in 0..4u64 {
        let (x, y, w) = data(100 + seed, 90, 5, false);
        for weighted in [false, true] {
            let w = weighted.then_some(&w);
            for intercept in [true, false] {
                let pr = problem(&x, &y, w, intercept);
                for standardize in [false, true] {
                    let memory = RidgePath::new(&pr, standardize).expect("path");
                    let grid = memory.default_grid(40).expect("grid");
                    let want = memory
                        .curve(&grid, Criterion::GeneralizedCrossValidation)
                        .expect("curve");
                    for blocks in [1, 3, 7] {
                        let st = state(&x, &y, w, intercept, blocks);
                        let path = st.ridge_path(0, standardize).expect("state path");
                        assert_eq!(path.rank(), memory.rank());
                        for (a, b) in path.singular_values().iter().zip(memory.singular_values()) {
                            worst[3] = worst[3].min(digits(*a, b));
                        }
                        let got = path
                            .curve(&grid, Criterion::GeneralizedCrossValidation)
                            .expect("state curve");
                        let what = format!(
                            "seed {seed} weighted {weighted} intercept {intercept} \
                             standardize {standardize} blocks {blocks}"
                        );
                        assert_eq!(got.best_index, want.best_index, "{what}");
                        assert_eq!(got.best_penalty, want.best_penalty, "{what}");
                        assert!(got.loo.is_none());
                        #[allow(clippy::needless_range_loop)]
                        // five parallel vectors indexed together
                        for i in 0..grid.len() {
                            let d = [
                                digits(got.gcv[i], want.gcv[i]),
                                digits(
                                    got.residual_sum_of_squares[i],
                                    want.residual_sum_of_squares[i],
                                ),
                                digits(got.effective_df[i], want.effective_df[i]),
                            ];
                            for (k, &d) in d.iter().enumerate() {
                                curve_worst[k] = curve_worst[k].min(d);
                            }
                            let floor = if intercept { 12.0 } else { 11.5 };
                            assert!(d.iter().all(|&d| d >= floor), "{what} penalty {i}: {d:?}");
                            assert_eq!(
                                path.effective_df(grid[i]).expect("df"),
                                got.effective_df[i]
                            );
                        }
                        let a = path.fit(got.best_penalty).expect("state fit");
                        let b = memory.fit(want.best_penalty).expect("fit");
                        let big = b
                            .model
                            .coefficients()
                            .iter()
                            .fold(0.0f64, |m, v| m.max(v.abs()));
                        for (u, v) in a.model.coefficients().iter().zip(b.model.coefficients()) {
                            let d = digits(*u - *v + big, big);
                            worst[0] = worst[0].min(d);
                            assert!(
                                d >= if intercept { 11.0 } else { 9.0 },
                                "{what}: coefficient {u} vs {v}"
                            );
                        }
                        let di = digits(
                            a.model.intercept() - b.model.intercept()
                                + y.mean().unwrap_or(1.0).abs(),
                            y.mean().unwrap_or(1.0).abs(),
                        );
                        worst[1] = worst[1].min(di);
                        assert!(di >= 11.0 || !intercept, "{what}: intercept");
                        let dr = digits(
                            a.report.residual_sum_of_squares,
                            b.report.residual_sum_of_squares,
                        );
                        worst[2] = worst[2].min(dr);
                        assert!(dr >= 12.0, "{what}: rss");
                        assert_eq!(a.report.penalty, want.best_penalty);
                        assert_eq!(a.report.rank, b.report.rank);
                        assert_eq!(a.report.residual_df, b.report.residual_df);
                    }
                }
            }
        }
    }
    eprintln!(
        "fewest digits: gcv {:.1}, rss {:.1}, df {:.1}",
        curve_worst[0], curve_worst[1], curve_worst[2]
    );
    eprintln!(
        "fewest digits: coefficients {:.1}, intercept {:.1}, rss {:.1}, singular values {:.1}",
        worst[0], worst[1], worst[2], worst[3]
    );
}

/// nalgebra, from the raw rows: at several penalties the state's
/// coefficients solve the caller-unit penalised normal equations, and its
/// residual sum of squares and effective degrees of freedom
/// `tr(Xc A^-1 Xc^T W) (+1)` equal those formed from the rows.
#[test]
fn state_path_matches_the_penalised_normal_equations() {
    for (seed, standardize) in [(7u64, false), (8, true)] {
        let (x, y, w) = data(seed, 60, 4, true);
        let (n, p) = x.dim();
        let st = state(&x, &y, Some(&w), true, 4);
        let path = st.ridge_path(0, standardize).expect("path");
        let wsum: f64 = w.sum();
        let m: Vec<f64> = (0..p)
            .map(|j| (0..n).map(|i| w[i] * x[(i, j)]).sum::<f64>() / wsum)
            .collect();
        let ym = (0..n).map(|i| w[i] * y[i]).sum::<f64>() / wsum;
        let xc = DMatrix::from_fn(n, p, |i, j| x[(i, j)] - m[j]);
        let yc = DVector::from_fn(n, |i, _| y[i] - ym);
        let wd = DMatrix::from_diagonal(&DVector::from_fn(n, |i, _| w[i]));
        let gram = xc.transpose() * &wd * &xc;
        for lambda in [1e-2, 3.0, 250.0, 1e5] {
            let mut a = gram.clone();
            for j in 0..p {
                a[(j, j)] += lambda
                    * if standardize {
                        gram[(j, j)] / wsum
                    } else {
                        1.0
                    };
            }
            let inv = a.clone().try_inverse().expect("regular");
            let b = &inv * (xc.transpose() * &wd * &yc);
            let e = &yc - &xc * &b;
            let rss: f64 = (0..n).map(|i| w[i] * e[i] * e[i]).sum();
            let df = (&xc * &inv * xc.transpose() * &wd).trace() + 1.0;
            let fit = path.fit(lambda).expect("fit");
            let big = b.amax();
            for j in 0..p {
                let got = fit.model.coefficients()[j];
                assert!(
                    (got - b[j]).abs() <= 1e-8 * big,
                    "seed {seed} lambda {lambda} column {j}: {got} vs {}",
                    b[j]
                );
            }
            assert!(digits(fit.report.residual_sum_of_squares, rss) >= 9.0);
            assert!(digits(path.effective_df(lambda).expect("df"), df) >= 9.0);
            let curve = path
                .curve(&[lambda], Criterion::GeneralizedCrossValidation)
                .expect("curve");
            let gcv = (rss / wsum) / (1.0 - df / n as f64).powi(2);
            assert!(
                digits(curve.gcv[0], gcv) >= 9.0,
                "gcv {} vs {gcv}",
                curve.gcv[0]
            );
        }
    }
}

/// Leave-one-out needs the rows: refused with the typed error naming the
/// criterion; bad targets and penalties are refused too.
#[test]
fn state_path_refusals() {
    let (x, y, w) = data(3, 30, 3, true);
    let st = state(&x, &y, Some(&w), true, 2);
    let path = st.ridge_path(0, false).expect("path");
    let e = path.curve(&[1.0, 2.0], Criterion::LeaveOneOut).unwrap_err();
    assert!(matches!(
        e,
        Error::CriterionNeedsRows {
            criterion: Criterion::LeaveOneOut
        }
    ));
    assert!(e.to_string().contains("leave-one-out"));
    assert!(matches!(
        st.ridge_path(1, false),
        Err(Error::InvalidParameter { name: "target", .. })
    ));
    assert!(matches!(
        path.fit(-1.0),
        Err(Error::InvalidParameter {
            name: "penalty",
            ..
        })
    ));
    assert!(matches!(
        path.curve(&[1.0, f64::NAN], Criterion::GeneralizedCrossValidation),
        Err(Error::InvalidGridPenalty { index: 1, .. })
    ));
    let empty = TriangleState::new(3, 1, true).expect("state");
    assert!(matches!(empty.ridge_path(0, false), Err(Error::NoRows)));
}
