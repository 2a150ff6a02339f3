//! One condition number everywhere: every closed-form solver, ridge route
//! and inference report the 2-norm condition number of the weighted,
//! centered design after power-of-two column scaling. Checked against
//! nalgebra's SVD of that matrix, formed here independently.

mod common;

use common::gen;
use leastline::ridge::{Ridge, RidgeFactorization};
use leastline::{Cholesky, Problem, Qr, Solver, Svd};
use nalgebra::DMatrix;
use ndarray::{Array1, Array2};

/// The power of two at or below `|v|` (normal `v`): the exponent bits only.
fn pow2_below(v: f64) -> f64 {
    f64::from_bits(v.abs().to_bits() & 0x7ff0_0000_0000_0000)
}

/// The singular values (nalgebra) of `sqrt(w_i) (x_ij - m_j) / 2^e_j`, with
/// `m_j` the weighted mean (0 without intercept) and `2^e_j` the power of
/// two at or below the column's largest centered magnitude; rows of weight
/// zero left out.
fn scaled_singular_values(x: &Array2<f64>, w: &Array1<f64>, intercept: bool) -> Vec<f64> {
    let (n, p) = x.dim();
    let sw: f64 = w.sum();
    let means: Vec<f64> = (0..p)
        .map(|j| {
            if intercept {
                (0..n).map(|i| w[i] * x[(i, j)]).sum::<f64>() / sw
            } else {
                0.0
            }
        })
        .collect();
    let scales: Vec<f64> = (0..p)
        .map(|j| {
            let big = (0..n)
                .filter(|&i| w[i] > 0.0)
                .map(|i| (x[(i, j)] - means[j]).abs())
                .fold(0.0, f64::max);
            pow2_below(big)
        })
        .collect();
    let m = DMatrix::from_fn(n, p, |i, j| {
        w[i].sqrt() * (x[(i, j)] - means[j]) / scales[j]
    });
    let mut s: Vec<f64> = m
        .svd(false, false)
        .singular_values
        .iter()
        .copied()
        .collect();
    s.sort_by(|a, b| b.total_cmp(a));
    s
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs()
}

/// All closed-form solvers and every ridge route with rows >= columns give
/// the same number, nalgebra's `s_max / s_min`, and inference and its
/// summary show it too.
#[test]
fn every_closed_form_reports_the_same_condition_number() {
    let mut rng = gen::rng(2024);
    for case in 0..common::cases(24) as u64 {
        let p = 1 + (case as usize % 5);
        let n = p + 6 + (case as usize * 3) % 17;
        let mut x = gen::normal_matrix(&mut rng, n, p);
        // Columns of different offsets and spreads; some correlation.
        for j in 0..p {
            let spread = (1.5 * gen::normal(&mut rng)).exp();
            let offset = 20.0 * gen::normal(&mut rng);
            for i in 0..n {
                let mixed = if j > 0 {
                    x[(i, j)] + 0.7 * x[(i, 0)]
                } else {
                    x[(i, j)]
                };
                x[(i, j)] = offset + spread * mixed;
            }
        }
        let y = gen::normal_vector(&mut rng, n);
        let intercept = case % 3 != 0;
        let weighted = case % 2 == 0;
        let w = if weighted {
            gen::weights(&mut rng, n)
        } else {
            Array1::ones(n)
        };
        let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
        if weighted {
            b = b.with_weights(w.view());
        }
        let problem = b.build().unwrap();
        let s = scaled_singular_values(&x, &w, intercept);
        let reference = s[0] / s[p - 1];
        let solvers: Vec<Box<dyn Solver>> = vec![
            Box::new(Qr::new()),
            Box::new(Qr::refined()),
            Box::new(Cholesky::new()),
            Box::new(Svd::new()),
            Box::new(Ridge::new(0.5)),
            Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Cholesky)),
            Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::AugmentedQr)),
            Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Svd)),
            Box::new(
                Ridge::new(0.5)
                    .with_standardize(true)
                    .with_factorization(RidgeFactorization::Svd),
            ),
            Box::new(Ridge::new(0.0)),
        ];
        let qr = Qr::new().fit(&problem).unwrap().report.condition.unwrap();
        // Gram-based values resolve about eps * cond^2 relative.
        let gram_tol = 1e-10_f64.max(64.0 * f64::EPSILON * reference * reference);
        assert!(
            close(qr, reference, 1e-10),
            "case {case}: qr {qr} vs nalgebra {reference}"
        );
        for solver in &solvers {
            let fit = solver.fit(&problem).unwrap();
            let c = fit.report.condition.unwrap();
            assert!(
                close(c, qr, gram_tol),
                "case {case} {} ({:?}): {c} vs qr {qr}",
                solver.name(),
                fit.report.factorization
            );
        }
        let inf = Qr::new()
            .fit(&problem)
            .unwrap()
            .inference(&problem)
            .unwrap();
        let ci = inf.collinearity.condition_number;
        assert!(close(ci, qr, 1e-12), "case {case}: inference {ci} vs {qr}");
        // The summary prints that number (six significant digits).
        let text = inf.to_string();
        let line = text
            .lines()
            .find(|l| l.contains("condition "))
            .expect("summary has a condition line");
        let printed: f64 = line
            .split("condition ")
            .nth(1)
            .and_then(|rest| rest.split_whitespace().next())
            .and_then(|v| v.parse().ok())
            .expect("a number after 'condition'");
        assert!(
            close(printed, qr, 1e-5),
            "case {case}: printed {printed} vs {qr}\n{line}"
        );
    }
}

