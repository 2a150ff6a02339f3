//! Fit a linear model to the columns of a CSV file, compare the solvers,
//! predict new rows and draw the diagnostic plots.
//!
//! ```text
//! cargo run --release --features serde --example fit_csv -- \
//!     data/samples/vineyard_irrigation.csv --target water --weights meter_weight --plots plots
//! ```
//!
//! `--help` lists every flag. Exit codes: 0 done; 1 the fit (or a
//! prediction) was refused by the library; 2 bad flags; 3 a file could not
//! be opened or read; 4 bad data in a CSV (the message names the line and
//! column); 5 a saved model is not valid; 6 an output could not be written.
//! Errors go to stderr, one line starting with `fit_csv: error:`.
//!
//! `--json` prints one object: `coefficients` (predictor name to slope),
//! `intercept` (null with `--no-intercept`), `rss`, `rows_used`, `rows_read`,
//! `solver`, `rank`, `condition`, `penalty`, `units`, and when the fit
//! allows inference `sigma`, `r_squared`, `standard_errors`, `intervals`
//! (otherwise `no_inference_because`); numbers JSON cannot hold are null.
//! With `--stream` the rows pass block by block through a fit state and
//! are not kept (memory bounded by one block): the object adds
//! `"streamed": true` and `blocks`, keeps `sigma` and `r_squared` from the
//! solver's report, and has no standard errors or intervals.
//!
//! Layout: `args` (flags), `read` (CSV blocks), `fit` (the only module that
//! calls leastline), `report` (text and JSON), `plots` (SVG), `progress`
//! (bars on stderr).

mod args;
mod fit;
mod plots;
mod progress;
mod read;
mod report;

use std::io::Write as _;
use std::path::Path;
use std::process::ExitCode;

use clap::Parser;

use args::Args;
use fit::{FitError, Fitter, Model, Names, Settings};
use progress::{Bar, Bars};
use read::{BlockReader, ReadError, Request};
use report::{Outputs, Source};

/// Why the program stops, and its exit code.
#[derive(Debug)]
enum Failure {
    /// The library refused the fit or a prediction (1).
    Refused(String),
    /// The flags do not make sense together (2).
    Usage(String),
    /// A file cannot be opened or read (3).
    Io(String),
    /// A CSV holds something that cannot be fitted (4).
    Data(String),
    /// A saved model is not valid (5).
    Model(String),
    /// An output cannot be written (6).
    Output(String),
}

impl Failure {
    fn code(&self) -> u8 {
        match self {
            Failure::Refused(_) => 1,
            Failure::Usage(_) => 2,
            Failure::Io(_) => 3,
            Failure::Data(_) => 4,
            Failure::Model(_) => 5,
            Failure::Output(_) => 6,
        }
    }

    fn message(&self) -> &str {
        match self {
            Failure::Refused(m)
            | Failure::Usage(m)
            | Failure::Io(m)
            | Failure::Data(m)
            | Failure::Model(m)
            | Failure::Output(m) => m,
        }
    }
}

impl From<ReadError> for Failure {
    fn from(e: ReadError) -> Self {
        if e.is_io() {
            Failure::Io(e.to_string())
        } else {
            Failure::Data(e.to_string())
        }
    }
}

impl From<FitError> for Failure {
    fn from(e: FitError) -> Self {
        match e {
            FitError::Refused { .. } | FitError::TooLarge { .. } => Failure::Refused(e.to_string()),
            FitError::BadModel { .. } => Failure::Model(e.to_string()),
            FitError::Write { .. } => Failure::Output(e.to_string()),
        }
    }
}

fn main() -> ExitCode {
    let args = Args::parse();
    match run(&args) {
        Ok(()) => ExitCode::SUCCESS,
        Err(f) => {
            eprintln!("fit_csv: error: {}", f.message());
            ExitCode::from(f.code())
        }
    }
}

