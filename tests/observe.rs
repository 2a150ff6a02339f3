//! Progress and cancellation through `Solver::fit_observed`, for every
//! solver: the passes report every block with a count of rows that grows
//! to the design's rows, a stop ends the fit within about one block per
//! thread, and observing changes no bit of any result.

mod common;

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;

use leastline::{
    Accelerated, Cholesky, Control, Criterion, Error, Fit, GradientDescent, Observer, Problem,
    Progress, Qr, Ridge, RidgeFactorization, RidgePath, Solver, Stage, Stochastic, Svd,
};
use ndarray::{Array1, Array2, ArrayView2, ShapeBuilder};
use proptest::prelude::*;

/// Every solver, with settings that end quickly on the problems here.
fn solvers() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(0.5)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Cholesky)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::AugmentedQr)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Svd)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Dual)),
        Box::new(Ridge::new(0.0)),
        Box::new(GradientDescent::new().with_max_iterations(40)),
        Box::new(Accelerated::new().with_max_iterations(40)),
        Box::new(Stochastic::new().with_max_iterations(3).with_seed(7)),
    ]
}

/// Whether a solver iterates (a stop while iterating is not an error).
fn iterative(solver: &dyn Solver) -> bool {
    matches!(
        solver.name(),
        "gradient-descent" | "accelerated" | "stochastic"
    )
}

/// Records every event; stops at the event `stop_at` says.
struct Recorder<F: Fn(&Progress, usize) -> bool + Sync> {
    events: Mutex<Vec<Progress>>,
    stop_at: F,
    stopped: AtomicBool,
    /// Events seen after the first stop was asked for.
    after_stop: AtomicUsize,
}

impl<F: Fn(&Progress, usize) -> bool + Sync> Recorder<F> {
    fn new(stop_at: F) -> Self {
        Recorder {
            events: Mutex::new(Vec::new()),
            stop_at,
            stopped: AtomicBool::new(false),
            after_stop: AtomicUsize::new(0),
        }
    }

    fn events(&self) -> Vec<Progress> {
        self.events.lock().expect("no observer panicked").clone()
    }
}

impl<F: Fn(&Progress, usize) -> bool + Sync> Observer for Recorder<F> {
    fn observe(&self, progress: &Progress) -> Control {
        let mut events = self.events.lock().expect("no observer panicked");
        events.push(*progress);
        if self.stopped.load(Ordering::SeqCst) {
            self.after_stop.fetch_add(1, Ordering::SeqCst);
            return Control::Stop;
        }
        if (self.stop_at)(progress, events.len()) {
            self.stopped.store(true, Ordering::SeqCst);
            return Control::Stop;
        }
        Control::Continue
    }
}

fn never(_: &Progress, _: usize) -> bool {
    false
}

/// Checks the row events: numbered passes 1, 2, ... in order; within each
/// the rows done strictly increase and end at the design's rows; and
/// iteration events carry no rows. Returns the number of row events of
/// each pass.
fn check_passes(name: &str, events: &[Progress], rows: usize) -> Vec<usize> {
    let mut per_pass: Vec<usize> = Vec::new();
    let mut last_done = 0;
    for e in events {
        match (e.rows_done, e.rows_total) {
            (Some(done), Some(total)) => {
                assert_eq!(total, rows, "{name}: total of a pass");
                assert!(e.pass >= 1, "{name}: pass number");
                if e.pass == per_pass.len() + 1 {
                    // A new pass: the previous one must have ended.
                    if let Some(&_n) = per_pass.last() {
                        assert_eq!(last_done, rows, "{name}: pass {} ended early", e.pass - 1);
                    }
                    per_pass.push(0);
                    last_done = 0;
                }
                assert_eq!(e.pass, per_pass.len(), "{name}: passes in order");
                assert!(
                    done > last_done && done <= total,
                    "{name}: pass {} went from {last_done} to {done} rows",
                    e.pass
                );
                last_done = done;
                if let Some(n) = per_pass.last_mut() {
                    *n += 1;
                }
                assert!(e.loss.is_none() && e.gradient_norm.is_none(), "{name}");
            }
            (None, None) => {
                assert_eq!(e.stage, Stage::Iteration, "{name}: rows missing");
                assert!(e.iteration.is_some() && e.loss.is_some(), "{name}");
            }
            other => panic!("{name}: half a row count {other:?}"),
        }
    }
    if !per_pass.is_empty() {
        assert_eq!(last_done, rows, "{name}: the last pass ended early");
    }
    per_pass
}

