//! Inputs that used to panic or abort: sizes that cannot be allocated are
//! typed errors naming the bytes, and anything deserialised is checked on
//! the way in. With the `serde` feature, every result round-trips through
//! JSON exactly, the documented infinities included.

use leastline::ridge::{Ridge, RidgeFactorization, RidgePath};
use leastline::{Error, Problem, Solver};
use ndarray::{Array1, Array2};

/// Item 11: the dual ridge method on a tall design would form an `n x n`
/// system (32 TB at two million rows): refused with the bytes it needs.
#[test]
fn dual_ridge_on_tall_designs_is_refused_with_the_bytes() {
    for n in [2_000_000usize, 20_000] {
        let x = Array2::from_shape_fn((n, 2), |(i, j)| ((i * (j + 3)) % 17) as f64);
        let y = Array1::from_shape_fn(n, |i| (i % 13) as f64);
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let dual = Ridge::new(1.0).with_factorization(RidgeFactorization::Dual);
        match dual.fit(&problem) {
            Err(Error::TooLarge { bytes, .. }) => assert_eq!(bytes, 8 * (n as u128).pow(2)),
            other => panic!("{n} rows: expected TooLarge, got {other:?}"),
        }
        // The other methods fit it.
        assert!(Ridge::new(1.0).fit(&problem).is_ok());
    }
    // On a wide design the dual is the right tool and fits.
    let x = Array2::from_shape_fn((20, 300), |(i, j)| ((i * 31 + j * 17) % 23) as f64);
    let y = Array1::from_shape_fn(20, |i| i as f64);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    assert!(Ridge::new(1.0)
        .with_factorization(RidgeFactorization::Dual)
        .fit(&problem)
        .is_ok());
}

/// Item 11: a primal ridge method on a design with a million columns and
/// four rows would form a `p x p` matrix of 8 TB: a typed error.
#[test]
fn primal_ridge_on_very_wide_designs_is_refused_with_the_bytes() {
    let p = 1 << 20;
    let x = Array2::from_shape_fn((4, p), |(i, j)| ((i + j) % 7) as f64);
    let y = Array1::from_vec(vec![1.0, 2.0, 4.0, 3.0]);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    for method in [
        RidgeFactorization::Cholesky,
        RidgeFactorization::AugmentedQr,
    ] {
        match (Ridge::new(1.0).with_factorization(method)).fit(&problem) {
            Err(Error::TooLarge { bytes, .. }) => assert!(bytes > 8 * (p as u128).pow(2)),
            other => panic!("{method:?}: expected TooLarge, got {other:?}"),
        }
    }
}

/// Item 11: a default grid of more penalties than can be allocated is a
/// typed error, not a panic.
#[test]
fn huge_default_grids_are_typed_errors() {
    let x = Array2::from_shape_fn((10, 2), |(i, j)| ((i * (j + 2)) % 7) as f64);
    let y = Array1::from_shape_fn(10, |i| i as f64);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let path = RidgePath::new(&problem, false).unwrap();
    for count in [usize::MAX, usize::MAX / 8, 1 << 60] {
        let got = std::panic::catch_unwind(|| path.default_grid(count));
        match got {
            Ok(Err(Error::TooLarge { what, .. })) => assert_eq!(what, "penalty grid"),
            Ok(other) => panic!("{count}: {other:?}"),
            Err(_) => panic!("{count}: panicked"),
        }
    }
    let grid = path.default_grid(3).unwrap();
    assert_eq!(grid.len(), 3);
    assert!(grid[0] < grid[1] && grid[1] < grid[2]);
}

#[cfg(feature = "serde")]
mod serde_checks {
    use super::*;
    use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
    use leastline::ridge::Criterion;
    use leastline::{Accelerated, Fit, LinearModel, Qr, RowFolds};
    use serde_json::Value;

    fn data() -> (Array2<f64>, Array1<f64>) {
        let x = Array2::from_shape_fn((12, 2), |(i, j)| ((i * (2 * j + 3)) % 11) as f64);
        let y = Array1::from_shape_fn(12, |i| {
            2.0 * x[(i, 0)] - x[(i, 1)] + ((i * 5) % 3) as f64 * 0.25
        });
        (x, y)
    }

    fn round_trip<T>(value: &T) -> T
    where
        T: serde::Serialize + serde::de::DeserializeOwned,
    {
        let text = serde_json::to_string(value).unwrap();
        serde_json::from_str(&text).unwrap_or_else(|e| panic!("{e}: {text}"))
    }

