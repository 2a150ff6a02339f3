//! Choosing the ridge penalty: closed-form leave-one-out and generalized
//! cross-validation scores, the default grid, and k-fold cross-validation.
//!
//! No published values exist for these scores on our synthetic data; every
//! reference is an identity evaluated independently: leave-one-out errors
//! by refitting without each row, generalized cross-validation and degrees
//! of freedom from the hat matrix formed explicitly with nalgebra, k-fold
//! scores by refitting on copies of the training rows.

#![allow(clippy::needless_range_loop)] // index-heavy reference formulas

mod common;
mod ridge_support;

use leastline::ridge::{Criterion, Ridge, RidgeFactorization, RidgePath, RowFolds};
use leastline::{Error, Problem, Qr, Solver};
use nalgebra::{DMatrix, DVector};
use ndarray::Array1;
use proptest::prelude::*;
use ridge_support::{make_case, penalty_scale, weights_strategy, Case, Weights};

/// The case with one more column: a copy of column 0 disturbed at the
/// 1e-7 level, so that the Gram matrix keeps too few digits and the path
/// must take the QR route.
fn with_near_copy(case: &Case) -> Case {
    let (n, p) = case.x.dim();
    let spread = case.x.column(0).iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let x = ndarray::Array2::from_shape_fn((n, p + 1), |(i, j)| {
        if j < p {
            case.x[(i, j)]
        } else {
            case.x[(i, 0)] + 1e-7 * spread * (((i * 7919) % 13) as f64 / 13.0 - 0.5)
        }
    });
    Case { x, ..case.clone() }
}

/// Leave-one-out error by brute force: refit without each row of non-zero
/// weight and predict it.
fn brute_force_loo(case: &Case, lambda: f64) -> f64 {
    let (mut num, mut den) = (0.0, 0.0);
    for i in 0..case.rows() {
        let w = case.weight(i);
        if w == 0.0 {
            continue;
        }
        let rest = case.without_row(i);
        let fit = Ridge::new(lambda)
            .with_factorization(RidgeFactorization::AugmentedQr)
            .fit(&rest.problem())
            .unwrap();
        let e = case.y[i] - fit.model.predict_row(case.x.row(i)).unwrap();
        num += w * e * e;
        den += w;
    }
    num / den
}

