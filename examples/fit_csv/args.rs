//! Command-line flags (clap derive). Every flag's help is one line.

use std::path::PathBuf;

use clap::{Parser, ValueEnum};

/// Printed under `--help`: the CSV conventions and the exit codes.
const AFTER_HELP: &str = "\
The file: the first row names the columns; a name may end in a unit in square brackets,
`load [kg]`, used on plot axes; choose a column by its whole header or by the name before
the brackets. Lines starting with # are skipped. Every selected cell must hold a finite number.

Memory: by default the rows are held in memory, which the standard errors, intervals,
plots, ridge's chosen penalty, the gradient solvers and --compare need. With --stream only
one block of rows is held at a time (files larger than memory work): the report keeps the
coefficients, residual sum of squares, sigma and R^2 but has no standard errors or
intervals, predictions come without intervals, and the flags that need every row are refused.

Exit codes: 0 done; 1 the fit was refused (the message says why); 2 bad flags;
3 a file could not be opened or read; 4 bad data in a CSV (line and column named);
5 a saved model file is not valid; 6 an output could not be written.";

/// Fit a linear model to the columns of a CSV file with leastline, and look at it.
#[derive(Debug, Parser)]
#[command(name = "fit_csv", version, after_help = AFTER_HELP)]
pub struct Args {
    /// CSV file to fit (header row first)
    #[arg(value_name = "FILE", required_unless_present = "model")]
    pub file: Option<PathBuf>,

    /// Column to explain
    #[arg(
        long,
        short = 't',
        value_name = "COLUMN",
        required_unless_present = "model"
    )]
    pub target: Option<String>,

    /// Columns that explain it, comma-separated [default: every other column but the weights]
    #[arg(long, short = 'x', value_name = "A,B,..", value_delimiter = ',')]
    pub predictors: Vec<String>,

    /// Column of precision weights (finite, >= 0; rows of weight 0 are read but not fitted)
    #[arg(long, short = 'w', value_name = "COLUMN")]
    pub weights: Option<String>,

    /// Fit without an intercept: the model passes through the origin
    #[arg(long)]
    pub no_intercept: bool,

    /// Solver to fit with (ridge chooses its penalty by leave-one-out unless --penalty says otherwise)
    #[arg(long, short = 's', value_enum, default_value_t = SolverName::Qr)]
    pub solver: SolverName,

    /// Penalty for ridge and the gradient solvers: a number >= 0, or loo / gcv to let ridge choose
    #[arg(long, value_name = "VALUE|loo|gcv", value_parser = parse_penalty)]
    pub penalty: Option<PenaltyArg>,

    /// Ridge: penalise each slope times its column's spread (columns in different units alike)
    #[arg(long)]
    pub standardize: bool,

    /// Gradient solvers: stop once the relative gradient norm is at most this
    #[arg(long, value_name = "TOL", value_parser = parse_nonnegative)]
    pub tolerance: Option<f64>,

    /// Gradient solvers: most iterations (epochs for stochastic)
    #[arg(long, value_name = "N")]
    pub max_iterations: Option<usize>,

    /// Stochastic solver: seed of its row shuffles
    #[arg(long, value_name = "N", default_value_t = 0)]
    pub seed: u64,

    /// Fit with every solver and print them side by side: time and digits of agreement
    #[arg(long, conflicts_with_all = ["solver", "penalty", "standardize", "save", "plots", "predict"])]
    pub compare: bool,

    /// Print one JSON object on stdout instead of the text report
    #[arg(long)]
    pub json: bool,

    /// Write the diagnostic plots (SVG) into this folder, creating it if needed
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,

    /// CSV of new rows to predict (needs every predictor column; other columns are ignored)
    #[arg(long, value_name = "FILE", requires = "out")]
    pub predict: Option<PathBuf>,

    /// Where to write the predictions: a CSV with mean and new-observation intervals
    #[arg(long, value_name = "FILE", requires = "predict")]
    pub out: Option<PathBuf>,

    /// Confidence level of every interval, strictly between 0 and 1
    #[arg(long, value_name = "P", default_value_t = 0.95, value_parser = parse_level)]
    pub level: f64,

    /// Save the fitted model to this JSON file (load it again with --model)
    #[arg(long, value_name = "FILE")]
    pub save: Option<PathBuf>,

    /// Predict with a saved model instead of fitting (with --predict and --out)
    #[arg(
        long,
        value_name = "FILE",
        requires = "predict",
        conflicts_with_all = [
            "file", "target", "predictors", "weights", "no_intercept", "penalty",
            "standardize", "tolerance", "max_iterations", "compare", "plots", "save", "stream",
        ]
    )]
    pub model: Option<PathBuf>,

    /// Field separator of the CSV files (one ASCII character)
    #[arg(long, value_name = "CHAR", default_value_t = ',', value_parser = parse_separator)]
    pub separator: char,

    /// Fit block by block in bounded memory (qr, cholesky, svd, or ridge with a fixed penalty); no standard errors
    #[arg(long)]
    pub stream: bool,

    /// Rows read per block
    #[arg(long, value_name = "N", default_value_t = 8192,
          value_parser = clap::value_parser!(u32).range(1..=1_000_000))]
    pub block_rows: u32,

    /// Never draw progress bars (they are drawn only when stderr is a terminal)
    #[arg(long)]
    pub no_progress: bool,
}

