//! The fitted linear model and what it can compute on new data.

use ndarray::{Array1, ArrayView1, ArrayView2};

use crate::error::{Error, Input, Result};
use crate::scaled::{exponent, ldexp};

/// Coefficients and intercept of a fitted linear model, in the caller's units:
/// `y_hat = intercept + x . coefficients`, with a name per column.
///
/// Every coefficient and the intercept are finite: [`LinearModel::new`]
/// checks them, and so does deserialisation (feature `serde`). The names
/// are those of the [`crate::Problem`] the model was fitted to
/// ([`crate::ProblemBuilder::with_names`]), or `x0`, `x1`, ... when it had
/// none.
///
/// ```
/// use leastline::LinearModel;
/// use ndarray::array;
///
/// let model = LinearModel::new(array![2.0, -1.0], 0.5)?;
/// assert_eq!(model.predict_row(array![1.0, 3.0].view())?, -0.5);
/// assert_eq!(model.names(), ["x0", "x1"]);
/// # Ok::<(), leastline::Error>(())
/// ```
///
/// # Saved form (feature `serde`)
///
/// A model is written as a JSON object of our own layout, version 1:
///
/// - `"format"`: the string `"leastline-model"`;
/// - `"version"`: the number `1`;
/// - `"intercept"`: the intercept;
/// - `"coefficients"`: a list of `{"name": ..., "value": ...}`, one per
///   column in the design's order.
///
/// Every number is a string holding the shortest decimal that Rust's
/// `str::parse::<f64>` reads back to the same bits, so the round trip is
/// exact with any JSON reader (a plain JSON number is accepted on the way
/// in, and is then what the reader made of it). Reading checks the tag,
/// the version, the names (non-empty, unique) and that every value is
/// finite; a failure is the message of the matching [`Error`]
/// ([`Error::SavedFormat`], [`Error::InvalidName`], [`Error::NonFinite`]).
///
/// ```
/// # #[cfg(feature = "serde")] {
/// use leastline::LinearModel;
/// use ndarray::array;
///
/// let model = LinearModel::new(array![0.1, -2.5e-7], 3.0)?.with_names(["rainfall", "altitude"])?;
/// let text = serde_json::to_string(&model).expect("a model is always written");
/// assert_eq!(
///     text,
///     r#"{"format":"leastline-model","version":1,"intercept":"3","coefficients":[{"name":"rainfall","value":"0.1"},{"name":"altitude","value":"-2.5e-7"}]}"#
/// );
/// let back: LinearModel = serde_json::from_str(&text).expect("written by this crate");
/// assert_eq!(back, model);
/// // A saved form of another format or version is refused.
/// let other = text.replace(r#""version":1"#, r#""version":2"#);
/// assert!(serde_json::from_str::<LinearModel>(&other).is_err());
/// # }
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Deserialize))]
#[cfg_attr(feature = "serde", serde(try_from = "saved::ModelData"))]
pub struct LinearModel {
    coefficients: Array1<f64>,
    intercept: f64,
    names: Vec<String>,
}

/// The default name of column `j`: `x0`, `x1`, ...
pub(crate) fn default_name(j: usize) -> String {
    format!("x{j}")
}

/// `x0`, `x1`, ... for `p` columns.
pub(crate) fn default_names(p: usize) -> Vec<String> {
    (0..p).map(default_name).collect()
}

/// Checks a list of column names for `columns` columns: the count, and
/// that every name is non-empty and unlike every other.
///
/// # Errors
/// [`Error::NameCountMismatch`]; [`Error::InvalidName`] naming the position.
pub(crate) fn check_names(names: &[String], columns: usize) -> Result<()> {
    if names.len() != columns {
        return Err(Error::NameCountMismatch {
            expected: columns,
            found: names.len(),
        });
    }
    if let Some(position) = names.iter().position(|n| n.trim().is_empty()) {
        return Err(Error::InvalidName {
            position,
            name: names[position].clone(),
            reason: "a name must hold a visible character",
        });
    }
    let mut order: Vec<usize> = crate::alloc::with_capacity("column names", names.len())?;
    order.extend(0..names.len());
    order.sort_by(|&a, &b| names[a].cmp(&names[b]).then(a.cmp(&b)));
    let repeat = order
        .windows(2)
        .filter(|w| names[w[0]] == names[w[1]])
        .map(|w| w[1])
        .min();
    if let Some(position) = repeat {
        return Err(Error::InvalidName {
            position,
            name: names[position].clone(),
            reason: "names must be unique and this one repeats an earlier name",
        });
    }
    Ok(())
}

