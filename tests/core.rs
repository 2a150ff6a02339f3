//! Closed-form solvers: recovery, agreement, identities, rank deficiency,
//! validation errors, memory layouts and extreme scales.

mod common;

use common::gen::{self, known, rel_diff};
use leastline::{Cholesky, Error, Input, Problem, Qr, Solver, Svd};
use ndarray::{array, s, Array1, Array2, Axis, ShapeBuilder};
use proptest::prelude::*;

fn spread(v: ndarray::ArrayView1<'_, f64>) -> f64 {
    let m = v.mean().unwrap_or(0.0);
    v.iter()
        .map(|x| (x - m).powi(2))
        .sum::<f64>()
        .sqrt()
        .max(v.iter().map(|x| x.abs()).fold(0.0, f64::max) * 1e-300)
}

fn solvers() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(Qr::new()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
    ]
}

#[test]
fn solvers_are_plain_settings_values() {
    fn plain<T: Send + Sync + Clone + std::fmt::Debug + Default>() {}
    plain::<Qr>();
    plain::<Cholesky>();
    plain::<Svd>();
    let names: Vec<String> = solvers().iter().map(|s| s.name().to_string()).collect();
    assert_eq!(names, ["qr", "cholesky", "svd"]);
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(48)))]

    /// Identity: data generated exactly from known coefficients are recovered
    /// to near machine precision, with and without intercept and weights.
    #[test]
    fn noise_free_recovery(seed in 0u64..1_000_000, p in 1usize..7, extra in 1usize..40,
                           intercept in any::<bool>(), weighted in any::<bool>()) {
        let n = p + 1 + extra;
        let k = known(seed, n, p, intercept);
        let w = gen::weights(&mut gen::rng(seed ^ 0xabc), n);
        let mut b = Problem::builder(k.x.view(), k.y.view()).with_intercept(intercept);
        if weighted { b = b.with_weights(w.view()); }
        let problem = b.build().unwrap();
        for solver in solvers() {
            let fit = solver.fit(&problem).unwrap();
            let cond = fit.report.condition.unwrap();
            // QR and SVD keep cond(X); the normal equations square it.
            let tol = if solver.name() == "cholesky" { 1e3 * cond * cond } else { 1e3 * cond } * f64::EPSILON;
            // Each coefficient's error measured in units of its column's share
            // of the target: |db_j| * spread(x_j) / spread(y).
            let ys = spread(k.y.view());
            for j in 0..p {
                let err = (fit.model.coefficients()[j] - k.beta[j]).abs() * spread(k.x.column(j)) / ys;
                prop_assert!(err < tol.max(1e-13), "{}: column {j} error {err:e}, tolerance {tol:e}", solver.name());
            }
            let fitted = fit.model.predict(k.x.view()).unwrap();
            prop_assert!(rel_diff(fitted.as_slice().unwrap(), k.y.as_slice().unwrap()) < 10.0 * tol.max(1e-13));
            prop_assert_eq!(fit.report.rank, Some(p));
        }
    }

    /// The three solvers agree on noisy, well-conditioned problems within a
    /// tolerance set by the condition number.
    #[test]
    fn solvers_agree(seed in 0u64..1_000_000, p in 1usize..8, extra in 2usize..50, weighted in any::<bool>()) {
        let n = p + extra;
        let mut r = gen::rng(seed);
        let x = gen::normal_matrix(&mut r, n, p);
        let y = gen::normal_vector(&mut r, n);
        let w = gen::weights(&mut r, n);
        let mut b = Problem::builder(x.view(), y.view());
        if weighted { b = b.with_weights(w.view()); }
        let problem = b.build().unwrap();
        let fits: Vec<_> = solvers().iter().map(|s| s.fit(&problem).unwrap()).collect();
        let cond = fits[0].report.condition.unwrap();
        let reference = fits[0].model.coefficients().to_vec();
        let norm = reference.iter().map(|v| v * v).sum::<f64>().sqrt().max(1.0);
        for fit in &fits[1..] {
            let diff: f64 = fit.model.coefficients().iter().zip(&reference).map(|(a, b)| (a - b).powi(2)).sum::<f64>().sqrt();
            prop_assert!(diff <= 1e3 * cond * cond * f64::EPSILON * norm, "{} differs by {diff:e} (cond {cond:e})", fit.report.solver);
        }
    }

    /// Identity: the residuals are orthogonal to every column (weighted), and
    /// with an intercept they sum to zero.
    #[test]
    fn residuals_are_orthogonal(seed in 0u64..1_000_000, p in 1usize..6, extra in 2usize..40, intercept in any::<bool>()) {
        let n = p + extra;
        let mut r = gen::rng(seed);
        let x = gen::normal_matrix(&mut r, n, p);
        let y = gen::normal_vector(&mut r, n);
        let w = gen::weights(&mut r, n);
        let problem = Problem::builder(x.view(), y.view()).with_weights(w.view()).with_intercept(intercept).build().unwrap();
        for solver in solvers() {
            let fit = solver.fit(&problem).unwrap();
            let res = &y - &fit.model.predict(x.view()).unwrap();
            let wr = &res * &w;
            let rnorm = (&wr * &res).sum().sqrt();
            for j in 0..p {
                let col = x.column(j);
                let cn = (&col * &col * &w).sum().sqrt();
                prop_assert!(wr.dot(&col).abs() <= 1e3 * f64::EPSILON * rnorm.max(1.0) * cn * (n as f64));
            }
            if intercept {
                prop_assert!(wr.sum().abs() <= 1e3 * f64::EPSILON * rnorm.max(1.0) * (n as f64));
            }
            let rss: f64 = (&wr * &res).sum();
            prop_assert!((rss - fit.report.residual_sum_of_squares).abs() <= 1e-10 * rss.max(1e-300));
        }
    }

    /// Identity: without an intercept, weighting a row by w equals scaling it
    /// (and its target) by sqrt(w).
    #[test]
    fn weights_equal_row_scaling(seed in 0u64..1_000_000, p in 1usize..6, extra in 2usize..30) {
        let n = p + extra;
        let mut r = gen::rng(seed);
        let x = gen::normal_matrix(&mut r, n, p);
        let y = gen::normal_vector(&mut r, n);
        let w = gen::weights(&mut r, n);
        let sw = w.mapv(f64::sqrt);
        let xs = &x * &sw.view().insert_axis(Axis(1));
        let ys = &y * &sw;
        let weighted = Problem::builder(x.view(), y.view()).with_weights(w.view()).with_intercept(false).build().unwrap();
        let scaled = Problem::builder(xs.view(), ys.view()).with_intercept(false).build().unwrap();
        for solver in solvers() {
            let a = solver.fit(&weighted).unwrap();
            let b = solver.fit(&scaled).unwrap();
            prop_assert!(rel_diff(a.model.coefficients().as_slice().unwrap(), b.model.coefficients().as_slice().unwrap()) < 1e-10);
        }
    }
}

