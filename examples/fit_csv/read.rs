//! Streaming CSV input: the header, the chosen columns, and blocks of rows
//! as ndarray arrays with the line each row came from.
//!
//! Conventions (also in `--help`):
//! - the first row names the columns; a name may end in a unit in square
//!   brackets, `load [kg]`; a column is chosen by its whole header text or
//!   by the name before the brackets (`load`);
//! - lines starting with `#` are skipped, fields are trimmed;
//! - every chosen cell must hold a finite number (`1.5`, `-2e3`); an empty
//!   cell, text, NaN or an infinity is an error naming its line and column;
//! - weights must be finite and >= 0;
//! - a chosen column's name must appear once in the header.
//!
//! The file is read once, in blocks of at most `block_rows` rows (fewer for
//! very wide files, so that a block stays under [`BLOCK_VALUES`] numbers).

use std::fmt;
use std::fs::File;
use std::io;
use std::path::{Path, PathBuf};

use csv::{ByteRecord, ReaderBuilder, Trim};
use ndarray::{Array1, Array2};

/// Most numbers held by one block (32 MiB of `f64`).
pub const BLOCK_VALUES: usize = 4 << 20;

/// Longest cell text quoted back in an error message.
const QUOTE_CHARS: usize = 40;

/// One column of the file.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// Position in the record (0-based).
    pub field: usize,
    /// The name, without its unit.
    pub name: String,
    /// The unit declared as `name [unit]`, if any.
    pub unit: Option<String>,
}

impl Column {
    /// `name [unit]`, or the bare name: the text put on plot axes.
    pub fn label(&self) -> String {
        match &self.unit {
            Some(u) => format!("{} [{u}]", self.name),
            None => self.name.clone(),
        }
    }
}

/// Splits `load [kg]` into `("load", Some("kg"))`.
pub fn split_unit(header: &str) -> (String, Option<String>) {
    let h = header.trim();
    if let Some(inner) = h.strip_suffix(']') {
        if let Some(open) = inner.rfind('[') {
            let name = inner[..open].trim();
            let unit = inner[open + 1..].trim();
            if !name.is_empty() && !unit.is_empty() {
                return (name.to_string(), Some(unit.to_string()));
            }
        }
    }
    (h.to_string(), None)
}

/// Which columns to read.
#[derive(Debug, Clone, Default)]
pub struct Request {
    /// The target column (none when reading rows to predict).
    pub target: Option<String>,
    /// Predictor columns; empty means every column but the target and weights.
    pub predictors: Vec<String>,
    /// The weights column.
    pub weights: Option<String>,
}

/// The columns found for a [`Request`].
#[derive(Debug, Clone)]
pub struct Layout {
    /// The target column.
    pub target: Option<Column>,
    /// Predictor columns, in the requested order.
    pub predictors: Vec<Column>,
    /// The weights column.
    pub weights: Option<Column>,
}

/// Consecutive rows of the file.
#[derive(Debug, Clone)]
pub struct Block {
    /// Line of the file each row starts on (1-based; the header is line 1
    /// unless comments come before it).
    pub lines: Vec<u64>,
    /// Predictor values, `rows x predictors`.
    pub x: Array2<f64>,
    /// Target values, when a target was requested.
    pub y: Option<Array1<f64>>,
    /// Weights, when a weights column was requested.
    pub w: Option<Array1<f64>>,
}

impl Block {
    /// Rows in the block.
    pub fn rows(&self) -> usize {
        self.lines.len()
    }
}

