//! Cost of iterative refinement on the QR path, as a ratio to plain QR
//! measured in the same run.
//!
//! Two designs of 100 000 rows and 8 columns, both with an intercept:
//! - "well-conditioned": independent uniform columns (condition estimate
//!   about 1), where refinement solves its corrections with the
//!   semi-normal equations (extra passes over the data, no new QR);
//! - "ill-conditioned": powers `t, t^2, ..., t^8` of `t` in [1, 2]
//!   (condition estimate about 5e8), where each correction needs a
//!   repeated QR pass.
//!
//! `cargo bench --bench refinement` prints criterion's timings and, at the
//! end, the median ratio refined / plain for each design.

use std::hint::black_box;
use std::time::Instant;

use criterion::{criterion_group, Criterion};
use leastline::{Problem, Qr, Solver};
use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

const ROWS: usize = 100_000;
const COLS: usize = 8;

fn designs() -> Vec<(&'static str, Array2<f64>, Array1<f64>)> {
    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let x = Array2::from_shape_fn((ROWS, COLS), |_| rng.random_range(-1.0..1.0));
    let y = Array1::from_iter((0..ROWS).map(|i| {
        (0..COLS).map(|j| x[[i, j]] * (j as f64 + 1.0)).sum::<f64>()
            + 0.1 * rng.random_range(-1.0..1.0)
    }));
    let t: Vec<f64> = (0..ROWS).map(|_| rng.random_range(1.0..2.0)).collect();
    let xp = Array2::from_shape_fn((ROWS, COLS), |(i, k)| t[i].powi(k as i32 + 1));
    let yp = Array1::from_iter(
        t.iter()
            .map(|&v| v.ln() + 0.001 * rng.random_range(-1.0..1.0)),
    );
    vec![("well-conditioned", x, y), ("ill-conditioned", xp, yp)]
}

fn bench(c: &mut Criterion) {
    for (label, x, y) in designs() {
        let problem = Problem::new(x.view(), y.view()).expect("valid problem");
        let mut group = c.benchmark_group(format!("refinement/{label}"));
        group.sample_size(20);
        group.bench_function("plain qr", |b| {
            b.iter(|| black_box(Qr::new().fit(black_box(&problem)).expect("fit")))
        });
        group.bench_function("refined qr", |b| {
            b.iter(|| black_box(Qr::refined().fit(black_box(&problem)).expect("fit")))
        });
        group.finish();
    }
}

/// Median of `reps` timings of `f`, in seconds.
fn median_seconds(reps: usize, mut f: impl FnMut()) -> f64 {
    let mut times: Vec<f64> = (0..reps)
        .map(|_| {
            let start = Instant::now();
            f();
            start.elapsed().as_secs_f64()
        })
        .collect();
    times.sort_by(f64::total_cmp);
    times[reps / 2]
}

fn ratios() {
    println!("\nrefined / plain QR, median of 15 runs each:");
    for (label, x, y) in designs() {
        let problem = Problem::new(x.view(), y.view()).expect("valid problem");
        let refined = Qr::refined().fit(&problem).expect("fit");
        let steps = refined
            .report
            .iterations
            .as_ref()
            .map_or(0, |i| i.iterations);
        let plain = median_seconds(15, || {
            black_box(Qr::new().fit(&problem).expect("fit"));
        });
        let slow = median_seconds(15, || {
            black_box(Qr::refined().fit(&problem).expect("fit"));
        });
        println!(
            "  {label:<17} condition {:>8.1e}  steps {steps}  plain {:>8.2} ms  refined {:>8.2} ms  ratio {:.2}",
            refined.report.condition.unwrap_or(f64::NAN),
            plain * 1e3,
            slow * 1e3,
            slow / plain
        );
    }
}

criterion_group!(benches, bench);

fn main() {
    benches();
    Criterion::default().configure_from_args().final_summary();
    ratios();
}
