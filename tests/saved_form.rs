//! The documented saved forms (feature `serde`): exact round trips of
//! every finite `f64` through `serde_json::to_string` / `from_str`, a JSON
//! reader's own float parsing never involved (every number is a string),
//! no array crate's layout in the output, typed refusals of bad input, and
//! solver settings that reproduce a fit bit for bit.
#![cfg(feature = "serde")]

mod common;

use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::ridge::{Ridge, RidgeFactorization, RowFolds};
use leastline::{
    Accelerated, Cholesky, Error, Fit, GradientDescent, LinearModel, Problem, Qr, Refinement,
    Solver, Stochastic, Svd,
};
use ndarray::{Array1, Array2};
use proptest::prelude::*;
use serde_json::Value;

/// A finite `f64` from any bit pattern (NaN and infinite patterns are
/// mapped to finite ones by clearing one exponent bit).
fn finite(bits: u64) -> f64 {
    let v = f64::from_bits(bits);
    if v.is_finite() {
        v
    } else {
        f64::from_bits(bits & !(1 << 62))
    }
}

fn same_bits(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
}

/// Every leaf of a saved form that is a JSON number, with its path: only
/// format versions and counts may be numbers.
fn numbers(v: &Value, path: &str, out: &mut Vec<String>) {
    match v {
        Value::Number(_) => out.push(path.to_string()),
        Value::Array(items) => {
            for (i, x) in items.iter().enumerate() {
                numbers(x, &format!("{path}[{i}]"), out);
            }
        }
        Value::Object(map) => {
            for (k, x) in map {
                numbers(x, &format!("{path}.{k}"), out);
            }
        }
        _ => {}
    }
}

fn data() -> (Array2<f64>, Array1<f64>) {
    // Daily output of a hypothetical orchard press against two inputs.
    let x = Array2::from_shape_fn((14, 2), |(i, j)| {
        ((i * (2 * j + 3)) % 11) as f64 + 0.5 * j as f64
    });
    let y = Array1::from_shape_fn(14, |i| {
        1.5 * x[(i, 0)] - 0.75 * x[(i, 1)] + ((i * 7) % 5) as f64 * 0.125
    });
    (x, y)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(512)))]

    /// A model of random finite bit patterns comes back bit for bit, and
    /// its saved form holds no JSON number but the version.
    #[test]
    fn models_of_random_bit_patterns_round_trip_exactly(
        bits in prop::collection::vec(any::<u64>(), 1..8),
        b0 in any::<u64>(),
    ) {
        let values: Vec<f64> = bits.iter().map(|&b| finite(b)).collect();
        let model = LinearModel::new(Array1::from(values.clone()), finite(b0)).unwrap();
        let text = serde_json::to_string(&model).unwrap();
        let back: LinearModel = serde_json::from_str(&text).unwrap();
        prop_assert!(same_bits(back.coefficients().as_slice().unwrap(), &values), "{}", text);
        prop_assert_eq!(back.intercept().to_bits(), finite(b0).to_bits());
        prop_assert_eq!(back.names(), model.names());
        let mut found = Vec::new();
        numbers(&serde_json::from_str(&text).unwrap(), "", &mut found);
        prop_assert_eq!(found, vec![".version".to_string()]);
    }

    /// A fit and an inference whose numbers are replaced by random finite
    /// bit patterns come back bit for bit.
    #[test]
    fn reports_of_random_bit_patterns_round_trip_exactly(
        bits in prop::collection::vec(any::<u64>(), 12),
    ) {
        let (x, y) = data();
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let v: Vec<f64> = bits.iter().map(|&b| finite(b)).collect();
        let fit = Qr::new().fit(&problem).unwrap();
        let mut report = fit.report.clone();
        report.residual_sum_of_squares = v[0].abs();
        report.penalty = v[1].abs();
        report.condition = Some(v[2].abs());
        let changed = Fit {
            model: LinearModel::new(Array1::from(vec![v[3], v[4]]), v[5]).unwrap(),
            report,
        };
        let text = serde_json::to_string(&changed).unwrap();
        let back: Fit = serde_json::from_str(&text).unwrap();
        prop_assert_eq!(back.report.residual_sum_of_squares.to_bits(), v[0].abs().to_bits());
        prop_assert_eq!(back.report.penalty.to_bits(), v[1].abs().to_bits());
        prop_assert_eq!(back.report.condition.map(f64::to_bits), Some(v[2].abs().to_bits()));
        prop_assert!(same_bits(back.model.coefficients().as_slice().unwrap(), &v[3..5]));
        prop_assert_eq!(back.model.intercept().to_bits(), v[5].to_bits());

        let mut inf = fit.inference(&problem).unwrap();
        inf.residual_variance = v[6];
        inf.residual_sd = v[7];
        inf.fit_distance = v[8];
        inf.coefficients[0].value = v[9];
        inf.coefficients[1].lower = v[10];
        inf.goodness.r_squared = v[11];
        let text = serde_json::to_string(&inf).unwrap();
        let back: Inference = serde_json::from_str(&text).unwrap();
        let got = [
            back.residual_variance, back.residual_sd, back.fit_distance,
            back.coefficients[0].value, back.coefficients[1].lower, back.goodness.r_squared,
        ];
        prop_assert!(same_bits(&got, &v[6..12]));
        prop_assert_eq!(back, inf);
    }
}

