//! Intervals for the mean response and for a new observation at new rows.

use ndarray::{Array1, ArrayView1, ArrayView2};

use super::Inference;
use crate::error::{Error, Input, Result};
use crate::linalg::products::{quadratic_form, solve_upper_transposed};
use crate::model::{difference, LinearModel};
use crate::scaled::{exponent, ldexp};

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
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub level: f64,
    /// Predicted mean response `b0 + x0 . b` per row.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub fitted: Array1<f64>,
    /// Standard error of the mean response.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub mean_std_error: Array1<f64>,
    /// Lower end of the confidence interval of the mean response.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub mean_lower: Array1<f64>,
    /// Upper end of the confidence interval of the mean response.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub mean_upper: Array1<f64>,
    /// Standard error of a new observation (`sqrt(mean variance + sigma^2 / w0)`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub prediction_std_error: Array1<f64>,
    /// Lower end of the prediction interval of a new observation.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub prediction_lower: Array1<f64>,
    /// Upper end of the prediction interval of a new observation.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
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
    /// let inference = Qr::new().fit(&problem)?.inference(&problem)?;
    /// let at = inference.predict(array![[6.0]].view())?;
    /// assert!(at.prediction_lower[0] < at.mean_lower[0]);
    /// assert!(at.mean_upper[0] < at.prediction_upper[0]);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// Every number is formed in scaled units and mapped back at the end, so
    /// rows near the ends of the `f64` range give the intervals their
    /// values imply, or a typed error.
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`]; [`Error::NonFinite`] naming the row
    /// and column of a NaN or infinite entry; [`Error::OverflowAt`] naming
    /// the first row whose prediction or interval exceeds the range of
    /// `f64`.
    pub fn predict(&self, x: ArrayView2<'_, f64>) -> Result<Predictions> {
        self.predict_inner(x, None)
            .map_err(|e| e.name_columns(Some(&self.names)))
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
        let q = p + usize::from(self.intercept.is_some());
        let model = LinearModel::from_parts(
            self.coefficients.iter().map(|e| e.value).collect(),
            self.intercept.map_or(0.0, |e| e.value),
        );
        let ey = exponent(b.target_scale);
        let ws_exp = exponent(b.weight_scale);
        let inv_scale: Vec<f64> = b.scale.iter().map(|s| 1.0 / s).collect();
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
            for (j, &v) in row.iter().enumerate() {
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        input: Input::NewDesign,
                        row: i,
                        column: Some(j),
                        column_name: None,
                        value: v,
                    });
                }
                // The new row in scaled units, (x - m) / s (a difference of
                // values near the ends of the range is formed from halves).
                let (d, e) = difference(v, b.means[j]);
                g[j] = ldexp(d * inv_scale[j], e);
            }
            let fitted = model.predict_row(row).map_err(|e| match e {
                Error::OverflowAt { what, .. } => Error::OverflowAt { what, row: i },
                other => other,
            })?;
            solve_upper_transposed(r.as_ref(), &mut g[..p]);
            if q > p {
                g[p] = 1.0 / b.total_weight.sqrt();
            }
            // Standard errors in the caller's units, from norms and square
            // roots (no square of a small number is formed).
            let se_mean = match &meat {
                Some(meat) => ldexp(
                    quadratic_form(meat.as_ref(), &g).max(0.0).sqrt(),
                    ey + b.meat_exp / 2,
                ),
                None => ldexp(b.sigma_scaled * super::norm(g.iter().copied()), ey),
            };
            // sigma / sqrt(w0) in the caller's units: sigma~ s_y sqrt(ws / w0).
            let e = ws_exp - exponent(w0);
            let ratio = ldexp(b.weight_scale, -ws_exp) / ldexp(w0, -exponent(w0));
            let noise = ldexp(
                b.sigma_scaled * (ratio * f64::from(1 << e.rem_euclid(2))).sqrt(),
                ey + e.div_euclid(2),
            );
            let se_new = se_mean.hypot(noise);
            let t = self.critical_value;
            let values = [
                se_mean,
                fitted - t * se_mean,
                fitted + t * se_mean,
                se_new,
                fitted - t * se_new,
                fitted + t * se_new,
            ];
            if values.iter().any(|v| !v.is_finite()) {
                return Err(Error::OverflowAt {
                    what: "prediction interval",
                    row: i,
                });
            }
            out.fitted[i] = fitted;
            out.mean_std_error[i] = values[0];
            out.mean_lower[i] = values[1];
            out.mean_upper[i] = values[2];
            out.prediction_std_error[i] = values[3];
            out.prediction_lower[i] = values[4];
            out.prediction_upper[i] = values[5];
        }
        Ok(out)
    }
}
