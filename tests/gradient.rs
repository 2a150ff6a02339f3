//! Tests of the gradient solvers (`GradientDescent`, `Accelerated`,
//! `Stochastic`).
//!
//! References, each independent of the code under test:
//! - the penalised normal equations `(Xc^T W Xc + lambda I) b = Xc^T W yc`
//!   (Xc, yc centered by weighted means when the intercept is on) formed in
//!   plain loops here and solved by nalgebra's Cholesky (an independent
//!   crate); with `lambda = 0` that is weighted OLS;
//! - the crate's closed-form `Qr` solver for OLS, as a second reference;
//! - NIST StRD certified values for Norris, Pontius, NoInt1, NoInt2 and
//!   Longley (data/nist, from the NIST Statistical Reference Datasets for
//!   linear least squares);
//! - exact identities, named where used.
//!
//! All randomness is seeded.

mod common;

use common::nist;
use leastline::{
    Accelerated, Control, Error, Fit, GradientDescent, LinearModel, Problem, Qr, Solver, Stochastic,
};
use nalgebra::{DMatrix, DVector};
use ndarray::{s, Array1, Array2, ShapeBuilder};
use proptest::prelude::*;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A generated problem with its spreads (for comparisons in natural units).
struct Case {
    x: Array2<f64>,
    y: Array1<f64>,
    w: Option<Array1<f64>>,
    intercept: bool,
    x_spread: Vec<f64>,
    y_spread: f64,
}

impl Case {
    fn problem(&self) -> Problem<'_> {
        let mut b = Problem::builder(self.x.view(), self.y.view()).with_intercept(self.intercept);
        if let Some(w) = &self.w {
            b = b.with_weights(w.view());
        }
        b.build().expect("valid generated problem")
    }
}

/// Well-conditioned random problem: independent uniform columns with
/// assorted units and offsets, `y = b0 + X b + noise`.
fn generate(n: usize, p: usize, seed: u64, weighted: bool, intercept: bool, noise: f64) -> Case {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let scales: Vec<f64> = (0..p)
        .map(|_| 10f64.powf(rng.random_range(-2.0..3.0)))
        .collect();
    // Large offsets only beside an intercept (centering removes them);
    // without one they would make the design ill-conditioned.
    let offsets: Vec<f64> = scales
        .iter()
        .map(|s| {
            let o = if intercept {
                rng.random_range(-50.0..50.0)
            } else {
                rng.random_range(-0.5..0.5)
            };
            s * o
        })
        .collect();
    let x = Array2::from_shape_fn((n, p), |(_, j)| {
        offsets[j] + scales[j] * rng.random_range(-1.0..1.0)
    });
    // Each column moves y by 0.5 to 3 units over its range; the noise is
    // `noise` times the total of those.
    let effects: Vec<f64> = (0..p)
        .map(|_| rng.random_range(0.5..3.0) * if rng.random::<bool>() { 1.0 } else { -1.0 })
        .collect();
    let beta: Vec<f64> = (0..p).map(|j| effects[j] / scales[j]).collect();
    let amplitude = noise * effects.iter().map(|e| e.abs()).sum::<f64>().max(1.0);
    let b0 = if intercept {
        rng.random_range(-10.0..10.0)
    } else {
        0.0
    };
    let y = Array1::from_shape_fn(n, |i| {
        b0 + (0..p).map(|j| x[[i, j]] * beta[j]).sum::<f64>()
            + amplitude * rng.random_range(-1.0..1.0)
    });
    let w = weighted.then(|| {
        Array1::from_shape_fn(n, |i| {
            if i % 11 == 5 {
                0.0
            } else {
                rng.random_range(0.2..3.0)
            }
        })
    });
    let x_spread = (0..p)
        .map(|j| spread(x.column(j).iter().copied()))
        .collect();
    let y_spread = spread(y.iter().copied()).max(1e-300);
    Case {
        x,
        y,
        w,
        intercept,
        x_spread,
        y_spread,
    }
}

fn spread(v: impl Iterator<Item = f64>) -> f64 {
    let (lo, hi) = v.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
        (a.min(x), b.max(x))
    });
    hi - lo
}

