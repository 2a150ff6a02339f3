//! Floors and single passes for the bench example and the criterion
//! benches. Hidden from the documentation and not covered by semver: the
//! functions exist so that a benchmark can time, in the same process as the
//! solvers, the work that bounds them from below.
//!
//! - [`gram_floor`]: the bare symmetric Gram matrix `Z^T Z` of the
//!   centered, weighted, scaled design with the target as a last column,
//!   parallel over row blocks: the floor of every Gram- or QR-based solver.
//! - [`stream_floor`]: one read of every element of the design, parallel
//!   over the same row blocks: the floor of one gradient iteration.
//! - [`tall_skinny_r`], [`residual_pass`], [`fill_pass`]: the passes a
//!   closed-form fit is made of, to show where its time goes.

use crate::linalg::{block_groups, block_rows, GROUPS};
use crate::prep::Scaling;
use crate::problem::Problem;

/// Nominal flop count of the symmetric Gram of an `n x k` matrix:
/// `k (k + 1) / 2` dot products of length `n`, two flops per term.
pub fn gram_flops(rows: usize, k: usize) -> f64 {
    rows as f64 * k as f64 * (k as f64 + 1.0)
}

/// Nominal flop count of a Householder QR of an `n x k` matrix
/// (`2 n k^2 - 2 k^3 / 3`).
pub fn qr_flops(rows: usize, k: usize) -> f64 {
    let (n, k) = (rows as f64, k as f64);
    2.0 * n * k * k - 2.0 * k * k * k / 3.0
}

/// Computes the centered Gram matrix with the target column (what
/// [`crate::Cholesky`] needs) and returns its trace, so that the work cannot
/// be optimised away.
pub fn gram_floor(problem: &Problem<'_>) -> f64 {
    let scaling = Scaling::new(problem, problem.default_rank_tolerance());
    let quiet = crate::observe::Watch::quiet();
    let Ok(g) = crate::passes::gram::centered_gram(problem, &scaling, true, &quiet) else {
        return f64::NAN;
    };
    (0..g.nrows()).map(|i| g[(i, i)]).sum()
}

/// Reads every element of the design once (parallel over the fixed row
/// blocks) and returns their sum: the memory-bandwidth floor of one pass.
pub fn stream_floor(problem: &Problem<'_>) -> f64 {
    crate::passes::residuals::design_sum(problem)
}

/// Computes the triangular factor `R` of the centered design with the target
/// column (what [`crate::Qr`] needs) and returns `|R[p, p]|`, the residual
/// norm in scaled units.
pub fn tall_skinny_r(problem: &Problem<'_>) -> f64 {
    let scaling = Scaling::new(problem, problem.default_rank_tolerance());
    let quiet = crate::observe::Watch::quiet();
    let Ok(r) = crate::passes::qr::tall_skinny_r(problem, &scaling, true, &quiet) else {
        return f64::NAN;
    };
    let p = problem.columns();
    r[(p, p)].abs()
}

/// The residual sum of squares pass of every closed-form fit, for slopes
/// `beta` (caller's units).
pub fn residual_pass(problem: &Problem<'_>, beta: &[f64]) -> f64 {
    let quiet = crate::observe::Watch::quiet();
    crate::passes::residuals::centered_rss(problem, beta, 1.0, &quiet).unwrap_or(f64::NAN)
}

/// Fills every transformed row block once (as the Gram pass does) without
/// any arithmetic on the blocks; returns a checksum.
pub fn fill_pass(problem: &Problem<'_>) -> f64 {
    use rayon::prelude::*;
    let scaling = Scaling::new(problem, problem.default_rank_tolerance());
    let k = problem.columns() + 1;
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, GROUPS);
    groups
        .par_iter()
        .map(|group| {
            let mut block = faer::Mat::<f64>::zeros(k, b);
            let mut acc = 0.0;
            for &(r0, r1) in group {
                crate::prep::fill_block(
                    problem,
                    &scaling,
                    r0,
                    r1,
                    true,
                    block.as_mut().subcols_mut(0, r1 - r0).transpose_mut(),
                );
                acc += block[(0, 0)];
            }
            acc
        })
        .sum()
}

pub use crate::linalg::kernels::{current_level, fma_loop, force_level, Level};

