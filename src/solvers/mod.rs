//! The closed-form least-squares solvers.

mod cholesky;
mod qr;
mod refine;
pub(crate) mod svd;

pub use cholesky::Cholesky;
pub use qr::Qr;
pub use refine::Refinement;
pub use svd::Svd;

pub(crate) use crate::linalg::householder::combinations;
pub(crate) use crate::prep::dependent_columns;
