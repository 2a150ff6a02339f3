//! Accuracy on the eleven NIST StRD linear least-squares problems.
//!
//! References, named beside each check:
//! - the NIST certified values (`data/nist/*.txt`, from NIST's originals;
//!   computed by NIST in about 500-digit arithmetic, rounded to 15 digits);
//! - the exact least-squares solution of the `f64` data as the solvers see
//!   it, computed in rational arithmetic by `tests/common/exact.rs` (the
//!   `num-rational` crate; no code of this library). It tells how many
//!   certified digits the rounded inputs still hold, i.e. the most any
//!   solver fed these `f64` arrays can deliver.
//!
//! Digits are the log relative error (LRE) of `tests/common/nist.rs`:
//! `-log10(|computed - reference| / |reference|)`, capped at 15, taken as the
//! minimum over the intercept and all slopes.

mod common;

use common::{exact, nist};
use leastline::{Cholesky, Error, Fit, Problem, Qr, Refinement, Solver, Svd};
use ndarray::Array2;

/// Intercept first (when the model has one), then the slopes.
fn estimates(fit: &Fit, intercept: bool) -> Vec<f64> {
    let mut out = Vec::new();
    if intercept {
        out.push(fit.model.intercept());
    }
    out.extend(fit.model.coefficients().iter());
    out
}

/// Smallest LRE over the parameters.
fn min_lre(computed: &[f64], reference: &[f64]) -> f64 {
    assert_eq!(computed.len(), reference.len());
    computed
        .iter()
        .zip(reference)
        .map(|(c, r)| nist::lre(*c, *r))
        .fold(f64::INFINITY, f64::min)
}

fn fit(solver: &dyn Solver, d: &nist::Dataset) -> Result<Fit, Error> {
    let problem = Problem::builder(d.x.view(), d.y.view())
        .with_intercept(d.intercept)
        .build()?;
    solver.fit(&problem)
}

fn certified_digits(solver: &dyn Solver, name: &str) -> f64 {
    let d = nist::load(name);
    let f = fit(solver, &d).unwrap_or_else(|e| panic!("{name}: {} refused: {e}", solver.name()));
    min_lre(&estimates(&f, d.intercept), &d.certified.estimates())
}

/// Floors for plain double-precision QR and SVD (digits vs the certified
/// coefficients), as set in the accuracy issue; measured values in
/// `notes/accuracy.md`.
///
/// Wampler2 deserves a note: its responses are five-decimal numbers
/// (1.11111, 1.24992, ...) that `f64` cannot hold exactly, and that rounding
/// alone moves the exact least-squares solution of the `f64` data to 13.2
/// digits from the certified one (`wampler2_rounded_data_hold_only_13_digits`
/// below). A backward-stable solver adds an error of the same kind and size
/// (a few units in the last place amplified by the condition number, 2.5e3),
/// which can add to or cancel the data's: with the current block QR, QR
/// shows 14.6 and SVD 13.9 digits (an earlier QR variant showed 12.9, and
/// nalgebra's Householder QR 13.4). The floor of 13 is the one the accuracy
/// issue sets; it sits within a few tenths of what the data allow, so a
/// change of rounding order in the QR can move it, and the refined QR path,
/// which removes the solver's own error, reaches exactly the 13.2 the data
/// allow (`refinement_reaches_13_digits_except_where_the_data_forbid`).
use common::nist::FLOORS;

#[test]
fn floors_cover_all_eleven_datasets() {
    let names: Vec<&str> = FLOORS.iter().map(|f| f.0).collect();
    assert_eq!(names, nist::ALL.to_vec());
}

#[test]
fn qr_meets_the_floors() {
    for (name, floor) in FLOORS {
        let digits = certified_digits(&Qr::new(), name);
        assert!(digits >= floor, "{name}: QR {digits:.2} digits < {floor}");
    }
}

#[test]
fn svd_meets_the_same_floors() {
    for (name, floor) in FLOORS {
        let digits = certified_digits(&Svd::new(), name);
        assert!(digits >= floor, "{name}: SVD {digits:.2} digits < {floor}");
    }
}

/// Reference: exact rational least squares of the loader's `f64` data
/// against the NIST certified values.
#[test]
fn wampler2_rounded_data_hold_only_13_digits() {
    let d = nist::load("Wampler2");
    let best = exact::least_squares(d.x.view(), d.y.view(), true);
    let digits = min_lre(&best, &d.certified.estimates());
    // Measured 13.2: the f64 rounding of y (x^k are small exact integers).
    assert!(
        digits < 13.5,
        "exact solution of the f64 data: {digits:.2} digits"
    );
    assert!(digits > 13.0, "{digits:.2}");
}