/// A tall, well-conditioned design in row-major order (pseudo-random
/// values from a fixed integer hash).
fn tall(n: usize, p: usize, column_major: bool) -> (Array2<f64>, Array1<f64>) {
    let value = |i: usize, j: usize| {
        let h = (i as u64 + 1)
            .wrapping_mul(0x9e37_79b9_7f4a_7c15)
            .wrapping_add((j as u64 + 1).wrapping_mul(0xc2b2_ae3d_27d4_eb4f));
        ((h >> 11) % 10_007) as f64 / 10_007.0 - 0.5
    };
    let x = if column_major {
        Array2::from_shape_fn((n, p).f(), |(i, j)| value(i, j))
    } else {
        Array2::from_shape_fn((n, p), |(i, j)| value(i, j))
    };
    let y = Array1::from_shape_fn(n, |i| {
        (0..p).map(|j| (j as f64 + 1.0) * x[(i, j)]).sum::<f64>() + 0.1 * value(i, p)
    });
    (x, y)
}

#[test]
fn every_pass_reports_every_block_up_to_the_rows() {
    for column_major in [false, true] {
        let (x, y) = tall(20_000, 4, column_major);
        let problem = Problem::new(x.view(), y.view()).expect("valid");
        for solver in solvers() {
            let name = solver.name().to_string();
            let rec = Recorder::new(never);
            let fit = solver.fit_observed(&problem, &rec);
            if name == "ridge" && matches!(fit, Err(Error::TooLarge { .. })) {
                // The dual method refuses tall designs (covered below).
                continue;
            }
            fit.unwrap_or_else(|e| panic!("{name}: {e}"));
            let events = rec.events();
            let passes = check_passes(&name, &events, problem.rows());
            assert!(!passes.is_empty(), "{name}: no pass reported");
            // At least 20,000 / 4,096 blocks in a pass that reads rows by blocks.
            assert!(
                passes.iter().any(|&b| b >= 4),
                "{name}: blocks per pass {passes:?}"
            );
            if iterative(solver.as_ref()) {
                let iterations: Vec<usize> = events.iter().filter_map(|e| e.iteration).collect();
                let expected: Vec<usize> = (0..iterations.len()).collect();
                assert_eq!(iterations, expected, "{name}: iterations in order from 0");
                // Setup first, then iterations only.
                let first = events
                    .iter()
                    .position(|e| e.stage == Stage::Iteration)
                    .expect("iterations reported");
                assert!(events[..first].iter().all(|e| e.stage == Stage::Setup));
                assert!(events[first..].iter().all(|e| e.stage == Stage::Iteration));
            }
        }
    }
}

#[test]
fn the_dual_ridge_and_the_path_report_their_passes() {
    // Wide: fewer rows than columns, the row-Gram route.
    let (x, y) = tall(40, 90, false);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    for standardize in [false, true] {
        let rec = Recorder::new(never);
        Ridge::new(0.5)
            .with_standardize(standardize)
            .with_factorization(RidgeFactorization::Dual)
            .fit_observed(&problem, &rec)
            .expect("dual fit");
        let passes = check_passes("dual", &rec.events(), 40);
        // The column norms (standardised), the row Gram, Z^T alpha, the
        // residual pass.
        assert_eq!(passes.len(), 3 + usize::from(standardize), "{passes:?}");
        let rec = Recorder::new(never);
        let path = RidgePath::new_observed(&problem, standardize, &rec).expect("path");
        check_passes("path", &rec.events(), 40);
        assert_eq!(
            path.fit(0.5).expect("fit"),
            RidgePath::new(&problem, standardize)
                .expect("path")
                .fit(0.5)
                .expect("fit")
        );
    }
}

#[test]
fn the_leave_one_out_curve_reports_its_pass_and_stops() {
    let (x, y) = tall(30_000, 4, false);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let path = RidgePath::new(&problem, true).expect("path");
    let grid = path.default_grid(12).expect("grid");
    let rec = Recorder::new(never);
    let watched = path
        .curve_observed(&grid, Criterion::LeaveOneOut, &rec)
        .expect("curve");
    let events = rec.events();
    let passes = check_passes("curve", &events, problem.rows());
    assert_eq!(passes.len(), 1);
    assert!(passes[0] >= 30_000 / 4_096, "{passes:?}");
    assert!(events.iter().all(|e| e.stage == Stage::Residuals));
    let plain = path.curve(&grid, Criterion::LeaveOneOut).expect("curve");
    let loo_bits = |c: &leastline::PenaltyCurve| -> Vec<u64> {
        c.loo.iter().flatten().map(|v| v.to_bits()).collect()
    };
    assert_eq!(loo_bits(&watched), loo_bits(&plain));
    assert_eq!(watched, plain);
    let rec = Recorder::new(|_: &Progress, _| true);
    match path.curve_observed(&grid, Criterion::LeaveOneOut, &rec) {
        Err(Error::Stopped { stage, .. }) => assert_eq!(stage, Stage::Residuals),
        other => panic!("expected a stop, got {other:?}"),
    }
}