/// What can go wrong reading a file; `main` maps it to exit code 3 (I/O)
/// or 4 (content).
#[derive(Debug)]
pub enum ReadError {
    /// The file cannot be opened.
    Open { path: PathBuf, source: io::Error },
    /// Reading failed part way.
    Io {
        path: PathBuf,
        line: Option<u64>,
        source: io::Error,
    },
    /// No header row.
    NoHeader { path: PathBuf },
    /// A header but no data.
    NoData { path: PathBuf },
    /// A used column has an empty header cell.
    Unnamed { path: PathBuf, field: usize },
    /// No column of that name.
    Missing {
        path: PathBuf,
        name: String,
        available: Vec<String>,
    },
    /// The name is on more than one column (1-based field numbers).
    Duplicate {
        path: PathBuf,
        name: String,
        fields: Vec<usize>,
    },
    /// The same column is asked for twice, or for two roles.
    Conflict { path: PathBuf, message: String },
    /// A row with a different number of fields than the header.
    Ragged {
        path: PathBuf,
        line: u64,
        expected: u64,
        found: u64,
    },
    /// A cell that is not a finite number (empty, text, NaN, infinite).
    BadValue {
        path: PathBuf,
        line: u64,
        column: String,
        text: String,
        problem: &'static str,
    },
    /// A weight below 0.
    NegativeWeight {
        path: PathBuf,
        line: u64,
        column: String,
        value: f64,
    },
    /// A block could not be allocated.
    TooLarge { path: PathBuf, values: usize },
}

impl ReadError {
    /// Whether the error is about reaching the file (exit 3) rather than
    /// about its content (exit 4).
    pub fn is_io(&self) -> bool {
        matches!(self, ReadError::Open { .. } | ReadError::Io { .. })
    }
}

impl fmt::Display for ReadError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ReadError::Open { path, source } => {
                write!(f, "cannot open {}: {source}", path.display())
            }
            ReadError::Io { path, line, source } => match line {
                Some(l) => write!(f, "{}: reading failed near line {l}: {source}", path.display()),
                None => write!(f, "{}: reading failed: {source}", path.display()),
            },
            ReadError::NoHeader { path } => write!(
                f,
                "{} is empty: its first row must name the columns",
                path.display()
            ),
            ReadError::NoData { path } => {
                write!(f, "{} has a header but no rows of data", path.display())
            }
            ReadError::Unnamed { path, field } => write!(
                f,
                "{}: column {} has no name in the header",
                path.display(),
                field + 1
            ),
            ReadError::Missing {
                path,
                name,
                available,
            } => {
                let shown: Vec<&str> = available.iter().take(20).map(String::as_str).collect();
                let more = available.len().saturating_sub(shown.len());
                write!(
                    f,
                    "{}: no column named `{name}`; the header has: {}{}",
                    path.display(),
                    shown.join(", "),
                    if more > 0 {
                        format!(" and {more} more")
                    } else {
                        String::new()
                    }
                )
            }
            ReadError::Duplicate { path, name, fields } => {
                let list: Vec<String> = fields.iter().map(|c| c.to_string()).collect();
                write!(
                    f,
                    "{}: the header names `{name}` more than once (columns {}); rename one",
                    path.display(),
                    list.join(" and ")
                )
            }
            ReadError::Conflict { path, message } => write!(f, "{}: {message}", path.display()),
            ReadError::Ragged {
                path,
                line,
                expected,
                found,
            } => write!(
                f,
                "{}: line {line} has {found} fields but the header has {expected}",
                path.display()
            ),
            ReadError::BadValue {
                path,
                line,
                column,
                text,
                problem,
            } => write!(
                f,
                "{}: line {line}, column `{column}`: `{text}` {problem}",
                path.display()
            ),
            ReadError::NegativeWeight {
                path,
                line,
                column,
                value,
            } => write!(
                f,
                "{}: line {line}, column `{column}`: weight {value} is negative; weights must be >= 0",
                path.display()
            ),
            ReadError::TooLarge { path, values } => write!(
                f,
                "{}: cannot allocate a block of {values} numbers",
                path.display()
            ),
        }
    }
}

impl std::error::Error for ReadError {}

/// Reads a CSV file block by block.
pub struct BlockReader {
    path: PathBuf,
    csv: csv::Reader<File>,
    layout: Layout,
    block_rows: usize,
    record: ByteRecord,
    rows_done: usize,
    total_bytes: u64,
}

impl fmt::Debug for BlockReader {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("BlockReader")
            .field("path", &self.path)
            .field("layout", &self.layout)
            .field("rows_done", &self.rows_done)
            .finish_non_exhaustive()
    }
}

