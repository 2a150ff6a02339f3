//! One loss everywhere: the weighted mean squared residual
//! `sum w r^2 / sum w`. The same number from every route that reports a
//! loss, checked against the sum formed here from the residuals.

mod common;

use common::gen;
use leastline::ridge::RowFolds;
use leastline::{Control, GradientDescent, Problem, Qr, Solver};
use ndarray::{Array1, Array2, Axis};

/// `sum w r^2 / sum w` formed directly.
fn weighted_mse(r: &Array1<f64>, w: &Array1<f64>) -> f64 {
    r.iter().zip(w).map(|(v, a)| a * v * v).sum::<f64>() / w.sum()
}

/// For one unweighted fit: the model's mean squared error, the refined
/// QR's final loss, the converged gradient fit's final loss, last history
/// entry and last observed `Progress::loss`, and RSS / n are one number.
#[test]
fn every_route_reports_the_same_loss() {
    let mut rng = gen::rng(404);
    let (n, p) = (60, 3);
    let x = gen::normal_matrix(&mut rng, n, p);
    let y = gen::normal_vector(&mut rng, n) + x.column(1).mapv(|v| 2.0 * v);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let refined = Qr::refined().fit(&problem).unwrap();
    let r = refined.residuals(&problem).unwrap();
    let direct = weighted_mse(&r, &Array1::ones(n));
    let model_mse = refined
        .model
        .mean_squared_error(x.view(), y.view())
        .unwrap();
    assert!(
        (model_mse - direct).abs() <= 1e-13 * direct,
        "{model_mse} vs {direct}"
    );
    let rss_mean = refined.report.residual_sum_of_squares / n as f64;
    assert!((rss_mean - direct).abs() <= 1e-13 * direct);
    let it = refined.report.iterations.as_ref().unwrap();
    assert!(
        (it.final_loss - direct).abs() <= 1e-13 * direct,
        "{} vs {direct}",
        it.final_loss
    );
    for l in &it.loss_history {
        // Losses of the residual estimates on the way: never below the
        // least-squares minimum (beyond rounding).
        assert!(*l >= direct * (1.0 - 1e-12), "{l} vs {direct}");
    }
    let last_seen = std::sync::Mutex::new(f64::NAN);
    let gd = GradientDescent::new()
        .with_tolerance(1e-13)
        .with_max_iterations(100_000)
        .fit_observed(&problem, &|progress: &leastline::Progress| {
            if let Some(loss) = progress.loss {
                *last_seen.lock().unwrap() = loss;
            }
            Control::Continue
        })
        .unwrap();
    let last_seen = *last_seen.lock().unwrap();
    let it = gd.report.iterations.as_ref().unwrap();
    assert!(it.converged);
    let gd_direct = gd.model.mean_squared_error(x.view(), y.view()).unwrap();
    assert!((it.final_loss - gd_direct).abs() <= 1e-12 * gd_direct);
    assert!((it.final_loss - direct).abs() <= 1e-10 * direct);
    assert_eq!(it.loss_history.last().copied(), Some(it.final_loss));
    assert_eq!(last_seen, it.final_loss);
}

/// Weighted: the gradient loss and the refined QR's loss are
/// `sum w r^2 / sum w` of their own residuals.
#[test]
fn weighted_losses_are_weighted_means() {
    let mut rng = gen::rng(405);
    let (n, p) = (50, 2);
    let x = gen::normal_matrix(&mut rng, n, p);
    let y = gen::normal_vector(&mut rng, n) + x.column(0).mapv(|v| v - 3.0);
    let w = gen::weights(&mut rng, n);
    let problem = Problem::builder(x.view(), y.view())
        .with_weights(w.view())
        .build()
        .unwrap();
    for fit in [
        Qr::refined().fit(&problem).unwrap(),
        GradientDescent::new()
            .with_tolerance(1e-13)
            .with_max_iterations(100_000)
            .fit(&problem)
            .unwrap(),
    ] {
        let direct = weighted_mse(&fit.residuals(&problem).unwrap(), &w);
        let loss = fit.report.iterations.as_ref().unwrap().final_loss;
        assert!(
            (loss - direct).abs() <= 1e-12 * direct,
            "{}: {loss} vs {direct}",
            fit.report.solver
        );
    }
}

/// A cross-validation fold error is the loss of the fold's held-out rows
/// under the model fitted to the other rows: the model's mean squared
/// error on those rows (unweighted problem), and the weighted mean with
/// weights.
#[test]
fn fold_errors_are_the_loss_of_held_out_rows() {
    let mut rng = gen::rng(406);
    let (n, p) = (40, 2);
    let x = gen::normal_matrix(&mut rng, n, p);
    let y = gen::normal_vector(&mut rng, n) + x.column(1).mapv(|v| 0.5 * v);
    let w = gen::weights(&mut rng, n);
    for weighted in [false, true] {
        let mut b = Problem::builder(x.view(), y.view());
        if weighted {
            b = b.with_weights(w.view());
        }
        let problem = b.build().unwrap();
        let folds = RowFolds::new().with_folds(4).with_seed(9);
        let scores = folds.held_out_error(&Qr::new(), &problem).unwrap();
        let fold_of = folds.assignments(&problem).unwrap();
        for f in 0..4 {
            let train: Vec<usize> = (0..n).filter(|&i| fold_of[i] != Some(f)).collect();
            let test: Vec<usize> = (0..n).filter(|&i| fold_of[i] == Some(f)).collect();
            let xt: Array2<f64> = x.select(Axis(0), &train);
            let yt: Array1<f64> = y.select(Axis(0), &train);
            let wt: Array1<f64> = w.select(Axis(0), &train);
            let mut b = Problem::builder(xt.view(), yt.view());
            if weighted {
                b = b.with_weights(wt.view());
            }
            let fit = Qr::new().fit(&b.build().unwrap()).unwrap();
            let xh = x.select(Axis(0), &test);
            let yh = y.select(Axis(0), &test);
            let expected = if weighted {
                let r = &yh - &fit.predict(xh.view()).unwrap();
                weighted_mse(&r, &w.select(Axis(0), &test))
            } else {
                fit.model.mean_squared_error(xh.view(), yh.view()).unwrap()
            };
            let got = scores.fold_errors[f];
            assert!(
                (got - expected).abs() <= 1e-11 * expected,
                "weighted {weighted}, fold {f}: {got} vs {expected}"
            );
        }
    }
}
