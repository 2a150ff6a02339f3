//! Intervals for the mean response and for a new observation at new rows.

use ndarray::{Array1, ArrayView1, ArrayView2};

use super::Inference;
use crate::error::{Error, Input, Result};
use crate::linalg::products::{quadratic_form, solve_upper_transposed};

/// Predictions at new rows with their intervals (all at the level of the
/// [`Inference`] they came from).
///
/// For a new row `x0` (with the intercept entry 1 when fitted):
/// - the **mean response** `x0 . b` has variance `x0^T C x0` with `C` the
///   selected covariance of the estimates;
/// - a **new observation** at `x0` with weight `w0` has, in addition, the
///   noise variance `sigma^2 / w0`, where `sigma^2` is the residual
///   variance. The default weight is 1: a new observation as precise as a
///   training row of weight 1. Under a sandwich covariance the noise term
///   still uses `sigma^2`, the average noise level, which is only a guide
///   when the noise variance really changes from row to row.
///
/// Both intervals are `value ± t * std_error` with the Student t quantile of
/// [`Inference::critical_value`].
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct Predictions {
    /// Confidence level of the intervals.
    pub level: f64,
    /// Predicted mean response `b0 + x0 . b` per row.
    pub fitted: Array1<f64>,
    /// Standard error of the mean response.
    pub mean_std_error: Array1<f64>,
    /// Lower end of the confidence interval of the mean response.
    pub mean_lower: Array1<f64>,
    /// Upper end of the confidence interval of the mean response.
    pub mean_upper: Array1<f64>,
    /// Standard error of a new observation (`sqrt(mean variance + sigma^2 / w0)`).
    pub prediction_std_error: Array1<f64>,
    /// Lower end of the prediction interval of a new observation.
    pub prediction_lower: Array1<f64>,
    /// Upper end of the prediction interval of a new observation.
    pub prediction_upper: Array1<f64>,
}

impl Inference {
    /// Predictions with intervals at the rows of `x` (`m x p`, any layout);
    /// a new observation has weight 1.
    ///
    /// ```
    /// use leastline::{Problem, Qr, Solver};
    /// use ndarray::array;
    ///
    /// // Weekly orders of a bakery against a promotion index.
    /// let x = array![[0.0], [1.0], [2.0], [3.0], [4.0], [5.0]];
    /// let y = array![10.2, 11.9, 14.1, 15.8, 18.3, 19.9];
    /// let problem = Problem::new(x.view(), y.view())?;
    /// let inference = Qr::default().fit(&problem)?.inference(&problem)?;
    /// let at = inference.predict(array![[6.0]].view())?;
    /// assert!(at.prediction_lower[0] < at.mean_lower[0]);
    /// assert!(at.mean_upper[0] < at.prediction_upper[0]);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`]; [`Error::NonFinite`] naming the row
    /// and column of a NaN or infinite entry.
    pub fn predict(&self, x: ArrayView2<'_, f64>) -> Result<Predictions> {
        self.predict_inner(x, None)
    }

    /// As [`Inference::predict`], with a weight (precision) per new row for
    /// the prediction interval: the noise variance of row `i` is
    /// `sigma^2 / weights[i]`.
    ///
    /// # Errors
    /// As [`Inference::predict`], plus [`Error::LengthMismatch`] and
    /// [`Error::InvalidWeight`] for a weight that is not finite and `> 0`.
    pub fn predict_weighted(
        &self,
        x: ArrayView2<'_, f64>,
        weights: ArrayView1<'_, f64>,
    ) -> Result<Predictions> {
        if weights.len() != x.nrows() {
            return Err(Error::LengthMismatch {
                input: Input::Weights,
                design_rows: x.nrows(),
                len: weights.len(),
            });
        }
        self.predict_inner(x, Some(weights))
    }

    fn predict_inner(
        &self,
        x: ArrayView2<'_, f64>,
        weights: Option<ArrayView1<'_, f64>>,
    ) -> Result<Predictions> {
        let p = self.coefficients.len();
        if x.ncols() != p {
            return Err(Error::ColumnCountMismatch {
                expected: p,
                found: x.ncols(),
            });
        }
        let m = x.nrows();
        let b = &self.basis;
        let r = self.basis_r();
        let meat = self.basis_meat();
        let q = meat.nrows();
        let intercept = self.intercept.map_or(0.0, |e| e.value);
        let sy = b.target_scale;
        let mut out = Predictions {
            level: self.options.level,
            fitted: Array1::zeros(m),
            mean_std_error: Array1::zeros(m),
            mean_lower: Array1::zeros(m),
            mean_upper: Array1::zeros(m),
            prediction_std_error: Array1::zeros(m),
            prediction_lower: Array1::zeros(m),
            prediction_upper: Array1::zeros(m),
        };
        let mut g = vec![0.0; q];
        for (i, row) in x.rows().into_iter().enumerate() {
            let w0 = match &weights {
                Some(w) => {
                    let v = w[i];
                    if !(v.is_finite() && v > 0.0) {
                        return Err(Error::InvalidWeight { row: i, value: v });
                    }
                    v
                }
                None => 1.0,
            };
            let mut fitted = intercept;
            for (j, &v) in row.iter().enumerate() {
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        input: Input::NewDesign,
                        row: i,
                        column: Some(j),
                        value: v,
                    });
                }
                fitted += v * self.coefficients[j].value;
                g[j] = (v - b.means[j]) * (sy / b.scale[j]);
            }
            solve_upper_transposed(r.as_ref(), &mut g[..p]);
            if q > p {
                g[p] = sy / b.total_weight.sqrt();
            }
            let var_mean = quadratic_form(meat.as_ref(), &g).max(0.0);
            let se_mean = var_mean.sqrt();
            let se_new = (var_mean + self.residual_variance / w0).sqrt();
            let t = self.critical_value;
            out.fitted[i] = fitted;
            out.mean_std_error[i] = se_mean;
            out.mean_lower[i] = fitted - t * se_mean;
            out.mean_upper[i] = fitted + t * se_mean;
            out.prediction_std_error[i] = se_new;
            out.prediction_lower[i] = fitted - t * se_new;
            out.prediction_upper[i] = fitted + t * se_new;
        }
        if out.prediction_std_error.iter().any(|v| !v.is_finite()) {
            return Err(Error::Overflow {
                what: "prediction standard error",
            });
        }
        Ok(out)
    }
}