// ---------------------------------------------------------------------------
// Refinement

/// Reference: the exact least-squares solution of the same `f64` data
/// (rational arithmetic). Refinement must reproduce it to (nearly) every
/// digit on all eleven problems, whatever their conditioning.
#[test]
fn refinement_reproduces_the_exact_solution_of_its_input() {
    for name in nist::ALL {
        let d = nist::load(name);
        let f = fit(&Qr::refined(), &d).unwrap_or_else(|e| panic!("{name}: {e}"));
        let best = exact::least_squares(d.x.view(), d.y.view(), d.intercept);
        let digits = min_lre(&estimates(&f, d.intercept), &best);
        assert!(digits >= 14.5, "{name}: {digits:.2} digits from exact");
        let it = f.report.iterations.as_ref().expect("refinement report");
        assert!(
            it.converged,
            "{name}: not converged after {}",
            it.iterations
        );
        assert!(
            (1..=4).contains(&it.iterations),
            "{name}: {} steps",
            it.iterations
        );
        assert_eq!(it.loss_history.len(), it.iterations);
        assert!(
            it.gradient_norm < 1e-13,
            "{name}: gradient {:e}",
            it.gradient_norm
        );
    }
}

/// Reference: NIST certified values. Target 13 digits on every problem
/// whose `f64` data still hold 13 certified digits: all but Filip.
///
/// Filip is out of reach for any solver fed `f64` columns `x, x^2, ..,
/// x^10`: see `filip_certified_digits_are_out_of_reach_of_f64_data`. There
/// the refined solution is asserted to be the exact solution of its data
/// (previous test) and to keep the 7.9 digits that data hold.
#[test]
fn refinement_reaches_13_digits_except_where_the_data_forbid() {
    for name in nist::ALL {
        let digits = certified_digits(&Qr::refined(), name);
        let floor = if name == "Filip" { 7.8 } else { 13.0 };
        assert!(digits >= floor, "{name}: refined {digits:.2} < {floor}");
    }
}

/// Powers `x^1..x^d` of each entry of `x`, each correctly rounded from the
/// exact rational power (the loader instead multiplies in `f64`, which
/// rounds at every step).
fn correctly_rounded_powers(x: &[f64], degree: usize) -> Array2<f64> {
    use num_rational::BigRational;
    use num_traits::ToPrimitive;
    let mut out = Array2::zeros((x.len(), degree));
    for (i, &v) in x.iter().enumerate() {
        let r = BigRational::from_float(v).expect("finite");
        let mut pow = r.clone();
        for k in 0..degree {
            if k > 0 {
                pow *= &r;
            }
            out[[i, k]] = pow.to_f64().expect("representable");
        }
    }
    out
}

/// Why 13 certified digits on Filip cannot come from `f64` data.
///
/// The certified values belong to the exact powers of NIST's decimal `x`.
/// A solver sees `f64` columns, each entry within a unit or so in the last
/// place of the exact power. Two such designs are built here: the loader's
/// (`x^k = x^(k-1) * x` in `f64`) and one with every power correctly rounded
/// (each entry within half a unit in the last place of `x^k`). Their exact
/// least-squares solutions, computed in rational arithmetic, differ from
/// each other in the 8th digit and are 7.6 and 7.9 digits from the
/// certified values: relative changes of 1e-16 in the entries move the
/// solution by about 1e-8 (the design's condition number after scaling is
/// about 6e9). No solver, however precise, gets more than about 8 digits
/// from any `f64` rendering of the design; the refined QR path does get the
/// exact solution of whichever rendering it is given.
#[test]
fn filip_certified_digits_are_out_of_reach_of_f64_data() {
    let d = nist::load("Filip");
    let xs: Vec<f64> = d.x.column(0).to_vec();
    let rounded = correctly_rounded_powers(&xs, 10);
    // The two renderings really are different roundings of the same powers.
    let differing = rounded
        .iter()
        .zip(d.x.iter())
        .filter(|(a, b)| a != b)
        .count();
    assert!(differing > 100, "only {differing} entries differ");
    let cert = d.certified.estimates();
    let loader_best = exact::least_squares(d.x.view(), d.y.view(), true);
    let rounded_best = exact::least_squares(rounded.view(), d.y.view(), true);
    let loader_digits = min_lre(&loader_best, &cert);
    let rounded_digits = min_lre(&rounded_best, &cert);
    let between = min_lre(&loader_best, &rounded_best);
    assert!(loader_digits < 8.5, "loader data: {loader_digits:.2}");
    assert!(rounded_digits < 8.5, "rounded data: {rounded_digits:.2}");
    assert!(between < 9.0, "renderings agree to {between:.2} digits");
    // The refined solver follows each rendering to its own exact solution.
    for (x, best) in [(&d.x, &loader_best), (&rounded, &rounded_best)] {
        let problem = Problem::new(x.view(), d.y.view()).expect("valid");
        let f = Qr::refined().fit(&problem).expect("fits");
        let digits = min_lre(&estimates(&f, true), best);
        assert!(digits >= 14.5, "refined vs exact: {digits:.2}");
    }
}