/// Solves the penalised weighted normal equations with nalgebra.
fn reference(case: &Case, lambda: f64) -> (Vec<f64>, f64) {
    let (n, p) = case.x.dim();
    let w = |i: usize| case.w.as_ref().map_or(1.0, |w| w[i]);
    let total: f64 = (0..n).map(w).sum();
    let mean = |f: &dyn Fn(usize) -> f64| -> f64 {
        if case.intercept {
            (0..n).map(|i| w(i) * f(i)).sum::<f64>() / total
        } else {
            0.0
        }
    };
    let mx: Vec<f64> = (0..p).map(|j| mean(&|i| case.x[[i, j]])).collect();
    let my = mean(&|i| case.y[i]);
    let mut a = DMatrix::<f64>::zeros(p, p);
    let mut rhs = DVector::<f64>::zeros(p);
    for i in 0..n {
        let wi = w(i);
        for j in 0..p {
            let xj = case.x[[i, j]] - mx[j];
            rhs[j] += wi * xj * (case.y[i] - my);
            for k in 0..p {
                a[(j, k)] += wi * xj * (case.x[[i, k]] - mx[k]);
            }
        }
    }
    for j in 0..p {
        a[(j, j)] += lambda;
    }
    let b = a
        .cholesky()
        .expect("positive definite reference system")
        .solve(&rhs);
    let b: Vec<f64> = b.iter().copied().collect();
    let b0 = my - mx.iter().zip(&b).map(|(m, c)| m * c).sum::<f64>();
    (b, b0)
}

/// Largest error in natural units: slope errors times the column spread
/// over the target spread, and fitted-value errors over the target spread.
fn error(case: &Case, fit: &LinearModel, b: &[f64], b0: f64) -> f64 {
    let mut worst = 0.0_f64;
    for (j, bj) in b.iter().enumerate() {
        let e = (fit.coefficients()[j] - bj).abs() * case.x_spread[j] / case.y_spread;
        worst = worst.max(e);
    }
    for i in 0..case.x.nrows() {
        let reference: f64 = b0 + (0..b.len()).map(|j| case.x[[i, j]] * b[j]).sum::<f64>();
        let got = fit.predict_row(case.x.row(i)).expect("prediction");
        worst = worst.max((got - reference).abs() / case.y_spread);
    }
    worst
}

/// A penalty that matters: a fraction of the mean diagonal of `Xc^T W Xc`.
fn penalty_for(case: &Case, fraction: f64) -> f64 {
    let (n, p) = case.x.dim();
    let w = |i: usize| case.w.as_ref().map_or(1.0, |w| w[i]);
    let total: f64 = (0..n).map(w).sum();
    let mut diag = 0.0;
    for j in 0..p {
        let m = if case.intercept {
            (0..n).map(|i| w(i) * case.x[[i, j]]).sum::<f64>() / total
        } else {
            0.0
        };
        diag += (0..n)
            .map(|i| w(i) * (case.x[[i, j]] - m).powi(2))
            .sum::<f64>();
    }
    fraction * diag / p as f64
}

fn iterations(fit: &Fit) -> &leastline::IterationReport {
    fit.report.iterations.as_ref().expect("iterative report")
}

fn gd(tolerance: f64, penalty: f64) -> GradientDescent {
    GradientDescent::new()
        .with_tolerance(tolerance)
        .with_penalty(penalty)
        .with_max_iterations(100_000)
        .with_history_stride(0)
}

fn acc(tolerance: f64, penalty: f64) -> Accelerated {
    Accelerated::new()
        .with_tolerance(tolerance)
        .with_penalty(penalty)
        .with_max_iterations(100_000)
        .with_history_stride(0)
}

fn sgd(seed: u64, penalty: f64) -> Stochastic {
    Stochastic::new()
        .with_seed(seed)
        .with_penalty(penalty)
        .with_max_iterations(400)
        .with_batch_size(16)
        .with_tolerance(1e-9)
        .with_history_stride(0)
}

/// Plain decaying steps with averaging (no variance reduction).
fn plain_sgd(seed: u64, penalty: f64) -> Stochastic {
    sgd(seed, penalty).with_variance_reduction(false)
}

/// Proptest settings: the seed from `PROPTEST_RNG_SEED` (CI fixes it), 32
/// cases unless `PROPTEST_CASES` asks for more.
fn config() -> ProptestConfig {
    ProptestConfig {
        failure_persistence: None,
        ..ProptestConfig::with_cases(common::cases(32))
    }
}