/// The hat matrix of the weighted problem, formed explicitly:
/// `H = A (A^T A + D)^-1 A^T` with `A = [sqrt(w) 1, sqrt(w) X]` and
/// `D = diag(0, lambda P)`.
fn hat_matrix(case: &Case, lambda: f64, standardize: bool) -> DMatrix<f64> {
    let (n, p) = case.x.dim();
    let off = usize::from(case.intercept);
    let pw = case.penalty_weights(standardize);
    let a = DMatrix::from_fn(n, p + off, |i, c| {
        let s = case.weight(i).sqrt();
        if c < off {
            s
        } else {
            s * case.x[(i, c - off)]
        }
    });
    let mut g = a.transpose() * &a;
    for j in 0..p {
        g[(off + j, off + j)] += lambda * pw[j];
    }
    let inner = g
        .lu()
        .solve(&a.transpose())
        .expect("regular penalised Gram");
    &a * inner
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(24)))]

    /// The closed-form leave-one-out errors equal refits that leave each
    /// row out, on tall and wide designs (the two decompositions), with
    /// weights (some zero) and with or without intercept.
    #[test]
    fn loo_equals_brute_force(
        seed in 0u64..10_000,
        n in 5usize..13,
        p in 1usize..6,
        wide in any::<bool>(),
        collinear in any::<bool>(),
        weights in weights_strategy(),
        intercept in any::<bool>(),
    ) {
        let p = if wide { n + p } else { p };
        let mut case = make_case(seed, n, p, weights, intercept);
        let collinear = collinear && !wide && case.usable_rows() > p;
        if collinear {
            case = with_near_copy(&case);
        }
        let problem = case.problem();
        let path = RidgePath::new(&problem, false).unwrap();
        // Wide designs use the row side; a near-copy column forces the QR
        // triangle; otherwise the Gram triangle is used unless this small
        // random design happens to be ill-conditioned.
        let route = path.decomposition();
        // Zero weights can leave fewer usable rows than columns: that design
        // is wide for the path too.
        let row_side = wide || case.usable_rows() < p;
        match (row_side, collinear) {
            (true, _) => prop_assert_eq!(route, "row-gram"),
            (false, true) => prop_assert_eq!(route, "householder-qr"),
            (false, false) => prop_assert!(route == "gram-cholesky" || route == "householder-qr"),
        }
        let top = penalty_scale(&case, false);
        let grid: Vec<f64> = [-3.0, -1.5, 0.0, 1.0].iter().map(|e| top * 10f64.powf(*e)).collect();
        let curve = path.curve(&grid, Criterion::LeaveOneOut).unwrap();
        let loo = curve.loo.clone().unwrap();
        for (m, &lambda) in grid.iter().enumerate() {
            let brute = brute_force_loo(&case, lambda);
            prop_assert!((loo[m] - brute).abs() <= 1e-7 * brute, "lambda {}: {} vs {}", lambda, loo[m], brute);
        }
        prop_assert!(loo[curve.best_index] <= loo.iter().cloned().fold(f64::INFINITY, f64::min));
    }

    /// Generalized cross-validation equals its defining formula
    /// `(sum w e^2 / W) / (1 - tr(H) / n_u)^2` with `H` formed explicitly;
    /// the degrees of freedom equal `tr(H)`, the residual sum of squares
    /// `|(I - H) sqrt(w) y|^2`, and the leave-one-out score the formula
    /// `sum w_i (e_i / (1 - h_ii))^2 / W`.
    #[test]
    fn gcv_equals_defining_formula(
        seed in 0u64..10_000,
        n in 4usize..25,
        p in 1usize..30,
        weights in weights_strategy(),
        intercept in any::<bool>(),
        standardize in any::<bool>(),
    ) {
        let case = make_case(seed, n, p, weights, intercept);
        let problem = case.problem();
        let path = RidgePath::new(&problem, standardize).unwrap();
        let top = penalty_scale(&case, standardize);
        let grid: Vec<f64> = [-2.5, -1.0, 0.5].iter().map(|e| top * 10f64.powf(*e)).collect();
        let curve = path.curve(&grid, Criterion::LeaveOneOut).unwrap();
        let loo = curve.loo.clone().unwrap();
        let wsum: f64 = (0..n).map(|i| case.weight(i)).sum();
        let nu = case.usable_rows() as f64;
        for (m, &lambda) in grid.iter().enumerate() {
            let h = hat_matrix(&case, lambda, standardize);
            let sy = DVector::from_fn(n, |i, _| case.weight(i).sqrt() * case.y[i]);
            let e = &sy - &h * &sy;
            let rss = e.norm_squared();
            let tr = h.trace();
            let gcv = (rss / wsum) / (1.0 - tr / nu).powi(2);
            let mut loo_direct = 0.0;
            for i in 0..n {
                if case.weight(i) > 0.0 {
                    loo_direct += (e[i] / (1.0 - h[(i, i)])).powi(2);
                }
            }
            loo_direct /= wsum;
            prop_assert!((curve.effective_df[m] - tr).abs() < 1e-8 * tr.max(1.0), "df {} vs {}", curve.effective_df[m], tr);
            prop_assert!((curve.residual_sum_of_squares[m] - rss).abs() <= 1e-7 * rss, "rss {} vs {}", curve.residual_sum_of_squares[m], rss);
            if tr < nu - 1e-6 {
                prop_assert!((curve.gcv[m] - gcv).abs() <= 1e-6 * gcv, "gcv {} vs {}", curve.gcv[m], gcv);
            }
            if loo_direct.is_finite() && loo_direct < 1e100 {
                prop_assert!((loo[m] - loo_direct).abs() <= 1e-6 * loo_direct, "loo {} vs {}", loo[m], loo_direct);
            }
        }
    }
}