#[test]
fn refinement_improves_on_plain_qr_where_qr_loses_digits() {
    // Wampler4 and Wampler5: plain QR keeps 8.8 and 6.9 digits, refinement 15.
    for name in ["Wampler4", "Wampler5", "Filip"] {
        let plain = certified_digits(&Qr::new(), name);
        let refined = certified_digits(&Qr::refined(), name);
        assert!(refined > plain, "{name}: {refined:.2} <= {plain:.2}");
    }
}

#[test]
fn refinement_residual_sum_of_squares_matches_certified() {
    // Reference: NIST certified residual sums of squares (absolute error for
    // the exact fits Wampler1 and Wampler2, whose certified value is 0).
    for name in nist::ALL {
        if name == "Filip" {
            continue; // data-limited as above
        }
        let d = nist::load(name);
        let f = fit(&Qr::refined(), &d).expect("fits");
        let digits = nist::lre(f.report.residual_sum_of_squares, d.certified.ss_residual);
        assert!(digits >= 12.0, "{name}: RSS {digits:.2} digits");
    }
}

#[test]
fn refinement_settings_are_validated_and_honoured() {
    let d = nist::load("Longley");
    let problem = Problem::new(d.x.view(), d.y.view()).expect("valid");
    for bad in [f64::NAN, -1.0, f64::INFINITY] {
        let solver = Qr::new().with_refinement(Refinement::new().with_tolerance(bad));
        assert!(matches!(
            solver.fit(&problem),
            Err(Error::InvalidParameter { .. })
        ));
    }
    // No steps allowed: the plain solution, reported as not converged.
    let none = Qr::new().with_refinement(Refinement::new().with_max_iterations(0));
    let f0 = none.fit(&problem).expect("fits");
    let plain = Qr::new().fit(&problem).expect("fits");
    let it = f0.report.iterations.as_ref().expect("report");
    assert_eq!(it.iterations, 0);
    assert!(!it.converged);
    assert_eq!(f0.model.coefficients(), plain.model.coefficients());
    // One step at most.
    let one = Qr::new().with_refinement(Refinement::new().with_max_iterations(1));
    let f1 = one.fit(&problem).expect("fits");
    assert_eq!(f1.report.iterations.as_ref().map(|i| i.iterations), Some(1));
    // Plain QR reports no iterations.
    assert!(plain.report.iterations.is_none());
}

/// Identity: integer weights are row repetitions, so the weighted refined fit
/// equals the exact solution of the data with each row repeated w_i times
/// (rational reference), and zero-weight rows change nothing.
#[test]
fn refinement_with_weights_matches_exact_repeated_rows() {
    let d = nist::load("Wampler4");
    let n = d.y.len();
    let weights: Vec<f64> = (0..n).map(|i| [1.0, 2.0, 3.0, 0.0][i % 4]).collect();
    let mut rows = Vec::new();
    for (i, &w) in weights.iter().enumerate() {
        for _ in 0..(w as usize) {
            rows.push(i);
        }
    }
    let xr = Array2::from_shape_fn((rows.len(), d.x.ncols()), |(r, j)| d.x[[rows[r], j]]);
    let yr = ndarray::Array1::from_iter(rows.iter().map(|&i| d.y[i]));
    let best = exact::least_squares(xr.view(), yr.view(), true);
    let w = ndarray::Array1::from(weights);
    let problem = Problem::builder(d.x.view(), d.y.view())
        .with_weights(w.view())
        .build()
        .expect("valid");
    let f = Qr::refined().fit(&problem).expect("fits");
    let digits = min_lre(&estimates(&f, true), &best);
    assert!(digits >= 14.5, "weighted refined vs exact: {digits:.2}");
}