proptest! {
    #![proptest_config(config())]

    /// Full-batch and accelerated descent reach the OLS and ridge solutions.
    #[test]
    fn full_batch_methods_reach_ols_and_ridge(
        n in 30usize..150,
        p in 1usize..6,
        seed in 0u64..1_000_000,
        weighted in any::<bool>(),
        intercept in any::<bool>(),
        fraction in prop_oneof![Just(0.01), Just(1.0)],
    ) {
        let case = generate(n, p, seed, weighted, intercept, 0.3);
        let problem = case.problem();
        let qr = Qr::new().fit(&problem).expect("qr");
        let (b, b0) = reference(&case, 0.0);
        prop_assert!(error(&case, &qr.model, &b, b0) < 1e-9, "references disagree");
        let lambda = penalty_for(&case, fraction);
        let (rb, rb0) = reference(&case, lambda);
        for (name, fit, fit_ridge) in [
            ("gd", gd(1e-11, 0.0).fit(&problem), gd(1e-11, lambda).fit(&problem)),
            ("acc", acc(1e-11, 0.0).fit(&problem), acc(1e-11, lambda).fit(&problem)),
        ] {
            let fit = fit.expect("ols fit");
            prop_assert!(iterations(&fit).converged, "{name} ols not converged");
            let e = error(&case, &fit.model, &b, b0);
            prop_assert!(e < 1e-8, "{name} ols error {e:e}");
            let fit_ridge = fit_ridge.expect("ridge fit");
            prop_assert!(iterations(&fit_ridge).converged, "{name} ridge not converged");
            prop_assert_eq!(fit_ridge.report.penalty, lambda);
            let e = error(&case, &fit_ridge.model, &rb, rb0);
            prop_assert!(e < 1e-8, "{name} ridge error {e:e}");
            // The penalty changes the answer (so the check above has teeth).
            prop_assert!(error(&case, &fit_ridge.model, &b, b0) > 1e-6);
        }
    }

    /// Variance-reduced mini-batch steps (the default) converge like a
    /// full-batch method: the report says converged at a relative gradient
    /// of 1e-9 and the solutions agree with the normal equations to the
    /// digits that tolerance implies. Plain decaying steps reach them only
    /// to a statistical tolerance (their gradient noise decays only as fast
    /// as their step; errors are in units of the target's range, noise 5%
    /// of the signal).
    #[test]
    fn stochastic_reaches_ols_and_ridge(
        n in 60usize..200,
        p in 1usize..5,
        seed in 0u64..1_000_000,
        weighted in any::<bool>(),
        intercept in any::<bool>(),
    ) {
        let case = generate(n, p, seed, weighted, intercept, 0.05);
        let problem = case.problem();
        let (b, b0) = reference(&case, 0.0);
        let lambda = penalty_for(&case, 0.3);
        let (rb, rb0) = reference(&case, lambda);
        let fit = sgd(seed, 0.0).fit(&problem).expect("sgd");
        let report = iterations(&fit);
        prop_assert!(report.converged, "not converged: {:e}", report.gradient_norm);
        prop_assert!(report.gradient_norm <= 1e-9);
        let e = error(&case, &fit.model, &b, b0);
        prop_assert!(e < 1e-7, "sgd ols error {e:e}");
        let fit = sgd(seed, lambda).fit(&problem).expect("sgd ridge");
        prop_assert!(iterations(&fit).converged);
        let e = error(&case, &fit.model, &rb, rb0);
        prop_assert!(e < 1e-7, "sgd ridge error {e:e}");

        let fit = plain_sgd(seed, 0.0).fit(&problem).expect("plain sgd");
        let e = error(&case, &fit.model, &b, b0);
        prop_assert!(e < 3e-3, "plain sgd ols error {e:e}");
        let fit = plain_sgd(seed, lambda).fit(&problem).expect("plain sgd ridge");
        let e = error(&case, &fit.model, &rb, rb0);
        // At the ridge optimum the single-row gradients are larger (the
        // fit is biased on purpose), so the gradient noise is too.
        prop_assert!(e < 4e-2, "plain sgd ridge error {e:e}");
    }

    /// The default `Stochastic` (nothing set but the seed and batch size)
    /// reaches its default tolerance on random well-conditioned problems of
    /// assorted sizes from 20 rows (the epochs of the smaller ones are
    /// short and their default epoch limit larger: see
    /// `few_rows_get_more_epochs_by_default`), weighted or
    /// not, with or without an intercept, and
    /// its answer agrees with the normal equations to the digits that
    /// tolerance implies (a relative gradient of 1e-6 on a design whose
    /// standardised condition number is a few units).
    #[test]
    fn default_stochastic_converges_on_well_conditioned_problems(
        n in 20usize..4000,
        p in 1usize..9,
        seed in 0u64..1_000_000,
        weighted in any::<bool>(),
        intercept in any::<bool>(),
        batch_size in prop_oneof![Just(1usize), Just(7), Just(64), Just(500)],
    ) {
        let case = generate(n, p, seed, weighted, intercept, 0.2);
        let problem = case.problem();
        let (b, b0) = reference(&case, 0.0);
        let fit = Stochastic::new().with_seed(seed).with_batch_size(batch_size)
            .fit(&problem)
            .expect("fit");
        let report = iterations(&fit);
        prop_assert!(
            report.converged,
            "{n} x {p}, batch {batch_size}: {} epochs, gradient {:e}",
            report.iterations,
            report.gradient_norm
        );
        prop_assert!(report.gradient_norm <= 1e-6);
        let e = error(&case, &fit.model, &b, b0);
        prop_assert!(e < 1e-4, "error {e:e}");
    }
}

