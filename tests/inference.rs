//! Inference for fitted models checked against outside references: NIST
//! StRD certified values, published statistical tables, exact identities,
//! independent formulas, and a seeded Monte Carlo of interval coverage.
#![allow(clippy::needless_range_loop)]

mod common;

use common::nist::{self, lre};
use leastline::inference::{
    fisher_f_quantile, fisher_f_upper_quantile, student_t_quantile, CovarianceKind, Inference,
    InferenceOptions, InferenceRefusal,
};
use leastline::{Error, Problem, Qr, Solver, Svd};
use ndarray::{array, Array1, Array2};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use statrs::distribution::{Continuous, Normal};

/// Digits we require against NIST's certified values.
const MIN_LRE: f64 = 9.0;

/// Fits a NIST StRD dataset with the QR solver and returns the LREs of the
/// standard deviations of the estimates (NIST order: B0 first when the
/// model has one), the residual standard deviation, R² and F.
fn nist_lres(name: &str) -> (Vec<f64>, f64, f64, f64) {
    let d = nist::load(name);
    let problem = Problem::builder(d.x.view(), d.y.view())
        .with_intercept(d.intercept)
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inf = Inference::new(&problem, &fit).unwrap();
    // NIST lists B0 (the intercept) first; our covariance puts it last.
    let ours: Vec<f64> = inf
        .intercept
        .iter()
        .chain(inf.coefficients.iter())
        .map(|e| e.std_error)
        .collect();
    assert_eq!(ours.len(), d.certified.std_devs().len());
    let sd = ours
        .iter()
        .zip(d.certified.std_devs())
        .map(|(&a, c)| lre(a, c))
        .collect();
    let f = inf.goodness.overall.unwrap().statistic;
    (
        sd,
        lre(inf.residual_sd, d.certified.residual_sd),
        lre(inf.goodness.r_squared, d.certified.r_squared),
        lre(f, d.certified.f_statistic),
    )
}

fn check_nist(name: &str) {
    let (sd, rsd, r2, f) = nist_lres(name);
    println!("{name}: LRE sd {sd:.1?}, residual sd {rsd:.1}, R^2 {r2:.1}, F {f:.1}");
    for (i, v) in sd.iter().enumerate() {
        assert!(*v >= MIN_LRE, "{name}: sd of B{i}: LRE {v:.2}");
    }
    assert!(rsd >= MIN_LRE, "{name}: residual sd LRE {rsd:.2}");
    assert!(r2 >= MIN_LRE, "{name}: R^2 LRE {r2:.2}");
    assert!(f >= MIN_LRE, "{name}: F LRE {f:.2}");
}

/// NIST ITL StRD, file Norris.dat: certified standard deviations of B0, B1,
/// residual standard deviation, R-squared and F statistic.
#[test]
fn nist_norris_certified_inference() {
    check_nist("Norris");
}

/// NIST ITL StRD, file Pontius.dat (quadratic in x up to 3e6: badly scaled).
#[test]
fn nist_pontius_certified_inference() {
    check_nist("Pontius");
}

/// NIST ITL StRD, file NoInt1.dat (no intercept). NIST's R-squared and F
/// for this model are *uncentered* (sums of squares about zero), which is
/// the definition we use without an intercept (`goodness.centered == false`).
#[test]
fn nist_noint1_certified_inference() {
    check_nist("NoInt1");
    let d = nist::load("NoInt1");
    let problem = Problem::builder(d.x.view(), d.y.view())
        .with_intercept(false)
        .build()
        .unwrap();
    let inf = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap();
    assert!(!inf.goodness.centered);
    // NIST ITL StRD NoInt1.dat: certified regression sum of squares (uncentered).
    assert!(
        lre(
            inf.goodness.regression_sum_of_squares,
            d.certified.ss_regression
        ) >= MIN_LRE
    );
}

