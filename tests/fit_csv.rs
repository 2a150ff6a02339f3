//! End-to-end tests of the `fit_csv` example (examples/fit_csv/): the
//! binary is run on generated CSV files of an invented scenario and its
//! answers are checked against the library's in-memory fits of the same
//! numbers, its errors against their messages and exit codes, and its SVG
//! plots by parsing them.
//!
//! `cargo test --features serde` builds the example before running these;
//! when running this file alone, build it first with
//! `cargo build [--release] --features serde --example fit_csv`.

mod fit_csv_support;

use std::path::Path;

use leastline::ridge::Criterion;
use leastline::{
    Accelerated, Cholesky, Fit, GradientDescent, Problem, Qr, Ridge, RidgePath, Solver, Stochastic,
    Svd,
};
use ndarray::{Array1, Array2};
use serde_json::Value;

use fit_csv_support::{digits, run, run_json, vineyard, Records, Scratch};

const PREDICTORS: [&str; 4] = ["air_temp", "wind", "soil_moisture", "canopy"];

fn arrays(r: &Records) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    let x = Array2::from_shape_fn((r.x.len(), 4), |(i, j)| r.x[i][j]);
    (x, Array1::from(r.y.clone()), Array1::from(r.w.clone()))
}

/// The JSON's coefficients, intercept and RSS agree with `fit` to `min`
/// digits.
fn assert_matches(json: &Value, fit: &Fit, intercept: bool, min: f64, case: &str) {
    let coefficients = &json["coefficients"];
    for (j, name) in PREDICTORS.iter().enumerate() {
        let got = coefficients[name]
            .as_f64()
            .unwrap_or_else(|| panic!("{case}: no coefficient for {name} in {json}"));
        let want = fit.model.coefficients()[j];
        assert!(
            digits(got, want) >= min,
            "{case}: {name} = {got} but the library gives {want}"
        );
    }
    if intercept {
        let got = json["intercept"].as_f64().expect("intercept");
        assert!(
            digits(got, fit.model.intercept()) >= min,
            "{case}: intercept {got} vs {}",
            fit.model.intercept()
        );
    } else {
        assert!(
            json["intercept"].is_null(),
            "{case}: intercept should be null"
        );
    }
    let rss = json["rss"].as_f64().expect("rss");
    assert!(
        digits(rss, fit.report.residual_sum_of_squares) >= min,
        "{case}: rss {rss} vs {}",
        fit.report.residual_sum_of_squares
    );
    assert_eq!(
        json["rows_used"].as_u64(),
        Some(fit.report.usable_rows as u64),
        "{case}"
    );
    assert_eq!(
        json["solver"].as_str(),
        Some(fit.report.solver.as_str()),
        "{case}"
    );
}

#[test]
fn every_solver_fits_the_file_as_the_library_fits_the_arrays() {
    let scratch = Scratch::new("agree");
    let records = vineyard(700, 11);
    let file = scratch.write("vineyard.csv", &records.csv);
    let (x, y, w) = arrays(&records);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .expect("valid problem");
    let no_intercept = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .with_intercept(false)
        .build()
        .expect("valid problem");
    let common = [
        file.to_str().expect("utf-8 path"),
        "--target",
        "water",
        "--predictors",
        "air_temp,wind,soil_moisture,canopy",
        "--weights",
        "meter_weight",
        "--json",
        // Small blocks: the rows arrive in 101 blocks, the last one short.
        "--block-rows",
        "7",
    ];
    let gradient = GradientDescent::new()
        .with_tolerance(1e-11)
        .with_max_iterations(40_000);
    let accelerated = Accelerated::new()
        .with_tolerance(1e-11)
        .with_max_iterations(40_000);
    let stochastic = Stochastic::new().with_seed(7).with_max_iterations(30);
    let cases: Vec<(&str, Vec<&str>, Fit)> = vec![
        (
            "qr",
            vec!["--solver", "qr"],
            Qr::new().fit(&problem).unwrap(),
        ),
        (
            "qr-refined",
            vec!["--solver", "qr-refined"],
            Qr::refined().fit(&problem).unwrap(),
        ),
        (
            "cholesky",
            vec!["--solver", "cholesky"],
            Cholesky::new().fit(&problem).unwrap(),
        ),
        (
            "svd",
            vec!["--solver", "svd"],
            Svd::new().fit(&problem).unwrap(),
        ),
        (
            "ridge 2.5",
            vec!["--solver", "ridge", "--penalty", "2.5"],
            Ridge::new(2.5).fit(&problem).unwrap(),
        ),
        (
            "ridge 40 standardized",
            vec!["--solver", "ridge", "--penalty", "40", "--standardize"],
            Ridge::new(40.0)
                .with_standardize(true)
                .fit(&problem)
                .unwrap(),
        ),
        (
            "gradient",
            vec![
                "--solver",
                "gradient",
                "--tolerance",
                "1e-11",
                "--max-iterations",
                "40000",
            ],
            gradient.fit(&problem).unwrap(),
        ),
        (
            "accelerated",
            vec![
                "--solver",
                "accelerated",
                "--tolerance",
                "1e-11",
                "--max-iterations",
                "40000",
            ],
            accelerated.fit(&problem).unwrap(),
        ),
        (
            "stochastic",
            vec![
                "--solver",
                "stochastic",
                "--seed",
                "7",
                "--max-iterations",
                "30",
            ],
            stochastic.fit(&problem).unwrap(),
        ),
        (
            "gradient with a penalty",
            vec![
                "--solver",
                "gradient",
                "--penalty",
                "3",
                "--tolerance",
                "1e-11",
            ],
            GradientDescent::new()
                .with_penalty(3.0)
                .with_tolerance(1e-11)
                .fit(&problem)
                .unwrap(),
        ),
    ];
    for (case, extra, fit) in &cases {
        let args: Vec<&str> = common.iter().chain(extra.iter()).copied().collect();
        let json = run_json(&args);
        assert_matches(&json, fit, true, 12.0, case);
        assert_eq!(json["rows_read"].as_u64(), Some(700), "{case}");
    }
    // Zero weights: rows read but not fitted.
    let zero = records.w.iter().filter(|&&v| v == 0.0).count();
    assert!(zero > 0 && cases[0].2.report.usable_rows == 700 - zero);

    // Without an intercept.
    let args: Vec<&str> = common.iter().copied().chain(["--no-intercept"]).collect();
    let json = run_json(&args);
    assert_matches(
        &json,
        &Qr::new().fit(&no_intercept).unwrap(),
        false,
        12.0,
        "no intercept",
    );

    // Ridge choosing its penalty: the library's path, grid and criterion.
    let path = RidgePath::new(&problem, false).unwrap();
    let grid = path.default_grid(60).unwrap();
    for (flag, criterion) in [
        ("loo", Criterion::LeaveOneOut),
        ("gcv", Criterion::GeneralizedCrossValidation),
    ] {
        let curve = path.curve(&grid, criterion).unwrap();
        let fit = path.fit(curve.best_penalty).unwrap();
        let args: Vec<&str> = common
            .iter()
            .copied()
            .chain(["--solver", "ridge", "--penalty", flag])
            .collect();
        let json = run_json(&args);
        assert_matches(&json, &fit, true, 12.0, flag);
        assert_eq!(json["penalty"].as_f64(), Some(curve.best_penalty), "{flag}");
        assert!(json["penalty_chosen_by"].is_string());
        assert!(json["no_inference_because"]
            .as_str()
            .unwrap()
            .contains("penalised"));
    }
}

