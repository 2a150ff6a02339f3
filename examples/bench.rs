//! Times the solvers on a seeded design of your shape against the floors of
//! their own work, measured in the same run.
//!
//! ```text
//! cargo run --release --features bench-support --example bench -- --rows 1000000 --cols 100
//! cargo run --release --features bench-support --example bench -- --rows 200000 --cols 50 --solvers qr,cholesky --threads 1 --json
//! ```
//!
//! Options: `--rows N` (default 100000), `--cols P` (default 50),
//! `--solvers a,b,...` (default: every solver in [`SOLVERS`]),
//! `--threads T` (default: rayon's global pool; otherwise every pass runs
//! inside a pool of T threads), `--repeats R` (timed rounds after one
//! warm-up, default 5; the median is reported), `--seed S`, `--no-intercept`,
//! `--no-baselines` (skip the straightforward versions), `--col-major` (store
//! the design column by column instead of row by row), `--json` (one JSON
//! object per line instead of the table), `--backend faer|lapack` (the
//! library of the `p x p` and stacked factorisations, see
//! `leastline::set_backend`; `lapack` needs the cargo feature
//! `lapack-openblas-system` or `lapack-openblas-static`; default: the
//! build's default, LAPACK when compiled in).
//!
//! Floors: `gram` is the symmetric Gram matrix of the centered, scaled design
//! with the target column, over row blocks in parallel (the work every
//! closed-form solver must at least do); `stream` is one read of the design
//! (the work of one gradient iteration). Each solver's ratio is to the floor
//! of its kind. Baselines (`obvious-*`) are the same methods written the
//! straightforward way with faer's high-level API on a column-major copy of
//! `[1 | X]` made before the clock starts (so the copy is not charged to
//! them; it is held through all the rounds, so with baselines the bench
//! holds the design twice). `extra` is the peak memory a run allocated
//! beyond what was live before it, counted by a global allocator in this
//! example.
//!
//! Rounds: every entry (floors, passes, solvers, baselines, state paths) runs
//! once to warm up, then `R` rounds each run every entry once, in the order
//! of the table. A ratio of two entries is the median over the rounds of the
//! ratio of their two runs in the same round, seconds apart, so that the
//! host's speed, which can move by a factor of two within minutes on a
//! shared machine, moves both sides of each ratio together.
//!
//! Physical limits, measured in the same run before the rows: the peak rate
//! of fused multiply-adds (a register-resident loop at each instruction set
//! the processor runs, AVX-512, AVX2 + FMA and the baseline; one thread and
//! every thread of the pool) and the read bandwidth (a parallel streaming
//! sum over a buffer of `--stream-mib` MiB, default 1024, far larger than
//! the caches). Every row then gets a limit: the seconds its own work takes
//! at those rates, `max(flops / peak, bytes / bandwidth)` with the peak of
//! the widest unit on every thread of the pool, and its ratio to that limit.
//! The work of each row, with `n` rows, `p` columns, `k = p + 1` (the
//! centered design with the target column), `c` unknowns of the baselines
//! (`p`, plus one with an intercept), `t` targets and `f = 8` bytes a value:
//!
//! | row | flops | bytes read |
//! |-----|-------|------------|
//! | `gram` | `n k (k + 1)` (the symmetric half) | `f n k` |
//! | `stream` | `n p` | `f n p` |
//! | `validate`, `fill` | `n p` | `f n k` |
//! | `residuals` | `2 n p` | `f n k` |
//! | `tsqr` | `2 n k^2 - 2 k^3 / 3` | `f n k` |
//! | `cholesky`, `ridge` | `n k (k + 1) + 2 n p` | `2 f n k` (Gram pass, residual pass) |
//! | `qr`, `qr-refined`, `svd` | `2 n k^2 - 2 k^3 / 3 + 2 n p` | `2 f n k` |
//! | `cholesky-state` | `n (p + t) (p + t + 1)` | `f n (p + t)` |
//! | `qr-state` | `2 n (p + t)^2 - 2 (p + t)^3 / 3` | `f n (p + t)` |
//! | `gradient-step` | `4 n p` | `f n k` |
//! | `accelerated` | `4 n p` per iteration run | `f n k` per iteration |
//! | `obvious-normal` | `2 n c^2 + 2 n c` | `f n (c + 1)` |
//! | `obvious-qr`, `obvious-svd` | `2 n c^2 - 2 c^3 / 3` | `f n (c + 1)` |
//! | `reference-svd` | `4 n c^2 - 4 c^3 / 3` (bidiagonalisation) | `f n (c + 1)` |
//!
//! Only the terms that grow with `n` (and the leading cubic term of the
//! factorisations) are counted, so every limit is a lower bound on the
//! time of that work on this machine.
//!
//! Many targets and blocks: `--targets K` fits `K` targets over the one
//! design through the fit states (`qr-state`, `cholesky-state`; target
//! `t` is the seeded target plus `t / 10` times column `t mod p`), timed
//! beside the same states with one target; `--blocks B` (default 64) splits
//! the rows into `B` consecutive blocks, each absorbed into its own state in
//! parallel through the public [`leastline::FitState`] API, the states
//! merged in a fixed binary tree (the same tree on any thread count) and
//! finished. `--reference` adds `reference-svd`, a general-purpose float64
//! library's one-call least-squares solve (nalgebra's `SVD::solve` on the
//! dense `[1 | X]`, single-threaded as that library runs; timed once after
//! the matrix is built, since one run takes many seconds on large shapes).

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