/// NIST ITL StRD, file NoInt2.dat (no intercept, three rows). R-squared and
/// F uncentered, as for NoInt1.
#[test]
fn nist_noint2_certified_inference() {
    check_nist("NoInt2");
}

/// NIST ITL StRD, file Longley.dat (six strongly collinear predictors).
#[test]
fn nist_longley_certified_inference() {
    check_nist("Longley");
}

/// The other closed-form solvers give the same inference on Longley
/// (NIST ITL StRD, file Longley.dat), since it is computed from the data.
#[test]
fn inference_does_not_depend_on_the_solver() {
    let d = nist::load("Longley");
    let problem = Problem::new(d.x.view(), d.y.view()).unwrap();
    let svd = Svd::new().fit(&problem).unwrap();
    let inf = Inference::new(&problem, &svd).unwrap();
    for (e, (_, sd)) in inf.coefficients.iter().zip(d.certified.coefficients.iter()) {
        assert!(lre(e.std_error, *sd) >= MIN_LRE);
    }
}

// ---------------------------------------------------------------------------
// Distributions against a printed table and exact identities.

/// Critical values of Student's t from NIST/SEMATECH e-Handbook of
/// Statistical Methods, section 1.3.6.7.2, "Critical Values of the
/// Student's t Distribution" (upper-tail probabilities 0.05, 0.025, 0.01
/// and 0.005, i.e. cumulative probabilities 0.95 to 0.995; the
/// df = infinity row is the normal limit), printed to three decimals. The
/// whole table is checked in `tests/distributions.rs`; these entries are
/// the ones a 90 to 99% interval uses. We require agreement to half a unit
/// in the last printed digit.
#[test]
fn t_critical_values_match_the_printed_table() {
    let table = [
        // (cumulative probability, df, NIST table entry)
        (0.975, 1.0, 12.706),
        (0.975, 10.0, 2.228),
        (0.95, 10.0, 1.812),
        (0.95, 5.0, 2.015),
        (0.99, 15.0, 2.602),
        (0.995, 20.0, 2.845),
        (0.975, 30.0, 2.042),
        (0.975, f64::INFINITY, 1.960),
        (0.995, f64::INFINITY, 2.576),
    ];
    for (prob, df, printed) in table {
        let t = student_t_quantile(prob, df).unwrap();
        assert!(
            (t - printed).abs() <= 5e-4 + 1e-12,
            "t({prob}; {df}) = {t}, table {printed}"
        );
    }
}

/// `P(F <= f)` for F with `d1` and an even `d2 = 2m` degrees of freedom, as
/// a finite sum of positive terms: with `x = d1 f / (d1 f + d2)` and
/// `a = d1 / 2`, `P(F <= f) = I_x(a, m) = x^a sum_{k<m} (a)_k / k! (1 - x)^k`
/// (`(a)_k` the rising factorial). Derivation: call the sum `S(x)`; `S(0) =
/// 0`, and with `u = 1 - x`, `c_k = (a)_k / k!` and `(a + k) c_k = (k + 1)
/// c_(k+1)`, `S'(x) = x^(a-1) sum_{k<m} [(k + 1) c_(k+1) u^k - k c_k
/// u^(k-1)]`, which telescopes to `m c_m x^(a-1) u^(m-1) = x^(a-1) u^(m-1) /
/// B(a, m)`, the beta density; so `S = I_x(a, m)`.
fn f_cdf_even_denominator(f: f64, d1: f64, m: u32) -> f64 {
    let x = d1 * f / (d1 * f + 2.0 * f64::from(m));
    let (a, u) = (0.5 * d1, 1.0 - x);
    let (mut term, mut sum) = (1.0, 0.0);
    for k in 0..m {
        sum += term;
        let k = f64::from(k);
        term *= (a + k) / (k + 1.0) * u;
    }
    x.powf(a) * sum
}

