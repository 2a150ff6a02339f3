//! Householder QR that never skips a column, for the rank-deficient cases.
//!
//! faer's unpivoted QR stops advancing its pivot row at a column whose
//! remaining norm is at rounding level (it returns a staircase `R` and the
//! rank it saw). A least-squares solver needs the standard triangle with
//! the tiny pivot left in place, so that it can name the dependent column.
//! These routines provide that: faer's fast kernel when the block has full
//! rank, a column-pivoted QR (which processes every column) when it has not,
//! and a plain Householder QR without skipping for the final small triangle.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::qr::{col_pivoting, no_pivoting};
use faer::{Mat, MatMut, MatRef, Par};

/// Replaces `a` (`m x k`, `m >= k`) by a `k x k` factor `R` in its top rows
/// with `R^T R = a^T a` (rows below zeroed). Returns whether `R` is upper
/// triangular in the standard sense (full rank seen by the fast kernel);
/// otherwise `R` is a column permutation of a triangle.
pub(crate) fn reduce_to_square(mut a: MatMut<'_, f64>) -> bool {
    let (m, k) = (a.nrows(), a.ncols());
    if k == 0 || m == 0 {
        return true;
    }
    debug_assert!(m >= k);
    let backup = a.to_owned();
    let bs = no_pivoting::factor::recommended_block_size::<f64>(m, k);
    let mut h = Mat::<f64>::zeros(bs, m.min(k));
    let req =
        no_pivoting::factor::qr_in_place_scratch::<f64>(m, k, bs, Par::Seq, Default::default());
    let mut mem = MemBuffer::new(req);
    let info = no_pivoting::factor::qr_in_place(
        a.as_mut(),
        h.as_mut(),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    );
    if info.rank == m.min(k) {
        zero_below_diagonal(a.as_mut());
        return true;
    }
    // Rank deficient block: column-pivoted QR processes every column.
    a.copy_from(backup.as_ref());
    let mut perm = vec![0usize; k];
    let mut perm_inv = vec![0usize; k];
    let req = col_pivoting::factor::qr_in_place_scratch::<usize, f64>(
        m,
        k,
        bs,
        Par::Seq,
        Default::default(),
    );
    let mut mem = MemBuffer::new(req);
    col_pivoting::factor::qr_in_place(
        a.as_mut(),
        h.as_mut(),
        &mut perm,
        &mut perm_inv,
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    );
    // a P = Q R  =>  a = Q (R P^T): column perm[i] of the result is column i of R.
    let r = Mat::<f64>::from_fn(k, k, |i, j| if i <= j { a[(i, j)] } else { 0.0 });
    for i in 0..m {
        for j in 0..k {
            a[(i, j)] = 0.0;
        }
    }
    for (i, &p) in perm.iter().enumerate() {
        for row in 0..k {
            a[(row, p)] = r[(row, i)];
        }
    }
    false
}

fn zero_below_diagonal(mut a: MatMut<'_, f64>) {
    let (m, k) = (a.nrows(), a.ncols());
    for j in 0..k {
        for i in (j + 1)..m {
            a[(i, j)] = 0.0;
        }
    }
}

