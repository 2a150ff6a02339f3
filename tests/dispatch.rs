//! Every instruction-set level of the crate's own kernels (the x86-64
//! baseline, AVX2 + FMA, AVX-512) gives the same fits.
//!
//! The level is a process-wide setting, so this file is its own test binary
//! and every check that pins a level runs inside one test function. A level
//! this processor cannot run is reported on stderr and skipped; the others
//! are still compared.

mod common;

use common::gen;
use leastline::bench_support::{current_level, fma_loop, force_level, Level};
use leastline::{Cholesky, GradientDescent, Problem, Qr, Ridge, Solver, Svd};
use ndarray::Array1;

/// What one level produced for one problem: every solver's coefficients
/// with the intercept last, and its residual sum of squares.
type Results = Vec<(String, Vec<f64>, f64)>;

fn fit_all(x: &ndarray::Array2<f64>, y: &Array1<f64>, w: Option<&Array1<f64>>) -> Results {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(true);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    let problem = b.build().expect("valid problem");
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(Qr::new()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(0.5)),
        Box::new(
            GradientDescent::new()
                .with_step(0.1)
                .with_max_iterations(25)
                .with_history_stride(0),
        ),
    ];
    solvers
        .iter()
        .map(|s| {
            let fit = s.fit(&problem).expect("fit");
            let mut c = fit.model.coefficients().to_vec();
            c.push(fit.model.intercept());
            (s.name().to_string(), c, fit.report.residual_sum_of_squares)
        })
        .collect()
}

/// Relative difference of `a` from `b`, scaled by the largest of `b`.
fn rel(a: &[f64], b: &[f64]) -> f64 {
    gen::rel_diff(a, b)
}

#[test]
fn every_level_gives_the_same_fits() {
    // 37 columns: a multiple of neither lane count, so the kernels' tails
    // run too; offsets and spreads make centering and scaling matter.
    let known = gen::known(20261203, 3000, 37, true);
    let mut r = gen::rng(7);
    let noise = gen::normal_vector(&mut r, 3000);
    let y = &known.y + &(noise * 0.25);
    let w = gen::weights(&mut r, 3000);

    let best = Level::best();
    assert!(force_level(Some(best)), "the best level is available");
    assert_eq!(current_level(), best);
    let reference = (fit_all(&known.x, &y, None), fit_all(&known.x, &y, Some(&w)));
    // The noise-free problem is recovered at the best level (a check that
    // does not depend on the levels agreeing): known coefficients to 1e-9.
    let exact = fit_all(&known.x, &known.y, None);
    let mut truth = known.beta.to_vec();
    truth.push(known.intercept);
    for (name, c, _) in exact
        .iter()
        .filter(|e| e.0 != "ridge" && e.0 != "gradient-descent")
    {
        assert!(rel(c, &truth) < 1e-9, "{name}: {}", rel(c, &truth));
    }

    for level in Level::ALL {
        if !force_level(Some(level)) {
            eprintln!(
                "level {} is not on this processor: not checked",
                level.name()
            );
            assert!(!level.available());
            continue;
        }
        assert_eq!(current_level(), level);
        let got = (fit_all(&known.x, &y, None), fit_all(&known.x, &y, Some(&w)));
        let mut identical = true;
        for (mine, theirs) in got
            .0
            .iter()
            .zip(&reference.0)
            .chain(got.1.iter().zip(&reference.1))
        {
            assert_eq!(mine.0, theirs.0);
            // Bound: relative 1e-13 of the largest coefficient, and of the
            // residual sum of squares (well-scaled, well-conditioned Gram).
            let d = rel(&mine.1, &theirs.1);
            assert!(
                d <= 1e-13,
                "{} at {}: coefficients differ by {d:e}",
                mine.0,
                level.name()
            );
            let dr = (mine.2 - theirs.2).abs() / theirs.2.abs();
            assert!(
                dr <= 1e-13,
                "{} at {}: rss differs by {dr:e}",
                mine.0,
                level.name()
            );
            identical &= mine.1 == theirs.1 && mine.2 == theirs.2;
        }
        eprintln!(
            "level {}: every fit within 1e-13 of {}; bit-identical: {identical}",
            level.name(),
            best.name()
        );
    }
    assert!(force_level(None));
    assert_eq!(current_level(), best);
}

