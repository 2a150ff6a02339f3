//! Many targets over one design in memory (`ManyTargets`, issue 12).
//!
//! References, named beside each check:
//! - the exact least-squares solution of the `f64` data (big-integer
//!   normal equations solved in rational arithmetic, `common::exact`);
//! - the in-memory solvers of this crate fitted to each target alone
//!   (`Qr`, `Cholesky`, `Svd`, `Ridge`);
//! - exact identities: `absorb_rows` gives the bits of one `absorb` of the
//!   same arrays; observing changes nothing.

mod common;

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use common::{exact, gen};
use leastline::state::absorb_rows;

/// Rows at which the tests' sizes are chosen: several row blocks of the
/// parallel pass at these widths.
const ABSORB_BLOCK_ROWS: usize = 8192;
use leastline::{
    Cholesky, Control, Error, Fit, FitState, GradientDescent, Input, ManyTargets, Progress, Qr,
    Ridge, Solver, Stage, Svd, TriangleState, Unobserved,
};
use ndarray::{s, Array1, Array2};
use rand::RngExt;

/// `-log10` of the relative difference, capped at 16.
fn digits(a: f64, b: f64) -> f64 {
    if a == b {
        return 16.0;
    }
    (-((a - b).abs() / b.abs().max(f64::MIN_POSITIVE)).log10()).min(16.0)
}

/// Fewest digits shared by the coefficients (intercept first) of a fit
/// and a reference.
fn fit_digits(fit: &Fit, reference: &[f64], intercept: bool) -> f64 {
    let mut ours = Vec::new();
    if intercept {
        ours.push(fit.model.intercept());
    }
    ours.extend(fit.model.coefficients().iter().copied());
    ours.iter()
        .zip(reference)
        .map(|(&a, &b)| digits(a, b))
        .fold(16.0, f64::min)
}

fn coefficients(fit: &Fit) -> Vec<f64> {
    let mut v = vec![fit.model.intercept()];
    v.extend(fit.model.coefficients().iter().copied());
    v
}

/// A design of small integers (exact in the rational reference), `k`
/// targets each a different combination plus integer noise, and integer
/// weights; `n` spans several blocks of `absorb_rows`.
fn data(seed: u64, n: usize, p: usize, k: usize) -> (Array2<f64>, Array2<f64>, Array1<f64>) {
    let mut rng = gen::rng(seed);
    let x = Array2::from_shape_fn((n, p), |_| f64::from(rng.random_range(-50i32..=50)));
    let noise = Array2::from_shape_fn((n, k), |_| f64::from(rng.random_range(-20i32..=20)));
    let ys = Array2::from_shape_fn((n, k), |(i, t)| {
        let mut v = 100.0 * (t as f64 + 1.0) + noise[(i, t)];
        for j in 0..p {
            v += ((j + 2 * t) % 5) as f64 * x[(i, j)] - (t as f64) * 0.25 * x[(i, j)];
        }
        v
    });
    let w = Array1::from_shape_fn(n, |_| f64::from(rng.random_range(1i32..=4)));
    (x, ys, w)
}

/// QR through one state for `k = 5` targets, weighted, over 3 blocks:
/// each target agrees with the exact solution to 13 digits, and with the
/// in-memory `Qr` on that target alone to 13 digits (the state centres by
/// block means and merges; the in-memory path centres by the whole means,
/// so the two round differently: not bit for bit). Their reports agree on
/// rank, usable rows and residual degrees of freedom, and the residual
/// sums of squares to 12 digits.
#[test]
fn qr_targets_equal_exact_and_separate_fits() {
    let (n, p, k) = (2 * ABSORB_BLOCK_ROWS + 1234, 3, 5);
    let (x, ys, w) = data(11, n, p, k);
    let many = ManyTargets::builder(x.view(), ys.view())
        .with_weights(w.view())
        .build()
        .expect("many");
    let fits = many.fit(&Qr::new()).expect("fit");
    assert_eq!(fits.len(), k);
    // Exact weighted reference: scale the rows by sqrt(w), w in {1, 4}
    // exact; w in {2, 3} is not, so the reference uses replicated rows.
    let reps: Vec<usize> = w.iter().map(|&v| v as usize).collect();
    let total: usize = reps.iter().sum();
    let mut xr = Array2::zeros((total, p));
    let mut yr = Array2::zeros((total, k));
    let mut at = 0;
    for (i, &r) in reps.iter().enumerate() {
        for _ in 0..r {
            xr.row_mut(at).assign(&x.row(i));
            yr.row_mut(at).assign(&ys.row(i));
            at += 1;
        }
    }
    for (t, fit) in fits.iter().enumerate() {
        let reference = exact::least_squares(xr.view(), yr.column(t), true);
        let d = fit_digits(fit, &reference, true);
        assert!(
            d >= 13.0,
            "target {t}: {d} digits against the exact solution"
        );
        let alone = Qr::new()
            .fit(&many.problem(t).expect("problem"))
            .expect("qr");
        let d = fit_digits(fit, &coefficients(&alone), true);
        assert!(d >= 13.0, "target {t}: {d} digits against the in-memory Qr");
        assert_eq!(fit.report.rank, alone.report.rank);
        assert_eq!(fit.report.usable_rows, alone.report.usable_rows);
        assert_eq!(fit.report.residual_df, alone.report.residual_df);
        let rss = digits(
            fit.report.residual_sum_of_squares,
            alone.report.residual_sum_of_squares,
        );
        assert!(rss >= 12.0, "target {t}: RSS {rss} digits");
        assert_eq!(fit.report.solver, "qr-state");
    }
}

