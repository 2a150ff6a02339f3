//! Fit a linear model block by block, holding one block of rows at a time,
//! and measure what that costs in memory.
//!
//! ```text
//! cargo run --release --features serde --example stream_fit -- --rows 1000000 --cols 20 --blocks 100
//! cargo run --release --features serde --example stream_fit -- --csv rooms.csv --blocks 50 --json
//! ```
//!
//! Without `--csv` the rows are generated: an invented scenario, the cold
//! rooms of the Harrowgate depot, where each row is one hour of one room:
//! `--cols` readings (door openings, pallets moved, outside air, ...; named
//! `reading_1` ..) and the compressor energy drawn, made from a known linear
//! model plus noise by a seeded ChaCha8 generator. The rows are made block
//! by block (`--blocks` blocks of `ceil(rows / blocks)` rows, or
//! `--block-rows`) and each block is absorbed into a `TriangleState` and
//! dropped. With `--csv FILE` the rows come from a CSV file (a header, then
//! one row per record; the last column is the target, the others the
//! predictors) read through the `csv` crate in blocks of the same size. A
//! progress bar is drawn on stderr when stderr is a terminal.
//!
//! A counting global allocator measures the peak of live heap bytes while
//! streaming (`peak_bytes`). It does not grow with the rows; it does
//! include fixed workspaces of the libraries underneath: faer's x86
//! matrix-multiply kernel reserves, once per thread that multiplies, a
//! packing buffer of twice the L3 cache size (64 MiB on a processor with a
//! 32 MiB L3), held until the program ends; only the pages it touches
//! become resident. `peak_resident_bytes` is the operating system's count
//! (Linux `VmHWM`, reset through `/proc/self/clear_refs` when streaming
//! starts; null elsewhere): the whole process, the program's code included.
//!
//! `--write-csv FILE` writes the generated rows to a CSV file instead of
//! fitting them (for the out-of-core benchmark in the README: write a large
//! file once, then fit it with `--csv`). `--compare-in-memory` runs the
//! in-memory comparison above the default limit of 2e7 values.
//! `state_bytes` is the size of the state's payload ([`StateData`])
//! written at fixed width: 8 bytes per float and per count, 4 per exponent
//! and version, 1 per flag, the bytes of the strings; it depends on the columns only, never on the rows.
//! `state_json_bytes` is the length of the state written as JSON.
//!
//! When `rows * cols <= 2e7` the same rows are also held in one array and
//! fitted in memory with `Qr`; `digits_vs_in_memory` is the least number of
//! significant digits the two fits share over the intercept and every
//! coefficient (`-log10` of the relative difference, at most 16), null when
//! the in-memory fit was skipped.
//!
//! `--json` prints one line: `rows`, `cols`, `blocks`, `block_rows`,
//! `digits_vs_in_memory`, `state_bytes`, `state_json_bytes`, `peak_bytes`,
//! `peak_resident_bytes`,
//! `in_memory_peak_bytes` (null when skipped), `source` (`"generated"` or
//! `"csv"`), `intercept` and `coefficients`. Without it a short plain
//! report.
//!
//! Exit codes: 0 done; 1 the library refused the fit; 2 bad flags; 3 the
//! file cannot be opened or read; 4 bad data in the CSV (the message names
//! the line and the column). Errors go to stderr, one line starting with
//! `stream_fit: error:`.

use std::alloc::{GlobalAlloc, Layout, System};
use std::fmt;
use std::fs::File;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::atomic::{AtomicUsize, Ordering};

use clap::Parser;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use leastline::ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use leastline::{FitState, Problem, Qr, Solver, StateData, TriangleState};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The system allocator, counting the live bytes and their peak.
struct Counting;

static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

fn grew(bytes: usize) {
    let now = LIVE.fetch_add(bytes, Ordering::Relaxed) + bytes;
    PEAK.fetch_max(now, Ordering::Relaxed);
}

fn shrank(bytes: usize) {
    LIVE.fetch_sub(bytes, Ordering::Relaxed);
}