/// A tall ill-conditioned problem: several row blocks (parallel QR groups)
/// and a condition estimate high enough that refinement takes the
/// orthogonal (repeated QR) correction. Reference: exact rational solution.
#[test]
fn refinement_on_a_tall_ill_conditioned_design() {
    use rand::{RngExt, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20_240_611);
    let n = 20_000;
    let degree = 9;
    let t: Vec<f64> = (0..n).map(|_| rng.random_range(1.0..2.0)).collect();
    let x = Array2::from_shape_fn((n, degree), |(i, k)| t[i].powi(k as i32 + 1));
    let y = ndarray::Array1::from_iter(
        t.iter()
            .map(|&v| (3.0 * v).sin() + 0.01 * rng.random_range(-1.0..1.0)),
    );
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let plain = Qr::new().fit(&problem).expect("fits");
    let condition = plain.report.condition.expect("QR measures its condition");
    assert!(
        condition > 1e8,
        "condition {condition:e} too low to exercise the orthogonal correction"
    );
    let best = exact::least_squares(x.view(), y.view(), true);
    let f = Qr::refined().fit(&problem).expect("fits");
    let plain_digits = min_lre(&estimates(&plain, true), &best);
    let digits = min_lre(&estimates(&f, true), &best);
    assert!(
        digits >= 14.0,
        "refined {digits:.2} (plain {plain_digits:.2})"
    );
    assert!(
        digits > plain_digits + 2.0,
        "refined {digits:.2}, plain {plain_digits:.2}"
    );
}

// ---------------------------------------------------------------------------
// Honest refusal of the normal equations

#[test]
fn cholesky_refuses_filip_and_points_elsewhere() {
    let d = nist::load("Filip");
    match fit(&Cholesky::new(), &d) {
        Err(Error::IllConditioned {
            method,
            expected_digits,
            required_digits,
            condition,
        }) => {
            assert_eq!(required_digits, 4.0);
            assert!(expected_digits < 4.0, "{expected_digits}");
            assert!(condition > 1e18, "{condition:e}");
            assert!(!method.is_empty());
            let text = Error::IllConditioned {
                method,
                expected_digits,
                required_digits,
                condition,
            }
            .to_string();
            assert!(text.contains("QR") && text.contains("SVD"), "{text}");
        }
        other => panic!("Filip: expected IllConditioned, got {other:?}"),
    }
}

#[test]
fn cholesky_fits_norris() {
    let digits = certified_digits(&Cholesky::new(), "Norris");
    assert!(digits >= 12.0, "{digits:.2}");
}

#[test]
fn cholesky_honours_min_digits() {
    let d = nist::load("Longley");
    // Longley fits at the default threshold ...
    let f = fit(&Cholesky::new(), &d).expect("Longley fits at 4 digits");
    let c = f.report.condition.expect("Cholesky measures its condition");
    let expected = -(f64::EPSILON * c * c).log10();
    // ... and is refused when the caller asks for more than it expects.
    let strict = Cholesky::new().with_min_digits(expected + 0.5);
    match fit(&strict, &d) {
        Err(Error::IllConditioned {
            expected_digits,
            required_digits,
            ..
        }) => {
            assert_eq!(required_digits, expected + 0.5);
            assert!((expected_digits - expected).abs() < 1e-9);
        }
        other => panic!("expected IllConditioned, got {other:?}"),
    }
    let lenient = Cholesky::new().with_min_digits(expected - 0.5);
    assert!(fit(&lenient, &d).is_ok());
    let nan = Cholesky::new().with_min_digits(f64::NAN);
    assert!(matches!(fit(&nan, &d), Err(Error::InvalidParameter { .. })));
}

