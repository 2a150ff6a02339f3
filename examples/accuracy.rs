//! Digits correct on the eleven NIST StRD linear least-squares problems,
//! for every solver of the crate.
//!
//! ```text
//! cargo run --release --example accuracy            # tables
//! cargo run --release --example accuracy -- --json  # one JSON object per (solver, dataset)
//! ```
//!
//! Digits are the log relative error against NIST's certified values
//! (`-log10(|computed - certified| / |certified|)`, the absolute error where
//! the certified value is 0, capped at 15): for the coefficients the minimum
//! over the intercept and all slopes, likewise for their standard
//! deviations, then the residual standard deviation `sqrt(RSS / df)` and
//! R² (`1 - RSS / TSS`, with TSS about the mean, or about zero for the
//! models without intercept, as NIST defines it). A solver that refuses a
//! problem shows the error variant it returned.
//!
//! The column "f64 data" of the coefficient table is the exact
//! least-squares solution of the `f64` arrays the solvers receive, computed
//! in rational arithmetic: the most digits any solver can get from them.

#[path = "../tests/common/exact.rs"]
mod exact;
#[path = "../tests/common/nist.rs"]
mod nist;

use leastline::{
    Accelerated, Cholesky, Error, Fit, GradientDescent, Problem, Qr, Ridge, Solver, Stochastic, Svd,
};
use nist::{lre, Dataset};

/// The solvers measured, with the label they carry in the output.
fn solvers() -> Vec<(&'static str, Box<dyn Solver>)> {
    vec![
        ("qr", Box::new(Qr::new())),
        ("qr-refined", Box::new(Qr::refined())),
        ("cholesky", Box::new(Cholesky::new())),
        ("svd", Box::new(Svd::new())),
        ("ridge(0)", Box::new(Ridge::new(0.0))),
        // Gradient methods run to a tight tolerance and report `NotConverged`
        // (as their outcome) where they cannot reach it.
        (
            "gradient",
            Box::new(
                GradientDescent::new()
                    .with_tolerance(1e-13)
                    .with_max_iterations(200_000)
                    .with_fail_if_not_converged(true),
            ),
        ),
        (
            "accelerated",
            Box::new(
                Accelerated::new()
                    .with_tolerance(1e-13)
                    .with_max_iterations(200_000)
                    .with_fail_if_not_converged(true),
            ),
        ),
        (
            "stochastic",
            Box::new(
                Stochastic::new()
                    .with_tolerance(1e-10)
                    .with_max_iterations(200)
                    .with_seed(1)
                    .with_fail_if_not_converged(true),
            ),
        ),
    ]
}

/// Standard deviations of `[intercept,] slopes` for a fit, in the caller's
/// units, from the crate's inference module (computed from the data and the
/// fit's coefficients). `None` when inference is refused for the fit.
fn standard_deviations(problem: &Problem<'_>, fit: &Fit) -> Option<Vec<f64>> {
    let inference = fit.inference(problem).ok()?;
    let mut sds = Vec::new();
    if let Some(intercept) = &inference.intercept {
        sds.push(intercept.std_error);
    }
    sds.extend(inference.coefficients.iter().map(|e| e.std_error));
    Some(sds)
}

/// One measured (solver, dataset) pair; digits are `None` when not available.
struct Row {
    solver: &'static str,
    dataset: String,
    coef: Option<f64>,
    sd: Option<f64>,
    resid_sd: Option<f64>,
    r2: Option<f64>,
    outcome: String,
}

fn min_lre(computed: &[f64], certified: &[f64]) -> f64 {
    computed
        .iter()
        .zip(certified)
        .map(|(c, r)| lre(*c, *r))
        .fold(f64::INFINITY, f64::min)
}

/// The variant name of an error (`IllConditioned`, `RankDeficient`, ...).
fn variant(e: &Error) -> String {
    let text = format!("{e:?}");
    text.split(|c: char| !c.is_alphanumeric())
        .next()
        .unwrap_or("Error")
        .to_string()
}

