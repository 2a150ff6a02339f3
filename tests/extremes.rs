//! Data near the ends of the f64 range: every solver, inference, the model's
//! methods and cross-validation give the answer the same data give near 1,
//! or a typed error — never a silently wrong number, never inf or NaN in
//! `Ok`.
//!
//! The reference is an exact identity: multiplying the design by `2^kx`,
//! the target by `2^ky` or the weights by `2^kw` (exact in binary floating
//! point, as long as the values stay representable) multiplies every slope
//! by `2^(ky - kx)`, the intercept by `2^ky`, and leaves every t statistic,
//! p-value and R² unchanged. The base data have mantissas of at most 9
//! bits, so that they stay exact even as subnormal numbers near `2^-1060`.

mod common;

use common::p2;
use leastline::ridge::{Ridge, RidgeFactorization, RowFolds};
use leastline::{
    Accelerated, Cholesky, Error, GradientDescent, Input, Problem, Qr, Solver, Stochastic, Svd,
};
use ndarray::{array, Array1, Array2};

/// 24 rows, 2 columns with values in `[0, 8)`, a noisy target in `[-16,
/// 16)`: every value a multiple of 1/8 (so exactly scalable).
fn base() -> (Array2<f64>, Array1<f64>) {
    let n = 24;
    let x = Array2::from_shape_fn((n, 2), |(i, j)| {
        let k = (i * (3 + 2 * j) + 5 * j) % 61;
        k as f64 / 8.0
    });
    let y = Array1::from_shape_fn(n, |i| {
        let noise = ((i * 7) % 5) as f64 / 8.0 - 0.25;
        (0.5 * x[(i, 0)] - 0.75 * x[(i, 1)] + 1.0 + noise).clamp(-16.0, 15.875)
    });
    (x, y)
}

fn closed_forms() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(0.0)),
        Box::new(Ridge::new(0.0).with_factorization(RidgeFactorization::Svd)),
    ]
}

fn all_solvers() -> Vec<Box<dyn Solver>> {
    let mut s = closed_forms();
    s.push(Box::new(
        GradientDescent::new()
            .with_tolerance(1e-12)
            .with_max_iterations(5000),
    ));
    s.push(Box::new(Accelerated::new().with_tolerance(1e-12)));
    s.push(Box::new(Stochastic::new().with_max_iterations(20)));
    s
}

/// `|a - b| <= tol * |b|`.
fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs()
}

/// Fits the base problem scaled by `2^kx`, `2^ky` with every solver and
/// checks slopes and intercept against the solver's own fit at scale 1: to
/// 1e-12 for the closed forms, 1e-8 for the iterative solvers (whose passes
/// may add in another order near the ends of the range, and so stop one
/// iteration apart).
fn check_scaled(kx: i32, ky: i32, solvers: &[Box<dyn Solver>], intercept_abs: f64) {
    let (x, y) = base();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let xs = x.mapv(|v| v * p2(kx));
    let ys = y.mapv(|v| v * p2(ky));
    let scaled = Problem::new(xs.view(), ys.view()).unwrap();
    for solver in solvers {
        let reference = solver.fit(&problem).unwrap();
        let tol = if reference.report.iterations.is_some() && solver.name() != "qr-refined" {
            1e-8
        } else {
            1e-12
        };
        let fit = solver
            .fit(&scaled)
            .unwrap_or_else(|e| panic!("{} at 2^{kx}, 2^{ky}: {e}", solver.name()));
        for j in 0..2 {
            let want = reference.model.coefficients()[j] * p2(ky - kx);
            let got = fit.model.coefficients()[j];
            assert!(
                close(got, want, tol),
                "{} at 2^{kx}, 2^{ky}: slope {j} {got:e}, expected {want:e}",
                solver.name()
            );
        }
        let want = reference.model.intercept() * p2(ky);
        let got = fit.model.intercept();
        assert!(
            (got - want).abs() <= tol * want.abs() + intercept_abs,
            "{} at 2^{kx}, 2^{ky}: intercept {got:e}, expected {want:e}",
            solver.name()
        );
    }
}

