//! The backend seam: which library factors the small `p x p` and stacked
//! matrices of a fit.
//!
//! The row-block passes over the design (the Gram and TSQR passes, the
//! residual, leverage and gradient passes) are always the crate's own
//! kernels. What a fit does with the `p x p` results of those passes goes
//! through the entry points of [`super::cholesky`], [`super::svd`],
//! [`super::dense::symmetric_eigen`], [`super::triangular`] and
//! [`merge_triangles`]; each of them asks [`routes_to_lapack`] whether to
//! hand its matrix to LAPACK instead of faer. Without a `lapack-*` cargo
//! feature the answer is always no and nothing of this module but the
//! selection exists.
//!
//! With the feature, the [`Backend`] chosen by [`set_backend`] (LAPACK by
//! default) decides; under [`Backend::Lapack`] each routine goes to LAPACK
//! only where LAPACK was measured faster (`examples/backend_kernels.rs`,
//! one thread each, time of faer / time of OpenBLAS 0.3.21, on a 2-core
//! x86-64 machine without AVX-512, shared with other work, one run of the
//! example; above 1 LAPACK is faster). The LAPACK routes of the routines
//! that stay with faer are kept, so that the choice can follow a new
//! measurement by changing one line of `lapack_is_faster`:
//!
//! | routine                               | p = 100 | p = 500 | p = 1000 | route under `Lapack` |
//! |---------------------------------------|---------|---------|----------|----------------------|
//! | merge of two triangles (`dtpqrt`)     | 1.17 | 6.46 | 3.26 | LAPACK |
//! | Cholesky (`dpotrf`)                   | 0.54 | 0.69 | 0.74 | faer |
//! | SVD, vectors (`dgesdd`)               | 1.49 | 1.10 | 1.09 | faer (accuracy) |
//! | singular values only (`dgesdd`)       | 1.78 | 1.48 | 1.42 | faer (accuracy) |
//! | symmetric eigen (`dsyevd`)            | 1.20 | 1.45 | 1.11 | LAPACK |
//! | triangular inverse (`dtrtri`)         | 0.43 | 0.15 | 0.52 | faer |
//! | triangular solve, one vector (`dtrtrs`) | 0.24 | 0.13 | 0.08 | faer |
//!
//! The SVD stays with faer although LAPACK was faster: through the Svd
//! solver, LAPACK's SVD of the triangle kept 8.79 (`dgesdd`) and 8.85
//! (`dgesvd`) certified digits of NIST Wampler1, below the floor of 9 that
//! faer's meets (tests/backends.rs). The LAPACK route (now `dgesvd`) is
//! kept for a later look.
//!
//! OpenBLAS is set to one thread the first time the crate calls it
//! (`openblas_set_num_threads(1)`): its results then do not depend on the
//! machine's core count (OpenBLAS's blocked kernels split their sums by
//! thread, which changes the last bits), and its threads do not compete with
//! the crate's own row-block threads, which call it from inside a parallel
//! reduction. This setting is global to the process: a program that uses
//! OpenBLAS itself can set its own thread count after the crate's first
//! fit.

#[cfg(feature = "lapack")]
pub(crate) mod lapack;

use std::sync::atomic::{AtomicBool, AtomicU8, Ordering};

use faer::{Mat, MatRef};

use crate::error::{Error, Result};

/// The library that factors the small `p x p` and stacked matrices of a
/// fit (see [`set_backend`]). The passes over the design's rows are the
/// crate's own under either.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Backend {
    /// faer (pure Rust): always available, the default without a
    /// `lapack-*` feature.
    Faer,
    /// LAPACK through OpenBLAS, for the routines where it was measured
    /// faster (see the crate's DEVELOPERS.md); available with the cargo
    /// feature `lapack-openblas-system` or `lapack-openblas-static`, and
    /// then the default.
    Lapack,
}

impl Backend {
    /// The backend's name as the bench example and reports print it
    /// (`"faer"` or `"lapack"`).
    pub fn name(self) -> &'static str {
        match self {
            Backend::Faer => "faer",
            Backend::Lapack => "lapack",
        }
    }

    /// Whether this build can use the backend (LAPACK needs a `lapack-*`
    /// cargo feature).
    pub fn available(self) -> bool {
        match self {
            Backend::Faer => true,
            Backend::Lapack => cfg!(feature = "lapack"),
        }
    }
}

const FAER: u8 = 0;
const LAPACK: u8 = 1;

/// The selected backend; LAPACK by default when it is compiled in.
static SELECTED: AtomicU8 = AtomicU8::new(if cfg!(feature = "lapack") {
    LAPACK
} else {
    FAER
});

