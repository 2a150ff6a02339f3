//! Ridge solvers: agreement with an independent reference, the penalised
//! normal equations, limits and error handling.
//!
//! No published ridge values are used; each check below names its
//! reference: an exact identity (the penalised normal equations, the
//! `lambda -> 0` limit, the effect of standardising), nalgebra's QR solve
//! of the augmented system (tests/ridge_support), or the NIST StRD
//! certified least-squares values for `lambda = 0`.

#![allow(clippy::needless_range_loop)] // index-heavy reference formulas

mod common;
mod ridge_support;

use leastline::ridge::{Ridge, RidgeFactorization, RidgePath};
use leastline::{Error, Problem, Qr, Solver};
use ndarray::{Array1, Array2};
use proptest::prelude::*;
use ridge_support::{make_case, penalty_scale, rel_diff, weights_strategy, Case, Weights};

const METHODS: [RidgeFactorization; 5] = [
    RidgeFactorization::ByShape,
    RidgeFactorization::Cholesky,
    RidgeFactorization::AugmentedQr,
    RidgeFactorization::Svd,
    RidgeFactorization::Dual,
];

fn ridge(lambda: f64, standardize: bool, method: RidgeFactorization) -> Ridge {
    Ridge::new(lambda)
        .with_standardize(standardize)
        .with_factorization(method)
}

