//! Inference checked against brute-force evaluations of the defining
//! formulas with nalgebra (an independent crate): an explicit column of
//! ones, explicit inverses of `X^T X`, the full `n x n` hat matrix, and
//! refits that leave a row out.
#![allow(clippy::needless_range_loop)]

mod common;

use leastline::inference::{CovarianceKind, Inference, InferenceOptions};
use leastline::{Problem, Qr, Solver};
use nalgebra::{DMatrix, DVector};
use ndarray::{Array1, Array2};
use proptest::prelude::*;

/// A weighted least-squares fit the slow way. Parameters are ordered like
/// leastline's covariance: the columns, then the intercept (last).
struct Brute {
    /// Rows `sqrt(w_i) (x_i, 1)` for every row (zero rows for weight 0).
    xt: DMatrix<f64>,
    /// `(X~^T X~)^-1`.
    inv: DMatrix<f64>,
    coef: DVector<f64>,
    /// Unweighted residuals `y - X b` of every row.
    e: DVector<f64>,
    /// Weights (1 when unweighted).
    w: Vec<f64>,
    usable: usize,
    k: usize,
}

fn design_row(x: &Array2<f64>, i: usize, intercept: bool) -> Vec<f64> {
    let mut row: Vec<f64> = x.row(i).to_vec();
    if intercept {
        row.push(1.0);
    }
    row
}

fn brute(x: &Array2<f64>, y: &Array1<f64>, w: &[f64], intercept: bool) -> Brute {
    let (n, p) = x.dim();
    let k = p + usize::from(intercept);
    let xt = DMatrix::from_fn(n, k, |i, j| w[i].sqrt() * design_row(x, i, intercept)[j]);
    let yt = DVector::from_fn(n, |i, _| w[i].sqrt() * y[i]);
    let inv = (xt.transpose() * &xt).try_inverse().expect("invertible");
    let coef = &inv * xt.transpose() * yt;
    let e = DVector::from_fn(n, |i, _| {
        let row = design_row(x, i, intercept);
        y[i] - (0..k).map(|j| row[j] * coef[j]).sum::<f64>()
    });
    let usable = w.iter().filter(|&&v| v > 0.0).count();
    Brute {
        xt,
        inv,
        coef,
        e,
        w: w.to_vec(),
        usable,
        k,
    }
}

impl Brute {
    /// Diagonal of the full hat matrix `X~ (X~^T X~)^-1 X~^T`.
    fn leverage(&self) -> Vec<f64> {
        let hat = &self.xt * &self.inv * self.xt.transpose();
        (0..hat.nrows()).map(|i| hat[(i, i)]).collect()
    }

    fn rss(&self) -> f64 {
        (0..self.e.len())
            .map(|i| self.w[i] * self.e[i] * self.e[i])
            .sum()
    }

    fn sigma2(&self) -> f64 {
        self.rss() / (self.usable - self.k) as f64
    }

    /// `(X~^T X~)^-1 X~^T diag(omega_i e~_i^2) X~ (X~^T X~)^-1`, the
    /// defining formula of HC0..HC3, with `e~_i = sqrt(w_i) e_i`.
    fn sandwich(&self, kind: CovarianceKind) -> DMatrix<f64> {
        let h = self.leverage();
        let n = self.e.len();
        let (nu, k) = (self.usable as f64, self.k as f64);
        let omega = DVector::from_fn(n, |i, _| {
            let et2 = self.w[i] * self.e[i] * self.e[i];
            match kind {
                CovarianceKind::Hc0 => et2,
                CovarianceKind::Hc1 => et2 * nu / (nu - k),
                CovarianceKind::Hc2 => et2 / (1.0 - h[i]),
                CovarianceKind::Hc3 => et2 / ((1.0 - h[i]) * (1.0 - h[i])),
                _ => unreachable!(),
            }
        });
        let meat = self.xt.transpose() * DMatrix::from_diagonal(&omega) * &self.xt;
        &self.inv * meat * &self.inv
    }
}

fn assert_close_matrix(ours: &Array2<f64>, theirs: &DMatrix<f64>, rel: f64, what: &str) {
    let scale = theirs.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    assert_eq!(
        ours.dim(),
        (theirs.nrows(), theirs.ncols()),
        "{what}: shape"
    );
    for i in 0..theirs.nrows() {
        for j in 0..theirs.ncols() {
            let (a, b) = (ours[[i, j]], theirs[(i, j)]);
            assert!(
                (a - b).abs() <= rel * scale,
                "{what}[{i},{j}]: ours {a:e}, brute force {b:e} (scale {scale:e})"
            );
        }
    }
}

