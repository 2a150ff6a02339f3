//! One full-gradient iteration against the floor: one plain streaming pass
//! over the same design, measured in the same run.
//!
//! The design is 1,000,000 x 100 (800 MB, row-major, as ndarray allocates by
//! default). Three measurements, all with criterion's byte throughput so the
//! report shows GB/s of design read:
//!
//! - `floor/stream_sum`: the sum of every entry, row by row, over the same
//!   64 groups of rows in parallel, eight partial sums per row (so the
//!   compiler vectorises it; on x86-64 also compiled for AVX2 and chosen at
//!   run time, like the solver's kernel). Reading the design once can not be
//!   done faster than this;
//! - `gradient/setup`: `GradientDescent` with a fixed step and
//!   `max_iterations = 0`: everything a fit does besides iterating (settings
//!   checks, one read of the design for the column norms, one fused
//!   residual-and-gradient pass at the start, building the report);
//! - `gradient/ten_iterations`: the same with `max_iterations = 10`, i.e.
//!   ten more fused passes.
//!
//! The cost of one full-gradient iteration is `(ten_iterations - setup) / 10`;
//! the ratio to report is that over `stream_sum` (target <= 1.5).
//!
//! On a shared machine the load changes between criterion's measurements,
//! so the bench also prints a paired figure: floor, setup and ten-iteration
//! fits interleaved in ten rounds, and the median and range of the
//! per-round ratios `((ten_iterations - setup) / 10) / stream_sum`.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use leastline::{GradientDescent, Problem, Solver};
use ndarray::{Array1, Array2};
use rayon::prelude::*;
use std::hint::black_box;

const ROWS: usize = 1_000_000;
const COLS: usize = 100;

/// A deterministic design with varied columns (no generator needed: a
/// cheap integer hash of the position).
fn design() -> (Array2<f64>, Array1<f64>) {
    let hash = |i: usize, j: usize| {
        let mut h = (i as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15)
            ^ (j as u64).wrapping_mul(0xc2b2_ae3d_27d4_eb4f);
        h ^= h >> 29;
        h = h.wrapping_mul(0xbf58_476d_1ce4_e5b9);
        h ^= h >> 32;
        (h >> 11) as f64 / (1u64 << 53) as f64
    };
    let x = Array2::from_shape_fn((ROWS, COLS), |(i, j)| {
        (1.0 + j as f64) * hash(i, j) + j as f64
    });
    let y = Array1::from_shape_fn(ROWS, |i| {
        x.row(i)
            .iter()
            .enumerate()
            .map(|(j, v)| v * (j % 7) as f64)
            .sum::<f64>()
            + hash(i, COLS)
    });
    (x, y)
}

#[inline(always)]
fn row_sum(row: &[f64]) -> f64 {
    let mut s = [0.0_f64; 8];
    let c = row.chunks_exact(8);
    let tail: f64 = c.remainder().iter().sum();
    for a in c {
        for l in 0..8 {
            s[l] += a[l];
        }
    }
    (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
}

#[inline(always)]
fn rows_sum_impl(data: &[f64], cols: usize) -> f64 {
    data.chunks_exact(cols).map(row_sum).sum()
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn rows_sum_avx2(data: &[f64], cols: usize) -> f64 {
    rows_sum_impl(data, cols)
}

fn rows_sum(data: &[f64], cols: usize) -> f64 {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: AVX2 is available (checked above).
        return unsafe { rows_sum_avx2(data, cols) };
    }
    rows_sum_impl(data, cols)
}

/// The floor: every entry read once, in parallel over 64 fixed groups of
/// rows (the crate's partition uses 64 groups too).
fn stream_sum(x: &Array2<f64>) -> f64 {
    let data = x.as_slice().expect("row-major design");
    let cols = x.ncols();
    let rows_per = x.nrows().div_ceil(64);
    let parts: Vec<f64> = data
        .par_chunks(rows_per * cols)
        .map(|chunk| rows_sum(chunk, cols))
        .collect();
    parts.iter().sum()
}

fn bench(c: &mut Criterion) {
    let (x, y) = design();
    let problem = Problem::new(x.view(), y.view()).expect("valid design");
    let bytes = (ROWS * COLS * 8) as u64;
    let one = GradientDescent::new()
        .with_step(0.1)
        .with_max_iterations(0)
        .with_history_stride(0);
    let ten = one.clone().with_max_iterations(10);
    let mut group = c.benchmark_group("gradient_1e6x100");
    group.throughput(Throughput::Bytes(bytes));
    group.bench_function(BenchmarkId::new("floor", "stream_sum"), |b| {
        b.iter(|| black_box(stream_sum(black_box(&x))))
    });
    group.throughput(Throughput::Bytes(2 * bytes));
    group.bench_function(BenchmarkId::new("gradient", "setup"), |b| {
        b.iter(|| black_box(one.fit(black_box(&problem)).expect("fit")))
    });
    group.throughput(Throughput::Bytes(12 * bytes));
    group.bench_function(BenchmarkId::new("gradient", "ten_iterations"), |b| {
        b.iter(|| black_box(ten.fit(black_box(&problem)).expect("fit")))
    });
    group.finish();
    paired(&x, &problem, &one, &ten);
}

/// Interleaved measurement: ten rounds of floor, setup and ten-iteration
/// fit; prints the median and range of the per-round ratios.
fn paired(x: &Array2<f64>, problem: &Problem<'_>, one: &GradientDescent, ten: &GradientDescent) {
    use std::time::Instant;
    let time = |f: &mut dyn FnMut()| {
        let t = Instant::now();
        f();
        t.elapsed().as_secs_f64()
    };
    let mut rounds = Vec::new();
    for _ in 0..10 {
        let floor = time(&mut || {
            black_box(stream_sum(black_box(x)));
        });
        let setup = time(&mut || {
            black_box(one.fit(black_box(problem)).expect("fit"));
        });
        let fit10 = time(&mut || {
            black_box(ten.fit(black_box(problem)).expect("fit"));
        });
        rounds.push((floor, setup, fit10));
    }
    // Within a round the three timings see about the same load; across
    // rounds the load changes, so only per-round ratios are compared.
    let mut ratios: Vec<f64> = rounds.iter().map(|&(f, s, t)| (t - s) / 10.0 / f).collect();
    ratios.sort_by(f64::total_cmp);
    let median = |v: &[f64]| 0.5 * (v[(v.len() - 1) / 2] + v[v.len() / 2]);
    let mut floors: Vec<f64> = rounds.iter().map(|r| r.0).collect();
    floors.sort_by(f64::total_cmp);
    let mut iterations: Vec<f64> = rounds.iter().map(|&(_, s, t)| (t - s) / 10.0).collect();
    iterations.sort_by(f64::total_cmp);
    let gb = (ROWS * COLS * 8) as f64 / 1e9;
    println!(
        "paired ({} interleaved rounds, {} threads): iteration / floor: median {:.2}, \
         range {:.2} to {:.2}; medians: floor {:.1} ms ({:.2} GB/s), one iteration {:.1} ms \
         ({:.2} GB/s)",
        rounds.len(),
        rayon::current_num_threads(),
        median(&ratios),
        ratios[0],
        ratios[ratios.len() - 1],
        median(&floors) * 1e3,
        gb / median(&floors),
        median(&iterations) * 1e3,
        gb / median(&iterations),
    );
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(10)
        .warm_up_time(std::time::Duration::from_secs(1))
        .measurement_time(std::time::Duration::from_secs(4));
    targets = bench
}
criterion_main!(benches);