/// The gradient of the caller's objective must vanish:
/// `sum_i w_i r_i = 0` (intercept) and `X^T W r = lambda P b`, i.e.
/// `(Xc^T W Xc + lambda P) b = Xc^T W yc`. Checked per column against the
/// sum of the magnitudes of its terms.
fn assert_normal_equations(case: &Case, lambda: f64, standardize: bool, b0: f64, b: &[f64]) {
    let (n, p) = case.x.dim();
    let (m, _) = case.means();
    let pw = case.penalty_weights(standardize);
    let r: Vec<f64> = (0..n)
        .map(|i| case.y[i] - b0 - (0..p).map(|j| case.x[(i, j)] * b[j]).sum::<f64>())
        .collect();
    if case.intercept {
        let s: f64 = (0..n).map(|i| case.weight(i) * r[i]).sum();
        let mag: f64 = (0..n).map(|i| (case.weight(i) * r[i]).abs()).sum::<f64>()
            + (0..n)
                .map(|i| case.weight(i) * case.y[i].abs())
                .sum::<f64>()
                * 1e-6;
        assert!(
            s.abs() <= 1e-9 * mag,
            "intercept equation: {s:e} vs {mag:e}"
        );
    }
    for j in 0..p {
        let mut g = -lambda * pw[j] * b[j];
        let mut mag = (lambda * pw[j] * b[j]).abs();
        for i in 0..n {
            let t = case.weight(i) * (case.x[(i, j)] - m[j]) * r[i];
            g += t;
            mag += t.abs();
        }
        // The data's own scale, so that a column whose terms all vanish
        // does not demand an exact zero.
        let floor: f64 = (0..n)
            .map(|i| case.weight(i) * ((case.x[(i, j)] - m[j]) * case.y[i]).abs())
            .sum();
        assert!(
            g.abs() <= 1e-8 * (mag + 1e-6 * floor),
            "column {j}: gradient {g:e}, magnitude {mag:e}"
        );
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(32)))]

    /// Identity: the solution satisfies the penalised normal equations, for
    /// every method, tall and wide shapes, weights (some zero), with and
    /// without intercept and standardisation.
    #[test]
    fn penalised_normal_equations_hold(
        seed in 0u64..10_000,
        n in 4usize..40,
        p in 1usize..12,
        weights in weights_strategy(),
        intercept in any::<bool>(),
        standardize in any::<bool>(),
        log_rel in -4.0f64..1.0,
    ) {
        let case = make_case(seed, n, p, weights, intercept);
        let lambda = penalty_scale(&case, standardize) * 10f64.powf(log_rel);
        let problem = case.problem();
        for method in METHODS {
            let fit = ridge(lambda, standardize, method).fit(&problem).unwrap();
            let b = fit.model.coefficients().to_vec();
            assert_normal_equations(&case, lambda, standardize, fit.model.intercept(), &b);
            prop_assert_eq!(fit.report.penalty, lambda);
        }
    }

    /// All methods agree with each other, the dual form included, on tall
    /// and wide designs.
    #[test]
    fn all_methods_agree(
        seed in 0u64..10_000,
        n in 3usize..30,
        p in 1usize..40,
        weights in weights_strategy(),
        intercept in any::<bool>(),
        standardize in any::<bool>(),
        log_rel in -3.0f64..1.0,
    ) {
        let case = make_case(seed, n, p, weights, intercept);
        let lambda = penalty_scale(&case, standardize) * 10f64.powf(log_rel);
        let problem = case.problem();
        let base = ridge(lambda, standardize, RidgeFactorization::AugmentedQr).fit(&problem).unwrap();
        let b_ref = base.model.coefficients().to_vec();
        for method in METHODS {
            let fit = ridge(lambda, standardize, method).fit(&problem).unwrap();
            let d = rel_diff(fit.model.coefficients().as_slice().unwrap(), &b_ref);
            prop_assert!(d < 1e-8, "{:?} differs by {:e}", method, d);
            let scale = case.y.iter().fold(0.0f64, |a, v| a.max(v.abs()));
            prop_assert!((fit.model.intercept() - base.model.intercept()).abs() < 1e-8 * scale.max(1.0));
            let rss = fit.report.residual_sum_of_squares;
            let rss_ref = base.report.residual_sum_of_squares;
            prop_assert!((rss - rss_ref).abs() <= 1e-7 * rss_ref.max(1e-300), "rss {} vs {}", rss, rss_ref);
        }
    }

    /// Independent check: nalgebra's Householder QR solve of the augmented system
    /// (with an explicit, unpenalised column of ones for the intercept).
    #[test]
    fn matches_nalgebra_augmented_system(
        seed in 0u64..10_000,
        n in 3usize..30,
        p in 1usize..25,
        weights in weights_strategy(),
        intercept in any::<bool>(),
        standardize in any::<bool>(),
        log_rel in -3.0f64..1.0,
    ) {
        let case = make_case(seed, n, p, weights, intercept);
        let lambda = penalty_scale(&case, standardize) * 10f64.powf(log_rel);
        let (b0, b) = case.reference(lambda, standardize);
        let fit = ridge(lambda, standardize, RidgeFactorization::ByShape).fit(&case.problem()).unwrap();
        let d = rel_diff(fit.model.coefficients().as_slice().unwrap(), &b);
        prop_assert!(d < 1e-7, "slopes differ by {:e}", d);
        let scale = case.y.iter().fold(1.0f64, |a, v| a.max(v.abs()));
        prop_assert!((fit.model.intercept() - b0).abs() < 1e-7 * scale, "intercept {} vs {}", fit.model.intercept(), b0);
    }

    /// The penalised norm `sum_j P_j b_j^2` does not increase with lambda
    /// (an identity of the ridge solution: each direction's coefficient
    /// shrinks by `s^2 / (s^2 + lambda)`).
    #[test]
    fn coefficient_norm_decreases(
        seed in 0u64..10_000,
        n in 3usize..30,
        p in 1usize..20,
        weights in weights_strategy(),
        standardize in any::<bool>(),
    ) {
        let case = make_case(seed, n, p, weights, true);
        let problem = case.problem();
        let pw = case.penalty_weights(standardize);
        let top = penalty_scale(&case, standardize);
        let mut previous = f64::INFINITY;
        for k in -12..=4 {
            let lambda = top * 10f64.powf(k as f64 * 0.5);
            let fit = ridge(lambda, standardize, RidgeFactorization::ByShape).fit(&problem).unwrap();
            let norm: f64 = fit.model.coefficients().iter().zip(&pw).map(|(b, w)| w * b * b).sum();
            prop_assert!(norm <= previous * (1.0 + 1e-10), "norm {} after {}", norm, previous);
            previous = norm;
        }
    }

    /// `lambda = 0` reproduces ordinary least squares on full-rank tall
    /// problems: the fit at 0 (by the least-squares solvers) and the path's
    /// own spectral solution at 0 equal the plain QR fit; small penalties
    /// approach it (the limit `lambda -> 0+`, an identity).
    #[test]
    fn zero_penalty_is_least_squares(
        seed in 0u64..10_000,
        extra in 2usize..30,
        p in 1usize..8,
        weights in weights_strategy(),
        intercept in any::<bool>(),
    ) {
        let case = make_case(seed, p + extra + 5, p, weights, intercept);
        let problem = case.problem();
        let ols = Qr::new().fit(&problem).unwrap();
        let b_ols = ols.model.coefficients().to_vec();
        for method in [RidgeFactorization::ByShape, RidgeFactorization::Cholesky, RidgeFactorization::AugmentedQr, RidgeFactorization::Svd] {
            let fit = ridge(0.0, false, method).fit(&problem).unwrap();
            prop_assert!(rel_diff(fit.model.coefficients().as_slice().unwrap(), &b_ols) < 1e-9);
            prop_assert_eq!(fit.report.penalty, 0.0);
        }
        let path = RidgePath::new(&problem, false).unwrap();
        let at_zero = path.fit(0.0).unwrap();
        prop_assert!(rel_diff(at_zero.model.coefficients().as_slice().unwrap(), &b_ols) < 1e-9);
        let s = path.singular_values();
        let smin = s[path.rank() - 1];
        let tiny = smin * smin * 1e-9;
        // (Not the dual form: on a tall design its n x n system has rank p
        // and a penalty this small leaves it singular to working precision.)
        for method in [RidgeFactorization::Cholesky, RidgeFactorization::AugmentedQr, RidgeFactorization::Svd] {
            let fit = ridge(tiny, false, method).fit(&problem).unwrap();
            let d = rel_diff(fit.model.coefficients().as_slice().unwrap(), &b_ols);
            prop_assert!(d < 1e-6, "{:?}: {:e}", method, d);
        }
    }
}

