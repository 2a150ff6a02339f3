//! Property tests over random bit patterns and exact rescalings.
//!
//! 1. **Random bit patterns** (subnormals, values near the overflow limit,
//!    zeros, duplicates, exact fits, awkward weights) through every solver,
//!    inference, prediction, diagnostics, k-fold cross-validation, the ridge
//!    path and serde: no panic, no hang (small sizes and iteration caps
//!    bound the time), every number in an `Ok` result finite except the
//!    documented infinities, and an exact serde round trip.
//! 2. **Scale invariance**: multiplying the design, the target or the
//!    weights by `2^k` (`k` up to ±1000, wherever the results are
//!    representable) leaves every t statistic and R² unchanged and scales
//!    slopes, intercepts and fitted values by the exact power of two (an
//!    identity of least squares in binary floating point).
//!
//! Case counts come from `PROPTEST_CASES` when set (see the README for a
//! long soak), else the small defaults below.

mod common;

use common::p2;

use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::ridge::{Criterion, Ridge, RidgeFactorization, RidgePath, RowFolds};
use leastline::{
    Accelerated, Cholesky, Fit, GradientDescent, Problem, Qr, Refinement, Solver, Stochastic, Svd,
};
use ndarray::{Array1, Array2};
use proptest::prelude::*;

/// One value from a random bit pattern of a chosen kind.
fn value() -> impl Strategy<Value = f64> {
    prop_oneof![
        2 => (-8i32..8).prop_map(f64::from),
        2 => any::<u64>().prop_map(|b| f64::from_bits(b & 0x3fff_ffff_ffff_ffff) * 0.5),
        // Near the overflow limit (exponents 1000 to 1023).
        1 => (any::<u64>(), 1000u64..1023, any::<bool>()).prop_map(|(m, e, s)| {
            let bits = (m & ((1u64 << 52) - 1)) | ((e + 1023) << 52) | (u64::from(s) << 63);
            f64::from_bits(bits)
        }),
        // Subnormal.
        1 => (1u64..(1u64 << 52), any::<bool>())
            .prop_map(|(m, s)| f64::from_bits(m | (u64::from(s) << 63))),
        // Any finite bit pattern at all.
        1 => any::<u64>().prop_map(f64::from_bits).prop_filter("finite", |v| v.is_finite()),
        1 => Just(0.0),
    ]
}

fn weight() -> impl Strategy<Value = f64> {
    prop_oneof![
        3 => Just(1.0),
        1 => Just(0.0),
        1 => (1u32..16).prop_map(f64::from),
        1 => value().prop_map(f64::abs),
    ]
}

/// A problem: `n x p` values, a target (possibly an exact fit), weights.
#[derive(Debug, Clone)]
struct Case {
    x: Array2<f64>,
    y: Array1<f64>,
    w: Option<Array1<f64>>,
    intercept: bool,
}

fn case() -> impl Strategy<Value = Case> {
    (1usize..12, 0usize..5)
        .prop_flat_map(|(n, p)| {
            (
                proptest::collection::vec(value(), n * p),
                proptest::collection::vec(value(), n),
                proptest::collection::vec(weight(), n),
                any::<bool>(),
                any::<bool>(),
                0usize..3,
                Just((n, p)),
            )
        })
        .prop_map(|(xs, ys, ws, weighted, intercept, shape, (n, p))| {
            let mut x =
                Array2::from_shape_vec((n, p), xs).unwrap_or_else(|_| Array2::zeros((n, p)));
            if shape == 1 && p >= 2 {
                // An exactly duplicated column.
                let c = x.column(0).to_owned();
                x.column_mut(p - 1).assign(&c);
            }
            let mut y = Array1::from_vec(ys);
            if shape == 2 && p >= 1 {
                // An exact fit through small integers where the design allows.
                y = x.column(0).mapv(|v| 2.0 * v + 1.0);
            }
            Case {
                x,
                y,
                w: weighted.then(|| Array1::from_vec(ws)),
                intercept,
            }
        })
}