/// The estimate `-log10(eps * cond(G))` is normwise: it speaks for the
/// coefficient vector as a whole in scaled units. The smallest coefficient
/// (in relative terms) and an intercept recovered by centering can keep
/// fewer digits. Measured on the ten problems Cholesky accepts, the
/// estimate promises at most 2.4 digits more than the worst coefficient
/// delivers (Pontius, Wampler1, Wampler3: the small coefficients in scaled
/// units and the intercept), and under-promises on Wampler2 and Longley by
/// about one digit. The digits below the estimate are rounding, so they
/// move with the order of the sums: with the AVX-512 Gram kernel of eight
/// rows as lanes (`passes/gram/lanes.rs`) Wampler1, Wampler3 and Longley
/// gain 0.4 to 0.9 digits and Wampler5 loses 0.9 (6.75 -> 5.85, 3.4 under
/// its estimate of 9.23). Asserted with a margin: never more than 3.5
/// digits over.
#[test]
fn cholesky_digit_estimate_is_within_three_and_a_half_digits_of_delivery() {
    for name in nist::ALL {
        let d = nist::load(name);
        match fit(&Cholesky::new(), &d) {
            Ok(f) => {
                let c = f.report.condition.expect("Cholesky measures its condition");
                let expected = -(f64::EPSILON * c * c).log10();
                let delivered = min_lre(&estimates(&f, d.intercept), &d.certified.estimates());
                assert!(
                    delivered >= expected.min(15.0) - 3.5,
                    "{name}: estimate {expected:.2}, delivered {delivered:.2}"
                );
            }
            Err(Error::IllConditioned { .. }) => assert_eq!(name, "Filip"),
            Err(e) => panic!("{name}: {e}"),
        }
    }
}

/// Edge cases of the refined path: no panic, typed results, and exact
/// identities where they exist.
#[test]
fn refinement_edge_cases() {
    // Intercept only (no columns): the refined intercept is the mean, and
    // for these values the mean is exactly 0.25 (identity).
    let x = Array2::<f64>::zeros((4, 0));
    let y = ndarray::array![0.1, 0.2, 0.3, 0.4];
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let f = Qr::refined().fit(&problem).expect("fits");
    assert_eq!(f.model.intercept(), 0.25);

    // An exact line through integers: refinement recovers it exactly.
    let x = ndarray::array![[1.0], [2.0], [3.0], [4.0], [5.0]];
    let y = ndarray::array![7.0, 10.0, 13.0, 16.0, 19.0];
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let f = Qr::refined().fit(&problem).expect("fits");
    assert_eq!(f.model.coefficients()[0], 3.0);
    assert_eq!(f.model.intercept(), 4.0);
    assert_eq!(f.report.residual_sum_of_squares, 0.0);

    // Zero-weight rows are ignored, even with wild values in them.
    let x = ndarray::array![[1.0], [2.0], [3.0], [1e6], [4.0]];
    let y = ndarray::array![2.0, 4.1, 5.9, -1e9, 8.2];
    let w = ndarray::array![1.0, 1.0, 1.0, 0.0, 1.0];
    let kept_x = ndarray::array![[1.0], [2.0], [3.0], [4.0]];
    let kept_y = ndarray::array![2.0, 4.1, 5.9, 8.2];
    let weighted = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .expect("valid");
    let a = Qr::refined().fit(&weighted).expect("fits");
    let best = exact::least_squares(kept_x.view(), kept_y.view(), true);
    assert!(min_lre(&estimates(&a, true), &best) >= 15.0);

    // Values near the top of the f64 range: refinement runs in scaled
    // units, but the residual sum of squares, about 1e608, is not
    // representable: a typed error, never an infinite or NaN report.
    let x = ndarray::array![[1e305], [2e305], [3e305], [4e305]];
    let y = ndarray::array![1.0e305, 2.1e305, 2.9e305, 4.2e305];
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    assert_eq!(
        Qr::refined().fit(&problem),
        Err(leastline::Error::Overflow {
            what: "residual sum of squares"
        })
    );
    // Near 1e150 it is representable, and refinement reaches the exact
    // solution of the data as given.
    let x = ndarray::array![[1e150], [2e150], [3e150], [4e150]];
    let y = ndarray::array![1.0e150, 2.1e150, 2.9e150, 4.2e150];
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let f = Qr::refined().fit(&problem).expect("fits");
    assert!(f.report.iterations.as_ref().is_some_and(|it| it.converged));
    let best = exact::least_squares(x.view(), y.view(), true);
    assert!(min_lre(&estimates(&f, true), &best) >= 14.0);

    // Tiny values: still the exact solution.
    let x = ndarray::array![[1e-200], [2e-200], [3e-200], [4e-200]];
    let y = ndarray::array![1.0e-200, 2.1e-200, 2.9e-200, 4.2e-200];
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let f = Qr::refined().fit(&problem).expect("fits");
    let best = exact::least_squares(x.view(), y.view(), true);
    assert!(min_lre(&estimates(&f, true), &best) >= 14.0);
}
