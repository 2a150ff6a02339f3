//! Hot loops over the design, vectorised with instructions chosen at run
//! time.
//!
//! Each kernel is plain Rust over slices, run inside `dispatch`, which
//! compiles it once per instruction set (AVX-512 where the processor has
//! it, else AVX2 + FMA, else the x86-64 baseline) and picks the best at run
//! time, so a default release build is fast without `target-cpu=native`.
//! Every kernel fixes its order of operations (eight lanes, a fixed lane
//! reduction, and fused multiply-adds only where written as `mul_add`, which
//! rounds once on every instruction set), so its result does not depend on
//! the instruction set picked. [`force_level`] pins the level (for tests and
//! benchmarks that compare the levels).

use std::sync::atomic::{AtomicU8, Ordering};

use ndarray::{ArrayView2, Axis};
use pulp::{Simd, WithSimd};

/// Lanes of the kernels' accumulators.
pub(crate) const LANES: usize = 8;

/// An instruction set the kernels can be compiled for.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Level {
    /// The target's baseline (SSE2 on x86-64), no fused multiply-add unit.
    Scalar,
    /// x86-64-v3: AVX2 and FMA, 256-bit vectors.
    V3,
    /// x86-64-v4: AVX-512 (F, BW, CD, DQ, VL), 512-bit vectors.
    V4,
}

#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
impl Level {
    /// Every level, narrowest first.
    pub const ALL: [Level; 3] = [Level::Scalar, Level::V3, Level::V4];

    /// A short name: `scalar`, `avx2` or `avx512`.
    pub fn name(self) -> &'static str {
        match self {
            Level::Scalar => "scalar",
            Level::V3 => "avx2",
            Level::V4 => "avx512",
        }
    }

    /// Whether this processor can run the level.
    pub fn available(self) -> bool {
        arch_for(self).is_some()
    }

    /// The widest level this processor runs.
    pub fn best() -> Level {
        [Level::V4, Level::V3]
            .into_iter()
            .find(|l| l.available())
            .unwrap_or(Level::Scalar)
    }

    fn code(self) -> u8 {
        match self {
            Level::Scalar => 1,
            Level::V3 => 2,
            Level::V4 => 3,
        }
    }
}

/// The level pinned by [`force_level`] (0: none, the best is used).
static FORCED: AtomicU8 = AtomicU8::new(0);

/// Pins every later `dispatch` (in every thread) to `level`, or back to
/// the best available with `None`. Returns `false`, and changes nothing,
/// when the processor cannot run `level`.
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
pub fn force_level(level: Option<Level>) -> bool {
    match level {
        None => {
            FORCED.store(0, Ordering::Relaxed);
            true
        }
        Some(l) if l.available() => {
            FORCED.store(l.code(), Ordering::Relaxed);
            true
        }
        Some(_) => false,
    }
}

/// The level `dispatch` runs at now.
pub fn current_level() -> Level {
    match FORCED.load(Ordering::Relaxed) {
        1 => Level::Scalar,
        2 => Level::V3,
        3 => Level::V4,
        _ => Level::best(),
    }
}

/// pulp's token for `level`, `None` when the processor cannot run it.
#[cfg(target_arch = "x86_64")]
fn arch_for(level: Level) -> Option<pulp::Arch> {
    use pulp::x86::{V3, V4};
    match level {
        Level::Scalar => Some(pulp::Arch::Scalar),
        Level::V3 => V3::try_new().map(pulp::Arch::V3),
        Level::V4 => V4::try_new().map(pulp::Arch::V4),
    }
}

/// pulp's token for `level`, `None` when the processor cannot run it.
#[cfg(not(target_arch = "x86_64"))]
fn arch_for(level: Level) -> Option<pulp::Arch> {
    match level {
        Level::Scalar => Some(pulp::Arch::new()),
        Level::V3 | Level::V4 => None,
    }
}

/// The token `dispatch` uses: the pinned level if any, else the best.
#[inline(always)]
fn arch() -> pulp::Arch {
    match FORCED.load(Ordering::Relaxed) {
        0 => pulp::Arch::new(),
        _ => arch_for(current_level()).unwrap_or_default(),
    }
}