#[test]
fn nist_certified_values_to_eight_digits() {
    // Certified estimates from the NIST StRD linear least-squares pages
    // (data/nist/*.txt). The gradient methods run to a relative gradient
    // norm of 1e-13 and must match to at least 8 significant digits (log
    // relative error, nist::lre). Longley (higher difficulty, strongly
    // collinear columns) needs about 270,000 plain and 76,000 accelerated
    // iterations for it; Filip and the Wampler sets are out of reach of
    // gradient methods.
    for name in ["Norris", "Pontius", "NoInt1", "NoInt2", "Longley"] {
        let d = nist::load(name);
        let problem = Problem::builder(d.x.view(), d.y.view())
            .with_intercept(d.intercept)
            .build()
            .expect("nist problem");
        let solvers: [Box<dyn Solver>; 2] = [
            Box::new(
                GradientDescent::new()
                    .with_tolerance(1e-13)
                    .with_max_iterations(1_000_000),
            ),
            Box::new(
                Accelerated::new()
                    .with_tolerance(1e-13)
                    .with_max_iterations(1_000_000),
            ),
        ];
        for solver in &solvers {
            let fit = solver.fit(&problem).expect("fit");
            assert!(iterations(&fit).converged, "{name} {}", solver.name());
            for (j, (est, _)) in d.certified.coefficients.iter().enumerate() {
                let l = nist::lre(fit.model.coefficients()[j], *est);
                assert!(l >= 8.0, "{name} {} b{j}: lre {l}", solver.name());
            }
            if let Some((est, _)) = d.certified.intercept {
                let l = nist::lre(fit.model.intercept(), est);
                assert!(l >= 8.0, "{name} {} intercept: lre {l}", solver.name());
            }
        }
    }
}

#[test]
fn same_seed_same_bits_different_seed_same_optimum() {
    let case = generate(500, 4, 11, true, true, 0.05);
    let problem = case.problem();
    let (b, b0) = reference(&case, 0.0);
    let first = sgd(3, 0.0).fit(&problem).expect("fit");
    let again = sgd(3, 0.0).fit(&problem).expect("fit");
    assert_eq!(
        first.model, again.model,
        "same seed must give identical bits"
    );
    assert_eq!(
        iterations(&first).loss_history,
        iterations(&again).loss_history
    );
    let other = sgd(4, 0.0).fit(&problem).expect("fit");
    assert_ne!(first.model, other.model, "another seed takes another path");
    for fit in [&first, &other] {
        let e = error(&case, &fit.model, &b, b0);
        assert!(e < 2e-3, "error {e:e}");
    }
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    // Large enough for several row blocks and for parallel mini-batch chunks.
    let case = generate(20_000, 3, 5, true, true, 0.1);
    let problem = case.problem();
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("pool");
        pool.install(|| {
            let s = Stochastic::new()
                .with_batch_size(3000)
                .with_max_iterations(5)
                .with_seed(9);
            let plain = s.clone().with_variance_reduction(false);
            let g = GradientDescent::new().with_max_iterations(20);
            (
                s.fit(&problem).expect("sgd").model,
                plain.fit(&problem).expect("plain sgd").model,
                g.fit(&problem).expect("gd").model,
            )
        })
    };
    let one = run(1);
    assert_eq!(one, run(2));
    assert_eq!(one, run(3));
}

#[test]
fn default_stochastic_converges_on_100_000_rows_and_supports_inference() {
    // 100,000 x 10, well conditioned (independent uniform columns of
    // assorted units and offsets), weighted with some zero weights.
    let case = generate(100_000, 10, 2026, true, true, 0.3);
    let problem = case.problem();
    let run = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("pool")
            .install(|| Stochastic::new().fit(&problem).expect("fit"))
    };
    let fit = run(2);
    let report = iterations(&fit);
    assert!(
        report.converged,
        "{} epochs, gradient {:e}",
        report.iterations, report.gradient_norm
    );
    assert!(report.gradient_norm <= 1e-6);
    assert!(!report.stopped_by_observer);
    // Every epoch reads the design twice (batches, then the full gradient);
    // the set-up reads it a few more times (column norms, start, curvature).
    assert!(report.passes >= 2 * report.iterations);
    assert!(report.passes <= 2 * report.iterations + 40);
    // Same bits on one thread.
    assert_eq!(fit.model, run(1).model);
    // Agreement with Qr and with the normal equations solved by nalgebra:
    // a relative gradient of 1e-6 on a design of condition number a few
    // units leaves about 1e-6 of the target's range.
    let qr = Qr::new().fit(&problem).expect("qr");
    let (b, b0) = reference(&case, 0.0);
    assert!(
        error(&case, &qr.model, &b, b0) < 1e-10,
        "references disagree"
    );
    let e = error(
        &case,
        &fit.model,
        qr.model.coefficients().as_slice().expect("contiguous"),
        qr.model.intercept(),
    );
    assert!(e < 1e-5, "error against qr {e:e}");
    // A converged stochastic fit is close enough to the least-squares
    // solution for standard errors, and they are Qr's.
    let inference = fit.inference(&problem).expect("inference accepts the fit");
    let reference = qr.inference(&problem).expect("qr inference");
    for (a, r) in inference.std_errors().iter().zip(reference.std_errors()) {
        assert!(a.is_finite() && *a > 0.0);
        assert!((a - r).abs() <= 1e-6 * r, "{a} vs {r}");
    }
}

