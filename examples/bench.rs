//! Times the solvers on a seeded design of your shape against the floors of
//! their own work, measured in the same run.
//!
//! ```text
//! cargo run --release --example bench -- --rows 1000000 --cols 100
//! cargo run --release --example bench -- --rows 200000 --cols 50 --solvers qr,cholesky --threads 1 --json
//! ```
//!
//! Options: `--rows N` (default 100000), `--cols P` (default 50),
//! `--solvers a,b,...` (default: every solver in [`SOLVERS`]),
//! `--threads T` (default: rayon's global pool; otherwise every pass runs
//! inside a pool of T threads), `--repeats R` (timed runs after one warm-up,
//! default 5; the median is reported), `--seed S`, `--no-intercept`,
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
//! them). `extra` is the peak memory a run allocated beyond what was live
//! before it, counted by a global allocator in this example.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

use faer::linalg::solvers::SolveLstsq;
use faer::{Mat, Par};
use leastline::bench_support as floors;
use leastline::{Accelerated, Cholesky, GradientDescent, Problem, Qr, Ridge, Solver, Svd};
use ndarray::{Array1, Array2, ShapeBuilder};

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
    backend: leastline::Backend,
}

fn usage() -> ! {
    eprintln!(
        "usage: bench [--rows N] [--cols P] [--solvers a,b,...] [--threads T] [--repeats R] \
         [--seed S] [--no-intercept] [--no-baselines] [--col-major] [--json] \
         [--backend faer|lapack]\nsolvers: {}",
        SOLVERS
            .iter()
            .map(|s| s.0)
            .chain([GRADIENT_STEP])
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
            .collect(),
        threads: None,
        repeats: 5,
        seed: 20240611,
        intercept: true,
        baselines: true,
        json: false,
        col_major: false,
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
        if s != GRADIENT_STEP && !SOLVERS.iter().any(|e| e.0 == s) {
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
/// matrix-product backend allocates once per thread and keeps).
fn time(repeats: usize, f: &mut dyn FnMut() -> f64) -> Timing {
    measure(f);
    let mut wall = Vec::with_capacity(repeats);
    let mut cpu = Vec::with_capacity(repeats);
    let mut extra = 0;
    for _ in 0..repeats {
        let s = measure(f);
        wall.push(s.wall);
        cpu.push(s.cpu);
        extra = extra.max(s.extra);
    }
    let min = wall.iter().copied().fold(f64::INFINITY, f64::min);
    Timing {
        seconds: median(&mut wall),
        min,
        cpu: median(&mut cpu),
        extra,
    }
}

struct Timing {
    seconds: f64,
    min: f64,
    cpu: f64,
    extra: usize,
}

/// What a timed entry's rate is measured in.
#[derive(Clone, Copy)]
enum Work {
    Flops(f64),
    Bytes(f64),
}

struct Row {
    name: String,
    kind: &'static str,
    floor: Option<Floor>,
    t: Timing,
    work: Work,
}

impl Row {
    fn rate(&self) -> (f64, &'static str) {
        match self.work {
            Work::Flops(f) => (f / self.t.seconds * 1e-9, "GFLOP/s"),
            Work::Bytes(b) => (b / self.t.seconds * 1e-9, "GB/s"),
        }
    }
}

fn run(o: &Options) {
    let (n, p) = (o.rows, o.cols);
    let k = p + 1;
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
    let mut rows: Vec<Row> = Vec::new();
    let mut push = |name: &str, kind, floor, t, work| {
        rows.push(Row {
            name: name.to_string(),
            kind,
            floor,
            t,
            work,
        })
    };

    push(
        "gram",
        "floor",
        None,
        time(r, &mut || floors::gram_floor(&problem)),
        gram_work,
    );
    push(
        "stream",
        "floor",
        None,
        time(r, &mut || floors::stream_floor(&problem)),
        bytes,
    );
    let t = time(r, &mut || {
        build().map(|pr| pr.total_weight()).unwrap_or(f64::NAN)
    });
    push("validate", "pass", Some(Floor::Stream), t, bytes);
    let beta = vec![0.25; p];
    let t = time(r, &mut || floors::residual_pass(&problem, &beta));
    push("residuals", "pass", Some(Floor::Stream), t, bytes);
    let t = time(r, &mut || floors::fill_pass(&problem));
    push("fill", "pass", Some(Floor::Stream), t, bytes);
    let t = time(r, &mut || floors::tall_skinny_r(&problem));
    push("tsqr", "pass", Some(Floor::Gram), t, qr_work);

    for (name, floor, make) in SOLVERS {
        if !o.solvers.iter().any(|s| s == name) {
            continue;
        }
        let solver = make();
        if let Err(err) = solver.fit(&problem) {
            eprintln!("{name}: {err}");
            continue;
        }
        let t = time(r, &mut || {
            solver
                .fit(&problem)
                .map_or(f64::NAN, |fit| fit.report.residual_sum_of_squares)
        });
        let work = if *name == "cholesky" {
            gram_work
        } else {
            qr_work
        };
        push(name, "solver", Some(*floor), t, work);
    }

    // One full-gradient iteration: a fit of ten iterations at a fixed step
    // minus a fit of none (the set-up passes), divided by ten.
    if o.solvers.iter().any(|s| s == GRADIENT_STEP) {
        let fixed = |iterations| {
            GradientDescent::new()
                .with_step(0.1)
                .with_max_iterations(iterations)
                .with_history_stride(0)
        };
        let (none, ten) = (fixed(0), fixed(10));
        let t0 = time(r, &mut || {
            none.fit(&problem)
                .map_or(f64::NAN, |f| f.report.residual_sum_of_squares)
        });
        let t10 = time(r, &mut || {
            ten.fit(&problem)
                .map_or(f64::NAN, |f| f.report.residual_sum_of_squares)
        });
        let per = |a: f64, b: f64| ((b - a) / 10.0).max(0.0);
        let t = Timing {
            seconds: per(t0.seconds, t10.seconds),
            min: per(t0.min, t10.min),
            cpu: per(t0.cpu, t10.cpu),
            extra: t10.extra,
        };
        push(GRADIENT_STEP, "solver", Some(Floor::Stream), t, bytes);
    }

    // The straightforward least-squares calls need at least as many rows as
    // unknowns (they would stop the program otherwise).
    if o.baselines && n < k {
        eprintln!("baselines skipped: {n} rows < {k} unknowns");
    }
    if o.baselines && n >= k {
        let d = dense(&x, &y, o.intercept);
        for (name, versus, f) in BASELINES {
            if !o.solvers.iter().any(|s| s == versus) {
                continue;
            }
            let t = time(r, &mut || f(&d));
            let work = if *versus == "cholesky" {
                Work::Flops(2.0 * n as f64 * (k * k) as f64)
            } else {
                qr_work
            };
            push(name, "baseline", Some(Floor::Gram), t, work);
        }
    }

    let floor_secs = |f: Floor, rows: &[Row]| {
        rows.iter()
            .find(|row| row.kind == "floor" && row.name == f.name())
            .map_or(f64::NAN, |row| row.t.seconds)
    };
    let threads = rayon::current_num_threads();
    if o.json {
        for row in &rows {
            let (rate, unit) = row.rate();
            let mut obj = serde_json::json!({
                "solver": row.name,
                "kind": row.kind,
                "rows": n,
                "cols": p,
                "intercept": o.intercept,
                "threads": threads,
                "backend": o.backend.name(),
                "seconds": row.t.seconds,
                "min_seconds": row.t.min,
                "cpu_seconds": row.t.cpu,
                "extra_bytes": row.t.extra,
            });
            if let Some(map) = obj.as_object_mut() {
                let key = if unit == "GB/s" {
                    "gbytes_per_s"
                } else {
                    "gflops"
                };
                map.insert(key.into(), rate.into());
                if let Some(f) = row.floor {
                    let fs = floor_secs(f, &rows);
                    map.insert("floor".into(), f.name().into());
                    map.insert("floor_seconds".into(), fs.into());
                    map.insert("ratio".into(), (row.t.seconds / fs).into());
                }
            }
            println!("{obj}");
        }
        return;
    }
    println!(
        "leastline bench: {n} rows x {p} columns, intercept {}, {threads} threads, backend {}, median of {r} runs",
        o.intercept,
        o.backend.name()
    );
    println!(
        "{:<15} {:<8} {:>9} {:>9} {:>9} {:>15} {:>14} {:>10}",
        "name", "kind", "median s", "min s", "cpu s", "rate", "ratio to floor", "extra MiB"
    );
    for row in &rows {
        let ratio = row
            .floor
            .map(|f| format!("{:.2} x {}", row.t.seconds / floor_secs(f, &rows), f.name()))
            .unwrap_or_else(|| "-".into());
        let (rate, unit) = row.rate();
        println!(
            "{:<15} {:<8} {:>9.4} {:>9.4} {:>9.4} {:>15} {:>14} {:>10.1}",
            row.name,
            row.kind,
            row.t.seconds,
            row.t.min,
            row.t.cpu,
            format!("{rate:.1} {unit}"),
            ratio,
            row.t.extra as f64 / (1u64 << 20) as f64
        );
    }
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
