//! End-to-end checks of the `stream_fit` example, run as a program.
//!
//! The binary is built by `cargo test --features serde` (which builds the
//! examples) or by `cargo build --release --features serde --example
//! stream_fit` for the release profile.
//!
//! References outside the example: the in-memory `Qr` fit of the same rows
//! (the example's own comparison, and, for the CSV, this test's fit of the
//! values it wrote), nalgebra's SVD least-squares solution of the same
//! CSV, and the fact that a fit state's size depends on the columns only.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use leastline::ndarray::{Array1, Array2};
use leastline::{Problem, Qr, Solver};
use nalgebra::{DMatrix, DVector};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The example's binary, next to this test's profile directory.
fn binary() -> PathBuf {
    let exe = std::env::current_exe().expect("test executable path");
    // target/<profile>/deps/stream_fit-<hash> -> target/<profile>
    let profile_dir = exe
        .parent()
        .and_then(Path::parent)
        .expect("test executable lies in target/<profile>/deps");
    let bin = profile_dir
        .join("examples")
        .join(format!("stream_fit{}", std::env::consts::EXE_SUFFIX));
    assert!(
        bin.exists(),
        "{} is missing: run `cargo test --features serde` (which builds the examples) or \
         `cargo build --features serde --example stream_fit` with this profile first",
        bin.display()
    );
    bin
}

fn run(args: &[&str]) -> Output {
    Command::new(binary())
        .args(args)
        .output()
        .expect("start the stream_fit example")
}

