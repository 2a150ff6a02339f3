use faer::Mat;

use crate::error::{Error, Result};
use crate::linalg::qr;
use crate::linalg::svd::{
    common_units, project_off_null_space, residuals, thin_svd, truncated_solve,
};
use crate::observe::{Observer, Stage, Watch};
use crate::passes;
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp};
use crate::solver::{check_tolerance, finish_closed_form, finish_with_scaled_rss, Fit, Solver};
use crate::state::triangle::{residual_squares, with_head};

/// Minimum-norm least squares through the singular value decomposition: the
/// choice for rank-deficient designs, including designs with more columns
/// than rows.
///
/// Reduces the centered, weighted, scaled design to its triangle `R` by the
/// same block QR as [`crate::Qr`], takes the SVD `R = U S V^T` (a `p x p`
/// problem), and keeps the singular values `s_i > rank_tolerance * s_max`;
/// their count is the numerical rank in the report. The default cutoff is
/// `max(usable rows, columns) * f64::EPSILON`. Columns that are constant
/// beside the intercept (to the default tolerance `max(usable rows,
/// columns) * f64::EPSILON`, whatever the cutoff) get coefficient 0.
///
/// When the rank is below the number of columns, the solution returned is
/// the one of minimum Euclidean norm **in the caller's units** (the
/// pseudo-inverse solution `X_c^+ y_c` of the centered problem): the scaled
/// solution is projected off the null space mapped back to caller units.
///
/// **Wide designs** (fewer usable rows `n` than parameters) are solved the
/// same way, without the triangle, whose `p x p` size would exceed the
/// design's: the usable rows of the centered, weighted, scaled design are
/// copied once into an `n x p` matrix (the algorithm needs the matrix
/// itself; zero-weight rows are left out), with an intercept their
/// component along `sqrt(w)` (rounding left by the centering) is removed,
/// and faer's thin SVD of that copy gives the minimum-norm solution,
/// projected onto the row space mapped to caller units when the columns'
/// scales differ. Memory: the copy plus the thin singular vectors, about
/// `2 n p + n^2` values. The rank is at most `n - 1` with an intercept
/// (`n` without), the residual degrees of freedom `n - rank - intercept`
/// (often 0), and the fit typically interpolates every usable row. Since
/// the rank is below the number of columns, [`crate::Inference`] refuses
/// such a fit with a typed error (some coefficients are not identified).
///
/// ```
/// use leastline::{Problem, Solver, Svd};
/// use ndarray::array;
///
/// // The second column is twice the first: only their combination is identified.
/// let x = array![[1.0, 2.0], [2.0, 4.0], [3.0, 6.0], [4.0, 8.0]];
/// let y = array![1.0, 2.1, 2.9, 4.2];
/// let fit = Svd::new().fit(&Problem::new(x.view(), y.view())?)?;
/// assert_eq!(fit.report.rank, Some(1));
/// let b = fit.model.coefficients();
/// // Minimum norm: b is proportional to (1, 2).
/// assert!((b[1] - 2.0 * b[0]).abs() < 1e-12);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, Default, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct Svd {
    /// Relative cutoff on singular values; `None` uses `max(rows, columns) * eps`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::option_float"))]
    pub(crate) rank_tolerance: Option<f64>,
}

checked_settings!(Svd {
    #[serde(with = "crate::serde_float::option_float")]
    rank_tolerance: Option<f64>,
});

impl Svd {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if let Some(t) = self.rank_tolerance {
            check_tolerance("rank_tolerance", t)?;
        }
        Ok(())
    }
}

impl Svd {
    /// Svd at its default settings; change them with the `with_*` methods.
    pub fn new() -> Self {
        Self::default()
    }

    crate::settings::setting! {
        /// Relative cutoff on singular values; `None` uses `max(rows, columns) * eps`.
        with_rank_tolerance / rank_tolerance: optional f64
    }
}

impl Solver for Svd {
    fn name(&self) -> &str {
        "svd"
    }