/// Plain Householder QR in place (`m x k`), never skipping a column: on
/// return the upper triangle holds `R` (a zero column gives a zero pivot);
/// below the diagonal, the reflectors `v_j` (with `v_j[j] = 1` implied) and
/// `taus[j]` such that `H_j = I - tau_j v_j v_j^T`.
pub(crate) fn householder_in_place(mut a: MatMut<'_, f64>) -> Vec<f64> {
    let (m, k) = (a.nrows(), a.ncols());
    let steps = m.min(k);
    let mut taus = vec![0.0; steps];
    for j in 0..steps {
        // Scaled norm of a[j.., j].
        let scale = (j..m).fold(0.0_f64, |s, i| s.max(a[(i, j)].abs()));
        if scale == 0.0 {
            continue;
        }
        let norm = scale
            * (j..m)
                .map(|i| (a[(i, j)] / scale).powi(2))
                .sum::<f64>()
                .sqrt();
        let x0 = a[(j, j)];
        let alpha = if x0 >= 0.0 { -norm } else { norm };
        let v0 = x0 - alpha;
        // v = [1, a[j+1.., j] / v0], tau = (alpha - x0) / alpha... in the
        // form H = I - tau v v^T with tau = -v0 / alpha.
        for i in (j + 1)..m {
            a[(i, j)] /= v0;
        }
        let tau = -v0 / alpha;
        a[(j, j)] = alpha;
        taus[j] = tau;
        for c in (j + 1)..k {
            let mut dot = a[(j, c)];
            for i in (j + 1)..m {
                dot += a[(i, j)] * a[(i, c)];
            }
            let f = tau * dot;
            a[(j, c)] -= f;
            for i in (j + 1)..m {
                let v = a[(i, j)];
                a[(i, c)] -= f * v;
            }
        }
    }
    taus
}

/// Columns of `a` that lie, to within `threshold(j)` in norm, in the span
/// of the earlier *independent* columns. A Householder QR that skips such a
/// column (it consumes no pivot row), so that a dependent column does not
/// hide the information of the columns after it. Only the Gram matrix
/// `a^T a` matters, so any factor with the same Gram (a triangle `R` of the
/// design) gives the design's dependent columns.
pub(crate) fn dependent_columns(
    a: MatRef<'_, f64>,
    threshold: impl Fn(usize) -> f64,
) -> Vec<usize> {
    let (m, k) = (a.nrows(), a.ncols());
    let mut w = a.to_owned();
    let mut dependent = Vec::new();
    let mut row = 0;
    for j in 0..k {
        let rest = if row < m {
            (row..m).map(|i| w[(i, j)] * w[(i, j)]).sum::<f64>().sqrt()
        } else {
            0.0
        };
        if rest <= threshold(j) {
            dependent.push(j);
            continue;
        }
        let x0 = w[(row, j)];
        let alpha = if x0 >= 0.0 { -rest } else { rest };
        let v0 = x0 - alpha;
        for i in (row + 1)..m {
            w[(i, j)] /= v0;
        }
        let tau = -v0 / alpha;
        for c in (j + 1)..k {
            let mut dot = w[(row, c)];
            for i in (row + 1)..m {
                dot += w[(i, j)] * w[(i, c)];
            }
            let f = tau * dot;
            w[(row, c)] -= f;
            for i in (row + 1)..m {
                let v = w[(i, j)];
                w[(i, c)] -= f * v;
            }
        }
        row += 1;
    }
    dependent
}

/// Upper-triangular `R` (`k x k`) with `R^T R = a^T a` for a square or tall
/// `a`, computed without skipping columns.
pub(crate) fn triangle_of(a: MatRef<'_, f64>) -> Mat<f64> {
    let k = a.ncols();
    let mut w = a.to_owned();
    householder_in_place(w.as_mut());
    Mat::<f64>::from_fn(k, k, |i, j| {
        if i <= j && i < w.nrows() {
            w[(i, j)]
        } else {
            0.0
        }
    })
}

/// Thin `Q` (`m x min(m, k)`) of `a = Q R` by the plain Householder QR.
pub(crate) fn thin_q(a: MatRef<'_, f64>) -> Mat<f64> {
    let (m, k) = (a.nrows(), a.ncols());
    let r = m.min(k);
    let mut w = a.to_owned();
    let taus = householder_in_place(w.as_mut());
    let mut q = Mat::<f64>::zeros(m, r);
    for j in 0..r {
        q[(j, j)] = 1.0;
    }
    // Q = H_0 H_1 ... H_{r-1} applied to the first r columns of I.
    for j in (0..r).rev() {
        let tau = taus[j];
        if tau == 0.0 {
            continue;
        }
        for c in 0..r {
            let mut dot = q[(j, c)];
            for i in (j + 1)..m {
                dot += w[(i, j)] * q[(i, c)];
            }
            let f = tau * dot;
            q[(j, c)] -= f;
            for i in (j + 1)..m {
                q[(i, c)] -= f * w[(i, j)];
            }
        }
    }
    q
}