/// The path's closed-form residual sum of squares equals the one the
/// Cholesky fit measures by a pass over the data (identity), and the
/// degrees of freedom fall from `p + 1` towards 1 as the penalty grows.
#[test]
fn curve_rss_and_df_match_direct_fits() {
    let case = make_case(21, 60, 7, Weights::Positive, true);
    let problem = case.problem();
    let path = RidgePath::new(&problem, false).unwrap();
    let grid = path.default_grid(30).unwrap();
    let curve = path
        .curve(&grid, Criterion::GeneralizedCrossValidation)
        .unwrap();
    assert!(curve.loo.is_none());
    for (m, &lambda) in grid.iter().enumerate().step_by(5) {
        let fit = Ridge::new(lambda)
            .with_factorization(RidgeFactorization::Cholesky)
            .fit(&problem)
            .unwrap();
        let a = curve.residual_sum_of_squares[m];
        let b = fit.report.residual_sum_of_squares;
        assert!((a - b).abs() <= 1e-9 * b, "{a} vs {b}");
    }
    let df = &curve.effective_df;
    assert!(df.windows(2).all(|w| w[1] <= w[0]));
    assert!(df[0] > 7.9 && df[0] <= 8.0, "{}", df[0]);
    assert!(df[df.len() - 1] < 1.8, "{}", df[df.len() - 1]);
    let best = curve.gcv[curve.best_index];
    assert!(curve.gcv.iter().all(|g| *g >= best));
    assert_eq!(curve.best_penalty, grid[curve.best_index]);
}

#[test]
fn default_grid_spans_the_singular_values() {
    let case = make_case(4, 50, 6, Weights::None, true);
    let problem = case.problem();
    let path = RidgePath::new(&problem, false).unwrap();
    let s = path.singular_values();
    assert_eq!(s.len(), 6);
    assert!(s.windows(2).all(|w| w[1] <= w[0]));
    let grid = path.default_grid(25).unwrap();
    assert_eq!(grid.len(), 25);
    assert!(grid.windows(2).all(|w| w[1] > w[0]));
    let top = s[0] * s[0];
    assert!((grid[24] - 10.0 * top).abs() <= 1e-9 * top);
    let lo = (s[5] * s[5] / 100.0).max(1e-10 * top);
    assert!((grid[0] - lo).abs() <= 1e-9 * lo);
    // The filter factors of the singular values, in the caller's units,
    // give the degrees of freedom (identity).
    let lambda = grid[12];
    let df: f64 = 1.0 + s.iter().map(|v| v * v / (v * v + lambda)).sum::<f64>();
    assert!((path.effective_df(lambda).unwrap() - df).abs() < 1e-12 * df);
    assert_eq!(path.default_grid(1).unwrap().len(), 1);
    assert!(matches!(
        path.default_grid(0),
        Err(Error::InvalidParameter { name: "grid", .. })
    ));
}

#[test]
fn bad_grids_are_typed_errors() {
    let case = make_case(2, 12, 3, Weights::None, true);
    let problem = case.problem();
    let path = RidgePath::new(&problem, false).unwrap();
    assert!(matches!(
        path.curve(&[], Criterion::LeaveOneOut),
        Err(Error::InvalidParameter { name: "grid", .. })
    ));
    let err = path
        .curve(&[1.0, 2.0, -0.5], Criterion::LeaveOneOut)
        .unwrap_err();
    assert_eq!(
        err,
        Error::InvalidGridPenalty {
            index: 2,
            value: -0.5
        }
    );
    let err = path
        .curve(&[f64::NAN], Criterion::GeneralizedCrossValidation)
        .unwrap_err();
    assert!(matches!(err, Error::InvalidGridPenalty { index: 0, .. }));
}