use faer::linalg::solvers::SolveLstsq;
use faer::{Mat, Par};
use leastline::bench_support as floors;
use leastline::{
    Accelerated, Cholesky, CrossProductState, FitState, GradientDescent, Problem, Qr, Ridge,
    Solver, Svd, TriangleState,
};
use ndarray::{s, Array1, Array2, ArrayView2, ShapeBuilder};

#[path = "support/design.rs"]
mod design;
use design::make_data;

// ---------------------------------------------------------------------------
// Counting allocator: live bytes and the peak since the last reset.

struct Counting;

static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let ptr = System.alloc(layout);
        if !ptr.is_null() {
            let now = LIVE.fetch_add(layout.size(), Ordering::Relaxed) + layout.size();
            PEAK.fetch_max(now, Ordering::Relaxed);
        }
        ptr
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        let ptr = System.alloc_zeroed(layout);
        if !ptr.is_null() {
            let now = LIVE.fetch_add(layout.size(), Ordering::Relaxed) + layout.size();
            PEAK.fetch_max(now, Ordering::Relaxed);
        }
        ptr
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout);
        LIVE.fetch_sub(layout.size(), Ordering::Relaxed);
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        let out = System.realloc(ptr, layout, new_size);
        if !out.is_null() {
            if new_size >= layout.size() {
                let now = LIVE.fetch_add(new_size - layout.size(), Ordering::Relaxed)
                    + (new_size - layout.size());
                PEAK.fetch_max(now, Ordering::Relaxed);
            } else {
                LIVE.fetch_sub(layout.size() - new_size, Ordering::Relaxed);
            }
        }
        out
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

/// CPU time of the whole process (all threads) in seconds, from Linux's
/// per-thread scheduler statistics; `None` elsewhere.
fn cpu_seconds() -> Option<f64> {
    let mut total = 0u64;
    for entry in std::fs::read_dir("/proc/self/task").ok()? {
        let path = entry.ok()?.path().join("schedstat");
        let text = std::fs::read_to_string(path).ok()?;
        total += text.split_whitespace().next()?.parse::<u64>().ok()?;
    }
    Some(total as f64 * 1e-9)
}

/// One run: wall seconds, CPU seconds of all threads, extra bytes at peak.
struct Sample {
    wall: f64,
    cpu: f64,
    extra: usize,
}

/// Runs `f` once and measures it.
fn measure(f: &mut dyn FnMut() -> f64) -> Sample {
    let before = LIVE.load(Ordering::Relaxed);
    PEAK.store(before, Ordering::Relaxed);
    let c0 = cpu_seconds();
    let t = Instant::now();
    let out = f();
    let wall = t.elapsed().as_secs_f64();
    let cpu = match (c0, cpu_seconds()) {
        (Some(a), Some(b)) => b - a,
        _ => f64::NAN,
    };
    std::hint::black_box(out);
    let extra = PEAK.load(Ordering::Relaxed).saturating_sub(before);
    Sample { wall, cpu, extra }
}

// ---------------------------------------------------------------------------
// The registries. Append a line to extend them.

/// Solvers by name. Each entry also names the floor its ratio refers to.
type Maker = fn() -> Box<dyn Solver>;
const SOLVERS: &[(&str, Floor, Maker)] = &[
    ("qr", Floor::Gram, || Box::new(Qr::new())),
    ("cholesky", Floor::Gram, || Box::new(Cholesky::new())),
    ("svd", Floor::Gram, || Box::new(Svd::new())),
    ("qr-refined", Floor::Gram, || Box::new(Qr::refined())),
    ("ridge", Floor::Gram, || Box::new(Ridge::new(1.0))),
    ("accelerated", Floor::Stream, || {
        Box::new(Accelerated::new().with_tolerance(1e-8))
    }),
];

/// The state paths (their own loop: blocks absorbed in parallel, merged).
const STATE_SOLVERS: &[&str] = &["qr-state", "cholesky-state"];

/// The name of the timed single full-gradient iteration (not a solver of
/// its own: ten fixed-step iterations minus the set-up, divided by ten).
const GRADIENT_STEP: &str = "gradient-step";

/// Straightforward versions, each beside the solver it is compared with.
type Obvious = fn(&Dense) -> f64;
const BASELINES: &[(&str, &str, Obvious)] = &[
    ("obvious-normal", "cholesky", obvious_normal),
    ("obvious-qr", "qr", obvious_qr),
    ("obvious-svd", "svd", obvious_svd),
];

#[derive(Clone, Copy, PartialEq, Debug)]
enum Floor {
    /// Symmetric Gram of the centered design (closed-form solvers).
    Gram,
    /// One read of the design (one gradient iteration).
    #[allow(dead_code)]
    Stream,
}

impl Floor {
    fn name(self) -> &'static str {
        match self {
            Floor::Gram => "gram",
            Floor::Stream => "stream",
        }
    }
}

// ---------------------------------------------------------------------------
// Straightforward versions with faer's high-level API.

/// `[1 | X]` (or `X`) as a column-major faer matrix, and the target.
struct Dense {
    a: Mat<f64>,
    y: Mat<f64>,
}

fn dense(x: &Array2<f64>, y: &Array1<f64>, intercept: bool) -> Dense {
    let (n, p) = x.dim();
    let off = usize::from(intercept);
    let a = Mat::from_fn(
        n,
        p + off,
        |i, j| if j < off { 1.0 } else { x[(i, j - off)] },
    );
    let y = Mat::from_fn(n, 1, |i, _| y[i]);
    Dense { a, y }
}

