//! One decomposition of the design, any number of penalties.

use faer::reborrow::{IntoConst, ReborrowMut};
use faer::Mat;

use crate::error::{Error, Result};
use crate::linalg::{cholesky as chol, dense, svd::thin_svd, triangular};
use crate::observe::{Observer, Stage, Watch};
use crate::passes::{dual, gram::centered_gram, qr::tall_skinny_r, residuals};
use crate::penalty::{check_penalty, PenaltyMap};
use crate::prep::Scaling;
use crate::problem::Problem;
use crate::solver::{caller_rss, finish_with_rss, Fit};

/// Ridge fits for many penalties from one decomposition of the design.
///
/// Building the path decomposes the weighted, centered design `Ẑ` once
/// (in the uniform-penalty coordinates of the [module docs](super)); then
/// each penalty costs `O(p^2)` for its coefficients and `O(p)` for its
/// residual sum of squares, effective degrees of freedom and generalized
/// cross-validation score, without touching the data again.
///
/// - **Rows >= columns** (counting rows with non-zero weight): the design
///   is reduced to a `p x p` triangle `R` with `R^T R = Ẑ^T Ẑ`, and the SVD
///   `R = U S V^T` gives the singular values and right singular vectors of
///   the design. The triangle is the Cholesky factor of the Gram matrix
///   (one symmetric pass, as [`super::RidgeFactorization::Cholesky`], plus one
///   residual pass) when its condition estimate `c` keeps at least 8
///   digits (`eps * c^2 <= 1e-8`, the rule of [`super::RidgeFactorization::ByShape`]);
///   otherwise it comes from the block Householder QR of [`crate::Qr`]
///   (about twice the flops, `Z^T Z` never formed), which keeps the
///   design's own condition. Neither copies the design. Cost: about
///   `n p^2` (or `2 n p^2`) `+ O(p^3)`. Singular values below
///   `max(n_u, p) * eps` times the largest count as zero.
///   [`RidgePath::decomposition`] tells which was used.
/// - **Rows < columns**: the row Gram `Ẑ Ẑ^T` (`n_u x n_u`, by column
///   blocks) and its eigendecomposition give the singular values and left
///   singular vectors. Cost: about `n_u^2 p + O(n_u^3)`. Each penalty's
///   coefficients then need one pass `Ẑ^T v` over the design (`O(n p)`).
///   Squared singular values below `max(n_u, p) * eps` times the largest
///   count as zero (the Gram squares the design's condition).
///
/// At penalty 0 the path gives the least-squares solution of minimum norm
/// in the penalised coordinates (the caller's units, or standardised units
/// with `standardize`).
///
/// ```
/// use leastline::ridge::{Criterion, RidgePath};
/// use leastline::Problem;
/// use ndarray::Array2;
///
/// // Hourly demand at a bakery against five nearly collinear sensors.
/// let x = Array2::from_shape_fn((30, 5), |(i, j)| (i as f64 * 0.37).sin() + 0.01 * (i * j) as f64 % 0.3);
/// let y = x.column(0).mapv(|v| 3.0 * v) + x.column(4).mapv(|v| 0.5 * v);
/// let problem = Problem::new(x.view(), y.view())?;
/// let path = RidgePath::new(&problem, false)?;
/// let grid = path.default_grid(40)?;
/// let curve = path.curve(&grid, Criterion::LeaveOneOut)?;
/// let fit = path.fit(curve.best_penalty)?;
/// assert_eq!(fit.model.coefficients().len(), 5);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug)]
pub struct RidgePath<'p, 'a> {
    pub(super) problem: &'p Problem<'a>,
    pub(super) scaling: Scaling,
    pub(super) map: PenaltyMap,
    pub(super) spectrum: Spectrum,
    /// 2-norm condition number of the scaled, centered design (see
    /// [`crate::FitReport::condition`]), from the triangle when rows >=
    /// columns; `None` from the row side, which has no `p x p` factor.
    pub(super) design_condition: Option<f64>,
}

