//! With the `serde` feature, fitted models and reports survive a JSON round trip.
#![cfg(feature = "serde")]

use leastline::{Fit, Problem, Qr, Solver};
use ndarray::array;

#[test]
fn fit_round_trips_through_json() {
    let x = array![[1.0, 0.3], [2.0, 0.1], [3.0, 0.8], [4.0, 0.4], [5.0, 0.9]];
    let y = array![1.2, 2.1, 3.3, 3.9, 5.2];
    let fit = Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap();
    let text = serde_json::to_string(&fit).unwrap();
    let back: Fit = serde_json::from_str(&text).unwrap();
    assert_eq!(back, fit);
    assert!(text.contains("\"solver\":\"qr\""));
}
