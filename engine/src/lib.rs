//! Least-squares fits as aggregate functions of the DataFusion query
//! engine: one fit per group of a `GROUP BY`, over any number of
//! partitions, in-process or on a Ballista cluster.
//!
//! Two functions (register them with [`register`] or build a session with
//! [`session_state`]):
//!
//! - `lsq_fit(y, x1, ..., xp)`: ordinary least squares of `y` on the
//!   columns, with an intercept, through [`leastline::TriangleState`]
//!   (the accuracy of QR);
//! - `lsq_fit_with('options', y, w, x1, ..., xp)`: with a weight column
//!   `w` and an options string literal (see [`FitOptions`]:
//!   `intercept=no`, `ridge=<lambda>`, `state=cross-product`).
//!
//! Arguments are any numeric type (read as `f64`). A row with a null in any
//! argument is skipped, as SQL aggregates skip nulls.
//!
//! **Result**: a struct per group with the fields
//! [`RESULT_FIELDS`]: `columns` (the design columns' names, in the order of
//! `coefficients`), `coefficients`, `intercept`, `std_errors`,
//! `residual_ss` (weighted residual sum of squares), `rows_used` (rows with
//! a non-zero weight), `rank`, `condition` (2-norm condition number of the
//! scaled, centered design), `r_squared` and `refusal`. A group that
//! cannot be fitted does not fail the query: its `refusal` says why (a
//! rank-deficient design, naming the dependent columns; a NaN or infinity,
//! naming its column; no complete row) and the fit's fields are null.
//! `std_errors` are the classical standard errors from the merged state's
//! own inference (`TriangleState::inference`, `CrossProductState::inference`);
//! null for a ridge fit (a biased estimator) and where the state refuses
//! inference (no residual degrees of freedom).
//!
//! **State**: each partial aggregate is the serialised mergeable state of
//! the core crate ([`leastline::StateData`] as JSON in a `Binary` value),
//! so partitions merge exactly as states merge in the library; a state
//! read back is validated (it may come from another machine).
//!
//! ```
//! # #[tokio::main(flavor = "current_thread")]
//! # async fn main() -> datafusion::error::Result<()> {
//! use datafusion::prelude::*;
//!
//! // Nightly kiln firings: energy used against load and kiln age.
//! let ctx = SessionContext::new_with_state(leastline_engine::session_state().build());
//! ctx.sql(
//!     "CREATE TABLE firings (kiln TEXT, energy DOUBLE, load DOUBLE, age DOUBLE) AS VALUES
//!      ('east', 41.0, 10, 1), ('east', 52.5, 14, 2), ('east', 60.1, 16, 4),
//!      ('east', 73.9, 21, 3), ('west', 30.2, 8, 5), ('west', 44.0, 12, 6),
//!      ('west', 51.7, 15, 5), ('west', 67.3, 20, 7)",
//! )
//! .await?
//! .collect()
//! .await?;
//! let batches = ctx
//!     .sql("SELECT kiln, lsq_fit(energy, load, age)['coefficients'] AS b FROM firings GROUP BY kiln")
//!     .await?
//!     .collect()
//!     .await?;
//! assert_eq!(batches.iter().map(|b| b.num_rows()).sum::<usize>(), 2);
//! # Ok(())
//! # }
//! ```

mod options;
mod output;
mod summary;
mod udaf;

use std::sync::Arc;

use datafusion::execution::session_state::SessionStateBuilder;
use datafusion::logical_expr::{AggregateUDF, Expr};
use datafusion::prelude::SessionContext;

pub use options::{FitOptions, OptionsError, StateKind};
pub use output::{result_fields, result_type, RESULT_FIELDS};
pub use summary::Outcome;
pub use udaf::LeastSquares;

/// Both fit aggregates, ready to register.
pub fn functions() -> Vec<Arc<AggregateUDF>> {
    vec![
        Arc::new(AggregateUDF::new_from_impl(LeastSquares::plain())),
        Arc::new(AggregateUDF::new_from_impl(LeastSquares::with_options())),
    ]
}

/// Registers both fit aggregates on a context.
pub fn register(ctx: &SessionContext) {
    for f in functions() {
        ctx.register_udaf(f.as_ref().clone());
    }
}

/// A session builder with DataFusion's default features and both fit
/// aggregates (added before the defaults, as the builder requires).
pub fn session_state() -> SessionStateBuilder {
    SessionStateBuilder::new()
        .with_aggregate_functions(functions())
        .with_default_features()
}

/// `lsq_fit(y, x...)` for the DataFrame API.
pub fn lsq_fit(y: Expr, columns: Vec<Expr>) -> Expr {
    let mut args = vec![y];
    args.extend(columns);
    AggregateUDF::new_from_impl(LeastSquares::plain()).call(args)
}

/// `lsq_fit_with(options, y, w, x...)` for the DataFrame API.
pub fn lsq_fit_with(options: &FitOptions, y: Expr, w: Expr, columns: Vec<Expr>) -> Expr {
    let mut args = vec![datafusion::prelude::lit(options.to_string()), y, w];
    args.extend(columns);
    AggregateUDF::new_from_impl(LeastSquares::with_options()).call(args)
}
