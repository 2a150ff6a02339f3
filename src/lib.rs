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
//! use leastline::ndarray::array;
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
//! ## Uncertainty of the coefficients
//!
//! [`Inference`] turns a fit into standard errors, t statistics, p-values
//! and confidence intervals for every coefficient and the intercept, R²,
//! the F test of all slopes, and intervals for predictions at new rows.
//! It re-reads the design once, checks that the fit is the least-squares
//! solution of this problem (it refuses a fit of other data, a penalised
//! fit or an iterative fit far from the exact solution with
//! [`Error::InferenceRefused`]), and forms every number in scaled
//! coordinates.
//!
//! ```
//! use leastline::{CovarianceKind, Inference, InferenceOptions, Problem, Qr, Solver};
//! use leastline::ndarray::array;
//!
//! // Hours a kiln takes to cool against its load (tonnes) and door gap (cm).
//! let x = array![[1.0, 0.5], [2.0, 0.4], [3.0, 0.9], [4.0, 0.7], [5.0, 1.2], [6.0, 1.0], [7.0, 1.5]];
//! let y = array![3.1, 4.0, 5.4, 6.1, 7.6, 8.2, 9.9];
//! let problem = Problem::new(x.view(), y.view())?;
//! let fit = Qr::new().fit(&problem)?;
//! let inference = Inference::new(&problem, &fit)?;
//! for estimate in inference.estimates() {
//!     assert!(estimate.lower <= estimate.value && estimate.value <= estimate.upper);
//! }
//! // Heteroskedasticity-consistent errors at the 90% level.
//! let options = InferenceOptions::new().with_covariance(CovarianceKind::Hc3).with_level(0.9);
//! let robust = Inference::with_options(&problem, &fit, options)?;
//! println!("{robust}");
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## Choosing a ridge penalty
//!
//! [`RidgePath`] decomposes the design once and then scores a whole grid
//! of penalties in closed form, by generalized cross-validation or exact
//! leave-one-out error ([`Criterion`]); [`RowFolds`] measures the held-out
//! error of any solver by k-fold splitting.
//!
//! ```
//! use leastline::{Criterion, Problem, RidgePath};
//! use leastline::ndarray::Array2;
//!
//! // Two nearly equal flow meters and a valve position on an invented pipeline.
//! let x = Array2::from_shape_fn((20, 3), |(i, j)| {
//!     let t = i as f64;
//!     match j { 0 => 10.0 + t, 1 => 10.0 + t + 0.01 * (1.3 * t).sin(), _ => (0.7 * t).cos() }
//! });
//! let y = x.column(0).mapv(|v| 2.0 * v) + x.column(2).mapv(|v| 3.0 * v);
//! let problem = Problem::new(x.view(), y.view())?;
//! let path = RidgePath::new(&problem, true)?;
//! let curve = path.curve(&path.default_grid(40)?, Criterion::GeneralizedCrossValidation)?;
//! let fit = path.fit(curve.best_penalty)?;
//! assert_eq!(fit.report.penalty, curve.best_penalty);
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## Which solver when
//!
//! | solver | use it for | cost (n rows, p columns) | condition |
//! |---|---|---|---|
//! | [`Qr`] (default) | general use; accurate | about 2 n p² | keeps cond(X) |
//! | [`Cholesky`] | large, well-conditioned designs; fastest | about n p² | squares cond(X); refuses when too few digits would survive |
//! | [`Svd`] | rank-deficient or wide designs; minimum-norm solution and numerical rank | QR plus O(p³); wide: an n x p copy and its SVD | keeps cond(X) |
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
//! ## The loss
//!
//! One loss is reported everywhere a loss appears: the **weighted mean
//! squared residual** `sum_i w_i (y_i - y_hat_i)^2 / sum_i w_i` (weights 1
//! when none were given), in the caller's units. Cross-validation fold
//! errors ([`RowFolds::held_out_error`]) are this loss on the held-out
//! rows; [`LinearModel::mean_squared_error`] is it with unit weights; the
//! gradient solvers' [`Progress::loss`], [`IterationReport::final_loss`]
//! and [`IterationReport::loss_history`], and the refined QR's losses, are
//! it on the training rows. A penalised gradient fit adds its penalty term
//! `lambda ||b||^2 / sum_i w_i` (the objective it minimises).
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
//! - `serde`: `Serialize`/`Deserialize` for [`LinearModel`], [`Fit`] and [`FitReport`],
//!   the [`inference`] results, and every solver's settings. Saved forms
//!   are plain and documented: a model is `{"format": "leastline-model",
//!   "version": 1, "intercept": ..., "coefficients": [{"name": ..., "value":
//!   ...}, ...]}` (see [`LinearModel`]), a fit and an inference carry their
//!   own format tag and version, arrays are plain lists (a matrix a list of
//!   rows), and every `f64` is a string holding the shortest decimal that
//!   `str::parse::<f64>` reads back to the same bits, so a round trip is
//!   exact whatever JSON reader is used (plain `serde_json` misreads about
//!   three in ten of the numbers it writes itself by one unit in the last
//!   place). Deserialised values are untrusted and checked on the way in
//!   (finite values, consistent sizes, names, settings in range).
//!
//! Saved settings reproduce a fit bit for bit:
//!
//! ```
//! # #[cfg(feature = "serde")] {
//! use leastline::{Problem, Ridge, Solver};
//! use ndarray::array;
//!
//! // Monthly visitors of a (made-up) museum against two campaign budgets.
//! let x = array![[1.0, 0.5], [2.0, 0.7], [3.0, 0.2], [4.0, 0.9], [5.0, 0.4]];
//! let y = array![10.3, 12.9, 13.1, 17.2, 16.0];
//! let problem = Problem::builder(x.view(), y.view()).with_names(["posters", "radio"]).build()?;
//! let solver = Ridge::new(0.1);
//! let settings = serde_json::to_string(&solver).expect("settings are always written");
//! let loaded: Ridge = serde_json::from_str(&settings).expect("written by this crate");
//! assert_eq!(loaded.fit(&problem)?, solver.fit(&problem)?);
//! // A penalty out of range is refused when the settings are read.
//! assert!(serde_json::from_str::<Ridge>(&settings.replace("\"0.1\"", "\"-1\"")).is_err());
//! # }
//! # Ok::<(), leastline::Error>(())
//! ```
//!
//! ## What this crate is not
//!
//! Not a formula language, a data-frame library or a general optimiser: it
//! fits linear models to numeric arrays you already have.
#![warn(missing_docs)]
#![warn(clippy::unwrap_used)]
#![doc(test(attr(deny(warnings))))]