/// Which side of the design the decomposition came from.
#[derive(Debug)]
pub(crate) enum Side {
    /// SVD of the triangle: right singular vectors `V` (`p x p`) and the
    /// squared residual of the target outside the columns' span.
    Columns {
        v: Mat<f64>,
        rss0: f64,
        source: &'static str,
    },
    /// Eigendecomposition of the row Gram: left singular vectors `U`
    /// (`n_u x q`, the intercept's direction removed) over `rows`.
    Rows { u: Mat<f64>, rows: Vec<usize> },
}

/// Squared singular values and target coordinates of `Ẑ`.
#[derive(Debug)]
pub(crate) struct Spectrum {
    /// `s_k^2`, non-increasing.
    pub sq: Vec<f64>,
    /// Leading directions treated as non-zero.
    pub kept: usize,
    /// `d_k = u_k . t`: the target on the left singular vectors.
    pub d: Vec<f64>,
    pub side: Side,
}

impl Spectrum {
    /// The singular values in the penalty's units (`sqrt` of `sq`, mapped
    /// back through `map`), one per direction examined.
    pub(crate) fn caller_singular_values(&self, map: &PenaltyMap) -> Vec<f64> {
        self.sq
            .iter()
            .map(|&s2| map.caller_singular_value(s2))
            .collect()
    }

    /// Residual sum of squares at the uniform penalty `mu`, in scaled units.
    pub fn rss(&self, mu: f64) -> f64 {
        let base = match &self.side {
            Side::Columns { rss0, .. } => *rss0,
            Side::Rows { .. } => 0.0,
        };
        base + (0..self.sq.len())
            .map(|k| {
                let e = (1.0 - self.phi(k, mu)) * self.d[k];
                e * e
            })
            .sum::<f64>()
    }

    /// Effective degrees of freedom `tr H` at the uniform penalty `mu`,
    /// counting the intercept as one.
    pub fn df(&self, mu: f64, intercept: bool) -> f64 {
        let slopes: f64 = (0..self.kept).map(|k| self.phi(k, mu)).sum();
        slopes + f64::from(u8::from(intercept))
    }

    /// Coefficients `gamma^` (length `p`) at `mu` from the columns side:
    /// `sum_k v_k s_k d_k / (s_k^2 + mu)`. `None` on the rows side.
    pub fn column_coefficients(&self, mu: f64, p: usize) -> Option<Vec<f64>> {
        let Side::Columns { v, .. } = &self.side else {
            return None;
        };
        let mut gamma = vec![0.0; p];
        for k in 0..self.kept {
            let c = self.sq[k].sqrt() * self.d[k] / (self.sq[k] + mu);
            for (j, g) in gamma.iter_mut().enumerate() {
                *g += v[(j, k)] * c;
            }
        }
        Some(gamma)
    }

    /// Filter factor `s_k^2 / (s_k^2 + mu)` (0 for directions not kept).
    pub fn phi(&self, k: usize, mu: f64) -> f64 {
        if k < self.kept {
            self.sq[k] / (self.sq[k] + mu)
        } else {
            0.0
        }
    }
}

impl<'p, 'a> RidgePath<'p, 'a> {
    /// Decomposes the design of `problem` once. With `standardize`, the
    /// penalty applies to standardised coefficients, as in
    /// [`super::Ridge::standardize`].
    ///
    /// # Errors
    /// [`Error::NoConvergence`] if the SVD or eigen iteration fails.
    pub fn new(problem: &'p Problem<'a>, standardize: bool) -> Result<Self> {
        Self::build(problem, standardize, &Watch::quiet())
    }

    /// As [`RidgePath::new`], calling `observer` after every block of rows
    /// of the passes over the design (see [`crate::observe`]).
    ///
    /// # Errors
    /// As [`RidgePath::new`], and [`Error::Stopped`] when the observer
    /// stops a pass.
    pub fn new_observed(
        problem: &'p Problem<'a>,
        standardize: bool,
        observer: &dyn Observer,
    ) -> Result<Self> {
        Self::build(problem, standardize, &Watch::new(observer))
    }

