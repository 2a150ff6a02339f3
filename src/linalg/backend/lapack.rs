//! The LAPACK routes of the backend seam (OpenBLAS through `lapack-sys`).
//!
//! Every routine copies its `p x p` input into a column-major buffer (the
//! layout LAPACK reads), calls the one LAPACK driver of the table in the
//! parent module, and copies the result back into faer's matrices: the
//! copies are `O(p^2)` beside the `O(p^3)` factorisations. Sizes beyond a
//! LAPACK integer (`i32`) are refused before any call.

use std::os::raw::{c_char, c_int};
use std::sync::Once;

use faer::linalg::triangular_inverse::invert_upper_triangular;
use faer::{Mat, MatMut, MatRef, Par};

use crate::error::{Error, Result};

// Linked in by ndarray-linalg's OpenBLAS feature (through lax and
// openblas-src); named here so that the linker keeps the library.
use ndarray_linalg as _;

extern "C" {
    /// OpenBLAS's thread-count setting (a symbol of every OpenBLAS build).
    fn openblas_set_num_threads(n: c_int);
}

static ONE_THREAD: Once = Once::new();

/// Sets OpenBLAS to one thread, once per process, before its first use
/// (see the parent module for why).
fn init() {
    ONE_THREAD.call_once(|| {
        // SAFETY: a plain setter of OpenBLAS's global thread count, called
        // once before any other OpenBLAS call of this crate.
        unsafe { openblas_set_num_threads(1) }
    });
}

/// A dimension as a LAPACK integer, or [`Error::TooLarge`].
fn lapack_int(n: usize, what: &'static str) -> Result<c_int> {
    c_int::try_from(n).map_err(|_| Error::TooLarge {
        what,
        bytes: (n as u128).saturating_mul(n as u128).saturating_mul(8),
    })
}

/// The `m x n` matrix `a` copied column by column (leading dimension
/// `max(m, 1)`).
fn column_major(a: MatRef<'_, f64>, what: &'static str) -> Result<Vec<f64>> {
    let (m, n) = (a.nrows(), a.ncols());
    let len = crate::alloc::checked_len::<f64>(what, &[m.max(1), n.max(1)])?;
    let mut out = crate::alloc::vec(what, len, 0.0)?;
    let ld = m.max(1);
    for j in 0..n {
        for i in 0..m {
            out[j * ld + i] = a[(i, j)];
        }
    }
    Ok(out)
}

/// Folds the upper triangle `b` into the upper triangle `a` by LAPACK's
/// triangular-pentagonal QR (`dtpqrt` with `l = k`: `b` is itself a
/// triangle, so no arithmetic is spent on its zeros either).
pub(crate) fn merge_triangles(mut a: MatMut<'_, f64>, b: MatRef<'_, f64>) {
    init();
    let k = a.ncols();
    let Ok(kk) = c_int::try_from(k) else {
        // Unreachable for a triangle that fits in memory; keep the crate's
        // own route rather than call LAPACK with a wrapped size.
        let mut owned = a.to_owned();
        super::merge_triangles_faer(&mut owned, b);
        a.copy_from(owned.as_ref());
        return;
    };
    let nb = 32.min(k).max(1);
    let mut am = vec![0.0f64; k * k];
    let mut bm = vec![0.0f64; k * k];
    for j in 0..k {
        for i in 0..=j {
            am[j * k + i] = a[(i, j)];
            bm[j * k + i] = b[(i, j)];
        }
    }
    let mut t = vec![0.0f64; nb * k];
    let mut work = vec![0.0f64; nb * k];
    let nbi = nb as c_int;
    let mut info: c_int = 0;
    // SAFETY: `am`, `bm` are k x k column-major (lda = ldb = k), `t` is
    // nb x k (ldt = nb), `work` holds nb * k doubles, as dtpqrt requires.
    unsafe {
        lapack_sys::dtpqrt_(
            &kk,
            &kk,
            &kk,
            &nbi,
            am.as_mut_ptr(),
            &kk,
            bm.as_mut_ptr(),
            &kk,
            t.as_mut_ptr(),
            &nbi,
            work.as_mut_ptr(),
            &mut info,
        );
    }
    debug_assert_eq!(info, 0, "dtpqrt argument error");
    for j in 0..k {
        for i in 0..k {
            a[(i, j)] = if i <= j { am[j * k + i] } else { 0.0 };
        }
    }
}