/// [`fma_loop`] at `level` on every thread of the current rayon pool at
/// once; returns the operations done by all threads together and a
/// checksum, `None` when the processor cannot run `level`.
pub fn fma_loop_all_threads(level: Level, iterations: usize) -> Option<(f64, f64)> {
    if !level.available() {
        return None;
    }
    let parts = rayon::broadcast(|_| fma_loop(level, iterations));
    parts.into_iter().try_fold((0.0, 0.0), |(f, c), part| {
        part.map(|(pf, pc)| (f + pf, c + pc))
    })
}

/// Sums `buf` in parallel over chunks of 64 KiB, each chunk in the
/// dispatched lane kernel: one streaming read of `buf`, the bandwidth probe
/// of the benchmarks (give it a buffer many times larger than the caches).
pub fn stream_sum(buf: &[f64]) -> f64 {
    use rayon::prelude::*;
    buf.par_chunks(1 << 13)
        .map(|chunk| {
            crate::linalg::kernels::dispatch(
                #[inline(always)]
                || {
                    let mut acc = [0.0; crate::linalg::kernels::LANES];
                    crate::linalg::kernels::accumulate(chunk, &mut acc);
                    crate::linalg::kernels::reduce(acc)
                },
            )
        })
        .sum()
}

/// Seconds per call of each routine behind the backend seam on one `p x p`
/// problem under `backend` (every routine forced to that backend, whatever
/// the per-routine choice), best of `reps` calls: `(routine, seconds)` for
/// the triangle merge, Cholesky, SVD with and without vectors, symmetric
/// eigen, triangular inverse and triangular solve. The matrices are fixed
/// by `p` (a seeded random triangle and its Gram matrix), so both backends
/// factor the same ones.
///
/// # Errors
/// [`crate::Error::BackendUnavailable`] for a backend this build lacks;
/// [`crate::Error::NoConvergence`] from a factorisation.
pub fn backend_kernels(
    backend: crate::Backend,
    p: usize,
    reps: usize,
) -> crate::Result<Vec<(&'static str, f64)>> {
    use crate::linalg::{backend as seam, cholesky, dense, svd, triangular};
    use faer::Mat;
    use rand::{RngExt, SeedableRng};
    let before = crate::backend();
    crate::set_backend(backend)?;
    seam::route_every_routine(true);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(p as u64);
    let tri = |rng: &mut rand_chacha::ChaCha8Rng| {
        Mat::<f64>::from_fn(p, p, |i, j| {
            if i == j {
                1.0 + rng.random_range(0.0..1.0)
            } else if i < j {
                rng.random_range(-1.0..1.0) / (p as f64).sqrt()
            } else {
                0.0
            }
        })
    };
    let (a, b) = (tri(&mut rng), tri(&mut rng));
    let gram = crate::linalg::dense::product(a.transpose(), a.as_ref());
    let time = |f: &mut dyn FnMut() -> crate::Result<()>| -> crate::Result<f64> {
        let mut best = f64::INFINITY;
        for _ in 0..reps.max(1) {
            let t = std::time::Instant::now();
            f()?;
            best = best.min(t.elapsed().as_secs_f64());
        }
        Ok(best)
    };
    let run = || -> crate::Result<Vec<(&'static str, f64)>> {
        let mut out = Vec::new();
        out.push((
            "merge of two triangles",
            time(&mut || {
                let mut m = a.clone();
                seam::merge_triangles(&mut m, b.as_ref());
                Ok(())
            })?,
        ));
        out.push((
            "Cholesky",
            time(&mut || {
                let mut l = gram.clone();
                cholesky::factor_in_place(l.as_mut()).map_err(|_| crate::Error::NoConvergence {
                    what: "Cholesky factorisation",
                })
            })?,
        ));
        out.push((
            "SVD with vectors",
            time(&mut || svd::thin_svd(a.as_ref()).map(|_| ()))?,
        ));
        out.push((
            "singular values",
            time(&mut || svd::singular_values(a.as_ref()).map(|_| ()))?,
        ));
        out.push((
            "symmetric eigen",
            time(&mut || dense::symmetric_eigen(gram.as_ref()).map(|_| ()))?,
        ));
        out.push((
            "triangular inverse",
            time(&mut || {
                triangular::inverse_upper(a.as_ref());
                Ok(())
            })?,
        ));
        out.push((
            "triangular solve",
            time(&mut || {
                let mut v = vec![1.0; p];
                triangular::solve_upper(a.as_ref(), &mut v);
                Ok(())
            })?,
        ));
        Ok(out)
    };
    let out = run();
    seam::route_every_routine(false);
    crate::set_backend(before)?;
    out
}
