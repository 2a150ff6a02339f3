//! The closed-form least-squares solvers.

mod cholesky;
mod qr;
mod refine;
pub(crate) mod svd;

pub use cholesky::Cholesky;
pub use qr::Qr;
pub use refine::Refinement;
pub use svd::Svd;

use crate::prep::Scaling;
use crate::problem::Problem;

/// Columns of the design that are numerically dependent on earlier ones,
/// from a factor `r` with `r^T r = Z^T Z` (`p x p`): a column is dependent
/// when its distance to the span of the earlier independent columns is at
/// most `tolerance` times an upper bound of the raw column's weighted norm,
/// or when it is numerically constant beside the intercept.
/// For each dependent column, the independent earlier columns it is a
/// combination of, read off an upper triangle `r` of the scaled design:
/// with `S` the independent columns before `j`, `R[S,S] c = R[S,j]`, and
/// column `i` of `S` is listed when its part `|c_i| |r_i|` is above
/// `1e-8 |r_j|` (norms of the triangle's columns, which are those of the
/// centered, scaled design). A constant column gets an empty list. When
/// `r` is not triangular (nothing can be read off it) the result is empty.
pub(crate) fn combinations(
    r: faer::MatRef<'_, f64>,
    dependent: &[usize],
    constant: &[bool],
) -> Vec<Vec<usize>> {
    let p = r.ncols().min(r.nrows());
    let triangular = (0..p).all(|j| (0..j).all(|i| r[(j, i)] == 0.0));
    if !triangular || dependent.iter().any(|&j| j >= p) {
        return Vec::new();
    }
    let norm = |j: usize| (0..=j).map(|i| r[(i, j)] * r[(i, j)]).sum::<f64>().sqrt();
    dependent
        .iter()
        .map(|&j| {
            if constant.get(j).copied().unwrap_or(false) {
                return Vec::new();
            }
            let set: Vec<usize> = (0..j).filter(|i| !dependent.contains(i)).collect();
            // Back substitution over the rows and columns of `set`.
            let mut c = vec![0.0; set.len()];
            for a in (0..set.len()).rev() {
                let i = set[a];
                let mut v = r[(i, j)];
                for b in a + 1..set.len() {
                    v -= r[(i, set[b])] * c[b];
                }
                let d = r[(i, i)];
                c[a] = if d != 0.0 { v / d } else { 0.0 };
            }
            let floor = 1e-8 * norm(j);
            set.iter()
                .zip(&c)
                .filter(|(&i, &ci)| ci.is_finite() && ci.abs() * norm(i) > floor)
                .map(|(&i, _)| i)
                .collect()
        })
        .collect()
}

pub(crate) fn dependent_columns(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r: faer::MatRef<'_, f64>,
    tolerance: f64,
) -> Vec<usize> {
    let p = r.ncols();
    let threshold = |j: usize| {
        if scaling.constant[j] {
            f64::INFINITY
        } else {
            tolerance * scaling.raw_norm_bound(problem, j)
        }
    };
    // Fast path: the diagonal of a triangle bounds each column's distance to
    // the span of *all* earlier columns from below, so if every pivot is
    // large no column is dependent.
    let triangular = (0..p).all(|j| (0..j).all(|i| r[(j, i)] == 0.0));
    if triangular && (0..p).all(|j| r[(j, j)].abs() > threshold(j)) {
        return Vec::new();
    }
    crate::linalg::householder::dependent_columns(r, threshold)
}