/// `A^T A` by a general product with faer's default parallelism, `A^T y`,
/// Cholesky and two triangular solves.
fn obvious_normal(d: &Dense) -> f64 {
    use faer::linalg::solvers::Solve;
    let par = Par::rayon(0);
    let k = d.a.ncols();
    let mut g = Mat::<f64>::zeros(k, k);
    faer::linalg::matmul::matmul(
        g.as_mut(),
        faer::Accum::Replace,
        d.a.transpose(),
        d.a.as_ref(),
        1.0,
        par,
    );
    let mut rhs = Mat::<f64>::zeros(k, 1);
    faer::linalg::matmul::matmul(
        rhs.as_mut(),
        faer::Accum::Replace,
        d.a.transpose(),
        d.y.as_ref(),
        1.0,
        par,
    );
    match g.llt(faer::Side::Lower) {
        Ok(llt) => llt.solve(rhs.as_ref())[(k - 1, 0)],
        Err(_) => f64::NAN,
    }
}

/// Householder QR of the whole tall matrix, then the least-squares solve.
fn obvious_qr(d: &Dense) -> f64 {
    let qr = d.a.qr();
    let b = qr.solve_lstsq(d.y.as_ref());
    b[(b.nrows() - 1, 0)]
}

/// Thin SVD of the whole tall matrix, then `V S^-1 U^T y`.
fn obvious_svd(d: &Dense) -> f64 {
    let Ok(svd) = d.a.thin_svd() else {
        return f64::NAN;
    };
    let (u, s, v) = (svd.U(), svd.S(), svd.V());
    let k = s.dim();
    let uty = u.transpose() * d.y.as_ref();
    let mut z = Mat::<f64>::zeros(k, 1);
    let cut = s[0] * f64::EPSILON * d.a.nrows() as f64;
    for i in 0..k {
        if s[i] > cut {
            z[(i, 0)] = uty[(i, 0)] / s[i];
        }
    }
    let b = v * z;
    b[(k - 1, 0)]
}

// ---------------------------------------------------------------------------
// Options and data.

struct Options {
    rows: usize,
    cols: usize,
    solvers: Vec<String>,
    threads: Option<usize>,
    repeats: usize,
    seed: u64,
    intercept: bool,
    baselines: bool,
    json: bool,
    col_major: bool,
    targets: usize,
    blocks: usize,
    reference: bool,
    stream_mib: usize,
    backend: leastline::Backend,
}

fn usage() -> ! {
    eprintln!(
        "usage: bench [--rows N] [--cols P] [--solvers a,b,...] [--threads T] [--repeats R] \
         [--seed S] [--no-intercept] [--no-baselines] [--col-major] [--json] \
         [--targets K] [--blocks B] [--reference] [--stream-mib M] [--backend faer|lapack]\nsolvers: {}",
        SOLVERS
            .iter()
            .map(|s| s.0)
            .chain([GRADIENT_STEP])
            .chain(STATE_SOLVERS.iter().copied())
            .collect::<Vec<_>>()
            .join(", ")
    );
    std::process::exit(2)
}

fn parse() -> Options {
    let mut o = Options {
        rows: 100_000,
        cols: 50,
        solvers: SOLVERS
            .iter()
            .map(|s| s.0.to_string())
            .chain([GRADIENT_STEP.to_string()])
            .chain(STATE_SOLVERS.iter().map(|s| s.to_string()))
            .collect(),
        threads: None,
        repeats: 5,
        seed: 20240611,
        intercept: true,
        baselines: true,
        json: false,
        col_major: false,
        targets: 1,
        blocks: 64,
        reference: false,
        stream_mib: 1024,
        backend: leastline::backend(),
    };
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        let mut value = || args.next().unwrap_or_else(|| usage());
        let number = |s: String| {
            s.replace('_', "")
                .parse::<usize>()
                .unwrap_or_else(|_| usage())
        };
        match a.as_str() {
            "--rows" => o.rows = number(value()),
            "--cols" => o.cols = number(value()),
            "--threads" => o.threads = Some(number(value())),
            "--repeats" => o.repeats = number(value()).max(1),
            "--seed" => o.seed = number(value()) as u64,
            "--solvers" => o.solvers = value().split(',').map(str::to_string).collect(),
            "--no-intercept" => o.intercept = false,
            "--no-baselines" => o.baselines = false,
            "--json" => o.json = true,
            "--col-major" => o.col_major = true,
            "--targets" => o.targets = number(value()).max(1),
            "--blocks" => o.blocks = number(value()).max(1),
            "--reference" => o.reference = true,
            "--stream-mib" => o.stream_mib = number(value()).max(1),
            "--backend" => {
                o.backend = match value().as_str() {
                    "faer" => leastline::Backend::Faer,
                    "lapack" => leastline::Backend::Lapack,
                    _ => usage(),
                }
            }
            _ => usage(),
        }
    }
    for s in &o.solvers {
        if s != GRADIENT_STEP
            && !STATE_SOLVERS.contains(&s.as_str())
            && !SOLVERS.iter().any(|e| e.0 == s)
        {
            eprintln!("unknown solver `{s}`");
            usage();
        }
    }
    o
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

/// One timed entry: median wall and CPU seconds over `repeats` runs after a
/// warm-up, the fastest run, and the largest extra allocation of the timed
/// runs (the warm-up is left out: it includes buffers that faer's
/// matrix-product backend allocates once per thread and keeps). Used for
/// the machine's limits, which are measured before the rows.
fn time(repeats: usize, f: &mut dyn FnMut() -> f64) -> Timing {
    measure(f);
    let samples: Vec<Sample> = (0..repeats).map(|_| measure(f)).collect();
    Timing::of(&samples)
}

