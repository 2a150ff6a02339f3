//! Certified values of the NIST StRD linear regression datasets Norris and
//! Longley (NIST Information Technology Laboratory, Statistical Reference
//! Datasets, linear least squares; files Norris.dat and Longley.dat,
//! converted to data/nist/). The full eleven-dataset suite is in
//! tests/accuracy.rs.

mod common;

use common::nist;
use leastline::{Cholesky, Problem, Qr, Solver, Svd};

fn min_coefficient_lre(name: &str, solver: &dyn Solver) -> f64 {
    let d = nist::load(name);
    let problem = Problem::builder(d.x.view(), d.y.view())
        .with_intercept(d.intercept)
        .build()
        .unwrap();
    let fit = solver.fit(&problem).unwrap();
    let mut got = Vec::new();
    if d.intercept {
        got.push(fit.model.intercept());
    }
    got.extend(fit.model.coefficients().iter());
    got.iter()
        .zip(d.certified.estimates())
        .map(|(g, c)| nist::lre(*g, c))
        .fold(15.0, f64::min)
}

#[test]
fn norris_certified_coefficients() {
    // NIST StRD Norris.dat: B0 = -0.262323073774029, B1 = 1.00211681802045.
    for solver in [&Qr::new() as &dyn Solver, &Svd::new(), &Cholesky::new()] {
        let lre = min_coefficient_lre("Norris", solver);
        assert!(lre >= 12.0, "{}: LRE {lre:.1}", solver.name());
    }
}

#[test]
fn longley_certified_coefficients() {
    // NIST StRD Longley.dat: seven certified parameters B0..B6.
    for solver in [&Qr::new() as &dyn Solver, &Svd::new()] {
        let lre = min_coefficient_lre("Longley", solver);
        assert!(lre >= 9.0, "{}: LRE {lre:.1}", solver.name());
    }
    // The normal equations square Longley's condition number (about 4e4
    // after column scaling): about 16 - 2 * 4.6 = 6.8 digits are expected.
    let lre = min_coefficient_lre("Longley", &Cholesky::new());
    assert!(lre >= 6.0, "cholesky: LRE {lre:.1}");
}