/// Identity: the `k` fits of one state are the fits of `k` states of one
/// target each fed the same rows by `absorb_rows`: coefficients bit for
/// bit at this shape, residual sums of squares to 14.5 digits (14.87
/// measured; target `t`'s
/// residual column in the trailing block also holds its parts along the
/// earlier targets, summed in another order) (the factorisation of `[X y_1 .. y_k]` and that of `[X y_t]`
/// apply the same reflectors to the design's columns and to each target's
/// column; the kernel's row chunks depend on the width, and are the same
/// for widths 5 and 8).
#[test]
fn shared_state_equals_one_state_per_target() {
    let (n, p, k) = (ABSORB_BLOCK_ROWS + 777, 4, 4);
    let (x, ys, w) = data(12, n, p, k);
    let many = ManyTargets::builder(x.view(), ys.view())
        .with_weights(w.view())
        .build()
        .expect("many");
    let fits = many.fit(&Qr::new()).expect("fit");
    assert_eq!(fits.len(), k);
    for (t, fit) in fits.iter().enumerate() {
        let mut one = TriangleState::new(p, 1, true).expect("state");
        let yt = ys.slice(s![.., t..t + 1]);
        absorb_rows(&mut one, x.view(), yt, Some(w.view()), &Unobserved).expect("absorb");
        let alone = one.finish().expect("finish").remove(0);
        assert_eq!(coefficients(fit), coefficients(&alone), "target {t}");
        let rss = digits(
            fit.report.residual_sum_of_squares,
            alone.report.residual_sum_of_squares,
        );
        assert!(rss >= 14.5, "target {t}: RSS {rss} digits");
    }
}

/// Cholesky (cross-product state), Svd (minimum norm) and Ridge (augmented
/// QR) for many targets against the in-memory solver on each target alone:
/// 12 digits (Cholesky: the normal equations' rounding; 14.0 measured),
/// 12.5 (Svd: the minimum-norm finish of the state against the SVD of the
/// whole design; 12.8 measured), 13 (Ridge; 14.1 measured).
#[test]
fn other_solvers_equal_separate_fits() {
    let (n, p, k) = (ABSORB_BLOCK_ROWS + 4000, 3, 4);
    let (x, ys, w) = data(13, n, p, k);
    let many = ManyTargets::builder(x.view(), ys.view())
        .with_weights(w.view())
        .build()
        .expect("many");
    let ridge = Ridge::new(250.0);
    let cases: [(&dyn leastline::SharedSolver, &dyn Solver, f64, &str); 3] = [
        (&Cholesky::new(), &Cholesky::new(), 12.0, "cholesky-state"),
        (&Svd::new(), &Svd::new(), 12.5, "svd-state"),
        (&ridge, &ridge, 13.0, "ridge-state"),
    ];
    for (shared, alone_solver, floor, name) in cases {
        let fits = many.fit(shared).expect("fit");
        for (t, fit) in fits.iter().enumerate() {
            let alone = alone_solver
                .fit(&many.problem(t).expect("problem"))
                .expect("alone");
            let d = fit_digits(fit, &coefficients(&alone), true);
            assert!(d >= floor, "{name} target {t}: {d} digits");
            assert_eq!(fit.report.solver, name);
            assert_eq!(fit.report.penalty, alone.report.penalty);
        }
    }
}