struct Timing {
    seconds: f64,
    min: f64,
    cpu: f64,
    extra: usize,
}

impl Timing {
    /// Median wall and CPU seconds, the fastest run and the largest extra
    /// allocation of `samples`.
    fn of(samples: &[Sample]) -> Timing {
        let mut wall: Vec<f64> = samples.iter().map(|s| s.wall).collect();
        let mut cpu: Vec<f64> = samples.iter().map(|s| s.cpu).collect();
        Timing {
            seconds: median(&mut wall),
            min: wall.iter().copied().fold(f64::INFINITY, f64::min),
            cpu: median(&mut cpu),
            extra: samples.iter().map(|s| s.extra).max().unwrap_or(0),
        }
    }
}

/// What a timed entry's rate is measured in.
#[derive(Clone, Copy)]
enum Work {
    Flops(f64),
    Bytes(f64),
}

/// What a row of the table is: its name and kind, the floor of its ratio,
/// its work, and the targets and blocks of a state path (1 otherwise).
struct Spec {
    name: String,
    kind: &'static str,
    floor: Option<Floor>,
    work: Work,
    targets: usize,
    blocks: usize,
}

impl Spec {
    fn new(name: &str, kind: &'static str, floor: Option<Floor>, work: Work) -> Spec {
        Spec {
            name: name.to_string(),
            kind,
            floor,
            work,
            targets: 1,
            blocks: 1,
        }
    }
}

/// A row of the table: its spec and its timing.
struct Row {
    spec: Spec,
    t: Timing,
    /// Wall seconds of each round, in round order (one entry for a row
    /// timed once outside the rounds).
    walls: Vec<f64>,
}

impl Row {
    /// The row of `spec` timed by `samples` (in round order).
    fn of(spec: Spec, samples: &[Sample]) -> Row {
        Row {
            spec,
            t: Timing::of(samples),
            walls: samples.iter().map(|s| s.wall).collect(),
        }
    }

    fn rate(&self) -> (f64, &'static str) {
        match self.spec.work {
            Work::Flops(f) => (f / self.t.seconds * 1e-9, "GFLOP/s"),
            Work::Bytes(b) => (b / self.t.seconds * 1e-9, "GB/s"),
        }
    }
}

/// The ratio of `a`'s time to `b`'s: the median over the rounds of the two
/// runs of the same round (taken seconds apart, so a change of the host's
/// speed between the entries of a run does not enter it); the ratio of the
/// medians where one of them was not timed in the rounds.
fn ratio(a: &Row, b: &Row) -> f64 {
    if a.walls.len() == b.walls.len() && a.walls.len() > 1 {
        let mut r: Vec<f64> = a.walls.iter().zip(&b.walls).map(|(x, y)| x / y).collect();
        median(&mut r)
    } else {
        a.t.seconds / b.t.seconds
    }
}

/// An entry of the rounds: what it is and the run that is timed.
struct Entry<'a> {
    spec: Spec,
    run: Box<dyn FnMut() -> f64 + 'a>,
}

impl<'a> Entry<'a> {
    fn new(
        name: &str,
        kind: &'static str,
        floor: Option<Floor>,
        work: Work,
        run: impl FnMut() -> f64 + 'a,
    ) -> Entry<'a> {
        Entry {
            spec: Spec::new(name, kind, floor, work),
            run: Box::new(run),
        }
    }
}

