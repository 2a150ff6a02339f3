//! The main demo: one invented operations scenario fitted with every solver.
//!
//! Frostgate, an invented cold-storage depot, wants to know what drives its
//! daily electricity use. Six years of (synthetic, seeded) daily records
//! hold the outdoor temperature, how often the loading doors opened, the
//! pallets received, the defrost cycles the freezers ran, and the hours the
//! packing hall was staffed. Every solver in the crate fits the same model
//! and the demo compares their answers, their agreement in digits, their
//! time and their reports.
//!
//! Run: `cargo run --release --example demo`

use std::time::Instant;

use leastline::ridge::Criterion;
use leastline::{
    Accelerated, Cholesky, Fit, GradientDescent, Problem, Qr, Ridge, RidgePath, Solver, Stochastic,
    Svd,
};
use ndarray::{Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

const PREDICTORS: [&str; 5] = [
    "outdoor temp (C)",
    "door openings",
    "pallets received",
    "defrost cycles",
    "staffed hours",
];

fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.random::<f64>();
    let u2: f64 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// Synthetic daily records. The "true" effects are invented for the demo.
fn frostgate_records(days: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let truth = [38.0, 2.6, 1.15, 55.0, 21.0];
    let base_load = 4200.0;
    let mut x = Array2::zeros((days, 5));
    let mut y = Array1::zeros(days);
    for d in 0..days {
        let season = (2.0 * std::f64::consts::PI * d as f64 / 365.25).sin();
        let temp = 11.0 + 9.5 * season + 3.0 * normal(&mut rng);
        let weekday = d % 7 < 5;
        let doors = (if weekday { 140.0 } else { 60.0 }) + 18.0 * normal(&mut rng);
        let pallets = (if weekday { 310.0 } else { 90.0 }) + 0.9 * doors + 35.0 * normal(&mut rng);
        let defrost = (4.0 + 0.12 * temp + 0.8 * normal(&mut rng))
            .round()
            .max(0.0);
        let staffed = (if weekday { 16.0 } else { 6.0 }) + 1.5 * normal(&mut rng);
        let row = [temp, doors, pallets, defrost, staffed];
        let mut kwh = base_load + 160.0 * normal(&mut rng);
        for (j, v) in row.iter().enumerate() {
            x[[d, j]] = *v;
            kwh += truth[j] * v;
        }
        y[d] = kwh;
    }
    (x, y)
}

/// Column headers: the first 14 characters of a solver's name.
/// Correct significant digits shared by `a` and `b` (15 when identical).
fn digits(a: f64, b: f64) -> f64 {
    let scale = a.abs().max(b.abs());
    if a == b || scale == 0.0 {
        return 15.0;
    }
    (-((a - b).abs() / scale).log10()).clamp(0.0, 15.0)
}

fn main() {
    let (x, y) = frostgate_records(6 * 365, 20_261_201);
    let problem = match Problem::new(x.view(), y.view()) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("invalid data: {e}");
            std::process::exit(1);
        }
    };
    // The ridge penalty is chosen by leave-one-out error over a grid derived
    // from the singular values of the (centered) design.
    let penalty = RidgePath::new(&problem, false)
        .and_then(|path| {
            let grid = path.default_grid(60)?;
            path.curve(&grid, Criterion::LeaveOneOut)
        })
        .map(|curve| curve.best_penalty)
        .unwrap_or(0.0);
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(penalty)),
        Box::new(
            GradientDescent::new()
                .with_tolerance(1e-10)
                .with_max_iterations(20_000),
        ),
        Box::new(Accelerated::new().with_tolerance(1e-10)),
        Box::new(Stochastic::new().with_max_iterations(40).with_seed(7)),
    ];

    println!("Frostgate depot: daily electricity use (kWh) against five operating drivers");
    println!(
        "{} days, {} predictors, intercept fitted by centering\n",
        problem.rows(),
        problem.columns()
    );

    let mut fits: Vec<(String, Fit, f64)> = Vec::new();
    for solver in &solvers {
        // Warm up once, then take the median of three timed runs.
        let mut result = solver.fit(&problem);
        let mut times = Vec::new();
        for _ in 0..3 {
            let start = Instant::now();
            result = solver.fit(&problem);
            times.push(start.elapsed().as_secs_f64());
        }
        times.sort_by(f64::total_cmp);
        let seconds = times[1];
        match result {
            Ok(fit) => fits.push((solver.name().to_string(), fit, seconds)),
            Err(e) => println!("  {:<10} refused: {e}", solver.name()),
        }
    }
    if fits.is_empty() {
        return;
    }

    // Coefficients side by side, each column as wide as the longest
    // solver name (names are never cut).
    let w = fits
        .iter()
        .map(|(n, _, _)| n.len())
        .max()
        .unwrap_or(0)
        .max(14)
        + 2;
    print!("{:<20}", "effect per unit");
    for (name, _, _) in &fits {
        print!("{name:>w$}");
    }
    println!();
    print!("{:<20}", "base load");
    for (_, fit, _) in &fits {
        print!("{:>w$.4}", fit.model.intercept());
    }
    println!();
    for (j, label) in PREDICTORS.iter().enumerate() {
        print!("{label:<20}");
        for (_, fit, _) in &fits {
            print!("{:>w$.6}", fit.model.coefficients()[j]);
        }
        println!();
    }

    // Agreement with the first solver, in digits.
    let (ref_name, reference, _) = &fits[0];
    println!("\ndigits shared with {ref_name} (worst coefficient, 15 = identical)");
    for (name, fit, _) in &fits[1..] {
        let mut worst = digits(fit.model.intercept(), reference.model.intercept());
        for j in 0..PREDICTORS.len() {
            worst = worst.min(digits(
                fit.model.coefficients()[j],
                reference.model.coefficients()[j],
            ));
        }
        println!("  {name:<22} {worst:5.1}");
    }

    // Reports.
    println!("\nhow each fit went");
    println!(
        "  {:<22} {:>10} {:>5} {:>10} {:>14} {:>9}  iterations",
        "solver", "time (ms)", "rank", "condition", "residual SS", "penalty"
    );
    for (name, fit, seconds) in &fits {
        let r = &fit.report;
        let iterations = match &r.iterations {
            Some(it) if it.converged => format!("{}", it.iterations),
            Some(it) if it.stopped_by_observer => {
                format!("{}, stopped by the observer", it.iterations)
            }
            Some(it) => format!("{}, stopped at the iteration limit", it.iterations),
            None => "-".to_string(),
        };
        let rank = r.rank.map_or("-".to_string(), |k| k.to_string());
        let condition = r.condition.map_or("-".to_string(), |c| {
            if c < 1e5 {
                format!("{c:.2}")
            } else {
                format!("{c:.2e}")
            }
        });
        println!(
            "  {:<22} {:>10.3} {:>5} {:>10} {:>14.6e} {:>9.3}  {}",
            name,
            seconds * 1e3,
            rank,
            condition,
            r.residual_sum_of_squares,
            r.penalty,
            iterations
        );
    }
    println!("  (\"-\" = not measured: an iterative solver factors nothing)");
    let fit = &fits[0].1;
    let df = fit.report.residual_df.unwrap_or(0).max(1) as f64;
    let rmse = (fit.report.residual_sum_of_squares / df).sqrt();
    if let Ok(r2) = fit.model.r_squared(x.view(), y.view()) {
        println!("\nresidual standard deviation {rmse:.1} kWh, R^2 {r2:.4}");
    }
    // Uncertainty of the default fit, in the crate's own summary layout.
    match fit
        .inference(&problem)
        .and_then(|inf| inf.with_names(PREDICTORS))
    {
        Ok(inference) => println!("\nuncertainty of the {} fit\n{inference}", fits[0].0),
        Err(e) => println!("\nno inference: {e}"),
    }
    println!("(synthetic data: the effects are invented for this demo)");
}
