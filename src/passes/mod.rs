//! Passes over a problem's rows: everything that reads the design through
//! [`crate::Problem`] and [`crate::prep::fill_block`], reports its blocks to
//! an observer's [`crate::observe::Watch`], and hands the arithmetic to the
//! kernels of [`crate::linalg`] (which never see a problem).
//!
//! Every pass uses the fixed row-block partition of
//! [`crate::linalg::block_groups`] and folds partial results in a fixed
//! tree or in block order, so results do not depend on the thread count.

pub(crate) mod dual;
pub(crate) mod extended;
pub(crate) mod gradient;
pub(crate) mod gram;
pub(crate) mod leverage;
pub(crate) mod loo;
pub(crate) mod qr;
pub(crate) mod residuals;