    /// Item 11: a deserialised inference whose private arrays have
    /// inconsistent sizes (or numbers out of range) is refused on the way
    /// in; before, `predict` and `diagnostics` panicked on it.
    #[test]
    fn deserialised_inference_is_validated() {
        let (x, y) = data();
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let inf = Qr::new()
            .fit(&problem)
            .unwrap()
            .inference(&problem)
            .unwrap();
        let good: Value = serde_json::to_value(&inf).unwrap();
        let back: Inference = serde_json::from_value(good.clone()).unwrap();
        assert_eq!(back, inf);
        assert!(back.predict(x.view()).is_ok());
        type Edit = fn(&mut Value);
        let edits: [(&str, Edit); 6] = [
            ("short means", |v| {
                v["basis"]["means"] = serde_json::json!([1.0]);
            }),
            ("square factor of the wrong size", |v| {
                v["basis"]["r"] = serde_json::json!([["1"]]);
            }),
            ("scale not a power of two", |v| {
                v["basis"]["scale"][0] = serde_json::json!(3.0);
            }),
            ("a covariance of the wrong size", |v| {
                v["covariance"] = serde_json::json!([["1", "0"], ["0", "1"]]);
            }),
            ("a missing slope", |v| {
                let c = v["coefficients"].as_array_mut().unwrap();
                c.pop();
            }),
            ("zero pivot", |v| {
                v["basis"]["r"][0][0] = serde_json::json!("0");
            }),
        ];
        for (what, edit) in edits {
            let mut bad = good.clone();
            edit(&mut bad);
            let parsed = serde_json::from_value::<Inference>(bad);
            assert!(parsed.is_err(), "{what}: accepted");
        }
    }

    /// Item 12: every result round-trips exactly, the documented infinite
    /// values of an exact fit and of undetermined scores included.
    #[test]
    fn results_round_trip_exactly() {
        let (x, y) = data();
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let fit = Qr::new().fit(&problem).unwrap();
        assert_eq!(round_trip(&fit), fit);
        let iterative = Accelerated::new().fit(&problem).unwrap();
        assert_eq!(round_trip(&iterative), iterative);
        for kind in [CovarianceKind::Classical, CovarianceKind::Hc3] {
            let inf = Inference::with_options(
                &problem,
                &fit,
                InferenceOptions::new().with_covariance(kind),
            )
            .unwrap();
            assert_eq!(round_trip(&inf), inf);
            let at = inf.predict(x.view()).unwrap();
            assert_eq!(round_trip(&at), at);
            let d = inf.diagnostics(&problem).unwrap();
            assert_eq!(round_trip(&d), d);
        }
        let cv = RowFolds::new()
            .with_folds(3)
            .with_seed(1)
            .held_out_error(&Qr::new(), &problem)
            .unwrap();
        assert_eq!(round_trip(&cv), cv);
        // An exact fit: t = +-inf, log L = +inf, AIC and BIC -inf, F = +inf.
        // (16 rows of integers: the means are exact, and the refined fit's
        // residuals are exactly zero.)
        let xe = Array2::from_shape_fn((16, 2), |(i, j)| ((i * (2 * j + 3)) % 11) as f64);
        let exact_y = xe.column(0).mapv(|v| 3.0 * v) + xe.column(1).mapv(|v| v - 1.0);
        let exact = Problem::new(xe.view(), exact_y.view()).unwrap();
        let inf = Qr::refined()
            .fit(&exact)
            .unwrap()
            .inference(&exact)
            .unwrap();
        assert!(inf.coefficients[0].t.is_infinite());
        assert_eq!(inf.goodness.log_likelihood, f64::INFINITY);
        let text = serde_json::to_string(&inf).unwrap();
        // Written as strings (a number written as null could not be read
        // back into an f64: the exact round trip below would fail).
        assert!(text.contains("\"t\":\"inf\""), "{text}");
        assert!(text.contains("\"log_likelihood\":\"inf\""), "{text}");
        let back: Inference = serde_json::from_str(&text).unwrap();
        assert_eq!(back, inf);
        // A penalty curve with undetermined (infinite) scores.
        let path = RidgePath::new(&exact, false).unwrap();
        let curve = path
            .curve(&[0.0, 1.0, 10.0], Criterion::LeaveOneOut)
            .unwrap();
        assert_eq!(round_trip(&curve), curve);
        // A model round-trips; a deserialised model is checked.
        let model = LinearModel::new(ndarray::array![1.5, -2.0], 0.25).unwrap();
        assert_eq!(round_trip(&model), model);
        let bad = r#"{"format":"leastline-model","version":1,"intercept":"0","coefficients":[{"name":"a","value":"1"},{"name":"b","value":"inf"}]}"#;
        assert!(serde_json::from_str::<LinearModel>(bad).is_err());
        let fit_back: Fit = round_trip(&fit);
        assert!(fit_back.inference(&problem).is_ok());
    }
}
