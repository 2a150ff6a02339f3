//! The second pass over a triangle state's rows (issue 12): per-block
//! diagnostics and sandwich covariances.
//!
//! References, named beside each check:
//! - this crate's in-memory [`Inference::diagnostics`] and
//!   [`Inference::with_options`] of the same rows (themselves checked
//!   against brute-force refits and NIST in `tests/inference*.rs`);
//! - the exact identity `e_(i) = e_i / (1 - h_i)`: the leave-one-out
//!   residual equals the target minus the prediction of an actual refit
//!   without row `i`.

mod common;

use common::gen;
use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::{BlockDiagnostics, Error, FitState, Problem, Qr, Solver, TriangleState};
use ndarray::{s, Array1, Array2, Axis};

/// Checks `a` against `b` to 13 digits, relative to `max(|b|, floor)`.
fn close(what: &str, row: usize, a: f64, b: f64, floor: f64) {
    let scale = b.abs().max(floor);
    assert!(
        (a - b).abs() <= 1e-13 * scale,
        "{what} at row {row}: {a:e} against {b:e}"
    );
}

fn close_opt(what: &str, a: &[Option<f64>], b: &[Option<f64>], floor: f64) {
    assert_eq!(a.len(), b.len(), "{what}: lengths");
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        match (x, y) {
            (Some(x), Some(y)) => close(what, i, *x, *y, floor),
            (None, None) => {}
            _ => panic!("{what} at row {i}: {x:?} against {y:?}"),
        }
    }
}

/// A problem with a spread of leverages: a few rows far out, some rows
/// of weight zero when weighted.
fn data(
    seed: u64,
    n: usize,
    p: usize,
    weighted: bool,
) -> (Array2<f64>, Array1<f64>, Option<Array1<f64>>) {
    let mut rng = gen::rng(seed);
    let mut x = gen::normal_matrix(&mut rng, n, p);
    for j in 0..p {
        let (offset, spread) = (10.0 * (j as f64 + 1.0), 0.5 + j as f64);
        x.column_mut(j).mapv_inplace(|v| offset + spread * v);
    }
    for i in (0..n).step_by(13) {
        x[(i, 0)] += 8.0;
    }
    let y = Array1::from_shape_fn(n, |i| {
        let fit: f64 = x
            .row(i)
            .iter()
            .enumerate()
            .map(|(j, v)| (j as f64 - 1.5) * v)
            .sum();
        3.0 + fit + (1.0 + 0.3 * x[(i, 0)].abs()) * gen::normal(&mut rng)
    });
    let w = weighted.then(|| {
        let mut w = gen::weights(&mut rng, n);
        for i in (5..n).step_by(11) {
            w[i] = 0.0;
        }
        w[1] = 0.0;
        w
    });
    (x, y, w)
}

fn problem<'a>(
    x: &'a Array2<f64>,
    y: &'a Array1<f64>,
    w: Option<&'a Array1<f64>>,
    intercept: bool,
) -> Problem<'a> {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    b.build().expect("problem")
}

/// Splits `0..n` into blocks of the given sizes (cycled).
fn blocks(n: usize, sizes: &[usize]) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let (mut a, mut k) = (0, 0);
    while a < n {
        let b = (a + sizes[k % sizes.len()]).min(n);
        out.push((a, b));
        a = b;
        k += 1;
    }
    out
}

fn state_of(
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
    parts: &[(usize, usize)],
) -> TriangleState {
    let mut state = TriangleState::new(x.ncols(), 1, intercept).expect("state");
    for &(a, b) in parts {
        state
            .absorb_target(
                x.slice(s![a..b, ..]),
                y.slice(s![a..b]),
                w.map(|w| w.slice(s![a..b])),
            )
            .expect("absorb");
    }
    state
}

/// Runs the second pass over `parts` (which may differ from the blocks
/// the state absorbed) and joins the block results.
fn run_pass(
    state: &TriangleState,
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    parts: &[(usize, usize)],
) -> (leastline::SecondPass, Vec<BlockDiagnostics>) {
    let mut pass = state.second_pass(0).expect("second pass");
    let mut out = Vec::new();
    for &(a, b) in parts {
        let d = pass
            .absorb_target(
                a,
                x.slice(s![a..b, ..]),
                y.slice(s![a..b]),
                w.map(|w| w.slice(s![a..b])),
            )
            .expect("pass block");
        assert_eq!(d.first_row, a);
        assert_eq!(d.leverage.len(), b - a);
        out.push(d);
    }
    (pass, out)
}