/// Upper critical values of F, checked against exact forms (no table): the
/// finite sum above (every denominator here is even), the closed form for
/// two numerator degrees of freedom, `P(F > f) = (1 + 2 f / n)^(-n/2)`, so
/// `f = (n / 2) (alpha^(-2/n) - 1)`, and `F(1, n) = t(n)^2`, whose critical
/// value is the square of the two-sided t entry of NIST/SEMATECH
/// e-Handbook of Statistical Methods, section 1.3.6.7.2 (three decimals,
/// so the square is known to about `2 t 5e-4`).
#[test]
fn f_critical_values_satisfy_exact_forms() {
    let cases = [
        // (cumulative probability, d1, d2)
        (0.95, 1.0, 10u32),
        (0.95, 2.0, 10),
        (0.95, 4.0, 12),
        (0.95, 5.0, 20),
        (0.95, 3.0, 30),
        (0.99, 1.0, 10),
        (0.99, 2.0, 20),
        (0.9, 7.0, 4),
        (0.999, 3.0, 2),
    ];
    for (prob, d1, d2) in cases {
        let f = fisher_f_quantile(prob, d1, f64::from(d2)).unwrap();
        let back = f_cdf_even_denominator(f, d1, d2 / 2);
        assert!(
            (back - prob).abs() <= 1e-13,
            "F({prob}; {d1}, {d2}) = {f}: finite sum gives {back}"
        );
    }
    for (alpha, n) in [(0.05, 10.0), (0.01, 20.0), (0.05, 7.0), (1e-6, 3.0)] {
        let f = fisher_f_upper_quantile(alpha, 2.0, n).unwrap();
        let exact = 0.5 * n * (f64::powf(alpha, -2.0 / n) - 1.0);
        assert!(
            (f - exact).abs() <= 1e-12 * exact,
            "F(2, {n}) at {alpha}: {f} vs {exact}"
        );
    }
    // (upper-tail alpha of F, n, NIST two-sided t entry at alpha / 2 with n df)
    for (alpha, n, t) in [
        (0.05, 10.0, 2.228),
        (0.01, 10.0, 3.169),
        (0.05, 30.0, 2.042),
    ] {
        let f = fisher_f_upper_quantile(alpha, 1.0, n).unwrap();
        assert!(
            (f - t * t).abs() <= 2.0 * t * 5e-4 + 1e-12,
            "F(1, {n}) at {alpha}: {f} vs {}",
            t * t
        );
    }
}

/// Exact identities: t with 1 df is the Cauchy distribution,
/// `q(p) = tan(pi (p - 1/2))`; with 2 df, `q(p) = (2p - 1) / sqrt(2 p (1 - p))`;
/// and the F(1, v) quantile at p is the square of the t(v) quantile at (1 + p) / 2.
#[test]
fn quantiles_satisfy_exact_identities() {
    for p in [0.6, 0.75, 0.9, 0.975, 0.999] {
        let cauchy = (std::f64::consts::PI * (p - 0.5)).tan();
        assert!((student_t_quantile(p, 1.0).unwrap() - cauchy).abs() <= 1e-9 * cauchy.abs());
        let two = (2.0 * p - 1.0) / (2.0 * p * (1.0 - p)).sqrt();
        assert!((student_t_quantile(p, 2.0).unwrap() - two).abs() <= 1e-9 * two.abs());
        for v in [3.0, 8.0, 25.0] {
            let t = student_t_quantile(0.5 + 0.5 * p, v).unwrap();
            let f = fisher_f_quantile(p, 1.0, v).unwrap();
            assert!(
                (f - t * t).abs() <= 1e-8 * f,
                "p {p}, v {v}: {f} vs {}",
                t * t
            );
        }
    }
}

#[test]
fn quantile_arguments_are_checked() {
    assert!(matches!(
        student_t_quantile(1.0, 5.0),
        Err(Error::InvalidParameter { .. })
    ));
    assert!(matches!(
        student_t_quantile(0.5, 0.0),
        Err(Error::InvalidParameter { .. })
    ));
    assert!(matches!(
        fisher_f_quantile(0.9, 1.0, f64::NAN),
        Err(Error::InvalidParameter { .. })
    ));
    assert!(matches!(
        fisher_f_quantile(f64::NAN, 1.0, 2.0),
        Err(Error::InvalidParameter { .. })
    ));
}