/// Runs every entry once (the warm-up, not counted), then `repeats` rounds
/// that each run every entry once in order, and returns each entry's
/// samples in round order. Interleaving puts every entry's runs in the same
/// stretch of time as its floor's, so that their ratio does not depend on
/// how the host's speed moves during the run (it moved by a factor of two
/// within minutes on the machine the README's numbers come from).
fn rounds(entries: &mut [Entry<'_>], repeats: usize) -> Vec<Vec<Sample>> {
    for e in entries.iter_mut() {
        measure(&mut e.run);
    }
    let mut samples: Vec<Vec<Sample>> = entries.iter().map(|_| Vec::new()).collect();
    for _ in 0..repeats {
        for (e, s) in entries.iter_mut().zip(&mut samples) {
            s.push(measure(&mut e.run));
        }
    }
    samples
}

/// Name of the rounds' fixed-step gradient fit with no iterations and with
/// ten (the gradient step is their difference over ten, round by round).
const GRADIENT_NONE: &str = "gradient-0";
const GRADIENT_TEN: &str = "gradient-10";

fn run(o: &Options) {
    let (n, p) = (o.rows, o.cols);
    let k = p + 1;
    let load_before = load_average();
    let limits = measure_limits(o);
    let (x, y) = make_data(n, p, o.seed);
    let x = if o.col_major {
        let mut f = Array2::<f64>::zeros((n, p).f());
        f.assign(&x);
        f
    } else {
        x
    };
    let build = || {
        Problem::builder(x.view(), y.view())
            .with_intercept(o.intercept)
            .build()
    };
    let problem = match build() {
        Ok(pr) => pr,
        Err(e) => {
            eprintln!("invalid problem: {e}");
            std::process::exit(1)
        }
    };
    let r = o.repeats;
    let bytes = Work::Bytes((n * p * 8) as f64);
    let gram_work = Work::Flops(floors::gram_flops(n, k));
    let qr_work = Work::Flops(floors::qr_flops(n, k));
    let mut accelerated_iterations = None;
    let beta = vec![0.25; p];
    // The straightforward least-squares calls need at least as many rows as
    // unknowns (they would stop the program otherwise).
    if o.baselines && n < k {
        eprintln!("baselines skipped: {n} rows < {k} unknowns");
    }
    let d = (o.baselines && n >= k).then(|| dense(&x, &y, o.intercept));
    let targets = state_targets(o, &x, &y);
    let problem = &problem;
    let mut entries: Vec<Entry<'_>> = vec![
        Entry::new("gram", "floor", None, gram_work, || {
            floors::gram_floor(problem)
        }),
        Entry::new("stream", "floor", None, bytes, || {
            floors::stream_floor(problem)
        }),
        Entry::new("validate", "pass", Some(Floor::Stream), bytes, || {
            build().map(|pr| pr.total_weight()).unwrap_or(f64::NAN)
        }),
        Entry::new("residuals", "pass", Some(Floor::Stream), bytes, || {
            floors::residual_pass(problem, &beta)
        }),
        Entry::new("fill", "pass", Some(Floor::Stream), bytes, || {
            floors::fill_pass(problem)
        }),
        Entry::new("tsqr", "pass", Some(Floor::Gram), qr_work, || {
            floors::tall_skinny_r(problem)
        }),
    ];

    for (name, floor, make) in SOLVERS {
        if !o.solvers.iter().any(|s| s == name) {
            continue;
        }
        let solver = make();
        match solver.fit(problem) {
            Err(err) => {
                eprintln!("{name}: {err}");
                continue;
            }
            Ok(fit) => {
                if *name == "accelerated" {
                    accelerated_iterations = fit.report.iterations.as_ref().map(|it| it.iterations);
                }
            }
        }
        let work = if *name == "cholesky" {
            gram_work
        } else {
            qr_work
        };
        entries.push(Entry::new(name, "solver", Some(*floor), work, move || {
            solver
                .fit(problem)
                .map_or(f64::NAN, |fit| fit.report.residual_sum_of_squares)
        }));
    }

    // One full-gradient iteration: a fit of ten iterations at a fixed step
    // minus a fit of none (the set-up passes), divided by ten.
    if o.solvers.iter().any(|s| s == GRADIENT_STEP) {
        for (name, iterations) in [(GRADIENT_NONE, 0), (GRADIENT_TEN, 10)] {
            let fixed = GradientDescent::new()
                .with_step(0.1)
                .with_max_iterations(iterations)
                .with_history_stride(0);
            entries.push(Entry::new(name, "part", None, bytes, move || {
                fixed
                    .fit(problem)
                    .map_or(f64::NAN, |f| f.report.residual_sum_of_squares)
            }));
        }
    }

    if let Some(d) = &d {
        for (name, versus, f) in BASELINES {
            if !o.solvers.iter().any(|s| s == versus) {
                continue;
            }
            let work = if *versus == "cholesky" {
                Work::Flops(2.0 * n as f64 * (k * k) as f64)
            } else {
                qr_work
            };
            entries.push(Entry::new(
                name,
                "baseline",
                Some(Floor::Gram),
                work,
                || f(d),
            ));
        }
    }

    state_entries(o, &x, &targets, &mut entries);

    let samples = rounds(&mut entries, r);
    let mut rows: Vec<Row> = Vec::new();
    let mut parts: Vec<Vec<Sample>> = Vec::new();
    for (e, s) in entries.into_iter().zip(samples) {
        if e.spec.kind == "part" {
            parts.push(s);
            continue;
        }
        rows.push(Row::of(e.spec, &s));
    }
    if let [none, ten] = &parts[..] {
        let per = |a: f64, b: f64| ((b - a) / 10.0).max(0.0);
        let step: Vec<Sample> = none
            .iter()
            .zip(ten)
            .map(|(a, b)| Sample {
                wall: per(a.wall, b.wall),
                cpu: per(a.cpu, b.cpu),
                extra: b.extra,
            })
            .collect();
        rows.push(Row::of(
            Spec::new(GRADIENT_STEP, "solver", Some(Floor::Stream), bytes),
            &step,
        ));
    }

    if o.reference {
        reference_row(o, &x, &y, &mut rows);
    }
    let load_after = load_average();

    let floor_row = |f: Floor, rows: &'_ [Row]| {
        rows.iter()
            .position(|row| row.spec.kind == "floor" && row.spec.name == f.name())
    };
    let threads = rayon::current_num_threads();
    if o.json {
        for row in &rows {
            let (rate, unit) = row.rate();
            let mut obj = serde_json::json!({
                "solver": row.spec.name,
                "kind": row.spec.kind,
                "rows": n,
                "cols": p,
                "intercept": o.intercept,
                "threads": threads,
                "backend": o.backend.name(),
                "seconds": row.t.seconds,
                "min_seconds": row.t.min,
                "cpu_seconds": row.t.cpu,
                "extra_bytes": row.t.extra,
                "targets": row.spec.targets,
                "blocks": row.spec.blocks,
                "peak_gflops": limits.peak_all,
                "peak_gflops_one_thread": limits.peak_one,
                "read_gbps": limits.read_gbps,
            });
            if let Some(map) = obj.as_object_mut() {
                let key = if unit == "GB/s" {
                    "gbytes_per_s"
                } else {
                    "gflops"
                };
                map.insert(key.into(), rate.into());
                let limit = limits.seconds(cost(row, o, accelerated_iterations));
                map.insert("limit_seconds".into(), limit.into());
                map.insert("ratio_to_limit".into(), (row.t.seconds / limit).into());
                if let Some((f, i)) = row.spec.floor.and_then(|f| Some((f, floor_row(f, &rows)?))) {
                    map.insert("floor".into(), f.name().into());
                    map.insert("floor_seconds".into(), rows[i].t.seconds.into());
                    map.insert("ratio".into(), ratio(row, &rows[i]).into());
                }
            }
            println!("{obj}");
        }
        return;
    }
    println!(
        "leastline bench: {n} rows x {p} columns, intercept {}, {threads} threads, backend {}, median of {r} rounds",
        o.intercept,
        o.backend.name()
    );
    limits.print(&load_before, &load_after);
    println!(
        "{:<18} {:<8} {:>9} {:>9} {:>9} {:>15} {:>14} {:>10} {:>9} {:>8}",
        "name",
        "kind",
        "median s",
        "min s",
        "cpu s",
        "rate",
        "ratio to floor",
        "extra MiB",
        "limit s",
        "x limit"
    );
    for row in &rows {
        let ratio = row
            .spec
            .floor
            .and_then(|f| Some((f, floor_row(f, &rows)?)))
            .map(|(f, i)| format!("{:.2} x {}", ratio(row, &rows[i]), f.name()))
            .unwrap_or_else(|| "-".into());
        let (rate, unit) = row.rate();
        let limit = limits.seconds(cost(row, o, accelerated_iterations));
        let name = if row.spec.targets > 1 {
            format!("{} t={}", row.spec.name, row.spec.targets)
        } else {
            row.spec.name.clone()
        };
        println!(
            "{:<18} {:<8} {:>9.4} {:>9.4} {:>9.4} {:>15} {:>14} {:>10.1} {:>9.4} {:>8.2}",
            name,
            row.spec.kind,
            row.t.seconds,
            row.t.min,
            row.t.cpu,
            format!("{rate:.1} {unit}"),
            ratio,
            row.t.extra as f64 / (1u64 << 20) as f64,
            limit,
            row.t.seconds / limit
        );
    }
    print_checks(&rows, &limits, o);
}