/// Runs `f` compiled for the best instruction set this processor has (or
/// the level pinned by [`force_level`]).
///
/// `f` must be a closure marked `#[inline(always)]`: only code inlined into
/// pulp's per-level functions is compiled with their instructions. A closure
/// left to the inliner is compiled once for the baseline, and each of its
/// `mul_add`s becomes a call to the software fused multiply-add
/// (`tests/dispatch.rs` checks every call site).
#[inline(always)]
pub(crate) fn dispatch<R>(f: impl FnOnce() -> R) -> R {
    struct Op<F>(F);
    impl<R, F: FnOnce() -> R> WithSimd for Op<F> {
        type Output = R;
        #[inline(always)]
        fn with_simd<S: Simd>(self, _simd: S) -> R {
            (self.0)()
        }
    }
    arch().dispatch(Op(f))
}

/// Runs a kernel written against pulp's vector types (`op.with_simd`) at
/// the best instruction set this processor has (or the level pinned by
/// [`force_level`]).
#[inline(always)]
pub(crate) fn dispatch_simd<W: WithSimd>(op: W) -> W::Output {
    arch().dispatch(op)
}

/// [`dispatch_simd`] at `level` whatever is pinned (for tests that compare
/// the levels without touching the process-wide setting); `None` when the
/// processor cannot run it.
#[cfg(test)]
pub(crate) fn dispatch_simd_at<W: WithSimd>(level: Level, op: W) -> Option<W::Output> {
    arch_for(level).map(|a| a.dispatch(op))
}

/// Independent accumulator chains of [`fma_loop`]: enough to keep two
/// fused multiply-add pipes of latency up to six busy, few enough to stay
/// in the sixteen vector registers of AVX2.
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
const FMA_CHAINS: usize = 12;

/// A register-resident loop of fused multiply-adds at `level` (the
/// baseline level, which has no fused unit, does a multiply and an add):
/// `iterations` rounds over `FMA_CHAINS` independent vector chains.
/// Returns the floating-point operations done (two per lane and chain and
/// round) and a checksum that depends on every round; `None` when the
/// processor cannot run `level`. The peak-rate probe of the benchmarks.
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
pub fn fma_loop(level: Level, iterations: usize) -> Option<(f64, f64)> {
    struct Op {
        iterations: usize,
        a: f64,
        b: f64,
    }
    impl WithSimd for Op {
        type Output = (f64, f64);
        #[inline(always)]
        fn with_simd<S: Simd>(self, simd: S) -> (f64, f64) {
            let a = simd.splat_f64s(self.a);
            let b = simd.splat_f64s(self.b);
            let mut acc = [simd.splat_f64s(0.0); FMA_CHAINS];
            for _ in 0..self.iterations {
                for c in acc.iter_mut() {
                    *c = simd.mul_add_f64s(a, *c, b);
                }
            }
            let mut total = simd.splat_f64s(0.0);
            for c in acc {
                total = simd.add_f64s(total, c);
            }
            let flops = (2 * FMA_CHAINS * S::F64_LANES) as f64 * self.iterations as f64;
            (flops, simd.reduce_sum_f64s(total))
        }
    }
    // `a` slightly below one keeps every chain bounded; black_box keeps the
    // constants opaque to the optimiser.
    let a = std::hint::black_box(1.0 - 1.0 / 1024.0);
    let b = std::hint::black_box(0.5);
    if level == Level::Scalar {
        let mut acc = [0.0f64; FMA_CHAINS];
        for _ in 0..iterations {
            for c in acc.iter_mut() {
                *c = a * *c + b;
            }
            acc = std::hint::black_box(acc);
        }
        let flops = (2 * FMA_CHAINS) as f64 * iterations as f64;
        return Some((flops, acc.iter().sum()));
    }
    Some(arch_for(level)?.dispatch(Op { iterations, a, b }))
}

/// Calls `f(local_row, row)` for every row of `xb`, each row as a slice.
/// A block in standard (row-major, packed) order is split from one slice,
/// which costs nothing per row; other layouts with contiguous rows go
/// through one view per row. Returns `false` (after calling `f` on some
/// rows or none) when a row is not contiguous, or when `f` returns `false`.
#[inline(always)]
pub(crate) fn for_each_row<'a>(
    xb: ArrayView2<'a, f64>,
    mut f: impl FnMut(usize, &'a [f64]) -> bool,
) -> bool {
    let p = xb.ncols();
    if p > 0 {
        if let Some(all) = xb.to_slice() {
            for (local, row) in all.chunks_exact(p).enumerate() {
                if !f(local, row) {
                    return false;
                }
            }
            return true;
        }
    }
    for local in 0..xb.nrows() {
        match xb.index_axis_move(Axis(0), local).to_slice() {
            Some(xs) => {
                if !f(local, xs) {
                    return false;
                }
            }
            None => return false,
        }
    }
    true
}