/// A rank-deficient design (a column that is the sum of two others): the
/// SVD solver and every ridge route report the ratio over the retained
/// singular values, the same number, finite.
#[test]
fn rank_deficient_designs_use_the_retained_singular_values() {
    let mut rng = gen::rng(99);
    let n = 30;
    let mut x = gen::normal_matrix(&mut rng, n, 4);
    for i in 0..n {
        // Exact in binary: small integers plus halves.
        x[(i, 0)] = (x[(i, 0)] * 8.0).round() / 2.0;
        x[(i, 1)] = (x[(i, 1)] * 8.0).round() / 2.0;
        x[(i, 3)] = x[(i, 0)] + x[(i, 1)];
    }
    let y = gen::normal_vector(&mut rng, n);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let svd = Svd::new().fit(&problem).unwrap();
    assert_eq!(svd.report.rank, Some(3));
    let c = svd.report.condition.unwrap();
    let s = scaled_singular_values(&x, &Array1::ones(n), true);
    assert!(s[3] < 1e-12 * s[0], "{s:?}");
    assert!(close(c, s[0] / s[2], 1e-10), "{c} vs {}", s[0] / s[2]);
    for factorization in [
        RidgeFactorization::Cholesky,
        RidgeFactorization::AugmentedQr,
        RidgeFactorization::Svd,
        RidgeFactorization::ByShape,
    ] {
        let fit = Ridge::new(1.0)
            .with_factorization(factorization)
            .fit(&problem)
            .unwrap();
        let r = fit.report.condition.unwrap();
        assert!(close(r, c, 1e-8), "{factorization:?}: {r} vs {c}");
    }
}

/// Ridge through the dual (row) system factors no `p x p` matrix of the
/// design and says so; gradient solvers factor nothing.
#[test]
fn dual_ridge_and_gradient_report_none() {
    let mut rng = gen::rng(5);
    let x = gen::normal_matrix(&mut rng, 6, 10);
    let y = gen::normal_vector(&mut rng, 6);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Ridge::new(1.0)
        .with_factorization(RidgeFactorization::Dual)
        .fit(&problem)
        .unwrap();
    assert_eq!(fit.report.condition, None);
    let fit = leastline::GradientDescent::new().fit(&problem);
    if let Ok(fit) = fit {
        assert_eq!(fit.report.condition, None);
    }
}