/// Identity: weight 2 on a row equals that row duplicated; weight 0 equals
/// dropping the row.
#[test]
fn integer_weights_equal_duplication_and_zero_weight_equals_dropping() {
    let mut r = gen::rng(7);
    let (n, p) = (30, 4);
    let x = gen::normal_matrix(&mut r, n, p);
    let y = gen::normal_vector(&mut r, n);
    // Row 5 twice, row 9 dropped.
    let mut w = Array1::<f64>::ones(n);
    w[5] = 2.0;
    w[9] = 0.0;
    let mut rows: Vec<usize> = (0..n).filter(|&i| i != 9).collect();
    rows.push(5);
    let xd = x.select(Axis(0), &rows);
    let yd = y.select(Axis(0), &rows);
    let weighted = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let expanded = Problem::new(xd.view(), yd.view()).unwrap();
    assert_eq!(weighted.usable_rows(), n - 1);
    for solver in solvers() {
        let a = solver.fit(&weighted).unwrap();
        let b = solver.fit(&expanded).unwrap();
        assert!(
            rel_diff(
                a.model.coefficients().as_slice().unwrap(),
                b.model.coefficients().as_slice().unwrap()
            ) < 1e-12
        );
        assert!((a.model.intercept() - b.model.intercept()).abs() < 1e-12);
        let (ra, rb) = (
            a.report.residual_sum_of_squares,
            b.report.residual_sum_of_squares,
        );
        assert!((ra - rb).abs() < 1e-12 * rb);
        // Weights are precision weights: the residual degrees of freedom
        // count rows with non-zero weight (29 here), not the sum of weights.
        assert_eq!(a.report.residual_df.map(|d| d + 1), b.report.residual_df);
    }
}

