//! Per-row diagnostics: leverage, studentized residuals, Cook's distance.

use ndarray::Array1;

use super::{Inference, LEVERAGE_ONE};
use crate::error::{Error, Result};
use crate::passes::leverage::{row_pass, RowPassSpec};
use crate::problem::Problem;
use crate::scaled::ldexp;

/// Per-row diagnostics of a fit (one entry per row of the design, rows of
/// weight zero included).
///
/// With `e~_i = sqrt(w_i) e_i` the weighted residual, `h_i` the leverage,
/// `sigma` the residual standard deviation, `df = n - k` and `k` the number
/// of parameters:
/// - **leverage** `h_i`: the diagonal of the hat matrix of the weighted
///   design with its ones column, computed as the squared length of row `i`
///   of `Z R^-1` (plus `w_i / sum w` for the intercept) without forming the
///   hat matrix. The leverages sum to `k`; rows of weight zero have 0;
/// - **studentized** (internally): `r_i = e~_i / (sigma sqrt(1 - h_i))`;
/// - **deleted studentized** (externally): `t_i = e~_i / (sigma_(i) sqrt(1 - h_i))`
///   with `sigma_(i)^2 = (df sigma^2 - e~_i^2 / (1 - h_i)) / (df - 1)`, the
///   residual variance of the fit without row `i` (an exact identity, no
///   refit is run); it follows Student's t with `df - 1` degrees of freedom
///   under the model;
/// - **Cook's distance** `D_i = r_i^2 h_i / (k (1 - h_i))`: how far the
///   fitted values move, in units of `k sigma^2`, when row `i` is left out.
///
/// These use the classical `sigma` whatever covariance the inference used.
/// An entry is `None` where it is undefined: rows of weight zero, rows of
/// leverage 1 (to within `1e-10`), an exact fit (`sigma = 0`), and for the
/// deleted residual when `df < 2` or `sigma_(i) = 0`.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct Diagnostics {
    /// Leverage (hat value) of every row.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub leverage: Array1<f64>,
    /// Residuals `y_i - y_hat_i` in the caller's units (unweighted).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::array1"))]
    pub residuals: Array1<f64>,
    /// Internally studentized residuals.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats_or_none"))]
    pub studentized: Vec<Option<f64>>,
    /// Externally studentized (deleted) residuals.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats_or_none"))]
    pub deleted_studentized: Vec<Option<f64>>,
    /// Cook's distances.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats_or_none"))]
    pub cooks_distance: Vec<Option<f64>>,
    /// Parameters `k` (the leverages' sum).
    pub parameters: usize,
    /// Rows with non-zero weight.
    pub usable_rows: usize,
}

fn largest(values: impl Iterator<Item = (usize, f64)>) -> Option<(usize, f64)> {
    values.fold(None, |best, (i, v)| match best {
        Some((_, b)) if b >= v => best,
        _ => Some((i, v)),
    })
}

impl Diagnostics {
    /// Row and value of the largest leverage.
    pub fn largest_leverage(&self) -> Option<(usize, f64)> {
        largest(self.leverage.iter().copied().enumerate())
    }

    /// Row and value of the largest absolute deleted studentized residual.
    pub fn largest_deleted_studentized(&self) -> Option<(usize, f64)> {
        largest(
            self.deleted_studentized
                .iter()
                .enumerate()
                .filter_map(|(i, v)| v.map(|v| (i, v.abs()))),
        )
    }

    /// Row and value of the largest Cook's distance.
    pub fn largest_cooks_distance(&self) -> Option<(usize, f64)> {
        largest(
            self.cooks_distance
                .iter()
                .enumerate()
                .filter_map(|(i, v)| v.map(|v| (i, v))),
        )
    }
}