// ---------------------------------------------------------------------------
// Physical limits of this machine, measured in the same run.

/// Peak rates and bandwidth measured before the rows.
struct Limits {
    /// (level, GFLOP/s on one thread, GFLOP/s on every thread of the pool)
    levels: Vec<(floors::Level, f64, f64)>,
    /// Widest level's GFLOP/s, one thread and every thread.
    peak_one: f64,
    peak_all: f64,
    /// Streaming read, GB/s, every thread.
    read_gbps: f64,
}

impl Limits {
    /// The seconds of `(flops, bytes)` at the peak rate and the bandwidth.
    fn seconds(&self, (flops, bytes): (f64, f64)) -> f64 {
        (flops / (self.peak_all * 1e9)).max(bytes / (self.read_gbps * 1e9))
    }

    fn print(&self, before: &str, after: &str) {
        println!(
            "machine: {} ({} logical CPUs); load average before {before}, after {after}",
            cpu_model(),
            std::thread::available_parallelism().map_or(0, |n| n.get())
        );
        for (level, one, all) in &self.levels {
            println!(
                "fma peak {:<7} {:>8.1} GFLOP/s 1 thread {:>8.1} GFLOP/s all threads",
                level.name(),
                one,
                all
            );
        }
        println!(
            "read bandwidth {:.1} GB/s (all threads); limit = max(flops / {:.1} GFLOP/s, bytes / {:.1} GB/s)",
            self.read_gbps, self.peak_all, self.read_gbps
        );
    }
}

/// The first `model name` of /proc/cpuinfo, or `unknown`.
fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|t| {
            t.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split(':').nth(1))
                .map(|m| m.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into())
}

/// The three load averages of /proc/loadavg, or `?`.
fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .ok()
        .map(|t| t.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|| "?".into())
}

/// Rounds of the FMA loop per timed run (about 0.05 s at AVX-512 rates).
const FMA_ROUNDS: usize = 20_000_000;

fn measure_limits(o: &Options) -> Limits {
    let r = o.repeats;
    let mut levels = Vec::new();
    for level in floors::Level::ALL.into_iter().rev() {
        let Some((flops_one, _)) = floors::fma_loop(level, FMA_ROUNDS) else {
            if !o.json {
                eprintln!("fma peak {}: not on this processor", level.name());
            }
            continue;
        };
        let one = time(r, &mut || {
            floors::fma_loop(level, FMA_ROUNDS).map_or(f64::NAN, |v| v.1)
        });
        let flops_all = floors::fma_loop_all_threads(level, FMA_ROUNDS).map_or(f64::NAN, |v| v.0);
        let all = time(r, &mut || {
            floors::fma_loop_all_threads(level, FMA_ROUNDS).map_or(f64::NAN, |v| v.1)
        });
        levels.push((
            level,
            flops_one / one.seconds * 1e-9,
            flops_all / all.seconds * 1e-9,
        ));
    }
    let (peak_one, peak_all) = levels.first().map_or((f64::NAN, f64::NAN), |l| (l.1, l.2));
    let len = o.stream_mib * (1 << 20) / 8;
    let buf = vec![1.0f64; len];
    let t = time(r, &mut || floors::stream_sum(&buf));
    let read_gbps = (len * 8) as f64 / t.seconds * 1e-9;
    Limits {
        levels,
        peak_one,
        peak_all,
        read_gbps,
    }
}