fn rank_deficient_case(x: &Array2<f64>, y: &Array1<f64>, intercept: bool, expected: &[usize]) {
    let problem = Problem::builder(x.view(), y.view())
        .with_intercept(intercept)
        .build()
        .unwrap();
    for solver in [&Qr::new() as &dyn Solver, &Cholesky::new()] {
        match solver.fit(&problem) {
            Err(Error::RankDeficient {
                dependent,
                rank,
                columns,
                ..
            }) => {
                assert_eq!(dependent, expected, "{}", solver.name());
                assert_eq!(columns, x.ncols());
                assert_eq!(rank, x.ncols() - expected.len());
            }
            other => panic!("{}: expected RankDeficient, got {other:?}", solver.name()),
        }
    }
}

#[test]
fn duplicated_and_constant_columns_are_named() {
    let mut r = gen::rng(11);
    let n = 40;
    let mut x = gen::normal_matrix(&mut r, n, 5);
    let y = gen::normal_vector(&mut r, n);
    // Column 3 duplicates column 1.
    let c1 = x.column(1).to_owned();
    x.column_mut(3).assign(&c1);
    rank_deficient_case(&x, &y, true, &[3]);
    rank_deficient_case(&x, &y, false, &[3]);
    // Column 2 constant beside the intercept (a value that is not a power of two).
    let mut xc = gen::normal_matrix(&mut r, n, 4);
    xc.column_mut(2).fill(3.7);
    rank_deficient_case(&xc, &y, true, &[2]);
    // Without an intercept a constant column is an ordinary regressor.
    let problem = Problem::builder(xc.view(), y.view())
        .with_intercept(false)
        .build()
        .unwrap();
    assert!(Qr::new().fit(&problem).is_ok());
    // Column 4 = column 0 + 2 * column 1 (a combination, not a copy).
    let mut xs = gen::normal_matrix(&mut r, n, 5);
    let comb = &xs.column(0) + &(&xs.column(1) * 2.0);
    xs.column_mut(4).assign(&comb);
    rank_deficient_case(&xs, &y, true, &[4]);
}

/// Pseudo-inverse identity: on a rank-deficient design the SVD solver
/// returns `pinv(Xc) yc` of the centered problem, computed independently
/// with nalgebra.
#[test]
fn svd_gives_the_minimum_norm_solution() {
    let mut r = gen::rng(12);
    let n = 30;
    let mut x = gen::normal_matrix(&mut r, n, 5);
    let comb = &x.column(0) * 3.0 - x.column(2);
    x.column_mut(4).assign(&comb);
    let c1 = x.column(1).to_owned();
    x.column_mut(3).assign(&(&c1 * 0.5));
    let y = gen::normal_vector(&mut r, n);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Svd::new().fit(&problem).unwrap();
    assert_eq!(fit.report.rank, Some(3));
    let means = x.mean_axis(Axis(0)).unwrap();
    let ym = y.mean().unwrap();
    let xc = nalgebra::DMatrix::from_fn(n, 5, |i, j| x[[i, j]] - means[j]);
    let yc = nalgebra::DVector::from_fn(n, |i, _| y[i] - ym);
    let pinv = xc.pseudo_inverse(1e-10).unwrap();
    let expected = pinv * yc;
    let got = fit.model.coefficients();
    for j in 0..5 {
        assert!(
            (got[j] - expected[j]).abs() < 1e-10,
            "column {j}: {} vs {}",
            got[j],
            expected[j]
        );
    }
    // And with a constant column beside the intercept: its coefficient is 0.
    let mut xk = x.clone();
    xk.column_mut(4).fill(-2.5);
    let problem = Problem::new(xk.view(), y.view()).unwrap();
    let fit = Svd::new().fit(&problem).unwrap();
    assert_eq!(fit.model.coefficients()[4], 0.0);
    assert_eq!(fit.report.rank, Some(3));
}