impl Inference {
    /// Per-row diagnostics of the fit on `problem`, which must be the
    /// problem the inference was computed from.
    ///
    /// Cost: one pass over the design (`about 2 n p^2` flops), and four
    /// vectors of length `n`. The hat matrix is never formed.
    ///
    /// ```
    /// use leastline::{Problem, Qr, Solver};
    /// use ndarray::array;
    ///
    /// // Fuel used by a delivery van on six routes against route length (km).
    /// let x = array![[12.0], [15.0], [9.0], [30.0], [14.0], [11.0]];
    /// let y = array![1.4, 1.7, 1.1, 3.9, 1.6, 1.3];
    /// let problem = Problem::new(x.view(), y.view())?;
    /// let inference = Qr::new().fit(&problem)?.inference(&problem)?;
    /// let diagnostics = inference.diagnostics(&problem)?;
    /// assert!((diagnostics.leverage.sum() - 2.0).abs() < 1e-12);
    /// assert_eq!(diagnostics.largest_leverage().map(|(row, _)| row), Some(3));
    /// # Ok::<(), leastline::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`crate::Error::ColumnCountMismatch`] for a problem with another
    /// number of columns; [`crate::Error::InferenceRefused`] with
    /// [`super::InferenceRefusal::DifferentData`] when its
    /// [`Problem::fingerprint`] differs from the fitted problem's;
    /// [`crate::Error::OverflowAt`] for a residual beyond the range of
    /// `f64` (a row of weight zero far outside the data, say);
    /// [`crate::Error::TooLarge`] when the per-row vectors cannot be
    /// allocated.
    pub fn diagnostics(&self, problem: &Problem<'_>) -> Result<Diagnostics> {
        let scaling = self.check_problem(problem)?;
        let r = self.basis_r();
        let pass = row_pass(
            problem,
            &scaling,
            RowPassSpec {
                r: r.as_ref(),
                gamma: &self.basis.gamma,
                intercept_weight: self.intercept.is_some().then_some(self.basis.total_weight),
                meat_power: None,
                residual_scale: 1.0,
                keep_rows: true,
                leverage_one: LEVERAGE_ONE,
            },
        )?;
        drop(r);
        // Residuals in the caller's units from their scaled values.
        let mut residuals = pass.residuals;
        for (row, e) in residuals.iter_mut().enumerate() {
            *e = ldexp(*e, scaling.target_exp);
            if !e.is_finite() {
                return Err(Error::OverflowAt {
                    what: "residual",
                    row,
                });
            }
        }
        let n = problem.rows();
        let df = self.residual_df as f64;
        let k = self.parameters as f64;
        let sigma = self.basis.sigma_scaled;
        let mut studentized = crate::alloc::with_capacity("studentized residuals", n)?;
        let mut deleted = crate::alloc::with_capacity("deleted residuals", n)?;
        let mut cooks = crate::alloc::with_capacity("Cook's distances", n)?;
        for i in 0..n {
            let h = pass.leverage[i];
            let gap = 1.0 - h;
            let usable = problem.scaled_weight(i) > 0.0;
            if !usable || gap <= LEVERAGE_ONE || sigma == 0.0 {
                studentized.push(None);
                deleted.push(None);
                cooks.push(None);
                continue;
            }
            // The residual in units of sigma (a ratio: nothing squared
            // before it is scale-free).
            let e = pass.scaled_residuals[i] / sigma;
            let r_i = e / gap.sqrt();
            studentized.push(Some(r_i));
            cooks.push(Some(r_i * r_i * h / (k * gap)));
            // sigma_(i)^2 / sigma^2 = (df - e^2 / gap) / (df - 1).
            let s2_i = if df >= 2.0 {
                (df - e * e / gap) / (df - 1.0)
            } else {
                0.0
            };
            deleted.push((s2_i > 0.0).then(|| e / (s2_i.sqrt() * gap.sqrt())));
        }
        Ok(Diagnostics {
            leverage: Array1::from(pass.leverage),
            residuals: Array1::from(residuals),
            studentized,
            deleted_studentized: deleted,
            cooks_distance: cooks,
            parameters: self.parameters,
            usable_rows: self.usable_rows,
        })
    }
}