impl BlockReader {
    /// Opens `path`, reads its header and finds the requested columns.
    pub fn open(
        path: &Path,
        separator: char,
        request: &Request,
        block_rows: usize,
    ) -> Result<Self, ReadError> {
        let file = File::open(path).map_err(|source| ReadError::Open {
            path: path.to_path_buf(),
            source,
        })?;
        let total_bytes = file.metadata().map(|m| m.len()).unwrap_or(0);
        let mut csv = ReaderBuilder::new()
            .delimiter(separator as u8)
            .has_headers(true)
            .flexible(false)
            .comment(Some(b'#'))
            .trim(Trim::All)
            .from_reader(file);
        let headers = csv.byte_headers().map_err(|e| csv_error(path, e))?.clone();
        if headers.is_empty() || (headers.len() == 1 && headers[0].is_empty()) {
            return Err(ReadError::NoHeader {
                path: path.to_path_buf(),
            });
        }
        let texts: Vec<String> = headers
            .iter()
            .map(|h| String::from_utf8_lossy(h).into_owned())
            .collect();
        let layout = resolve(path, &texts, request)?;
        let width = layout.predictors.len().max(1);
        Ok(BlockReader {
            path: path.to_path_buf(),
            csv,
            layout,
            block_rows: block_rows.clamp(1, (BLOCK_VALUES / width).max(1)),
            record: ByteRecord::new(),
            rows_done: 0,
            total_bytes,
        })
    }

    /// The columns being read.
    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// Size of the file in bytes (0 when unknown).
    pub fn total_bytes(&self) -> u64 {
        self.total_bytes
    }

    /// Bytes consumed so far.
    pub fn bytes_read(&self) -> u64 {
        self.csv.position().byte()
    }

    /// The next block, or `None` at the end of the file. The first call
    /// fails with [`ReadError::NoData`] when the file has no data rows.
    pub fn next_block(&mut self) -> Result<Option<Block>, ReadError> {
        let p = self.layout.predictors.len();
        let cap = self.block_rows;
        let mut x = reserve(&self.path, cap.saturating_mul(p))?;
        let mut y = if self.layout.target.is_some() {
            Some(reserve(&self.path, cap)?)
        } else {
            None
        };
        let mut w = if self.layout.weights.is_some() {
            Some(reserve(&self.path, cap)?)
        } else {
            None
        };
        let mut lines = Vec::new();
        lines
            .try_reserve_exact(cap)
            .map_err(|_| self.too_large(cap))?;
        while lines.len() < cap {
            let more = self
                .csv
                .read_byte_record(&mut self.record)
                .map_err(|e| csv_error(&self.path, e))?;
            if !more {
                break;
            }
            let line = self.record.position().map_or(0, |p| p.line());
            for col in &self.layout.predictors {
                x.push(self.number(line, col)?);
            }
            if let (Some(col), Some(y)) = (&self.layout.target, y.as_mut()) {
                y.push(self.number(line, col)?);
            }
            if let (Some(col), Some(w)) = (&self.layout.weights, w.as_mut()) {
                let v = self.number(line, col)?;
                if v < 0.0 {
                    return Err(ReadError::NegativeWeight {
                        path: self.path.clone(),
                        line,
                        column: col.label(),
                        value: v,
                    });
                }
                w.push(v);
            }
            lines.push(line);
        }
        if lines.is_empty() {
            if self.rows_done == 0 {
                return Err(ReadError::NoData {
                    path: self.path.clone(),
                });
            }
            return Ok(None);
        }
        let rows = lines.len();
        self.rows_done += rows;
        let x = Array2::from_shape_vec((rows, p), x).map_err(|_| self.too_large(rows * p))?;
        Ok(Some(Block {
            lines,
            x,
            y: y.map(Array1::from),
            w: w.map(Array1::from),
        }))
    }

    fn too_large(&self, values: usize) -> ReadError {
        ReadError::TooLarge {
            path: self.path.clone(),
            values,
        }
    }

    fn number(&self, line: u64, col: &Column) -> Result<f64, ReadError> {
        let raw = self.record.get(col.field).unwrap_or(b"");
        let bad = |text: &str, problem: &'static str| ReadError::BadValue {
            path: self.path.clone(),
            line,
            column: col.label(),
            text: quote(text),
            problem,
        };
        let text = std::str::from_utf8(raw)
            .map_err(|_| bad(&String::from_utf8_lossy(raw), "is not UTF-8 text"))?
            .trim();
        if text.is_empty() {
            return Err(bad(text, "is empty; every chosen cell needs a number"));
        }
        match text.parse::<f64>() {
            Ok(v) if v.is_finite() => Ok(v),
            Ok(_) => Err(bad(text, "is not a finite number")),
            Err(_) => Err(bad(text, "is not a number")),
        }
    }
}