/// Chooses the backend of every later fit in this process (a global
/// setting: fits already running may see the change between two of their
/// factorisations, so set it before fitting).
///
/// # Errors
/// [`Error::BackendUnavailable`] for [`Backend::Lapack`] in a build without
/// a `lapack-*` cargo feature (the selection is then left as it was).
///
/// ```
/// use leastline::{set_backend, Backend};
/// set_backend(Backend::Faer).unwrap();
/// assert_eq!(leastline::backend(), Backend::Faer);
/// assert_eq!(set_backend(Backend::Lapack).is_ok(), Backend::Lapack.available());
/// ```
pub fn set_backend(backend: Backend) -> Result<()> {
    if !backend.available() {
        return Err(Error::BackendUnavailable {
            backend: backend.name(),
        });
    }
    let code = match backend {
        Backend::Faer => FAER,
        Backend::Lapack => LAPACK,
    };
    SELECTED.store(code, Ordering::SeqCst);
    Ok(())
}

/// The backend that fits use now (see [`set_backend`]).
pub fn backend() -> Backend {
    if SELECTED.load(Ordering::SeqCst) == LAPACK && cfg!(feature = "lapack") {
        Backend::Lapack
    } else {
        Backend::Faer
    }
}

/// The routines behind the seam.
#[cfg_attr(not(feature = "lapack"), allow(dead_code))]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Routine {
    /// QR of two stacked upper triangles ([`merge_triangles`]).
    MergeTriangles,
    /// Cholesky factorisation ([`super::cholesky::factor_in_place`]).
    Cholesky,
    /// SVD with or without vectors ([`super::svd`]).
    Svd,
    /// Symmetric eigendecomposition ([`super::dense::symmetric_eigen`]).
    SymmetricEigen,
    /// Inverse of a triangle ([`super::triangular`]).
    TriangularInverse,
    /// Solve with a triangle and one right-hand side ([`super::triangular`]).
    TriangularSolve,
}

/// Whether `routine` goes to LAPACK now: the LAPACK backend is selected
/// and the routine was measured faster there (the table of the module
/// documentation). Always false without a `lapack-*` feature.
#[cfg_attr(not(feature = "lapack"), allow(dead_code))]
pub(crate) fn routes_to_lapack(routine: Routine) -> bool {
    backend() == Backend::Lapack && lapack_is_faster(routine)
}

/// When set, every routine goes to LAPACK under [`Backend::Lapack`]
/// (the measurement of [`crate::bench_support::backend_kernels`] only).
static EVERY_ROUTINE: AtomicBool = AtomicBool::new(false);

/// Sends every routine to LAPACK under [`Backend::Lapack`] (`true`), or
/// only those measured faster (`false`, the default).
#[cfg_attr(not(feature = "bench-support"), allow(dead_code))]
pub(crate) fn route_every_routine(on: bool) {
    EVERY_ROUTINE.store(on, Ordering::SeqCst);
}

/// The per-routine decision from measurement (module documentation).
#[cfg_attr(not(feature = "lapack"), allow(dead_code))]
fn lapack_is_faster(routine: Routine) -> bool {
    if EVERY_ROUTINE.load(Ordering::SeqCst) {
        return true;
    }
    match routine {
        Routine::MergeTriangles | Routine::SymmetricEigen => true,
        Routine::Svd
        | Routine::Cholesky
        | Routine::TriangularInverse
        | Routine::TriangularSolve => false,
    }
}

/// Folds the upper triangle `b` (`k x k`) into the upper triangle `a`:
/// `a` becomes the triangular factor of the QR of the stack `[a; b]`
/// (signs of its rows a Householder convention). `b` is only read.
pub(crate) fn merge_triangles(a: &mut Mat<f64>, b: MatRef<'_, f64>) {
    let k = a.ncols();
    if k == 0 {
        return;
    }
    #[cfg(feature = "lapack")]
    if routes_to_lapack(Routine::MergeTriangles) {
        lapack::merge_triangles(a.as_mut(), b);
        return;
    }
    merge_triangles_faer(a, b);
}

/// [`merge_triangles`] by the crate's own stacked QR (faer products).
pub(crate) fn merge_triangles_faer(a: &mut Mat<f64>, b: MatRef<'_, f64>) {
    use super::qr::{row_stride, stacked_qr, StackedQrWork};
    let k = a.ncols();
    let ld = row_stride(k);
    let mut buf = vec![0.0f64; k * ld];
    for i in 0..k {
        for j in i..k {
            buf[i * ld + j] = b[(i, j)];
        }
    }
    let mut work = StackedQrWork::new(k);
    stacked_qr(a.as_mut(), &mut buf, ld, k, &mut work);
}
