//! What a fit carries beyond its coefficients: the residual standard error
//! and R² in the report, `predict`, and fitted values and residuals on
//! request. Checked against NIST's certified values, against direct
//! computation from the residuals, and against inference.

mod common;

use common::gen;
use common::nist;
use common::p2;
use leastline::{Accelerated, Cholesky, GradientDescent, Problem, Qr, Ridge, Solver, Svd};
use ndarray::{array, Array1, Array2};

/// NIST StRD certified "Residual Standard Deviation" and "R-Squared" (the
/// uncentered R² for NoInt1 and NoInt2, as NIST certifies it) against the
/// report's sigma and R² from the refined QR fit.
#[test]
fn sigma_and_r_squared_match_nist_certified_values() {
    for (name, digits) in [
        ("Norris", 12.0),
        ("Pontius", 10.0),
        ("NoInt1", 12.0),
        ("NoInt2", 12.0),
        ("Longley", 10.0),
        ("Filip", 6.0),
        ("Wampler3", 10.0),
        ("Wampler4", 10.0),
        ("Wampler5", 10.0),
    ] {
        let d = nist::load(name);
        let problem = Problem::builder(d.x.view(), d.y.view())
            .with_intercept(d.intercept)
            .build()
            .unwrap();
        let fit = Qr::refined().fit(&problem).unwrap();
        let sigma = fit.report.sigma.expect("residual df > 0");
        let r2 = fit.report.r_squared.expect("non-constant target");
        let c = &d.certified;
        assert!(
            nist::lre(sigma, c.residual_sd) >= digits,
            "{name}: sigma {sigma:e} vs certified {:e}",
            c.residual_sd
        );
        assert!(
            nist::lre(r2, c.r_squared) >= digits,
            "{name}: R² {r2} vs certified {}",
            c.r_squared
        );
    }
}

/// Direct computation from the residuals: sigma² = sum w r² / (n - k) and
/// R² = 1 - sum w r² / sum w (y - ybar_w)² (about 0 without intercept),
/// for every closed-form solver, weighted and unweighted, with and without
/// intercept.
#[test]
fn sigma_and_r_squared_match_direct_computation() {
    let mut rng = gen::rng(31);
    for case in 0..common::cases(12) as u64 {
        let n = 12 + (case as usize % 5) * 7;
        let p = 1 + case as usize % 4;
        let x = gen::normal_matrix(&mut rng, n, p);
        let noise = gen::normal_vector(&mut rng, n);
        let y = Array1::from_shape_fn(n, |i| {
            3.0 + (0..p).map(|j| (j as f64 + 0.5) * x[(i, j)]).sum::<f64>() + noise[i]
        });
        let w = gen::weights(&mut rng, n);
        for intercept in [true, false] {
            for weighted in [false, true] {
                let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
                if weighted {
                    b = b.with_weights(w.view());
                }
                let problem = b.build().unwrap();
                let ws: Vec<f64> = (0..n).map(|i| if weighted { w[i] } else { 1.0 }).collect();
                let sw: f64 = ws.iter().sum();
                let ybar = if intercept {
                    ws.iter().zip(&y).map(|(a, b)| a * b).sum::<f64>() / sw
                } else {
                    0.0
                };
                let tss: f64 = ws.iter().zip(&y).map(|(a, v)| a * (v - ybar).powi(2)).sum();
                let solvers: Vec<Box<dyn Solver>> = vec![
                    Box::new(Qr::new()),
                    Box::new(Cholesky::new()),
                    Box::new(Svd::new()),
                ];
                for solver in &solvers {
                    let fit = solver.fit(&problem).unwrap();
                    let r = fit.residuals(&problem).unwrap();
                    let rss: f64 = ws.iter().zip(&r).map(|(a, v)| a * v * v).sum();
                    let df = n - p - usize::from(intercept);
                    let sigma = (rss / df as f64).sqrt();
                    let got = fit.report.sigma.unwrap();
                    assert!(
                        (got - sigma).abs() <= 1e-12 * sigma,
                        "case {case} {} i{intercept} w{weighted}: sigma {got} vs {sigma}",
                        solver.name()
                    );
                    let r2 = 1.0 - rss / tss;
                    let got = fit.report.r_squared.unwrap();
                    assert!(
                        (got - r2).abs() <= 1e-12,
                        "case {case} {}: R² {got} vs {r2}",
                        solver.name()
                    );
                    // The report's RSS is the same sum.
                    assert!((fit.report.residual_sum_of_squares - rss).abs() <= 1e-12 * rss);
                }
            }
        }
    }
}