fn run(args: &Args) -> Result<(), Failure> {
    args.check().map_err(Failure::Usage)?;
    let bars = Bars::new(args.no_progress);
    if let Some(model_path) = &args.model {
        return predict_with_saved(args, model_path, bars);
    }
    let (Some(file), Some(target)) = (&args.file, &args.target) else {
        return Err(Failure::Usage("FILE and --target are needed to fit".into()));
    };
    let request = Request {
        target: Some(target.clone()),
        predictors: args.predictors.clone(),
        weights: args.weights.clone(),
    };
    let mut reader = BlockReader::open(file, args.separator, &request, args.block_rows as usize)?;
    let layout = reader.layout().clone();
    let Some(target) = layout.target.clone() else {
        return Err(Failure::Usage("no target column".into()));
    };
    let names = Names {
        target,
        predictors: layout.predictors.clone(),
    };
    let settings = Settings {
        solver: args.solver,
        penalty: args.penalty,
        standardize: args.standardize,
        tolerance: args.tolerance,
        max_iterations: args.max_iterations,
        seed: args.seed,
        intercept: !args.no_intercept,
        level: args.level,
        keep_rows: args.plots.is_some(),
        stream: args.stream,
    };
    let mut fitter = Fitter::new(settings, &names, layout.weights.is_some())?;
    let bar = bars.bytes(reader.total_bytes(), "reading");
    while let Some(block) = reader.next_block()? {
        fitter.absorb(&block, &names)?;
        bar.set(reader.bytes_read());
    }
    bar.clear();

    let file_text = file.display().to_string();
    let source = Source {
        file: &file_text,
        target: &names.target,
        predictors: &names.predictors,
        weights: layout.weights.as_ref(),
    };
    if args.compare {
        let run = fitter.compare(&names)?;
        let text = if args.json {
            json_text(&report::compare_json(&source, &run))?
        } else {
            report::compare_text(&source, &run)
        };
        return print(&text);
    }

    // The observer runs on the library's worker threads: the bar is made
    // once, on the first iteration, behind a `OnceLock`.
    let iteration_bar: std::sync::OnceLock<Bar> = std::sync::OnceLock::new();
    let flag = args.solver.flag();
    let fitted = fitter.finish(&names, &|iteration, limit| {
        iteration_bar
            .get_or_init(|| bars.iterations(limit as u64, flag))
            .set(iteration as u64);
    })?;
    drop(iteration_bar);

    let mut outputs = Outputs::default();
    if let (Some(dir), Some(rows)) = (&args.plots, &fitted.rows) {
        let labels = plots::Labels {
            target: names.target.label(),
        };
        let why = fitted
            .summary
            .uncertainty
            .as_ref()
            .err()
            .map(String::as_str);
        let written = plots::write_all(dir, rows, fitted.curve.as_ref(), &labels, why).map_err(
            |(path, e)| Failure::Output(format!("cannot write {}: {e}", path.display())),
        )?;
        outputs.plots = written
            .files
            .iter()
            .map(|p| p.display().to_string())
            .collect();
        outputs.plots_skipped = written.skipped;
    }
    if let Some(path) = &args.save {
        if let Some(warning) = fitted.model.save(path)? {
            eprintln!("fit_csv: warning: {warning}");
        }
        outputs.saved_model = Some(path.display().to_string());
    }
    if let (Some(input), Some(out)) = (&args.predict, &args.out) {
        let n = predict_file(&fitted.model, input, out, args, bars)?;
        outputs.predictions = Some((input.display().to_string(), out.display().to_string(), n));
    }
    let text = if args.json {
        json_text(&report::json(&source, &fitted.summary, &outputs))?
    } else {
        report::text(&source, &fitted.summary, &outputs)
    };
    print(&text)
}

fn json_text(v: &serde_json::Value) -> Result<String, Failure> {
    serde_json::to_string_pretty(v)
        .map(|s| s + "\n")
        .map_err(|e| Failure::Output(format!("cannot format the JSON: {e}")))
}