#[test]
fn step_above_the_stability_limit_is_a_divergence_error() {
    let case = generate(200, 3, 21, false, true, 0.1);
    let problem = case.problem();
    // The default step is 1 / L with L estimated from below, so ten times
    // it is at least 10 / L: five times the stability limit 2 / L.
    let default_step = iterations(&GradientDescent::new().fit(&problem).expect("fit")).step;
    let step = 10.0 * default_step;
    let results = [
        GradientDescent::new().with_step(step).fit(&problem),
        Accelerated::new().with_step(step).fit(&problem),
        Stochastic::new()
            .with_step(step)
            .with_batch_size(200)
            .with_decay(0.0)
            .fit(&problem),
    ];
    for result in results {
        match result {
            Err(Error::Diverged {
                iteration,
                step: s,
                loss,
            }) => {
                assert!((1..50).contains(&iteration), "iteration {iteration}");
                assert_eq!(s, step);
                // Past 10^4 times the intercept-only loss (1/2n) sum (y - ybar)^2,
                // or not finite.
                let ybar = case.y.mean().expect("rows");
                let f0 = case.y.iter().map(|v| (v - ybar).powi(2)).sum::<f64>() / 400.0;
                assert!(!loss.is_finite() || loss > 1e4 * f0, "loss {loss} vs {f0}");
            }
            other => panic!("expected divergence, got {other:?}"),
        }
    }
}

/// Runs a fit with the observer given.
type Runner<'a> = dyn Fn(&dyn leastline::Observer) -> Fit + 'a;

#[test]
fn default_step_never_raises_the_loss_and_observer_sees_every_value() {
    for seed in 0..6 {
        let case = generate(120, 5, 100 + seed, seed % 2 == 0, seed % 3 != 0, 0.5);
        let problem = case.problem();
        let solvers: [(&str, &Runner); 2] = [
            ("gd", &|obs| {
                gd(1e-12, 0.0).fit_observed(&problem, obs).expect("gd")
            }),
            ("acc", &|obs| {
                acc(1e-12, 0.0).fit_observed(&problem, obs).expect("acc")
            }),
        ];
        for (name, run) in solvers {
            // The iteration events only (the setup passes carry rows).
            let seen = std::sync::Mutex::new(Vec::new());
            let fit = run(&|p: &leastline::Progress| {
                if let (Some(k), Some(loss)) = (p.iteration, p.loss) {
                    seen.lock().expect("observer ran").push((k, loss));
                }
                Control::Continue
            });
            let seen = seen.into_inner().expect("observer ran");
            let report = iterations(&fit);
            assert_eq!(seen.len(), report.iterations + 1, "{name}");
            for (k, (it, _)) in seen.iter().enumerate() {
                assert_eq!(*it, k);
            }
            for pair in seen.windows(2) {
                // Rounding in a sum of n squares may move the loss by a
                // few units in the last place; nothing more is allowed.
                assert!(
                    pair[1].1 <= pair[0].1 * (1.0 + 1e-13),
                    "{name} seed {seed}: loss rose at iteration {}: {} -> {}",
                    pair[1].0,
                    pair[0].1,
                    pair[1].1
                );
            }
            assert_eq!(seen.last().map(|s| s.1), Some(report.final_loss));
        }
    }
}

#[test]
fn observer_stop_ends_the_fit_there_and_says_so() {
    let case = generate(150, 4, 8, true, true, 0.2);
    let problem = case.problem();
    let k = 3;
    let stop_at_k = |p: &leastline::Progress| {
        if p.iteration == Some(k) {
            Control::Stop
        } else {
            Control::Continue
        }
    };
    let fits = [
        GradientDescent::new()
            .with_tolerance(0.0)
            .with_fail_if_not_converged(true)
            .fit_observed(&problem, &stop_at_k),
        Accelerated::new()
            .with_tolerance(0.0)
            .with_fail_if_not_converged(true)
            .fit_observed(&problem, &stop_at_k),
        Stochastic::new()
            .with_tolerance(0.0)
            .with_fail_if_not_converged(true)
            .fit_observed(&problem, &stop_at_k),
    ];
    for fit in fits {
        // A stop asked for is not a convergence failure, even with the option.
        let fit = fit.expect("stopped fit");
        let report = iterations(&fit);
        assert!(report.stopped_by_observer);
        assert!(!report.converged);
        assert_eq!(report.iterations, k);
        assert_eq!(report.loss_history.len(), k + 1);
    }
    // Gradient descent's coefficients after the stop are those of a run
    // limited to k iterations.
    let stopped = GradientDescent::new()
        .fit_observed(&problem, &stop_at_k)
        .expect("fit");
    let limited = GradientDescent::new()
        .with_max_iterations(k)
        .fit(&problem)
        .expect("fit");
    assert_eq!(stopped.model, limited.model);
    assert!(!iterations(&limited).stopped_by_observer);
}