/// `lambda = 0` against published values: NIST StRD Longley (certified
/// values from the NIST Statistical Reference Datasets, file Longley.dat).
/// Ridge at 0 is least squares; the path's spectral solution at 0 must
/// reproduce the certified coefficients to at least 8 digits (log relative
/// error), as must the fit by the `Auto` method.
#[test]
fn zero_penalty_reproduces_nist_longley() {
    let d = common::nist::load("Longley");
    let problem = Problem::new(d.x.view(), d.y.view()).unwrap();
    let path = RidgePath::new(&problem, false).unwrap();
    for fit in [
        path.fit(0.0).unwrap(),
        Ridge::new(0.0).fit(&problem).unwrap(),
    ] {
        for (j, (est, _)) in d.certified.coefficients.iter().enumerate() {
            let lre = common::nist::lre(fit.model.coefficients()[j], *est);
            assert!(lre >= 8.0, "{}: column {j} LRE {lre}", fit.report.solver);
        }
        let (b0, _) = d.certified.intercept.unwrap();
        assert!(common::nist::lre(fit.model.intercept(), b0) >= 8.0);
    }
}

/// On the ill-conditioned Longley design a small penalty leaves the
/// penalised Gram matrix with too few digits: `Auto` must move to the
/// augmented QR, whose answer agrees with the SVD method; the identity
/// check of the normal equations holds for both.
#[test]
fn auto_uses_qr_when_cholesky_loses_digits() {
    let d = common::nist::load("Longley");
    let case = Case {
        x: d.x.clone(),
        y: d.y.clone(),
        w: None,
        intercept: true,
    };
    let problem = case.problem();
    let lambda = 1e-6;
    let auto = Ridge::new(lambda).fit(&problem).unwrap();
    assert_eq!(auto.report.solver, "ridge");
    assert_eq!(auto.report.factorization.as_deref(), Some("qr"));
    let svd = ridge(lambda, false, RidgeFactorization::Svd)
        .fit(&problem)
        .unwrap();
    let d_ = rel_diff(
        auto.model.coefficients().as_slice().unwrap(),
        svd.model.coefficients().as_slice().unwrap(),
    );
    assert!(d_ < 1e-6, "qr vs svd {d_:e}");
    for fit in [&auto, &svd] {
        let b = fit.model.coefficients().to_vec();
        assert_normal_equations(&case, lambda, false, fit.model.intercept(), &b);
    }
    // A large penalty keeps the Cholesky fit.
    let big = Ridge::new(1e8).fit(&problem).unwrap();
    assert_eq!(big.report.solver, "ridge");
    assert_eq!(big.report.factorization.as_deref(), Some("cholesky"));
}

