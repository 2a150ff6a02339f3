use faer::Mat;

use crate::error::{Error, Result};
use crate::linalg::{qr::tall_skinny_r, triangular};
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::{check_tolerance, finish_closed_form, Fit, Solver};

use super::dependent_columns;

/// Householder QR of the centered design: the default solver.
///
/// Factors `Z = Q R`, where `Z` is the design centered by its weighted
/// means, rows weighted by `sqrt(w)` and columns scaled by exact powers of
/// two, with the target appended as a last column; then solves `R b = Q^T y`
/// by back substitution. `Q` is never formed. Row blocks are factored in
/// parallel and their triangles combined (TSQR), so the extra memory is one
/// block per group plus the small triangles, never a copy of the design.
///
/// Keeps the condition number of the design (the normal equations square
/// it): the accurate choice for general use.
///
/// **Rank:** column `j` is reported dependent when `|R_jj|` is at most
/// `rank_tolerance` times an upper bound of the raw column's weighted norm
/// (`sqrt(sum w) * max|x_j|`), or when its centered values are at most
/// `rank_tolerance * max|x_j|` (a constant column beside the intercept).
/// The default tolerance is `max(usable rows, columns) * f64::EPSILON`.
///
/// ```
/// use leastline::{Problem, Qr, Solver};
/// use ndarray::array;
///
/// let x = array![[0.0], [1.0], [2.0], [3.0]];
/// let y = array![1.0, 3.0, 5.0, 7.0];
/// let fit = Qr::default().fit(&Problem::new(x.view(), y.view())?)?;
/// assert!((fit.model.coefficients()[0] - 2.0).abs() < 1e-14);
/// assert!((fit.model.intercept() - 1.0).abs() < 1e-14);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Qr {
    /// Relative rank tolerance; `None` uses `max(rows, columns) * eps`.
    pub rank_tolerance: Option<f64>,
}

impl Solver for Qr {
    fn name(&self) -> &str {
        "qr"
    }

    /// # Errors
    /// [`Error::TooFewRows`]; [`Error::RankDeficient`] naming the dependent
    /// columns; [`Error::InvalidParameter`] for a bad tolerance;
    /// [`Error::Overflow`] if a coefficient is not representable.
    fn fit(&self, problem: &Problem<'_>) -> Result<Fit> {
        problem.require_determined()?;
        let tolerance = match self.rank_tolerance {
            Some(t) => check_tolerance("rank_tolerance", t)?,
            None => problem.default_rank_tolerance(),
        };
        let p = problem.cols();
        let scaling = Scaling::new(problem, tolerance);
        let r = tall_skinny_r(problem, &scaling, true);
        let dependent = dependent_columns(
            problem,
            &scaling,
            r.as_ref().submatrix(0, 0, p, p),
            tolerance,
        );
        if !dependent.is_empty() {
            return Err(Error::RankDeficient {
                rank: p - dependent.len(),
                columns: p,
                dependent,
                tolerance,
            });
        }
        let r11: Mat<f64> = r.as_ref().submatrix(0, 0, p, p).to_owned();
        let mut gamma: Vec<f64> = (0..p).map(|j| r[(j, p)]).collect();
        triangular::solve_upper(r11.as_ref(), &mut gamma);
        let beta: Vec<f64> = gamma
            .iter()
            .zip(&scaling.scale)
            .map(|(g, s)| g * (scaling.target_scale / s))
            .collect();
        let condition = triangular::condition_upper(r11.as_ref());
        finish_closed_form(
            problem,
            self.name(),
            beta,
            p,
            condition,
            scaling.target_scale,
            0.0,
        )
    }
}