#[test]
fn iteration_limit_is_visible_and_optionally_an_error() {
    let case = generate(100, 4, 31, false, true, 0.5);
    let problem = case.problem();
    let solver = GradientDescent::new()
        .with_tolerance(1e-14)
        .with_max_iterations(2);
    let fit = solver.fit(&problem).expect("fit");
    let report = iterations(&fit);
    assert!(!report.converged && !report.stopped_by_observer);
    assert_eq!(report.iterations, 2);
    assert!(report.gradient_norm > 1e-14);
    let strict = solver.with_fail_if_not_converged(true);
    match strict.fit(&problem) {
        Err(Error::NotConverged {
            iterations,
            gradient_norm,
            tolerance,
        }) => {
            assert_eq!(iterations, 2);
            assert_eq!(gradient_norm, report.gradient_norm);
            assert_eq!(tolerance, 1e-14);
        }
        other => panic!("expected NotConverged, got {other:?}"),
    }
    let sgd = Stochastic::new()
        .with_max_iterations(1)
        .with_tolerance(1e-14)
        .with_fail_if_not_converged(true);
    assert!(matches!(
        sgd.fit(&problem),
        Err(Error::NotConverged { iterations: 1, .. })
    ));
    let acc = Accelerated::new()
        .with_max_iterations(1)
        .with_tolerance(1e-14)
        .with_fail_if_not_converged(true);
    assert!(matches!(
        acc.fit(&problem),
        Err(Error::NotConverged { iterations: 1, .. })
    ));
}

#[test]
fn warm_start_at_the_optimum_converges_at_once() {
    let case = generate(300, 4, 77, true, true, 0.3);
    let problem = case.problem();
    let qr = Qr::new().fit(&problem).expect("qr");
    let start = qr.model.clone();
    let fits = [
        GradientDescent::new()
            .with_start(start.clone())
            .fit(&problem),
        Accelerated::new().with_start(start.clone()).fit(&problem),
        Stochastic::new().with_start(start).fit(&problem),
    ];
    for fit in fits {
        let fit = fit.expect("fit");
        let report = iterations(&fit);
        assert!(report.converged);
        assert_eq!(report.iterations, 0);
        let (b, b0) = reference(&case, 0.0);
        assert!(error(&case, &fit.model, &b, b0) < 1e-9);
    }
    // A warm start from elsewhere still reaches the optimum.
    let far = LinearModel::new(Array1::from(vec![5.0, -5.0, 1.0, 2.0]), 0.0).expect("finite");
    let fit = gd(1e-11, 0.0)
        .fit(&problem)
        .and_then(|_| gd(1e-11, 0.0).with_start(far).fit(&problem))
        .expect("fit");
    let (b, b0) = reference(&case, 0.0);
    assert!(error(&case, &fit.model, &b, b0) < 1e-8);
}

#[test]
fn final_loss_and_residual_sum_of_squares_match_their_definitions() {
    // Identity: unweighted, unpenalised, the reported loss is the mean
    // squared error (1/n) sum r^2 of LinearModel::mean_squared_error.
    let case = generate(250, 3, 41, false, true, 0.4);
    let problem = case.problem();
    let fit = gd(1e-12, 0.0).fit(&problem).expect("fit");
    let direct = fit
        .model
        .mean_squared_error(case.x.view(), case.y.view())
        .expect("loss");
    let report = iterations(&fit);
    assert!((report.final_loss - direct).abs() <= 1e-12 * direct);
    let qr = Qr::new().fit(&problem).expect("qr");
    let rel = (fit.report.residual_sum_of_squares - qr.report.residual_sum_of_squares).abs()
        / qr.report.residual_sum_of_squares;
    assert!(rel < 1e-10, "rss relative difference {rel:e}");
    // Nothing is factored: the rank, and with it the residual degrees of
    // freedom, are not measured.
    assert_eq!(fit.report.rank, None);
    assert_eq!(fit.report.residual_df, None);

    // Weighted and penalised: [sum w r^2 + lambda ||b||^2] / sum w.
    let case = generate(250, 3, 42, true, true, 0.4);
    let problem = case.problem();
    let lambda = penalty_for(&case, 0.5);
    let fit = gd(1e-12, lambda).fit(&problem).expect("fit");
    let w = case.w.as_ref().expect("weights");
    let pred = fit.model.predict(case.x.view()).expect("predict");
    let rss: f64 = (0..250).map(|i| w[i] * (case.y[i] - pred[i]).powi(2)).sum();
    let norm2: f64 = fit.model.coefficients().iter().map(|b| b * b).sum();
    let direct = (rss + lambda * norm2) / w.sum();
    let got = iterations(&fit).final_loss;
    assert!((got - direct).abs() <= 1e-10 * direct, "{got} vs {direct}");
    assert!((fit.report.residual_sum_of_squares - rss).abs() <= 1e-10 * rss);
}