    pub(super) fn build(
        problem: &'p Problem<'a>,
        standardize: bool,
        watch: &Watch<'_>,
    ) -> Result<Self> {
        let scaling = Scaling::new(problem, problem.default_rank_tolerance());
        if problem.usable_rows() >= problem.columns() {
            Self::from_columns(problem, scaling, standardize, watch)
        } else {
            Self::from_rows(problem, scaling, standardize, watch)
        }
    }

    fn from_columns(
        problem: &'p Problem<'a>,
        scaling: Scaling,
        standardize: bool,
        watch: &Watch<'_>,
    ) -> Result<Self> {
        let tri = match gram_triangle(problem, &scaling, standardize, watch)? {
            Some(t) => t,
            None => qr_triangle(problem, &scaling, standardize, watch)?,
        };
        let tol = problem.default_rank_tolerance();
        let (spectrum, condition) = column_spectrum(
            tri.rh.as_ref(),
            &tri.r,
            tri.rss0,
            &tri.map.factors,
            tol,
            tri.source,
        )?;
        let design_condition = Some(condition);
        Ok(RidgePath {
            problem,
            scaling,
            design_condition,
            map: tri.map,
            spectrum,
        })
    }

    fn from_rows(
        problem: &'p Problem<'a>,
        scaling: Scaling,
        standardize: bool,
        watch: &Watch<'_>,
    ) -> Result<Self> {
        let rows: Vec<usize> = (0..problem.rows())
            .filter(|&i| problem.scaled_weight(i) > 0.0)
            .collect();
        let norms = match standardize {
            true => Some(dual::column_sq_norms(problem, &scaling, watch)?),
            false => None,
        };
        let map = PenaltyMap::new(problem, &scaling, norms.as_deref());
        let dual::RowGram { mut gram, target } =
            dual::row_gram(problem, &scaling, &map.factors, &rows, watch)?;
        let nu = rows.len();
        let intercept = problem.has_intercept();
        if intercept {
            // The centered design has the weighted ones vector h in its
            // left null space. Lift it to an eigenvalue above all others so
            // that it comes out exactly as the top eigenvector, and drop it:
            // the intercept is handled by centering.
            let trace: f64 = (0..nu).map(|i| gram[(i, i)]).sum();
            let shift = if trace > 0.0 { 2.0 * trace } else { 1.0 };
            let h: Vec<f64> = rows
                .iter()
                .map(|&i| problem.scaled_weight(i).sqrt())
                .collect();
            let c = shift / problem.stats.total_weight;
            for b in 0..nu {
                for a in 0..nu {
                    gram[(a, b)] += c * h[a] * h[b];
                }
            }
        }
        let eig = dense::symmetric_eigen(gram.as_ref())?;
        let order: Vec<usize> = (0..nu).rev().skip(usize::from(intercept)).collect();
        let q = order.len();
        let u = Mat::<f64>::from_fn(nu, q, |i, c| eig.vectors[(i, order[c])]);
        let sq: Vec<f64> = order.iter().map(|&k| eig.values[k].max(0.0)).collect();
        let d: Vec<f64> = (0..q)
            .map(|c| (0..nu).map(|i| u[(i, c)] * target[i]).sum())
            .collect();
        let tol = problem.default_rank_tolerance();
        let top = sq.first().copied().unwrap_or(0.0);
        let kept = sq.iter().take_while(|&&s2| s2 > tol * top).count();
        Ok(RidgePath {
            problem,
            scaling,
            design_condition: None,
            map,
            spectrum: Spectrum {
                sq,
                kept,
                d,
                side: Side::Rows { u, rows },
            },
        })
    }