fn joined(
    blocks: &[BlockDiagnostics],
    f: impl Fn(&BlockDiagnostics) -> Vec<Option<f64>>,
) -> Vec<Option<f64>> {
    blocks.iter().flat_map(f).collect()
}

/// Reference: the in-memory diagnostics and sandwich inference.
fn check_against_memory(seed: u64, n: usize, p: usize, weighted: bool, intercept: bool) {
    let (x, y, w) = data(seed, n, p, weighted);
    let problem = problem(&x, &y, w.as_ref(), intercept);
    let fit = Qr::new().fit(&problem).expect("fit");
    let memory = Inference::new(&problem, &fit).expect("inference");
    let reference = memory.diagnostics(&problem).expect("diagnostics");
    let state = state_of(&x, &y, w.as_ref(), intercept, &blocks(n, &[17, 5, 23]));
    let (pass, got) = run_pass(&state, &x, &y, w.as_ref(), &blocks(n, &[9, 31, 1]));

    let lev: Vec<Option<f64>> = joined(&got, |d| d.leverage.iter().map(|&v| Some(v)).collect());
    let ref_lev: Vec<Option<f64>> = reference.leverage.iter().map(|&v| Some(v)).collect();
    // Leverages lie in [0, 1]: digits on the scale 1; studentized values
    // on the scale of one standard deviation, Cook's distances on 1e-3
    // (their mean is k / n).
    close_opt("leverage", &lev, &ref_lev, 1.0);
    let res = joined(&got, |d| d.residuals.iter().map(|&v| Some(v)).collect());
    let ref_res: Vec<Option<f64>> = reference.residuals.iter().map(|&v| Some(v)).collect();
    // A residual is a difference of targets: digits on the targets' scale.
    let y_scale = y.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    close_opt("residual", &res, &ref_res, y_scale);
    close_opt(
        "studentized",
        &joined(&got, |d| d.studentized.clone()),
        &reference.studentized,
        1.0,
    );
    close_opt(
        "deleted studentized",
        &joined(&got, |d| d.deleted_studentized.clone()),
        &reference.deleted_studentized,
        1.0,
    );
    close_opt(
        "Cook's distance",
        &joined(&got, |d| d.cooks_distance.clone()),
        &reference.cooks_distance,
        1e-3,
    );
    if let Some(w) = &w {
        // Rows of weight zero: leverage 0, no studentized value.
        for i in (0..n).filter(|&i| w[i] == 0.0) {
            assert_eq!(lev[i], Some(0.0));
            assert_eq!(reference.studentized[i], None);
        }
    }

    for kind in [
        CovarianceKind::Classical,
        CovarianceKind::Hc0,
        CovarianceKind::Hc1,
        CovarianceKind::Hc2,
        CovarianceKind::Hc3,
    ] {
        let options = InferenceOptions::new().with_covariance(kind);
        let ours = pass.inference(options).expect("pass inference");
        let theirs = Inference::with_options(&problem, &fit, options).expect("in-memory");
        let q = theirs.covariance.nrows();
        assert_eq!(ours.covariance.dim(), (q, q));
        for a in 0..q {
            for b in 0..q {
                let floor = (theirs.covariance[[a, a]] * theirs.covariance[[b, b]]).sqrt();
                close(
                    &format!("{} covariance ({a}, {b})", kind.name()),
                    a,
                    ours.covariance[[a, b]],
                    theirs.covariance[[a, b]],
                    floor,
                );
            }
        }
        for (e, f) in ours.estimates().zip(theirs.estimates()) {
            close(
                &format!("{} standard error", kind.name()),
                0,
                e.std_error,
                f.std_error,
                0.0,
            );
            close(&format!("{} t", kind.name()), 0, e.t, f.t, 0.0);
        }
        if let (Some(a), Some(b)) = (&ours.goodness.overall, &theirs.goodness.overall) {
            close(
                &format!("{} overall statistic", kind.name()),
                0,
                a.statistic,
                b.statistic,
                0.0,
            );
        }
    }
}