/// The peak-rate probe at each level: its chain `c <- a c + b` from zero
/// has the closed form `c_N = b (1 - a^N) / (1 - a)`, and its operation
/// count says the vector width the level promises (12 chains of 1, 4 or 8
/// lanes).
#[test]
fn fma_probe_matches_its_closed_form_at_every_level() {
    let (a, b, rounds) = (1.0f64 - 1.0 / 1024.0, 0.5f64, 5000usize);
    let chain = b * (1.0 - a.powi(rounds as i32)) / (1.0 - a);
    for (level, lanes) in [(Level::Scalar, 1.0), (Level::V3, 4.0), (Level::V4, 8.0)] {
        let Some((flops, sum)) = fma_loop(level, rounds) else {
            eprintln!(
                "level {} is not on this processor: not checked",
                level.name()
            );
            assert!(!level.available());
            continue;
        };
        assert_eq!(
            flops,
            2.0 * 12.0 * lanes * rounds as f64,
            "{}",
            level.name()
        );
        let expect = 12.0 * lanes * chain;
        assert!(
            ((sum - expect) / expect).abs() < 1e-11,
            "{}: {sum} against {expect}",
            level.name()
        );
    }
}

/// Every closure handed to `kernels::dispatch` carries `#[inline(always)]`.
/// Without it the closure is compiled once, outside the function that
/// enables the wider instructions, and each `mul_add` in it becomes a call to
/// the software fused multiply-add (this made a gradient iteration 9 times
/// slower than one read of the design). A source scan, as a compiler lint
/// would do it: every `dispatch(` call in `src/` is followed by the
/// attribute before its closure, and so is the closure of every
/// `for_each_row(` call.
#[test]
fn dispatched_closures_are_inlined() {
    fn rust_files(dir: &std::path::Path, out: &mut Vec<std::path::PathBuf>) {
        for entry in std::fs::read_dir(dir).expect("src/ is readable") {
            let path = entry.expect("directory entry").path();
            if path.is_dir() {
                rust_files(&path, out);
            } else if path.extension().is_some_and(|e| e == "rs") {
                out.push(path);
            }
        }
    }
    let mut files = Vec::new();
    rust_files(
        &std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("src"),
        &mut files,
    );
    let mut calls = 0;
    let mut missing = Vec::new();
    for path in &files {
        let text = std::fs::read_to_string(path).expect("source file is readable");
        for (at, _) in text.match_indices("dispatch(") {
            let before = &text[..at];
            // Only calls (`kernels::dispatch(`, `arch().dispatch(` is pulp's
            // own, with a struct whose method is marked), not definitions.
            if !before.ends_with("kernels::") {
                continue;
            }
            calls += 1;
            let after = text[at + "dispatch(".len()..].trim_start();
            if !after.starts_with("#[inline(always)]") {
                let line = before.matches('\n').count() + 1;
                missing.push(format!("{}:{line}", path.display()));
            }
        }
        // A closure handed on inside a dispatched closure (to the row
        // iterator, which calls it from two places) is not inlined either.
        for (at, _) in text.match_indices("for_each_row(") {
            if text[..at].ends_with("fn ") {
                continue;
            }
            calls += 1;
            let call = &text[at..];
            let head = &call[..call.find('|').unwrap_or(call.len())];
            if !head.contains("#[inline(always)]") {
                let line = text[..at].matches('\n').count() + 1;
                missing.push(format!("{}:{line}", path.display()));
            }
        }
    }
    assert!(calls >= 10, "the scan found only {calls} dispatch calls");
    assert!(
        missing.is_empty(),
        "closures without #[inline(always)]: {missing:?}"
    );
}
