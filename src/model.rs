//! The fitted linear model and what it can compute on new data.

use ndarray::{Array1, ArrayView1, ArrayView2};

use crate::error::{Error, Input, Result};

/// Coefficients and intercept of a fitted linear model, in the caller's units:
/// `y_hat = intercept + x . coefficients`.
///
/// ```
/// use leastline::LinearModel;
/// use ndarray::array;
///
/// let model = LinearModel::new(array![2.0, -1.0], 0.5);
/// assert_eq!(model.predict_row(array![1.0, 3.0].view())?, -0.5);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct LinearModel {
    coefficients: Array1<f64>,
    intercept: f64,
}

impl LinearModel {
    /// A model with the given slopes and intercept (use 0 for none).
    pub fn new(coefficients: Array1<f64>, intercept: f64) -> Self {
        LinearModel {
            coefficients,
            intercept,
        }
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
    pub fn cols(&self) -> usize {
        self.coefficients.len()
    }

    /// Prediction for one row: `intercept + row . coefficients`.
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`] if the row has the wrong length;
    /// [`Error::NonFinite`] (row 0) for a NaN or infinite entry.
    pub fn predict_row(&self, row: ArrayView1<'_, f64>) -> Result<f64> {
        if row.len() != self.cols() {
            return Err(Error::ColumnCountMismatch {
                expected: self.cols(),
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
                    value: v,
                });
            }
            acc += v * b;
        }
        Ok(acc)
    }

    /// Predictions for every row of `x` (`m x p`, any layout).
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`]; [`Error::NonFinite`] naming the row
    /// and column of the first NaN or infinity.
    pub fn predict(&self, x: ArrayView2<'_, f64>) -> Result<Array1<f64>> {
        if x.ncols() != self.cols() {
            return Err(Error::ColumnCountMismatch {
                expected: self.cols(),
                found: x.ncols(),
            });
        }
        let mut out = Array1::zeros(x.nrows());
        for (i, row) in x.rows().into_iter().enumerate() {
            out[i] = self.predict_row(row).map_err(|e| match e {
                Error::NonFinite {
                    input,
                    column,
                    value,
                    ..
                } => Error::NonFinite {
                    input,
                    row: i,
                    column,
                    value,
                },
                other => other,
            })?;
        }
        Ok(out)
    }

    fn residuals(&self, x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>) -> Result<Array1<f64>> {
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
                    value,
                });
            }
        }
        Ok(self.predict(x)? - y)
    }

    /// The squared loss `(1 / 2n) sum_i (y_hat_i - y_i)^2` on the given data.
    ///
    /// # Errors
    /// As [`LinearModel::predict`], plus [`Error::LengthMismatch`] and
    /// [`Error::NoRows`].
    pub fn squared_loss(&self, x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>) -> Result<f64> {
        let r = self.residuals(x, y)?;
        let n = r.len() as f64;
        Ok(r.iter().map(|v| v * v).sum::<f64>() / (2.0 * n))
    }

    /// The coefficient of determination on the given data:
    /// `1 - sum (y - y_hat)^2 / sum (y - mean(y))^2`.
    ///
    /// This is the centered R²; for a model fitted without an intercept the
    /// uncentered form (sum of squares about zero) is the usual measure and
    /// is what the fit report's inference uses. When `y` is constant the
    /// denominator is zero and the result is `-inf`, `NaN` is never returned:
    /// a perfect fit of a constant gives 1.
    ///
    /// # Errors
    /// As [`LinearModel::squared_loss`].
    pub fn r_squared(&self, x: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>) -> Result<f64> {
        let r = self.residuals(x, y)?;
        let mean = y.iter().sum::<f64>() / y.len() as f64;
        let ss_res: f64 = r.iter().map(|v| v * v).sum();
        let ss_tot: f64 = y.iter().map(|v| (v - mean) * (v - mean)).sum();
        if ss_tot == 0.0 {
            return Ok(if ss_res == 0.0 {
                1.0
            } else {
                f64::NEG_INFINITY
            });
        }
        Ok(1.0 - ss_res / ss_tot)
    }
}
