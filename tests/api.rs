//! The names a newcomer guesses compile, and the crate says one thing one
//! way. Most checks here are compile checks: if a name moves, this file
//! stops building.

use leastline::ndarray::{array, Array1, Array2};
use leastline::{
    Accelerated, Cholesky, CovarianceKind, Criterion, Error, GradientDescent, HeldOutError,
    Inference, InferenceOptions, LinearModel, Problem, Qr, Refinement, Ridge, RidgeFactorization,
    RidgePath, RowFolds, Solver, Stochastic, Svd,
};

/// A small invented workshop log: minutes per job against parts and
/// machine hours.
fn workshop() -> (Array2<f64>, Array1<f64>) {
    let x = array![
        [3.0, 1.5],
        [5.0, 2.0],
        [2.0, 0.5],
        [7.0, 3.5],
        [4.0, 1.0],
        [6.0, 2.5],
        [8.0, 4.0],
        [1.0, 0.5],
    ];
    let y = array![31.0, 44.0, 20.0, 66.0, 33.0, 53.0, 72.0, 12.0];
    (x, y)
}

/// Every settings type is built the same way: `new()` (or `new(required)`)
/// and chainable `with_*` setters, with getters of the same name.
#[test]
fn every_settings_type_builds_with_new_and_with_setters() {
    let qr = Qr::new().with_rank_tolerance(1e-12).with_refinement(
        Refinement::new()
            .with_max_iterations(3)
            .with_tolerance(1e-15),
    );
    assert_eq!(qr.rank_tolerance(), Some(1e-12));
    assert_eq!(qr.refinement().map(|r| r.max_iterations()), Some(3));
    let ch = Cholesky::new()
        .with_rank_tolerance(1e-10)
        .with_min_digits(6.0);
    assert_eq!(ch.min_digits(), 6.0);
    let svd = Svd::new().with_rank_tolerance(1e-9);
    assert_eq!(svd.rank_tolerance(), Some(1e-9));
    let ridge = Ridge::new(0.5)
        .with_standardize(true)
        .with_factorization(RidgeFactorization::Svd);
    assert_eq!(ridge.penalty(), 0.5);
    assert!(ridge.standardize());
    assert_eq!(Ridge::new(1.0).factorization(), RidgeFactorization::ByShape);
    let gd = GradientDescent::new()
        .with_max_iterations(7)
        .with_tolerance(1e-9);
    assert_eq!(gd.max_iterations(), 7);
    let acc = Accelerated::new().with_max_iterations(9).with_penalty(0.1);
    assert_eq!(acc.max_iterations(), 9);
    let sgd = Stochastic::new()
        .with_max_iterations(11)
        .with_batch_size(32)
        .with_seed(5);
    assert_eq!(
        (sgd.max_iterations(), sgd.batch_size(), sgd.seed()),
        (Some(11), 32, 5)
    );
    assert_eq!(Stochastic::new().max_iterations(), None);
    let folds = RowFolds::new().with_folds(4).with_seed(3);
    assert_eq!((folds.folds(), folds.seed()), (4, 3));
    let options = InferenceOptions::new()
        .with_covariance(CovarianceKind::Hc3)
        .with_level(0.9);
    assert_eq!(options.level(), 0.9);
    assert_eq!(options.covariance(), CovarianceKind::Hc3);
    // `Default` agrees with `new()` where both exist.
    assert_eq!(Qr::default(), Qr::new());
    assert_eq!(Stochastic::default(), Stochastic::new());
}

/// `Solver::name()` is exactly the `solver` of the report it produces.
#[test]
fn solver_name_equals_report_solver() {
    let (x, y) = workshop();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(0.0)),
        Box::new(Ridge::new(2.0)),
        Box::new(Ridge::new(2.0).with_factorization(RidgeFactorization::Cholesky)),
        Box::new(Ridge::new(2.0).with_factorization(RidgeFactorization::AugmentedQr)),
        Box::new(Ridge::new(2.0).with_factorization(RidgeFactorization::Svd)),
        Box::new(Ridge::new(2.0).with_factorization(RidgeFactorization::Dual)),
        Box::new(GradientDescent::new().with_max_iterations(50)),
        Box::new(Accelerated::new().with_max_iterations(50)),
        Box::new(Stochastic::new().with_max_iterations(5)),
    ];
    for solver in &solvers {
        let fit = solver.fit(&problem).unwrap();
        assert_eq!(fit.report.solver, solver.name());
        // Closed forms say what they factored; gradient solvers factor nothing.
        assert_eq!(
            fit.report.factorization.is_some(),
            fit.report.iterations.is_none() || solver.name() == "qr-refined",
            "{}",
            solver.name()
        );
    }
}

/// The model and the problem count their columns with the same word.
#[test]
fn columns_is_the_one_word_for_the_number_of_columns() {
    let (x, y) = workshop();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    assert_eq!(problem.columns(), 2);
    assert_eq!(fit.model.columns(), 2);
    assert_eq!(fit.report.columns, 2);
    let model = LinearModel::new(array![1.0, 2.0], 0.5).unwrap();
    assert_eq!(model.columns(), 2);
}

/// Held-out error and penalty choice under our own names; the criterion
/// in an error is typed.
#[test]
fn held_out_error_and_penalty_choice_names() {
    let (x, y) = workshop();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let score: HeldOutError = RowFolds::new()
        .with_folds(4)
        .held_out_error(&Qr::new(), &problem)
        .unwrap();
    assert_eq!(score.fold_errors.len(), 4);
    let path = RidgePath::new(&problem, false).unwrap();
    let curve = path
        .curve(&[0.0, 1.0, 10.0], Criterion::GeneralizedCrossValidation)
        .unwrap();
    assert_eq!(curve.penalties.len(), 3);
    // A penalty of 0 on more columns than rows interpolates: no finite
    // score, and the error carries the criterion as a value.
    let wide = Array2::from_shape_fn((4, 6), |(i, j)| ((i * 7 + j * 3) % 11) as f64);
    let target = array![1.0, 4.0, 2.0, 8.0];
    let wide_problem = Problem::new(wide.view(), target.view()).unwrap();
    let wide_path = RidgePath::new(&wide_problem, false).unwrap();
    let err = wide_path.curve(&[0.0], Criterion::LeaveOneOut).unwrap_err();
    assert!(matches!(
        err,
        Error::NoFiniteScore {
            criterion: Criterion::LeaveOneOut,
            ..
        }
    ));
}

/// The inference result types are at the root beside `Inference`.
#[test]
fn inference_types_are_at_the_root() {
    let (x, y) = workshop();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inference = Inference::new(&problem, &fit).unwrap();
    let first: &leastline::Estimate = inference.estimates().next().unwrap();
    assert!(first.std_error > 0.0);
    let _goodness: &leastline::GoodnessOfFit = &inference.goodness;
    let _diag: leastline::Diagnostics = inference.diagnostics(&problem).unwrap();
    let _pred: leastline::Predictions = inference.predict(x.view()).unwrap();
}