#[cfg(feature = "serde")]
mod saved {
    //! The documented saved form of a model (see [`LinearModel`]).
    use super::*;
    use serde::{Deserialize, Serialize};

    pub(super) const FORMAT: &str = "leastline-model";
    pub(super) const VERSION: u32 = 1;

    #[derive(Serialize, Deserialize)]
    pub(super) struct Coefficient {
        pub name: String,
        #[serde(with = "crate::serde_float::float")]
        pub value: f64,
    }

    #[derive(Deserialize)]
    pub(crate) struct ModelData {
        format: String,
        version: u64,
        #[serde(with = "crate::serde_float::float")]
        intercept: f64,
        coefficients: Vec<Coefficient>,
    }

    #[derive(Serialize)]
    struct ModelOut {
        format: &'static str,
        version: u32,
        #[serde(with = "crate::serde_float::float")]
        intercept: f64,
        coefficients: Vec<Coefficient>,
    }

    impl Serialize for LinearModel {
        fn serialize<S: serde::Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
            ModelOut {
                format: FORMAT,
                version: VERSION,
                intercept: self.intercept,
                coefficients: self
                    .names
                    .iter()
                    .zip(self.coefficients.iter())
                    .map(|(name, &value)| Coefficient {
                        name: name.clone(),
                        value,
                    })
                    .collect(),
            }
            .serialize(s)
        }
    }

    impl TryFrom<ModelData> for LinearModel {
        type Error = Error;
        fn try_from(data: ModelData) -> Result<Self> {
            crate::serde_float::check_tag("model", FORMAT, VERSION, &data.format, data.version)?;
            let (names, values): (Vec<String>, Vec<f64>) = data
                .coefficients
                .into_iter()
                .map(|c| (c.name, c.value))
                .unzip();
            LinearModel::new(Array1::from(values), data.intercept)?.with_names(names)
        }
    }
}

impl LinearModel {
    /// A model with the given slopes and intercept (use 0 for none), its
    /// columns named `x0`, `x1`, ... (see [`Self::with_names`]).
    ///
    /// # Errors
    /// [`Error::NonFinite`] with [`Input::Coefficients`] for a NaN or
    /// infinite value: `row` is the slope's column, or the number of slopes
    /// for the intercept.
    pub fn new(coefficients: Array1<f64>, intercept: f64) -> Result<Self> {
        let p = coefficients.len();
        let bad = coefficients
            .iter()
            .copied()
            .chain(std::iter::once(intercept))
            .enumerate()
            .find(|(_, v)| !v.is_finite());
        if let Some((row, value)) = bad {
            return Err(Error::NonFinite {
                input: Input::Coefficients,
                row: row.min(p),
                column: None,
                column_name: None,
                value,
            });
        }
        Ok(Self::from_parts(coefficients, intercept))
    }

    /// The same model with the given column names, one per coefficient.
    ///
    /// # Errors
    /// [`Error::NameCountMismatch`] when the count differs from the number
    /// of coefficients; [`Error::InvalidName`] for an empty name or one
    /// that repeats an earlier name (naming its position, from 0).
    pub fn with_names<S: Into<String>>(
        mut self,
        names: impl IntoIterator<Item = S>,
    ) -> Result<Self> {
        let names: Vec<String> = names.into_iter().map(Into::into).collect();
        check_names(&names, self.columns())?;
        self.names = names;
        Ok(self)
    }

    /// A model from values already known to be finite (the solvers check).
    pub(crate) fn from_parts(coefficients: Array1<f64>, intercept: f64) -> Self {
        debug_assert!(coefficients.iter().all(|b| b.is_finite()) && intercept.is_finite());
        let names = default_names(coefficients.len());
        LinearModel {
            coefficients,
            intercept,
            names,
        }
    }

    /// A fitted model (finite values) named after the problem's columns
    /// (the problem's `names()`, already checked by `check_names`).
    pub(crate) fn fitted(
        names: Option<&[String]>,
        coefficients: Array1<f64>,
        intercept: f64,
    ) -> Self {
        let mut model = Self::from_parts(coefficients, intercept);
        if let Some(names) = names {
            debug_assert_eq!(names.len(), model.columns());
            model.names = names.to_vec();
        }
        model
    }