#[test]
fn every_validation_error_names_what_and_where() {
    let x = array![[1.0, 2.0], [3.0, 4.0], [5.0, 7.0], [1.0, 0.0]];
    let y = array![1.0, 2.0, 3.0, 4.0];
    let short = array![1.0, 2.0, 3.0];
    assert_eq!(
        Problem::new(x.view(), short.view()).unwrap_err(),
        Error::LengthMismatch {
            input: Input::Target,
            design_rows: 4,
            len: 3
        }
    );
    assert_eq!(
        Problem::builder(x.view(), y.view())
            .with_weights(short.view())
            .build()
            .unwrap_err(),
        Error::LengthMismatch {
            input: Input::Weights,
            design_rows: 4,
            len: 3
        }
    );
    let empty = Array2::<f64>::zeros((0, 2));
    let empty_y = Array1::<f64>::zeros(0);
    assert_eq!(
        Problem::new(empty.view(), empty_y.view()).unwrap_err(),
        Error::NoRows
    );
    let no_cols = Array2::<f64>::zeros((4, 0));
    assert_eq!(
        Problem::builder(no_cols.view(), y.view())
            .with_intercept(false)
            .build()
            .unwrap_err(),
        Error::NothingToFit
    );
    let mut bad = x.clone();
    bad[[2, 1]] = f64::NAN;
    assert!(matches!(
        Problem::new(bad.view(), y.view()).unwrap_err(),
        Error::NonFinite {
            input: Input::Design,
            row: 2,
            column: Some(1),
            ..
        }
    ));
    bad[[2, 1]] = 1.0;
    bad[[3, 0]] = f64::INFINITY;
    assert!(matches!(
        Problem::new(bad.view(), y.view()).unwrap_err(),
        Error::NonFinite {
            input: Input::Design,
            row: 3,
            column: Some(0),
            ..
        }
    ));
    let mut bad_y = y.clone();
    bad_y[1] = f64::NEG_INFINITY;
    assert!(matches!(
        Problem::new(x.view(), bad_y.view()).unwrap_err(),
        Error::NonFinite {
            input: Input::Target,
            row: 1,
            column: None,
            ..
        }
    ));
    let w = array![1.0, -0.5, 1.0, 1.0];
    assert_eq!(
        Problem::builder(x.view(), y.view())
            .with_weights(w.view())
            .build()
            .unwrap_err(),
        Error::InvalidWeight {
            row: 1,
            value: -0.5
        }
    );
    let w = array![1.0, 1.0, f64::NAN, 1.0];
    assert!(matches!(
        Problem::builder(x.view(), y.view())
            .with_weights(w.view())
            .build()
            .unwrap_err(),
        Error::InvalidWeight { row: 2, .. }
    ));
    let w = array![0.0, 0.0, 0.0, 0.0];
    assert_eq!(
        Problem::builder(x.view(), y.view())
            .with_weights(w.view())
            .build()
            .unwrap_err(),
        Error::AllWeightsZero { rows: 4 }
    );
    // Two usable rows cannot determine three parameters (Svd returns the
    // minimum-norm solution instead).
    let w = array![1.0, 0.0, 0.0, 1.0];
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    // Usable rows (1, 2) -> 1 and (1, 0) -> 4: the centered rows are
    // (0, 1) and (0, -1), so the minimum-norm slopes are (0, -1.5) and the
    // intercept 2.5 - (1, 1) . (0, -1.5) = 4, fitting both rows exactly.
    let fit = Svd::new().fit(&problem).unwrap();
    assert_eq!(fit.report.rank, Some(1));
    assert_eq!(fit.report.residual_df, Some(0));
    let b = fit.model.coefficients();
    assert!(b[0].abs() < 1e-15 && (b[1] + 1.5).abs() < 1e-14, "{b}");
    assert!((fit.model.intercept() - 4.0).abs() < 1e-14);
    for solver in solvers().iter().filter(|s| s.name() != "svd") {
        assert_eq!(
            solver.fit(&problem).unwrap_err(),
            Error::TooFewRows {
                usable_rows: 2,
                parameters: 3
            },
            "{}",
            solver.name()
        );
    }
    // Bad settings are errors at fit time.
    let problem = Problem::new(x.view(), y.view()).unwrap();
    assert!(matches!(
        Qr::new()
            .with_rank_tolerance(-1.0)
            .fit(&problem)
            .unwrap_err(),
        Error::InvalidParameter {
            name: "rank_tolerance",
            ..
        }
    ));
    assert!(matches!(
        Svd::new()
            .with_rank_tolerance(f64::NAN)
            .fit(&problem)
            .unwrap_err(),
        Error::InvalidParameter {
            name: "rank_tolerance",
            ..
        }
    ));
    assert!(matches!(
        Cholesky::new()
            .with_min_digits(f64::INFINITY)
            .fit(&problem)
            .unwrap_err(),
        Error::InvalidParameter {
            name: "min_digits",
            ..
        }
    ));
    // Prediction checks its input too.
    let fit = Qr::new().fit(&problem).unwrap();
    assert_eq!(
        fit.model
            .predict(array![[1.0, 2.0, 3.0]].view())
            .unwrap_err(),
        Error::ColumnCountMismatch {
            expected: 2,
            found: 3
        }
    );
    assert!(matches!(
        fit.model
            .predict(array![[1.0, 2.0], [f64::NAN, 1.0]].view())
            .unwrap_err(),
        Error::NonFinite {
            input: Input::NewDesign,
            row: 1,
            column: Some(0),
            ..
        }
    ));
    assert!(matches!(
        fit.model
            .mean_squared_error(x.view(), short.view())
            .unwrap_err(),
        Error::LengthMismatch {
            input: Input::NewTarget,
            ..
        }
    ));
}