/// A wide design at penalty 0 interpolates every row: no score is finite.
#[test]
fn interpolating_grid_has_no_finite_score() {
    let case = make_case(8, 6, 20, Weights::None, true);
    let problem = case.problem();
    let path = RidgePath::new(&problem, false).unwrap();
    for criterion in [
        Criterion::LeaveOneOut,
        Criterion::GeneralizedCrossValidation,
    ] {
        let err = path.curve(&[0.0], criterion).unwrap_err();
        // The error names the criterion that was scored, typed.
        assert!(
            matches!(err, Error::NoFiniteScore { penalties: 1, criterion: c } if c == criterion),
            "{err}"
        );
        assert!(err.to_string().contains(criterion.label()), "{err}");
        // With a positive penalty beside it, that one is chosen.
        let curve = path.curve(&[0.0, 1.0], criterion).unwrap();
        assert_eq!(curve.best_index, 1);
    }
}

/// Folds: deterministic for a seed, every row of non-zero weight in
/// exactly one fold, sizes within one, zero-weight rows in none.
#[test]
fn folds_are_a_seeded_partition() {
    let case = make_case(9, 23, 2, Weights::SomeZero, true);
    let problem = case.problem();
    let cv = RowFolds::new().with_folds(4).with_seed(99);
    let a = cv.assignments(&problem).unwrap();
    assert_eq!(a, cv.assignments(&problem).unwrap());
    assert_ne!(
        a,
        RowFolds::new()
            .with_folds(4)
            .with_seed(100)
            .assignments(&problem)
            .unwrap()
    );
    let mut sizes = [0usize; 4];
    for (i, f) in a.iter().enumerate() {
        match f {
            Some(f) => {
                assert!(case.weight(i) > 0.0);
                sizes[*f] += 1;
            }
            None => assert_eq!(case.weight(i), 0.0),
        }
    }
    assert_eq!(sizes.iter().sum::<usize>(), case.usable_rows());
    assert!(sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1);
}

/// Identity: each fold's error equals a fit on a copy of the training rows
/// scored on the held-out rows, for any solver; the summary statistics
/// follow from the fold errors.
#[test]
fn kfold_equals_refits_on_copied_rows() {
    let case = make_case(17, 31, 3, Weights::Positive, true);
    let problem = case.problem();
    let cv = RowFolds::new().with_folds(5).with_seed(3);
    let fold_of = cv.assignments(&problem).unwrap();
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(Qr::new()),
        Box::new(Ridge::new(2.0)),
        Box::new(
            Ridge::new(0.3)
                .with_standardize(true)
                .with_factorization(RidgeFactorization::Svd),
        ),
    ];
    for solver in &solvers {
        let result = cv.held_out_error(solver.as_ref(), &problem).unwrap();
        assert_eq!(result.fold_errors.len(), 5);
        for f in 0..5 {
            let train: Vec<usize> = (0..31).filter(|&i| fold_of[i] != Some(f)).collect();
            let held: Vec<usize> = (0..31).filter(|&i| fold_of[i] == Some(f)).collect();
            let sub = case.subset(&train);
            let fit = solver.fit(&sub.problem()).unwrap();
            let (mut num, mut den) = (0.0, 0.0);
            for &i in &held {
                let e = case.y[i] - fit.model.predict_row(case.x.row(i)).unwrap();
                num += case.weight(i) * e * e;
                den += case.weight(i);
            }
            let expected = num / den;
            let got = result.fold_errors[f];
            assert!(
                (got - expected).abs() <= 1e-9 * expected,
                "{} fold {f}: {got} vs {expected}",
                solver.name()
            );
            assert_eq!(result.fold_rows[f], held.len());
        }
        let mean = result.fold_errors.iter().sum::<f64>() / 5.0;
        assert!((result.mean_error - mean).abs() <= 1e-12 * mean);
        let var = result
            .fold_errors
            .iter()
            .map(|e| (e - mean).powi(2))
            .sum::<f64>()
            / 4.0;
        assert!((result.std_dev - var.sqrt()).abs() <= 1e-12 * var.sqrt().max(1e-300));
        assert!((result.std_error - var.sqrt() / 5f64.sqrt()).abs() <= 1e-12 * var.sqrt());
    }
}

