//! Ridge by QR of the augmented system: the triangle of the design stacked
//! over `sqrt(mu) I`.

use faer::{Mat, MatRef};

use crate::error::Result;
use crate::linalg::{dense, svd::thin_svd, triangular};
use crate::observe::{Stage, Watch};
use crate::passes::qr::tall_skinny_r;
use crate::penalty::PenaltyMap;
use crate::prep::Scaling;
use crate::problem::Problem;

use super::Solution;

/// Reduces `[Z t]` to its triangle `R` by the block QR of the plain solver
/// (one pass over the design, `Q` never formed, `Z^T Z` never formed), then
/// factors the `(2p + 1) x (p + 1)` matrix `[R diag(f); sqrt(mu) I 0]`.
pub(super) fn solve(
    problem: &Problem<'_>,
    scaling: &Scaling,
    standardize: bool,
    lambda: f64,
    watch: &Watch<'_>,
) -> Result<Solution> {
    let p = problem.columns();
    // The triangle, the stacked system and its factor.
    crate::alloc::reserve_matrices("augmented system", 2 * p + 1, p + 1, 2)?;
    watch.begin(Stage::Factor, problem.rows());
    let r = tall_skinny_r(problem, scaling, true, watch)?;
    let norms: Option<Vec<f64>> = standardize.then(|| {
        (0..p)
            .map(|j| (0..=j).map(|i| r[(i, j)] * r[(i, j)]).sum())
            .collect()
    });
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let mu = map.scaled(lambda);
    let f = &map.factors;
    let tolerance = problem.default_rank_tolerance();
    let r11 = r.as_ref().submatrix(0, 0, p, p);
    // The design's condition from its own triangle (before the penalty).
    let design_condition = crate::linalg::svd::condition(r11, tolerance)?;
    if !crate::prep::dependent_columns(problem, scaling, r11, tolerance).is_empty() {
        // Columns dependent to rounding: the triangle's smallest pivots are
        // rounding noise, which a small penalty would treat as information
        // (exactly duplicated columns would get unequal coefficients). Take
        // the SVD of the triangle instead and drop the noise directions, as
        // the `Svd` method does.
        return spectral(scaling, &map, r.as_ref(), mu, tolerance, design_condition);
    }
    let root = mu.sqrt();
    let mut stacked = Mat::<f64>::zeros(2 * p + 1, p + 1);
    for i in 0..=p {
        for j in i..p {
            stacked[(i, j)] = r[(i, j)] * f[j];
        }
        stacked[(i, p)] = r[(i, p)];
    }
    for j in 0..p {
        stacked[(p + 1 + j, j)] = if map.is_live(j) { root } else { 1.0 };
    }
    let tri = dense::triangle(stacked.as_ref());
    let r11 = tri.as_ref().submatrix(0, 0, p, p).to_owned();
    let mut gamma: Vec<f64> = (0..p).map(|i| tri[(i, p)]).collect();
    triangular::solve_upper(r11.as_ref(), &mut gamma);
    Ok(Solution {
        beta: map.to_caller(scaling, &gamma),
        design_condition: Some(design_condition),
        system_condition: triangular::condition_upper(r11.as_ref()),
        method: "qr",
    })
}

/// The penalised solution from the SVD `R diag(f) = U S V^T` of the
/// triangle: `gamma^ = sum_k v_k s_k d_k / (s_k^2 + mu)` with `d = U^T r`,
/// over the singular values above `tolerance * s_max` (the others are
/// rounding noise of a rank-deficient design).
fn spectral(
    scaling: &Scaling,
    map: &PenaltyMap,
    r: MatRef<'_, f64>,
    mu: f64,
    tolerance: f64,
    design_condition: f64,
) -> Result<Solution> {
    let p = r.ncols() - 1;
    let f = &map.factors;
    let rh = Mat::<f64>::from_fn(p, p, |i, j| r[(i, j)] * f[j]);
    let dec = thin_svd(rh.as_ref())?;
    let smax = dec.s.first().copied().unwrap_or(0.0);
    let kept = dec
        .s
        .iter()
        .take_while(|&&s| s > 0.0 && s > tolerance * smax)
        .count();
    let mut gamma = vec![0.0; p];
    for k in 0..kept {
        let d: f64 = (0..p).map(|i| dec.u[(i, k)] * r[(i, p)]).sum();
        let s = dec.s[k];
        let c = s * d / (s * s + mu);
        for (j, g) in gamma.iter_mut().enumerate() {
            *g += dec.v[(j, k)] * c;
        }
    }
    let smin = dec.s.last().copied().unwrap_or(0.0);
    Ok(Solution {
        beta: map.to_caller(scaling, &gamma),
        design_condition: Some(design_condition),
        system_condition: ((smax * smax + mu) / (smin * smin + mu)).sqrt(),
        method: "qr",
    })
}
