//! The second pass over a state's rows (issue 12): per-block diagnostics
//! and sandwich covariances, for the triangle and the cross-product state,
//! for one target and for every target at once.
//!
//! References, named beside each check:
//! - this crate's in-memory [`Inference::diagnostics`] and
//!   [`Inference::with_options`] of the same rows (themselves checked
//!   against brute-force refits and NIST in `tests/inference*.rs`);
//! - the exact identity `e_(i) = e_i / (1 - h_i)`: the leave-one-out
//!   residual equals the target minus the prediction of an actual refit
//!   without row `i`;
//! - the one-target pass of the same state for each target (the pass over
//!   every target must equal it bit for bit).

mod common;

use common::gen;
use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::{
    BlockDiagnostics, CrossProductState, Error, FitState, ManyTargetsPass, Problem, Qr, SecondPass,
    Solver, TriangleState,
};
use ndarray::{s, Array1, Array2, Axis};
use proptest::prelude::*;
use std::cell::Cell;

thread_local! {
    /// Relative tolerance of [`close`] (13 digits unless a test sets it).
    static TOLERANCE: Cell<f64> = const { Cell::new(1e-13) };
    /// The fewest digits [`close`] has seen since the last reset.
    static FEWEST: Cell<f64> = const { Cell::new(f64::INFINITY) };
}

/// Sets the tolerance of [`close`] and resets the digit count.
fn set_tolerance(tol: f64) {
    TOLERANCE.with(|t| t.set(tol));
    FEWEST.with(|f| f.set(f64::INFINITY));
}

fn fewest_digits() -> f64 {
    FEWEST.with(|f| f.get())
}

/// Checks `a` against `b` to the set tolerance, relative to
/// `max(|b|, floor)`, and counts the digits they share.
fn close(what: &str, row: usize, a: f64, b: f64, floor: f64) {
    let scale = b.abs().max(floor);
    let tol = TOLERANCE.with(|t| t.get());
    assert!(
        (a - b).abs() <= tol * scale,
        "{what} at row {row}: {a:e} against {b:e}"
    );
    if scale > 0.0 {
        let digits = -((a - b).abs() / scale).max(1e-17).log10();
        FEWEST.with(|f| f.set(f.get().min(digits)));
    }
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

/// The kind of state a pass reads its factor from.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Triangle,
    Cross,
}

/// A finished state of either kind, fed the blocks `parts` of `x`, `ys`
/// (`n x k`) and the weights.
enum AnyState {
    Triangle(TriangleState),
    Cross(CrossProductState),
}

impl AnyState {
    fn build(
        kind: Kind,
        x: &Array2<f64>,
        ys: &Array2<f64>,
        w: Option<&Array1<f64>>,
        intercept: bool,
        parts: &[(usize, usize)],
    ) -> AnyState {
        let (p, k) = (x.ncols(), ys.ncols());
        let mut state = match kind {
            Kind::Triangle => AnyState::Triangle(TriangleState::new(p, k, intercept).unwrap()),
            Kind::Cross => AnyState::Cross(CrossProductState::new(p, k, intercept).unwrap()),
        };
        for &(a, b) in parts {
            let (xb, yb) = (x.slice(s![a..b, ..]), ys.slice(s![a..b, ..]));
            let wb = w.map(|w| w.slice(s![a..b]));
            match &mut state {
                AnyState::Triangle(t) => t.absorb(xb, yb, wb),
                AnyState::Cross(c) => c.absorb(xb, yb, wb),
            }
            .expect("absorb");
        }
        state
    }

    fn one(&self, target: usize) -> leastline::Result<SecondPass> {
        match self {
            AnyState::Triangle(t) => t.second_pass(target),
            AnyState::Cross(c) => c.second_pass(target),
        }
    }