    /// The singular values of the weighted, centered design in the
    /// penalty's units (of `sqrt(w_i) (x_ij - m_j)`, or of its standardised
    /// columns), non-increasing: a penalty `lambda` shrinks the direction of
    /// singular value `s` by the factor `s^2 / (s^2 + lambda)`. One value
    /// per direction examined: `p` when rows >= columns, else the usable
    /// rows (less one with an intercept).
    pub fn singular_values(&self) -> Vec<f64> {
        self.spectrum.caller_singular_values(&self.map)
    }

    /// Numerical rank of the design (singular values treated as non-zero).
    pub fn rank(&self) -> usize {
        self.spectrum.kept
    }

    /// How the design was decomposed: `"gram-cholesky"` (triangle from the
    /// Cholesky factor of the Gram matrix), `"householder-qr"` (triangle
    /// from the block QR) or `"row-gram"` (eigendecomposition of the row
    /// Gram, more columns than rows).
    pub fn decomposition(&self) -> &'static str {
        match &self.spectrum.side {
            Side::Columns { source, .. } => source,
            Side::Rows { .. } => "row-gram",
        }
    }

    /// Coefficients `gamma^` in the uniform-penalty coordinates.
    pub(super) fn scaled_coefficients(&self, mu: f64) -> Vec<f64> {
        let sp = &self.spectrum;
        let p = self.problem.columns();
        if let Some(gamma) = sp.column_coefficients(mu, p) {
            return gamma;
        }
        match &sp.side {
            Side::Columns { .. } => Vec::new(),
            Side::Rows { u, rows } => {
                let mut w = vec![0.0; rows.len()];
                for k in 0..sp.kept {
                    let c = sp.d[k] / (sp.sq[k] + mu);
                    for (i, wi) in w.iter_mut().enumerate() {
                        *wi += u[(i, k)] * c;
                    }
                }
                dual::transpose_times(
                    self.problem,
                    &self.scaling,
                    &self.map.factors,
                    rows,
                    &w,
                    None,
                )
            }
        }
    }

    /// Residual sum of squares in scaled units.
    pub(super) fn scaled_rss(&self, mu: f64) -> f64 {
        self.spectrum.rss(mu)
    }

    /// Effective degrees of freedom `tr H` at the uniform penalty `mu`,
    /// counting the intercept as one.
    pub(super) fn scaled_df(&self, mu: f64) -> f64 {
        self.spectrum.df(mu, self.problem.has_intercept())
    }

    /// Effective degrees of freedom of the fit with penalty `penalty`: the
    /// trace of the hat matrix, `sum_k s_k^2 / (s_k^2 + lambda)` plus one
    /// for the intercept.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty.
    pub fn effective_df(&self, penalty: f64) -> Result<f64> {
        let lambda = check_penalty("penalty", penalty)?;
        Ok(self.scaled_df(self.map.scaled(lambda)))
    }

    /// The ridge fit for one penalty. The residual sum of squares in its
    /// report comes from the decomposition, not from a pass over the data;
    /// with rows >= columns nothing here reads the design.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for a negative or non-finite penalty;
    /// [`Error::Overflow`] if a result is not representable.
    pub fn fit(&self, penalty: f64) -> Result<Fit> {
        let lambda = check_penalty("penalty", penalty)?;
        let mu = self.map.scaled(lambda);
        let gamma = self.scaled_coefficients(mu);
        let beta = self.map.to_caller(&self.scaling, &gamma);
        let rss = caller_rss(self.problem, self.scaling.target_exp, self.scaled_rss(mu))?;
        let sp = &self.spectrum;
        finish_with_rss(
            self.problem,
            "ridge-svd",
            beta,
            Some(sp.kept),
            self.design_condition,
            rss,
            lambda,
        )
    }

    /// A default grid of `count` penalties, log-spaced (ascending) from
    /// `max(s_min^2 / 100, 1e-10 s_max^2)` to `10 s_max^2`, where `s_max`
    /// and `s_min` are the largest and the smallest non-zero of
    /// [`RidgePath::singular_values`]: from almost no shrinkage of any
    /// direction to heavy shrinkage of all of them (our own rule of thumb).
    /// When every column is constant, `s_max = 1` stands in.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] when `count` is 0;
    /// [`Error::Overflow`] if the singular values are too large to square;
    /// [`Error::TooLarge`] when `count` penalties cannot be allocated.
    pub fn default_grid(&self, count: usize) -> Result<Vec<f64>> {
        default_grid(&self.singular_values(), self.spectrum.kept, count)
    }
}