#[test]
fn zero_weight_rows_are_the_same_as_dropped_rows() {
    // Identity: a row with weight 0 contributes nothing to the objective.
    let case = generate(200, 3, 51, true, true, 0.3);
    let w = case.w.as_ref().expect("weights");
    let keep: Vec<usize> = (0..200).filter(|&i| w[i] > 0.0).collect();
    let x2 = case.x.select(ndarray::Axis(0), &keep);
    let y2 = case.y.select(ndarray::Axis(0), &keep);
    let w2 = w.select(ndarray::Axis(0), &keep);
    let full = case.problem();
    let dropped = Problem::builder(x2.view(), y2.view())
        .with_weights(w2.view())
        .build()
        .expect("problem");
    let a = acc(1e-12, 0.0).fit(&full).expect("fit");
    let b = acc(1e-12, 0.0).fit(&dropped).expect("fit");
    for j in 0..3 {
        let d = (a.model.coefficients()[j] - b.model.coefficients()[j]).abs() * case.x_spread[j];
        assert!(d < 1e-9 * case.y_spread);
    }
    assert_eq!(a.report.usable_rows, keep.len());
}

#[test]
fn memory_layout_does_not_change_the_optimum() {
    let case = generate(400, 5, 61, true, true, 0.3);
    let (b, b0) = reference(&case, 0.0);
    // Column-major copy and a strided (every other column) view.
    let mut fortran = Array2::<f64>::zeros((400, 5).f());
    fortran.assign(&case.x);
    let mut wide = Array2::<f64>::zeros((400, 10));
    for j in 0..5 {
        wide.column_mut(2 * j).assign(&case.x.column(j));
    }
    let strided = wide.slice(s![.., ..;2]);
    let w = case.w.as_ref().expect("weights");
    for view in [fortran.view(), strided] {
        let problem = Problem::builder(view, case.y.view())
            .with_weights(w.view())
            .build()
            .expect("problem");
        for fit in [
            gd(1e-11, 0.0).fit(&problem).expect("gd"),
            acc(1e-11, 0.0).fit(&problem).expect("acc"),
        ] {
            assert!(error(&case, &fit.model, &b, b0) < 1e-8);
        }
        let fit = sgd(1, 0.0).fit(&problem).expect("sgd");
        assert!(error(&case, &fit.model, &b, b0) < 5e-3);
    }
}

#[test]
fn history_is_thinned_as_asked() {
    let case = generate(100, 3, 71, false, true, 0.3);
    let problem = case.problem();
    let solver = GradientDescent::new()
        .with_max_iterations(10)
        .with_tolerance(0.0)
        .with_history_stride(4);
    let fit = solver.fit(&problem).expect("fit");
    let report = iterations(&fit);
    // Iterations 0, 4, 8 and the last one, 10.
    assert_eq!(report.loss_history.len(), 4);
    assert_eq!(report.loss_history.last(), Some(&report.final_loss));
    let every = solver
        .clone()
        .with_history_stride(1)
        .fit(&problem)
        .expect("fit");
    let all = &iterations(&every).loss_history;
    assert_eq!(all.len(), 11);
    assert_eq!(report.loss_history, vec![all[0], all[4], all[8], all[10]]);
    let none = solver.with_history_stride(0).fit(&problem).expect("fit");
    assert!(iterations(&none).loss_history.is_empty());
}

#[test]
fn invalid_settings_are_typed_errors() {
    let case = generate(50, 2, 81, false, true, 0.3);
    let problem = case.problem();
    let bad = |r: leastline::Result<Fit>, name: &str| match r {
        Err(Error::InvalidParameter { name: n, .. }) => assert_eq!(n, name),
        other => panic!("expected InvalidParameter({name}), got {other:?}"),
    };
    bad(
        GradientDescent::new().with_tolerance(-1.0).fit(&problem),
        "tolerance",
    );
    bad(Accelerated::new().with_step(0.0).fit(&problem), "step");
    bad(
        GradientDescent::new().with_penalty(f64::NAN).fit(&problem),
        "penalty",
    );
    bad(
        Stochastic::new().with_batch_size(0).fit(&problem),
        "batch_size",
    );
    bad(Stochastic::new().with_decay(-0.1).fit(&problem), "decay");
    let wrong =
        GradientDescent::new().with_start(LinearModel::new(Array1::zeros(3), 0.0).expect("finite"));
    assert!(matches!(
        wrong.fit(&problem),
        Err(Error::ColumnCountMismatch {
            expected: 2,
            found: 3
        })
    ));
    // A model with a NaN slope cannot be built, so it cannot be a start.
    assert!(matches!(
        LinearModel::new(Array1::from(vec![0.0, f64::NAN]), 0.0),
        Err(Error::NonFinite {
            input: leastline::Input::Coefficients,
            row: 1,
            ..
        })
    ));
}

