//! No input makes the crate panic: on small designs full of awkward values
//! (zeros, duplicates, constants, values near the ends of the f64 range)
//! with awkward weights, every solver, the ridge path, inference and the
//! model's methods return `Ok` or a typed `Err`, and an `Ok` fit never holds
//! a non-finite coefficient.

mod common;

use leastline::ridge::Criterion;
use leastline::{
    Accelerated, Cholesky, GradientDescent, Problem, Qr, Ridge, RidgeFactorization, RidgePath,
    RowFolds, Solver, Stochastic, Svd,
};
use ndarray::{Array1, Array2};
use proptest::prelude::*;

const AWKWARD: [f64; 12] = [
    0.0, 1.0, -1.0, 2.5, 1e300, -1e300, 1e-300, 3e-310, 1e150, 7.0, 7.0, 1e8,
];

fn solvers() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(Qr::new()),
        Box::new(Qr::refined()),
        Box::new(Cholesky::new()),
        Box::new(Svd::new()),
        Box::new(Ridge::new(0.0)),
        Box::new(Ridge::new(1.0)),
        Box::new(Ridge::new(0.5).with_factorization(RidgeFactorization::Dual)),
        Box::new(
            Ridge::new(2.0)
                .with_factorization(RidgeFactorization::AugmentedQr)
                .with_standardize(true),
        ),
        Box::new(Ridge::new(1e-3).with_factorization(RidgeFactorization::Svd)),
        Box::new(GradientDescent::new().with_max_iterations(50)),
        Box::new(Accelerated::new().with_max_iterations(50)),
        Box::new(Stochastic::new().with_max_iterations(3)),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(64)))]

    #[test]
    fn awkward_inputs_give_results_or_typed_errors(
        n in 1usize..7,
        p in 0usize..4,
        picks in proptest::collection::vec(0usize..AWKWARD.len(), 40),
        wpicks in proptest::collection::vec(0usize..4, 8),
        intercept in any::<bool>(),
        weighted in any::<bool>(),
    ) {
        let x = Array2::from_shape_fn((n, p), |(i, j)| AWKWARD[picks[(i * 4 + j) % picks.len()]]);
        let y = Array1::from_shape_fn(n, |i| AWKWARD[picks[(i * 7 + 3) % picks.len()]]);
        let w = Array1::from_shape_fn(n, |i| [0.0, 1.0, 2.0, 1e-200][wpicks[i % wpicks.len()]]);
        let mut builder = Problem::builder(x.view(), y.view()).with_intercept(intercept);
        if weighted {
            builder = builder.with_weights(w.view());
        }
        let Ok(problem) = builder.build() else { return Ok(()) };
        for solver in solvers() {
            if let Ok(fit) = solver.fit(&problem) {
                prop_assert!(fit.model.coefficients().iter().all(|b| b.is_finite()), "{}", solver.name());
                prop_assert!(fit.model.intercept().is_finite(), "{}", solver.name());
                let _ = fit.model.predict(x.view());
                let _ = fit.model.r_squared(x.view(), y.view());
                if let Ok(inference) = fit.inference(&problem) {
                    let _ = inference.predict(x.view());
                    let _ = inference.diagnostics(&problem);
                    let _ = inference.to_string();
                }
            }
        }
        if let Ok(path) = RidgePath::new(&problem, false) {
            if let Ok(grid) = path.default_grid(5) {
                let _ = path.curve(&grid, Criterion::LeaveOneOut);
            }
            let _ = path.fit(1.0);
        }
        let _ = RowFolds::new().with_folds(2).with_seed(1).held_out_error(&Qr::new(), &problem);
    }
}
