//! How many iterations each gradient method needs as the condition number
//! grows.
//!
//! Builds designs `X = U S V^T` (plus column offsets, removed by the
//! intercept) from a centered orthonormal `U`, a random orthogonal `V` and
//! singular values `S` spaced evenly on a log scale, so that the Gram matrix
//! `X_c^T X_c` has a chosen condition number; fits them with the three
//! gradient methods, watching every iteration through the observer, and
//! prints the first iteration (epoch) at which the relative gradient norm
//! fell to 1e-2, 1e-4, 1e-6 and 1e-8 ("-": not within the limit). Not a
//! timing: iteration counts only.
//!
//! Run: `cargo run --release --example gradient_conditioning`

use std::sync::Mutex;

use leastline::{
    Accelerated, Control, GradientDescent, Observer, Problem, Progress, Solver, Stochastic,
};
use nalgebra::{DMatrix, SymmetricEigen};
use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

const ROWS: usize = 2000;
const COLS: usize = 20;
const THRESHOLDS: [f64; 4] = [1e-2, 1e-4, 1e-6, 1e-8];

fn gaussian(rng: &mut ChaCha8Rng) -> f64 {
    // Box-Muller.
    let u: f64 = rng.random_range(f64::EPSILON..1.0);
    let v: f64 = rng.random();
    (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
}

/// A design whose centered Gram matrix has condition number `gram_cond`.
fn design(gram_cond: f64, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut g = DMatrix::from_fn(ROWS, COLS, |_, _| gaussian(&mut rng));
    for mut col in g.column_iter_mut() {
        let m = col.mean();
        col.add_scalar_mut(-m);
    }
    let u = g.qr().q();
    let v = DMatrix::from_fn(COLS, COLS, |_, _| gaussian(&mut rng))
        .qr()
        .q();
    let smax = 10.0;
    let ratio = gram_cond.sqrt();
    let s: Vec<f64> = (0..COLS)
        .map(|k| smax * ratio.powf(-(k as f64) / (COLS - 1) as f64))
        .collect();
    let x = &u * DMatrix::from_diagonal(&nalgebra::DVector::from(s)) * v.transpose();
    let offsets: Vec<f64> = (0..COLS).map(|j| 100.0 * (j as f64 - 10.0)).collect();
    let xa = Array2::from_shape_fn((ROWS, COLS), |(i, j)| x[(i, j)] + offsets[j]);
    let beta: Vec<f64> = (0..COLS).map(|_| gaussian(&mut rng)).collect();
    let y = Array1::from_shape_fn(ROWS, |i| {
        3.0 + (0..COLS).map(|j| xa[[i, j]] * beta[j]).sum::<f64>() + 0.1 * gaussian(&mut rng)
    });
    (xa, y)
}

/// Condition number of the standardised centered Gram matrix (unit
/// diagonal), the one the solvers iterate on.
fn standardised_condition(x: &Array2<f64>) -> f64 {
    let (n, p) = x.dim();
    let means: Vec<f64> = (0..p).map(|j| x.column(j).sum() / n as f64).collect();
    let mut g = DMatrix::<f64>::zeros(p, p);
    for i in 0..n {
        for j in 0..p {
            for k in 0..p {
                g[(j, k)] += (x[[i, j]] - means[j]) * (x[[i, k]] - means[k]);
            }
        }
    }
    let d: Vec<f64> = (0..p).map(|j| g[(j, j)].sqrt()).collect();
    let g = DMatrix::from_fn(p, p, |j, k| g[(j, k)] / d[j] / d[k]);
    let e = SymmetricEigen::new(g).eigenvalues;
    e.max() / e.min()
}

/// Watches a fit and records the first iteration below each threshold.
fn watch(run: impl FnOnce(&dyn Observer) -> leastline::Result<leastline::Fit>) -> Watched {
    // The observer may be called from worker threads: the slots sit behind
    // a lock (calls come one at a time, so it is never contended).
    let first = Mutex::new(vec![None; THRESHOLDS.len()]);
    let fit = run(&|p: &Progress| {
        if let (Some(k), Some(g)) = (p.iteration, p.gradient_norm) {
            let mut first = first.lock().expect("observer ran");
            for (slot, t) in first.iter_mut().zip(THRESHOLDS) {
                if slot.is_none() && g <= t {
                    *slot = Some(k);
                }
            }
        }
        Control::Continue
    })
    .expect("fit");
    let first = first.into_inner().expect("observer ran");
    let report = fit.report.iterations.expect("iterative report");
    Watched {
        first,
        passes: report.passes,
        restarts: report.restarts,
        grad: report.gradient_norm,
        converged: report.converged,
    }
}

/// What [`watch`] saw.
struct Watched {
    first: Vec<Option<usize>>,
    passes: usize,
    restarts: usize,
    grad: f64,
    converged: bool,
}

fn show(name: &str, w: Watched) {
    let cells: String = w
        .first
        .iter()
        .map(|c| format!("{:>9}", c.map_or("-".to_string(), |k| k.to_string())))
        .collect();
    println!(
        "  {name:<28} {cells}   {:>8} {:>8}  {:.1e}{}",
        w.passes,
        w.restarts,
        w.grad,
        if w.converged {
            ""
        } else {
            "  stopped at the iteration limit"
        }
    );
}

fn main() {
    for (label, cond, cap) in [
        ("1e2", 1e2, 200_000usize),
        ("1e4", 1e4, 2_000_000),
        ("1e8", 1e8, 300_000),
    ] {
        let (x, y) = design(cond, 42);
        let problem = Problem::new(x.view(), y.view()).expect("problem");
        println!(
            "\nGram condition {label} (standardised: {:.3e}), {ROWS} x {COLS}",
            standardised_condition(&x)
        );
        println!(
            "  {:<28} {:>9}{:>9}{:>9}{:>9}   {:>8} {:>8}  last relative gradient",
            "method", "1e-2", "1e-4", "1e-6", "1e-8", "passes", "restarts"
        );
        let gd = GradientDescent::new()
            .with_tolerance(1e-8)
            .with_max_iterations(cap)
            .with_history_stride(0);
        show("gradient descent", watch(|o| gd.fit_observed(&problem, o)));
        let acc = Accelerated::new()
            .with_tolerance(1e-8)
            .with_max_iterations(cap)
            .with_history_stride(0);
        show("accelerated", watch(|o| acc.fit_observed(&problem, o)));
        for batch in [32, 256] {
            let sgd = Stochastic::new()
                .with_tolerance(1e-8)
                .with_max_iterations(300)
                .with_batch_size(batch)
                .with_history_stride(0);
            show(
                &format!("stochastic (batch {batch})"),
                watch(|o| sgd.fit_observed(&problem, o)),
            );
        }
        let plain = Stochastic::new()
            .with_tolerance(1e-8)
            .with_max_iterations(300)
            .with_batch_size(32)
            .with_variance_reduction(false)
            .with_history_stride(0);
        show(
            "plain stochastic (batch 32)",
            watch(|o| plain.fit_observed(&problem, o)),
        );
    }
}
