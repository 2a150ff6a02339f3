//! K-fold cross-validation of any solver.

use ndarray::Array1;
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::error::{Error, Result};
use crate::problem::Problem;
use crate::solver::Solver;

/// K-fold cross-validation that scores any [`Solver`] by the error of
/// predicting held-out rows.
///
/// The rows with non-zero weight are shuffled with a ChaCha8 generator
/// seeded by `seed` and dealt round-robin into `folds` folds (sizes differ
/// by at most one); the same seed and problem give the same folds on every
/// machine and thread count. Rows with zero weight belong to no fold.
///
/// Each training problem is the caller's problem with the held-out rows'
/// weights set to zero (the other weights kept): **no row of the design is
/// copied**; each fold costs one weight vector of length `n`, one
/// validation pass of the problem and one fit. Fitting a row set through
/// zero weights is the same weighted least-squares problem as fitting the
/// remaining rows alone.
///
/// A fold's error is the weighted mean squared prediction error of its
/// held-out rows, `sum w_i (y_i - y^_i)^2 / sum w_i`.
///
/// ```
/// use leastline::ridge::{KFold, Ridge};
/// use leastline::{Problem, Qr, Solver};
/// use ndarray::Array2;
///
/// // Delivery times of a courier against distance and parcel count.
/// let x = Array2::from_shape_fn((40, 2), |(i, j)| ((i * (j + 3)) % 11) as f64 + 0.5 * j as f64);
/// let y = x.column(0).mapv(|d| 4.0 + 1.5 * d) + x.column(1).mapv(|c| 0.3 * c);
/// let problem = Problem::new(x.view(), y.view())?;
/// let cv = KFold::new(5, 7);
/// let candidates: Vec<Box<dyn Solver>> = vec![Box::new(Qr::default()), Box::new(Ridge::new(10.0))];
/// for solver in &candidates {
///     let score = cv.cross_validate(solver.as_ref(), &problem)?;
///     println!("{}: {:.3} +- {:.3}", solver.name(), score.mean_error, score.std_error);
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KFold {
    /// Number of folds, at least 2 and at most the usable rows.
    pub folds: usize,
    /// Seed of the shuffle.
    pub seed: u64,
}

impl Default for KFold {
    /// Five folds, seed 0.
    fn default() -> Self {
        KFold { folds: 5, seed: 0 }
    }
}

/// What k-fold cross-validation measured.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct CrossValidation {
    /// Weighted mean squared prediction error of each held-out fold.
    pub fold_errors: Vec<f64>,
    /// Rows with non-zero weight held out in each fold.
    pub fold_rows: Vec<usize>,
    /// Mean of the fold errors.
    pub mean_error: f64,
    /// Sample standard deviation of the fold errors (divisor `k - 1`).
    pub std_dev: f64,
    /// Standard error of the mean, `std_dev / sqrt(k)`.
    pub std_error: f64,
}

impl KFold {
    /// `folds` folds shuffled with `seed`.
    pub fn new(folds: usize, seed: u64) -> Self {
        KFold { folds, seed }
    }

    /// The fold of each row (`None` for rows of zero weight).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] when `folds < 2`;
    /// [`Error::TooFewRowsForFolds`] when fewer rows have non-zero weight
    /// than there are folds.
    pub fn assignments(&self, problem: &Problem<'_>) -> Result<Vec<Option<usize>>> {
        if self.folds < 2 {
            return Err(Error::InvalidParameter {
                name: "folds",
                value: self.folds as f64,
                reason: "must be at least 2",
            });
        }
        let mut usable: Vec<usize> = (0..problem.rows())
            .filter(|&i| problem.scaled_weight(i) > 0.0)
            .collect();
        if usable.len() < self.folds {
            return Err(Error::TooFewRowsForFolds {
                usable_rows: usable.len(),
                folds: self.folds,
            });
        }
        let mut rng = ChaCha8Rng::seed_from_u64(self.seed);
        usable.shuffle(&mut rng);
        let mut out = vec![None; problem.rows()];
        for (pos, &i) in usable.iter().enumerate() {
            out[i] = Some(pos % self.folds);
        }
        Ok(out)
    }

    /// Fits `solver` once per fold on the other folds and scores it on the
    /// held-out one.
    ///
    /// # Errors
    /// As [`KFold::assignments`]; [`Error::FoldFit`] carrying the fold and
    /// the solver's error when a training fit fails.
    pub fn cross_validate(
        &self,
        solver: &dyn Solver,
        problem: &Problem<'_>,
    ) -> Result<CrossValidation> {
        let fold_of = self.assignments(problem)?;
        let x = problem.design();
        let y = problem.target();
        let base = |i: usize| problem.weights().map_or(1.0, |w| w[i]);
        let k = self.folds;
        let mut fold_errors = Vec::with_capacity(k);
        let mut fold_rows = Vec::with_capacity(k);
        for fold in 0..k {
            let train = Array1::from_shape_fn(problem.rows(), |i| match fold_of[i] {
                Some(f) if f != fold => base(i),
                _ => 0.0,
            });
            let fit = Problem::builder(x, y)
                .weights(train.view())
                .intercept(problem.has_intercept())
                .build()
                .and_then(|training| solver.fit(&training))
                .map_err(|e| Error::FoldFit {
                    fold,
                    error: Box::new(e),
                })?;
            let (mut num, mut den, mut count) = (0.0, 0.0, 0usize);
            for (i, f) in fold_of.iter().enumerate() {
                if *f != Some(fold) {
                    continue;
                }
                let e = y[i] - fit.model.predict_row(x.row(i))?;
                num += base(i) * e * e;
                den += base(i);
                count += 1;
            }
            fold_errors.push(num / den);
            fold_rows.push(count);
        }
        let kf = k as f64;
        let mean_error = fold_errors.iter().sum::<f64>() / kf;
        let var = fold_errors
            .iter()
            .map(|e| (e - mean_error) * (e - mean_error))
            .sum::<f64>()
            / (kf - 1.0);
        let std_dev = var.sqrt();
        Ok(CrossValidation {
            fold_errors,
            fold_rows,
            mean_error,
            std_dev,
            std_error: std_dev / kf.sqrt(),
        })
    }
}