/// The bits of a fit's numbers.
fn bits(fit: &Fit) -> Vec<u64> {
    let mut out: Vec<u64> = fit
        .model
        .coefficients()
        .iter()
        .map(|b| b.to_bits())
        .collect();
    out.push(fit.model.intercept().to_bits());
    out.push(fit.report.residual_sum_of_squares.to_bits());
    out
}

#[test]
fn observing_changes_no_bit() {
    let (x, y) = tall(30_000, 5, false);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    for solver in solvers() {
        let name = solver.name().to_string();
        let plain = solver.fit(&problem);
        let count = AtomicUsize::new(0);
        let counting = |_: &Progress| {
            count.fetch_add(1, Ordering::Relaxed);
            Control::Continue
        };
        let watched = solver.fit_observed(&problem, &counting);
        match (plain, watched) {
            (Ok(a), Ok(b)) => {
                assert_eq!(bits(&a), bits(&b), "{name}");
                assert_eq!(a, b, "{name}");
                assert!(count.load(Ordering::Relaxed) > 1, "{name}");
            }
            (Err(a), Err(b)) => assert_eq!(a, b, "{name}"),
            (a, b) => panic!("{name}: {a:?} vs {b:?}"),
        }
    }
}

#[test]
fn a_stop_at_the_first_block_ends_the_fit_within_a_block_per_thread() {
    let (x, y) = tall(200_000, 4, false);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let threads = rayon::current_num_threads();
    for solver in solvers() {
        let name = solver.name().to_string();
        let rec = Recorder::new(|_: &Progress, _| true);
        let result = solver.fit_observed(&problem, &rec);
        let events = rec.events();
        match result {
            Err(Error::Stopped {
                stage,
                rows_done,
                rows_total,
            }) => {
                let expected = if iterative(solver.as_ref()) {
                    Stage::Setup
                } else {
                    Stage::Factor
                };
                assert_eq!(stage, expected, "{name}");
                assert_eq!(rows_total, problem.rows(), "{name}");
                assert_eq!(Some(rows_done), events[0].rows_done, "{name}");
                assert!(rows_done < rows_total, "{name}");
            }
            Err(e) if name == "ridge" && matches!(e, Error::TooLarge { .. }) => continue,
            other => panic!("{name}: expected a stop, got {other:?}"),
        }
        // No new pass began, and each other worker finished at most the
        // block it had started.
        assert!(
            events.iter().all(|e| e.pass == 1),
            "{name}: a pass began after the stop"
        );
        assert!(
            rec.after_stop.load(Ordering::SeqCst) < threads,
            "{name}: {} blocks after the stop with {threads} threads",
            rec.after_stop.load(Ordering::SeqCst)
        );
    }
}

#[test]
fn a_stop_in_a_later_stage_names_that_stage() {
    let (x, y) = tall(50_000, 3, true);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let cases: Vec<(Box<dyn Solver>, Stage)> = vec![
        (Box::new(Cholesky::new()), Stage::Residuals),
        (Box::new(Ridge::new(2.0)), Stage::Residuals),
        (Box::new(Qr::refined()), Stage::Refinement),
    ];
    for (solver, stage) in cases {
        let rec = Recorder::new(move |p: &Progress, _| p.stage == stage);
        match solver.fit_observed(&problem, &rec) {
            Err(Error::Stopped { stage: at, .. }) => assert_eq!(at, stage, "{}", solver.name()),
            other => panic!("{}: {other:?}", solver.name()),
        }
    }
    // Plain QR and the SVD of a tall design read the rows once: their
    // residual sums of squares come from the triangle, so no later pass is
    // begun.
    let once: Vec<Box<dyn Solver>> = vec![Box::new(Qr::new()), Box::new(Svd::new())];
    for solver in once {
        let rec = Recorder::new(|_: &Progress, _| false);
        solver.fit_observed(&problem, &rec).expect("unstopped");
        let events = rec.events();
        assert!(!events.is_empty(), "{}", solver.name());
        assert!(
            events.iter().all(|e| e.stage == Stage::Factor),
            "{}: {events:?}",
            solver.name()
        );
    }
}

