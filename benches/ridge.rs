//! Ridge speed, as ratios within one run (never absolute timings):
//!
//! - `path_vs_cholesky` (100,000 x 200): one Cholesky ridge fit versus a
//!   100-penalty SVD path (decomposition, 100 fits and the generalized
//!   cross-validation curve), and the same path scored by leave-one-out.
//!   Target: path < 3 x Cholesky.
//! - `dual_vs_primal`: the dual form on 2,000 x 50,000, and both forms on
//!   2,000 x 5,000. The primal Cholesky on 2,000 x 50,000 would form a
//!   50,000 x 50,000 Gram matrix (20 GB) and factor it (about 4e13 flops):
//!   it is not run; its cost grows at least as p^2 (Gram) and p^3
//!   (factor), so it is at least 100 x its cost at p = 5,000.
//!   Target: dual >= 10 x faster than primal.
//!
//! Data are seeded uniform noise with a linear signal.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion};
use leastline::ridge::{Criterion as Score, Ridge, RidgeFactorization, RidgePath};
use leastline::{Problem, Solver};
use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn data(n: usize, p: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, p), |_| rng.random::<f64>() - 0.5);
    let coef: Vec<f64> = (0..p).map(|j| ((j % 7) as f64 - 3.0) * 0.1).collect();
    let y = Array1::from_shape_fn(n, |i| {
        x.row(i).iter().zip(&coef).map(|(a, b)| a * b).sum::<f64>() + 0.1 * rng.random::<f64>()
    });
    (x, y)
}

fn path_vs_cholesky(c: &mut Criterion) {
    let (x, y) = data(100_000, 200, 1);
    let problem = Problem::new(x.view(), y.view()).expect("valid");
    let mut group = c.benchmark_group("path_vs_cholesky");
    group
        .sample_size(10)
        .measurement_time(Duration::from_secs(10));
    group.bench_function("cholesky_fit", |b| {
        let solver = Ridge::new(5.0).with_factorization(RidgeFactorization::Cholesky);
        b.iter(|| black_box(solver.fit(&problem).expect("fit")))
    });
    group.bench_function("svd_path_100_gcv", |b| {
        b.iter(|| {
            let path = RidgePath::new(&problem, false).expect("path");
            let grid = path.default_grid(100).expect("grid");
            let fits: Vec<_> = grid.iter().map(|&l| path.fit(l).expect("fit")).collect();
            let curve = path
                .curve(&grid, Score::GeneralizedCrossValidation)
                .expect("curve");
            black_box((fits, curve))
        })
    });
    group.bench_function("svd_path_100_loo", |b| {
        b.iter(|| {
            let path = RidgePath::new(&problem, false).expect("path");
            let grid = path.default_grid(100).expect("grid");
            let fits: Vec<_> = grid.iter().map(|&l| path.fit(l).expect("fit")).collect();
            let curve = path.curve(&grid, Score::LeaveOneOut).expect("curve");
            black_box((fits, curve))
        })
    });
    group.finish();
}

fn dual_vs_primal(c: &mut Criterion) {
    let mut group = c.benchmark_group("dual_vs_primal");
    group
        .sample_size(10)
        .measurement_time(Duration::from_secs(20));
    {
        let (x, y) = data(2_000, 5_000, 2);
        let problem = Problem::new(x.view(), y.view()).expect("valid");
        for (name, method) in [
            ("primal_cholesky_2000x5000", RidgeFactorization::Cholesky),
            ("dual_2000x5000", RidgeFactorization::Dual),
        ] {
            let solver = Ridge::new(5.0).with_factorization(method);
            group.bench_function(name, |b| {
                b.iter(|| black_box(solver.fit(&problem).expect("fit")))
            });
        }
    }
    {
        let (x, y) = data(2_000, 50_000, 3);
        let problem = Problem::new(x.view(), y.view()).expect("valid");
        let solver = Ridge::new(5.0).with_factorization(RidgeFactorization::Dual);
        group.bench_function("dual_2000x50000", |b| {
            b.iter(|| black_box(solver.fit(&problem).expect("fit")))
        });
    }
    group.finish();
}

criterion_group!(benches, path_vs_cholesky, dual_vs_primal);
criterion_main!(benches);