/// Random small problems: n rows, p columns, optional weights with some
/// zeros, intercept on or off.
fn small_problem() -> impl Strategy<Value = (Array2<f64>, Array1<f64>, Option<Vec<f64>>, bool)> {
    (6usize..=12, 1usize..=4, any::<bool>(), any::<bool>()).prop_flat_map(
        |(n, p, intercept, weighted)| {
            (
                proptest::collection::vec(-10.0f64..10.0, n * p),
                proptest::collection::vec(-10.0f64..10.0, n),
                proptest::collection::vec(prop_oneof![1 => Just(0.0), 5 => 0.2f64..3.0], n),
            )
                .prop_map(move |(xs, ys, ws)| {
                    let x = Array2::from_shape_vec((n, p), xs).unwrap();
                    let y = Array1::from(ys);
                    (x, y, weighted.then_some(ws), intercept)
                })
        },
    )
}

/// Condition number of the weighted design with its ones column (nalgebra SVD).
fn well_conditioned(b: &Brute) -> bool {
    let s = b.xt.clone().svd(false, false).singular_values;
    let (mx, mn) = (s.max(), s.min());
    mn > 0.0 && mx / mn < 1e4
}

fn problem_of<'a>(
    x: &'a Array2<f64>,
    y: &'a Array1<f64>,
    w: &'a Option<Array1<f64>>,
    intercept: bool,
) -> Problem<'a> {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    b.build().unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(48)))]

    /// Classical and HC0-HC3 covariances equal their defining formulas
    /// evaluated by brute force; the leverages equal the diagonal of the
    /// full hat matrix and sum to the number of parameters (an exact
    /// identity: the trace of a projection is its rank).
    #[test]
    fn covariances_and_leverages_match_brute_force(
        (x, y, ws, intercept) in small_problem()
    ) {
        let n = x.nrows();
        let w: Vec<f64> = ws.clone().unwrap_or_else(|| vec![1.0; n]);
        let k = x.ncols() + usize::from(intercept);
        let usable = w.iter().filter(|&&v| v > 0.0).count();
        prop_assume!(usable >= k + 2);
        let b = brute(&x, &y, &w, intercept);
        prop_assume!(well_conditioned(&b));
        let h = b.leverage();
        prop_assume!(h.iter().all(|&v| v < 1.0 - 1e-6));

        let wa = ws.map(Array1::from);
        let problem = problem_of(&x, &y, &wa, intercept);
        let fit = Qr::new().fit(&problem).unwrap();

        // Classical: sigma^2 (X~^T X~)^-1.
        let inf = Inference::new(&problem, &fit).unwrap();
        let classical = &b.inv * b.sigma2();
        assert_close_matrix(&inf.covariance, &classical, 1e-9, "classical");
        prop_assert!((inf.residual_variance - b.sigma2()).abs() <= 1e-9 * b.sigma2());
        for (j, e) in inf.coefficients.iter().enumerate() {
            prop_assert!((e.value - b.coef[j]).abs() <= 1e-9 * (1.0 + b.coef[j].abs()));
        }

        for kind in [CovarianceKind::Hc0, CovarianceKind::Hc1, CovarianceKind::Hc2, CovarianceKind::Hc3] {
            let inf = Inference::with_options(&problem, &fit, InferenceOptions::new().with_covariance(kind)).unwrap();
            assert_close_matrix(&inf.covariance, &b.sandwich(kind), 1e-9, kind.name());
            // The standard errors are the square roots of the diagonal.
            for (i, se) in inf.std_errors().iter().enumerate() {
                prop_assert!((se * se - inf.covariance[[i, i]]).abs() <= 1e-12 * inf.covariance[[i, i]].max(1e-300));
            }
        }

        let diag = inf.diagnostics(&problem).unwrap();
        for i in 0..n {
            prop_assert!((diag.leverage[i] - h[i]).abs() <= 1e-10, "row {i}: {} vs {}", diag.leverage[i], h[i]);
            prop_assert!((diag.residuals[i] - b.e[i]).abs() <= 1e-9 * (1.0 + b.e[i].abs()));
        }
        // Identity: trace of the hat matrix = number of parameters.
        prop_assert!((diag.leverage.sum() - k as f64).abs() <= 1e-10);
    }

    /// Deleted studentized residuals and Cook's distances equal the values
    /// from refits that leave the row out (brute force, nalgebra), and the
    /// internally studentized residual is `sqrt(w) e / (sigma sqrt(1 - h))`.
    #[test]
    fn deletion_diagnostics_match_refits((x, y, ws, intercept) in small_problem()) {
        let n = x.nrows();
        let w: Vec<f64> = ws.clone().unwrap_or_else(|| vec![1.0; n]);
        let k = x.ncols() + usize::from(intercept);
        let usable = w.iter().filter(|&&v| v > 0.0).count();
        prop_assume!(usable >= k + 3);
        let full = brute(&x, &y, &w, intercept);
        prop_assume!(well_conditioned(&full));
        let h = full.leverage();
        prop_assume!(h.iter().all(|&v| v < 1.0 - 1e-3));

        let wa = ws.map(Array1::from);
        let problem = problem_of(&x, &y, &wa, intercept);
        let fit = Qr::new().fit(&problem).unwrap();
        let inf = Inference::new(&problem, &fit).unwrap();
        let diag = inf.diagnostics(&problem).unwrap();
        let s2 = full.sigma2();
        for i in 0..n {
            if w[i] == 0.0 {
                prop_assert!(diag.deleted_studentized[i].is_none());
                prop_assert!(diag.cooks_distance[i].is_none());
                prop_assert_eq!(diag.leverage[i], 0.0);
                continue;
            }
            let mut w_drop = w.clone();
            w_drop[i] = 0.0;
            let refit = brute(&x, &y, &w_drop, intercept);
            prop_assume!(well_conditioned(&refit));
            // Deleted residual: the left-out row's prediction error over its
            // own standard error under the refit.
            let row = DVector::from_vec(design_row(&x, i, intercept));
            let s2_i = refit.sigma2();
            let var = s2_i * (1.0 / w[i] + (row.transpose() * &refit.inv * &row)[(0, 0)]);
            let t_brute = refit.e[i] / var.sqrt();
            let t_ours = diag.deleted_studentized[i].unwrap();
            prop_assert!((t_ours - t_brute).abs() <= 1e-7 * (1.0 + t_brute.abs()), "row {i}: {t_ours} vs {t_brute}");
            // Cook's distance: shift of all fitted values, sum w (y^ - y^_(i))^2 / (k s^2).
            let shift: f64 = (0..n)
                .map(|r| {
                    let xr = design_row(&x, r, intercept);
                    let d: f64 = (0..k).map(|j| xr[j] * (full.coef[j] - refit.coef[j])).sum();
                    w[r] * d * d
                })
                .sum();
            let d_brute = shift / (k as f64 * s2);
            let d_ours = diag.cooks_distance[i].unwrap();
            prop_assert!((d_ours - d_brute).abs() <= 1e-7 * (1e-12 + d_brute.abs()), "row {i}: {d_ours} vs {d_brute}");
            let r_brute = w[i].sqrt() * full.e[i] / (s2 * (1.0 - h[i])).sqrt();
            let r_ours = diag.studentized[i].unwrap();
            prop_assert!((r_ours - r_brute).abs() <= 1e-8 * (1.0 + r_brute.abs()));
        }
    }

    /// Prediction standard errors equal `x0^T C x0` (mean) and
    /// `x0^T C x0 + sigma^2 / w0` (new observation) formed by brute force,
    /// for the classical and the HC3 covariance.
    #[test]
    fn prediction_errors_match_brute_force(
        (x, y, ws, intercept) in small_problem(),
        new in proptest::collection::vec(-15.0f64..15.0, 8),
        w0 in 0.25f64..4.0,
    ) {
        let n = x.nrows();
        let p = x.ncols();
        let w: Vec<f64> = ws.clone().unwrap_or_else(|| vec![1.0; n]);
        let k = p + usize::from(intercept);
        let usable = w.iter().filter(|&&v| v > 0.0).count();
        prop_assume!(usable >= k + 2);
        let b = brute(&x, &y, &w, intercept);
        prop_assume!(well_conditioned(&b));
        prop_assume!(b.leverage().iter().all(|&v| v < 1.0 - 1e-6));
        let wa = ws.map(Array1::from);
        let problem = problem_of(&x, &y, &wa, intercept);
        let fit = Qr::new().fit(&problem).unwrap();
        let x_new = Array2::from_shape_vec((2, p), new[..2 * p].to_vec()).unwrap();
        let w_new = Array1::from(vec![1.0, w0]);
        for kind in [CovarianceKind::Classical, CovarianceKind::Hc3] {
            let inf = Inference::with_options(&problem, &fit, InferenceOptions::new().with_covariance(kind)).unwrap();
            let cov = if kind == CovarianceKind::Classical { &b.inv * b.sigma2() } else { b.sandwich(kind) };
            let pred = inf.predict_weighted(x_new.view(), w_new.view()).unwrap();
            for r in 0..2 {
                let x0 = DVector::from_vec(design_row(&x_new, r, intercept));
                let var_mean = (x0.transpose() * &cov * &x0)[(0, 0)];
                let var_new = var_mean + b.sigma2() / w_new[r];
                let fitted: f64 = (0..k).map(|j| x0[j] * b.coef[j]).sum();
                prop_assert!((pred.fitted[r] - fitted).abs() <= 1e-9 * (1.0 + fitted.abs()));
                prop_assert!((pred.mean_std_error[r].powi(2) - var_mean).abs() <= 1e-8 * var_mean);
                prop_assert!((pred.prediction_std_error[r].powi(2) - var_new).abs() <= 1e-8 * var_new);
                let t = inf.critical_value;
                prop_assert!((pred.prediction_upper[r] - (pred.fitted[r] + t * var_new.sqrt())).abs() <= 1e-8 * (1.0 + var_new.sqrt()));
            }
        }
    }
}