/// The grid of [`RidgePath::default_grid`] from the singular values `s`
/// (penalty units) of which the first `kept` count.
pub(crate) fn default_grid(s: &[f64], kept: usize, count: usize) -> Result<Vec<f64>> {
    if count == 0 {
        return Err(Error::InvalidParameter {
            name: "grid",
            value: 0.0,
            reason: "must hold at least one penalty",
        });
    }
    let (top, low) = if kept == 0 {
        (1.0, 1.0)
    } else {
        (s[0] * s[0], s[kept - 1] * s[kept - 1])
    };
    let hi = 10.0 * top;
    let lo = (low / 100.0).max(1e-10 * top);
    if !(hi.is_finite() && lo > 0.0) {
        return Err(Error::Overflow {
            what: "default penalty grid",
        });
    }
    let mut grid = crate::alloc::with_capacity("penalty grid", count)?;
    if count == 1 {
        grid.push(lo.sqrt() * hi.sqrt());
        return Ok(grid);
    }
    let (a, b) = (lo.ln(), hi.ln());
    grid.extend((0..count).map(|i| {
        (a + (b - a) * i as f64 / (count - 1) as f64)
            .exp()
            .clamp(lo, hi)
    }));
    Ok(grid)
}

/// The spectrum of the columns side from the triangle `rh` (uniform-penalty
/// coordinates, `p x p`), the target's coordinates `r`, the squared residual
/// `rss0` outside the columns' span and the column factors: the SVD
/// `rh = U S V^T`, `d = U^T r`, the directions kept (singular values above
/// `tol` times the largest), and the 2-norm condition number of the
/// design's own triangle `rh diag(1/f)`.
///
/// # Errors
/// [`Error::NoConvergence`] if the SVD fails.
pub(crate) fn column_spectrum(
    rh: faer::MatRef<'_, f64>,
    r: &[f64],
    rss0: f64,
    factors: &[f64],
    tol: f64,
    source: &'static str,
) -> Result<(Spectrum, f64)> {
    let p = rh.ncols();
    let (sq, d, v) = if p == 0 {
        (Vec::new(), Vec::new(), Mat::<f64>::zeros(0, 0))
    } else {
        let dec = thin_svd(rh)?;
        let d = (0..p)
            .map(|k| (0..p).map(|i| dec.u[(i, k)] * r[i]).sum())
            .collect();
        (dec.s.iter().map(|s| s * s).collect(), d, dec.v)
    };
    let top = sq.first().copied().unwrap_or(0.0);
    let kept = sq
        .iter()
        .take_while(|&&s2| s2 > 0.0 && s2.sqrt() > tol * top.sqrt())
        .count();
    // R^ = R diag(f): the design's own triangle is R^ diag(1/f) (zero
    // columns for those that take no part).
    let own = Mat::<f64>::from_fn(p, p, |i, j| {
        if factors[j] == 0.0 {
            0.0
        } else {
            rh[(i, j)] / factors[j]
        }
    });
    let condition = crate::linalg::svd::condition(own.as_ref(), tol)?;
    let spectrum = Spectrum {
        sq,
        kept,
        d,
        side: Side::Columns { v, rss0, source },
    };
    Ok((spectrum, condition))
}

/// A `p x p` triangle `R^` with `R^T R^ = Ẑ^T Ẑ` (uniform-penalty
/// coordinates), the target's coordinates `r` (`R^^T r = Ẑ^T t`) and the
/// squared residual `rss0` of the target outside the columns' span.
struct Triangle {
    rh: Mat<f64>,
    r: Vec<f64>,
    rss0: f64,
    map: PenaltyMap,
    source: &'static str,
}