// SAFETY: every call is passed on unchanged to `System`; the counters are
// only bookkeeping.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        // SAFETY: the caller's contract for `layout` is passed on.
        let p = unsafe { System.alloc(layout) };
        if !p.is_null() {
            grew(layout.size());
        }
        p
    }

    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        // SAFETY: as `alloc`.
        let p = unsafe { System.alloc_zeroed(layout) };
        if !p.is_null() {
            grew(layout.size());
        }
        p
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: `ptr` came from this allocator (so from `System`) with `layout`.
        unsafe { System.dealloc(ptr, layout) };
        shrank(layout.size());
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        // SAFETY: as `dealloc`, with the caller's `new_size`.
        let p = unsafe { System.realloc(ptr, layout, new_size) };
        if !p.is_null() {
            shrank(layout.size());
            grew(new_size);
        }
        p
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

/// Starts a new measurement: the peak becomes the bytes live now.
fn reset_peak() {
    PEAK.store(LIVE.load(Ordering::Relaxed), Ordering::Relaxed);
}

fn peak() -> usize {
    PEAK.load(Ordering::Relaxed)
}

/// Starts a new measurement of the operating system's peak resident set
/// (Linux: writing `5` to `/proc/self/clear_refs` resets `VmHWM`). Returns
/// whether the reset worked; elsewhere the peak stays unmeasured.
fn reset_resident_peak() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

/// The process's peak resident set in bytes since the last reset
/// (`VmHWM` of `/proc/self/status`), if the system reports it.
fn resident_peak() -> Option<usize> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: usize = line
        .trim_start_matches("VmHWM:")
        .trim()
        .trim_end_matches("kB")
        .trim()
        .parse()
        .ok()?;
    kib.checked_mul(1024)
}

/// Both peaks, the allocator's and the system's, started together.
fn start_measuring() -> bool {
    reset_peak();
    reset_resident_peak()
}

/// Values above which the in-memory comparison is skipped.
const IN_MEMORY_LIMIT: usize = 20_000_000;

/// Seed of the generated rows.
const SEED: u64 = 0x5eed_c01d;

/// Flags.
#[derive(Parser, Debug)]
#[command(
    name = "stream_fit",
    about = "Fit a linear model block by block with bounded memory"
)]
struct Args {
    /// Rows to generate (with --csv: optional, checked against the file).
    #[arg(long)]
    rows: Option<usize>,
    /// Predictor columns to generate (with --csv: optional, checked against the file).
    #[arg(long)]
    cols: Option<usize>,
    /// Number of blocks the rows are split into.
    #[arg(long, default_value_t = 10)]
    blocks: usize,
    /// Rows per block (instead of ceil(rows / blocks)).
    #[arg(long)]
    block_rows: Option<usize>,
    /// Read the rows from this CSV file (header; the last column is the target).
    #[arg(long)]
    csv: Option<PathBuf>,
    /// Print one line of JSON.
    #[arg(long)]
    json: bool,
    /// Write the generated rows to this CSV file (header `reading_1`, ..,
    /// `energy`; shortest round-trip decimals) instead of fitting them.
    #[arg(long, conflicts_with = "csv")]
    write_csv: Option<PathBuf>,
    /// Fit the same rows in memory with Qr and compare even above 2e7
    /// values (the whole design is then held in memory once).
    #[arg(long)]
    compare_in_memory: bool,
}

/// Why the program stops.
#[derive(Debug)]
enum Failure {
    /// The library refused the fit (exit 1).
    Refused(String),
    /// Bad flags (exit 2).
    Usage(String),
    /// A file cannot be opened or read (exit 3).
    Io(String),
    /// The CSV holds something that cannot be fitted (exit 4).
    Data(String),
}

impl Failure {
    fn code(&self) -> u8 {
        match self {
            Failure::Refused(_) => 1,
            Failure::Usage(_) => 2,
            Failure::Io(_) => 3,
            Failure::Data(_) => 4,
        }
    }
}

impl fmt::Display for Failure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Failure::Refused(m) => write!(f, "the fit was refused: {m}"),
            Failure::Usage(m) | Failure::Io(m) | Failure::Data(m) => f.write_str(m),
        }
    }
}

fn refused(e: leastline::Error) -> Failure {
    Failure::Refused(e.to_string())
}

/// A vector of `len` values, or a typed refusal when it cannot be allocated.
fn checked_vec(what: &str, len: usize) -> Result<Vec<f64>, Failure> {
    let mut v = Vec::new();
    v.try_reserve_exact(len)
        .map_err(|_| Failure::Usage(format!("{what}: {len} values cannot be allocated")))?;
    Ok(v)
}

