//! Shared support code for the integration tests (`mod common;`).
pub mod gen;
pub mod nist;
