//! Loader for the NIST StRD linear least-squares reference datasets kept in
//! `data/nist/*.txt` (converted from NIST's originals by
//! `data/nist/convert.py`; the format is described in `data/nist/README.md`).
//!
//! Test-support code: on a malformed or missing file it panics with a message
//! naming the file and line.
//!
//! Design matrix: `Dataset::x` never holds the column of ones. For a
//! polynomial dataset of degree `d` it holds the columns `x, x^2, ..., x^d`,
//! where `x^k` is formed in `f64` by repeated multiplication,
//! `x^k = x^(k-1) * x` (no `powi`, no scaling or centring), so every consumer
//! sees exactly the same floating-point design.

#![allow(dead_code)]

use ndarray::{Array1, Array2};

/// The eleven datasets of the NIST StRD linear least-squares section, in
/// NIST's order (lower, average, then higher difficulty).
pub const ALL: [&str; 11] = [
    "Norris", "Pontius", "NoInt1", "NoInt2", "Filip", "Longley", "Wampler1", "Wampler2",
    "Wampler3", "Wampler4", "Wampler5",
];

/// Folder holding the converted datasets.
pub const DATA_DIR: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/data/nist/");

/// Certified values published by NIST for one dataset (computed by NIST in
/// multiple-precision arithmetic and rounded to 15 significant digits).
#[derive(Debug, Clone, PartialEq)]
pub struct Certified {
    /// `(estimate, standard deviation)` of the intercept B0, when the model has one.
    pub intercept: Option<(f64, f64)>,
    /// `(estimate, standard deviation)` of B1, B2, ... in the column order of `Dataset::x`.
    pub coefficients: Vec<(f64, f64)>,
    /// Residual standard deviation, `sqrt(ss_residual / df_residual)`.
    pub residual_sd: f64,
    /// R². Centered for models with an intercept; uncentered
    /// (`ss_regression / (ss_regression + ss_residual)`, sums about zero)
    /// for the no-intercept models NoInt1 and NoInt2.
    pub r_squared: f64,
    /// Degrees of freedom of the regression (number of slopes).
    pub df_regression: f64,
    /// Regression sum of squares (uncentered without an intercept).
    pub ss_regression: f64,
    /// Regression mean square.
    pub ms_regression: f64,
    /// F statistic; `f64::INFINITY` for the exact fits Wampler1 and Wampler2.
    pub f_statistic: f64,
    /// Residual degrees of freedom, `n - number of parameters`.
    pub df_residual: f64,
    /// Residual sum of squares.
    pub ss_residual: f64,
    /// Residual mean square.
    pub ms_residual: f64,
}

impl Certified {
    /// All estimates in parameter order (B0 first when there is an intercept).
    pub fn estimates(&self) -> Vec<f64> {
        self.intercept
            .iter()
            .chain(self.coefficients.iter())
            .map(|p| p.0)
            .collect()
    }

    /// All standard deviations in parameter order (B0 first when there is an intercept).
    pub fn std_devs(&self) -> Vec<f64> {
        self.intercept
            .iter()
            .chain(self.coefficients.iter())
            .map(|p| p.1)
            .collect()
    }
}

/// One NIST dataset, ready to fit.
#[derive(Debug, Clone)]
pub struct Dataset {
    pub name: String,
    /// Whether the certified model has an intercept B0.
    pub intercept: bool,
    /// `Some(d)` for the polynomial models (one predictor, columns `x..x^d`),
    /// `None` for Longley (six separate predictors).
    pub degree: Option<usize>,
    /// NIST's difficulty rating: `"lower"`, `"average"` or `"higher"`.
    pub difficulty: String,
    /// `n x p` design matrix WITHOUT the column of ones (see the module docs).
    pub x: Array2<f64>,
    /// Response, length `n`.
    pub y: Array1<f64>,
    pub certified: Certified,
}

impl Dataset {
    /// Number of observations.
    pub fn n_obs(&self) -> usize {
        self.y.len()
    }

