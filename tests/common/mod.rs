//! Shared support code for the integration tests (`mod common;`).
pub mod exact;
pub mod gen;
pub mod nist;

/// Property-test case count: `PROPTEST_CASES` when set (a long soak runs
/// with, say, `PROPTEST_CASES=20000`), else `default`, the count the
/// default CI run affords.
#[allow(dead_code)]
pub fn cases(default: u32) -> u32 {
    std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// `2^e`, exact for every exponent of a finite `f64` (subnormal included).
#[allow(dead_code)]
pub fn p2(e: i32) -> f64 {
    if e >= -1022 {
        2f64.powi(e)
    } else {
        2f64.powi(-1022) * 2f64.powi(e + 1022)
    }
}