    /// # Errors
    /// [`Error::InvalidParameter`] for a bad cutoff; [`Error::TooLarge`]
    /// when the copy of a wide design cannot be allocated;
    /// [`Error::NoConvergence`] if the SVD iteration fails; [`Error::Overflow`].
    fn fit_observed(&self, problem: &Problem<'_>, observer: &dyn Observer) -> Result<Fit> {
        let watch = Watch::new(observer);
        let cutoff = match self.rank_tolerance {
            Some(t) => check_tolerance("rank_tolerance", t)?,
            None => problem.default_rank_tolerance(),
        };
        let p = problem.columns();
        // The cutoff applies to singular values only; constant columns are
        // found with the default tolerance, as in every other solver.
        let scaling = Scaling::new(problem, problem.default_rank_tolerance());
        if problem.usable_rows() < problem.parameters() {
            return fit_wide(problem, self.name(), &scaling, cutoff, &watch);
        }
        watch.begin(Stage::Factor, problem.rows());
        let r = passes::qr::tall_skinny_r(problem, &scaling, true, &watch)?;
        // Keep only the informative (non-constant) columns.
        let live: Vec<usize> = (0..p).filter(|&j| !scaling.constant[j]).collect();
        let q = live.len();
        let r11 = Mat::<f64>::from_fn(p, q, |i, c| r[(i, live[c])]);
        let rhs: Vec<f64> = (0..p).map(|i| r[(i, p)]).collect();
        let mut beta = vec![0.0; p];
        // The residuals in the triangle's design rows (the rest of the sum
        // of squares is its target entry below them).
        let mut head = rhs.clone();
        let (rank, condition) = if q == 0 {
            (0, 1.0)
        } else {
            let dec = thin_svd(r11.as_ref())?;
            let smax = dec.s.first().copied().unwrap_or(0.0);
            let rank = dec
                .s
                .iter()
                .take_while(|&&s| s > cutoff * smax && s > 0.0)
                .count();
            // gamma = V_r S_r^-1 U_r^T rhs (scaled coordinates of live columns).
            let gamma = truncated_solve(&dec, rank, &rhs);
            head = residuals(r11.as_ref(), &rhs, &gamma);
            // Minimum norm in caller units: b_c = gamma_c 2^(e_y - e_c),
            // worked in units of a common power of two (see `common_units`).
            let exps: Vec<i32> = live.iter().map(|&j| scaling.scale_exp[j]).collect();
            let (e_max, unit) = common_units(&exps);
            let mut b: Vec<f64> = (0..q).map(|c| ldexp(gamma[c], unit[c])).collect();
            if rank < q {
                project_off_null_space(&mut b, &dec.v, rank, &unit);
            }
            let b: Vec<f64> = b
                .iter()
                .map(|&v| ldexp(v, scaling.target_exp + e_max))
                .collect();
            for (c, &j) in live.iter().enumerate() {
                beta[j] = b[c];
            }
            let condition = if rank == 0 {
                1.0
            } else {
                smax / dec.s[rank - 1]
            };
            (rank, condition)
        };
        if rank == 0 && q > 0 {
            return Err(Error::NoConvergence {
                what: "singular value decomposition",
            });
        }
        // The residual sum of squares from the triangle (no pass over the
        // rows), as the triangle state's minimum-norm fit forms it: the
        // residuals of `gamma`, whose minimum-norm projection above moves
        // the coefficients only along directions the cutoff dropped.
        finish_with_scaled_rss(
            problem,
            self.name(),
            beta,
            (Some(rank), Some(condition)),
            scaling.target_scale,
            with_head(residual_squares(&r, p, p), &head),
            0.0,
        )
    }
}