    /// Number of fitted parameters, intercept included.
    pub fn n_params(&self) -> usize {
        self.x.ncols() + usize::from(self.intercept)
    }
}

/// Log relative error: the number of correct significant digits of
/// `computed` against `certified`.
///
/// `-log10(|computed - certified| / |certified|)`, or `-log10(|computed|)`
/// when `certified` is 0; clamped to `[0, 15]` (15 = all certified digits).
/// An exact match gives 15. A non-finite `computed` gives 0, except that an
/// infinity equal to an infinite certified value (the F statistic of an
/// exact fit) counts as an exact match.
pub fn lre(computed: f64, certified: f64) -> f64 {
    const CAP: f64 = 15.0;
    if computed == certified {
        return CAP;
    }
    if !computed.is_finite() || !certified.is_finite() {
        return 0.0;
    }
    let err = if certified == 0.0 {
        computed.abs()
    } else {
        (computed - certified).abs() / certified.abs()
    };
    let digits = -err.log10();
    if digits.is_nan() {
        0.0
    } else {
        digits.clamp(0.0, CAP)
    }
}

/// Load `data/nist/<name>.txt`. Panics with a clear message if the file is
/// missing or malformed.
pub fn load(name: &str) -> Dataset {
    let path = format!("{DATA_DIR}{name}.txt");
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read NIST dataset {name:?} at {path}: {e}"));
    let ds = parse(&text, &path);
    assert_eq!(
        ds.name, name,
        "{path}: file names dataset {:?}, expected {name:?}",
        ds.name
    );
    ds
}

enum Model {
    Polynomial(usize),
    Linear(usize),
}

fn num(tok: &str, path: &str, line: usize) -> f64 {
    tok.parse::<f64>()
        .unwrap_or_else(|e| panic!("{path}:{line}: cannot parse number {tok:?}: {e}"))
}

fn count(tok: &str, path: &str, line: usize) -> usize {
    tok.parse::<usize>()
        .unwrap_or_else(|e| panic!("{path}:{line}: cannot parse count {tok:?}: {e}"))
}