#[test]
fn the_report_carries_the_inference_of_the_fit() {
    let scratch = Scratch::new("inference");
    let records = vineyard(400, 5);
    let file = scratch.write("v.csv", &records.csv);
    let (x, y, w) = arrays(&records);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let inference = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap();
    let args = [
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "-w",
        "meter_weight",
    ];
    let json = run_json(&[&args[..], &["--json"]].concat());
    assert!(digits(json["sigma"].as_f64().unwrap(), inference.residual_sd) >= 12.0);
    assert!(
        digits(
            json["r_squared"].as_f64().unwrap(),
            inference.goodness.r_squared
        ) >= 12.0
    );
    for (j, name) in PREDICTORS.iter().enumerate() {
        let se = json["standard_errors"][name].as_f64().unwrap();
        assert!(
            digits(se, inference.coefficients[j].std_error) >= 12.0,
            "{name}"
        );
        let lo = json["intervals"][name][0].as_f64().unwrap();
        assert!(
            digits(lo, inference.coefficients[j].lower) >= 12.0,
            "{name}"
        );
    }
    assert_eq!(json["units"]["air_temp"], "C");
    assert_eq!(json["target_unit"], "m3");

    // Units: `name [unit]` at the end of a header, spaces optional; a
    // column is chosen by its name or its whole header.
    let units = scratch.write(
        "units.csv",
        "load [kg],flow[m3/h],x [],[kg],out [V]\n1,2,3,4,5\n2,1,4,4,7\n3,5,1,2,8\n4,3,2,6,9\n5,4,4,1,9\n6,2,5,3,1\n",
    );
    let json = run_json(&[
        units.to_str().unwrap(),
        "--target",
        "out [V]",
        "-x",
        "load,flow[m3/h],x [],[kg]",
        "--json",
    ]);
    assert_eq!(json["target"], "out");
    assert_eq!(json["target_unit"], "V");
    assert_eq!(json["units"]["load"], "kg");
    assert_eq!(json["units"]["flow"], "m3/h");
    assert!(json["units"]["x []"].is_null(), "{json}");
    assert!(json["units"]["[kg]"].is_null(), "{json}");
    let sum: f64 = ["load", "flow", "x []", "[kg]"]
        .iter()
        .map(|k| json["coefficients"][k].as_f64().unwrap().abs())
        .sum();
    assert!(sum > 0.0);

    // The text report: the equation, the rows, the crate's own summary.
    let out = run(&args);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("water [m3] ="), "{text}");
    assert!(text.contains("x soil_moisture [%]"), "{text}");
    assert!(text.contains("400 read"), "{text}");
    assert!(
        text.contains(&inference.to_string().lines().next().unwrap().to_string()),
        "{text}"
    );
    assert!(
        out.stderr.is_empty(),
        "no progress bars when stderr is not a terminal"
    );
}

/// (file contents, extra flags, exit code, pieces of the message)
type BadCase<'a> = (&'a str, &'a [&'a str], i32, &'a [&'a str]);

