//! Shared support code for the integration tests (`mod common;`).
pub mod exact;
pub mod gen;
pub mod nist;