/// `a * b`, or a refusal naming what overflowed.
fn product(what: &str, a: usize, b: usize) -> Result<usize, Failure> {
    a.checked_mul(b)
        .ok_or_else(|| Failure::Usage(format!("{what}: {a} x {b} overflows")))
}

/// A progress bar on stderr, or nothing when stderr is not a terminal.
struct Bar(Option<ProgressBar>);

impl Bar {
    fn new(len: u64, template: &str) -> Self {
        if !std::io::stderr().is_terminal() {
            return Bar(None);
        }
        let style = ProgressStyle::with_template(template)
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> ");
        Bar(Some(
            ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr())
                .with_style(style),
        ))
    }

    fn set(&self, pos: u64) {
        if let Some(b) = &self.0 {
            b.set_position(pos);
        }
    }
}

impl Drop for Bar {
    fn drop(&mut self) {
        if let Some(b) = &self.0 {
            b.finish_and_clear();
        }
    }
}

/// The invented cold rooms: each reading `j` has its own level and spread,
/// the energy drawn is `INTERCEPT + sum_j slope(j) x_j` plus noise.
mod rooms {
    use super::*;

    /// Energy drawn with every reading at zero (kWh).
    pub const INTERCEPT: f64 = 42.5;

    /// The made-up effect of reading `j` (kWh per unit).
    pub fn slope(j: usize) -> f64 {
        let sign = if j.is_multiple_of(2) { 1.0 } else { -1.0 };
        sign * (0.6 + 0.35 * (j % 7) as f64)
    }

    /// Roughly standard normal: the sum of twelve uniforms, less six.
    fn bell(rng: &mut ChaCha8Rng) -> f64 {
        (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0
    }

    /// The rows in order; blocks are consecutive runs of them, so the
    /// values do not depend on the block size.
    pub struct Rows {
        rng: ChaCha8Rng,
        cols: usize,
    }

    impl Rows {
        pub fn new(cols: usize) -> Self {
            Rows {
                rng: ChaCha8Rng::seed_from_u64(SEED),
                cols,
            }
        }

        /// Appends one row's readings to `x` and returns its energy.
        pub fn next(&mut self, x: &mut Vec<f64>) -> f64 {
            let mut energy = INTERCEPT;
            for j in 0..self.cols {
                let level = 5.0 + 3.0 * (j % 5) as f64;
                let spread = 1.0 + 0.5 * (j % 3) as f64;
                let v = level + spread * bell(&mut self.rng);
                energy += slope(j) * v;
                x.push(v);
            }
            energy + 1.5 * bell(&mut self.rng)
        }
    }
}

/// Where the rows come from.
enum Source {
    Generated(usize),
    Csv(PathBuf),
}

/// One block of rows, read or made.
struct Block {
    x: Vec<f64>,
    y: Vec<f64>,
}

impl Block {
    fn with_capacity(rows: usize, cols: usize) -> Result<Self, Failure> {
        Ok(Block {
            x: checked_vec("block", product("block", rows, cols)?)?,
            y: checked_vec("block", rows)?,
        })
    }

    fn rows(&self) -> usize {
        self.y.len()
    }

    fn views(&self, cols: usize) -> Result<(ArrayView2<'_, f64>, ArrayView1<'_, f64>), Failure> {
        let x = ArrayView2::from_shape((self.rows(), cols), &self.x)
            .map_err(|e| Failure::Data(format!("block shape: {e}")))?;
        Ok((x, ArrayView1::from(&self.y)))
    }

    fn clear(&mut self) {
        self.x.clear();
        self.y.clear();
    }
}

/// The CSV file's records, one at a time, checked and parsed.
struct CsvRows {
    reader: csv::Reader<File>,
    record: csv::StringRecord,
    names: Vec<String>,
}

impl CsvRows {
    fn open(path: &Path) -> Result<Self, Failure> {
        let file = File::open(path)
            .map_err(|e| Failure::Io(format!("cannot open {}: {e}", path.display())))?;
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            .from_reader(file);
        let names: Vec<String> = reader
            .headers()
            .map_err(|e| csv_failure(path, e))?
            .iter()
            .map(|s| s.trim().to_string())
            .collect();
        if names.len() < 2 {
            return Err(Failure::Data(format!(
                "{}: line 1: the header names {} column(s); a predictor and the target (last) are needed",
                path.display(),
                names.len()
            )));
        }
        Ok(CsvRows {
            reader,
            record: csv::StringRecord::new(),
            names,
        })
    }

