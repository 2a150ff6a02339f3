//! Every solver on the same seeded data over a grid of shapes, beside the
//! floors of their work measured in the same group: the symmetric Gram
//! matrix of the centered design (`floor-gram`, the least work of any
//! closed-form solver) and one read of the design (`floor-stream`, the
//! least work of one gradient iteration). Compare a solver with the floor
//! of its group: the ratio is what this crate controls; absolute times
//! depend on the machine.
//!
//! `cargo bench --features bench-support --bench solvers` (about five minutes on two cores);
//! `cargo bench --features bench-support --bench solvers -- /100000x` runs the shapes with 100,000
//! rows. Benchmarks are named `solvers/<solver>/<rows>x<cols>`.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, SamplingMode};
use leastline::bench_support as floors;
use leastline::{Accelerated, Cholesky, Problem, Qr, Ridge, Solver, Svd};
use std::hint::black_box;
use std::time::Duration;

#[path = "../examples/support/design.rs"]
mod design;

/// The solvers by name; append a line to bench another one.
type Maker = fn() -> Box<dyn Solver>;
const SOLVERS: &[(&str, Maker)] = &[
    ("qr", || Box::new(Qr::new())),
    ("cholesky", || Box::new(Cholesky::new())),
    ("svd", || Box::new(Svd::new())),
    ("ridge", || Box::new(Ridge::new(1.0))),
    // Fifty accelerated iterations (a fixed amount of work, not a tolerance).
    ("accelerated-50", || {
        Box::new(
            Accelerated::new()
                .with_tolerance(0.0)
                .with_max_iterations(50),
        )
    }),
];

/// Wide designs (more columns than rows): only the penalised solvers apply.
const WIDE_SHAPES: &[(usize, usize)] = &[(500, 5_000), (1_000, 20_000)];

/// (rows, columns). Fewer columns at a million rows keep the run short.
const SHAPES: &[(usize, usize)] = &[
    (1_000, 5),
    (1_000, 20),
    (1_000, 100),
    (1_000, 500),
    (10_000, 5),
    (10_000, 100),
    (10_000, 500),
    (100_000, 5),
    (100_000, 100),
    (100_000, 500),
    (1_000_000, 5),
    (1_000_000, 100),
];

fn solvers(c: &mut Criterion) {
    for &(n, p) in SHAPES {
        let (x, y) = design::make_data(n, p, 42);
        let problem = match Problem::new(x.view(), y.view()) {
            Ok(problem) => problem,
            Err(e) => panic!("{n}x{p}: {e}"),
        };
        let shape = format!("{n}x{p}");
        let mut group = c.benchmark_group("solvers");
        group
            .sample_size(10)
            .warm_up_time(Duration::from_millis(300))
            .measurement_time(Duration::from_secs(if n * p >= 10_000_000 { 4 } else { 1 }))
            .sampling_mode(SamplingMode::Flat);
        group.bench_function(BenchmarkId::new("floor-gram", &shape), |b| {
            b.iter(|| black_box(floors::gram_floor(&problem)))
        });
        group.bench_function(BenchmarkId::new("floor-stream", &shape), |b| {
            b.iter(|| black_box(floors::stream_floor(&problem)))
        });
        for (name, make) in SOLVERS {
            let solver = make();
            group.bench_function(BenchmarkId::new(*name, &shape), |b| {
                b.iter(|| black_box(solver.fit(&problem).map(|f| f.report.rank)))
            });
        }
        group.finish();
    }
    for &(n, p) in WIDE_SHAPES {
        let (x, y) = design::make_data(n, p, 42);
        let problem = match Problem::new(x.view(), y.view()) {
            Ok(problem) => problem,
            Err(e) => panic!("{n}x{p}: {e}"),
        };
        let shape = format!("{n}x{p}");
        let mut group = c.benchmark_group("solvers-wide");
        group
            .sample_size(10)
            .warm_up_time(Duration::from_millis(300))
            .measurement_time(Duration::from_secs(2))
            .sampling_mode(SamplingMode::Flat);
        group.bench_function(BenchmarkId::new("floor-stream", &shape), |b| {
            b.iter(|| black_box(floors::stream_floor(&problem)))
        });
        let ridge = Ridge::new(1.0);
        group.bench_function(BenchmarkId::new("ridge-dual", &shape), |b| {
            b.iter(|| black_box(ridge.fit(&problem).map(|f| f.report.rank)))
        });
        group.finish();
    }
}

criterion_group!(benches, solvers);
criterion_main!(benches);