/// The report's R² and sigma are inference's (weighted, with and without
/// an intercept).
#[test]
fn report_agrees_with_inference() {
    let mut rng = gen::rng(7);
    for case in 0..common::cases(8) {
        let (n, p) = (25, 3);
        let x = gen::normal_matrix(&mut rng, n, p);
        let y = gen::normal_vector(&mut rng, n) + x.column(0).mapv(|v| 2.0 * v);
        let w = gen::weights(&mut rng, n);
        for intercept in [true, false] {
            let problem = Problem::builder(x.view(), y.view())
                .with_weights(w.view())
                .with_intercept(intercept)
                .build()
                .unwrap();
            let fit = Qr::new().fit(&problem).unwrap();
            let inf = fit.inference(&problem).unwrap();
            let r2 = fit.report.r_squared.unwrap();
            assert!(
                (r2 - inf.goodness.r_squared).abs() <= 1e-13,
                "case {case}: {r2} vs {}",
                inf.goodness.r_squared
            );
            let s = fit.report.sigma.unwrap();
            assert!((s - inf.residual_sd).abs() <= 1e-13 * inf.residual_sd);
        }
    }
}

/// Scaling the target by 2^k scales sigma by 2^k exactly-ish and leaves
/// R² unchanged, down to subnormal data and up near the top of the range
/// (the sums are formed in scaled coordinates).
#[test]
fn sigma_and_r_squared_at_any_scale() {
    let mut rng = gen::rng(5);
    let x = gen::normal_matrix(&mut rng, 20, 2);
    let y = gen::normal_vector(&mut rng, 20) + x.column(1).mapv(|v| v * 3.0);
    let base = Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap()
        .report;
    for (kx, ky) in [(0, -1000), (0, -600), (-400, 500), (600, 500), (-1000, 0)] {
        let xs = x.mapv(|v| v * p2(kx));
        let ys = y.mapv(|v| v * p2(ky));
        let problem = Problem::new(xs.view(), ys.view()).unwrap();
        for solver in [&Qr::new() as &dyn Solver, &Svd::new(), &Cholesky::new()] {
            let fit = solver
                .fit(&problem)
                .unwrap_or_else(|e| panic!("2^{kx}, 2^{ky} {}: {e}", solver.name()));
            let r2 = fit.report.r_squared.unwrap();
            assert!(
                (r2 - base.r_squared.unwrap()).abs() <= 1e-13,
                "2^{kx}, 2^{ky} {}: R² {r2}",
                solver.name()
            );
            let s = fit.report.sigma.unwrap() / p2(ky);
            let s0 = base.sigma.unwrap();
            assert!(
                (s - s0).abs() <= 1e-13 * s0,
                "2^{kx}, 2^{ky} {}: sigma {s} vs {s0}",
                solver.name()
            );
        }
    }
}

/// Gradient fits measure no rank, so no sigma; their R² is the closed
/// form's once converged. Ridge reports its own R².
#[test]
fn gradient_and_ridge_extras() {
    let mut rng = gen::rng(11);
    let x = gen::normal_matrix(&mut rng, 40, 3);
    let y = gen::normal_vector(&mut rng, 40) + x.column(2).mapv(|v| v - 1.0);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let exact = Qr::new().fit(&problem).unwrap().report;
    for solver in [
        &GradientDescent::new().with_tolerance(1e-12) as &dyn Solver,
        &Accelerated::new().with_tolerance(1e-12),
    ] {
        let fit = solver.fit(&problem).unwrap();
        assert_eq!(fit.report.sigma, None, "{}", solver.name());
        let r2 = fit.report.r_squared.unwrap();
        assert!(
            (r2 - exact.r_squared.unwrap()).abs() <= 1e-10,
            "{}",
            solver.name()
        );
    }
    // A penalty raises the RSS: R² falls below the unpenalised one and
    // still equals 1 - RSS/TSS of its own residuals.
    let fit = Ridge::new(5.0).fit(&problem).unwrap();
    let r = fit.residuals(&problem).unwrap();
    let rss: f64 = r.iter().map(|v| v * v).sum();
    let m = y.mean().unwrap();
    let tss: f64 = y.iter().map(|v| (v - m).powi(2)).sum();
    let r2 = fit.report.r_squared.unwrap();
    assert!((r2 - (1.0 - rss / tss)).abs() <= 1e-12);
    assert!(r2 < exact.r_squared.unwrap());
    // The rank of a penalised system is not measured: no residual df.
    assert_eq!(fit.report.sigma, None);
}