fn reserve(path: &Path, n: usize) -> Result<Vec<f64>, ReadError> {
    let mut v = Vec::new();
    v.try_reserve_exact(n).map_err(|_| ReadError::TooLarge {
        path: path.to_path_buf(),
        values: n,
    })?;
    Ok(v)
}

fn quote(text: &str) -> String {
    if text.chars().count() <= QUOTE_CHARS {
        text.to_string()
    } else {
        let head: String = text.chars().take(QUOTE_CHARS).collect();
        format!("{head}...")
    }
}

fn csv_error(path: &Path, e: csv::Error) -> ReadError {
    let path = path.to_path_buf();
    match e.into_kind() {
        csv::ErrorKind::Io(source) => ReadError::Io {
            path,
            line: None,
            source,
        },
        csv::ErrorKind::UnequalLengths {
            pos,
            expected_len,
            len,
        } => ReadError::Ragged {
            path,
            line: pos.map_or(0, |p| p.line()),
            expected: expected_len,
            found: len,
        },
        other => ReadError::Io {
            path,
            line: None,
            source: io::Error::other(format!("{other:?}")),
        },
    }
}

/// Finds the requested columns in the header.
fn resolve(path: &Path, headers: &[String], request: &Request) -> Result<Layout, ReadError> {
    let split: Vec<(String, Option<String>)> = headers.iter().map(|h| split_unit(h)).collect();
    let column = |field: usize| Column {
        field,
        name: split[field].0.clone(),
        unit: split[field].1.clone(),
    };
    // A chosen column: exactly one match, a name of its own, not empty.
    let check = |field: usize| -> Result<Column, ReadError> {
        let name = &split[field].0;
        if name.is_empty() {
            return Err(ReadError::Unnamed {
                path: path.to_path_buf(),
                field,
            });
        }
        let same: Vec<usize> = (0..headers.len())
            .filter(|&k| &split[k].0 == name)
            .map(|k| k + 1)
            .collect();
        if same.len() > 1 {
            return Err(ReadError::Duplicate {
                path: path.to_path_buf(),
                name: name.clone(),
                fields: same,
            });
        }
        Ok(column(field))
    };
    let find = |wanted: &str| -> Result<Column, ReadError> {
        let wanted = wanted.trim();
        let hit = (0..headers.len())
            .find(|&k| headers[k].trim() == wanted)
            .or_else(|| (0..headers.len()).find(|&k| split[k].0 == wanted));
        match hit {
            Some(field) => check(field),
            None => Err(ReadError::Missing {
                path: path.to_path_buf(),
                name: wanted.to_string(),
                available: headers.to_vec(),
            }),
        }
    };
    let conflict = |message: String| ReadError::Conflict {
        path: path.to_path_buf(),
        message,
    };
    let target = request.target.as_deref().map(find).transpose()?;
    let weights = request.weights.as_deref().map(find).transpose()?;
    if let (Some(t), Some(w)) = (&target, &weights) {
        if t.field == w.field {
            return Err(conflict(format!(
                "column `{}` cannot be both the target and the weights",
                t.name
            )));
        }
    }
    let taken = |field: usize| {
        target.as_ref().is_some_and(|c| c.field == field)
            || weights.as_ref().is_some_and(|c| c.field == field)
    };
    let mut predictors: Vec<Column> = Vec::new();
    if request.predictors.is_empty() {
        for field in (0..headers.len()).filter(|&k| !taken(k)) {
            predictors.push(check(field)?);
        }
    } else {
        for wanted in &request.predictors {
            let c = find(wanted)?;
            if taken(c.field) {
                return Err(conflict(format!(
                    "column `{}` is chosen as a predictor and as the target or weights",
                    c.name
                )));
            }
            if predictors.iter().any(|p| p.field == c.field) {
                return Err(conflict(format!(
                    "column `{}` is listed twice among the predictors",
                    c.name
                )));
            }
            predictors.push(c);
        }
    }
    Ok(Layout {
        target,
        predictors,
        weights,
    })
}