fn run_json(args: &[&str]) -> serde_json::Value {
    let out = run(args);
    assert!(
        out.status.success(),
        "stream_fit failed ({:?}): {}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).expect("utf-8 stdout");
    assert_eq!(text.lines().count(), 1, "exactly one line of JSON: {text}");
    serde_json::from_str(&text).expect("stdout is one JSON object")
}

/// Significant digits of agreement, `-log10(|a - b| / |b|)`, capped at 16.
fn digits(a: f64, b: f64) -> f64 {
    let e = (a - b).abs();
    if e == 0.0 {
        16.0
    } else {
        (-(e / b.abs().max(f64::MIN_POSITIVE)).log10()).min(16.0)
    }
}

/// A file of its own in the temporary folder, removed on drop.
struct Scratch(PathBuf);

impl Scratch {
    fn new(tag: &str, text: &str) -> Self {
        let p = std::env::temp_dir().join(format!(
            "leastline-stream-fit-{}-{tag}.csv",
            std::process::id()
        ));
        std::fs::write(&p, text).expect("write scratch file");
        Scratch(p)
    }

    fn arg(&self) -> &str {
        self.0.to_str().expect("utf-8 temporary path")
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

#[test]
fn generated_rows_match_the_in_memory_fit_and_the_state_does_not_grow() {
    let big = run_json(&[
        "--rows", "200000", "--cols", "8", "--blocks", "25", "--json",
    ]);
    assert_eq!(big["rows"], 200_000);
    assert_eq!(big["cols"], 8);
    assert_eq!(big["blocks"], 25);
    let d = big["digits_vs_in_memory"]
        .as_f64()
        .expect("compared in memory");
    assert!(d >= 13.0, "digits_vs_in_memory {d} < 13: {big}");

    let small = run_json(&["--rows", "10000", "--cols", "8", "--blocks", "25", "--json"]);
    let state = big["state_bytes"].as_u64().expect("state_bytes");
    assert!(state > 0);
    assert_eq!(
        small["state_bytes"], big["state_bytes"],
        "state size grew with rows"
    );
    // A bigger problem does make a bigger state (the measure is not a constant).
    let wide = run_json(&[
        "--rows", "10000", "--cols", "16", "--blocks", "25", "--json",
    ]);
    assert!(wide["state_bytes"].as_u64().expect("state_bytes") > state);

    // With the same block size the streamed peak does not grow with the rows,
    // while holding every row (the in-memory fit) needs at least the design.
    // (No bound against the in-memory peak: the matrix-multiply backend may
    // keep a fixed per-thread workspace of its own, counted in both.)
    let fixed = ["--cols", "8", "--block-rows", "500", "--json"];
    let few = run_json(&[&["--rows", "10000"][..], &fixed[..]].concat());
    let many = run_json(&[&["--rows", "200000"][..], &fixed[..]].concat());
    let (pf, pm) = (
        few["peak_bytes"].as_f64().expect("peak_bytes"),
        many["peak_bytes"].as_f64().expect("peak_bytes"),
    );
    assert!(
        pm <= 1.25 * pf,
        "streamed peak grew with rows: {pf} -> {pm}"
    );
    let whole = many["in_memory_peak_bytes"].as_f64().expect("in memory");
    assert!(whole >= (200_000 * 8 * 8) as f64, "{whole}");
}

/// Readings of an invented bee-keeping co-operative: hive weight gain against
/// hours of sun, flowering cover and hive age, written with four decimals.
fn hives(rows: usize) -> (String, Vec<[f64; 3]>, Vec<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(77);
    let mut text = String::from("sun_hours,flower_cover,hive_age,gain_kg\n");
    let (mut x, mut y) = (Vec::new(), Vec::new());
    for _ in 0..rows {
        let r = |v: f64| (v * 1e4).round() / 1e4;
        let sun = r(4.0 + 8.0 * rng.random::<f64>());
        let cover = r(20.0 + 60.0 * rng.random::<f64>());
        let age = r(1.0 + 6.0 * rng.random::<f64>());
        let gain = r(0.3 + 0.08 * sun + 0.015 * cover - 0.05 * age + 0.2 * rng.random::<f64>());
        text += &format!("{sun},{cover},{age},{gain}\n");
        x.push([sun, cover, age]);
        y.push(gain);
    }
    (text, x, y)
}

#[test]
fn a_csv_fits_to_the_in_memory_answer() {
    let (text, x, y) = hives(500);
    let file = Scratch::new("hives", &text);
    let out = run_json(&["--csv", file.arg(), "--blocks", "7", "--json"]);
    assert_eq!(out["rows"], 500);
    assert_eq!(out["cols"], 3);
    assert_eq!(out["blocks"], 7);
    assert_eq!(out["source"], "csv");
    assert!(
        out["digits_vs_in_memory"].as_f64().expect("compared") >= 13.0,
        "{out}"
    );

    // This test's own in-memory Qr fit of the values it wrote.
    let xa = Array2::from_shape_fn((x.len(), 3), |(i, j)| x[i][j]);
    let ya = Array1::from(y.clone());
    let fit = Qr::new()
        .fit(&Problem::new(xa.view(), ya.view()).expect("problem"))
        .expect("fit");
    let streamed: Vec<f64> = out["coefficients"]
        .as_array()
        .expect("coefficients")
        .iter()
        .map(|v| v.as_f64().expect("number"))
        .collect();
    assert_eq!(streamed.len(), 3);
    let icpt = out["intercept"].as_f64().expect("intercept");
    assert!(digits(icpt, fit.model.intercept()) >= 13.0);
    for (a, b) in streamed.iter().zip(fit.model.coefficients()) {
        assert!(digits(*a, *b) >= 13.0, "{a} vs {b}");
    }

    // nalgebra's SVD least squares on [1, x] (an independent library).
    let m = DMatrix::from_fn(x.len(), 4, |i, j| if j == 0 { 1.0 } else { x[i][j - 1] });
    let beta = m
        .svd(true, true)
        .solve(&DVector::from_vec(y), 1e-12)
        .expect("svd solve");
    assert!(digits(icpt, beta[0]) >= 11.0, "{icpt} vs {}", beta[0]);
    for (j, a) in streamed.iter().enumerate() {
        assert!(digits(*a, beta[j + 1]) >= 11.0, "{a} vs {}", beta[j + 1]);
    }
}

#[test]
fn a_bad_value_names_its_line() {
    let (text, _, _) = hives(40);
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    // Data row 30 is line 31 of the file (the header is line 1).
    lines[30] = "5.5,31.2,oops,1.7".to_string();
    let file = Scratch::new("bad", &(lines.join("\n") + "\n"));
    let out = run(&["--csv", file.arg(), "--blocks", "4", "--json"]);
    assert_eq!(out.status.code(), Some(4));
    assert!(out.stdout.is_empty());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.starts_with("stream_fit: error:"), "{err}");
    assert!(err.contains("line 31"), "{err}");
    assert!(err.contains("hive_age"), "{err}");
    assert!(err.contains("oops"), "{err}");

    // A missing field is a CSV error naming its line too.
    lines[30] = "5.5,31.2,1.7".to_string();
    let file = Scratch::new("short", &(lines.join("\n") + "\n"));
    let out = run(&["--csv", file.arg(), "--block-rows", "10"]);
    assert_eq!(out.status.code(), Some(4));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("line 31"), "{err}");
}

#[test]
fn bad_flags_are_refused() {
    for args in [
        &["--rows", "10", "--cols", "2", "--blocks", "0"][..],
        &["--rows", "0", "--cols", "2"][..],
        &["--rows", "10"][..],
        &["--rows", "10", "--cols", "2", "--block-rows", "0"][..],
    ] {
        let out = run(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
    }
}

#[test]
fn a_written_csv_reads_back_to_the_same_fit_bit_for_bit() {
    // The writer uses the shortest round-trip decimal of each value, so the
    // file read back holds the generated rows exactly and the two streamed
    // fits (same blocks, same order) must agree in every bit.
    let file = Scratch::new("written", "");
    let wrote = run_json(&[
        "--rows",
        "2500",
        "--cols",
        "4",
        "--write-csv",
        file.arg(),
        "--json",
    ]);
    let bytes = wrote["bytes"].as_u64().expect("bytes written");
    assert_eq!(
        bytes,
        std::fs::metadata(&file.0).expect("file written").len()
    );
    let text = std::fs::read_to_string(&file.0).expect("read the file");
    assert_eq!(text.lines().count(), 2501, "a header and one line per row");
    assert_eq!(
        text.lines().next(),
        Some("reading_1,reading_2,reading_3,reading_4,energy")
    );

    let generated = run_json(&[
        "--rows",
        "2500",
        "--cols",
        "4",
        "--block-rows",
        "300",
        "--json",
    ]);
    let read = run_json(&["--csv", file.arg(), "--block-rows", "300", "--json"]);
    assert_eq!(generated["coefficients"], read["coefficients"]);
    assert_eq!(generated["intercept"], read["intercept"]);
    assert_eq!(read["rows"], 2500);
    // The key is always there: a count where the system reports it, else null.
    let resident = &read["peak_resident_bytes"];
    assert!(resident.is_null() || resident.as_u64().is_some_and(|r| r > 0));

    // Writing needs the shape.
    let out = run(&["--write-csv", file.arg(), "--rows", "10"]);
    assert_eq!(out.status.code(), Some(2));
}