/// The minimum-norm solution of a wide problem (fewer usable rows than
/// parameters) from a thin SVD of the transformed design itself (see the
/// type's docs).
fn fit_wide(
    problem: &Problem<'_>,
    name: &str,
    scaling: &Scaling,
    cutoff: f64,
    watch: &Watch<'_>,
) -> Result<Fit> {
    let p = problem.columns();
    let usable: Vec<usize> = (0..problem.rows())
        .filter(|&i| problem.scaled_weight(i) > 0.0)
        .collect();
    let n = usable.len();
    let live: Vec<usize> = (0..p).filter(|&j| !scaling.constant[j]).collect();
    let q = live.len();
    let mut beta = vec![0.0; p];
    if q == 0 || n <= usize::from(problem.has_intercept()) {
        // Nothing to fit: no informative column, or one usable row beside
        // the intercept (every centered value is zero).
        return finish_closed_form(
            problem,
            name,
            beta,
            Some(0),
            Some(1.0),
            scaling.target_scale,
            0.0,
            watch,
        );
    }
    // The copy of the usable rows and the thin SVD's `U` (n x n) and `V`
    // (q x n): the algorithm needs the design itself, not its p x p triangle
    // (which would be larger than the design).
    crate::alloc::reserve_matrices("copy of a wide design", n, p + 1, 2)?;
    crate::alloc::reserve_matrices("singular vectors of a wide design", q, n, 1)?;
    let mut z = Mat::<f64>::zeros(n, p + 1);
    for (k, &i) in usable.iter().enumerate() {
        fill_block(
            problem,
            scaling,
            i,
            i + 1,
            true,
            z.as_mut().subrows_mut(k, 1),
        );
    }
    if problem.has_intercept() {
        // Centering makes every column orthogonal to `sqrt(w)`; the rounding
        // of the means leaves a component along it, which would show as a
        // spurious singular value of the size of that rounding. Remove it.
        let root: Vec<f64> = usable
            .iter()
            .map(|&i| problem.scaled_weight(i).sqrt())
            .collect();
        let norm = root.iter().map(|r| r * r).sum::<f64>().sqrt();
        let u: Vec<f64> = root.iter().map(|r| r / norm).collect();
        for j in 0..=p {
            let d: f64 = (0..n).map(|k| u[k] * z[(k, j)]).sum();
            for k in 0..n {
                z[(k, j)] -= u[k] * d;
            }
        }
    }
    let zy: Vec<f64> = (0..n).map(|k| z[(k, p)]).collect();
    // Keep the live columns, moved to the front (each moves left or stays).
    for (c, &j) in live.iter().enumerate() {
        if c != j {
            for k in 0..n {
                z[(k, c)] = z[(k, j)];
            }
        }
    }
    let dec = thin_svd(z.as_ref().subcols(0, q))?;
    let smax = dec.s.first().copied().unwrap_or(0.0);
    // The centered design has rank at most `n - 1` with an intercept.
    let rank = dec
        .s
        .iter()
        .take(n - usize::from(problem.has_intercept()))
        .take_while(|&&s| s > cutoff * smax && s > 0.0)
        .count();
    if rank == 0 {
        return Err(Error::NoConvergence {
            what: "singular value decomposition",
        });
    }
    // gamma = V_r S_r^-1 U_r^T z_y: the minimum-norm solution in scaled
    // coordinates.
    let gamma = truncated_solve(&dec, rank, &zy);
    // Caller units up to a common power of two, as in the tall path.
    let exps: Vec<i32> = live.iter().map(|&j| scaling.scale_exp[j]).collect();
    let (e_max, unit) = common_units(&exps);
    let mut b: Vec<f64> = (0..q).map(|c| ldexp(gamma[c], unit[c])).collect();
    if unit.iter().any(|&u| u != unit[0]) {
        project_onto_row_space(&mut b, &dec.v, rank, &unit);
        // One step of refinement: the projection moves `b` along directions
        // the design maps to zero only up to the rounding of `V`, magnified
        // by the spread of the column scales; the fitted values it changed
        // (in scaled coordinates) are solved for and taken back the same way.
        let moved: Vec<f64> = (0..q).map(|c| gamma[c] - ldexp(b[c], -unit[c])).collect();
        let defect: Vec<f64> = (0..n)
            .map(|k| (0..q).map(|c| z[(k, c)] * moved[c]).sum::<f64>())
            .collect();
        let dg = truncated_solve(&dec, rank, &defect);
        let mut db: Vec<f64> = (0..q).map(|c| ldexp(dg[c], unit[c])).collect();
        project_onto_row_space(&mut db, &dec.v, rank, &unit);
        for (bc, d) in b.iter_mut().zip(&db) {
            *bc += d;
        }
    }
    drop(z);
    for (c, &j) in live.iter().enumerate() {
        beta[j] = ldexp(b[c], scaling.target_exp + e_max);
    }
    let condition = smax / dec.s[rank - 1];
    finish_closed_form(
        problem,
        name,
        beta,
        Some(rank),
        Some(condition),
        scaling.target_scale,
        0.0,
        watch,
    )
}

/// Makes `b` the minimum-norm member of its class `b + null space` when
/// columns differ in scale: the solutions in scaled coordinates are
/// `gamma` with `V_r^T gamma` fixed (`V_r`: the first `rank` columns of
/// `v`), and in the units of `b` (`b_c = gamma_c 2^unit_c`) the one of
/// least norm is the projection of any of them onto the range of
/// `diag(2^-unit) V_r`.
fn project_onto_row_space(b: &mut [f64], v: &Mat<f64>, rank: usize, unit: &[i32]) {
    let q = b.len();
    // Column i of diag(2^-unit) V_r, divided by a power of two near its
    // largest entry so that no entry overflows (the range is unchanged).
    let mut a = Mat::<f64>::zeros(q, rank);
    for i in 0..rank {
        let top = (0..q)
            .filter(|&c| v[(c, i)] != 0.0)
            .map(|c| exponent(v[(c, i)]) - unit[c])
            .max()
            .unwrap_or(0);
        for c in 0..q {
            a[(c, i)] = ldexp(v[(c, i)], -unit[c] - top);
        }
    }
    let qm = qr::thin_q(a.as_ref());
    let mut out = vec![0.0; q];
    for i in 0..qm.ncols() {
        let dot: f64 = (0..q).map(|c| qm[(c, i)] * b[c]).sum();
        for c in 0..q {
            out[c] += qm[(c, i)] * dot;
        }
    }
    b.copy_from_slice(&out);
}
