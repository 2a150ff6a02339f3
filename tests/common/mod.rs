//! Shared support code for the integration tests (`mod common;`).
pub mod nist;
pub mod exact;