/// Cholesky factor in place by `dpotrf` (lower): the lower triangle of `l`
/// becomes `L`, its upper part is zeroed; `Err(pivot)` (from 0) at the
/// first leading minor that is not positive definite.
pub(crate) fn cholesky_in_place(mut l: MatMut<'_, f64>) -> std::result::Result<(), usize> {
    init();
    let n = l.nrows();
    let Ok(ni) = c_int::try_from(n) else {
        return Err(0);
    };
    let mut a = vec![0.0f64; n * n];
    for j in 0..n {
        for i in j..n {
            a[j * n + i] = l[(i, j)];
        }
    }
    let lda = ni.max(1);
    let mut info: c_int = 0;
    let uplo = b'L' as c_char;
    // SAFETY: `a` is n x n column-major with lda = max(n, 1).
    unsafe { lapack_sys::dpotrf_(&uplo, &ni, a.as_mut_ptr(), &lda, &mut info) };
    if info > 0 {
        return Err(info as usize - 1);
    }
    for j in 0..n {
        for i in 0..n {
            l[(i, j)] = if i >= j { a[j * n + i] } else { 0.0 };
        }
    }
    Ok(())
}

/// Thin SVD by `dgesvd` (bidiagonal QR iteration; `dgesdd`, divide and
/// conquer, was faster but kept 8.79 certified digits of NIST Wampler1
/// through the Svd solver, below the floor of 9 that faer's SVD meets): writes `U` (`m x r`) and
/// `V` (`n x r`) when given, returns the singular values, non-increasing.
pub(crate) fn svd(
    a: MatRef<'_, f64>,
    vectors: Option<(MatMut<'_, f64>, MatMut<'_, f64>)>,
) -> Result<Vec<f64>> {
    init();
    let what = "singular value decomposition";
    let (m, n) = (a.nrows(), a.ncols());
    let r = m.min(n);
    if r == 0 {
        return Ok(Vec::new());
    }
    let (mi, ni, ri) = (
        lapack_int(m, what)?,
        lapack_int(n, what)?,
        lapack_int(r, what)?,
    );
    let mut am = column_major(a, what)?;
    let mut s = crate::alloc::vec(what, r, 0.0)?;
    let want = vectors.is_some();
    let jobz = if want { b'S' } else { b'N' } as c_char;
    let (mut u, mut vt) = if want {
        (
            crate::alloc::vec(what, crate::alloc::checked_len::<f64>(what, &[m, r])?, 0.0)?,
            crate::alloc::vec(what, crate::alloc::checked_len::<f64>(what, &[r, n])?, 0.0)?,
        )
    } else {
        (vec![0.0; 1], vec![0.0; 1])
    };
    let ldu = mi;
    let ldvt = if want { ri } else { 1 };
    let mut info: c_int = 0;
    let call = |work: &mut [f64],
                lwork: c_int,
                am: &mut [f64],
                s: &mut [f64],
                u: &mut [f64],
                vt: &mut [f64],
                info: &mut c_int| {
        // SAFETY: `am` is m x n column-major (lda = m), `s` holds min(m, n)
        // values, `u` is m x r (ldu = m) and `vt` r x n (ldvt = r) when
        // vectors are asked (jobu = jobvt = 'S'; not referenced for 'N'),
        // `work` holds `lwork` doubles (or one for the size query).
        unsafe {
            lapack_sys::dgesvd_(
                &jobz,
                &jobz,
                &mi,
                &ni,
                am.as_mut_ptr(),
                &mi,
                s.as_mut_ptr(),
                u.as_mut_ptr(),
                &ldu,
                vt.as_mut_ptr(),
                &ldvt,
                work.as_mut_ptr(),
                &lwork,
                info,
            );
        }
    };
    let mut query = [0.0f64];
    call(&mut query, -1, &mut am, &mut s, &mut u, &mut vt, &mut info);
    if info != 0 {
        return Err(Error::NoConvergence { what });
    }
    let lwork = (query[0] as usize).max(1);
    let lwork_i = lapack_int(lwork, what)?;
    let mut work = crate::alloc::vec(what, lwork, 0.0)?;
    call(
        &mut work, lwork_i, &mut am, &mut s, &mut u, &mut vt, &mut info,
    );
    if info != 0 || s.iter().any(|v| !v.is_finite()) {
        return Err(Error::NoConvergence { what });
    }
    if let Some((mut uo, mut vo)) = vectors {
        for c in 0..r {
            for i in 0..m {
                uo[(i, c)] = u[c * m + i];
            }
            for j in 0..n {
                vo[(j, c)] = vt[j * r + c];
            }
        }
    }
    Ok(s)
}

