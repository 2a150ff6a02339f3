//! Extra memory of inference, diagnostics and the penalty path stays within
//! the documented `O(p^2 + block)` bounds, measured with a counting global
//! allocator (this test file has its own binary, so the allocator sees
//! nothing else) on a 6,000 x 2,000 design.
//!
//! The bounds (see the crate docs, "Memory"): with `q = p + 1` and
//! `T` worker threads,
//! - `Inference::with_options`: at most `4 q^2` numbers (the result holds
//!   two or three of them), plus `T` blocks;
//! - `Inference::diagnostics`: at most `2 q^2 + 8 n` numbers, plus `T` blocks;
//! - `RidgePath::new` and `curve` with leave-one-out: at most `11 q^2`
//!   numbers (seven of them the workspace of faer's SVD of the `p x p`
//!   triangle), plus `T` blocks.
//!
//! A block is at most `max(512 KiB, 256 rows)`; the bound below allows four
//! per thread.
//!
//! Not counted: faer's matrix-product kernels keep a workspace per thread
//! (twice the processor's last-level cache), allocated on a thread's first
//! product and kept for the thread's life; every thread is warmed up with
//! a product before measuring, so that it is not mistaken for ours.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

mod common;

use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::ridge::{Criterion, RidgePath};
use leastline::{Problem, Qr, Solver};
use ndarray::Array1;

struct Counting;

static CURRENT: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

// SAFETY: every call is forwarded to the system allocator unchanged; the
// counters only observe the sizes.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        // SAFETY: forwarded with the caller's layout.
        let ptr = unsafe { System.alloc(layout) };
        if !ptr.is_null() {
            let now = CURRENT.fetch_add(layout.size(), Ordering::SeqCst) + layout.size();
            PEAK.fetch_max(now, Ordering::SeqCst);
        }
        ptr
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: forwarded with the caller's pointer and layout.
        unsafe { System.dealloc(ptr, layout) };
        CURRENT.fetch_sub(layout.size(), Ordering::SeqCst);
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        // SAFETY: forwarded with the caller's arguments.
        let out = unsafe { System.realloc(ptr, layout, new_size) };
        if !out.is_null() {
            CURRENT.fetch_sub(layout.size(), Ordering::SeqCst);
            let now = CURRENT.fetch_add(new_size, Ordering::SeqCst) + new_size;
            PEAK.fetch_max(now, Ordering::SeqCst);
        }
        out
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

/// Runs `f` and returns its result and the peak bytes allocated above the
/// level at its start.
fn peak_above<T>(f: impl FnOnce() -> T) -> (T, usize) {
    let start = CURRENT.load(Ordering::SeqCst);
    PEAK.store(start, Ordering::SeqCst);
    let out = f();
    (out, PEAK.load(Ordering::SeqCst) - start)
}

const MIB: f64 = 1048576.0;

#[test]
fn extra_memory_stays_within_the_documented_bounds() {
    let (n, p) = (6000, 2000);
    let mut rng = common::gen::rng(6000);
    let x = common::gen::normal_matrix(&mut rng, n, p);
    let noise = common::gen::normal_vector(&mut rng, n);
    let y = Array1::from_shape_fn(n, |i| x[(i, 0)] - 0.5 * x[(i, 1)] + noise[i]);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    // Warm up faer's per-thread product workspace on every thread.
    let warm = || {
        let a = faer::Mat::<f64>::from_fn(300, 300, |i, j| (i + j) as f64);
        let b = &a * &a;
        b[(1, 1)]
    };
    rayon::broadcast(|_| warm());
    warm();
    let threads = rayon::current_num_threads();
    let q = (p + 1) as f64;
    let blocks = (threads * 4 * (1 << 19).max(256 * 8 * (p + 2))) as f64;
    let design = (8 * n * p) as f64;

    let (inf, hc3) = peak_above(|| {
        Inference::with_options(
            &problem,
            &fit,
            InferenceOptions::new().with_covariance(CovarianceKind::Hc3),
        )
        .unwrap()
    });
    let bound = 8.0 * 4.0 * q * q + blocks;
    println!(
        "HC3 inference: {:.1} MiB (bound {:.1} MiB; design {:.1} MiB)",
        hc3 as f64 / MIB,
        bound / MIB,
        design / MIB
    );
    assert!((hc3 as f64) <= bound);

    let (_, classical) = peak_above(|| fit.inference(&problem).unwrap());
    println!("classical inference: {:.1} MiB", classical as f64 / MIB);
    assert!((classical as f64) <= bound);

    let (_, diagnostics) = peak_above(|| inf.diagnostics(&problem).unwrap());
    let bound = 8.0 * (2.0 * q * q + 8.0 * n as f64) + blocks;
    println!(
        "diagnostics: {:.1} MiB (bound {:.1} MiB)",
        diagnostics as f64 / MIB,
        bound / MIB
    );
    assert!((diagnostics as f64) <= bound);

    let (_, path) = peak_above(|| {
        let path = RidgePath::new(&problem, true).unwrap();
        let grid = path.default_grid(50).unwrap();
        path.curve(&grid, Criterion::LeaveOneOut).unwrap()
    });
    let bound = 8.0 * 11.0 * q * q + blocks;
    println!(
        "penalty path with leave-one-out: {:.1} MiB (bound {:.1} MiB)",
        path as f64 / MIB,
        bound / MIB
    );
    assert!((path as f64) <= bound);
}