/// The triangle from the block Householder QR of `[Z t]` (no `Z^T Z`).
fn qr_triangle(
    problem: &Problem<'_>,
    scaling: &Scaling,
    standardize: bool,
    watch: &Watch<'_>,
) -> Result<Triangle> {
    let p = problem.columns();
    watch.begin(Stage::Factor, problem.rows());
    let r = tall_skinny_r(problem, scaling, true, watch)?;
    let norms: Option<Vec<f64>> = standardize.then(|| {
        (0..p)
            .map(|j| (0..=j).map(|i| r[(i, j)] * r[(i, j)]).sum())
            .collect()
    });
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let rh = Mat::<f64>::from_fn(p, p, |i, j| r[(i, j)] * map.factors[j]);
    Ok(Triangle {
        rh,
        r: (0..p).map(|i| r[(i, p)]).collect(),
        rss0: r[(p, p)] * r[(p, p)],
        map,
        source: "householder-qr",
    })
}

/// The triangle from the Cholesky factor of the Gram matrix, when that
/// keeps at least [`super::AUTO_MIN_DIGITS`] digits (`None` otherwise, or
/// when the factorisation fails). The squared residual outside the span is
/// measured by a pass over the data at the least-squares solution (not by
/// `t^T t - |r|^2`, which would cancel).
///
/// # Errors
/// [`Error::Stopped`] when the observer stops a pass.
fn gram_triangle(
    problem: &Problem<'_>,
    scaling: &Scaling,
    standardize: bool,
    watch: &Watch<'_>,
) -> Result<Option<Triangle>> {
    let p = problem.columns();
    watch.begin(Stage::Factor, problem.rows());
    let mut g = centered_gram(problem, scaling, true, watch)?;
    let norms: Option<Vec<f64>> = standardize.then(|| (0..p).map(|j| g[(j, j)]).collect());
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let f = &map.factors;
    let live: Vec<usize> = (0..p).filter(|&j| map.is_live(j)).collect();
    let q = live.len();
    let mut rl: Vec<f64> = live.iter().map(|&j| f[j] * g[(j, p)]).collect();
    // The Gram matrix of the live columns in uniform-penalty coordinates,
    // compacted and factored in place (no copy of the p x p matrix).
    for b in 0..q {
        for a in b..q {
            g[(a, b)] = (f[live[a]] * g[(live[a], live[b])]) * f[live[b]];
        }
    }
    let mut l = g.as_mut().submatrix_mut(0, 0, q, q);
    if chol::factor_in_place(l.rb_mut()).is_err() {
        return Ok(None);
    }
    let l = l.into_const();
    let condition = triangular::condition_lower(l);
    if super::digits(condition * condition) < super::AUTO_MIN_DIGITS {
        return Ok(None);
    }
    triangular::solve_lower(l, &mut rl);
    let mut rh = Mat::<f64>::zeros(p, p);
    for a in 0..q {
        for b in a..q {
            rh[(a, live[b])] = l[(b, a)];
        }
    }
    let mut gamma_live = rl.clone();
    triangular::solve_upper(l.transpose(), &mut gamma_live);
    drop(g);
    let mut gamma = vec![0.0; p];
    for (a, &j) in live.iter().enumerate() {
        gamma[j] = gamma_live[a];
    }
    let beta = map.to_caller(scaling, &gamma);
    let sy = scaling.target_scale;
    watch.begin(Stage::Residuals, problem.rows());
    let rss0 = residuals::centered_rss(problem, &beta, sy, watch)?;
    let mut r = vec![0.0; p];
    r[..q].copy_from_slice(&rl);
    Ok(Some(Triangle {
        rh,
        r,
        rss0,
        map,
        source: "gram-cholesky",
    }))
}
