//! # leastline
//!
//! Linear least-squares fitting for Rust programs: closed-form solvers (QR,
//! Cholesky on the normal equations, SVD) behind one object-safe
//! [`Solver`] trait, with observation weights, an intercept fitted by
//! centering, and a report of how each fit went.
//!
//! ## Quick start
//!
//! ```
//! use leastline::{Problem, Qr, Solver};
//! use ndarray::array;
//!
//! // Five readings of a sensor against two known inputs.
//! let x = array![[1.0, 0.2], [2.0, 0.1], [3.0, 0.4], [4.0, 0.3], [5.0, 0.5]];
//! let y = array![2.9, 4.6, 7.3, 8.9, 11.2];
//! let problem = Problem::new(x.view(), y.view())?;
//! let fit = Qr::new().fit(&problem)?;
//! println!("slopes {:?}, intercept {}", fit.model.coefficients(), fit.model.intercept());
//! // Closed forms measure the rank and condition; gradient solvers report None.
//! println!("rank {:?}, condition {:.1?}", fit.report.rank, fit.report.condition);
//! let y_new = fit.model.predict(array![[6.0, 0.2]].view())?;
//! assert_eq!(y_new.len(), 1);
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## Which solver when
//!
//! | solver | use it for | cost (n rows, p columns) | condition |
//! |---|---|---|---|
//! | [`Qr`] (default) | general use; accurate | about 2 n p² | keeps cond(X) |
//! | [`Cholesky`] | large, well-conditioned designs; fastest | about n p² | squares cond(X); refuses when too few digits would survive |
//! | [`Svd`] | rank-deficient designs; minimum-norm solution and numerical rank | QR plus O(p³) | keeps cond(X) |
//! | [`Qr::refined()`] | every digit the data allow | 2–7 × QR | refinement with double-double residuals |
//! | [`Ridge`] | collinear predictors, prediction, wide designs | by shape: Cholesky, augmented QR, SVD path, dual | penalty chosen by [`RidgePath`] |
//! | [`GradientDescent`], [`Accelerated`], [`Stochastic`] | huge p, warm starts | one read of X per iteration | iterative; honest convergence report |
//!
//! ## Watching and stopping a fit
//!
//! Every solver takes an [`Observer`] through
//! [`Solver::fit_observed`]: a closure `Fn(&Progress) -> Control + Sync`
//! called after every block of rows of every pass over the design (at
//! most 4,096 rows, from the worker thread that finished it) and after
//! every iteration of the gradient solvers. A [`Progress`] names the
//! [`Stage`] and the rows of the current pass done; [`Control::Stop`] ends
//! the fit within about one block per thread. A stopped closed-form fit is
//! [`Error::Stopped`]; a gradient fit stopped while iterating keeps its
//! current coefficients. Observing never changes a result.
//!
//! ```
//! use std::sync::atomic::{AtomicUsize, Ordering};
//! use leastline::{Control, Error, Problem, Progress, Qr, Solver, Stage};
//! use ndarray::Array2;
//!
//! // A week of readings from a greenhouse's soil probes.
//! let x = Array2::from_shape_fn((50_000, 3), |(i, j)| ((i * (2 * j + 3)) % 101) as f64);
//! let y = x.column(0).mapv(|a| 0.2 * a) + x.column(2).mapv(|c| 0.7 * c - 1.0);
//! let problem = Problem::new(x.view(), y.view())?;
//!
//! // Print the progress of each pass; give up after five blocks.
//! let blocks = AtomicUsize::new(0);
//! let bar = |p: &Progress| {
//!     if let (Some(done), Some(total)) = (p.rows_done, p.rows_total) {
//!         eprintln!("{} (pass {}): {:3.0}%", p.stage, p.pass, 100.0 * done as f64 / total as f64);
//!     }
//!     if blocks.fetch_add(1, Ordering::Relaxed) + 1 >= 5 { Control::Stop } else { Control::Continue }
//! };
//! match Qr::new().fit_observed(&problem, &bar) {
//!     Err(Error::Stopped { stage, rows_done, rows_total }) => {
//!         assert_eq!(stage, Stage::Factor);
//!         assert!(rows_done < rows_total);
//!     }
//!     other => panic!("expected a stop, got {other:?}"),
//! }
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## Threads
//!
//! The passes over the design run in parallel on rayon's global pool, over
//! a fixed partition of the rows (results do not depend on the thread
//! count). To bound the threads, run the fit inside your own pool:
//! `rayon::ThreadPoolBuilder::new().num_threads(2).build()?.install(|| solver.fit(&problem))`.
//! Every pass (validation, the Gram and QR passes, the residual pass) runs
//! on the pool it is called from, and the dense kernels inside each task
//! run sequentially, so the pool's size bounds the threads of the whole
//! fit; the bench example's `--threads T` works this way.
//!
//! ## Numbers at any scale
//!
//! Every solver works on the design centered by its weighted means and
//! divided, column by column, by exact powers of two (the same for the
//! target and the weights), with no clamp narrower than the range of
//! `f64`: data near `1e-310` (subnormal), `1e-150`, `1e150` or `1e308` fit
//! like the same data near 1, and inference gives the same t statistics
//! and R². Sums are formed from scaled values, so they cannot overflow.
//! Where a result itself lies beyond the range of `f64` (a residual sum of
//! squares of targets near `1e300`, a prediction at `1e310`, a column that
//! spans more than the range about its mean) the answer is a typed
//! [`Error`] (`Overflow`, `OverflowAt`, `SpreadOverflow`, `WeightRange`),
//! never an infinite or NaN number in `Ok`. The only documented infinities
//! are the t and F statistics and the log-likelihood of exact fits (see
//! [`inference`]) and undetermined cross-validation scores (see
//! [`ridge::PenaltyCurve`]); with `serde` they are written as strings and
//! read back exactly.
//!
//! ## Memory
//!
//! No solver copies the design. Passes over it fill one block of rows at a
//! time (512 KiB, or 256 rows of a design with more than 256 columns) per
//! worker thread. Passes that accumulate a `k x k` matrix per group of rows
//! (the Gram and QR passes, sandwich covariances) use at most one group per
//! `8 k` rows, and fold the groups in a fixed tree, so that about
//! `threads x (1 + log2 groups)` accumulators are alive at once. Every array sized
//! by the input is checked and reserved fallibly first: a size that cannot
//! be allocated is [`Error::TooLarge`], naming the bytes. Measured on
//! 6,000 x 2,000 (`tests/memory.rs`): inference 125 MiB, diagnostics
//! 39 MiB, the penalty path with leave-one-out 308 MiB (seven `p x p`
//! matrices of it the workspace of faer's SVD). faer's matrix products
//! also keep a per-thread workspace of twice the last-level cache, allocated
//! on a thread's first product.
//!
//! ## Features
//!
//! - `serde`: `Serialize`/`Deserialize` for [`LinearModel`], [`Fit`] and [`FitReport`]
//!   (and the [`inference`] results). Deserialised values are untrusted and
//!   checked on the way in ([`LinearModel`] for finite values, an
//!   [`Inference`] for consistent sizes and numbers in range). For exact
//!   round trips through JSON, enable `serde_json`'s `float_roundtrip`
//!   feature.
//!
//! ## What this crate is not
//!
//! Not a formula language, a data-frame library or a general optimiser: it
//! fits linear models to numeric arrays you already have.
#![warn(missing_docs)]
#![warn(clippy::unwrap_used)]
#![doc(test(attr(deny(warnings))))]

