//! Ridge by QR of the augmented system: the triangle of the design stacked
//! over `sqrt(mu) I`.

use faer::Mat;

use crate::error::Result;
use crate::linalg::{dense, qr::tall_skinny_r, triangular};
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
) -> Result<Solution> {
    let p = problem.cols();
    let r = tall_skinny_r(problem, scaling, true);
    let norms: Option<Vec<f64>> = standardize.then(|| {
        (0..p)
            .map(|j| (0..=j).map(|i| r[(i, j)] * r[(i, j)]).sum())
            .collect()
    });
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let root = map.scaled(lambda).sqrt();
    let f = &map.factors;
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
        condition: triangular::condition_upper(r11.as_ref()),
        live: map.live(),
        method: "qr",
    })
}