    /// The name of each column (`x0`, `x1`, ... unless set).
    pub fn names(&self) -> &[String] {
        &self.names
    }

    /// The slope of each column, in the caller's units.
    pub fn coefficients(&self) -> ArrayView1<'_, f64> {
        self.coefficients.view()
    }

    /// The intercept (0 when the fit had none).
    pub fn intercept(&self) -> f64 {
        self.intercept
    }

    /// Number of columns the model expects.
    pub fn columns(&self) -> usize {
        self.coefficients.len()
    }

    /// Prediction for one row: `intercept + row . coefficients`.
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`] if the row has the wrong length;
    /// [`Error::NonFinite`] (row 0) for a NaN or infinite entry;
    /// [`Error::OverflowAt`] (row 0) when the prediction exceeds the range
    /// of `f64`.
    pub fn predict_row(&self, row: ArrayView1<'_, f64>) -> Result<f64> {
        if row.len() != self.columns() {
            return Err(Error::ColumnCountMismatch {
                expected: self.columns(),
                found: row.len(),
            });
        }
        let mut acc = self.intercept;
        for (j, (&v, &b)) in row.iter().zip(self.coefficients.iter()).enumerate() {
            if !v.is_finite() {
                return Err(Error::NonFinite {
                    input: Input::NewDesign,
                    row: 0,
                    column: Some(j),
                    column_name: None,
                    value: v,
                });
            }
            acc += v * b;
        }
        if acc.is_finite() {
            return Ok(acc);
        }
        // A product or partial sum left the range: form the sum again with
        // every term as mantissa times a power of two.
        let terms = row
            .iter()
            .zip(self.coefficients.iter())
            .map(|(&v, &b)| product_parts(v, b))
            .chain(std::iter::once((self.intercept, 0)));
        let value = scaled_sum(terms);
        if !value.is_finite() {
            return Err(Error::OverflowAt {
                what: "prediction",
                row: 0,
            });
        }
        Ok(value)
    }

    /// Predictions for every row of `x` (`m x p`, any layout).
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`]; [`Error::NonFinite`] naming the row
    /// and column of the first NaN or infinity; [`Error::OverflowAt`]
    /// naming the first row whose prediction exceeds the range of `f64`.
    pub fn predict(&self, x: ArrayView2<'_, f64>) -> Result<Array1<f64>> {
        if x.ncols() != self.columns() {
            return Err(Error::ColumnCountMismatch {
                expected: self.columns(),
                found: x.ncols(),
            });
        }
        let mut out = Array1::zeros(x.nrows());
        for (i, row) in x.rows().into_iter().enumerate() {
            out[i] = self
                .predict_row(row)
                .map_err(|e| match e {
                    Error::NonFinite {
                        input,
                        column,
                        value,
                        ..
                    } => Error::NonFinite {
                        input,
                        row: i,
                        column,
                        column_name: None,
                        value,
                    },
                    Error::OverflowAt { what, .. } => Error::OverflowAt { what, row: i },
                    other => other,
                })
                .map_err(|e| e.name_columns(Some(&self.names)))?;
        }
        Ok(out)
    }

    /// Residuals `y_hat - y` as `(mantissa, exponent)` pairs (a difference
    /// of two values near the ends of the range may exceed it).
    fn residual_parts(
        &self,
        x: ArrayView2<'_, f64>,
        y: ArrayView1<'_, f64>,
    ) -> Result<Vec<(f64, i32)>> {
        if y.len() != x.nrows() {
            return Err(Error::LengthMismatch {
                input: Input::NewTarget,
                design_rows: x.nrows(),
                len: y.len(),
            });
        }
        if x.nrows() == 0 {
            return Err(Error::NoRows);
        }
        for (row, &value) in y.iter().enumerate() {
            if !value.is_finite() {
                return Err(Error::NonFinite {
                    input: Input::NewTarget,
                    row,
                    column: None,
                    column_name: None,
                    value,
                });
            }
        }
        let fitted = self.predict(x)?;
        Ok(fitted
            .iter()
            .zip(y)
            .map(|(&f, &v)| difference(f, v))
            .collect())
    }

    /// The mean squared error `(1 / n) sum_i (y_i - y_hat_i)^2` on the given
    /// data: the crate's loss (see [the crate docs](crate#the-loss)) with
    /// every weight 1.
    ///
    /// # Errors
    /// As [`LinearModel::predict`], plus [`Error::LengthMismatch`] and
    /// [`Error::NoRows`]; [`Error::Overflow`] when the value exceeds the
    /// range of `f64`.
    pub fn mean_squared_error(
        &self,
        x: ArrayView2<'_, f64>,
        y: ArrayView1<'_, f64>,
    ) -> Result<f64> {
        let r = self.residual_parts(x, y)?;
        let (m, e) = sum_of_squares(&r);
        let n = r.len() as f64;
        let loss = ldexp(m / n, e);
        if !loss.is_finite() {
            return Err(Error::Overflow {
                what: "mean squared error",
            });
        }
        Ok(loss)
    }

    /// The coefficient of determination on the given data:
    /// `1 - sum (y - y_hat)^2 / sum (y - mean(y))^2`.
    ///
    /// This is the centered R²; for a model fitted without an intercept the
    /// uncentered form (sum of squares about zero) is the usual measure and
    /// is what the fit report's inference uses. When `y` is constant the
    /// denominator is zero and the result is `-inf`, `NaN` is never returned:
    /// a perfect fit of a constant gives 1. Both sums are formed from values
    /// divided by a power of two, so data near the ends of the `f64` range
    /// give the same R² as the same data near 1.
    ///
    /// # Errors
    /// As [`LinearModel::predict`], plus [`Error::LengthMismatch`] and
    /// [`Error::NoRows`].
    pub fn r_squared(&self, x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>) -> Result<f64> {
        let r = self.residual_parts(x, y)?;
        let mean = crate::scaled::weighted_mean(y.iter().map(|&v| (1.0, v)));
        let spread: Vec<(f64, i32)> = y.iter().map(|&v| difference(v, mean)).collect();
        let (mr, er) = sum_of_squares(&r);
        let (mt, et) = sum_of_squares(&spread);
        if mt == 0.0 {
            return Ok(if mr == 0.0 { 1.0 } else { f64::NEG_INFINITY });
        }
        // The ratio of two sums: its exponent may be large; 1 - ratio is
        // then -inf only when the ratio itself exceeds the range.
        let ratio = ldexp(mr / mt, er - et);
        Ok(1.0 - ratio)
    }
}