#[test]
fn each_bad_input_gives_its_message_and_exit_code() {
    let scratch = Scratch::new("bad");
    let good = "a,b [kg],y\n1,2,3\n2,1,5\n3,5,4\n4,3,8\n5,4,9\n";
    let cases: &[BadCase<'_>] = &[
        (
            good,
            &["--target", "nitrogen"],
            4,
            &["no column named `nitrogen`", "a, b [kg], y"],
        ),
        (
            good,
            &["--target", "y", "--predictors", "a,c"],
            4,
            &["no column named `c`"],
        ),
        (
            "a,b,a,y\n1,2,3,4\n",
            &["--target", "y"],
            4,
            &["names `a` more than once (columns 1 and 3)"],
        ),
        (
            "a [kg],a [g],y\n1,2,3\n",
            &["--target", "y", "-x", "a [kg]"],
            4,
            &["`a` more than once"],
        ),
        (
            "a,b,y\n1,2,3\n4,abc,6\n",
            &["--target", "y"],
            4,
            &["line 3, column `b`: `abc` is not a number"],
        ),
        (
            "# made by hand\na,b,y\n1,2,3\n4,,6\n",
            &["--target", "y"],
            4,
            &["line 4, column `b`", "is empty"],
        ),
        (
            "a,b,y\n1,2,3\n4,NaN,6\n",
            &["--target", "y"],
            4,
            &["line 3", "`NaN` is not a finite number"],
        ),
        (
            "a,b,y\n1,2,3\n4,inf,6\n",
            &["--target", "y"],
            4,
            &["`inf` is not a finite number"],
        ),
        (
            "a,b,y\n1,2,3\n4,5\n",
            &["--target", "y"],
            4,
            &["line 3 has 2 fields but the header has 3"],
        ),
        (
            "a,w,y\n1,1,3\n4,-1,6\n",
            &["--target", "y", "--weights", "w"],
            4,
            &["line 3, column `w`: weight -1 is negative"],
        ),
        (
            "a,b,y\n",
            &["--target", "y"],
            4,
            &["has a header but no rows of data"],
        ),
        ("", &["--target", "y"], 4, &["is empty"]),
        (
            good,
            &["--target", "y", "--predictors", "a,y"],
            4,
            &["`y` is chosen as a predictor and as the target"],
        ),
        (
            good,
            &["--target", "y", "--predictors", "a,a"],
            4,
            &["`a` is listed twice"],
        ),
        (
            good,
            &["--target", "y", "--weights", "y"],
            2,
            &["both the target and the weights"],
        ),
        // The library refuses: dependent columns (c = 2 a), named by name.
        (
            "a,c,y\n1,2,3\n2,4,5\n3,6,4\n4,8,8\n",
            &["--target", "y"],
            1,
            &["linearly dependent", "`c`"],
        ),
        (
            "a,b,y\n1,2,3\n2,1,5\n",
            &["--target", "y"],
            1,
            &["cannot determine 3 parameters"],
        ),
        // Flags that do not go together.
        (good, &["--target", "y", "--solver", "lasso"], 2, &["lasso"]),
        (
            good,
            &["--target", "y", "--penalty", "loo"],
            2,
            &["--penalty applies to ridge"],
        ),
        (
            good,
            &["--target", "y", "--solver", "gradient", "--penalty", "gcv"],
            2,
            &["only ridge chooses"],
        ),
        (
            good,
            &["--target", "y", "--penalty", "-1", "--solver", "ridge"],
            2,
            &["-1"],
        ),
        (
            good,
            &["--target", "y", "--level", "1.5"],
            2,
            &["1.5 is not strictly between 0 and 1"],
        ),
        (
            good,
            &["--target", "y", "--standardize"],
            2,
            &["--standardize applies to the ridge"],
        ),
        (
            good,
            &["--target", "y", "--tolerance", "1e-3"],
            2,
            &["--tolerance and --max-iterations apply"],
        ),
        (
            good,
            &["--target", "y", "--compare", "--solver", "svd"],
            2,
            &["--solver"],
        ),
        (
            good,
            &["--target", "y", "--predict", "new.csv"],
            2,
            &["--out"],
        ),
        (good, &["--target", "y", "--block-rows", "0"], 2, &["0"]),
        (
            good,
            &["--target", "y", "--separator", "ab"],
            2,
            &["one ASCII character"],
        ),
        (good, &[], 2, &["--target"]),
    ];
    for (k, (content, flags, code, pieces)) in cases.iter().enumerate() {
        let file = scratch.write(&format!("case{k}.csv"), content);
        let mut args = vec![file.to_str().unwrap().to_string()];
        args.extend(flags.iter().map(|s| s.to_string()));
        let out = run(&args);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(
            out.status.code(),
            Some(*code),
            "case {k} {flags:?}: {stderr}"
        );
        for piece in *pieces {
            assert!(
                stderr.contains(piece),
                "case {k}: `{piece}` not in: {stderr}"
            );
        }
        assert!(out.stdout.is_empty(), "case {k}: nothing on stdout");
        if *code != 2 {
            assert!(stderr.starts_with("fit_csv: error: "), "case {k}: {stderr}");
            assert_eq!(stderr.lines().count(), 1, "case {k}: one line: {stderr}");
        }
    }
    // The same dependent columns fit with the SVD.
    let dependent = scratch.write("dependent.csv", "a,c,y\n1,2,3\n2,4,5\n3,6,4\n4,8,8\n");
    let json = run_json(&[
        dependent.to_str().unwrap(),
        "--target",
        "y",
        "--solver",
        "svd",
        "--json",
    ]);
    assert_eq!(json["rank"].as_u64(), Some(1));

    // A file that is not there.
    let out = run(&[
        scratch.path("absent.csv").to_str().unwrap(),
        "--target",
        "y",
    ]);
    assert_eq!(out.status.code(), Some(3));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot open"));

    // An error in a later block still names its line.
    let mut text = String::from("a,y\n");
    for i in 0..50 {
        text += &format!("{i},{}\n", 2 * i + 1);
    }
    text += "51,oops\n";
    let file = scratch.write("late.csv", &text);
    let out = run(&[file.to_str().unwrap(), "--target", "y", "--block-rows", "8"]);
    assert_eq!(out.status.code(), Some(4));
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 52, column `y`: `oops`"));
}

fn circles(svg: &Path) -> usize {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text)
        .unwrap_or_else(|e| panic!("{} is not well-formed XML: {e}", svg.display()));
    doc.descendants()
        .filter(|n| n.has_tag_name("circle"))
        .count()
}

fn texts(svg: &Path) -> Vec<String> {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.has_tag_name("text"))
        .filter_map(|n| n.text().map(|t| t.trim().to_string()))
        .collect()
}

/// The longest `<polyline>` of the file, as its number of points.
fn longest_polyline(svg: &Path) -> usize {
    let text = std::fs::read_to_string(svg).unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    doc.descendants()
        .filter(|n| n.has_tag_name("polyline"))
        .filter_map(|n| n.attribute("points"))
        .map(|p| p.split_whitespace().count())
        .max()
        .unwrap_or(0)
}