#[test]
fn gradient_solvers_stopped_while_iterating_keep_their_coefficients() {
    let (x, y) = tall(5_000, 3, false);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    for solver in solvers().into_iter().filter(|s| iterative(s.as_ref())) {
        let name = solver.name().to_string();
        let rec = Recorder::new(|p: &Progress, _| p.iteration == Some(2));
        let fit = solver
            .fit_observed(&problem, &rec)
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let report = fit.report.iterations.as_ref().expect("iterative report");
        assert!(report.stopped_by_observer, "{name}");
        assert_eq!(report.iterations, 2, "{name}");
        assert!(fit.model.coefficients().iter().all(|b| b.is_finite()));
        let last = rec.events().last().copied().expect("events");
        assert_eq!(last.iteration, Some(2), "{name}");
        assert_eq!(last.loss, Some(report.final_loss), "{name}");
    }
}

/// A sliding-window design: row `i` is `d[i..i + p]` of one vector, so
/// that `n x p` rows take `n + p` numbers of memory (a view with row stride
/// 1 and column stride 1).
fn sliding(d: &[f64], n: usize, p: usize) -> ArrayView2<'_, f64> {
    ArrayView2::from_shape((n, p).strides((1, 1)), &d[..n + p - 1]).expect("window view")
}

#[test]
fn two_million_rows_are_reported_block_by_block() {
    let (n, p) = (2_000_000, 5);
    let d: Vec<f64> = (0..n + p)
        .map(|i| {
            let h = (i as u64 + 1).wrapping_mul(0x9e37_79b9_7f4a_7c15);
            ((h >> 11) % 100_003) as f64 / 100_003.0
        })
        .collect();
    let x = sliding(&d, n, p);
    let y = Array1::from_shape_fn(n, |i| {
        (0..p).map(|j| x[(i, j)] * (j as f64 - 2.0)).sum::<f64>() + 0.01 * d[(i * 7) % n]
    });
    let problem = Problem::new(x, y.view()).expect("valid");
    let short: Vec<Box<dyn Solver>> = vec![
        Box::new(Qr::new()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(1.0)),
        Box::new(GradientDescent::new().with_max_iterations(2)),
    ];
    for solver in short {
        let name = solver.name().to_string();
        let rec = Recorder::new(never);
        let fit = solver
            .fit_observed(&problem, &rec)
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let passes = check_passes(&name, &rec.events(), n);
        // 2,000,000 rows are hundreds of blocks of at most 4,096 rows.
        assert!(
            passes.iter().all(|&blocks| blocks >= 2_000_000 / 4_096),
            "{name}: {passes:?}"
        );
        assert_eq!(fit, solver.fit(&problem).expect("plain fit"), "{name}");
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(24)))]

    /// Stopping at any event of any closed-form fit gives `Stopped` with
    /// the stage and rows of that event's pass (or, if the event was the
    /// pass's last block, of the same pass at its end); continuing gives
    /// the unobserved fit.
    #[test]
    fn stopping_anywhere_is_a_typed_stop(rows in 300usize..12_000, at in 1usize..40, which in 0usize..5) {
        let (x, y) = tall(rows, 3, which % 2 == 0);
        let problem = Problem::new(x.view(), y.view()).expect("valid");
        let solver: Box<dyn Solver> = match which {
            0 => Box::new(Qr::new()),
            1 => Box::new(Cholesky::new()),
            2 => Box::new(Svd::new()),
            3 => Box::new(Ridge::new(0.3)),
            _ => Box::new(Qr::refined()),
        };
        let rec = Recorder::new(move |_: &Progress, k| k == at);
        let result = solver.fit_observed(&problem, &rec);
        let events = rec.events();
        if events.len() < at {
            prop_assert_eq!(result.expect("fit"), solver.fit(&problem).expect("fit"));
        } else {
            let e = events[at - 1];
            match result {
                Err(Error::Stopped { stage, rows_done, rows_total }) => {
                    prop_assert_eq!(stage, e.stage);
                    prop_assert_eq!(Some(rows_done), e.rows_done);
                    prop_assert_eq!(Some(rows_total), e.rows_total);
                }
                other => prop_assert!(false, "expected a stop, got {:?}", other),
            }
        }
    }
}