/// The same data in column-major, strided and reversed layouts gives the
/// same fit: the design is read through its strides, never required to be
/// contiguous.
#[test]
fn any_memory_layout() {
    let mut r = gen::rng(21);
    let big = gen::normal_matrix(&mut r, 80, 4);
    let y_big = gen::normal_vector(&mut r, 80);
    let x = big.slice(s![..;2, ..]).to_owned();
    let y = y_big.slice(s![..;2]).to_owned();
    let mut column_major = Array2::<f64>::zeros(x.dim().f());
    column_major.assign(&x);
    assert!(!column_major.is_standard_layout());
    let reversed_x = x.slice(s![..;-1, ..]);
    let reversed_y = y.slice(s![..;-1]);
    for solver in solvers() {
        let base = solver
            .fit(&Problem::new(x.view(), y.view()).unwrap())
            .unwrap();
        let cm = solver
            .fit(&Problem::new(column_major.view(), y.view()).unwrap())
            .unwrap();
        let strided = solver
            .fit(&Problem::new(big.slice(s![..;2, ..]), y_big.slice(s![..;2])).unwrap())
            .unwrap();
        let rev = solver
            .fit(&Problem::new(reversed_x, reversed_y).unwrap())
            .unwrap();
        for other in [&cm, &strided, &rev] {
            assert!(
                rel_diff(
                    other.model.coefficients().as_slice().unwrap(),
                    base.model.coefficients().as_slice().unwrap()
                ) < 1e-13
            );
        }
    }
}

/// Designs with values near 1e+150 and 1e-150 neither overflow nor
/// underflow (a naive Gram product would do both).
#[test]
fn extreme_scales() {
    for scale in [1e150, 1e-150] {
        let k = known(31, 50, 3, true);
        let x = k.x.mapv(|v| v * scale);
        let problem = Problem::new(x.view(), k.y.view()).unwrap();
        for solver in solvers() {
            let fit = solver.fit(&problem).unwrap();
            let got: Vec<f64> = fit.model.coefficients().iter().map(|b| b * scale).collect();
            assert!(
                rel_diff(&got, k.beta.as_slice().unwrap()) < 1e-9,
                "{} at scale {scale:e}",
                solver.name()
            );
            assert!(fit.report.residual_sum_of_squares.is_finite());
        }
    }
}

/// The residual sum of squares keeps its digits when columns carry large
/// offsets: the intercept absorbs an offset exactly, so the RSS must match
/// the RSS of the same design without it.
#[test]
fn large_offsets_keep_the_residual_sum_of_squares() {
    let mut r = gen::rng(41);
    let x = gen::normal_matrix(&mut r, 200, 3);
    let y = gen::normal_vector(&mut r, 200);
    let shifted = x.mapv(|v| v + 1e7);
    let base = Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap();
    for solver in solvers() {
        let fit = solver
            .fit(&Problem::new(shifted.view(), y.view()).unwrap())
            .unwrap();
        let (a, b) = (
            fit.report.residual_sum_of_squares,
            base.report.residual_sum_of_squares,
        );
        assert!((a - b).abs() < 1e-8 * b, "{}: {a} vs {b}", solver.name());
    }
}

#[test]
fn intercept_only_and_tiny_problems() {
    let x = Array2::<f64>::zeros((3, 0));
    let y = array![1.0, 2.0, 6.0];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    for solver in solvers() {
        let fit = solver.fit(&problem).unwrap();
        assert!((fit.model.intercept() - 3.0).abs() < 1e-15);
        assert_eq!(fit.report.residual_df, Some(2));
        assert!((fit.report.residual_sum_of_squares - 14.0).abs() < 1e-12);
    }
    // Exactly determined: two rows, one slope and an intercept.
    let x = array![[1.0], [3.0]];
    let y = array![2.0, 6.0];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    for solver in solvers() {
        let fit = solver.fit(&problem).unwrap();
        assert!((fit.model.coefficients()[0] - 2.0).abs() < 1e-14);
        assert_eq!(fit.report.residual_df, Some(0));
    }
}
