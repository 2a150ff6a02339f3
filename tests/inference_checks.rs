//! Inference does not vouch for a wrong fit: it measures how far the fit's
//! coefficients are from the exact least-squares solution and refuses a fit
//! that is too far or that belongs to another problem; and it keeps every
//! digit of the refined fit's residual sum of squares.

mod common;

use common::{exact, nist};
use leastline::inference::{Inference, InferenceRefusal, MAX_FIT_DISTANCE};
use leastline::{Accelerated, Error, Fit, LinearModel, Problem, Qr, Solver};
use nalgebra::DMatrix;
use ndarray::{Array1, Array2, ShapeBuilder};

/// A tall problem with correlated columns (condition about 1e4 after
/// scaling) and small noise, so that standard errors are small.
fn correlated(n: usize) -> (Array2<f64>, Array1<f64>) {
    let x = Array2::from_shape_fn((n, 3), |(i, j)| {
        let t = i as f64 / n as f64;
        match j {
            0 => t,
            1 => t + 1e-4 * ((i * 7919) % 101) as f64 / 101.0,
            _ => (6.0 * t).sin(),
        }
    });
    let y = Array1::from_shape_fn(n, |i| {
        1.0 + 2.0 * x[(i, 0)] - 1.0 * x[(i, 1)]
            + 0.5 * x[(i, 2)]
            + 1e-3 * (((i * 104_729) % 997) as f64 / 997.0 - 0.5)
    });
    (x, y)
}