fn solvers() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Qr::new().with_refinement(Refinement::new().with_max_iterations(0))),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Svd::new().with_rank_tolerance(1e-3)),
        Box::new(Ridge::new(0.0)),
        Box::new(Ridge::new(1.0)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Dual)),
        Box::new(
            Ridge::new(1e-9)
                .with_factorization(RidgeFactorization::AugmentedQr)
                .with_standardize(true),
        ),
        Box::new(Ridge::new(1e3).with_factorization(RidgeFactorization::Cholesky)),
        Box::new(Ridge::new(1e-3).with_factorization(RidgeFactorization::Svd)),
        Box::new(GradientDescent::new().with_max_iterations(50)),
        Box::new(Accelerated::new().with_max_iterations(50).with_penalty(0.5)),
        Box::new(Stochastic::new().with_max_iterations(3)),
    ]
}

fn finite(v: impl IntoIterator<Item = f64>) -> bool {
    v.into_iter().all(f64::is_finite)
}

#[cfg(feature = "serde")]
fn round_trips<T>(value: &T) -> bool
where
    T: serde::Serialize + serde::de::DeserializeOwned + PartialEq,
{
    let text = serde_json::to_string(value).expect("serialises");
    serde_json::from_str::<T>(&text).ok().as_ref() == Some(value)
}

#[cfg(not(feature = "serde"))]
fn round_trips<T>(_: &T) -> bool {
    true
}

/// Every number of an `Ok` fit is finite and the fit round-trips.
fn check_fit(name: &str, fit: &Fit) -> Result<(), TestCaseError> {
    let r = &fit.report;
    prop_assert!(finite(fit.model.coefficients().iter().copied()), "{name}");
    prop_assert!(fit.model.intercept().is_finite(), "{name}");
    prop_assert!(r.residual_sum_of_squares.is_finite() && r.residual_sum_of_squares >= 0.0);
    prop_assert!(r.condition.is_none_or(f64::is_finite), "{name}");
    prop_assert!(r.penalty.is_finite());
    if let Some(it) = &r.iterations {
        prop_assert!(
            it.final_loss.is_finite() && it.gradient_norm.is_finite(),
            "{name}"
        );
        prop_assert!(it.step.is_finite() && finite(it.loss_history.iter().copied()));
    }
    prop_assert!(round_trips(fit), "{name}: serde round trip");
    Ok(())
}