#[test]
fn the_plots_parse_and_hold_one_point_per_fitted_row() {
    let scratch = Scratch::new("plots");
    let records = vineyard(300, 3);
    let file = scratch.write("v.csv", &records.csv);
    let used = records.w.iter().filter(|&&w| w > 0.0).count();
    let dir = scratch.path("plots");
    let base = [
        file.to_str().unwrap(),
        "--target",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "--weights",
        "meter_weight",
        "--plots",
        dir.to_str().unwrap(),
        "--json",
    ];
    let json = run_json(&base);
    assert_eq!(json["rows_used"].as_u64(), Some(used as u64));
    let names = [
        "observed_vs_fitted.svg",
        "residuals_vs_fitted.svg",
        "normal_quantiles.svg",
        "leverage.svg",
    ];
    assert_eq!(json["plots"].as_array().unwrap().len(), 4);
    for name in names {
        let svg = dir.join(name);
        assert_eq!(
            circles(&svg),
            used,
            "{name}: one dot per row of non-zero weight"
        );
    }
    let t = texts(&dir.join("observed_vs_fitted.svg"));
    assert!(t.iter().any(|s| s == "fitted water [m3]"), "{t:?}");
    assert!(t.iter().any(|s| s == "observed water [m3]"), "{t:?}");
    assert!(
        t.iter().any(|s| s.contains("rows of weight 0 not drawn")),
        "{t:?}"
    );
    let t = texts(&dir.join("leverage.svg"));
    assert!(t.iter().any(|s| s.starts_with("Cook's distance")), "{t:?}");
    assert!(
        t.iter().filter(|s| s.starts_with("line ")).count() == 3,
        "{t:?}"
    );

    // Ridge choosing its penalty: the criterion curve, no leverage plots.
    let ridge_dir = scratch.path("ridge");
    let mut args: Vec<&str> = base.to_vec();
    args[8] = ridge_dir.to_str().unwrap();
    args.extend(["--solver", "ridge", "--penalty", "gcv"]);
    let json = run_json(&args);
    assert_eq!(json["plots"].as_array().unwrap().len(), 3);
    let curve = ridge_dir.join("penalty_curve.svg");
    assert_eq!(circles(&curve), 60, "one dot per penalty of the grid");
    assert_eq!(longest_polyline(&curve), 60);
    assert!(!ridge_dir.join("leverage.svg").exists());
    assert_eq!(circles(&ridge_dir.join("observed_vs_fitted.svg")), used);

    // A plots path that is a file cannot be written.
    let blocker = scratch.write("blocker", "");
    let mut args: Vec<&str> = base.to_vec();
    args[8] = blocker.to_str().unwrap();
    let out = run(&args);
    assert_eq!(
        out.status.code(),
        Some(6),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

fn read_rows(path: &Path) -> (Vec<String>, Vec<Vec<f64>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines
        .next()
        .unwrap()
        .split(',')
        .map(str::to_string)
        .collect();
    let rows = lines
        .map(|l| l.split(',').map(|v| v.parse::<f64>().unwrap()).collect())
        .collect();
    (header, rows)
}

#[test]
fn predictions_with_intervals_from_the_fit_and_from_the_saved_model() {
    let scratch = Scratch::new("predict");
    let records = vineyard(360, 9);
    let file = scratch.write("train.csv", &records.csv);
    // New days: the predictor columns in another order, no target or weights.
    let fresh = vineyard(25, 99);
    let mut new_csv = String::from("canopy [%],note,wind [m/s],soil_moisture [%],air_temp [C]\n");
    for r in &fresh.x {
        new_csv += &format!("{},n/a,{},{},{}\n", r[3], r[1], r[2], r[0]);
    }
    let new_file = scratch.write("new.csv", &new_csv);
    let model = scratch.path("model.json");
    let first = scratch.path("first.csv");
    let second = scratch.path("second.csv");
    let json = run_json(&[
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "-w",
        "meter_weight",
        "--level",
        "0.9",
        "--save",
        model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        first.to_str().unwrap(),
        "--json",
    ]);
    assert_eq!(json["predictions"]["rows"].as_u64(), Some(25));
    let out = run(&[
        "--model",
        model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        second.to_str().unwrap(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(
        std::fs::read_to_string(&first).unwrap(),
        std::fs::read_to_string(&second).unwrap(),
        "the saved model predicts exactly as the fit did"
    );

    let (header, rows) = read_rows(&first);
    assert_eq!(
        header,
        [
            "line",
            "air_temp [C]",
            "wind [m/s]",
            "soil_moisture [%]",
            "canopy [%]",
            "water_predicted [m3]",
            "water_mean_low_90 [m3]",
            "water_mean_high_90 [m3]",
            "water_new_low_90 [m3]",
            "water_new_high_90 [m3]",
        ]
    );
    // The library's own predictions of the same rows.
    let (x, y, w) = arrays(&records);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inference = leastline::Inference::with_options(
        &problem,
        &fit,
        leastline::InferenceOptions::new().with_level(0.9),
    )
    .unwrap();
    let new_x = Array2::from_shape_fn((25, 4), |(i, j)| fresh.x[i][j]);
    let want = inference.predict(new_x.view()).unwrap();
    for (i, row) in rows.iter().enumerate() {
        assert_eq!(row[0], (i + 2) as f64, "line numbers");
        for (got, expected) in row[5..].iter().zip([
            want.fitted[i],
            want.mean_lower[i],
            want.mean_upper[i],
            want.prediction_lower[i],
            want.prediction_upper[i],
        ]) {
            assert!(
                digits(*got, expected) >= 12.0,
                "row {i}: {got} vs {expected}"
            );
        }
    }

    // A unit that differs from the one fitted is refused.
    let fahrenheit = scratch.write(
        "f.csv",
        "air_temp [F],wind [m/s],soil_moisture [%],canopy [%]\n70,2,30,50\n",
    );
    let out = run(&[
        "--model",
        model.to_str().unwrap(),
        "--predict",
        fahrenheit.to_str().unwrap(),
        "--out",
        scratch.path("f_out.csv").to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(4));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("is in [F] but the model was fitted in [C]")
    );
    // A missing predictor column.
    let partial = scratch.write("p.csv", "air_temp,wind\n1,2\n");
    let out = run(&[
        "--model",
        model.to_str().unwrap(),
        "--predict",
        partial.to_str().unwrap(),
        "--out",
        scratch.path("p_out.csv").to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(4));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no column named `soil_moisture`"));
    // An output that cannot be written.
    let out = run(&[
        "--model",
        model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        scratch.path("no/such/folder/out.csv").to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(6));

    // A penalised fit predicts without intervals.
    let ridge_model = scratch.path("ridge.json");
    let ridge_out = scratch.path("ridge_out.csv");
    run_json(&[
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "--solver",
        "ridge",
        "--penalty",
        "5",
        "--save",
        ridge_model.to_str().unwrap(),
        "--json",
    ]);
    let out = run(&[
        "--model",
        ridge_model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        ridge_out.to_str().unwrap(),
    ]);
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).contains("no intervals"));
    let (header, rows) = read_rows(&ridge_out);
    assert_eq!(header.len(), 6);
    let unweighted = Problem::new(x.view(), y.view()).unwrap();
    let ridge = Ridge::new(5.0).fit(&unweighted).unwrap();
    let want = ridge.model.predict(new_x.view()).unwrap();
    for (i, row) in rows.iter().enumerate() {
        assert!(digits(row[5], want[i]) >= 12.0);
    }
}

#[test]
fn a_damaged_model_file_is_refused_with_exit_code_5() {
    let scratch = Scratch::new("model");
    let records = vineyard(120, 4);
    let file = scratch.write("train.csv", &records.csv);
    let model = scratch.path("model.json");
    run_json(&[
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "--save",
        model.to_str().unwrap(),
        "--json",
    ]);
    let new_file = scratch.write(
        "new.csv",
        "air_temp,wind,soil_moisture,canopy\n20,2,30,50\n",
    );
    let saved: Value = serde_json::from_str(&std::fs::read_to_string(&model).unwrap()).unwrap();
    type Damage = fn(&mut Value);
    let damages: [(&str, Damage, &str); 7] = [
        ("kind", |v| v["kind"] = "something else".into(), "`kind`"),
        ("version", |v| v["version"] = 99.into(), "`version`"),
        (
            "names",
            |v| v["predictors"][1]["name"] = "".into(),
            "predictor",
        ),
        (
            "duplicate",
            |v| v["predictors"][1]["name"] = "air_temp".into(),
            "listed twice",
        ),
        (
            "coefficients",
            |v| {
                // One coefficient fewer than the report's column count.
                if let Some(list) = v["fit"]["model"]["coefficients"].as_array_mut() {
                    list.pop();
                }
            },
            "`fit`",
        ),
        (
            "basis",
            // A factor of the wrong size.
            |v| v["inference"]["basis"]["r"] = serde_json::json!([["1", "0"], ["0", "1"]]),
            "`inference`",
        ),
        (
            "estimates",
            |v| v["inference"]["coefficients"][0]["value"] = 123.0.into(),
            "differ",
        ),
    ];
    let run_model = |path: &Path| {
        run(&[
            "--model",
            path.to_str().unwrap(),
            "--predict",
            new_file.to_str().unwrap(),
            "--out",
            scratch.path("out.csv").to_str().unwrap(),
        ])
    };
    for (name, damage, piece) in damages {
        let mut v = saved.clone();
        damage(&mut v);
        let path = scratch.write(&format!("{name}.json"), &v.to_string());
        let out = run_model(&path);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(5), "{name}: {stderr}");
        assert!(stderr.contains(piece), "{name}: `{piece}` not in {stderr}");
    }
    let path = scratch.write("cut.json", &saved.to_string()[..200]);
    assert_eq!(run_model(&path).status.code(), Some(5));
    assert_eq!(
        run_model(&scratch.path("absent.json")).status.code(),
        Some(5)
    );
    // The undamaged file works.
    assert!(run_model(&model).status.success());
}

#[test]
fn the_comparison_runs_every_solver_side_by_side() {
    let scratch = Scratch::new("compare");
    let records = vineyard(500, 21);
    let file = scratch.write("v.csv", &records.csv);
    let args = [
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "-w",
        "meter_weight",
        "--compare",
    ];
    let json = run_json(&[&args[..], &["--json"]].concat());
    let solvers = json["solvers"].as_array().unwrap();
    let flags: Vec<&str> = solvers
        .iter()
        .map(|s| s["solver"].as_str().unwrap())
        .collect();
    assert_eq!(
        flags,
        [
            "qr",
            "qr-refined",
            "cholesky",
            "svd",
            "ridge",
            "gradient",
            "accelerated",
            "stochastic"
        ]
    );
    assert_eq!(json["reference"], "qr-refined");
    let (x, y, w) = arrays(&records);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let qr = Qr::new().fit(&problem).unwrap();
    assert_matches(
        &serde_json::json!({
            "coefficients": solvers[0]["coefficients"],
            "intercept": solvers[0]["intercept"],
            "rss": solvers[0]["rss"],
            "rows_used": json["rows_used"],
            "solver": solvers[0]["ran_as"],
        }),
        &qr,
        true,
        12.0,
        "compare qr",
    );
    for s in &solvers[..5] {
        let d = s["digits"].as_f64().unwrap();
        assert!(d >= 11.0, "{s}: a closed form on a well-conditioned design");
        assert!(s["seconds"].as_f64().unwrap() >= 0.0);
    }
    let out = run(&args);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    for flag in flags {
        assert!(text.contains(flag), "{flag} missing from:\n{text}");
    }
    assert!(text.contains("soil_moisture [%]"));
}

#[test]
fn help_explains_every_flag_in_one_line() {
    let out = run(&["--help"]);
    assert_eq!(out.status.code(), Some(0));
    let help = String::from_utf8(out.stdout).unwrap();
    for flag in [
        "--target",
        "--predictors",
        "--weights",
        "--no-intercept",
        "--solver",
        "--penalty",
        "--standardize",
        "--tolerance",
        "--max-iterations",
        "--seed",
        "--compare",
        "--json",
        "--plots",
        "--predict",
        "--out",
        "--level",
        "--save",
        "--model",
        "--separator",
        "--block-rows",
        "--no-progress",
    ] {
        let line = help
            .lines()
            .find(|l| l.trim_start().starts_with(flag) || l.contains(&format!(", {flag}")))
            .unwrap_or_else(|| panic!("{flag} not in --help:\n{help}"));
        let after = line.split_once(flag).unwrap().1;
        assert!(
            after.split_whitespace().count() >= 3,
            "{flag}: its explanation should be on its line: `{line}`"
        );
    }
    assert!(help.contains("Exit codes"));
}

#[test]
fn the_shipped_sample_is_its_generators_output_and_the_readme_command_runs() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let sample = root.join("data/samples/vineyard_irrigation.csv");
    let generated = vineyard(240, 2026).csv;
    if std::env::var_os("FIT_CSV_WRITE_SAMPLE").is_some() {
        std::fs::write(&sample, &generated).unwrap();
    }
    assert_eq!(
        std::fs::read_to_string(&sample).unwrap(),
        generated,
        "regenerate with FIT_CSV_WRITE_SAMPLE=1 cargo test --features serde --test fit_csv"
    );
    // The README's command, with the plots sent to a scratch folder.
    let readme = std::fs::read_to_string(root.join("README.md")).unwrap();
    let command = readme
        .lines()
        .find(|l| l.contains("--example fit_csv --"))
        .expect("the README shows the fit_csv command");
    let args: Vec<&str> = command
        .split_once("--example fit_csv --")
        .unwrap()
        .1
        .split_whitespace()
        .collect();
    let scratch = Scratch::new("readme");
    let mut args: Vec<String> = args.iter().map(|s| s.to_string()).collect();
    if let Some(k) = args.iter().position(|a| a == "--plots") {
        args[k + 1] = scratch.path("plots").to_str().unwrap().to_string();
    }
    args[0] = sample.to_str().unwrap().to_string();
    let out = run(&args);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("240 read, 231 used"), "{text}");
}

/// The streamed JSON (`--stream`) agrees with the in-memory `fit` to `min`
/// digits in every slope, the intercept and the RSS, and says how it was
/// read.
fn assert_streamed(json: &Value, fit: &Fit, intercept: bool, min: f64, blocks: u64, case: &str) {
    for (j, name) in PREDICTORS.iter().enumerate() {
        let got = json["coefficients"][name]
            .as_f64()
            .unwrap_or_else(|| panic!("{case}: no coefficient for {name} in {json}"));
        let want = fit.model.coefficients()[j];
        assert!(
            digits(got, want) >= min,
            "{case}: {name} = {got} but the library gives {want} ({:.1} digits)",
            digits(got, want)
        );
    }
    if intercept {
        let got = json["intercept"].as_f64().expect("intercept");
        let want = fit.model.intercept();
        assert!(
            digits(got, want) >= min,
            "{case}: intercept {got} vs {want} ({:.1} digits)",
            digits(got, want)
        );
    } else {
        assert!(json["intercept"].is_null(), "{case}: intercept not null");
    }
    let rss = json["rss"].as_f64().expect("rss");
    let want = fit.report.residual_sum_of_squares;
    assert!(
        digits(rss, want) >= min,
        "{case}: rss {rss} vs {want} ({:.1} digits)",
        digits(rss, want)
    );
    assert_eq!(
        json["rows_used"].as_u64(),
        Some(fit.report.usable_rows as u64),
        "{case}"
    );
    assert_eq!(json["streamed"], Value::Bool(true), "{case}");
    assert_eq!(json["blocks"].as_u64(), Some(blocks), "{case}");
    // The state's solver name: the in-memory solver's family with
    // `-state` (`ridge-svd` -> `ridge-state`).
    let solver = json["solver"].as_str().expect("solver");
    let family = fit.report.solver.split('-').next().unwrap_or_default();
    assert_eq!(solver, format!("{family}-state"), "{case}");
    assert!(
        json["standard_errors"].is_null() && json["no_inference_because"].is_string(),
        "{case}: a streamed fit has no standard errors: {json}"
    );
}

/// Rows in the streamed tests: four blocks of the default 8,192 rows, the
/// last one short.
const STREAM_DAYS: usize = 30_000;

#[test]
fn a_streamed_fit_of_many_blocks_equals_the_in_memory_fit() {
    let scratch = Scratch::new("stream");
    let records = vineyard(STREAM_DAYS, 19);
    let file = scratch.write("vineyard_long.csv", &records.csv);
    let (x, y, w) = arrays(&records);
    let weighted = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let plain = Problem::builder(x.view(), y.view()).build().unwrap();
    let through_origin = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .with_intercept(false)
        .build()
        .unwrap();
    let file = file.to_str().unwrap();
    let base = [
        file,
        "--target",
        "water",
        "--predictors",
        "air_temp,wind,soil_moisture,canopy",
        "--json",
        "--stream",
    ];
    let blocks = STREAM_DAYS.div_ceil(8192) as u64;
    let with = |extra: &[&str]| -> Vec<String> {
        base.iter()
            .chain(extra)
            .map(|s| s.to_string())
            .collect::<Vec<_>>()
    };
    // QR on the same numbers is the reference (Householder QR, the
    // library's in-memory answer); weighted, unweighted and without an
    // intercept.
    let cases: Vec<(&str, Vec<String>, Fit, bool, u64)> = vec![
        (
            "qr weighted",
            with(&["--weights", "meter_weight"]),
            Qr::new().fit(&weighted).unwrap(),
            true,
            blocks,
        ),
        (
            "qr unweighted",
            with(&[]),
            Qr::new().fit(&plain).unwrap(),
            true,
            blocks,
        ),
        (
            "qr no intercept",
            with(&["--weights", "meter_weight", "--no-intercept"]),
            Qr::new().fit(&through_origin).unwrap(),
            false,
            blocks,
        ),
        (
            "qr in blocks of 1000",
            with(&["--weights", "meter_weight", "--block-rows", "1000"]),
            Qr::new().fit(&weighted).unwrap(),
            true,
            30,
        ),
        (
            "svd weighted",
            with(&["--weights", "meter_weight", "--solver", "svd"]),
            Svd::new().fit(&weighted).unwrap(),
            true,
            blocks,
        ),
        (
            "ridge 2.5 weighted",
            with(&[
                "--weights",
                "meter_weight",
                "--solver",
                "ridge",
                "--penalty",
                "2.5",
            ]),
            Ridge::new(2.5).fit(&weighted).unwrap(),
            true,
            blocks,
        ),
    ];
    for (case, args, fit, intercept, blocks) in &cases {
        let json = run_json(args);
        assert_streamed(&json, fit, *intercept, 12.0, *blocks, case);
        assert_eq!(
            json["rows_read"].as_u64(),
            Some(STREAM_DAYS as u64),
            "{case}"
        );
        // sigma and R² of the state's report: sigma^2 (n - p - 1) is the
        // RSS (a definition), R² within [0, 1].
        // Ridge reports no rank, hence no degrees of freedom and no sigma.
        match fit.report.residual_df {
            Some(df) => {
                let sigma = json["sigma"].as_f64().expect("sigma");
                let rss = json["rss"].as_f64().unwrap();
                assert!(
                    digits(sigma * sigma * df as f64, rss) >= 12.0,
                    "{case}: sigma"
                );
            }
            None => assert!(json["sigma"].is_null(), "{case}: sigma without df"),
        }
        let r2 = json["r_squared"].as_f64().expect("r_squared");
        assert!((0.0..=1.0).contains(&r2), "{case}: R² {r2}");
    }
}

#[test]
fn a_streamed_cholesky_fit_equals_the_in_memory_cholesky_fit() {
    let scratch = Scratch::new("stream-chol");
    let records = vineyard(STREAM_DAYS, 23);
    let file = scratch.write("vineyard_long.csv", &records.csv);
    let (x, y, w) = arrays(&records);
    let file = file.to_str().unwrap();
    for weights in [true, false] {
        let mut b = Problem::builder(x.view(), y.view());
        let mut args = vec![
            file,
            "--target",
            "water",
            "--predictors",
            "air_temp,wind,soil_moisture,canopy",
            "--solver",
            "cholesky",
            "--json",
            "--stream",
        ];
        if weights {
            b = b.with_weights(w.view());
            args.extend(["--weights", "meter_weight"]);
        }
        let problem = b.build().unwrap();
        let fit = Cholesky::new().fit(&problem).unwrap();
        let json = run_json(&args);
        let case = format!("cholesky, weights {weights}");
        assert_streamed(
            &json,
            &fit,
            true,
            12.0,
            STREAM_DAYS.div_ceil(8192) as u64,
            &case,
        );
    }
}

#[test]
fn a_bad_value_in_a_late_block_names_its_line_and_column() {
    let scratch = Scratch::new("stream-bad");
    let records = vineyard(STREAM_DAYS, 29);
    // Data row 27,001 (file line 27,002: the header is line 1) lies in the
    // fourth block of 8,192 rows; its wind reading is replaced by text.
    let mut lines: Vec<String> = records.csv.lines().map(str::to_string).collect();
    let mut fields: Vec<String> = lines[27_001].split(',').map(str::to_string).collect();
    fields[2] = "gusty".into();
    lines[27_001] = fields.join(",");
    let file = scratch.write("vineyard_bad.csv", &(lines.join("\n") + "\n"));
    for stream in [true, false] {
        let mut args = vec![
            file.to_str().unwrap(),
            "--target",
            "water",
            "--weights",
            "meter_weight",
        ];
        if stream {
            args.push("--stream");
        }
        let out = run(&args);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(4), "stream {stream}: {err}");
        assert!(
            err.contains("line 27002, column `wind [m/s]`: `gusty` is not a number"),
            "stream {stream}: {err}"
        );
        assert!(out.stdout.is_empty(), "stream {stream}: no report on error");
    }
}

#[test]
fn stream_refuses_the_requests_that_need_every_row() {
    let scratch = Scratch::new("stream-refuse");
    let records = vineyard(60, 3);
    let file = scratch.write("vineyard.csv", &records.csv);
    let plots = scratch.path("plots");
    let file = file.to_str().unwrap();
    let cases: &[(&[&str], &str)] = &[
        (
            &["--plots", plots.to_str().unwrap()],
            "--plots needs every row",
        ),
        (&["--compare"], "--compare needs every row"),
        (&["--solver", "ridge"], "fixed --penalty"),
        (
            &["--solver", "ridge", "--penalty", "gcv"],
            "fixed --penalty",
        ),
        (
            &["--solver", "gradient"],
            "--solver gradient needs every row",
        ),
        (
            &["--solver", "stochastic"],
            "--solver stochastic needs every row",
        ),
        (
            &["--solver", "qr-refined"],
            "--solver qr-refined needs every row",
        ),
        (
            &["--solver", "ridge", "--penalty", "1", "--standardize"],
            "drop --standardize",
        ),
    ];
    for (extra, want) in cases {
        let mut args = vec![file, "--target", "water", "--stream"];
        args.extend_from_slice(extra);
        let out = run(&args);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{extra:?}: {err}");
        assert!(err.contains(want), "{extra:?}: {err}");
        assert!(!plots.exists(), "{extra:?}: nothing written");
    }
    // The flags that need rows keep working without --stream.
    let out = run(&[
        file,
        "--target",
        "water",
        "--plots",
        plots.to_str().unwrap(),
    ]);
    assert!(out.status.success());
    let help = String::from_utf8(run(&["--help"]).stdout).unwrap();
    let line = help
        .lines()
        .find(|l| l.trim_start().starts_with("--stream"))
        .expect("--stream in --help");
    assert!(line.contains("bounded memory"), "{line}");
    assert!(help.contains("With --stream only"), "{help}");
}

#[test]
fn a_streamed_model_predicts_and_saves_without_intervals() {
    let scratch = Scratch::new("stream-model");
    let records = vineyard(STREAM_DAYS, 31);
    let file = scratch.write("vineyard_long.csv", &records.csv);
    let new_rows = vineyard(50, 37);
    let new_file = scratch.write("new.csv", &new_rows.csv);
    let (x, y, w) = arrays(&records);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let model = scratch.path("model.json");
    let out1 = scratch.path("predicted.csv");
    let out2 = scratch.path("predicted_again.csv");
    let json = run_json(&[
        file.to_str().unwrap(),
        "--target",
        "water",
        "--predictors",
        "air_temp,wind,soil_moisture,canopy",
        "--weights",
        "meter_weight",
        "--stream",
        "--json",
        "--save",
        model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        out1.to_str().unwrap(),
    ]);
    assert_streamed(&json, &fit, true, 12.0, 4, "save and predict");
    let again = run(&[
        "--model",
        model.to_str().unwrap(),
        "--predict",
        new_file.to_str().unwrap(),
        "--out",
        out2.to_str().unwrap(),
    ]);
    assert!(
        again.status.success(),
        "{}",
        String::from_utf8_lossy(&again.stderr)
    );
    let (h1, rows1) = read_rows(&out1);
    let (h2, rows2) = read_rows(&out2);
    assert_eq!(h1, h2);
    assert_eq!(rows1, rows2, "the saved model predicts as the fit did");
    // line, four predictors, the prediction: no interval columns.
    assert_eq!(h1.len(), 6, "{h1:?}");
    let nx = Array2::from_shape_fn((new_rows.x.len(), 4), |(i, j)| new_rows.x[i][j]);
    let want = fit.model.predict(nx.view()).unwrap();
    assert_eq!(rows1.len(), want.len());
    for (row, &v) in rows1.iter().zip(want.iter()) {
        assert!(digits(row[5], v) >= 12.0, "{} vs {v}", row[5]);
    }
}

#[test]
fn a_streamed_refusal_of_a_row_names_its_file_line() {
    // The fit state refuses a positive weight too small beside the largest
    // one seen; the row it names (counted over the whole stream) comes back
    // as its file line, here in the third block of two rows.
    let scratch = Scratch::new("stream-line");
    let text = "a,w,y\n1,1e300,2\n2,1,3\n3,1,5\n# a note\n4,1,6\n5,1e-300,8\n6,1,9\n";
    let file = scratch.write("weights.csv", text);
    let out = run(&[
        file.to_str().unwrap(),
        "--target",
        "y",
        "--weights",
        "w",
        "--stream",
        "--block-rows",
        "2",
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(
        err.contains(
            "line 7: weight 1e-300 is positive but too small beside the largest weight 1e300"
        ),
        "{err}"
    );
}

#[test]
fn the_streamed_report_says_how_the_rows_were_read_and_keeps_sigma_and_r_squared() {
    let scratch = Scratch::new("stream-text");
    let records = vineyard(240, 2026);
    let file = scratch.write("vineyard.csv", &records.csv);
    let file = file.to_str().unwrap();
    let base = [file, "--target", "water", "--weights", "meter_weight"];
    let with = |extra: &[&str]| -> Vec<String> {
        base.iter().chain(extra).map(|s| s.to_string()).collect()
    };
    let out = run(&with(&["--stream", "--block-rows", "50"]));
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("240 read, 231 used"), "{text}");
    assert!(text.contains("streamed in 5 block(s), not kept"), "{text}");
    assert!(text.contains("no standard errors or intervals"), "{text}");
    assert!(text.contains("sigma ") && text.contains("R^2 "), "{text}");
    // sigma and R² of the state's report against the in-memory inference
    // of the same file (another computation of the same definitions).
    let streamed = run_json(&with(&["--stream", "--json"]));
    let held = run_json(&with(&["--json"]));
    for key in ["sigma", "r_squared"] {
        let (a, b) = (streamed[key].as_f64().unwrap(), held[key].as_f64().unwrap());
        assert!(digits(a, b) >= 12.0, "{key}: {a} streamed vs {b} in memory");
    }
    assert_eq!(held["streamed"], Value::Bool(false));
    assert!(held["blocks"].is_null());
}

/// The saved model file holds the library's own saved forms: the crate
/// reads its `fit` (and `inference`) back with plain serde, and they are
/// the library's fit of the same numbers.
#[test]
fn the_saved_model_file_is_loaded_by_the_library_itself() {
    let scratch = Scratch::new("library-load");
    let records = vineyard(150, 11);
    let file = scratch.write("train.csv", &records.csv);
    let model = scratch.path("model.json");
    run_json(&[
        file.to_str().unwrap(),
        "-t",
        "water",
        "-x",
        "air_temp,wind,soil_moisture,canopy",
        "--save",
        model.to_str().unwrap(),
        "--json",
    ]);
    let saved: Value = serde_json::from_str(&std::fs::read_to_string(&model).unwrap()).unwrap();
    let loaded: Fit =
        serde_json::from_value(saved["fit"].clone()).expect("the library loads the fit");
    let _inference: leastline::Inference = serde_json::from_value(saved["inference"].clone())
        .expect("the library loads the inference");
    let (x, y, _) = arrays(&records);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let reference = Qr::new().fit(&problem).unwrap();
    for (a, b) in loaded
        .model
        .coefficients()
        .iter()
        .zip(reference.model.coefficients())
    {
        assert!(digits(*a, *b) >= 13.0, "{a} vs {b}");
    }
    assert!(digits(loaded.model.intercept(), reference.model.intercept()) >= 13.0);
    assert_eq!(loaded.model.columns(), 4);
    assert_eq!(loaded.model.names().len(), 4);
}