/// `(flops, bytes)` of a row's own work: the formulas of the module docs.
fn cost(row: &Row, o: &Options, accelerated_iterations: Option<usize>) -> (f64, f64) {
    let (n, p) = (o.rows as f64, o.cols as f64);
    let k = p + 1.0;
    let c = p + if o.intercept { 1.0 } else { 0.0 };
    let t = row.spec.targets as f64;
    let f = 8.0;
    let gram = n * k * (k + 1.0);
    let qr = |m: f64| 2.0 * n * m * m - 2.0 * m * m * m / 3.0;
    match row.spec.name.as_str() {
        "gram" => (gram, f * n * k),
        "stream" => (n * p, f * n * p),
        "validate" | "fill" => (n * p, f * n * k),
        "residuals" => (2.0 * n * p, f * n * k),
        "tsqr" => (qr(k), f * n * k),
        "cholesky" | "ridge" => (gram + 2.0 * n * p, 2.0 * f * n * k),
        "qr" | "qr-refined" | "svd" => (qr(k) + 2.0 * n * p, 2.0 * f * n * k),
        "cholesky-state" => (n * (p + t) * (p + t + 1.0), f * n * (p + t)),
        "qr-state" => (qr(p + t), f * n * (p + t)),
        GRADIENT_STEP => (4.0 * n * p, f * n * k),
        "accelerated" => {
            let it = accelerated_iterations.unwrap_or(1) as f64;
            (it * 4.0 * n * p, it * f * n * k)
        }
        "obvious-normal" => (2.0 * n * c * c + 2.0 * n * c, f * n * (c + 1.0)),
        "reference-svd" => (4.0 * n * c * c - 4.0 * c * c * c / 3.0, f * n * (c + 1.0)),
        _ => (qr(c), f * n * (c + 1.0)),
    }
}

/// Prints the ratios the speed goals are stated in, each with its goal.
fn print_checks(rows: &[Row], limits: &Limits, o: &Options) {
    let find = |name: &str, targets: usize| {
        rows.iter()
            .find(|r| r.spec.name == name && r.spec.targets == targets)
    };
    let secs = |name: &str, targets: usize| find(name, targets).map(|r| r.t.seconds);
    let mut lines = Vec::new();
    if let Some(g) = secs("gram", 1) {
        let rate = floors::gram_flops(o.rows, o.cols + 1) / g * 1e-9;
        lines.push(format!(
            "gram at {:.0}% of the fma peak ({rate:.1} of {:.1} GFLOP/s; goal >= 60%)",
            100.0 * rate / limits.peak_all,
            limits.peak_all
        ));
    }
    let pairs: &[(&str, usize, &str, usize, &str)] = &[
        (
            "cholesky",
            1,
            "gram",
            1,
            "normal equations / gram (goal <= 1.3)",
        ),
        ("qr", 1, "gram", 1, "qr / gram (goal <= 2.5)"),
        ("svd", 1, "gram", 1, "svd / gram (goal <= 2.7)"),
        (
            GRADIENT_STEP,
            1,
            "stream",
            1,
            "gradient step / one read of X (goal <= 1.3)",
        ),
        (
            "cholesky",
            1,
            "stream",
            1,
            "normal equations / one read of X (goal <= 1.5 at 10,000,000 x 10)",
        ),
        ("qr-state", 1, "qr", 1, "qr-state / qr (fit alone)"),
        (
            "cholesky-state",
            1,
            "cholesky",
            1,
            "cholesky-state / cholesky (fit alone)",
        ),
        (
            "qr-state",
            o.targets,
            "qr-state",
            1,
            "qr-state many targets / one (goal <= 1.5)",
        ),
        (
            "cholesky-state",
            o.targets,
            "cholesky-state",
            1,
            "cholesky-state many targets / one (goal <= 1.5)",
        ),
        (
            "reference-svd",
            1,
            "qr",
            1,
            "reference one-call solve / qr (goal >= 20)",
        ),
    ];
    for &(a, ta, b, tb, what) in pairs {
        if a == b && ta == tb {
            continue;
        }
        if let (Some(x), Some(y)) = (find(a, ta), find(b, tb)) {
            lines.push(format!("{what}: {:.2}", ratio(x, y)));
        }
    }
    // A caller of the in-memory path pays the problem's validation pass
    // too; a state validates each block as it absorbs it.
    for (state, memory) in [("qr-state", "qr"), ("cholesky-state", "cholesky")] {
        if let (Some(x), Some(v), Some(y)) = (find(state, 1), find("validate", 1), find(memory, 1))
        {
            let mut r: Vec<f64> = (x.walls.iter().zip(&v.walls).zip(&y.walls))
                .map(|((x, v), y)| x / (v + y))
                .collect();
            lines.push(format!(
                "{state} / (validate + {memory}) (goal <= 1.1): {:.2}",
                median(&mut r)
            ));
        }
    }
    if !lines.is_empty() {
        println!("ratios (each the median over the rounds of the two runs of a round):");
        for l in lines {
            println!("  {l}");
        }
    }
}

// ---------------------------------------------------------------------------
// State paths: blocks absorbed in parallel, merged in a fixed tree.

/// `t` targets over the design: the seeded target, then the target plus
/// `j / 10` times column `j mod p` for `j = 1..t`.
fn targets_matrix(x: &Array2<f64>, y: &Array1<f64>, t: usize) -> Array2<f64> {
    let (n, p) = x.dim();
    Array2::from_shape_fn((n, t), |(i, j)| {
        if j == 0 || p == 0 {
            y[i]
        } else {
            y[i] + 0.1 * j as f64 * x[(i, j % p)]
        }
    })
}