/// The solvers the example can run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SolverName {
    // Householder QR (the crate's default)
    Qr,
    // QR with iterative refinement in double-double arithmetic
    QrRefined,
    // Cholesky on the normal equations (fastest; refuses ill-conditioned designs)
    Cholesky,
    // Singular value decomposition (minimum-norm answer for dependent columns)
    Svd,
    // Ridge: a fixed penalty, or one chosen by leave-one-out (default) or GCV
    Ridge,
    // Full-batch gradient descent
    Gradient,
    // Gradient descent with Nesterov momentum and restarts
    Accelerated,
    // Mini-batch stochastic gradient with averaged iterates
    Stochastic,
}

impl SolverName {
    /// The flag value, as typed.
    pub fn flag(self) -> &'static str {
        match self {
            SolverName::Qr => "qr",
            SolverName::QrRefined => "qr-refined",
            SolverName::Cholesky => "cholesky",
            SolverName::Svd => "svd",
            SolverName::Ridge => "ridge",
            SolverName::Gradient => "gradient",
            SolverName::Accelerated => "accelerated",
            SolverName::Stochastic => "stochastic",
        }
    }

    /// Whether `--tolerance`, `--max-iterations` apply.
    pub fn iterative(self) -> bool {
        matches!(
            self,
            SolverName::Gradient | SolverName::Accelerated | SolverName::Stochastic
        )
    }

    /// Whether the solver accepts a penalty.
    pub fn penalised(self) -> bool {
        self == SolverName::Ridge || self.iterative()
    }
}

/// `--penalty`: a value, or a criterion that chooses one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PenaltyArg {
    /// This penalty, in the units of the data.
    Fixed(f64),
    /// Chosen by exact leave-one-out error over a grid.
    LeaveOneOut,
    /// Chosen by generalized cross-validation over a grid.
    Gcv,
}

fn parse_penalty(text: &str) -> Result<PenaltyArg, String> {
    match text.trim().to_ascii_lowercase().as_str() {
        "loo" => Ok(PenaltyArg::LeaveOneOut),
        "gcv" => Ok(PenaltyArg::Gcv),
        other => parse_nonnegative(other).map(PenaltyArg::Fixed),
    }
}

fn parse_nonnegative(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v >= 0.0 => Ok(v),
        Ok(v) => Err(format!("{v} is not a finite number >= 0")),
        Err(_) => Err(format!("`{text}` is not a number")),
    }
}

fn parse_level(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(v) if v > 0.0 && v < 1.0 => Ok(v),
        Ok(v) => Err(format!("{v} is not strictly between 0 and 1")),
        Err(_) => Err(format!("`{text}` is not a number")),
    }
}

fn parse_separator(text: &str) -> Result<char, String> {
    let mut chars = text.chars();
    match (chars.next(), chars.next()) {
        (Some(c), None) if c.is_ascii() && c != '"' && c != '#' && c != '\n' && c != '\r' => Ok(c),
        _ => Err(format!(
            "`{text}` is not one ASCII character (other than a quote, # or a line break)"
        )),
    }
}

impl Args {
    /// Checks the combinations clap cannot express; the message names the flags.
    pub fn check(&self) -> Result<(), String> {
        if self.model.is_some() {
            return Ok(());
        }
        let solver = self.solver;
        if let Some(p) = self.penalty {
            if !solver.penalised() {
                return Err(format!(
                    "--penalty applies to ridge and the gradient solvers, not to {}",
                    solver.flag()
                ));
            }
            if solver != SolverName::Ridge && !matches!(p, PenaltyArg::Fixed(_)) {
                return Err(format!(
                    "{} takes a fixed --penalty; only ridge chooses one (loo, gcv)",
                    solver.flag()
                ));
            }
        }
        if self.standardize && solver != SolverName::Ridge {
            return Err("--standardize applies to the ridge solver only".into());
        }
        if !self.compare
            && !solver.iterative()
            && (self.tolerance.is_some() || self.max_iterations.is_some())
        {
            return Err(format!(
                "--tolerance and --max-iterations apply to the gradient solvers, not to {}",
                solver.flag()
            ));
        }
        if self.stream {
            self.check_stream()?;
        }
        if let (Some(t), Some(w)) = (&self.target, &self.weights) {
            if t == w {
                return Err(format!("`{t}` cannot be both the target and the weights"));
            }
        }
        Ok(())
    }

    /// `--stream` holds one block of rows at a time: the requests that need
    /// every row are refused, each with what to drop.
    fn check_stream(&self) -> Result<(), String> {
        let needs_rows = |what: &str| {
            format!("--stream holds one block of rows at a time, but {what} needs every row; drop --stream or {what}")
        };
        if self.compare {
            return Err(needs_rows("--compare"));
        }
        if self.plots.is_some() {
            return Err(needs_rows("--plots"));
        }
        match self.solver {
            SolverName::Qr | SolverName::Cholesky | SolverName::Svd => {}
            SolverName::Ridge => match self.penalty {
                Some(PenaltyArg::Fixed(_)) => {}
                Some(PenaltyArg::LeaveOneOut | PenaltyArg::Gcv) | None => {
                    return Err("--stream fits ridge with a fixed --penalty VALUE only: \
                                choosing the penalty (loo, gcv, the default) needs every row"
                        .into())
                }
            },
            other => {
                return Err(format!(
                    "--stream fits with qr, cholesky, svd or ridge with a fixed penalty; \
                     --solver {} needs every row",
                    other.flag()
                ))
            }
        }
        if self.standardize {
            return Err(
                "--stream fits ridge on the columns as they are; drop --standardize or --stream"
                    .into(),
            );
        }
        Ok(())
    }
}