/// Item 2: column sums near the overflow limit. The sums of these columns
/// (24 values near 2^1022) overflow; the means must not.
#[test]
fn designs_near_the_overflow_limit_fit_like_designs_near_one() {
    check_scaled(1020, 0, &all_solvers(), 0.0);
    check_scaled(1020, 500, &all_solvers(), 0.0);
    // (The target near the limit as well: its residual sum of squares,
    // about 2^2040, is then not representable: see the next test.)
    let (x, y) = base();
    let xs = x.mapv(|v| v * p2(1020));
    let problem = Problem::new(xs.view(), y.view()).unwrap();
    assert_eq!(problem.column_means()[0], {
        let m = x.column(0).sum() / 24.0;
        m * p2(1020)
    });
}

/// Item 12: a residual sum of squares beyond the range of f64 is a typed
/// error, never an infinite report.
#[test]
fn sums_of_squares_beyond_the_range_are_typed_errors() {
    let (x, y) = base();
    let ys = y.mapv(|v| v * p2(1015));
    let problem = Problem::new(x.view(), ys.view()).unwrap();
    for solver in all_solvers() {
        match solver.fit(&problem) {
            Err(Error::Overflow { .. }) => {}
            Ok(fit) => panic!(
                "{}: Ok with residual sum of squares {:e}",
                solver.name(),
                fit.report.residual_sum_of_squares
            ),
            Err(other) => panic!("{}: {other}", solver.name()),
        }
    }
    // The model's own measures stay finite: R² is scale-free.
    let fit = Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap();
    let r2 = fit.model.r_squared(x.view(), y.view()).unwrap();
    let big = leastline::LinearModel::new(
        fit.model.coefficients().mapv(|b| b * p2(1015)),
        fit.model.intercept() * p2(1015),
    )
    .unwrap();
    let r2_big = big.r_squared(x.view(), ys.view()).unwrap();
    assert!(close(r2_big, r2, 1e-14), "{r2_big} vs {r2}");
    assert!(matches!(
        big.mean_squared_error(x.view(), ys.view()),
        Err(Error::Overflow { .. })
    ));
}

/// Item 4: subnormal designs (values near 2^-1060, about 1e-319) fit in
/// every solver, exactly like the same data near 1.
#[test]
fn subnormal_designs_fit_in_every_solver() {
    // The intercept near 2^-1060 keeps about 14 bits: compare it to that.
    check_scaled(-1060, -1060, &all_solvers(), p2(-1066));
    check_scaled(-1030, -1040, &all_solvers(), p2(-1066));
}

/// Items 2 and 12: a column spanning more than f64's range about its mean
/// is a typed error naming it (its centered values cannot be represented).
#[test]
fn spreads_beyond_the_range_are_typed_errors() {
    // Mean 0.25e308: 1.7e308 - mean fits, mean + 1.7e308 does not.
    let x = array![[1.0, 1.7e308], [2.0, -1.7e308], [3.0, 1.0e308], [4.0, 0.0]];
    let y = array![1.0, 2.0, 3.0, 4.0];
    assert_eq!(
        Problem::new(x.view(), y.view()).unwrap_err(),
        Error::SpreadOverflow {
            input: Input::Design,
            column: Some(1),
            column_name: None,
        }
    );
}

/// Item 10: positive weights too small to be represented beside the
/// largest are refused with a typed error naming the row (they used to be
/// dropped from the fit while the log-likelihood counted them).
#[test]
fn weights_too_small_to_scale_are_refused() {
    let (x, y) = base();
    let mut w = Array1::from_elem(24, p2(33));
    w[3] = p2(-1074);
    match Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
    {
        Err(Error::WeightRange { row: 3, .. }) => {}
        other => panic!("expected WeightRange at row 3, got {other:?}"),
    }
    // A weight ratio of 2^1000 is representable and used.
    w[3] = p2(-967);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    assert_eq!(problem.usable_rows(), 24);
}

