//! How the solvers' time grows with the rows and with the columns.
//!
//! ```text
//! cargo run --release --features bench-support --example scaling -- docs/scaling.csv docs/scaling.svg
//! ```
//!
//! Two sweeps on the seeded design of the bench example: rows from 10,000 to
//! 1,000,000 at 50 columns, and columns from 10 to 400 at 100,000 rows. Each
//! point is the fastest of 7 runs after a warm-up (the least disturbed on a
//! shared machine). Writes the times as CSV
//! (`sweep,solver,rows,cols,seconds`) and draws both sweeps on log-log axes
//! as SVG, with the slope of a least-squares line through each solver's
//! points (fitted with this crate) in the legend. Theory: slope 1 against the
//! rows for every solver; slope 2 against the columns for the Gram floor and
//! the solvers whose work is `n p^2`, less where work that grows like `n p`
//! (the centering fill, the residual pass, the QR's passes within a panel)
//! is still a large share; the legend of the column sweep also gives the
//! slope over its three largest points.
//!
//! A fifth line, `gram-limit`, is the machine's own limit for the Gram
//! pass's work at each point: `max(n k (k + 1) / peak, 8 n k / bandwidth)`
//! with `k = p + 1`, where the peak (a register-resident fused
//! multiply-add loop at the widest instruction set present, on every
//! thread) and the read bandwidth (a parallel streaming sum over 1 GiB) are
//! measured once at the start of the run.

use std::error::Error as StdError;
use std::fmt::Write as _;
use std::time::Instant;

use leastline::bench_support as floors;
use leastline::{Cholesky, Problem, Qr, Solver, Svd};
use ndarray::{Array1, Array2};
use plotters::prelude::*;

#[path = "support/design.rs"]
mod design;

type Maker = fn() -> Box<dyn Solver>;
/// The solvers by name; append a line to chart another one.
const SOLVERS: &[(&str, Maker)] = &[
    ("qr", || Box::new(Qr::new())),
    ("cholesky", || Box::new(Cholesky::new())),
    ("svd", || Box::new(Svd::new())),
];

const ROWS_SWEEP: &[usize] = &[10_000, 20_000, 50_000, 100_000, 200_000, 500_000, 1_000_000];
const ROWS_SWEEP_COLS: usize = 50;
const COLS_SWEEP: &[usize] = &[10, 20, 50, 100, 200, 400];
const COLS_SWEEP_ROWS: usize = 100_000;

/// One measured point.
struct Point {
    sweep: &'static str,
    solver: String,
    rows: usize,
    cols: usize,
    seconds: f64,
}