/// Identity: penalising standardised coefficients is plain ridge on the
/// columns divided by their weighted standard deviations, with the
/// coefficients divided back.
#[test]
fn standardize_equals_ridge_on_standardised_columns() {
    for (seed, weights) in [
        (11, Weights::None),
        (12, Weights::SomeZero),
        (13, Weights::Positive),
    ] {
        let case = make_case(seed, 25, 6, weights, true);
        let sd: Vec<f64> = case
            .penalty_weights(true)
            .iter()
            .map(|v| v.sqrt())
            .collect();
        let scaled = Case {
            x: Array2::from_shape_fn(case.x.dim(), |(i, j)| case.x[(i, j)] / sd[j]),
            ..case.clone()
        };
        for method in METHODS {
            let a = ridge(3.0, true, method).fit(&case.problem()).unwrap();
            let b = ridge(3.0, false, method).fit(&scaled.problem()).unwrap();
            let back: Vec<f64> = b
                .model
                .coefficients()
                .iter()
                .zip(&sd)
                .map(|(v, s)| v / s)
                .collect();
            let d = rel_diff(a.model.coefficients().as_slice().unwrap(), &back);
            assert!(d < 1e-9, "{method:?}: {d:e}");
        }
    }
}

/// Identity: a constant column carries no information beside the
/// intercept; it gets coefficient 0 and the others equal the fit without it.
#[test]
fn constant_column_gets_zero() {
    let case = make_case(5, 20, 4, Weights::Positive, true);
    let mut x = Array2::zeros((20, 5));
    for i in 0..20 {
        for j in 0..4 {
            x[(i, j + usize::from(j >= 2))] = case.x[(i, j)];
        }
        x[(i, 2)] = 7.25;
    }
    let with = Case { x, ..case.clone() };
    for method in METHODS {
        let a = ridge(0.7, false, method).fit(&with.problem()).unwrap();
        let b = ridge(0.7, false, method).fit(&case.problem()).unwrap();
        let ca = a.model.coefficients();
        assert_eq!(ca[2], 0.0, "{method:?}");
        let kept = [ca[0], ca[1], ca[3], ca[4]];
        assert!(rel_diff(&kept, b.model.coefficients().as_slice().unwrap()) < 1e-10);
    }
}

#[test]
fn invalid_penalties_are_typed_errors() {
    let case = make_case(1, 10, 3, Weights::None, true);
    let problem = case.problem();
    for bad in [-1e-3, f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
        for method in METHODS {
            let err = ridge(bad, false, method).fit(&problem).unwrap_err();
            assert!(
                matches!(
                    err,
                    Error::InvalidParameter {
                        name: "penalty",
                        ..
                    }
                ),
                "{method:?} {bad}: {err:?}"
            );
        }
        let path = RidgePath::new(&problem, false).unwrap();
        assert!(matches!(path.fit(bad), Err(Error::InvalidParameter { .. })));
        assert!(matches!(
            path.effective_df(bad),
            Err(Error::InvalidParameter { .. })
        ));
    }
    let err = ridge(0.0, false, RidgeFactorization::Dual)
        .fit(&problem)
        .unwrap_err();
    assert!(matches!(err, Error::InvalidParameter { name: "penalty", value, .. } if value == 0.0));
}

/// A wide design: positive penalties fit with every method; penalty 0 is
/// unpenalised least squares and reports too few rows.
#[test]
fn wide_design_needs_a_penalty() {
    let case = make_case(3, 6, 15, Weights::None, true);
    let problem = case.problem();
    for method in METHODS {
        assert!(
            ridge(0.5, false, method).fit(&problem).is_ok(),
            "{method:?}"
        );
    }
    let err = Ridge::new(0.0).fit(&problem).unwrap_err();
    assert!(matches!(
        err,
        Error::TooFewRows {
            usable_rows: 6,
            parameters: 16
        }
    ));
    let auto = Ridge::new(0.5).fit(&problem).unwrap();
    assert_eq!(auto.report.solver, "ridge");
    assert_eq!(auto.report.factorization.as_deref(), Some("dual"));
}

/// Only the intercept: every method returns the weighted mean.
#[test]
fn no_columns_fits_the_mean() {
    let x = Array2::<f64>::zeros((5, 0));
    let y = Array1::from(vec![1.0, 2.0, 4.0, 8.0, 5.0]);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    for method in METHODS {
        let fit = ridge(1.0, false, method).fit(&problem).unwrap();
        assert!((fit.model.intercept() - 4.0).abs() < 1e-12, "{method:?}");
    }
}