/// Asks the processor to bring `values[at]` into the first-level cache
/// (nothing when `at` is past the end).
#[inline(always)]
pub(crate) fn prefetch(values: &[f64], at: usize) {
    #[cfg(target_arch = "x86_64")]
    if let Some(v) = values.get(at) {
        // SAFETY: a prefetch is a hint: it reads nothing architecturally
        // and never faults; the address is that of an element of `values`.
        unsafe {
            core::arch::x86_64::_mm_prefetch::<{ core::arch::x86_64::_MM_HINT_T0 }>(
                (v as *const f64).cast(),
            );
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = (values, at);
}

/// [`prefetch`] for every cache line of `values[from..from + len]` (one
/// value in eight, and the last: a line holds eight values).
#[inline(always)]
pub(crate) fn prefetch_span(values: &[f64], from: usize, len: usize) {
    let end = from + len;
    let mut at = from;
    while at < end {
        prefetch(values, at);
        at += 8;
    }
    if len > 0 {
        prefetch(values, end - 1);
    }
}

/// `out[j] = sw * ((x[j] - m[j]) * inv[j])` for `j < x.len()`.
#[inline(always)]
pub(crate) fn center_scale(x: &[f64], m: &[f64], inv: &[f64], sw: f64, out: &mut [f64]) {
    let n = x.len();
    let (m, inv, out) = (&m[..n], &inv[..n], &mut out[..n]);
    for j in 0..n {
        out[j] = sw * ((x[j] - m[j]) * inv[j]);
    }
}

/// `sum_j (x[j] - m[j]) * b[j]`, in eight lanes reduced in a fixed order
/// (each term added by one fused multiply-add).
#[inline(always)]
pub(crate) fn centered_dot(x: &[f64], m: &[f64], b: &[f64]) -> f64 {
    let n = x.len();
    let (m, b) = (&m[..n], &b[..n]);
    let mut acc = [0.0f64; LANES];
    let whole = n - n % LANES;
    let mut j = 0;
    while j < whole {
        let (xs, ms, bs) = (&x[j..j + LANES], &m[j..j + LANES], &b[j..j + LANES]);
        for l in 0..LANES {
            acc[l] = (xs[l] - ms[l]).mul_add(bs[l], acc[l]);
        }
        j += LANES;
    }
    for (l, jj) in (whole..n).enumerate() {
        acc[l] = (x[jj] - m[jj]).mul_add(b[jj], acc[l]);
    }
    reduce(acc)
}

/// `sum_j (x_r[j] - m[j]) * b[j]` for four rows at once (four independent
/// chains of eight lanes, sharing the loads of `m` and `b`); each row's sum
/// is formed exactly as [`centered_dot`] forms it.
#[inline(always)]
pub(crate) fn centered_dot4(x: [&[f64]; 4], m: &[f64], b: &[f64]) -> [f64; 4] {
    let n = m.len().min(b.len());
    let x = [&x[0][..n], &x[1][..n], &x[2][..n], &x[3][..n]];
    let mut acc = [[0.0f64; LANES]; 4];
    let whole = n - n % LANES;
    let mut j = 0;
    while j < whole {
        let (ms, bs) = (&m[j..j + LANES], &b[j..j + LANES]);
        for (a, xr) in acc.iter_mut().zip(&x) {
            let xs = &xr[j..j + LANES];
            for l in 0..LANES {
                a[l] = (xs[l] - ms[l]).mul_add(bs[l], a[l]);
            }
        }
        j += LANES;
    }
    for (a, xr) in acc.iter_mut().zip(&x) {
        for (l, jj) in (whole..n).enumerate() {
            a[l] = (xr[jj] - m[jj]).mul_add(b[jj], a[l]);
        }
    }
    [
        reduce(acc[0]),
        reduce(acc[1]),
        reduce(acc[2]),
        reduce(acc[3]),
    ]
}

/// `sum_i (x[i] - m) * u[i]` (`u` at least as long as `x`), in eight lanes
/// reduced in a fixed order (each term added by one fused multiply-add).
#[inline(always)]
pub(crate) fn shifted_dot(x: &[f64], m: f64, u: &[f64]) -> f64 {
    let n = x.len();
    let u = &u[..n];
    let mut acc = [0.0f64; LANES];
    let whole = n - n % LANES;
    let mut j = 0;
    while j < whole {
        let (xs, us) = (&x[j..j + LANES], &u[j..j + LANES]);
        for l in 0..LANES {
            acc[l] = (xs[l] - m).mul_add(us[l], acc[l]);
        }
        j += LANES;
    }
    for (l, jj) in (whole..n).enumerate() {
        acc[l] = (x[jj] - m).mul_add(u[jj], acc[l]);
    }
    reduce(acc)
}

/// `acc[j] += u * (x[j] - m[j])` by one fused multiply-add per entry, for
/// `j` below the shortest of the three lengths.
#[inline(always)]
pub(crate) fn centered_axpy(acc: &mut [f64], u: f64, x: &[f64], m: &[f64]) {
    let n = acc.len().min(x.len()).min(m.len());
    let (acc, x, m) = (&mut acc[..n], &x[..n], &m[..n]);
    for j in 0..n {
        acc[j] = u.mul_add(x[j] - m[j], acc[j]);
    }
}

/// Sum of the lanes in a fixed (pairwise) order.
#[inline(always)]
pub(crate) fn reduce(a: [f64; LANES]) -> f64 {
    ((a[0] + a[4]) + (a[2] + a[6])) + ((a[1] + a[5]) + (a[3] + a[7]))
}

/// Adds `x` into eight lane accumulators.
#[inline(always)]
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
pub(crate) fn accumulate(x: &[f64], acc: &mut [f64; LANES]) {
    let n = x.len();
    let whole = n - n % LANES;
    let mut j = 0;
    while j < whole {
        let xs = &x[j..j + LANES];
        for l in 0..LANES {
            acc[l] += xs[l];
        }
        j += LANES;
    }
    for (l, jj) in (whole..n).enumerate() {
        acc[l] += x[jj];
    }
}

/// Per-column running summaries of one chunk of rows, updated one row at a
/// time (vectorised across the columns). Sums are compensated: `sum + comp`
/// carries the exact rounding errors (Knuth's two-sum, branch-free).
pub(crate) struct ColumnSummary {
    pub sum: Vec<f64>,
    pub comp: Vec<f64>,
    pub min: Vec<f64>,
    pub max: Vec<f64>,
    /// Smallest and largest value over every row, zero weights included.
    pub all_min: Vec<f64>,
    pub all_max: Vec<f64>,
    /// `sum_i 0 * x_ij`: 0 while every value seen is finite, NaN after.
    pub check: Vec<f64>,
    /// `sum_i c_i x_ij` over every row, with the row multipliers `c_i` of
    /// the problem's fingerprint.
    pub mix: Vec<f64>,
}

impl ColumnSummary {
    pub fn new(p: usize) -> Self {
        ColumnSummary {
            sum: vec![0.0; p],
            comp: vec![0.0; p],
            min: vec![f64::INFINITY; p],
            max: vec![f64::NEG_INFINITY; p],
            all_min: vec![f64::INFINITY; p],
            all_max: vec![f64::NEG_INFINITY; p],
            check: vec![0.0; p],
            mix: vec![0.0; p],
        }
    }

    /// Takes row `x` with weight `w` (> 0) and fingerprint multiplier `c`
    /// into the summaries.
    #[inline(always)]
    pub fn add_row(&mut self, x: &[f64], w: f64, weighted: bool, mult: f64) {
        let n = x.len();
        let s = &mut self.sum[..n];
        let c = &mut self.comp[..n];
        let lo = &mut self.min[..n];
        let hi = &mut self.max[..n];
        let ck = &mut self.check[..n];
        for j in 0..n {
            let v = x[j];
            ck[j] += v * 0.0;
            let a = if weighted { w * v } else { v };
            let (t, e) = crate::scaled::two_sum(s[j], a);
            c[j] += e;
            s[j] = t;
            lo[j] = if v < lo[j] { v } else { lo[j] };
            hi[j] = if v > hi[j] { v } else { hi[j] };
        }
        self.extremes(x, mult);
    }

    /// Checks row `x` (weight zero) for finiteness and takes its extremes
    /// and fingerprint only.
    #[inline(always)]
    pub fn check_row(&mut self, x: &[f64], c: f64) {
        let n = x.len();
        let ck = &mut self.check[..n];
        for j in 0..n {
            ck[j] += x[j] * 0.0;
        }
        self.extremes(x, c);
    }

    #[inline(always)]
    fn extremes(&mut self, x: &[f64], c: f64) {
        let n = x.len();
        let lo = &mut self.all_min[..n];
        let hi = &mut self.all_max[..n];
        let mix = &mut self.mix[..n];
        for j in 0..n {
            let v = x[j];
            lo[j] = if v < lo[j] { v } else { lo[j] };
            hi[j] = if v > hi[j] { v } else { hi[j] };
            mix[j] += c * v;
        }
    }

    /// Whether every value seen was finite.
    pub fn all_finite(&self) -> bool {
        self.check.iter().all(|c| *c == 0.0)
    }
}