/// Observer: one call per row block of the parallel pass with the rows
/// done so far, the same bits as unobserved; a stop after the first block
/// is `Error::Stopped` before every row is read, and the caller's state is
/// left unchanged.
#[test]
fn observer_sees_blocks_and_stops() {
    let (n, p, k) = (2 * ABSORB_BLOCK_ROWS + 10, 2, 3);
    let (x, ys, _) = data(14, n, p, k);
    let many = ManyTargets::new(x.view(), ys.view()).expect("many");
    let seen = Mutex::new(Vec::new());
    let watch = |progress: &Progress| {
        assert_eq!(progress.stage, Stage::Factor);
        assert_eq!(progress.rows_total, Some(n));
        seen.lock().unwrap().push(progress.rows_done.unwrap());
        Control::Continue
    };
    let observed = many.fit_observed(&Qr::new(), &watch).expect("observed");
    let mut reports = seen.lock().unwrap().clone();
    reports.sort_unstable();
    assert!(reports.len() >= 3, "{reports:?}");
    assert!(reports.windows(2).all(|r| r[0] < r[1]), "{reports:?}");
    assert_eq!(reports.last(), Some(&n));
    assert_eq!(observed, many.fit(&Qr::new()).expect("plain"));

    let calls = AtomicUsize::new(0);
    let stop = |_: &Progress| {
        calls.fetch_add(1, Ordering::Relaxed);
        Control::Stop
    };
    match many.fit_observed(&Cholesky::new(), &stop) {
        Err(Error::Stopped {
            stage: Stage::Factor,
            rows_done,
            rows_total,
        }) => {
            assert!(rows_done < n, "{rows_done} of {n}");
            assert_eq!(rows_total, n);
        }
        other => panic!("expected a stop, got {other:?}"),
    }
    // One report per thread at most before the stop is seen.
    let calls = calls.load(Ordering::Relaxed);
    assert!(
        (1..=rayon::current_num_threads()).contains(&calls),
        "{calls}"
    );

    let mut state = TriangleState::new(p, k, true).expect("state");
    state
        .absorb(x.slice(s![..100, ..]), ys.slice(s![..100, ..]), None)
        .expect("first rows");
    let before = state.clone();
    let err = absorb_rows(&mut state, x.view(), ys.view(), None, &stop);
    assert!(matches!(err, Err(Error::Stopped { .. })));
    assert_eq!(state, before);
}

/// A NaN in target 3 at a row of the second block is reported with its
/// row and the target as its column; so is one given to `fit_each`.
#[test]
fn nan_in_a_target_names_target_and_row() {
    let (n, p, k) = (ABSORB_BLOCK_ROWS + 500, 2, 5);
    let (x, mut ys, _) = data(15, n, p, k);
    let row = ABSORB_BLOCK_ROWS + 321;
    ys[(row, 3)] = f64::NAN;
    let many = ManyTargets::new(x.view(), ys.view()).expect("shapes are fine");
    for solver in [&Qr::new() as &dyn leastline::SharedSolver, &Cholesky::new()] {
        match many.fit(solver) {
            Err(Error::NonFinite {
                input: Input::Target,
                row: r,
                column: Some(3),
                value,
                ..
            }) => {
                assert_eq!(r, row);
                assert!(value.is_nan());
            }
            other => panic!("expected the NaN, got {other:?}"),
        }
    }
    let err = many.fit_each(&Qr::new()).expect_err("NaN");
    assert!(
        matches!(err, Error::NonFinite { input: Input::Target, row: r, column: Some(3), .. } if r == row),
        "{err:?}"
    );
    assert!(err.to_string().contains(&row.to_string()), "{err}");
}

/// Gradient solvers fit one target at a time (`fit_each`): each agrees
/// with the shared QR fit to the gradient solver's tolerance.
#[test]
fn gradient_targets_one_by_one() {
    let (n, p, k) = (3000, 2, 3);
    let mut rng = gen::rng(16);
    let x = gen::normal_matrix(&mut rng, n, p);
    let ys = Array2::from_shape_fn((n, k), |(i, t)| {
        (t as f64 + 1.0) * x[(i, 0)] - 0.5 * x[(i, 1)] + 0.1 * gen::normal(&mut rng) + t as f64
    });
    let many = ManyTargets::new(x.view(), ys.view()).expect("many");
    let shared = many.fit(&Qr::new()).expect("qr");
    let each = many
        .fit_each(
            &GradientDescent::new()
                .with_tolerance(1e-12)
                .with_max_iterations(100_000),
        )
        .expect("gradient");
    assert_eq!(each.len(), k);
    for (t, (g, q)) in each.iter().zip(&shared).enumerate() {
        let d = fit_digits(g, &coefficients(q), true);
        assert!(d >= 6.0, "target {t}: {d} digits");
    }
}

/// Shapes are refused before any row is read.
#[test]
fn shapes_are_checked() {
    let x = Array2::<f64>::zeros((4, 2));
    let ys = Array2::<f64>::zeros((3, 2));
    assert!(matches!(
        ManyTargets::new(x.view(), ys.view()),
        Err(Error::LengthMismatch {
            input: Input::Target,
            ..
        })
    ));
    let ys = Array2::<f64>::zeros((4, 0));
    assert!(matches!(
        ManyTargets::new(x.view(), ys.view()),
        Err(Error::InvalidParameter {
            name: "targets",
            ..
        })
    ));
    let ys = Array2::<f64>::zeros((4, 2));
    let mut state = TriangleState::new(2, 3, true).expect("state");
    assert!(matches!(
        absorb_rows(&mut state, x.view(), ys.view(), None, &Unobserved),
        Err(Error::TargetCountMismatch {
            expected: 3,
            found: 2
        })
    ));
}