    /// Predictor columns.
    fn cols(&self) -> usize {
        self.names.len() - 1
    }

    fn byte(&self) -> u64 {
        self.reader.position().byte()
    }

    /// Reads the next record into `block`; false at the end of the file.
    fn next(&mut self, path: &Path, block: &mut Block) -> Result<bool, Failure> {
        if !self
            .reader
            .read_record(&mut self.record)
            .map_err(|e| csv_failure(path, e))?
        {
            return Ok(false);
        }
        let line = self.record.position().map_or(0, csv::Position::line);
        let last = self.names.len() - 1;
        for (j, field) in self.record.iter().enumerate() {
            let v = parse(field).ok_or_else(|| {
                Failure::Data(format!(
                    "{}: line {line}, column {} ({}): {:?} is not a finite number",
                    path.display(),
                    j + 1,
                    self.names[j],
                    field
                ))
            })?;
            if j == last {
                block.y.push(v);
            } else {
                block.x.push(v);
            }
        }
        Ok(true)
    }

    /// Counts the records left (a first pass when the block size is not given).
    fn count(mut self, path: &Path) -> Result<usize, Failure> {
        let mut n = 0usize;
        while self
            .reader
            .read_record(&mut self.record)
            .map_err(|e| csv_failure(path, e))?
        {
            n += 1;
        }
        Ok(n)
    }
}

fn parse(field: &str) -> Option<f64> {
    field.trim().parse::<f64>().ok().filter(|v| v.is_finite())
}

fn csv_failure(path: &Path, e: csv::Error) -> Failure {
    let line = e
        .position()
        .map_or(String::new(), |p| format!("line {}: ", p.line()));
    match e.kind() {
        csv::ErrorKind::Io(_) => Failure::Io(format!("{}: {line}{e}", path.display())),
        _ => Failure::Data(format!("{}: {line}{e}", path.display())),
    }
}

/// What the streamed fit and its check found.
struct Outcome {
    rows: usize,
    cols: usize,
    blocks: usize,
    block_rows: usize,
    intercept: f64,
    coefficients: Vec<f64>,
    state_bytes: usize,
    state_json_bytes: usize,
    peak_bytes: usize,
    peak_resident_bytes: Option<usize>,
    in_memory: Option<InMemory>,
    source: &'static str,
}

/// The in-memory fit of the same rows.
struct InMemory {
    digits: f64,
    peak_bytes: usize,
}

/// Whether the in-memory comparison runs for `rows x cols` values.
fn compare_wanted(args: &Args, rows: usize, cols: usize) -> bool {
    args.compare_in_memory || rows.saturating_mul(cols) <= IN_MEMORY_LIMIT
}

/// The state's payload written at fixed width (see the module docs).
fn fixed_width_bytes(d: &StateData) -> usize {
    let strings = d.format.len()
        + d.kind.len()
        + d.names
            .as_ref()
            .map_or(0, |n| n.iter().map(|s| 8 + s.len()).sum::<usize>());
    let counts = 5 * 8; // columns, targets, rows, usable rows, names' count
    let floats = 8 * (3 + d.means.len() + d.lows.len() + d.highs.len() + d.matrix.len());
    let small = 4 * (2 + d.exponents.len()) + 1; // version, weight exponent, exponents; intercept
    strings + counts + floats + small
}

/// Significant digits `a` and `b` share, `-log10(|a - b| / |b|)`, at most 16.
fn digits(a: f64, b: f64) -> f64 {
    let e = (a - b).abs();
    if e == 0.0 {
        16.0
    } else {
        (-(e / b.abs().max(f64::MIN_POSITIVE)).log10()).clamp(0.0, 16.0)
    }
}

fn main() -> ExitCode {
    let args = Args::parse();
    if let Some(path) = &args.write_csv {
        return match write_csv(&args, path) {
            Ok(bytes) => {
                if args.json {
                    println!(
                        "{}",
                        serde_json::json!({"written": path.display().to_string(), "bytes": bytes})
                    );
                } else {
                    println!("wrote {bytes} bytes to {}", path.display());
                }
                ExitCode::SUCCESS
            }
            Err(f) => {
                eprintln!("stream_fit: error: {f}");
                ExitCode::from(f.code())
            }
        };
    }
    match run(&args) {
        Ok(out) => {
            if args.json {
                println!("{}", json(&out));
            } else {
                print!("{}", text(&out));
            }
            ExitCode::SUCCESS
        }
        Err(f) => {
            eprintln!("stream_fit: error: {f}");
            ExitCode::from(f.code())
        }
    }
}

fn run(args: &Args) -> Result<Outcome, Failure> {
    if args.blocks == 0 {
        return Err(Failure::Usage("--blocks must be at least 1".into()));
    }
    if args.block_rows == Some(0) {
        return Err(Failure::Usage("--block-rows must be at least 1".into()));
    }
    let source = match &args.csv {
        Some(p) => Source::Csv(p.clone()),
        None => {
            let cols = args
                .cols
                .ok_or_else(|| Failure::Usage("--cols is needed without --csv".into()))?;
            if cols == 0 {
                return Err(Failure::Usage("--cols must be at least 1".into()));
            }
            Source::Generated(cols)
        }
    };
    match source {
        Source::Generated(cols) => {
            let rows = args
                .rows
                .ok_or_else(|| Failure::Usage("--rows is needed without --csv".into()))?;
            if rows == 0 {
                return Err(Failure::Usage("--rows must be at least 1".into()));
            }
            let block_rows = args
                .block_rows
                .unwrap_or_else(|| rows.div_ceil(args.blocks));
            generated(args, rows, cols, block_rows)
        }
        Source::Csv(path) => from_csv(args, &path),
    }
}

/// Writes the generated rows (`--rows` x `--cols`) to `path` as CSV, one
/// row at a time through a buffered writer; returns the bytes written.
/// Values are written in Rust's shortest round-trip form, so reading the
/// file back gives the same numbers bit for bit.
fn write_csv(args: &Args, path: &Path) -> Result<u64, Failure> {
    let (rows, cols) = match (args.rows, args.cols) {
        (Some(r), Some(c)) if r > 0 && c > 0 => (r, c),
        _ => {
            return Err(Failure::Usage(
                "--write-csv needs --rows and --cols, both at least 1".into(),
            ))
        }
    };
    let io = |e: std::io::Error| Failure::Io(format!("cannot write {}: {e}", path.display()));
    let file = File::create(path).map_err(io)?;
    let mut out = csv::Writer::from_writer(std::io::BufWriter::with_capacity(1 << 20, file));
    let csv_io = |e: csv::Error| Failure::Io(format!("cannot write {}: {e}", path.display()));
    let mut header: Vec<String> = (1..=cols).map(|j| format!("reading_{j}")).collect();
    header.push("energy".into());
    out.write_record(&header).map_err(csv_io)?;
    let bar = Bar::new(
        rows as u64,
        "writing [{bar:32}] {pos}/{len} rows ({eta} left)",
    );
    let mut made = rooms::Rows::new(cols);
    let mut x = Vec::with_capacity(cols);
    let mut fields: Vec<String> = Vec::with_capacity(cols + 1);
    for i in 0..rows {
        x.clear();
        let e = made.next(&mut x);
        fields.clear();
        fields.extend(x.iter().map(|v| v.to_string()));
        fields.push(e.to_string());
        out.write_record(&fields).map_err(csv_io)?;
        if i % 65_536 == 0 {
            bar.set(i as u64);
        }
    }
    out.flush().map_err(io)?;
    drop(bar);
    std::fs::metadata(path).map(|m| m.len()).map_err(io)
}

/// Absorbs a block into the state and clears it.
fn absorb(state: &mut TriangleState, block: &mut Block, cols: usize) -> Result<(), Failure> {
    let (x, y) = block.views(cols)?;
    state.absorb_target(x, y, None).map_err(refused)?;
    block.clear();
    Ok(())
}

/// Finishes the state; returns the intercept, the coefficients and the
/// two sizes of the state.
fn finish(state: &TriangleState) -> Result<(f64, Vec<f64>, usize, usize), Failure> {
    let fits = state.finish().map_err(refused)?;
    let fit = fits
        .first()
        .ok_or_else(|| Failure::Refused("the state finished into no fit".into()))?;
    let json_bytes = serde_json::to_vec(state)
        .map_err(|e| Failure::Refused(format!("the state cannot be written: {e}")))?
        .len();
    let data = StateData::from(state.clone());
    Ok((
        fit.model.intercept(),
        fit.model.coefficients().to_vec(),
        fixed_width_bytes(&data),
        json_bytes,
    ))
}

/// Fits `x`, `y` in memory with `Qr` and compares with the streamed fit.
fn compare(x: Array2<f64>, y: Array1<f64>, intercept: f64, coefs: &[f64]) -> Result<f64, Failure> {
    let problem = Problem::new(x.view(), y.view()).map_err(refused)?;
    let fit = Qr::new().fit(&problem).map_err(refused)?;
    let whole = fit.model.coefficients();
    let mut d = digits(intercept, fit.model.intercept());
    for (a, b) in coefs.iter().zip(whole.iter()) {
        d = d.min(digits(*a, *b));
    }
    Ok(d)
}

fn generated(args: &Args, rows: usize, cols: usize, block_rows: usize) -> Result<Outcome, Failure> {
    let block_rows = block_rows.min(rows);
    let mut state = TriangleState::new(cols, 1, true).map_err(refused)?;
    let resident = start_measuring();
    let bar = Bar::new(
        rows as u64,
        "generating [{bar:32}] {pos}/{len} rows ({eta} left)",
    );
    let mut block = Block::with_capacity(block_rows, cols)?;
    let mut made = rooms::Rows::new(cols);
    let mut blocks = 0usize;
    let mut done = 0usize;
    while done < rows {
        let n = block_rows.min(rows - done);
        for _ in 0..n {
            let e = made.next(&mut block.x);
            block.y.push(e);
        }
        absorb(&mut state, &mut block, cols)?;
        done += n;
        blocks += 1;
        bar.set(done as u64);
    }
    drop(block);
    drop(bar);
    let (intercept, coefficients, state_bytes, state_json_bytes) = finish(&state)?;
    let peak_bytes = peak();
    let peak_resident_bytes = if resident { resident_peak() } else { None };
    drop(state);

    let in_memory = if compare_wanted(args, rows, cols) {
        reset_peak();
        let mut x = checked_vec("in-memory design", product("in-memory design", rows, cols)?)?;
        let mut y = checked_vec("in-memory target", rows)?;
        let mut made = rooms::Rows::new(cols);
        for _ in 0..rows {
            let e = made.next(&mut x);
            y.push(e);
        }
        let x = Array2::from_shape_vec((rows, cols), x)
            .map_err(|e| Failure::Data(format!("in-memory design: {e}")))?;
        let digits = compare(x, Array1::from(y), intercept, &coefficients)?;
        Some(InMemory {
            digits,
            peak_bytes: peak(),
        })
    } else {
        None
    };
    Ok(Outcome {
        rows,
        cols,
        blocks,
        block_rows,
        intercept,
        coefficients,
        state_bytes,
        state_json_bytes,
        peak_bytes,
        peak_resident_bytes,
        in_memory,
        source: "generated",
    })
}

fn from_csv(args: &Args, path: &Path) -> Result<Outcome, Failure> {
    let mut reader = CsvRows::open(path)?;
    let cols = reader.cols();
    if let Some(c) = args.cols {
        if c != cols {
            return Err(Failure::Data(format!(
                "{}: --cols {c}, but the file has {cols} predictor column(s)",
                path.display()
            )));
        }
    }
    let block_rows = match (args.block_rows, args.rows) {
        (Some(b), _) => b,
        (None, Some(r)) => r.max(1).div_ceil(args.blocks),
        (None, None) => CsvRows::open(path)?
            .count(path)?
            .max(1)
            .div_ceil(args.blocks),
    };
    let size = std::fs::metadata(path)
        .map_err(|e| Failure::Io(format!("cannot read {}: {e}", path.display())))?
        .len();

    let mut state = TriangleState::new(cols, 1, true)
        .and_then(|s| s.with_names(reader.names[..cols].to_vec()))
        .map_err(refused)?;
    let resident = start_measuring();
    let bar = Bar::new(
        size,
        "reading [{bar:32}] {bytes}/{total_bytes} ({eta} left)",
    );
    let mut block = Block::with_capacity(block_rows, cols)?;
    let (mut rows, mut blocks) = (0usize, 0usize);
    loop {
        let more = reader.next(path, &mut block)?;
        if block.rows() == block_rows || (!more && block.rows() > 0) {
            rows += block.rows();
            absorb(&mut state, &mut block, cols)?;
            blocks += 1;
            bar.set(reader.byte());
        }
        if !more {
            break;
        }
    }
    drop(block);
    drop(bar);
    if let Some(r) = args.rows {
        if r != rows {
            return Err(Failure::Data(format!(
                "{}: --rows {r}, but the file has {rows} row(s)",
                path.display()
            )));
        }
    }
    let (intercept, coefficients, state_bytes, state_json_bytes) = finish(&state)?;
    let peak_bytes = peak();
    let peak_resident_bytes = if resident { resident_peak() } else { None };
    drop(state);

    let in_memory = if compare_wanted(args, rows, cols) {
        reset_peak();
        let mut whole = Block::with_capacity(rows, cols)?;
        let mut again = CsvRows::open(path)?;
        while again.next(path, &mut whole)? {}
        if whole.rows() != rows {
            return Err(Failure::Io(format!(
                "{}: the file changed while it was read",
                path.display()
            )));
        }
        let x = Array2::from_shape_vec((rows, cols), whole.x)
            .map_err(|e| Failure::Data(format!("in-memory design: {e}")))?;
        let digits = compare(x, Array1::from(whole.y), intercept, &coefficients)?;
        Some(InMemory {
            digits,
            peak_bytes: peak(),
        })
    } else {
        None
    };
    Ok(Outcome {
        rows,
        cols,
        blocks,
        block_rows,
        intercept,
        coefficients,
        state_bytes,
        state_json_bytes,
        peak_bytes,
        peak_resident_bytes,
        in_memory,
        source: "csv",
    })
}

fn json(o: &Outcome) -> String {
    let round = |d: f64| (d * 100.0).round() / 100.0;
    serde_json::json!({
        "rows": o.rows,
        "cols": o.cols,
        "blocks": o.blocks,
        "block_rows": o.block_rows,
        "digits_vs_in_memory": o.in_memory.as_ref().map(|m| round(m.digits)),
        "state_bytes": o.state_bytes,
        "state_json_bytes": o.state_json_bytes,
        "peak_bytes": o.peak_bytes,
        "peak_resident_bytes": o.peak_resident_bytes,
        "in_memory_peak_bytes": o.in_memory.as_ref().map(|m| m.peak_bytes),
        "source": o.source,
        "intercept": o.intercept,
        "coefficients": o.coefficients,
    })
    .to_string()
}

fn text(o: &Outcome) -> String {
    let mib = |b: usize| b as f64 / (1024.0 * 1024.0);
    let mut s = format!(
        "{} rows x {} columns ({}) in {} block(s) of up to {} rows\n",
        o.rows, o.cols, o.source, o.blocks, o.block_rows
    );
    s += &format!(
        "state: {} bytes at fixed width, {} bytes as JSON\n",
        o.state_bytes, o.state_json_bytes
    );
    s += &format!("peak heap while streaming: {:.2} MiB\n", mib(o.peak_bytes));
    if let Some(r) = o.peak_resident_bytes {
        s += &format!("peak resident set while streaming: {:.2} MiB\n", mib(r));
    }
    match &o.in_memory {
        Some(m) => {
            s += &format!(
                "in memory with Qr: {:.1} digits shared, peak heap {:.2} MiB\n",
                m.digits,
                mib(m.peak_bytes)
            );
        }
        None => s += "in memory with Qr: skipped (more than 2e7 values)\n",
    }
    s += &format!("intercept {:.6}\n", o.intercept);
    for (j, c) in o.coefficients.iter().enumerate() {
        s += &format!("  slope {:>3}: {c:.6}\n", j + 1);
    }
    s
}