/// The fastest of 7 runs after a warm-up: on a shared machine the fastest
/// run is the one least disturbed by other work.
fn best_time(f: &mut dyn FnMut() -> f64) -> f64 {
    std::hint::black_box(f());
    (0..7)
        .map(|_| {
            let start = Instant::now();
            std::hint::black_box(f());
            start.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// Peak GFLOP/s (widest level, every thread) and read GB/s of this machine.
fn machine_limits() -> (f64, f64) {
    let level = floors::Level::best();
    let rounds = 20_000_000;
    let flops = floors::fma_loop_all_threads(level, rounds).map_or(f64::NAN, |v| v.0);
    let peak = flops
        / best_time(&mut || floors::fma_loop_all_threads(level, rounds).map_or(f64::NAN, |v| v.1))
        * 1e-9;
    let buf = vec![1.0f64; 1 << 27];
    let read = (buf.len() * 8) as f64 / best_time(&mut || floors::stream_sum(&buf)) * 1e-9;
    eprintln!(
        "limits: {peak:.1} GFLOP/s ({}), {read:.1} GB/s",
        level.name()
    );
    (peak, read)
}

fn measure(sweep: &'static str, n: usize, p: usize, limits: (f64, f64), out: &mut Vec<Point>) {
    let (x, y) = design::make_data(n, p, 7);
    let problem = match Problem::new(x.view(), y.view()) {
        Ok(problem) => problem,
        Err(e) => panic!("{n}x{p}: {e}"),
    };
    let mut push = |solver: &str, seconds: f64| {
        eprintln!("{sweep:<5} {solver:<10} {n:>8} x {p:<4} {seconds:.4} s");
        out.push(Point {
            sweep,
            solver: solver.to_string(),
            rows: n,
            cols: p,
            seconds,
        });
    };
    let k = (p + 1) as f64;
    push(
        "gram-limit",
        (floors::gram_flops(n, p + 1) / (limits.0 * 1e9))
            .max(8.0 * n as f64 * k / (limits.1 * 1e9)),
    );
    push(
        "gram-floor",
        best_time(&mut || floors::gram_floor(&problem)),
    );
    for (name, make) in SOLVERS {
        let solver = make();
        let t = best_time(&mut || {
            solver
                .fit(&problem)
                .map_or(f64::NAN, |f| f.report.residual_sum_of_squares)
        });
        push(name, t);
    }
}

/// Least-squares slope of log(seconds) against log(size), fitted with the
/// crate's own QR solver.
fn slope(points: &[(f64, f64)]) -> f64 {
    let x = Array2::from_shape_fn((points.len(), 1), |(i, _)| points[i].0.ln());
    let y = Array1::from_iter(points.iter().map(|p| p.1.ln()));
    Problem::new(x.view(), y.view())
        .and_then(|problem| Qr::new().fit(&problem))
        .map_or(f64::NAN, |fit| fit.model.coefficients()[0])
}

fn main() -> Result<(), Box<dyn StdError>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let csv_path = args.first().map_or("docs/scaling.csv", String::as_str);
    let svg_path = args.get(1).map_or("docs/scaling.svg", String::as_str);
    let limits = machine_limits();
    let mut points = Vec::new();
    for &n in ROWS_SWEEP {
        measure("rows", n, ROWS_SWEEP_COLS, limits, &mut points);
    }
    for &p in COLS_SWEEP {
        measure("cols", COLS_SWEEP_ROWS, p, limits, &mut points);
    }
    let mut csv = String::from("sweep,solver,rows,cols,seconds\n");
    for pt in &points {
        writeln!(
            csv,
            "{},{},{},{},{:.6}",
            pt.sweep, pt.solver, pt.rows, pt.cols, pt.seconds
        )?;
    }
    std::fs::write(csv_path, csv)?;

    let names: Vec<String> = ["gram-limit", "gram-floor"]
        .into_iter()
        .map(str::to_string)
        .chain(SOLVERS.iter().map(|s| s.0.to_string()))
        .collect();
    let colors = [MAGENTA, BLACK, BLUE, RED, GREEN];
    let root = SVGBackend::new(svg_path, (1100, 460)).into_drawing_area();
    root.fill(&WHITE)?;
    let (left, right) = root.split_horizontally(550);
    for (area, sweep) in [(&left, "rows"), (&right, "cols")] {
        let size = |pt: &Point| if sweep == "rows" { pt.rows } else { pt.cols } as f64;
        let pts: Vec<&Point> = points.iter().filter(|pt| pt.sweep == sweep).collect();
        let (xmin, xmax) = pts.iter().fold((f64::INFINITY, 0.0f64), |(a, b), pt| {
            (a.min(size(pt)), b.max(size(pt)))
        });
        let (ymin, ymax) = pts.iter().fold((f64::INFINITY, 0.0f64), |(a, b), pt| {
            (a.min(pt.seconds), b.max(pt.seconds))
        });
        let caption = if sweep == "rows" {
            format!("seconds against rows ({ROWS_SWEEP_COLS} columns)")
        } else {
            format!("seconds against columns ({COLS_SWEEP_ROWS} rows)")
        };
        let mut chart = ChartBuilder::on(area)
            .caption(caption, ("sans-serif", 18))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(
                (xmin * 0.8..xmax * 1.25).log_scale(),
                (ymin * 0.5..ymax * 2.0).log_scale(),
            )?;
        chart
            .configure_mesh()
            .light_line_style(WHITE)
            .x_labels(8)
            .x_label_formatter(&|v| format!("{v:.0}"))
            .x_desc(sweep)
            .y_desc("seconds")
            .y_label_formatter(&|v| format!("{v:.0e}"))
            .draw()?;
        for (name, color) in names.iter().zip(colors) {
            let series: Vec<(f64, f64)> = pts
                .iter()
                .filter(|pt| &pt.solver == name)
                .map(|pt| (size(pt), pt.seconds))
                .collect();
            let b = slope(&series);
            let label = if sweep == "cols" {
                let top = slope(&series[series.len().saturating_sub(3)..]);
                format!("{name}: slope {b:.2} ({top:.2} over the top three)")
            } else {
                format!("{name}: slope {b:.2}")
            };
            chart
                .draw_series(LineSeries::new(series.clone(), color.stroke_width(2)))?
                .label(label)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], color));
            chart.draw_series(
                series
                    .iter()
                    .map(|&(x, y)| Circle::new((x, y), 3, color.filled())),
            )?;
            eprintln!("{sweep}: {name} slope {b:.2}");
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .draw()?;
    }
    root.present()?;
    eprintln!("wrote {csv_path} and {svg_path}");
    Ok(())
}
