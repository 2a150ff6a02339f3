//! K-fold cross-validation of any solver.

use ndarray::ArrayView1;
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::error::{Error, Result};
use crate::model::difference;
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp};
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
/// A fold's error is the crate's loss (see [the crate docs](crate#the-loss))
/// on its held-out rows: the weighted mean squared prediction error
/// `sum w_i (y_i - y^_i)^2 / sum w_i`.
///
/// ```
/// use leastline::ridge::{RowFolds, Ridge};
/// use leastline::{Problem, Qr, Solver};
/// use ndarray::Array2;
///
/// // Delivery times of a courier against distance and parcel count.
/// let x = Array2::from_shape_fn((40, 2), |(i, j)| ((i * (j + 3)) % 11) as f64 + 0.5 * j as f64);
/// let y = x.column(0).mapv(|d| 4.0 + 1.5 * d) + x.column(1).mapv(|c| 0.3 * c);
/// let problem = Problem::new(x.view(), y.view())?;
/// let cv = RowFolds::new().with_folds(5).with_seed(7);
/// let candidates: Vec<Box<dyn Solver>> = vec![Box::new(Qr::new()), Box::new(Ridge::new(10.0))];
/// for solver in &candidates {
///     let score = cv.held_out_error(solver.as_ref(), &problem)?;
///     println!("{}: {:.3} +- {:.3}", solver.name(), score.mean_error, score.std_error);
/// }
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct RowFolds {
    /// Number of folds, at least 2 and at most the usable rows.
    pub(crate) folds: usize,
    /// Seed of the shuffle.
    pub(crate) seed: u64,
}

impl Default for RowFolds {
    /// Five folds, seed 0.
    fn default() -> Self {
        RowFolds { folds: 5, seed: 0 }
    }
}

checked_settings!(RowFolds {
    folds: usize,
    seed: u64,
});

impl RowFolds {
    /// Checks the settings (as a fit does), for reading saved settings.
    #[cfg_attr(not(feature = "serde"), allow(dead_code))]
    pub(crate) fn check(&self) -> Result<()> {
        if self.folds < 2 {
            return Err(Error::InvalidParameter {
                name: "folds",
                value: self.folds as f64,
                reason: "must be at least 2",
            });
        }
        Ok(())
    }
}

impl RowFolds {
    crate::settings::setting! {
        /// Number of folds, at least 2 and at most the usable rows.
        with_folds / folds: plain usize
    }

    crate::settings::setting! {
        /// Seed of the shuffle.
        with_seed / seed: plain u64
    }
}

/// What k-fold cross-validation measured.
#[derive(Debug, Clone, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub struct HeldOutError {
    /// Weighted mean squared prediction error of each held-out fold.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::floats"))]
    pub fold_errors: Vec<f64>,
    /// Rows with non-zero weight held out in each fold.
    pub fold_rows: Vec<usize>,
    /// Mean of the fold errors.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub mean_error: f64,
    /// Sample standard deviation of the fold errors (divisor `k - 1`).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub std_dev: f64,
    /// Standard error of the mean, `std_dev / sqrt(k)`.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_float::float"))]
    pub std_error: f64,
}

/// `sum_i w_i r_i^2 / sum_i w_i` for residuals `r_i = m_i 2^e_i`, formed
/// from values divided by a power of two near the largest (no overflow of
/// the squares); infinite only when the mean itself exceeds the range.
fn weighted_mean_square(items: &[(f64, (f64, i32))]) -> f64 {
    let top = items
        .iter()
        .filter(|(w, (m, _))| *w != 0.0 && *m != 0.0)
        .map(|(_, (m, e))| exponent(*m) + e)
        .max();
    let Some(top) = top else {
        return 0.0;
    };
    let (mut num, mut den) = (0.0, 0.0);
    for &(w, (m, e)) in items {
        let s = ldexp(m, e - top);
        num += w * s * s;
        den += w;
    }
    ldexp(num / den, 2 * top)
}

impl RowFolds {
    /// Five folds shuffled with seed 0; change them with
    /// [`Self::with_folds`] and [`Self::with_seed`].
    pub fn new() -> Self {
        Self::default()
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
    /// Every error is formed from scaled values, so weights and targets near
    /// the ends of the `f64` range give finite scores (or a typed error
    /// when a score itself exceeds the range).
    ///
    /// # Errors
    /// As [`RowFolds::assignments`]; [`Error::FoldFit`] carrying the fold and
    /// the solver's error when a training fit fails; [`Error::OverflowAt`]
    /// naming a held-out row whose prediction exceeds the range of `f64`;
    /// [`Error::Overflow`] when a fold's error does; [`Error::TooLarge`]
    /// when the training weights cannot be allocated.
    pub fn held_out_error(
        &self,
        solver: &dyn Solver,
        problem: &Problem<'_>,
    ) -> Result<HeldOutError> {
        let fold_of = self.assignments(problem)?;
        let x = problem.design();
        let y = problem.target();
        let base = |i: usize| problem.weights().map_or(1.0, |w| w[i]);
        let k = self.folds;
        let mut fold_errors = Vec::with_capacity(k);
        let mut fold_rows = Vec::with_capacity(k);
        let mut train = crate::alloc::vec("training weights", problem.rows(), 0.0)?;
        let mut held: Vec<(f64, (f64, i32))> = Vec::new();
        for fold in 0..k {
            for (i, t) in train.iter_mut().enumerate() {
                *t = match fold_of[i] {
                    Some(f) if f != fold => base(i),
                    _ => 0.0,
                };
            }
            let fit = Problem::builder(x, y)
                .with_weights(ArrayView1::from(&train[..]))
                .with_intercept(problem.has_intercept())
                .build()
                .and_then(|training| solver.fit(&training))
                .map_err(|e| Error::FoldFit {
                    fold,
                    error: Box::new(e),
                })?;
            // The held-out rows' scaled weights (w / ws: the weight scale
            // cancels in the weighted mean, and sums of weights near 1e308
            // cannot overflow) and residuals as mantissa and exponent.
            held.clear();
            for (i, f) in fold_of.iter().enumerate() {
                if *f != Some(fold) {
                    continue;
                }
                let predicted = fit.model.predict_row(x.row(i)).map_err(|e| match e {
                    Error::OverflowAt { what, .. } => Error::OverflowAt { what, row: i },
                    other => other,
                })?;
                held.push((problem.scaled_weight(i), difference(y[i], predicted)));
            }
            let error = weighted_mean_square(&held);
            if !error.is_finite() {
                return Err(Error::Overflow { what: "fold error" });
            }
            fold_errors.push(error);
            fold_rows.push(held.len());
        }
        let kf = k as f64;
        let mean_error = crate::scaled::weighted_mean(fold_errors.iter().map(|&e| (1.0, e)));
        let spread = crate::scaled::ScaledSquares::weighted(
            fold_errors.iter().map(|&e| (1.0, e - mean_error)),
        );
        let std_dev = spread.sqrt() / (kf - 1.0).sqrt();
        Ok(HeldOutError {
            fold_errors,
            fold_rows,
            mean_error,
            std_dev,
            std_error: std_dev / kf.sqrt(),
        })
    }
}