/// No sigma without residual degrees of freedom; no R² for a constant
/// target (with intercept) or an all-zero one (without).
#[test]
fn extras_absent_when_undefined() {
    let x = array![[1.0], [2.0], [4.0]];
    // Two rows, two parameters: an exact fit, zero residual df.
    let x2 = array![[1.0], [2.0]];
    let y2 = array![3.0, 5.0];
    let fit = Qr::new()
        .fit(&Problem::new(x2.view(), y2.view()).unwrap())
        .unwrap();
    assert_eq!(fit.report.residual_df, Some(0));
    assert_eq!(fit.report.sigma, None);
    assert_eq!(fit.report.r_squared, Some(1.0));
    let constant = array![2.5, 2.5, 2.5];
    let fit = Qr::new()
        .fit(&Problem::new(x.view(), constant.view()).unwrap())
        .unwrap();
    assert_eq!(fit.report.r_squared, None);
    assert_eq!(fit.report.sigma, Some(0.0));
    let zero = array![0.0, 0.0, 0.0];
    let problem = Problem::builder(x.view(), zero.view())
        .with_intercept(false)
        .build()
        .unwrap();
    let fit = Svd::new().fit(&problem).unwrap();
    assert_eq!(fit.report.r_squared, None);
    // Without intercept a non-zero constant target has R² about 0 defined.
    let problem = Problem::builder(x.view(), constant.view())
        .with_intercept(false)
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let b = fit.model.coefficients()[0];
    let rss: f64 = x.column(0).iter().map(|v| (2.5 - b * v).powi(2)).sum();
    let r2 = fit.report.r_squared.unwrap();
    assert!((r2 - (1.0 - rss / (3.0 * 6.25))).abs() <= 1e-14);
}

/// `predict` delegates to the model; fitted values plus residuals give the
/// target back; rows of weight zero get both; a wrong column count is an
/// error, not a panic.
#[test]
fn predict_fitted_values_and_residuals() {
    let mut rng = gen::rng(3);
    let x = gen::normal_matrix(&mut rng, 15, 2);
    let y = gen::normal_vector(&mut rng, 15);
    let mut w = gen::weights(&mut rng, 15);
    w[4] = 0.0;
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let fitted = fit.fitted_values(&problem).unwrap();
    let residuals = fit.residuals(&problem).unwrap();
    assert_eq!(fitted.len(), 15);
    for i in 0..15 {
        let direct = fit.model.intercept()
            + fit.model.coefficients()[0] * x[(i, 0)]
            + fit.model.coefficients()[1] * x[(i, 1)];
        assert!((fitted[i] - direct).abs() <= 1e-14 * direct.abs().max(1.0));
        assert_eq!(residuals[i], y[i] - fitted[i]);
    }
    // Normal equations: weighted residuals are orthogonal to the columns
    // and sum to zero (intercept).
    for j in 0..2 {
        let dot: f64 = (0..15).map(|i| w[i] * residuals[i] * x[(i, j)]).sum();
        assert!(dot.abs() <= 1e-12, "column {j}: {dot}");
    }
    let total: f64 = (0..15).map(|i| w[i] * residuals[i]).sum();
    assert!(total.abs() <= 1e-12);
    let new = Array2::from_shape_vec((2, 2), vec![1.0, -1.0, 0.5, 2.0]).unwrap();
    assert_eq!(
        fit.predict(new.view()).unwrap(),
        fit.model.predict(new.view()).unwrap()
    );
    let wrong = Array2::<f64>::zeros((2, 3));
    assert!(matches!(
        fit.predict(wrong.view()),
        Err(leastline::Error::ColumnCountMismatch {
            expected: 2,
            found: 3
        })
    ));
    // Residuals of a row whose difference leaves the range are an error
    // naming the row.
    let xb = array![[0.0], [1.0], [2.0], [3.0]];
    let yb = array![-1e308, 1e308, -1e308, 1e308];
    let pb = Problem::new(xb.view(), yb.view()).unwrap();
    if let Ok(fit) = Svd::new().fit(&pb) {
        match fit.residuals(&pb) {
            Ok(r) => assert!(r.iter().all(|v| v.is_finite())),
            Err(e) => assert!(matches!(e, leastline::Error::OverflowAt { .. }), "{e}"),
        }
    }
}