/// `a - b` as `(m, e)` with `a - b = m 2^e` (`e` is 1 when the plain
/// difference would overflow, and then `m` is formed from halves).
pub(crate) fn difference(a: f64, b: f64) -> (f64, i32) {
    let d = a - b;
    if d.is_finite() {
        (d, 0)
    } else {
        (0.5 * a - 0.5 * b, 1)
    }
}

/// `v b` as `(m, e)` with `v b = m 2^e`, never overflowing.
fn product_parts(v: f64, b: f64) -> (f64, i32) {
    if v == 0.0 || b == 0.0 {
        return (0.0, 0);
    }
    let (ev, eb) = (exponent(v), exponent(b));
    (ldexp(v, -ev) * ldexp(b, -eb), ev + eb)
}

/// `sum_i m_i 2^e_i`, rounded once at the end to `f64` (infinite beyond
/// the range): the terms are brought to the largest exponent first.
fn scaled_sum(terms: impl Iterator<Item = (f64, i32)> + Clone) -> f64 {
    let top = terms
        .clone()
        .filter(|(m, _)| *m != 0.0)
        .map(|(m, e)| exponent(m) + e)
        .max();
    let Some(top) = top else {
        return 0.0;
    };
    let mut acc = crate::scaled::Neumaier::default();
    for (m, e) in terms {
        acc.add(ldexp(m, e - top));
    }
    ldexp(acc.value(), top)
}

/// `sum_i (m_i 2^e_i)^2` as `(mantissa, exponent)`, without overflow or
/// underflow of the squares.
fn sum_of_squares(values: &[(f64, i32)]) -> (f64, i32) {
    let top = values
        .iter()
        .filter(|(m, _)| *m != 0.0)
        .map(|(m, e)| exponent(*m) + e)
        .max();
    let Some(top) = top else {
        return (0.0, 0);
    };
    let mut acc = crate::scaled::Neumaier::default();
    for &(m, e) in values {
        let s = ldexp(m, e - top);
        acc.add(s * s);
    }
    (acc.value(), 2 * top)
}