    fn many(&self) -> leastline::Result<ManyTargetsPass> {
        match self {
            AnyState::Triangle(t) => t.second_pass_many(),
            AnyState::Cross(c) => c.second_pass_many(),
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
    mut pass: SecondPass,
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    parts: &[(usize, usize)],
) -> (SecondPass, Vec<BlockDiagnostics>) {
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

/// Reference: the in-memory diagnostics and sandwich inference. Returns
/// the fewest digits shared.
fn check_against_memory(
    seed: u64,
    n: usize,
    p: usize,
    weighted: bool,
    intercept: bool,
    kind: Kind,
) -> f64 {
    let (x, y, w) = data(seed, n, p, weighted);
    let ys = y.clone().insert_axis(Axis(1));
    let state = AnyState::build(
        kind,
        &x,
        &ys,
        w.as_ref(),
        intercept,
        &blocks(n, &[17, 5, 23]),
    );
    let pass = state.one(0).expect("second pass");
    let (pass, got) = run_pass(pass, &x, &y, w.as_ref(), &blocks(n, &[9, 31, 1]));
    check_blocks(&x, &y, w.as_ref(), intercept, &got);
    check_inference(&x, &y, w.as_ref(), intercept, |o| pass.inference(o));
    fewest_digits()
}

/// Checks the joined block results of one target against the in-memory
/// diagnostics of the same rows.
fn check_blocks(
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
    got: &[BlockDiagnostics],
) {
    let n = x.nrows();
    let problem = problem(x, y, w, intercept);
    let fit = Qr::new().fit(&problem).expect("fit");
    let memory = Inference::new(&problem, &fit).expect("inference");
    let reference = memory.diagnostics(&problem).expect("diagnostics");

    let lev: Vec<Option<f64>> = joined(got, |d| d.leverage.iter().map(|&v| Some(v)).collect());
    let ref_lev: Vec<Option<f64>> = reference.leverage.iter().map(|&v| Some(v)).collect();
    // Leverages lie in [0, 1]: digits on the scale 1; studentized values
    // on the scale of one standard deviation, Cook's distances on 1e-3
    // (their mean is k / n).
    close_opt("leverage", &lev, &ref_lev, 1.0);
    let res = joined(got, |d| d.residuals.iter().map(|&v| Some(v)).collect());
    let ref_res: Vec<Option<f64>> = reference.residuals.iter().map(|&v| Some(v)).collect();
    // A residual is a difference of targets: digits on the targets' scale.
    let y_scale = y.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    close_opt("residual", &res, &ref_res, y_scale);
    close_opt(
        "studentized",
        &joined(got, |d| d.studentized.clone()),
        &reference.studentized,
        1.0,
    );
    close_opt(
        "deleted studentized",
        &joined(got, |d| d.deleted_studentized.clone()),
        &reference.deleted_studentized,
        1.0,
    );
    close_opt(
        "Cook's distance",
        &joined(got, |d| d.cooks_distance.clone()),
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
}

/// Checks the pass's inference (`ours`) with every covariance against
/// [`Inference::with_options`] on the whole problem.
fn check_inference(
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
    ours: impl Fn(InferenceOptions) -> leastline::Result<Inference>,
) {
    let problem = problem(x, y, w, intercept);
    let fit = Qr::new().fit(&problem).expect("fit");
    for kind in [
        CovarianceKind::Classical,
        CovarianceKind::Hc0,
        CovarianceKind::Hc1,
        CovarianceKind::Hc2,
        CovarianceKind::Hc3,
    ] {
        let options = InferenceOptions::new().with_covariance(kind);
        let ours = ours(options).expect("pass inference");
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
            // A t value carries the estimate's absolute error in units
            // of its standard error: digits on the scale 1 (an estimate
            // near zero has a t near zero and no relative digits).
            close(&format!("{} t", kind.name()), 0, e.t, f.t, 1.0);
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
    set_tolerance(1e-13);
    check_against_memory(7, 120, 3, true, true, Kind::Triangle);
}

#[test]
fn unweighted_blocks_equal_the_in_memory_diagnostics_and_sandwiches() {
    set_tolerance(1e-13);
    check_against_memory(8, 75, 2, false, true, Kind::Triangle);
}

#[test]
fn without_intercept_blocks_equal_the_in_memory_diagnostics_and_sandwiches() {
    set_tolerance(1e-13);
    check_against_memory(9, 64, 3, true, false, Kind::Triangle);
}

/// The cross-product state's pass (leverage through `L^T`): the accuracy
/// of the normal equations, at least 12 digits on these well-conditioned
/// designs (condition of the scaled design about 10).
#[test]
fn cross_product_pass_equals_the_in_memory_diagnostics_and_sandwiches() {
    for (seed, n, p, weighted, intercept) in [
        (7, 120, 3, true, true),
        (8, 75, 2, false, true),
        (9, 64, 3, true, false),
    ] {
        set_tolerance(1e-12);
        let digits = check_against_memory(seed, n, p, weighted, intercept, Kind::Cross);
        println!("cross-product pass, seed {seed}: {digits:.2} digits");
    }
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
    let pass = state.second_pass(0).expect("second pass");
    let (_, got) = run_pass(pass, &x, &y, Some(&w), &blocks(n, &[13]));
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

/// `k` targets over the design of [`data`]: the first is `data`'s target,
/// the others other slopes and noise, the third on a scale `1e4` larger
/// (its own power of two in the state's frame).
fn data_many(
    seed: u64,
    n: usize,
    p: usize,
    k: usize,
    weighted: bool,
) -> (Array2<f64>, Array2<f64>, Option<Array1<f64>>) {
    let (x, y, w) = data(seed, n, p, weighted);
    let mut rng = gen::rng(seed.wrapping_add(1000));
    let ys = Array2::from_shape_fn((n, k), |(i, t)| {
        if t == 0 {
            return y[i];
        }
        let tf = t as f64;
        let v = 100.0 * tf + tf * x[(i, 0)] - 0.5 * tf * x[(i, p - 1)]
            + (1.0 + tf) * gen::normal(&mut rng);
        if t == 2 {
            1e4 * v
        } else {
            v
        }
    });
    (x, ys, w)
}

/// Runs the pass over every target and, beside it, one one-target pass
/// per target over the same blocks; checks that each block's results and
/// each target's inference agree bit for bit, and returns the joined
/// results per target with the pass.
fn run_many(
    state: &AnyState,
    x: &Array2<f64>,
    ys: &Array2<f64>,
    w: Option<&Array1<f64>>,
    parts: &[(usize, usize)],
) -> (ManyTargetsPass, Vec<Vec<BlockDiagnostics>>) {
    let k = ys.ncols();
    let mut many = state.many().expect("pass over every target");
    assert_eq!(many.targets(), k);
    let mut ones: Vec<SecondPass> = (0..k).map(|t| state.one(t).expect("pass")).collect();
    let mut per_target = vec![Vec::new(); k];
    for &(a, b) in parts {
        let (xb, yb) = (x.slice(s![a..b, ..]), ys.slice(s![a..b, ..]));
        let wb = || w.map(|w| w.slice(s![a..b]));
        let got = many.absorb(a, xb, yb, wb()).expect("block");
        assert_eq!(got.len(), k);
        for (t, (d, one)) in got.into_iter().zip(&mut ones).enumerate() {
            assert_eq!(d.target, t);
            let single = one.absorb(a, xb, yb, wb()).expect("one-target block");
            assert_eq!(d, single, "target {t}, block from row {a}");
            per_target[t].push(d);
        }
    }
    assert_eq!(many.rows_seen(), x.nrows());
    for (t, one) in ones.iter().enumerate() {
        for kind in [
            CovarianceKind::Classical,
            CovarianceKind::Hc0,
            CovarianceKind::Hc1,
            CovarianceKind::Hc2,
            CovarianceKind::Hc3,
        ] {
            let options = InferenceOptions::new().with_covariance(kind);
            assert_eq!(
                many.inference(t, options).expect("many"),
                one.inference(options).expect("one"),
                "target {t}, {}",
                kind.name()
            );
        }
    }
    (many, per_target)
}

/// The pass over every target equals one one-target pass per target (bit
/// for bit) and, per target, the in-memory diagnostics and HC0-HC3
/// inference of that target's problem; both kinds of state, with and
/// without weights and intercept.
#[test]
fn many_targets_pass_equals_one_target_passes_and_the_in_memory_diagnostics() {
    for kind in [Kind::Triangle, Kind::Cross] {
        for (seed, n, p, weighted, intercept) in [
            (21, 110, 3, true, true),
            (22, 70, 2, false, true),
            (23, 60, 2, true, false),
        ] {
            // Cook's distances (squares of residuals) of the no-intercept
            // triangle pass keep 12.8 digits here.
            set_tolerance(if kind == Kind::Triangle { 3e-13 } else { 1e-12 });
            let (x, ys, w) = data_many(seed, n, p, 3, weighted);
            let state = AnyState::build(
                kind,
                &x,
                &ys,
                w.as_ref(),
                intercept,
                &blocks(n, &[29, 3, 40]),
            );
            let (many, per_target) =
                run_many(&state, &x, &ys, w.as_ref(), &blocks(n, &[11, 50, 2]));
            for (t, got) in per_target.iter().enumerate() {
                let y = ys.column(t).to_owned();
                check_blocks(&x, &y, w.as_ref(), intercept, got);
                check_inference(&x, &y, w.as_ref(), intercept, |o| many.inference(t, o));
            }
            let beyond = many.inference(3, InferenceOptions::new()).unwrap_err();
            assert!(matches!(
                beyond,
                Error::InvalidParameter { name: "target", .. }
            ));
            println!(
                "{kind:?} pass over 3 targets, seed {seed}: {:.2} digits",
                fewest_digits()
            );
        }
    }
}

/// Exact identity for the new passes: the leave-one-out residual of each
/// target is the target minus the prediction of an actual refit without
/// the row (row 1 has weight zero: its residual).
#[test]
fn leave_one_out_of_every_target_equals_refits_without_the_row() {
    let (x, ys, w) = data_many(31, 45, 2, 3, true);
    let w = w.expect("weights");
    let n = x.nrows();
    for kind in [Kind::Triangle, Kind::Cross] {
        let state = AnyState::build(kind, &x, &ys, Some(&w), true, &blocks(n, &[8]));
        let (_, per_target) = run_many(&state, &x, &ys, Some(&w), &blocks(n, &[14]));
        for (t, got) in per_target.iter().enumerate() {
            let loo = joined(got, |d| d.leave_one_out.clone());
            for i in [0, 1, 7, 19, 33, 44] {
                let keep: Vec<usize> = (0..n).filter(|&r| r != i).collect();
                let xs = x.select(Axis(0), &keep);
                let yt = ys.column(t).select(Axis(0), &keep);
                let ws = w.select(Axis(0), &keep);
                let p = problem(&xs, &yt, Some(&ws), true);
                let model = Qr::new().fit(&p).expect("refit").model;
                let prediction = model.predict(x.slice(s![i..i + 1, ..])).expect("predict")[0];
                let expected = ys[(i, t)] - prediction;
                let got = loo[i].expect("defined");
                assert!(
                    (got - expected).abs() <= 1e-10 * expected.abs().max(1.0),
                    "{kind:?}, target {t}, row {i}: {got:e} against the refit's {expected:e}"
                );
            }
        }
    }
}

/// Wrong row numbering, rows past the end, too few rows or another count
/// of positive weights: [`Error::PassMismatch`] from the cross-product
/// pass and the pass over every target, and the pass is unchanged.
#[test]
fn new_passes_refuse_rows_out_of_order_missing_or_extra() {
    let (x, ys, w) = data_many(32, 30, 2, 2, true);
    let w = w.expect("weights");
    let ws = |a: usize, b: usize| Some(w.slice(s![a..b]));
    for kind in [Kind::Triangle, Kind::Cross] {
        let state = AnyState::build(kind, &x, &ys, Some(&w), true, &blocks(30, &[10]));
        let mut one = state.one(1).expect("one-target pass");
        let mut many = state.many().expect("pass over every target");
        let block = |a: usize, b: usize| (x.slice(s![a..b, ..]), ys.slice(s![a..b, ..]));
        let wrong = Error::PassMismatch {
            what: "first row of the block",
            expected: 0,
            found: 3,
        };
        let (xb, yb) = block(3, 10);
        assert_eq!(one.absorb(3, xb, yb, ws(3, 10)).unwrap_err(), wrong);
        assert_eq!(many.absorb(3, xb, yb, ws(3, 10)).unwrap_err(), wrong);
        assert_eq!((one.rows_seen(), many.rows_seen()), (0, 0));
        let (xb, yb) = block(0, 20);
        one.absorb(0, xb, yb, ws(0, 20)).expect("first block");
        many.absorb(0, xb, yb, ws(0, 20)).expect("first block");
        // A block numbered as if it came first again.
        let (xb, yb) = block(20, 30);
        let again = Error::PassMismatch {
            what: "first row of the block",
            expected: 20,
            found: 0,
        };
        assert_eq!(many.absorb(0, xb, yb, ws(20, 30)).unwrap_err(), again);
        assert_eq!(one.absorb(0, xb, yb, ws(20, 30)).unwrap_err(), again);
        let early = Error::PassMismatch {
            what: "rows",
            expected: 30,
            found: 20,
        };
        assert_eq!(one.inference(InferenceOptions::new()).unwrap_err(), early);
        assert_eq!(
            many.inference(0, InferenceOptions::new()).unwrap_err(),
            early
        );
        // Thirteen rows where ten are left.
        let xl =
            ndarray::concatenate(Axis(0), &[x.slice(s![20.., ..]), x.slice(s![..3, ..])]).unwrap();
        let yl = ndarray::concatenate(Axis(0), &[ys.slice(s![20.., ..]), ys.slice(s![..3, ..])])
            .unwrap();
        let past = Error::PassMismatch {
            what: "rows",
            expected: 30,
            found: 33,
        };
        assert_eq!(
            one.absorb(20, xl.view(), yl.view(), None).unwrap_err(),
            past
        );
        assert_eq!(
            many.absorb(20, xl.view(), yl.view(), None).unwrap_err(),
            past
        );
        assert_eq!((one.rows_seen(), many.rows_seen()), (20, 20));
        // The last block with one positive weight set to zero.
        let mut w2 = w.slice(s![20..]).to_owned();
        let zero = w2.iter().position(|&v| v > 0.0).expect("a positive weight");
        w2[zero] = 0.0;
        let (xb, yb) = block(20, 30);
        one.absorb(20, xb, yb, Some(w2.view())).expect("last block");
        many.absorb(20, xb, yb, Some(w2.view()))
            .expect("last block");
        for err in [
            one.inference(InferenceOptions::new()).unwrap_err(),
            many.inference(1, InferenceOptions::new()).unwrap_err(),
        ] {
            match err {
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
    }
}

/// A target beyond the state's, and too few rows for a residual degree of
/// freedom, are refused when a pass starts.
#[test]
fn new_passes_refuse_bad_targets_and_no_residual_freedom() {
    let (x, ys, _) = data_many(33, 20, 2, 2, false);
    for kind in [Kind::Triangle, Kind::Cross] {
        let state = AnyState::build(kind, &x, &ys, None, true, &blocks(20, &[20]));
        assert!(matches!(
            state.one(2).unwrap_err(),
            Error::InvalidParameter { name: "target", .. }
        ));
        let small = AnyState::build(kind, &x, &ys, None, true, &[(0, 3)]);
        for err in [small.one(0).unwrap_err(), small.many().unwrap_err()] {
            assert!(matches!(err, Error::InferenceRefused { .. }), "{err:?}");
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(32)))]

    /// Reference: the in-memory diagnostics and HC0-HC3 inference of each
    /// target's problem, and the one-target passes (bit for bit). Random
    /// splits of the rows into blocks for the state and, independently,
    /// for the pass; either state, 1 to 3 targets, weights and intercept
    /// on or off.
    #[test]
    fn random_block_splits_give_the_in_memory_diagnostics(
        seed in 0u64..1_000_000,
        n in 20usize..90,
        p in 1usize..4,
        k in 1usize..4,
        weighted in any::<bool>(),
        intercept in any::<bool>(),
        cross in any::<bool>(),
        state_sizes in prop::collection::vec(1usize..35, 1..5),
        pass_sizes in prop::collection::vec(1usize..35, 1..5),
    ) {
        let kind = if cross { Kind::Cross } else { Kind::Triangle };
        set_tolerance(if cross { 1e-11 } else { 1e-12 });
        let (x, ys, w) = data_many(seed, n, p, k, weighted);
        let state = AnyState::build(kind, &x, &ys, w.as_ref(), intercept, &blocks(n, &state_sizes));
        let (many, per_target) = run_many(&state, &x, &ys, w.as_ref(), &blocks(n, &pass_sizes));
        for (t, got) in per_target.iter().enumerate() {
            let y = ys.column(t).to_owned();
            check_blocks(&x, &y, w.as_ref(), intercept, got);
            check_inference(&x, &y, w.as_ref(), intercept, |o| many.inference(t, o));
        }
    }
}