/// Item 10: ridge with all weights near 1e-300 is exactly ridge with unit
/// weights and the penalty divided by the same factor (the weighted sum of
/// squares scales with the weights): no internal clamp.
#[test]
fn ridge_with_tiny_or_huge_weights_is_exact() {
    let (x, y) = base();
    let unit = Problem::new(x.view(), y.view()).unwrap();
    for (kw, lambda) in [(-1000, 0.75), (-1074, 3.0), (1000, 0.5)] {
        let w = Array1::from_elem(24, p2(kw));
        let weighted = Problem::builder(x.view(), y.view())
            .with_weights(w.view())
            .build()
            .unwrap();
        for method in [
            RidgeFactorization::ByShape,
            RidgeFactorization::Cholesky,
            RidgeFactorization::AugmentedQr,
            RidgeFactorization::Svd,
            RidgeFactorization::Dual,
        ] {
            let a = Ridge::new(lambda)
                .with_factorization(method)
                .fit(&unit)
                .unwrap();
            let b = Ridge::new(lambda * p2(kw))
                .with_factorization(method)
                .fit(&weighted)
                .unwrap();
            for j in 0..2 {
                let (u, v) = (a.model.coefficients()[j], b.model.coefficients()[j]);
                assert!(close(v, u, 1e-12), "{method:?} 2^{kw}: {v:e} vs {u:e}");
            }
            assert!(close(b.model.intercept(), a.model.intercept(), 1e-12));
        }
    }
}

/// Item 3: t statistics, p-values and R² do not depend on the units: the
/// same problem with the design near 1e163 or 1e-154, the target near
/// 1e-300, or every weight equal to 5e-324, gives the t statistics of the
/// problem near 1 (the exact identity above), and standard errors and
/// intervals scaled by the exact factor.
#[test]
fn inference_does_not_depend_on_the_units() {
    let (x, y) = base();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let reference = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap();
    let t_ref: Vec<f64> = reference.estimates().map(|e| e.t).collect();
    for (kx, ky, kw) in [
        (540, 0, 0),     // |x| near 1e163: slope variances near 1e-326
        (-512, 0, 0),    // |x| near 1e-154: slope variances near 1e307
        (0, -1000, 0),   // targets near 1e-300
        (0, 0, -1074),   // every weight 5e-324
        (300, -700, 40), // all at once
    ] {
        let xs = x.mapv(|v| v * p2(kx));
        let ys = y.mapv(|v| v * p2(ky));
        let w = Array1::from_elem(24, p2(kw));
        let scaled = Problem::builder(xs.view(), ys.view())
            .with_weights(w.view())
            .build()
            .unwrap();
        let fit = Qr::new().fit(&scaled).unwrap();
        let inf = fit
            .inference(&scaled)
            .unwrap_or_else(|e| panic!("2^{kx}, 2^{ky}, 2^{kw}: {e}"));
        for (i, (e, &t)) in inf.estimates().zip(&t_ref).enumerate() {
            assert!(
                close(e.t, t, 1e-10),
                "2^{kx}, 2^{ky}, 2^{kw}: t of parameter {i} is {}, expected {t}",
                e.t
            );
            assert!(e.std_error > 0.0 && e.std_error.is_finite());
            assert!(e.p_value > 0.0);
        }
        for j in 0..2 {
            let want = reference.coefficients[j].std_error * p2(ky - kx);
            let got = inf.coefficients[j].std_error;
            assert!(close(got, want, 1e-10), "se {j}: {got:e} vs {want:e}");
        }
        // sigma^2 = sum w e^2 / df: scales with 2^(2 ky + kw).
        let sd = reference.residual_sd * p2(ky) * p2(kw).sqrt();
        assert!(close(inf.residual_sd, sd, 1e-10));
        assert!(close(
            inf.goodness.r_squared,
            reference.goodness.r_squared,
            1e-12
        ));
        let at = inf.predict(xs.slice(ndarray::s![..3, ..])).unwrap();
        let at_ref = reference.predict(x.slice(ndarray::s![..3, ..])).unwrap();
        for i in 0..3 {
            let want = at_ref.prediction_std_error[i] * p2(ky);
            assert!(close(
                at.mean_std_error[i],
                at_ref.mean_std_error[i] * p2(ky),
                1e-10
            ));
            // The noise term sigma^2 / w0 with w0 = 1 scales with 2^kw too.
            if kw == 0 {
                assert!(close(at.prediction_std_error[i], want, 1e-10));
            }
        }
        let d = inf.diagnostics(&scaled).unwrap();
        let d_ref = reference.diagnostics(&problem).unwrap();
        let rmax = d_ref.residuals.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        for i in 0..24 {
            assert!((d.leverage[i] - d_ref.leverage[i]).abs() <= 1e-12);
            let want = d_ref.residuals[i] * p2(ky);
            assert!(
                (d.residuals[i] - want).abs() <= 1e-12 * rmax * p2(ky),
                "residual {i}: {:e} vs {want:e}",
                d.residuals[i]
            );
        }
    }
}