#[test]
fn kfold_errors_are_typed() {
    let case = make_case(1, 10, 2, Weights::SomeZero, true);
    let problem = case.problem();
    let usable = case.usable_rows();
    for k in [0, 1] {
        let err = RowFolds::new()
            .with_folds(k)
            .with_seed(0)
            .held_out_error(&Qr::new(), &problem)
            .unwrap_err();
        assert!(matches!(err, Error::InvalidParameter { name: "folds", .. }));
    }
    let err = RowFolds::new()
        .with_folds(usable + 1)
        .with_seed(0)
        .held_out_error(&Qr::new(), &problem)
        .unwrap_err();
    assert_eq!(
        err,
        Error::TooFewRowsForFolds {
            usable_rows: usable,
            folds: usable + 1
        }
    );
    assert!(RowFolds::new()
        .with_folds(usable)
        .with_seed(0)
        .held_out_error(&Ridge::new(1.0), &problem)
        .is_ok());
    // Weights that leave fewer rows than folds.
    let w = Array1::from(vec![1.0, 0.0, 0.0, 2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0]);
    let weighted = Problem::builder(case.x.view(), case.y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    assert_eq!(
        RowFolds::new()
            .with_folds(4)
            .with_seed(0)
            .held_out_error(&Qr::new(), &weighted)
            .unwrap_err(),
        Error::TooFewRowsForFolds {
            usable_rows: 3,
            folds: 4
        }
    );
    // A training fit that fails names its fold and carries the cause:
    // least squares on 2 rows cannot fit 3 parameters.
    let err = RowFolds::new()
        .with_folds(3)
        .with_seed(0)
        .held_out_error(&Qr::new(), &weighted)
        .unwrap_err();
    match err {
        Error::FoldFit { fold, error } => {
            assert_eq!(fold, 0);
            assert!(matches!(*error, Error::TooFewRows { .. }));
        }
        other => panic!("unexpected {other:?}"),
    }
}

/// The two triangles (Gram Cholesky and block QR) give the same path: on a
/// well-conditioned design the Gram route is taken; the same design with a
/// harmless near-copy column forces the QR route, and dropping the copy's
/// influence is not needed: we compare the QR route with the Cholesky and
/// augmented-QR ridge fits, which share no code with the path.
#[test]
fn both_triangle_routes_match_direct_fits() {
    for (seed, weights) in [(31, Weights::None), (32, Weights::SomeZero)] {
        let base = make_case(seed, 40, 5, weights, true);
        for case in [base.clone(), with_near_copy(&base)] {
            let problem = case.problem();
            let path = RidgePath::new(&problem, true).unwrap();
            for lambda in [1e-2, 1.0, 1e2] {
                let a = path.fit(lambda).unwrap();
                let b = Ridge::new(lambda)
                    .with_factorization(RidgeFactorization::AugmentedQr)
                    .with_standardize(true)
                    .fit(&problem)
                    .unwrap();
                let d = ridge_support::rel_diff(
                    a.model.coefficients().as_slice().unwrap(),
                    b.model.coefficients().as_slice().unwrap(),
                );
                assert!(d < 1e-8, "{}: {d:e}", path.decomposition());
                let (ra, rb) = (
                    a.report.residual_sum_of_squares,
                    b.report.residual_sum_of_squares,
                );
                assert!((ra - rb).abs() <= 1e-9 * rb, "{ra} vs {rb}");
            }
        }
    }
}