#[test]
fn intercept_only_constant_columns_and_constant_target() {
    // No columns: the fit is the (weighted) mean, at once.
    let x = Array2::<f64>::zeros((5, 0));
    let y = Array1::from(vec![1.0, 2.0, 3.0, 4.0, 10.0]);
    let problem = Problem::new(x.view(), y.view()).expect("problem");
    for solver in [
        Box::new(GradientDescent::new()) as Box<dyn Solver>,
        Box::new(Accelerated::new()),
        Box::new(Stochastic::new()),
    ] {
        let fit = solver.fit(&problem).expect("fit");
        assert_eq!(fit.model.intercept(), 4.0);
        assert!(iterations(&fit).converged);
    }
    // A constant column beside the intercept gets slope 0; the other slope
    // is the OLS one. The rank is not measured by a gradient solver.
    let x = ndarray::array![[1.0, 7.0], [2.0, 7.0], [3.0, 7.0], [4.0, 7.0], [5.0, 7.0]];
    let y = ndarray::array![2.1, 3.9, 6.2, 7.8, 10.1];
    let problem = Problem::new(x.view(), y.view()).expect("problem");
    let fit = gd(1e-12, 0.0).fit(&problem).expect("fit");
    assert_eq!(fit.model.coefficients()[1], 0.0);
    assert_eq!(fit.report.rank, None);
    let x1 = x.slice(s![.., ..1]);
    let reference = Qr::new()
        .fit(&Problem::new(x1, y.view()).expect("problem"))
        .expect("qr");
    assert!((fit.model.coefficients()[0] - reference.model.coefficients()[0]).abs() < 1e-10);
    // A constant target: zero slopes, converged at the start.
    let y = Array1::from_elem(5, 3.5);
    let problem = Problem::new(x.view(), y.view()).expect("problem");
    let fit = Accelerated::new().fit(&problem).expect("fit");
    assert_eq!(fit.model.coefficients()[0], 0.0);
    assert_eq!(fit.model.intercept(), 3.5);
    assert_eq!(iterations(&fit).iterations, 0);
}

/// Twenty weighted rows of eight columns without an intercept (standardised
/// condition number about 7): single-row steps of `1 / (2 L_max)` need more
/// than 100 epochs of 20 steps. Capped at 100 epochs the fit stops short
/// and says so (not converged, the gradient above the tolerance); the
/// default limit (`Stochastic::epoch_limit`: 500 epochs here, 10,000
/// steps) converges to the normal equations' answer. Found by a
/// random-seed soak of `default_stochastic_converges_on_well_conditioned_problems`,
/// when the default limit was a fixed 100 epochs.
#[test]
fn few_rows_get_more_epochs_by_default() {
    let case = generate(20, 8, 60833, true, false, 0.2);
    let problem = case.problem();
    let (b, b0) = reference(&case, 0.0);
    let solver = Stochastic::new().with_seed(60833).with_batch_size(1);
    // 18 usable rows (two zero weights): 556 epochs of 18 steps.
    assert_eq!(solver.epoch_limit(&problem), 556);
    let short = solver
        .clone()
        .with_max_iterations(100)
        .fit(&problem)
        .expect("fit");
    let report = iterations(&short);
    assert!(!report.converged && !report.stopped_by_observer);
    assert_eq!(report.iterations, 100);
    assert!(report.gradient_norm > 1e-6, "{:e}", report.gradient_norm);
    let fit = solver.fit(&problem).expect("fit");
    let report = iterations(&fit);
    assert!(
        report.converged,
        "{} epochs, {:e}",
        report.iterations, report.gradient_norm
    );
    assert!(report.iterations > 100);
    let e = error(&case, &fit.model, &b, b0);
    assert!(e < 1e-4, "error {e:e}");
}

/// The default epoch limit on a large problem stays 100, and a set limit
/// is the limit whatever the problem.
#[test]
fn default_epoch_limit_is_100_on_many_batches() {
    let case = generate(20_000, 3, 5, false, true, 0.2);
    let problem = case.problem();
    assert_eq!(Stochastic::new().epoch_limit(&problem), 100);
    // 20,000 rows in batches of 1,000: 20 steps an epoch, 500 epochs.
    assert_eq!(
        Stochastic::new()
            .with_batch_size(1000)
            .epoch_limit(&problem),
        500
    );
    assert_eq!(
        Stochastic::new()
            .with_batch_size(1000)
            .with_max_iterations(7)
            .epoch_limit(&problem),
        7
    );
}