/// For each dependent column, the independent earlier columns it is a
/// combination of, read off an upper triangle `r` of the scaled design:
/// with `S` the independent columns before `j`, `R[S,S] c = R[S,j]`, and
/// column `i` of `S` is listed when its part `|c_i| |r_i|` is above
/// `1e-8 |r_j|` (norms of the triangle's columns, which are those of the
/// centered, scaled design). A constant column gets an empty list. When
/// `r` is not triangular (nothing can be read off it) the result is empty.
pub(crate) fn combinations(
    r: MatRef<'_, f64>,
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

#[cfg(test)]
mod tests {
    use super::*;

    fn gram(a: MatRef<'_, f64>) -> Mat<f64> {
        let k = a.ncols();
        Mat::from_fn(k, k, |i, j| {
            (0..a.nrows()).map(|r| a[(r, i)] * a[(r, j)]).sum()
        })
    }

    fn sample(m: usize, k: usize, dup: Option<(usize, usize)>) -> Mat<f64> {
        let mut a = Mat::<f64>::from_fn(m, k, |i, j| {
            ((i * 7 + j * 13) % 11) as f64 - 5.0 + 0.1 * (i as f64) * (j as f64 + 1.0).sqrt()
        });
        if let Some((from, to)) = dup {
            for i in 0..m {
                a[(i, to)] = a[(i, from)];
            }
        }
        a
    }

    /// Identity: R^T R = A^T A whether or not A has full rank.
    #[test]
    fn reduced_factor_keeps_the_gram_matrix() {
        for dup in [None, Some((1, 3)), Some((0, 2))] {
            let a = sample(40, 5, dup);
            let mut w = a.clone();
            let triangular = reduce_to_square(w.as_mut());
            assert_eq!(triangular, dup.is_none());
            let r = w.as_ref().subrows(0, 5);
            let (g1, g2) = (gram(a.as_ref()), gram(r));
            for i in 0..5 {
                for j in 0..5 {
                    assert!((g1[(i, j)] - g2[(i, j)]).abs() < 1e-10 * g1[(i, i)].max(1.0));
                }
            }
            let t = triangle_of(r);
            let g3 = gram(t.as_ref());
            for i in 0..5 {
                for j in 0..5 {
                    assert!((g1[(i, j)] - g3[(i, j)]).abs() < 1e-10 * g1[(i, i)].max(1.0));
                    if i > j {
                        assert_eq!(t[(i, j)], 0.0);
                    }
                }
            }
            if let Some((_, to)) = dup {
                // The dependent column keeps a pivot at rounding level.
                assert!(t[(to, to)].abs() < 1e-12 * g1[(to, to)].sqrt());
            }
        }
    }

    /// Identity: the thin Q is orthonormal and spans the columns.
    #[test]
    fn thin_q_is_orthonormal() {
        let a = sample(9, 4, None);
        let q = thin_q(a.as_ref());
        let g = gram(q.as_ref());
        for i in 0..4 {
            for j in 0..4 {
                let e = if i == j { 1.0 } else { 0.0 };
                assert!((g[(i, j)] - e).abs() < 1e-13);
            }
        }
        // Each column of a is Q Q^T a.
        for c in 0..4 {
            for i in 0..9 {
                let proj: f64 = (0..4)
                    .map(|t| q[(i, t)] * (0..9).map(|r| q[(r, t)] * a[(r, c)]).sum::<f64>())
                    .sum();
                assert!((proj - a[(i, c)]).abs() < 1e-12 * 10.0);
            }
        }
    }
}