/// VIFs equal `1 / (1 - R_j^2)` from regressing each column on the others
/// with an intercept (brute force, nalgebra), and the condition number
/// equals the singular-value ratio of the centered design with every
/// column divided by the power of two at or below its largest magnitude
/// (nalgebra SVD).
#[test]
fn vifs_and_condition_number_match_auxiliary_regressions() {
    // A warehouse's daily handling time against staff on shift, pallets
    // received and outside temperature (invented figures).
    let x = ndarray::array![
        [4.0, 120.0, 12.0],
        [5.0, 150.0, 14.0],
        [3.0, 95.0, 9.0],
        [6.0, 170.0, 20.0],
        [4.0, 130.0, 15.0],
        [7.0, 210.0, 18.0],
        [5.0, 140.0, 11.0],
        [6.0, 185.0, 22.0],
        [3.0, 100.0, 16.0],
        [5.0, 160.0, 10.0],
    ];
    let y = ndarray::array![6.1, 7.4, 4.9, 8.8, 6.5, 10.2, 7.0, 9.1, 5.3, 7.7];
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let inf = Qr::new()
        .fit(&problem)
        .unwrap()
        .inference(&problem)
        .unwrap();
    let (n, p) = x.dim();
    for j in 0..p {
        let others: Vec<usize> = (0..p).filter(|&c| c != j).collect();
        let a = DMatrix::from_fn(n, others.len() + 1, |i, c| {
            if c < others.len() {
                x[[i, others[c]]]
            } else {
                1.0
            }
        });
        let t = DVector::from_fn(n, |i, _| x[[i, j]]);
        let coef = (a.transpose() * &a).try_inverse().unwrap() * a.transpose() * &t;
        let resid = &t - &a * coef;
        let mean = t.mean();
        let tss: f64 = t.iter().map(|v| (v - mean) * (v - mean)).sum();
        let r2 = 1.0 - resid.norm_squared() / tss;
        let vif = 1.0 / (1.0 - r2);
        let ours = inf.collinearity.vif[j];
        assert!(
            (ours - vif).abs() <= 1e-10 * vif,
            "column {j}: {ours} vs {vif}"
        );
    }
    let means: Vec<f64> = (0..p).map(|j| x.column(j).mean().unwrap()).collect();
    let mut c = DMatrix::from_fn(n, p, |i, j| x[[i, j]] - means[j]);
    for j in 0..p {
        // Divided by the power of two at or below the largest centered
        // magnitude (the exponent bits of that magnitude).
        let big = c.column(j).amax();
        let scale = f64::from_bits(big.to_bits() & 0x7ff0_0000_0000_0000);
        c.column_mut(j).scale_mut(1.0 / scale);
    }
    let s = c.svd(false, false).singular_values;
    let cond = s.max() / s.min();
    assert!(
        (inf.collinearity.condition_number - cond).abs() <= 1e-10 * cond,
        "{} vs {cond}",
        inf.collinearity.condition_number
    );
}