/// Item 12: R² and cross-validation scores near the ends of the range are
/// the scores near 1 (scaled), never NaN.
#[test]
fn model_measures_and_fold_errors_do_not_overflow() {
    let (x, y) = base();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let cv = RowFolds::new().with_folds(3).with_seed(11);
    let reference = cv.held_out_error(&Qr::new(), &problem).unwrap();
    // Weights near 1e308: their sum (and each weighted square) overflows;
    // the scores must not change.
    let w = Array1::from_elem(24, p2(1023));
    let heavy = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let scores = cv.held_out_error(&Qr::new(), &heavy).unwrap();
    for (a, b) in scores.fold_errors.iter().zip(&reference.fold_errors) {
        assert!(close(*a, *b, 1e-12), "{a:e} vs {b:e}");
    }
    assert!(close(scores.mean_error, reference.mean_error, 1e-12));
    // Targets near 1e150: fold errors near 1e300, still representable.
    let ys = y.mapv(|v| v * p2(498));
    let tall = Problem::new(x.view(), ys.view()).unwrap();
    let scores = cv.held_out_error(&Qr::new(), &tall).unwrap();
    for (a, b) in scores.fold_errors.iter().zip(&reference.fold_errors) {
        assert!(close(*a, *b * p2(996), 1e-10), "{a:e} vs {b:e}");
    }
    assert!(scores.std_dev.is_finite() && scores.std_error.is_finite());
    // R² of targets near 1e300 (their squares overflow).
    let fit = Qr::new().fit(&problem).unwrap();
    let r2 = fit.model.r_squared(x.view(), y.view()).unwrap();
    let ys = y.mapv(|v| v * p2(1000));
    let big = leastline::LinearModel::new(
        fit.model.coefficients().mapv(|b| b * p2(1000)),
        fit.model.intercept() * p2(1000),
    )
    .unwrap();
    assert!(close(
        big.r_squared(x.view(), ys.view()).unwrap(),
        r2,
        1e-13
    ));
}

/// Item 12: a prediction beyond the range of f64 is a typed error naming
/// the row; a NaN coefficient cannot make a model.
#[test]
fn predictions_beyond_the_range_are_typed_errors() {
    let model = leastline::LinearModel::new(array![1e300, -1e300], 1.0).unwrap();
    let x = array![[1.0, 1.0], [1e10, 0.0]];
    assert_eq!(
        model.predict(x.view()),
        Err(Error::OverflowAt {
            what: "prediction",
            row: 1
        })
    );
    // Products that overflow on their own but cancel: the scaled sum is
    // exact.
    let model = leastline::LinearModel::new(array![1e300, 1e300], 0.0).unwrap();
    let x = array![[1e10, -1e10]];
    assert_eq!(model.predict(x.view()).unwrap()[0], 0.0);
    assert!(matches!(
        leastline::LinearModel::new(array![1.0, f64::NAN], 0.0),
        Err(Error::NonFinite {
            input: Input::Coefficients,
            row: 1,
            ..
        })
    ));
    assert!(matches!(
        leastline::LinearModel::new(array![1.0], f64::INFINITY),
        Err(Error::NonFinite {
            input: Input::Coefficients,
            row: 1,
            ..
        })
    ));
}