/// Item 5: an iterative fit flagged converged at a loose tolerance is many
/// standard errors from the least-squares solution: inference refuses it
/// and says how far it is.
#[test]
fn inference_refuses_a_converged_fit_far_from_the_solution() {
    let (x, y) = correlated(2000);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let exact_fit = Qr::new().fit(&problem).unwrap();
    let reference = exact_fit.inference(&problem).unwrap();
    assert!(reference.fit_distance <= MAX_FIT_DISTANCE);
    let loose = Accelerated::new()
        .with_tolerance(1e-3)
        .fit(&problem)
        .unwrap();
    assert!(loose.report.iterations.as_ref().unwrap().converged);
    // How far it is, measured outside the crate's inference: the largest
    // |b - b*| / se over the slopes.
    let far = (0..3)
        .map(|j| {
            (loose.model.coefficients()[j] - exact_fit.model.coefficients()[j]).abs()
                / reference.coefficients[j].std_error
        })
        .fold(0.0_f64, f64::max);
    assert!(far > 1.0, "the loose fit is only {far} standard errors off");
    match Inference::new(&problem, &loose) {
        Err(Error::InferenceRefused {
            refusal: InferenceRefusal::FarFromSolution { distance, bound },
        }) => {
            assert_eq!(bound, MAX_FIT_DISTANCE);
            // The Mahalanobis distance (in standard errors of the exact
            // fit) bounds each coefficient's distance.
            assert!(distance >= far * 0.999, "{distance} < {far}");
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
}

/// Item 5: the reported distance is the Mahalanobis norm of the difference
/// from the exact solution under the classical covariance, checked against
/// an independent computation with nalgebra.
#[test]
fn fit_distance_is_the_mahalanobis_norm() {
    let n = 400;
    let x = Array2::from_shape_fn((n, 3), |(i, j)| {
        (((i * (7 + 6 * j) + 3 * j) % 113) as f64 / 113.0 - 0.5) * (1.0 + j as f64)
    });
    let y = Array1::from_shape_fn(n, |i| {
        0.5 + x[(i, 0)] - 2.0 * x[(i, 1)] + x[(i, 2)] + (((i * 41) % 37) as f64 / 37.0 - 0.5)
    });
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inf = fit.inference(&problem).unwrap();
    let cov = DMatrix::from_fn(4, 4, |i, j| inf.covariance[(i, j)]);
    let cov_chol = cov
        .clone()
        .cholesky()
        .expect("positive definite covariance");
    // Move the fit by delta = 0.05 C e_2 / se_2, whose Mahalanobis norm is
    // 0.05 (it moves every coefficient, the intercept included).
    let se = inf.std_errors();
    let delta = cov.column(2) * (0.05 / se[2]);
    let expected = delta.dot(&cov_chol.solve(&delta)).sqrt();
    assert!((expected - 0.05).abs() < 1e-9, "{expected}");
    let b: Vec<f64> = (0..3)
        .map(|j| fit.model.coefficients()[j] + delta[j])
        .collect();
    let moved = Fit {
        model: LinearModel::new(Array1::from(b), fit.model.intercept() + delta[3]).unwrap(),
        report: fit.report.clone(),
    };
    let moved_inf = Inference::new(&problem, &moved).unwrap();
    assert!(
        (moved_inf.fit_distance - expected).abs() <= 1e-6 * expected,
        "{} vs {expected}",
        moved_inf.fit_distance
    );
    // Past the bound: refused.
    let moved = Fit {
        model: LinearModel::new(
            Array1::from(vec![
                fit.model.coefficients()[0] + 0.5 * se[0],
                fit.model.coefficients()[1],
                fit.model.coefficients()[2],
            ]),
            fit.model.intercept(),
        )
        .unwrap(),
        report: fit.report.clone(),
    };
    assert!(matches!(
        Inference::new(&problem, &moved),
        Err(Error::InferenceRefused {
            refusal: InferenceRefusal::FarFromSolution { .. }
        })
    ));
}

/// Item 5: a fit of another data set with the same shape, the same
/// weights, means and ranges (here the target permuted) is refused, and so
/// are diagnostics on it.
#[test]
fn inference_refuses_a_fit_of_another_problem_of_the_same_shape() {
    let (x, y) = correlated(300);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let mut y2 = y.clone();
    y2.as_slice_mut().unwrap().swap(10, 200);
    let other = Problem::new(x.view(), y2.view()).unwrap();
    assert_eq!(problem.column_means(), other.column_means());
    assert_eq!(problem.target_mean(), other.target_mean());
    match Inference::new(&other, &fit) {
        Err(Error::InferenceRefused {
            refusal: InferenceRefusal::DifferentData { recorded, given },
        }) => {
            assert_eq!(recorded, problem.fingerprint());
            assert_eq!(given, other.fingerprint());
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
    let inf = fit.inference(&problem).unwrap();
    assert!(matches!(
        inf.diagnostics(&other),
        Err(Error::InferenceRefused { .. })
    ));
    // The same data in another memory layout is the same problem.
    let mut xf = Array2::<f64>::zeros(x.raw_dim().f());
    xf.assign(&x);
    let same = Problem::new(xf.view(), y.view()).unwrap();
    assert_eq!(same.fingerprint(), problem.fingerprint());
    assert!(Inference::new(&same, &fit).is_ok());
}

/// Item 6: inference keeps the refined fit's residual sum of squares: on
/// ill-conditioned NIST problems (scaled condition numbers 1e9 to 1e10) its
/// residual standard deviation matches the exact one of the f64 data,
/// computed in rational arithmetic, to 13 digits; and the total sum of
/// squares, from the target alone, matches the exact one.
#[test]
fn inference_keeps_the_refined_residual_sum_of_squares() {
    for name in ["Filip", "Wampler4", "Wampler5"] {
        let d = nist::load(name);
        let problem = Problem::builder(d.x.view(), d.y.view())
            .with_intercept(d.intercept)
            .build()
            .unwrap();
        let fit = Qr::refined().fit(&problem).unwrap();
        let inf = fit.inference(&problem).unwrap();
        let rss = exact::residual_sum_of_squares(d.x.view(), d.y.view(), d.intercept);
        let sd = (rss / inf.residual_df as f64).sqrt();
        let lre = nist::lre(inf.residual_sd, sd);
        assert!(
            lre >= 13.0,
            "{name}: residual sd {} vs exact {sd}: LRE {lre:.1}",
            inf.residual_sd
        );
        // TSS: the exact residual sum of squares of the intercept-only model.
        let none = Array2::<f64>::zeros((d.y.len(), 0));
        let tss = exact::residual_sum_of_squares(none.view(), d.y.view(), true);
        if d.intercept {
            let lre = nist::lre(inf.goodness.total_sum_of_squares, tss);
            assert!(lre >= 14.0, "{name}: TSS LRE {lre:.1}");
        }
    }
}