/// Every number of an `Ok` inference is finite but the documented
/// infinities of an exact fit; predictions and diagnostics likewise.
fn check_inference(
    name: &str,
    inf: &Inference,
    case: &Case,
    problem: &Problem<'_>,
) -> Result<(), TestCaseError> {
    prop_assert!(inf.fit_distance.is_finite() && inf.fit_distance >= 0.0);
    prop_assert!(inf.residual_sd.is_finite() && inf.residual_variance.is_finite());
    prop_assert!(finite(inf.covariance.iter().copied()), "{name}");
    // The documented infinities belong to fits exact to the precision of
    // f64 (R² = 1 to rounding), or to a standard error of 0 (a sandwich
    // whose middle matrix vanishes in a parameter's direction).
    let exact = inf.goodness.r_squared == 1.0;
    for e in inf.estimates() {
        prop_assert!(
            finite([e.value, e.std_error, e.p_value, e.lower, e.upper]),
            "{name}"
        );
        prop_assert!(!e.t.is_nan());
        prop_assert!(
            e.t.is_finite() || exact || e.std_error == 0.0,
            "{name}: t {} with se {}",
            e.t,
            e.std_error
        );
    }
    let g = &inf.goodness;
    prop_assert!(finite([
        g.r_squared,
        g.adjusted_r_squared,
        g.total_sum_of_squares
    ]));
    prop_assert!(finite([
        g.regression_sum_of_squares,
        g.residual_sum_of_squares
    ]));
    prop_assert!(
        g.log_likelihood.is_finite()
            || (g.residual_sum_of_squares == 0.0 && g.log_likelihood == f64::INFINITY)
    );
    prop_assert!(g.aic.is_finite() || exact);
    if let Some(t) = &g.overall {
        let zero_se = inf.estimates().any(|e| e.std_error == 0.0);
        prop_assert!(t.p_value.is_finite() && (t.statistic.is_finite() || exact || zero_se));
    }
    prop_assert!(finite(inf.collinearity.vif.iter().copied()));
    prop_assert!(round_trips(inf), "{name}: inference round trip");
    if let Ok(at) = inf.predict(case.x.view()) {
        for v in [
            &at.fitted,
            &at.mean_std_error,
            &at.mean_lower,
            &at.prediction_upper,
        ] {
            prop_assert!(finite(v.iter().copied()), "{name}");
        }
        prop_assert!(round_trips(&at));
    }
    if let Ok(d) = inf.diagnostics(problem) {
        prop_assert!(finite(d.leverage.iter().copied()) && finite(d.residuals.iter().copied()));
        for v in d
            .studentized
            .iter()
            .chain(&d.deleted_studentized)
            .chain(&d.cooks_distance)
        {
            prop_assert!(v.is_none_or(f64::is_finite), "{name}");
        }
        prop_assert!(round_trips(&d));
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(64)))]

    #[test]
    fn random_bit_patterns_give_results_or_typed_errors(case in case()) {
        let mut builder = Problem::builder(case.x.view(), case.y.view()).with_intercept(case.intercept);
        if let Some(w) = &case.w {
            builder = builder.with_weights(w.view());
        }
        let Ok(problem) = builder.build() else { return Ok(()) };
        for solver in solvers() {
            let name = solver.name().to_string();
            let Ok(fit) = solver.fit(&problem) else { continue };
            check_fit(&name, &fit)?;
            if let Ok(pred) = fit.model.predict(case.x.view()) {
                prop_assert!(finite(pred.iter().copied()));
            }
            if let Ok(r2) = fit.model.r_squared(case.x.view(), case.y.view()) {
                prop_assert!(r2.is_finite() || r2 == f64::NEG_INFINITY, "{name}: R^2 {r2}");
            }
            if let Ok(loss) = fit.model.mean_squared_error(case.x.view(), case.y.view()) {
                prop_assert!(loss.is_finite());
            }
            for kind in [CovarianceKind::Classical, CovarianceKind::Hc3] {
                let options = InferenceOptions::new().with_covariance(kind);
                if let Ok(inf) = Inference::with_options(&problem, &fit, options) {
                    check_inference(&name, &inf, &case, &problem)?;
                }
            }
        }
        if let Ok(path) = RidgePath::new(&problem, case.p_odd()) {
            if let Ok(grid) = path.default_grid(4) {
                prop_assert!(finite(grid.iter().copied()));
                if let Ok(curve) = path.curve(&grid, Criterion::LeaveOneOut) {
                    prop_assert!(finite(curve.effective_df.iter().copied()));
                    prop_assert!(finite(curve.residual_sum_of_squares.iter().copied()));
                    // Scores are +inf where undetermined, never NaN or -inf.
                    let scores = curve.gcv.iter().chain(curve.loo.iter().flatten());
                    for &s in scores {
                        prop_assert!(s.is_finite() || s == f64::INFINITY);
                    }
                    prop_assert!(round_trips(&curve));
                }
            }
            if let Ok(fit) = path.fit(1.0) {
                check_fit("path", &fit)?;
            }
        }
        if let Ok(cv) = RowFolds::new().with_folds(2).with_seed(1).held_out_error(&Qr::new(), &problem) {
            prop_assert!(finite(cv.fold_errors.iter().copied()));
            prop_assert!(finite([cv.mean_error, cv.std_dev, cv.std_error]));
            prop_assert!(round_trips(&cv));
        }
    }
}

impl Case {
    /// Standardise the path's penalty for every other shape.
    fn p_odd(&self) -> bool {
        self.x.ncols() % 2 == 1
    }
}

