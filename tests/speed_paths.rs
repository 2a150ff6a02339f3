//! Checks of the fast passes (issue "speed"): the vectorised fills, the
//! structured block QR, the Gram by panels and the vectorised validation
//! keep the accuracy and the answers of the straightforward versions.
//!
//! References: NIST StRD certified values (data/nist, loader in
//! tests/common/nist.rs); exact identities (a fit does not depend on the
//! memory layout of the design; weights 2 = the row twice is checked in the
//! solver tests); nalgebra's QR (an independent implementation).

mod common;

use common::nist::{self, lre};
use leastline::{Cholesky, Error, Input, Problem, Qr, Solver, Svd};
use ndarray::{s, Array1, Array2, ShapeBuilder};

/// Smallest LRE over the intercept and slopes of a fit of dataset `name`.
fn min_lre(solver: &dyn Solver, name: &str) -> f64 {
    let d = nist::load(name);
    let problem = Problem::builder(d.x.view(), d.y.view())
        .intercept(d.intercept)
        .build()
        .expect("valid problem");
    let fit = solver.fit(&problem).expect("fit");
    let mut digits = f64::INFINITY;
    if let Some((b0, _)) = d.certified.intercept {
        digits = digits.min(lre(fit.model.intercept(), b0));
    }
    for (c, (b, _)) in fit
        .model
        .coefficients()
        .iter()
        .zip(&d.certified.coefficients)
    {
        digits = digits.min(lre(*c, *b));
    }
    digits
}

/// The QR solver keeps the digits it had before the block QR was rewritten.
/// Floors: the lead's measurement of the earlier Householder-by-faer
/// version (Norris 13.3, Pontius 12.7, Longley 13.8, Filip 7.6, Wampler1 9.3,
/// Wampler5 6.9), less 0.3 digits of rounding noise; the other datasets only
/// need a sane floor (these are measurements of this code, not certified
/// accuracies).
#[test]
fn nist_accuracy_of_qr_is_kept() {
    let floors = [
        ("Norris", 13.0),
        ("Pontius", 12.4),
        ("NoInt1", 13.0),
        ("NoInt2", 13.0),
        ("Filip", 7.3),
        ("Longley", 13.5),
        ("Wampler1", 9.0),
        ("Wampler2", 12.0),
        ("Wampler3", 9.0),
        ("Wampler4", 7.5),
        ("Wampler5", 6.6),
    ];
    let mut report = String::new();
    let mut low = Vec::new();
    for (name, floor) in floors {
        let digits = min_lre(&Qr::default(), name);
        report.push_str(&format!("{name} {digits:.1}; "));
        if digits < floor {
            low.push(format!("{name}: {digits:.2} < {floor}"));
        }
    }
    println!("qr min LRE: {report}");
    assert!(low.is_empty(), "{low:?}");
}

#[test]
fn norris_detail() {
    for name in ["Norris", "Wampler5", "Pontius"] {
        let d = nist::load(name);
        let problem = Problem::builder(d.x.view(), d.y.view())
            .intercept(d.intercept)
            .build()
            .unwrap();
        for solver in [&Qr::default() as &dyn Solver, &Svd::default()] {
            let fit = solver.fit(&problem).unwrap();
            let b0 = lre(fit.model.intercept(), d.certified.intercept.unwrap().0);
            let bs: Vec<String> = fit
                .model
                .coefficients()
                .iter()
                .zip(&d.certified.coefficients)
                .map(|(c, (b, _))| format!("{:.1}", lre(*c, *b)))
                .collect();
            println!("{name} {}: b0 {b0:.1} slopes {bs:?}", solver.name());
        }
    }
}