#[test]
fn weighted_blocks_equal_the_in_memory_diagnostics_and_sandwiches() {
    check_against_memory(7, 120, 3, true, true);
}

#[test]
fn unweighted_blocks_equal_the_in_memory_diagnostics_and_sandwiches() {
    check_against_memory(8, 75, 2, false, true);
}

#[test]
fn without_intercept_blocks_equal_the_in_memory_diagnostics_and_sandwiches() {
    check_against_memory(9, 64, 3, true, false);
}

/// Exact identity: the leave-one-out residual is the target minus the
/// prediction of a refit to every other row (rows of weight zero: the fit
/// is unchanged, so the residual itself).
#[test]
fn leave_one_out_residuals_equal_refits_without_the_row() {
    let (x, y, w) = data(11, 40, 2, true);
    let w = w.expect("weights");
    let n = x.nrows();
    let state = state_of(&x, &y, Some(&w), true, &blocks(n, &[6]));
    let (_, got) = run_pass(&state, &x, &y, Some(&w), &blocks(n, &[13]));
    let loo = joined(&got, |d| d.leave_one_out.clone());
    for i in 0..n {
        let keep: Vec<usize> = (0..n).filter(|&r| r != i).collect();
        let xs = x.select(Axis(0), &keep);
        let ys = y.select(Axis(0), &keep);
        let ws = w.select(Axis(0), &keep);
        let p = problem(&xs, &ys, Some(&ws), true);
        let model = Qr::new().fit(&p).expect("refit").model;
        let prediction = model.predict(x.slice(s![i..i + 1, ..])).expect("predict")[0];
        let expected = y[i] - prediction;
        let got = loo[i].expect("defined");
        assert!(
            (got - expected).abs() <= 1e-10 * expected.abs().max(1.0),
            "row {i}: {got:e} against the refit's {expected:e}"
        );
    }
}

#[test]
fn rows_out_of_order_missing_or_extra_are_refused() {
    let (x, y, w) = data(12, 30, 2, true);
    let w = w.expect("weights");
    let state = state_of(&x, &y, Some(&w), true, &blocks(30, &[10]));
    let mut pass = state.second_pass(0).expect("pass");
    let err = pass
        .absorb_target(
            5,
            x.slice(s![5..10, ..]),
            y.slice(s![5..10]),
            Some(w.slice(s![5..10])),
        )
        .unwrap_err();
    assert_eq!(
        err,
        Error::PassMismatch {
            what: "first row of the block",
            expected: 0,
            found: 5
        }
    );
    pass.absorb_target(
        0,
        x.slice(s![..20, ..]),
        y.slice(s![..20]),
        Some(w.slice(s![..20])),
    )
    .expect("first block");
    // Too early: ten rows are missing.
    let early = pass.inference(InferenceOptions::new()).unwrap_err();
    assert_eq!(
        early,
        Error::PassMismatch {
            what: "rows",
            expected: 30,
            found: 20
        }
    );
    // A block running past the state's rows.
    let longer =
        ndarray::concatenate(Axis(0), &[x.slice(s![20.., ..]), x.slice(s![..3, ..])]).unwrap();
    let longer_y = ndarray::concatenate(Axis(0), &[y.slice(s![20..]), y.slice(s![..3])]).unwrap();
    let err = pass
        .absorb_target(20, longer.view(), longer_y.view(), None)
        .unwrap_err();
    assert_eq!(
        err,
        Error::PassMismatch {
            what: "rows",
            expected: 30,
            found: 33
        }
    );
    // A weight changed to zero: the usable count disagrees at the end.
    let mut w2 = w.slice(s![20..]).to_owned();
    let zero = w2.iter().position(|&v| v > 0.0).expect("a positive weight");
    w2[zero] = 0.0;
    pass.absorb_target(
        20,
        x.slice(s![20.., ..]),
        y.slice(s![20..]),
        Some(w2.view()),
    )
    .expect("last block");
    match pass.inference(InferenceOptions::new()).unwrap_err() {
        Error::PassMismatch {
            what,
            expected,
            found,
        } => {
            assert_eq!(what, "rows with positive weight");
            assert_eq!(found + 1, expected);
        }
        other => panic!("unexpected {other:?}"),
    }
}