// ---------------------------------------------------------------------------
// Estimates, p-values and goodness of fit against independent formulas.

/// A small maintenance data set (invented): hours of machine downtime per
/// month against machine age (years) and load (thousand cycles).
fn downtime() -> (Array2<f64>, Array1<f64>) {
    let x = array![
        [1.0, 3.2],
        [2.0, 2.9],
        [3.0, 4.1],
        [4.0, 3.7],
        [5.0, 5.2],
        [6.0, 4.4],
        [7.0, 6.0],
        [8.0, 5.1],
        [9.0, 6.3],
        [10.0, 7.2],
        [11.0, 6.1],
        [12.0, 7.9],
    ];
    let y = array![4.1, 4.0, 6.2, 6.0, 8.3, 7.1, 9.9, 8.4, 10.8, 12.6, 10.5, 13.4];
    (x, y)
}

#[test]
fn intervals_p_values_and_likelihood_follow_their_definitions() {
    let (x, y) = downtime();
    let w = array![1.0, 2.0, 0.5, 1.0, 1.5, 1.0, 0.0, 2.0, 1.0, 0.7, 1.0, 1.2];
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inf =
        Inference::with_options(&problem, &fit, InferenceOptions::new().with_level(0.9)).unwrap();
    assert_eq!(inf.usable_rows, 11); // the zero weight does not count
    assert_eq!(inf.residual_df, 11 - 3);
    let t = student_t_quantile(0.95, 8.0).unwrap();
    assert_eq!(inf.critical_value, t);
    for e in inf.estimates() {
        assert!((e.t - e.value / e.std_error).abs() <= 1e-12 * e.t.abs());
        assert!(
            (e.upper - e.lower - 2.0 * t * e.std_error).abs() <= 1e-12 * e.upper.abs().max(1.0)
        );
        // A t statistic equal to the critical value has p = 0.10; p is monotone in |t|.
        let at_edge = student_t_quantile(1.0 - e.p_value / 2.0, 8.0).unwrap();
        assert!((at_edge - e.t.abs()).abs() <= 1e-6 * e.t.abs().max(1.0));
    }
    // Log-likelihood: the sum of normal log densities (statrs) of each
    // usable row with variance RSS / (n w_i), an independent evaluation.
    let pred = fit.model.predict(x.view()).unwrap();
    let rss: f64 = (0..12).map(|i| w[i] * (y[i] - pred[i]).powi(2)).sum();
    let n = 11.0;
    let ll: f64 = (0..12)
        .filter(|&i| w[i] > 0.0)
        .map(|i| {
            Normal::new(pred[i], (rss / n / w[i]).sqrt())
                .unwrap()
                .ln_pdf(y[i])
        })
        .sum();
    let g = &inf.goodness;
    assert!((g.log_likelihood - ll).abs() <= 1e-10 * ll.abs());
    // 4 likelihood parameters: two slopes, the intercept and sigma^2.
    assert_eq!(g.likelihood_parameters, 4);
    assert!((g.aic - (-2.0 * ll + 8.0)).abs() <= 1e-10 * g.aic.abs());
    assert!((g.bic - (-2.0 * ll + 4.0 * n.ln())).abs() <= 1e-10 * g.bic.abs());
    // R^2 from the definition with the weighted mean.
    let wsum: f64 = w.sum();
    let ybar: f64 = (0..12).map(|i| w[i] * y[i]).sum::<f64>() / wsum;
    let tss: f64 = (0..12).map(|i| w[i] * (y[i] - ybar).powi(2)).sum();
    assert!((g.r_squared - (1.0 - rss / tss)).abs() <= 1e-12);
    assert!((g.adjusted_r_squared - (1.0 - (1.0 - g.r_squared) * 10.0 / 8.0)).abs() <= 1e-12);
    // Overall F from the sums of squares, and its p-value from the F quantile.
    let f = ((tss - rss) / 2.0) / (rss / 8.0);
    let overall = g.overall.unwrap();
    assert!((overall.statistic - f).abs() <= 1e-9 * f);
    let back = fisher_f_quantile(1.0 - overall.p_value, 2.0, 8.0).unwrap();
    assert!((back - f).abs() <= 1e-5 * f, "{back} vs {f}");
}