/// Parse the text of one dataset file; `path` is used in error messages only.
pub fn parse(text: &str, path: &str) -> Dataset {
    let mut name: Option<String> = None;
    let mut model: Option<Model> = None;
    let mut intercept: Option<bool> = None;
    let mut difficulty: Option<String> = None;
    let mut observations: Option<usize> = None;
    let mut params: Vec<(usize, f64, f64)> = Vec::new();
    let mut scalars: Vec<(String, f64)> = Vec::new();
    let mut rows: Vec<Vec<f64>> = Vec::new();
    let mut in_data = false;

    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        let content = raw.trim();
        if content.is_empty() || content.starts_with('#') {
            continue;
        }
        let toks: Vec<&str> = content.split_whitespace().collect();
        if in_data {
            rows.push(toks.iter().map(|t| num(t, path, line)).collect());
            continue;
        }
        match toks.as_slice() {
            ["name", n] => name = Some((*n).to_string()),
            ["model", "polynomial", d] => model = Some(Model::Polynomial(count(d, path, line))),
            ["model", "linear", k] => model = Some(Model::Linear(count(k, path, line))),
            ["intercept", "yes"] => intercept = Some(true),
            ["intercept", "no"] => intercept = Some(false),
            ["difficulty", d] => difficulty = Some((*d).to_string()),
            ["origin", _] => {}
            ["observations", n] => observations = Some(count(n, path, line)),
            ["certified", "coefficient", idx, est, sd] => params.push((
                count(idx, path, line),
                num(est, path, line),
                num(sd, path, line),
            )),
            ["certified", key, value] => {
                let known = [
                    "residual_sd",
                    "r_squared",
                    "df_regression",
                    "ss_regression",
                    "ms_regression",
                    "f_statistic",
                    "df_residual",
                    "ss_residual",
                    "ms_residual",
                ];
                assert!(
                    known.contains(key),
                    "{path}:{line}: unknown certified value {key:?}"
                );
                assert!(
                    scalars.iter().all(|(k, _)| k != key),
                    "{path}:{line}: certified {key} given twice"
                );
                scalars.push(((*key).to_string(), num(value, path, line)));
            }
            ["data"] => in_data = true,
            _ => panic!("{path}:{line}: unrecognised line {content:?}"),
        }
    }

    let name = name.unwrap_or_else(|| panic!("{path}: missing `name`"));
    let model = model.unwrap_or_else(|| panic!("{path}: missing `model`"));
    let intercept = intercept.unwrap_or_else(|| panic!("{path}: missing `intercept`"));
    let difficulty = difficulty.unwrap_or_else(|| panic!("{path}: missing `difficulty`"));
    let n = observations.unwrap_or_else(|| panic!("{path}: missing `observations`"));
    assert!(in_data, "{path}: missing `data` section");
    assert_eq!(
        rows.len(),
        n,
        "{path}: {} data rows but `observations {n}`",
        rows.len()
    );

    let scalar = |key: &str| -> f64 {
        scalars
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| *v)
            .unwrap_or_else(|| panic!("{path}: missing `certified {key}`"))
    };

    // Parameters must be B0 (if intercept), B1, ..., Bp in order.
    let (predictors, degree) = match model {
        Model::Polynomial(d) => (1, Some(d)),
        Model::Linear(k) => (k, None),
    };
    let slopes = degree.unwrap_or(predictors);
    let first = if intercept { 0 } else { 1 };
    let indices: Vec<usize> = params.iter().map(|p| p.0).collect();
    let expected: Vec<usize> = (first..=slopes).collect();
    assert_eq!(
        indices, expected,
        "{path}: certified coefficient indices do not fit the model"
    );
    let mut params = params.into_iter().map(|(_, e, s)| (e, s));
    let certified = Certified {
        intercept: if intercept { params.next() } else { None },
        coefficients: params.collect(),
        residual_sd: scalar("residual_sd"),
        r_squared: scalar("r_squared"),
        df_regression: scalar("df_regression"),
        ss_regression: scalar("ss_regression"),
        ms_regression: scalar("ms_regression"),
        f_statistic: scalar("f_statistic"),
        df_residual: scalar("df_residual"),
        ss_residual: scalar("ss_residual"),
        ms_residual: scalar("ms_residual"),
    };

    let mut y = Array1::<f64>::zeros(n);
    let mut x = Array2::<f64>::zeros((n, slopes));
    for (r, row) in rows.iter().enumerate() {
        assert_eq!(
            row.len(),
            1 + predictors,
            "{path}: data row {} has {} values, expected {}",
            r + 1,
            row.len(),
            1 + predictors
        );
        y[r] = row[0];
        match degree {
            Some(d) => {
                let v = row[1];
                let mut power = v;
                for k in 0..d {
                    if k > 0 {
                        power *= v; // x^(k+1) = x^k * x
                    }
                    x[[r, k]] = power;
                }
            }
            None => {
                for (c, &v) in row[1..].iter().enumerate() {
                    x[[r, c]] = v;
                }
            }
        }
    }

    Dataset {
        name,
        intercept,
        degree,
        difficulty,
        x,
        y,
        certified,
    }
}

/// Digits of the certified coefficients that plain double-precision QR and
/// SVD keep on each NIST StRD linear dataset: the floors of
/// tests/accuracy.rs (see the note there on Wampler2), shared with
/// tests/backends.rs.
#[allow(dead_code)]
pub const FLOORS: [(&str, f64); 11] = [
    ("Norris", 12.0),
    ("Pontius", 12.0),
    ("NoInt1", 14.0),
    ("NoInt2", 14.0),
    ("Filip", 7.0),
    ("Longley", 10.0),
    ("Wampler1", 9.0),
    ("Wampler2", 13.0),
    ("Wampler3", 9.0),
    ("Wampler4", 7.0),
    ("Wampler5", 5.0),
];