/// Symmetric eigendecomposition by `dsyevd` (lower triangle read):
/// eigenvalues non-decreasing, eigenvectors as columns.
pub(crate) fn symmetric_eigen(a: MatRef<'_, f64>) -> Result<(Vec<f64>, Mat<f64>)> {
    init();
    let what = "symmetric eigendecomposition";
    let n = a.nrows();
    if n == 0 {
        return Ok((Vec::new(), Mat::zeros(0, 0)));
    }
    let ni = lapack_int(n, what)?;
    let mut am = column_major(a, what)?;
    let mut w = crate::alloc::vec(what, n, 0.0)?;
    let (jobz, uplo) = (b'V' as c_char, b'L' as c_char);
    let mut info: c_int = 0;
    let mut wq = [0.0f64];
    let mut iq = [0 as c_int];
    // SAFETY (both calls): `am` is n x n column-major (lda = n), `w` holds
    // n values, `work`/`iwork` hold `lwork`/`liwork` entries (one each for
    // the size query).
    unsafe {
        lapack_sys::dsyevd_(
            &jobz,
            &uplo,
            &ni,
            am.as_mut_ptr(),
            &ni,
            w.as_mut_ptr(),
            wq.as_mut_ptr(),
            &-1,
            iq.as_mut_ptr(),
            &-1,
            &mut info,
        );
    }
    if info != 0 {
        return Err(Error::NoConvergence { what });
    }
    let lwork = (wq[0] as usize).max(1);
    let liwork = (iq[0].max(1)) as usize;
    let mut work = crate::alloc::vec(what, lwork, 0.0)?;
    let mut iwork = crate::alloc::vec(what, liwork, 0 as c_int)?;
    let (lw, liw) = (lapack_int(lwork, what)?, lapack_int(liwork, what)?);
    unsafe {
        lapack_sys::dsyevd_(
            &jobz,
            &uplo,
            &ni,
            am.as_mut_ptr(),
            &ni,
            w.as_mut_ptr(),
            work.as_mut_ptr(),
            &lw,
            iwork.as_mut_ptr(),
            &liw,
            &mut info,
        );
    }
    if info != 0 || w.iter().any(|v| !v.is_finite()) {
        return Err(Error::NoConvergence { what });
    }
    let vectors = Mat::from_fn(n, n, |i, j| am[j * n + i]);
    Ok((w, vectors))
}

/// Writes the inverse of the upper triangle `r` into `dst` by `dtrtri`
/// (a zero on the diagonal gives infinities there, as the faer route's
/// division does).
pub(crate) fn inverse_upper_into(mut dst: MatMut<'_, f64>, r: MatRef<'_, f64>) {
    init();
    let n = r.nrows();
    let ni = match c_int::try_from(n) {
        Ok(ni) if n > 0 && (0..n).all(|i| r[(i, i)] != 0.0) => ni,
        _ => {
            invert_upper_triangular(dst, r, Par::Seq);
            return;
        }
    };
    let mut a = vec![0.0f64; n * n];
    for j in 0..n {
        for i in 0..=j {
            a[j * n + i] = r[(i, j)];
        }
    }
    let (uplo, diag) = (b'U' as c_char, b'N' as c_char);
    let mut info: c_int = 0;
    // SAFETY: `a` is n x n column-major (lda = n).
    unsafe { lapack_sys::dtrtri_(&uplo, &diag, &ni, a.as_mut_ptr(), &ni, &mut info) };
    for j in 0..n {
        for i in 0..n {
            dst[(i, j)] = if i <= j { a[j * n + i] } else { 0.0 };
        }
    }
}

/// Solves `T x = b` in place by `dtrtrs` for the triangle `t` (upper when
/// `upper`, else lower). Returns false, with `b` untouched, for a zero on
/// the diagonal (left to the faer route, which divides by it).
pub(crate) fn solve_triangular(t: MatRef<'_, f64>, b: &mut [f64], upper: bool) -> bool {
    init();
    let n = t.nrows();
    let ni = match c_int::try_from(n) {
        Ok(ni) if n > 0 && (0..n).all(|i| t[(i, i)] != 0.0) => ni,
        _ => return false,
    };
    let mut a = vec![0.0f64; n * n];
    for j in 0..n {
        for i in 0..n {
            if (upper && i <= j) || (!upper && i >= j) {
                a[j * n + i] = t[(i, j)];
            }
        }
    }
    let uplo = if upper { b'U' } else { b'L' } as c_char;
    let (trans, diag) = (b'N' as c_char, b'N' as c_char);
    let lda = ni.max(1);
    let mut info: c_int = 0;
    // SAFETY: `a` is n x n column-major (lda = max(n, 1)), `b` holds n values
    // (one right-hand side, ldb = max(n, 1)).
    unsafe {
        lapack_sys::dtrtrs_(
            &uplo,
            &trans,
            &diag,
            &ni,
            &1,
            a.as_ptr(),
            &lda,
            b.as_mut_ptr(),
            &lda,
            &mut info,
        )
    };
    true
}