fn measure(label: &'static str, solver: &dyn Solver, d: &Dataset) -> Row {
    let mut row = Row {
        solver: label,
        dataset: d.name.clone(),
        coef: None,
        sd: None,
        resid_sd: None,
        r2: None,
        outcome: String::new(),
    };
    let problem = match Problem::builder(d.x.view(), d.y.view())
        .with_intercept(d.intercept)
        .build()
    {
        Ok(p) => p,
        Err(e) => {
            row.outcome = variant(&e);
            return row;
        }
    };
    let fit = match solver.fit(&problem) {
        Ok(f) => f,
        Err(e) => {
            row.outcome = variant(&e);
            return row;
        }
    };
    row.outcome = "fit".to_string();
    let mut est = Vec::new();
    if d.intercept {
        est.push(fit.model.intercept());
    }
    est.extend(fit.model.coefficients().iter());
    let cert = &d.certified;
    row.coef = Some(min_lre(&est, &cert.estimates()));
    row.sd = standard_deviations(&problem, &fit).map(|sd| min_lre(&sd, &cert.std_devs()));
    let rss = fit.report.residual_sum_of_squares;
    // The model's residual degrees of freedom (the gradient solvers do not
    // measure a rank, so their report has none).
    let df = (problem.usable_rows() - problem.parameters()) as f64;
    row.resid_sd = Some(lre((rss / df).sqrt(), cert.residual_sd));
    let center = if d.intercept {
        d.y.iter().sum::<f64>() / d.y.len() as f64
    } else {
        0.0
    };
    let tss: f64 = d.y.iter().map(|v| (v - center) * (v - center)).sum();
    row.r2 = Some(lre(1.0 - rss / tss, cert.r_squared));
    row
}

fn json_number(v: Option<f64>) -> serde_json::Value {
    v.map(|x| serde_json::json!((x * 100.0).round() / 100.0))
        .unwrap_or(serde_json::Value::Null)
}

fn cell(row: &Row, metric: fn(&Row) -> Option<f64>) -> String {
    if row.outcome != "fit" {
        return format!("[{}]", row.outcome);
    }
    metric(row).map_or_else(|| "-".to_string(), |v| format!("{v:.1}"))
}

fn print_block(
    title: &str,
    rows: &[Row],
    labels: &[&str],
    datasets: &[Dataset],
    metric: fn(&Row) -> Option<f64>,
    extra: Option<(&str, &[f64])>,
) {
    if rows
        .iter()
        .filter(|r| r.outcome == "fit")
        .all(|r| metric(r).is_none())
    {
        println!("{title}: not measured (needs the inference module).\n");
        return;
    }
    println!("{title}");
    let width = labels.iter().map(|l| l.len()).max().unwrap_or(8).max(16);
    print!("  {:<10}{:>9}", "dataset", "level");
    for l in labels {
        print!("  {l:>width$}");
    }
    if let Some((name, _)) = extra {
        print!("  {name:>10}");
    }
    println!();
    for (k, d) in datasets.iter().enumerate() {
        print!("  {:<10}{:>9}", d.name, d.difficulty);
        for l in labels {
            let r = rows
                .iter()
                .find(|r| r.solver == *l && r.dataset == d.name)
                .map_or_else(|| "?".to_string(), |r| cell(r, metric));
            print!("  {r:>width$}");
        }
        if let Some((_, values)) = extra {
            print!("  {:>10.1}", values[k]);
        }
        println!();
    }
    println!();
}

fn main() {
    let json = std::env::args().skip(1).any(|a| a == "--json");
    let datasets: Vec<Dataset> = nist::ALL.iter().map(|n| nist::load(n)).collect();
    let solvers = solvers();
    let labels: Vec<&str> = solvers.iter().map(|s| s.0).collect();
    let mut rows = Vec::new();
    for (label, solver) in &solvers {
        for d in &datasets {
            rows.push(measure(label, solver.as_ref(), d));
        }
    }
    if json {
        for r in &rows {
            // Keys in a fixed order: solver, dataset, digits, outcome.
            let obj = format!(
                "{{\"solver\":{},\"dataset\":{},\"coef_lre\":{},\"sd_lre\":{},\"resid_sd_lre\":{},\"r2_lre\":{},\"outcome\":{}}}",
                serde_json::Value::from(r.solver),
                serde_json::Value::from(r.dataset.as_str()),
                json_number(r.coef),
                json_number(r.sd),
                json_number(r.resid_sd),
                json_number(r.r2),
                serde_json::Value::from(r.outcome.as_str()),
            );
            println!("{obj}");
        }
        return;
    }
    let data_limit: Vec<f64> = datasets
        .iter()
        .map(|d| {
            let best = exact::least_squares(d.x.view(), d.y.view(), d.intercept);
            min_lre(&best, &d.certified.estimates())
        })
        .collect();
    println!("Correct digits against the NIST StRD certified values (15 = all).");
    println!("[Name] = the solver refused with that error.\n");
    print_block(
        "Coefficients, worst of intercept and slopes",
        &rows,
        &labels,
        &datasets,
        |r| r.coef,
        Some(("f64 data", &data_limit)),
    );
    print_block(
        "Standard deviations of the coefficients, worst",
        &rows,
        &labels,
        &datasets,
        |r| r.sd,
        None,
    );
    print_block(
        "Residual standard deviation",
        &rows,
        &labels,
        &datasets,
        |r| r.resid_sd,
        None,
    );
    print_block("R squared", &rows, &labels, &datasets, |r| r.r2, None);
}