/// Small-integer data (exactly scalable by any representable power of two).
#[derive(Debug, Clone)]
struct Exact {
    x: Array2<f64>,
    y: Array1<f64>,
    w: Array1<f64>,
}

fn exact_case() -> impl Strategy<Value = Exact> {
    (2usize..4, 6usize..16).prop_flat_map(|(p, extra)| {
        let n = p + extra;
        (
            proptest::collection::vec(-64i32..64, n * p),
            proptest::collection::vec(-512i32..512, n),
            proptest::collection::vec(1i32..16, n),
        )
            .prop_map(move |(xs, ys, ws)| Exact {
                x: Array2::from_shape_vec((n, p), xs.into_iter().map(f64::from).collect())
                    .unwrap_or_else(|_| Array2::zeros((n, p))),
                y: Array1::from_vec(ys.into_iter().map(f64::from).collect()),
                w: Array1::from_vec(ws.into_iter().map(f64::from).collect()),
            })
    })
}

/// Exponents `(kx, ky, kw)` in `[-1000, 1000]` for which every result is
/// representable: slopes `2^(ky - kx)` and their squared standard errors
/// (`ky - kx <= 480`), the target's squares with the weights
/// (`-1000 <= 2 ky + kw <= 980`).
fn exponents() -> impl Strategy<Value = (i32, i32, i32)> {
    (-490i32..480).prop_flat_map(|ky| {
        let kx = (ky - 480).max(-1000)..(ky + 1000).min(1000);
        let kw = (-1000 - 2 * ky).max(-1000)..(980 - 2 * ky).min(1000);
        (kx, Just(ky), kw)
    })
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(48)))]

    #[test]
    fn exact_rescaling_changes_no_statistic(case in exact_case(), (kx, ky, kw) in exponents()) {
        let problem = Problem::builder(case.x.view(), case.y.view())
            .with_weights(case.w.view())
            .build()
            .unwrap();
        let Ok(fit) = Qr::new().fit(&problem) else { return Ok(()) };
        let Ok(inf) = fit.inference(&problem) else { return Ok(()) };
        let xs = case.x.mapv(|v| v * p2(kx));
        let ys = case.y.mapv(|v| v * p2(ky));
        let ws = case.w.mapv(|v| v * p2(kw));
        let scaled = Problem::builder(xs.view(), ys.view()).with_weights(ws.view()).build().unwrap();
        for solver in [&Qr::new() as &dyn Solver, &Svd::new(), &Qr::refined()] {
            let reference = solver.fit(&problem).unwrap();
            let other = solver.fit(&scaled).unwrap();
            for (a, b) in other.model.coefficients().iter().zip(reference.model.coefficients()) {
                prop_assert!(close(*a, b * p2(ky - kx), 1e-12), "{}: {a:e} vs {:e}", solver.name(), b * p2(ky - kx));
            }
            let fitted = other.model.predict(xs.view()).unwrap();
            let fitted_ref = reference.model.predict(case.x.view()).unwrap();
            let top = fitted_ref.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
            for (a, b) in fitted.iter().zip(&fitted_ref) {
                prop_assert!((a - b * p2(ky)).abs() <= 1e-12 * top * p2(ky));
            }
        }
        let fit_s = Qr::new().fit(&scaled).unwrap();
        let inf_s = fit_s.inference(&scaled).unwrap();
        for (a, b) in inf_s.estimates().zip(inf.estimates()) {
            prop_assert!(close(a.t, b.t, 1e-9), "t {} vs {}", a.t, b.t);
            prop_assert!(close(a.p_value, b.p_value, 1e-6) || b.p_value < 1e-290);
        }
        prop_assert!((inf_s.goodness.r_squared - inf.goodness.r_squared).abs() <= 1e-12);
        prop_assert!(close(inf_s.residual_sd, inf.residual_sd * p2(ky) * p2(kw).sqrt(), 1e-10));
    }
}