/// Serde for a settings type (feature `serde`): written field by field
/// (derive `Serialize` on the type), read through a shadow struct of the
/// same fields and checked with the type's `check()` before it exists, so
/// that a saved setting out of range is refused at load time with the
/// message of the matching [`Error`].
#[cfg(feature = "serde")]
macro_rules! checked_settings {
    ($ty:ident { $($(#[$m:meta])* $f:ident : $t:ty),* $(,)? }) => {
        const _: () = {
            #[derive(serde::Deserialize)]
            #[serde(deny_unknown_fields)]
            struct Shadow { $($(#[$m])* $f: $t),* }
            impl<'de> serde::Deserialize<'de> for $ty {
                fn deserialize<D: serde::Deserializer<'de>>(
                    d: D,
                ) -> std::result::Result<Self, D::Error> {
                    let s = <Shadow as serde::Deserialize>::deserialize(d)?;
                    let v = $ty { $($f: s.$f),* };
                    v.check().map_err(<D::Error as serde::de::Error>::custom)?;
                    Ok(v)
                }
            }
        };
    };
}
#[cfg(not(feature = "serde"))]
macro_rules! checked_settings {
    ($($t:tt)*) => {};
}

mod alloc;
#[cfg(feature = "bench-support")]
#[doc(hidden)]
pub mod bench_support;
pub mod error;
mod fmt;
pub mod gradient;
pub mod inference;
mod linalg;
mod many;
pub mod model;
pub mod observe;
mod passes;
mod penalty;
mod prep;
pub mod problem;
pub mod ridge;
mod scaled;
#[cfg(feature = "serde")]
mod serde_float;
mod settings;
pub mod solver;
mod solvers;
pub mod state;
mod vocabulary;

/// The array crate of the public API, re-exported so that a program
/// builds its arrays with exactly the version the crate was compiled
/// against (`use leastline::ndarray::array;`).
pub use ndarray;

pub use linalg::backend::{backend, set_backend, Backend};

pub use error::{Error, Input, Result};
pub use gradient::{Accelerated, GradientDescent, Stochastic};
pub use inference::{
    Collinearity, CovarianceKind, Diagnostics, Estimate, GoodnessOfFit, Inference,
    InferenceOptions, InferenceRefusal, OverallTest, Predictions,
};
pub use many::{ManyTargets, ManyTargetsBuilder, SharedSolver};
pub use model::LinearModel;
pub use observe::{Control, Observer, Progress, Stage, Unobserved};
pub use problem::{Problem, ProblemBuilder};
pub use ridge::{
    Criterion, HeldOutError, PenaltyCurve, Ridge, RidgeFactorization, RidgePath, RowFolds,
    StateRidgePath,
};
pub use solver::{Fit, FitReport, IterationReport, Solver};
pub use solvers::{Cholesky, Qr, Refinement, Svd};
pub use state::{
    BlockDiagnostics, CrossProductState, FitState, ManyTargetsPass, SecondPass, StateLayout,
    TriangleState,
};
#[cfg(feature = "serde")]
pub use state::{StateData, STATE_FORMAT, STATE_VERSION};

/// The README's code blocks, run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctests;