fn print(text: &str) -> Result<(), Failure> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())
        .and_then(|()| out.flush())
        .map_err(|e| Failure::Output(format!("cannot write to stdout: {e}")))
}

/// `--model FILE --predict NEW --out OUT`.
fn predict_with_saved(args: &Args, model_path: &Path, bars: Bars) -> Result<(), Failure> {
    let model = Model::load(model_path)?;
    let (Some(input), Some(out)) = (&args.predict, &args.out) else {
        return Err(Failure::Usage("--model needs --predict and --out".into()));
    };
    let n = predict_file(&model, input, out, args, bars)?;
    let text = if args.json {
        json_text(&serde_json::json!({
            "model": model_path.display().to_string(),
            "predictions": { "from": input.display().to_string(), "to": out.display().to_string(), "rows": n },
            "intervals": model.level().is_some(),
        }))?
    } else {
        format!(
            "fit_csv: predicted {n} rows of {} with {} into {}{}\n",
            input.display(),
            model_path.display(),
            out.display(),
            if model.level().is_some() {
                ""
            } else {
                " (the model has no intervals)"
            }
        )
    };
    print(&text)
}

/// `95` for 0.95, `99.5` for 0.995.
fn percent(level: f64) -> String {
    let pct = (level * 1e6).round() / 1e4;
    format!("{pct}")
}

/// Predicts every row of `input` and writes them to `out`; returns the
/// number of rows.
fn predict_file(
    model: &Model,
    input: &Path,
    out: &Path,
    args: &Args,
    bars: Bars,
) -> Result<usize, Failure> {
    let request = Request {
        target: None,
        predictors: model.predictors().iter().map(|c| c.name.clone()).collect(),
        weights: None,
    };
    let mut reader = BlockReader::open(input, args.separator, &request, args.block_rows as usize)?;
    for (want, found) in model.predictors().iter().zip(&reader.layout().predictors) {
        if let (Some(a), Some(b)) = (&want.unit, &found.unit) {
            if a != b {
                return Err(Failure::Data(format!(
                    "{}: column `{}` is in [{b}] but the model was fitted in [{a}]",
                    input.display(),
                    want.name
                )));
            }
        }
    }
    let write_error =
        |e: &dyn std::fmt::Display| Failure::Output(format!("cannot write {}: {e}", out.display()));
    let mut writer = csv::WriterBuilder::new()
        .delimiter(args.separator as u8)
        .from_path(out)
        .map_err(|e| write_error(&e))?;
    let t = model.target();
    let unit = t.unit.as_ref().map_or(String::new(), |u| format!(" [{u}]"));
    let mut header = vec!["line".to_string()];
    header.extend(reader.layout().predictors.iter().map(read::Column::label));
    header.push(format!("{}_predicted{unit}", t.name));
    if let Some(level) = model.level() {
        let pct = percent(level);
        for end in ["mean_low", "mean_high", "new_low", "new_high"] {
            header.push(format!("{}_{end}_{pct}{unit}", t.name));
        }
    }
    writer.write_record(&header).map_err(|e| write_error(&e))?;
    let bar = bars.bytes(reader.total_bytes(), "predicting");
    let mut rows = 0;
    let mut record: Vec<String> = Vec::new();
    while let Some(block) = reader.next_block()? {
        let predicted = model.predict(block.x.view(), &block.lines)?;
        for i in 0..block.rows() {
            record.clear();
            record.push(block.lines[i].to_string());
            record.extend(block.x.row(i).iter().map(|v| v.to_string()));
            record.push(predicted.fitted[i].to_string());
            if let Some(ends) = &predicted.intervals {
                record.extend(ends.iter().map(|e| e[i].to_string()));
            }
            writer.write_record(&record).map_err(|e| write_error(&e))?;
        }
        rows += block.rows();
        bar.set(reader.bytes_read());
    }
    bar.clear();
    writer.flush().map_err(|e| write_error(&e))?;
    Ok(rows)
}