/// Many rows (several row blocks, so the blocked passes combine partial
/// results): the classical, HC1 and HC3 covariances and every leverage equal
/// their defining formulas accumulated row by row, with nalgebra inverting
/// the small `X~^T X~`.
#[test]
fn blocked_passes_match_row_by_row_formulas() {
    use rand::{RngExt, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(77);
    let (n, p) = (40_000, 4);
    // Meter readings of a district heating network (invented): four inputs
    // with offsets far from zero, and per-row reliability weights.
    let x = Array2::from_shape_fn((n, p), |(_, j)| {
        100.0 * j as f64 + rng.random::<f64>() * 5.0
    });
    let y = Array1::from_shape_fn(n, |i| {
        2.0 + x[[i, 0]] - 0.5 * x[[i, 2]] + (rng.random::<f64>() - 0.5) * (1.0 + x[[i, 1]] - 100.0)
    });
    let w: Vec<f64> = (0..n)
        .map(|i| {
            if i % 97 == 0 {
                0.0
            } else {
                0.5 + rng.random::<f64>()
            }
        })
        .collect();
    let wa = Some(Array1::from(w.clone()));
    let problem = problem_of(&x, &y, &wa, true);
    let fit = Qr::new().fit(&problem).unwrap();
    let k = p + 1;
    // Row-by-row accumulation in centered coordinates: rows sqrt(w) (x - m, 1)
    // with the weighted means m, parameters (b, a) with a = b0 + m . b. This is
    // an exact reparameterisation (covariances map by C = T C_c T^T with
    // T = [[I, 0], [-m^T, 1]], leverages are unchanged); the raw normal
    // equations of columns offset by ~300 would lose too many digits to
    // serve as a reference.
    let wsum: f64 = w.iter().sum();
    let m: Vec<f64> = (0..p)
        .map(|j| (0..n).map(|i| w[i] * x[[i, j]]).sum::<f64>() / wsum)
        .collect();
    let row = |i: usize| DVector::from_fn(k, |j, _| if j < p { x[[i, j]] - m[j] } else { 1.0 });
    let mut xtx = DMatrix::<f64>::zeros(k, k);
    for i in 0..n {
        let r = row(i);
        xtx += w[i] * &r * r.transpose();
    }
    let inv = xtx.try_inverse().unwrap();
    let t = DMatrix::from_fn(k, k, |i, j| {
        if i < p {
            f64::from(u8::from(i == j))
        } else if j < p {
            -m[j]
        } else {
            1.0
        }
    });
    let to_caller = |c: DMatrix<f64>| &t * c * t.transpose();
    let b = fit.model.coefficients();
    let e: Vec<f64> = (0..n)
        .map(|i| y[i] - fit.model.intercept() - (0..p).map(|j| x[[i, j]] * b[j]).sum::<f64>())
        .collect();
    let h: Vec<f64> = (0..n)
        .map(|i| w[i] * (row(i).transpose() * &inv * row(i))[(0, 0)])
        .collect();
    let usable = w.iter().filter(|&&v| v > 0.0).count();
    let rss: f64 = (0..n).map(|i| w[i] * e[i] * e[i]).sum();
    let sigma2 = rss / (usable - k) as f64;
    let inf = Inference::new(&problem, &fit).unwrap();
    assert_close_matrix(
        &inf.covariance,
        &to_caller(&inv * sigma2),
        1e-9,
        "classical, many rows",
    );
    for (kind, power) in [(CovarianceKind::Hc1, 0), (CovarianceKind::Hc3, 2)] {
        let mut meat = DMatrix::<f64>::zeros(k, k);
        for i in 0..n {
            let r = row(i);
            // Row sqrt(w_i) r_i, squared residual w_i e_i^2: weight w_i^2 in all.
            meat += (w[i] * w[i] * e[i] * e[i] / (1.0 - h[i]).powi(power)) * &r * r.transpose();
        }
        if kind == CovarianceKind::Hc1 {
            meat *= usable as f64 / (usable - k) as f64;
        }
        let theirs = to_caller(&inv * meat * &inv);
        let ours = Inference::with_options(
            &problem,
            &fit,
            InferenceOptions::new().with_covariance(kind),
        )
        .unwrap();
        assert_close_matrix(&ours.covariance, &theirs, 1e-9, kind.name());
    }
    let d = inf.diagnostics(&problem).unwrap();
    for i in 0..n {
        assert!(
            (d.leverage[i] - h[i]).abs() <= 1e-12,
            "row {i}: {} vs {}",
            d.leverage[i],
            h[i]
        );
    }
    // Identity: the leverages sum to the number of parameters.
    assert!((d.leverage.sum() - k as f64).abs() <= 1e-9);
}
