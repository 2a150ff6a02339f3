//! Cross-backend agreement (built only with a `lapack-*` feature): the
//! LAPACK and faer routes give the same fits within each solver's floors on
//! the NIST StRD linear datasets (certified values from the NIST
//! Information Technology Laboratory's Statistical Reference Datasets,
//! data/nist/; floors as in tests/accuracy.rs) and on random problems of
//! chosen condition number; and the crate's faer-based QR fit agrees with
//! LAPACK's own least-squares driver (`dgelsd` through ndarray-linalg's
//! `LeastSquaresSvd`) used as a reference library.
//!
//! The backend is a process-wide setting, so every test here holds one
//! lock while it switches it.

mod common;

use std::sync::Mutex;

use common::nist::FLOORS;
use common::{gen, nist};
use leastline::ndarray::{Array1, Array2};
use leastline::{set_backend, Backend, Cholesky, Problem, Qr, Solver, Svd};
use ndarray_linalg::LeastSquaresSvd;

static LOCK: Mutex<()> = Mutex::new(());

/// Intercept (when fitted) then coefficients of `solver` under `backend`.
fn fit_under(
    backend: Backend,
    solver: &dyn Solver,
    x: &Array2<f64>,
    y: &Array1<f64>,
    intercept: bool,
) -> Vec<f64> {
    set_backend(backend).unwrap();
    let problem = Problem::builder(x.view(), y.view())
        .with_intercept(intercept)
        .build()
        .unwrap();
    let fit = solver.fit(&problem).unwrap();
    let mut out = Vec::new();
    if intercept {
        out.push(fit.model.intercept());
    }
    out.extend(fit.model.coefficients().iter());
    out
}

#[test]
fn nist_floors_hold_under_both_backends_and_the_backends_agree() {
    let _guard = LOCK.lock().unwrap_or_else(|e| e.into_inner());
    for (name, floor) in FLOORS {
        let d = nist::load(name);
        let certified = d.certified.estimates();
        for solver in [&Qr::new() as &dyn Solver, &Svd::new()] {
            let f = fit_under(Backend::Faer, solver, &d.x, &d.y, d.intercept);
            let l = fit_under(Backend::Lapack, solver, &d.x, &d.y, d.intercept);
            for (route, got) in [("faer", &f), ("lapack", &l)] {
                let digits = got
                    .iter()
                    .zip(&certified)
                    .map(|(g, c)| nist::lre(*g, *c))
                    .fold(15.0, f64::min);
                assert!(
                    digits >= floor,
                    "{name} {} under {route}: {digits:.2} certified digits < {floor}",
                    solver.name()
                );
            }
            // Two routes that each keep `floor` certified digits agree to
            // at least as many with each other, less the half digit either
            // may have lost in the other direction.
            let agree = l
                .iter()
                .zip(&f)
                .map(|(a, b)| nist::lre(*a, *b))
                .fold(15.0, f64::min);
            assert!(
                agree >= floor - 0.5,
                "{name} {}: faer and lapack agree to {agree:.2} digits < {floor} - 0.5",
                solver.name()
            );
        }
    }
    set_backend(Backend::Lapack).unwrap();
}

/// An `n x p` design with singular values spread geometrically from 1 to
/// `1 / condition` (`Q diag(s) V^T` with `Q`, `V` orthonormal from
/// nalgebra's QR of Gaussian matrices), and a target on it (`y = X b`).
fn conditioned(seed: u64, n: usize, p: usize, condition: f64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = gen::rng(seed);
    let g = gen::normal_matrix(&mut rng, n, p);
    let h = gen::normal_matrix(&mut rng, p, p);
    let q = nalgebra::DMatrix::from_fn(n, p, |i, j| g[[i, j]]).qr().q();
    let v = nalgebra::DMatrix::from_fn(p, p, |i, j| h[[i, j]]).qr().q();
    let s = nalgebra::DMatrix::from_fn(p, p, |i, j| {
        if i == j {
            condition.powf(-(i as f64) / (p - 1) as f64)
        } else {
            0.0
        }
    });
    let x = q * s * v.transpose();
    let x = Array2::from_shape_fn((n, p), |(i, j)| x[(i, j)]);
    let b = gen::normal_vector(&mut rng, p);
    let y = x.dot(&b);
    (x, y)
}

#[test]
fn random_problems_of_chosen_condition_agree_across_backends() {
    let _guard = LOCK.lock().unwrap_or_else(|e| e.into_inner());
    let eps = f64::EPSILON;
    for (seed, &condition) in [1e2, 1e4, 1e6, 1e8, 1e10].iter().enumerate() {
        for &(n, p) in &[(200usize, 8usize), (3000, 40)] {
            let (x, y) = conditioned(seed as u64 + 7, n, p, condition);
            // QR and SVD: forward error of a consistent problem about
            // condition * eps for either route, so their difference too.
            for solver in [&Qr::new() as &dyn Solver, &Svd::new()] {
                let f = fit_under(Backend::Faer, solver, &x, &y, false);
                let l = fit_under(Backend::Lapack, solver, &x, &y, false);
                let diff = gen::rel_diff(&l, &f);
                assert!(
                    diff <= 100.0 * condition * eps,
                    "{} {n}x{p} condition {condition:e}: {diff:e}",
                    solver.name()
                );
            }
            // Cholesky squares the condition number.
            if condition <= 1e4 {
                let f = fit_under(Backend::Faer, &Cholesky::new(), &x, &y, false);
                let l = fit_under(Backend::Lapack, &Cholesky::new(), &x, &y, false);
                let diff = gen::rel_diff(&l, &f);
                assert!(
                    diff <= 100.0 * condition * condition * eps,
                    "cholesky {n}x{p} condition {condition:e}: {diff:e}"
                );
            }
        }
    }
    set_backend(Backend::Lapack).unwrap();
}

#[test]
fn faer_qr_matches_lapack_least_squares_driver() {
    let _guard = LOCK.lock().unwrap_or_else(|e| e.into_inner());
    let eps = f64::EPSILON;
    for (seed, &condition) in [1e1, 1e3, 1e6, 1e9].iter().enumerate() {
        let (x, y) = conditioned(seed as u64 + 100, 500, 12, condition);
        let mut rng = gen::rng(seed as u64 + 200);
        // A residual as well: y gets a small component off the design.
        let noise = gen::normal_vector(&mut rng, 500) * 1e-6;
        let y = y + noise;
        let ours = fit_under(Backend::Faer, &Qr::new(), &x, &y, false);
        let reference = x.least_squares(&y).unwrap().solution;
        let diff = gen::rel_diff(&ours, reference.as_slice().unwrap());
        // condition * eps, plus condition^2 * eps * |r| / (|X| |b|) for
        // the residual (|r| about 2e-5 here, |X| = 1, |b| about 3).
        let bound = 100.0 * eps * (condition + condition * condition * 1e-5);
        assert!(
            diff <= bound,
            "condition {condition:e}: {diff:e} > {bound:e}"
        );
    }
    set_backend(Backend::Lapack).unwrap();
}

#[test]
fn set_backend_reports_what_is_selected() {
    let _guard = LOCK.lock().unwrap_or_else(|e| e.into_inner());
    set_backend(Backend::Faer).unwrap();
    assert_eq!(leastline::backend(), Backend::Faer);
    set_backend(Backend::Lapack).unwrap();
    assert_eq!(leastline::backend(), Backend::Lapack);
}