/// Values that a JSON reader's fast float parsing is known to misread by
/// one unit in the last place (found by the measurement described in the
/// crate's serde notes), and the extremes of the range, come back exactly.
#[test]
fn hard_values_round_trip_exactly() {
    let hard = [
        1.0715660391465826e-75,
        f64::MAX,
        f64::MIN_POSITIVE,
        f64::from_bits(1), // smallest subnormal
        -0.0,
        0.1 + 0.2,
        2.0_f64.powi(-1074 + 52),
        9007199254740993.0, // 2^53 + 1 rounds to 2^53
    ];
    let model = LinearModel::new(Array1::from(hard.to_vec()), -f64::MAX).unwrap();
    let text = serde_json::to_string(&model).unwrap();
    assert!(text.contains(r#""value":"-0""#), "{text}");
    let back: LinearModel = serde_json::from_str(&text).unwrap();
    assert!(same_bits(back.coefficients().as_slice().unwrap(), &hard));
    assert_eq!(back.intercept(), -f64::MAX);
}

/// No `{"v":1,"dim":...}` layout anywhere: vectors and matrices are plain
/// lists, a matrix a list of rows.
#[test]
fn arrays_are_plain_lists() {
    let (x, y) = data();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inf = Inference::with_options(
        &problem,
        &fit,
        InferenceOptions::new().with_covariance(CovarianceKind::Hc3),
    )
    .unwrap();
    let diagnostics = inf.diagnostics(&problem).unwrap();
    let predictions = inf.predict(x.view()).unwrap();
    for text in [
        serde_json::to_string(&fit).unwrap(),
        serde_json::to_string(&inf).unwrap(),
        serde_json::to_string(&diagnostics).unwrap(),
        serde_json::to_string(&predictions).unwrap(),
    ] {
        assert!(
            !text.contains("\"dim\"") && !text.contains("\"v\":"),
            "{text}"
        );
    }
    let v: Value = serde_json::to_value(&inf).unwrap();
    assert_eq!(v["format"], "leastline-inference");
    assert_eq!(v["version"], 1);
    let cov = v["covariance"].as_array().unwrap();
    assert_eq!(cov.len(), 3);
    assert!(cov.iter().all(|row| row.as_array().unwrap().len() == 3));
    // The covariance's (0, 1) entry is the row-major one.
    let entry: f64 = cov[0][1].as_str().unwrap().parse().unwrap();
    assert_eq!(entry.to_bits(), inf.covariance[(0, 1)].to_bits());
    let back: Inference = serde_json::from_value(v).unwrap();
    assert_eq!(back, inf);
    let v: Value = serde_json::to_value(&fit).unwrap();
    assert_eq!(v["format"], "leastline-fit");
    assert_eq!(v["model"]["format"], "leastline-model");
}

fn message(e: serde_json::Error) -> String {
    e.to_string()
}

/// Bad saved models and fits: another tag or version, names that repeat,
/// a non-finite value, a report with NaN; each refusal carries the
/// message of the matching typed error.
#[test]
fn bad_saved_forms_are_refused_with_the_error_message() {
    let model = LinearModel::new(Array1::from(vec![1.0, 2.0]), 0.5)
        .unwrap()
        .with_names(["load", "speed"])
        .unwrap();
    let good = serde_json::to_value(&model).unwrap();
    type Edit = fn(&mut Value);
    let cases: [(Edit, String); 6] = [
        (
            |v| v["version"] = 2.into(),
            Error::SavedFormat {
                what: "model",
                expected: "leastline-model",
                supported: 1,
                found: "leastline-model".into(),
                version: 2,
            }
            .to_string(),
        ),
        (
            |v| v["format"] = "orchard".into(),
            Error::SavedFormat {
                what: "model",
                expected: "leastline-model",
                supported: 1,
                found: "orchard".into(),
                version: 1,
            }
            .to_string(),
        ),
        (
            |v| v["coefficients"][1]["name"] = "load".into(),
            Error::InvalidName {
                position: 1,
                name: "load".into(),
                reason: "names must be unique and this one repeats an earlier name",
            }
            .to_string(),
        ),
        (
            |v| v["coefficients"][0]["name"] = "".into(),
            "column name \"\" at position 0".to_string(),
        ),
        (
            |v| v["intercept"] = "NaN".into(),
            "non-finite value NaN in the model coefficients at row 2".to_string(),
        ),
        (
            |v| v["coefficients"][0]["value"] = "1e400".into(),
            "invalid value: string \"1e400\"".to_string(),
        ),
    ];
    for (edit, expected) in cases {
        let mut bad = good.clone();
        edit(&mut bad);
        let got = message(serde_json::from_value::<LinearModel>(bad.clone()).unwrap_err());
        assert!(got.contains(&expected), "{bad}: {got} lacks {expected}");
    }
    // A saved fit whose report holds NaN, or whose model has another
    // number of columns than its report.
    let (x, y) = data();
    let fit = Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap();
    let mut bad = serde_json::to_value(&fit).unwrap();
    bad["report"]["residual_sum_of_squares"] = "NaN".into();
    let got = message(serde_json::from_value::<Fit>(bad).unwrap_err());
    assert!(got.contains("report.residual_sum_of_squares"), "{got}");
    let mut bad = serde_json::to_value(&fit).unwrap();
    bad["model"]["coefficients"].as_array_mut().unwrap().pop();
    let got = message(serde_json::from_value::<Fit>(bad).unwrap_err());
    assert!(
        got.contains(
            &Error::ColumnCountMismatch {
                expected: 2,
                found: 1
            }
            .to_string()
        ),
        "{got}"
    );
    let mut bad = serde_json::to_value(&fit).unwrap();
    bad["version"] = 7.into();
    assert!(message(serde_json::from_value::<Fit>(bad).unwrap_err()).contains("version 7"));
    // A hand-written model with plain JSON numbers is read.
    let hand = r#"{"format":"leastline-model","version":1,"intercept":2,"coefficients":[{"name":"load","value":-0.5}]}"#;
    let read: LinearModel = serde_json::from_str(hand).unwrap();
    assert_eq!(read.coefficients()[0], -0.5);
    assert_eq!(read.intercept(), 2.0);
}

fn round_trip<T>(value: &T) -> T
where
    T: serde::Serialize + serde::de::DeserializeOwned,
{
    let text = serde_json::to_string(value).unwrap();
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{e}: {text}"))
}

fn identical(a: &Fit, b: &Fit) -> bool {
    let (ca, cb) = (a.model.coefficients(), b.model.coefficients());
    same_bits(ca.as_slice().unwrap(), cb.as_slice().unwrap())
        && a.model.intercept().to_bits() == b.model.intercept().to_bits()
        && a.report == b.report
}

/// Settings saved and loaded reproduce a fit bit for bit; every settings
/// type comes back equal, with its awkward values (`4 eps`, `0.1`) exact.
#[test]
fn saved_settings_reproduce_the_fit_bit_for_bit() {
    let (x, y) = data();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let start = LinearModel::new(Array1::from(vec![1.0, -0.5]), 0.0).unwrap();
    fn twice<S>(s: &S, p: &Problem<'_>) -> (Fit, Fit)
    where
        S: Solver + PartialEq + std::fmt::Debug + serde::Serialize + serde::de::DeserializeOwned,
    {
        let loaded = round_trip(s);
        assert_eq!(&loaded, s);
        (s.fit(p).unwrap(), loaded.fit(p).unwrap())
    }
    let p = &problem;
    let runs = [
        twice(&Qr::new().with_rank_tolerance(1e-11), p),
        twice(
            &Qr::new().with_refinement(
                Refinement::new()
                    .with_max_iterations(3)
                    .with_tolerance(4.0 * f64::EPSILON),
            ),
            p,
        ),
        twice(&Cholesky::new().with_min_digits(6.5), p),
        twice(&Svd::new().with_rank_tolerance(0.1 + 0.2), p),
        twice(
            &Ridge::new(0.1)
                .with_standardize(true)
                .with_factorization(RidgeFactorization::AugmentedQr),
            p,
        ),
        twice(
            &GradientDescent::new()
                .with_tolerance(1e-9)
                .with_max_iterations(500)
                .with_penalty(0.3)
                .with_start(start.clone())
                .with_history_stride(7),
            p,
        ),
        twice(
            &Accelerated::new().with_step(0.01).with_max_iterations(300),
            p,
        ),
        twice(
            &Stochastic::new()
                .with_batch_size(3)
                .with_seed(11)
                .with_decay(0.3)
                .with_max_iterations(40)
                .with_average(false),
            p,
        ),
    ];
    for (k, (before, after)) in runs.iter().enumerate() {
        assert!(
            identical(before, after),
            "solver {k}: {before:?} != {after:?}"
        );
    }
    // The default epoch limit is unset (the rule of
    // `Stochastic::epoch_limit`) and stays unset through a save; a saved
    // number is read as that limit.
    let sgd = Stochastic::new().with_batch_size(3);
    assert_eq!(round_trip(&sgd).max_iterations(), None);
    let mut v = serde_json::to_value(&sgd).unwrap();
    assert!(v["max_iterations"].is_null());
    v["max_iterations"] = 40.into();
    let loaded: Stochastic = serde_json::from_value(v).unwrap();
    assert_eq!(loaded, sgd.with_max_iterations(40));
    let folds = RowFolds::new().with_folds(4).with_seed(9);
    assert_eq!(round_trip(&folds), folds);
    let a = folds.held_out_error(&Qr::new(), &problem).unwrap();
    let b = round_trip(&folds)
        .held_out_error(&Qr::new(), &problem)
        .unwrap();
    assert_eq!(a, b);
    let options = InferenceOptions::new()
        .with_covariance(CovarianceKind::Hc1)
        .with_level(0.9);
    assert_eq!(round_trip(&options), options);
    let fit = Qr::new().fit(&problem).unwrap();
    assert_eq!(
        Inference::with_options(&problem, &fit, options).unwrap(),
        Inference::with_options(&problem, &fit, round_trip(&options)).unwrap()
    );
}

/// Settings out of range are refused at load time, with the message of
/// the error a fit would give.
#[test]
fn bad_saved_settings_are_refused_at_load_time() {
    let invalid = |name: &'static str, value: f64, reason: &'static str| {
        Error::InvalidParameter {
            name,
            value,
            reason,
        }
        .to_string()
    };
    let check = |text: String, expected: String| {
        let got = text;
        assert!(got.contains(&expected), "{got} lacks {expected}");
    };
    let mut v = serde_json::to_value(GradientDescent::new()).unwrap();
    v["tolerance"] = "-1e-6".into();
    check(
        serde_json::from_value::<GradientDescent>(v)
            .unwrap_err()
            .to_string(),
        invalid("tolerance", -1e-6, "must be finite and >= 0"),
    );
    let mut v = serde_json::to_value(Stochastic::new()).unwrap();
    v["batch_size"] = 0.into();
    check(
        serde_json::from_value::<Stochastic>(v)
            .unwrap_err()
            .to_string(),
        invalid("batch_size", 0.0, "must be at least 1"),
    );
    let mut v = serde_json::to_value(Ridge::new(1.0)).unwrap();
    v["penalty"] = "NaN".into();
    check(
        serde_json::from_value::<Ridge>(v).unwrap_err().to_string(),
        invalid("penalty", f64::NAN, "must be finite and >= 0"),
    );
    let mut v = serde_json::to_value(Accelerated::new()).unwrap();
    v["step"] = "0".into();
    check(
        serde_json::from_value::<Accelerated>(v)
            .unwrap_err()
            .to_string(),
        invalid("step", 0.0, "must be finite and > 0"),
    );
    let mut v = serde_json::to_value(Qr::refined()).unwrap();
    v["refinement"]["tolerance"] = "-inf".into();
    check(
        serde_json::from_value::<Qr>(v).unwrap_err().to_string(),
        invalid(
            "refinement.tolerance",
            f64::NEG_INFINITY,
            "must be finite and >= 0",
        ),
    );
    let mut v = serde_json::to_value(RowFolds::new()).unwrap();
    v["folds"] = 1.into();
    check(
        serde_json::from_value::<RowFolds>(v)
            .unwrap_err()
            .to_string(),
        invalid("folds", 1.0, "must be at least 2"),
    );
    let mut v = serde_json::to_value(InferenceOptions::new()).unwrap();
    v["level"] = "1".into();
    check(
        serde_json::from_value::<InferenceOptions>(v)
            .unwrap_err()
            .to_string(),
        invalid("level", 1.0, "must lie strictly between 0 and 1"),
    );
    let mut v = serde_json::to_value(Cholesky::new()).unwrap();
    v["min_digits"] = "inf".into();
    check(
        serde_json::from_value::<Cholesky>(v)
            .unwrap_err()
            .to_string(),
        invalid("min_digits", f64::INFINITY, "must be finite"),
    );
    let mut v = serde_json::to_value(Svd::new()).unwrap();
    v["rank_tolerance"] = "-0.5".into();
    check(
        serde_json::from_value::<Svd>(v).unwrap_err().to_string(),
        invalid("rank_tolerance", -0.5, "must be finite and >= 0"),
    );
    // An unknown field (a typo) is refused rather than ignored.
    let mut v = serde_json::to_value(Ridge::new(1.0)).unwrap();
    v["penaltty"] = "2".into();
    assert!(serde_json::from_value::<Ridge>(v).is_err());
}

/// Column names: checked when the problem is built (count, empty,
/// repeated, each naming what was wrong and where), then carried by every
/// fit's model, the inference and its summary, and the saved model.
#[test]
fn names_travel_from_the_problem_to_fits_inference_and_saved_models() {
    let (x, y) = data();
    let build = |names: &[&str]| {
        Problem::builder(x.view(), y.view())
            .with_names(names.iter().copied())
            .build()
    };
    assert_eq!(
        build(&["a"]).unwrap_err(),
        Error::NameCountMismatch {
            expected: 2,
            found: 1
        }
    );
    match build(&["a", " "]).unwrap_err() {
        Error::InvalidName { position, name, .. } => {
            assert_eq!((position, name.as_str()), (1, " "))
        }
        other => panic!("{other:?}"),
    }
    match build(&["pulp", "pulp"]).unwrap_err() {
        Error::InvalidName { position, .. } => assert_eq!(position, 1),
        other => panic!("{other:?}"),
    }
    let names = ["pulp", "pressure"];
    let problem = build(&names).unwrap();
    assert_eq!(problem.names().unwrap(), names);
    let fits = [
        Qr::new().fit(&problem).unwrap(),
        Qr::refined().fit(&problem).unwrap(),
        Cholesky::new().fit(&problem).unwrap(),
        Svd::new().fit(&problem).unwrap(),
        Ridge::new(0.5).fit(&problem).unwrap(),
        Ridge::new(0.5)
            .with_factorization(RidgeFactorization::Dual)
            .fit(&problem)
            .unwrap(),
        GradientDescent::new().fit(&problem).unwrap(),
        Accelerated::new().fit(&problem).unwrap(),
        Stochastic::new()
            .with_max_iterations(5)
            .fit(&problem)
            .unwrap(),
    ];
    for fit in &fits {
        assert_eq!(fit.model.names(), names, "{}", fit.report.solver);
    }
    let inf = fits[0].inference(&problem).unwrap();
    assert_eq!(inf.names, names);
    let text = inf.to_string();
    assert!(text.contains("pulp") && text.contains("pressure"), "{text}");
    let saved = serde_json::to_value(&fits[0].model).unwrap();
    assert_eq!(saved["coefficients"][1]["name"], "pressure");
    // Without names: x0, x1, ...; an override still works.
    let plain = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&plain).unwrap();
    assert_eq!(fit.model.names(), ["x0", "x1"]);
    let inf = fit
        .inference(&plain)
        .unwrap()
        .with_names(["a", "b"])
        .unwrap();
    assert_eq!(inf.names, ["a", "b"]);
    // A saved inference with a repeated name is refused.
    let mut v = serde_json::to_value(&inf).unwrap();
    v["names"][1] = "a".into();
    assert!(serde_json::from_value::<Inference>(v).is_err());
}