mod alloc;
#[doc(hidden)]
pub mod bench_support;
pub mod error;
pub mod gradient;
pub mod inference;
mod linalg;
pub mod model;
pub mod observe;
mod penalty;
mod prep;
pub mod problem;
pub mod ridge;
mod scaled;
#[cfg(feature = "serde")]
mod serde_float;
pub mod solver;
mod solvers;

/// The array crate of the public API, re-exported so that a program
/// builds its arrays with exactly the version the crate was compiled
/// against (`use leastline::ndarray::array;`).
pub use ndarray;

pub use error::{Error, Input, Result};
pub use gradient::{Accelerated, GradientDescent, Stochastic};
pub use inference::{
    Collinearity, CovarianceKind, Diagnostics, Estimate, GoodnessOfFit, Inference,
    InferenceOptions, InferenceRefusal, OverallTest, Predictions,
};
pub use model::LinearModel;
pub use observe::{Control, Observer, Progress, Stage, Unobserved};
pub use problem::{Problem, ProblemBuilder};
pub use ridge::{
    Criterion, HeldOutError, PenaltyCurve, Ridge, RidgeFactorization, RidgePath, RowFolds,
};
pub use solver::{Fit, FitReport, IterationReport, Solver};
pub use solvers::{Cholesky, Qr, Refinement, Svd};

/// The README's code blocks, run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;