// ---------------------------------------------------------------------------
// Coverage of the intervals on data simulated from a known model.

fn standard_normal(rng: &mut ChaCha8Rng) -> f64 {
    // Box-Muller transform of two uniforms (test data generation only).
    let u1: f64 = 1.0 - rng.random::<f64>();
    let u2: f64 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// Seeded Monte Carlo: 2000 data sets of 20 rows from
/// `y = 3 + 0.5 x1 - 2 x2 + e`, `e ~ N(0, 1.5^2)`. The 95% prediction
/// interval should hold a fresh observation, and the mean interval the true
/// mean, in about 95% of data sets; the binomial standard deviation is
/// 0.5 percentage points, so the tolerance of 2 points is 4 standard
/// deviations wide (and the seed is fixed, so the outcome is deterministic).
#[test]
fn intervals_cover_at_about_the_nominal_level() {
    let mut rng = ChaCha8Rng::seed_from_u64(20_240_611);
    let n = 20;
    let x = Array2::from_shape_fn((n, 2), |(_, j)| {
        if j == 0 {
            rng.random::<f64>() * 10.0
        } else {
            rng.random::<f64>() * 3.0
        }
    });
    let x_new = array![[7.5, 2.8], [1.0, 0.5]];
    let truth = |a: f64, b: f64| 3.0 + 0.5 * a - 2.0 * b;
    let reps = 2000;
    let (mut pred_hits, mut mean_hits, mut slope_hits, mut hc3_hits) = (0, 0, 0, 0);
    let mut y = Array1::zeros(n);
    for _ in 0..reps {
        for i in 0..n {
            y[i] = truth(x[[i, 0]], x[[i, 1]]) + 1.5 * standard_normal(&mut rng);
        }
        let problem = Problem::new(x.view(), y.view()).unwrap();
        let fit = Qr::new().fit(&problem).unwrap();
        let inf = Inference::new(&problem, &fit).unwrap();
        let pred = inf.predict(x_new.view()).unwrap();
        for r in 0..2 {
            let mu = truth(x_new[[r, 0]], x_new[[r, 1]]);
            let fresh = mu + 1.5 * standard_normal(&mut rng);
            pred_hits +=
                usize::from(pred.prediction_lower[r] <= fresh && fresh <= pred.prediction_upper[r]);
            mean_hits += usize::from(pred.mean_lower[r] <= mu && mu <= pred.mean_upper[r]);
        }
        let slope = &inf.coefficients[1];
        slope_hits += usize::from(slope.lower <= -2.0 && -2.0 <= slope.upper);
        let hc3 = Inference::with_options(
            &problem,
            &fit,
            InferenceOptions::new().with_covariance(CovarianceKind::Hc3),
        )
        .unwrap();
        let s = &hc3.coefficients[0];
        hc3_hits += usize::from(s.lower <= 0.5 && 0.5 <= s.upper);
    }
    let rate = |hits: usize, total: usize| hits as f64 / total as f64;
    let pred_rate = rate(pred_hits, 2 * reps);
    let mean_rate = rate(mean_hits, 2 * reps);
    let slope_rate = rate(slope_hits, reps);
    println!(
        "coverage: prediction {pred_rate}, mean {mean_rate}, slope {slope_rate}, HC3 slope {}",
        rate(hc3_hits, reps)
    );
    assert!(
        (pred_rate - 0.95).abs() <= 0.02,
        "prediction coverage {pred_rate}"
    );
    assert!(
        (mean_rate - 0.95).abs() <= 0.02,
        "mean coverage {mean_rate}"
    );
    assert!(
        (slope_rate - 0.95).abs() <= 0.02,
        "slope coverage {slope_rate}"
    );
    // HC3 is conservative in small samples under constant variance: it should
    // not under-cover by much.
    assert!(rate(hc3_hits, reps) >= 0.93);
}

// ---------------------------------------------------------------------------
// Refusals and argument checks.

#[test]
fn rank_deficient_fits_are_refused() {
    // Second column is twice the first.
    let x = array![[1.0, 2.0], [2.0, 4.0], [3.0, 6.0], [4.0, 8.0], [5.0, 10.0]];
    let y = array![1.0, 2.1, 2.9, 4.2, 5.0];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Svd::new().fit(&problem).unwrap();
    assert_eq!(fit.report.rank, Some(1));
    match Inference::new(&problem, &fit) {
        Err(Error::InferenceRefused {
            refusal:
                InferenceRefusal::RankDeficient {
                    rank: 1,
                    columns: 2,
                },
        }) => {}
        other => panic!("expected a rank refusal, got {other:?}"),
    }
}

#[test]
fn penalised_fits_are_refused() {
    let (x, y) = downtime();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let mut fit = Qr::new().fit(&problem).unwrap();
    fit.report.penalty = 0.25;
    let err = Inference::new(&problem, &fit).unwrap_err();
    assert_eq!(
        err,
        Error::InferenceRefused {
            refusal: InferenceRefusal::Penalised { penalty: 0.25 }
        }
    );
    assert!(err.to_string().contains("biased"));
}

#[test]
fn no_residual_degrees_of_freedom_is_refused() {
    let x = array![[1.0], [2.0]];
    let y = array![3.0, 5.0];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    assert_eq!(
        Inference::new(&problem, &fit).unwrap_err(),
        Error::InferenceRefused {
            refusal: InferenceRefusal::NoResidualDegreesOfFreedom {
                usable_rows: 2,
                parameters: 2
            }
        }
    );
}

#[test]
fn hc3_refuses_a_row_of_leverage_one() {
    // The last column is an indicator of row 5 alone: its leverage is 1.
    let x = array![
        [1.0, 0.0],
        [2.0, 0.0],
        [3.0, 0.0],
        [4.0, 0.0],
        [5.0, 0.0],
        [6.0, 1.0]
    ];
    let y = array![1.1, 1.9, 3.2, 3.9, 5.1, 9.0];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let hc3 = InferenceOptions::new().with_covariance(CovarianceKind::Hc3);
    match Inference::with_options(&problem, &fit, hc3) {
        Err(Error::InferenceRefused {
            refusal: InferenceRefusal::LeverageOne { row: 5, .. },
        }) => {}
        other => panic!("expected a leverage refusal, got {other:?}"),
    }
    // HC0 is defined, and the diagnostics mark the row as undefined.
    let hc0 = InferenceOptions::new().with_covariance(CovarianceKind::Hc0);
    let inf = Inference::with_options(&problem, &fit, hc0).unwrap();
    let d = inf.diagnostics(&problem).unwrap();
    assert!((d.leverage[5] - 1.0).abs() < 1e-12);
    assert_eq!(d.cooks_distance[5], None);
    assert_eq!(d.deleted_studentized[5], None);
    assert!(d.cooks_distance[0].is_some());
}

#[test]
fn arguments_are_checked() {
    let (x, y) = downtime();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    for level in [0.0, 1.0, f64::NAN, -0.5] {
        assert!(matches!(
            Inference::with_options(&problem, &fit, InferenceOptions::new().with_level(level)),
            Err(Error::InvalidParameter { name: "level", .. })
        ));
    }
    let inf = Inference::new(&problem, &fit).unwrap();
    assert!(matches!(
        inf.predict(array![[1.0]].view()),
        Err(Error::ColumnCountMismatch {
            expected: 2,
            found: 1
        })
    ));
    assert!(matches!(
        inf.predict(array![[1.0, 2.0], [f64::NAN, 1.0]].view()),
        Err(Error::NonFinite {
            row: 1,
            column: Some(0),
            ..
        })
    ));
    assert!(matches!(
        inf.predict_weighted(array![[1.0, 2.0]].view(), array![0.0].view()),
        Err(Error::InvalidWeight { row: 0, .. })
    ));
    assert!(matches!(
        inf.clone().with_names(["age"]),
        Err(Error::NameCountMismatch {
            expected: 2,
            found: 1
        })
    ));
    // Diagnostics on another data set are refused.
    let y2 = y.mapv(|v| v * 2.0);
    let other = Problem::new(x.view(), y2.view()).unwrap();
    assert!(matches!(
        inf.diagnostics(&other),
        Err(Error::InferenceRefused {
            refusal: InferenceRefusal::DifferentData { .. }
        })
    ));
    // A fit of another number of columns.
    let x1 = x.column(0).to_owned().insert_axis(ndarray::Axis(1));
    let p1 = Problem::new(x1.view(), y.view()).unwrap();
    assert!(matches!(
        Inference::new(&p1, &fit),
        Err(Error::ColumnCountMismatch { .. })
    ));
}

// ---------------------------------------------------------------------------
// The printed summary and structured access.

#[test]
fn summary_names_every_parameter_in_our_own_layout() {
    let (x, y) = downtime();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let inf = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap()
        .with_names(["age", "load"])
        .unwrap();
    let text = inf.to_string();
    println!("{text}");
    for needle in ["age ", "load ", "intercept ", "+/-", "R^2", "AIC", "VIF"] {
        assert!(text.contains(needle), "summary lacks {needle:?}:\n{text}");
    }
    // No significance stars.
    assert!(!text.contains('*'));
    let d = inf.diagnostics(&problem).unwrap();
    println!("{d}");
    assert!(d.to_string().contains("leverage"));
}

#[cfg(feature = "serde")]
#[test]
fn inference_round_trips_through_json() {
    let (x, y) = downtime();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let inf = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap();
    let json = serde_json::to_string(&inf).unwrap();
    let back: Inference = serde_json::from_str(&json).unwrap();
    // serde_json's default float parser may be off by one unit in the last
    // place, so compare numbers to a relative 1e-15.
    assert_json_close(
        &serde_json::to_value(&back).unwrap(),
        &serde_json::to_value(&inf).unwrap(),
    );
    // The restored value still predicts.
    let a = inf.predict(array![[3.0, 4.0]].view()).unwrap();
    let b = back.predict(array![[3.0, 4.0]].view()).unwrap();
    assert!(
        (a.prediction_upper[0] - b.prediction_upper[0]).abs()
            <= 1e-14 * a.prediction_upper[0].abs()
    );
    // ... and still gives the diagnostics of the problem it came from.
    let d = back.diagnostics(&problem).unwrap();
    let _: leastline::inference::Diagnostics =
        serde_json::from_str(&serde_json::to_string(&d).unwrap()).unwrap();
}

#[cfg(feature = "serde")]
fn assert_json_close(a: &serde_json::Value, b: &serde_json::Value) {
    use serde_json::Value;
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => {
            let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
            assert!((x - y).abs() <= 1e-15 * x.abs().max(y.abs()), "{x} vs {y}");
        }
        (Value::Array(x), Value::Array(y)) => {
            assert_eq!(x.len(), y.len());
            x.iter().zip(y).for_each(|(x, y)| assert_json_close(x, y));
        }
        (Value::Object(x), Value::Object(y)) => {
            assert_eq!(x.len(), y.len());
            for (k, v) in x {
                assert_json_close(v, &y[k]);
            }
        }
        _ => assert_eq!(a, b),
    }
}