/// Absorbs the rows of blocks `lo..hi` (of `blocks` equal splits of the
/// rows) into one state: one block alone, more split in halves absorbed in
/// parallel and merged (left absorbs right), a tree fixed by `blocks`.
fn absorb_tree<S: FitState + Send>(
    x: ArrayView2<'_, f64>,
    ys: ArrayView2<'_, f64>,
    (lo, hi, blocks): (usize, usize, usize),
    make: &(dyn Fn() -> leastline::Result<S> + Sync),
) -> leastline::Result<S> {
    let n = x.nrows();
    if hi - lo <= 1 {
        let (r0, r1) = (lo * n / blocks, hi * n / blocks);
        let mut s = make()?;
        s.absorb(x.slice(s![r0..r1, ..]), ys.slice(s![r0..r1, ..]), None)?;
        return Ok(s);
    }
    let mid = lo + (hi - lo) / 2;
    let (a, b) = rayon::join(
        || absorb_tree(x, ys, (lo, mid, blocks), make),
        || absorb_tree(x, ys, (mid, hi, blocks), make),
    );
    let mut a = a?;
    a.merge(&b?)?;
    Ok(a)
}

/// A state fit of every target; the sum of their residual sums of squares.
fn state_fit<S: FitState + Send>(
    x: ArrayView2<'_, f64>,
    ys: ArrayView2<'_, f64>,
    blocks: usize,
    make: &(dyn Fn() -> leastline::Result<S> + Sync),
) -> leastline::Result<f64> {
    let b = blocks.clamp(1, x.nrows().max(1));
    let state = absorb_tree(x, ys, (0, b, b), make)?;
    Ok(state
        .finish()?
        .iter()
        .map(|f| f.report.residual_sum_of_squares)
        .sum())
}

/// The target matrices of the state paths: one target and (with
/// `--targets K`) `K`; none when no state path was asked for.
fn state_targets(o: &Options, x: &Array2<f64>, y: &Array1<f64>) -> Vec<(usize, Array2<f64>)> {
    if !STATE_SOLVERS
        .iter()
        .any(|name| o.solvers.iter().any(|s| s == name))
    {
        return Vec::new();
    }
    let mut counts = vec![1];
    if o.targets > 1 {
        counts.push(o.targets);
    }
    counts
        .into_iter()
        .map(|t| (t, targets_matrix(x, y, t)))
        .collect()
}

/// Adds the state paths, one entry for each of `targets` and state.
fn state_entries<'a>(
    o: &'a Options,
    x: &'a Array2<f64>,
    targets: &'a [(usize, Array2<f64>)],
    entries: &mut Vec<Entry<'a>>,
) {
    let (n, p) = x.dim();
    for (t, ys) in targets {
        let t = *t;
        for &name in STATE_SOLVERS {
            if !o.solvers.iter().any(|s| s == name) {
                continue;
            }
            let run = move || -> leastline::Result<f64> {
                if name == "qr-state" {
                    state_fit(x.view(), ys.view(), o.blocks, &|| {
                        TriangleState::new(p, t, o.intercept)
                    })
                } else {
                    state_fit(x.view(), ys.view(), o.blocks, &|| {
                        CrossProductState::new(p, t, o.intercept)
                    })
                }
            };
            if let Err(err) = run() {
                eprintln!("{name} ({t} targets): {err}");
                continue;
            }
            let k = (p + t) as f64;
            let work = if name == "qr-state" {
                Work::Flops(2.0 * n as f64 * k * k - 2.0 * k * k * k / 3.0)
            } else {
                Work::Flops(n as f64 * k * (k + 1.0))
            };
            let mut entry = Entry::new(name, "solver", Some(Floor::Gram), work, move || {
                run().unwrap_or(f64::NAN)
            });
            entry.spec.targets = t;
            entry.spec.blocks = o.blocks.clamp(1, n.max(1));
            entries.push(entry);
        }
    }
}

// ---------------------------------------------------------------------------
// Reference: a general-purpose float64 library's one-call least squares.

/// nalgebra's SVD-based solve of `[1 | X] b = y` (or `X b = y`), timed once
/// after the dense matrix is built (the build is not charged).
fn reference_row(o: &Options, x: &Array2<f64>, y: &Array1<f64>, rows: &mut Vec<Row>) {
    let (n, p) = x.dim();
    let off = usize::from(o.intercept);
    if n < p + off {
        eprintln!("reference skipped: {n} rows < {} unknowns", p + off);
        return;
    }
    let mut a = Some(nalgebra::DMatrix::<f64>::from_fn(n, p + off, |i, j| {
        if j < off {
            1.0
        } else {
            x[(i, j - off)]
        }
    }));
    let b = nalgebra::DVector::<f64>::from_fn(n, |i, _| y[i]);
    let s = measure(&mut || {
        let Some(a) = a.take() else {
            return f64::NAN;
        };
        match a.svd(true, true).solve(&b, 1e-10) {
            Ok(beta) => beta[beta.len() - 1],
            Err(_) => f64::NAN,
        }
    });
    let c = (p + off) as f64;
    let work = Work::Flops(4.0 * n as f64 * c * c - 4.0 * c * c * c / 3.0);
    rows.push(Row::of(
        Spec::new("reference-svd", "baseline", Some(Floor::Gram), work),
        &[s],
    ));
}

fn main() {
    let o = parse();
    if let Err(e) = leastline::set_backend(o.backend) {
        eprintln!("--backend {}: {e}", o.backend.name());
        std::process::exit(2)
    }
    match o.threads {
        Some(t) => match rayon::ThreadPoolBuilder::new().num_threads(t).build() {
            Ok(pool) => pool.install(|| run(&o)),
            Err(e) => {
                eprintln!("cannot build a pool of {t} threads: {e}");
                std::process::exit(1)
            }
        },
        None => run(&o),
    }
}
