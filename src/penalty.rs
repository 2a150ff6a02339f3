//! How the caller's ridge penalty maps into the scaled coordinates that the
//! solvers work in (see [`crate::prep::Scaling`]). Every solver that takes a
//! penalty goes through this module, so the scaling is the same everywhere.
//!
//! The caller's objective (documented in [`crate::ridge`]) is
//!
//! ```text
//! (1/2) sum_i w_i (y_i - b0 - x_i . b)^2 + (lambda/2) sum_j p_j b_j^2
//! ```
//!
//! with `p_j = 1`, or `p_j = sd_j^2` (the weighted variance of column `j`
//! about its centering mean) when the columns are standardised.
//!
//! The solvers use `Z_ij = sqrt(w_i / ws) (x_ij - m_j) / s_j` and
//! `t_i = sqrt(w_i / ws) (y_i - ybar) / s_y` (`ws` the weight scale, `s_j`,
//! `s_y` the power-of-two column and target scales) and coefficients
//! `gamma` with `b_j = gamma_j s_y / s_j`. Then
//! `sum_i w_i (y_i - ybar - (x_i - m) . b)^2 = ws s_y^2 |t - Z gamma|^2` and
//! `b_j^2 = gamma_j^2 s_y^2 / s_j^2`, so the objective divided by
//! `ws s_y^2` is
//!
//! ```text
//! (1/2) |t - Z gamma|^2 + (1/2) sum_j lambda_j gamma_j^2,
//! lambda_j = lambda p_j / (ws s_j^2).
//! ```
//!
//! The target scale cancels. For standardised columns,
//! `sd_j^2 = sum_i w_i (x_ij - m_j)^2 / sum_i w_i = s_j^2 |Z_j|^2 / W~`
//! (`W~ = sum_i w_i / ws`), so `lambda_j = lambda |Z_j|^2 / W` with `W` the
//! caller's total weight.
//!
//! [`PenaltyMap`] goes one step further for the closed-form solvers: with
//! `Ẑ_j = f_j Z_j` and `gamma_j = f_j gamma^_j`, where `f_j^2 = u / c_j` and
//! `lambda_j = lambda c_j`, the penalty becomes the same `mu = lambda u` on
//! every coefficient, and `Ẑ` is (up to the constant `sqrt(u)`) the caller's
//! weighted centered design (or its standardised form).

use crate::prep::Scaling;
use crate::problem::Problem;
use crate::scaled::{exponent, ldexp};

/// Largest penalty used in scaled coordinates: a penalty whose scaled value
/// exceeds the range of `f64` is used as `f64::MAX` (the coefficients it
/// multiplies are then below `1e-300` of their unpenalised values either
/// way). No other limit applies: the scaling is exact for every weight and
/// column scale.
pub(crate) const MAX_SCALED_PENALTY: f64 = f64::MAX;

/// Checks a caller's penalty: finite and `>= 0` (the crate's one check,
/// [`crate::error::check_finite_nonnegative`]).
pub(crate) use crate::error::check_finite_nonnegative as check_penalty;

/// The penalty `lambda_j` on each scaled coefficient `gamma_j` for the
/// caller's `lambda`: `lambda / (ws s_j^2)`, or with `sq_norms` (the squared
/// column norms `|Z_j|^2` of the scaled design, for standardised columns)
/// `lambda |Z_j|^2 / W`. Columns treated as constant get 0 (their column of
/// `Z` is zero). A value beyond the range of `f64` is `+inf`: an infinite
/// penalty in these units, which holds that slope at 0 (the caller's
/// treatment; nothing infinite reaches a result).
///
/// The closed-form ridge solvers use [`PenaltyMap`] instead; this form is
/// for solvers that keep the coordinates of `Scaling` (gradient methods).
pub(crate) fn column_penalties(
    problem: &Problem<'_>,
    scaling: &Scaling,
    lambda: f64,
    sq_norms: Option<&[f64]>,
) -> Vec<f64> {
    let ws = exponent(problem.stats.weight_scale);
    let total = problem.stats.total_weight;
    (0..problem.columns())
        .map(|j| {
            if scaling.constant[j] {
                return 0.0;
            }
            let v = match sq_norms {
                None => ldexp(lambda, -2 * scaling.scale_exp[j] - ws),
                Some(norms) => ldexp(lambda * (norms[j] / total), -ws),
            };
            if v.is_nan() {
                0.0
            } else {
                v
            }
        })
        .collect()
}

/// Column factors that make the penalty uniform (see the module docs).
#[derive(Debug, Clone)]
pub(crate) struct PenaltyMap {
    /// `f_j`, in `(0, 1]` for informative columns, 0 for columns treated as
    /// constant (or of zero norm).
    pub factors: Vec<f64>,
    /// `u = unit * 2^unit_exp`: the penalty on every `gamma^_j` is
    /// `lambda * u`. Held apart from its power of two, so that no weight or
    /// column scale can push it out of range.
    pub unit: f64,
    pub unit_exp: i32,
}

impl PenaltyMap {
    /// Plain penalty (`sq_norms = None`): `f_j = s_j / s_max`,
    /// `u = 1 / (ws s_max^2)` (powers of two, so exact). Standardised
    /// (`sq_norms = Some(|Z_j|^2)`): `f_j = sqrt(n_min / |Z_j|^2)`,
    /// `u = n_min / W`, with `n_min` the smallest non-zero squared norm.
    pub fn new(problem: &Problem<'_>, scaling: &Scaling, sq_norms: Option<&[f64]>) -> Self {
        Self::from_parts(
            &scaling.constant,
            &scaling.scale_exp,
            exponent(problem.stats.weight_scale),
            problem.stats.total_weight,
            sq_norms,
        )
    }

    /// As [`PenaltyMap::new`], from the pieces of a frame: which columns
    /// are constant, each column's scale `2^scale_exp[j]`, the weight scale
    /// `2^weight_exp` and the total weight divided by it (a fit state gives
    /// these without a [`Problem`]).
    pub fn from_parts(
        constant: &[bool],
        scale_exp: &[i32],
        weight_exp: i32,
        total_weight: f64,
        sq_norms: Option<&[f64]>,
    ) -> Self {
        let p = constant.len();
        let live = |j: usize| -> bool {
            !constant[j] && sq_norms.is_none_or(|n| n[j] > 0.0 && n[j].is_finite())
        };
        match sq_norms {
            None => {
                let Some(emax) = (0..p).filter(|&j| live(j)).map(|j| scale_exp[j]).max() else {
                    return PenaltyMap {
                        factors: vec![0.0; p],
                        unit: 1.0,
                        unit_exp: 0,
                    };
                };
                let factors = (0..p)
                    .map(|j| {
                        if live(j) {
                            ldexp(1.0, scale_exp[j] - emax)
                        } else {
                            0.0
                        }
                    })
                    .collect();
                PenaltyMap {
                    factors,
                    unit: 1.0,
                    unit_exp: -2 * emax - weight_exp,
                }
            }
            Some(norms) => {
                let nmin = (0..p)
                    .filter(|&j| live(j))
                    .map(|j| norms[j])
                    .fold(f64::INFINITY, f64::min);
                if !nmin.is_finite() {
                    return PenaltyMap {
                        factors: vec![0.0; p],
                        unit: 1.0,
                        unit_exp: 0,
                    };
                }
                let factors = (0..p)
                    .map(|j| {
                        if live(j) {
                            (nmin / norms[j]).sqrt()
                        } else {
                            0.0
                        }
                    })
                    .collect();
                // u = n_min / W with W = W~ ws (the caller's total weight).
                PenaltyMap {
                    factors,
                    unit: nmin / total_weight,
                    unit_exp: -weight_exp,
                }
            }
        }
    }

    /// The uniform penalty `mu = lambda u` in the coordinates `gamma^`.
    pub fn scaled(&self, lambda: f64) -> f64 {
        ldexp(lambda * self.unit, self.unit_exp).min(MAX_SCALED_PENALTY)
    }

    /// `sqrt(v / u)`: a singular value in the penalty's units from its
    /// square `v` in uniform-penalty coordinates.
    pub fn caller_singular_value(&self, v: f64) -> f64 {
        let e = -self.unit_exp;
        let odd = f64::from(1 << e.rem_euclid(2));
        ldexp((v / self.unit * odd).sqrt(), e.div_euclid(2))
    }

    /// Whether column `j` takes part (non-zero factor).
    pub fn is_live(&self, j: usize) -> bool {
        self.factors[j] != 0.0
    }

    /// Coefficients in the caller's units: `b_j = f_j gamma^_j s_y / s_j`.
    pub fn to_caller(&self, scaling: &Scaling, gamma_hat: &[f64]) -> Vec<f64> {
        self.to_caller_parts(&scaling.scale_exp, scaling.target_exp, gamma_hat)
    }

    /// As [`PenaltyMap::to_caller`], from the column scales `2^scale_exp[j]`
    /// and the target scale `2^target_exp` of a frame.
    pub fn to_caller_parts(
        &self,
        scale_exp: &[i32],
        target_exp: i32,
        gamma_hat: &[f64],
    ) -> Vec<f64> {
        gamma_hat
            .iter()
            .enumerate()
            .map(|(j, g)| {
                if self.factors[j] == 0.0 {
                    0.0
                } else {
                    ldexp(self.factors[j] * g, target_exp - scale_exp[j])
                }
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    //! The reference here is an identity: the scaled solution, mapped back,
    //! must satisfy the caller-unit penalised normal equations
    //! `(Xc^T W Xc + lambda P) b = Xc^T W yc`, solved independently with
    //! nalgebra from the raw arrays.
    use super::*;
    use crate::error::Error;
    use crate::prep::fill_block;
    use nalgebra::{DMatrix, DVector};
    use ndarray::{Array1, Array2};
    use rand::{RngExt, SeedableRng};

    fn random_problem(seed: u64, n: usize, p: usize) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let scales = [1e3, 1e-2, 7.0, 1e5, 0.3];
        let x = Array2::from_shape_fn((n, p), |(_, j)| {
            scales[j % scales.len()] * (rng.random::<f64>() - 0.5) + 40.0 * scales[j % 5]
        });
        let y = Array1::from_shape_fn(n, |i| 1e4 + x[(i, 0)] * 0.01 + rng.random::<f64>() * 50.0);
        let w = Array1::from_shape_fn(n, |i| {
            if i % 7 == 3 {
                0.0
            } else {
                0.5 + 3.0 * rng.random::<f64>()
            }
        });
        (x, y, w)
    }

    /// Solves the caller-unit system with nalgebra and returns (b, sd^2).
    fn caller_solution(
        x: &Array2<f64>,
        y: &Array1<f64>,
        w: &Array1<f64>,
        lambda: f64,
        standardize: bool,
    ) -> DVector<f64> {
        let (n, p) = x.dim();
        let wsum: f64 = w.sum();
        let m: Vec<f64> = (0..p)
            .map(|j| (0..n).map(|i| w[i] * x[(i, j)]).sum::<f64>() / wsum)
            .collect();
        let ym = (0..n).map(|i| w[i] * y[i]).sum::<f64>() / wsum;
        let xc = DMatrix::from_fn(n, p, |i, j| x[(i, j)] - m[j]);
        let yc = DVector::from_fn(n, |i, _| y[i] - ym);
        let wd = DMatrix::from_diagonal(&DVector::from_fn(n, |i, _| w[i]));
        let mut a = xc.transpose() * &wd * &xc;
        for j in 0..p {
            let pj = if standardize { a[(j, j)] / wsum } else { 1.0 };
            a[(j, j)] += lambda * pj;
        }
        let rhs = xc.transpose() * &wd * &yc;
        a.lu().solve(&rhs).expect("caller system is regular")
    }

    #[test]
    fn scaled_penalties_reproduce_caller_normal_equations() {
        for (seed, standardize) in [(1, false), (2, true), (3, false), (4, true)] {
            let (n, p) = (40, 5);
            let (x, y, w) = random_problem(seed, n, p);
            let problem = Problem::builder(x.view(), y.view())
                .with_weights(w.view())
                .build()
                .expect("valid problem");
            let scaling = Scaling::new(&problem, problem.default_rank_tolerance());
            let mut z = faer::Mat::<f64>::zeros(n, p + 1);
            fill_block(&problem, &scaling, 0, n, true, z.as_mut());
            let zm = DMatrix::from_fn(n, p, |i, j| z[(i, j)]);
            let t = DVector::from_fn(n, |i, _| z[(i, p)]);
            let norms: Vec<f64> = (0..p).map(|j| zm.column(j).norm_squared()).collect();
            let sq = standardize.then_some(norms.as_slice());
            for lambda in [1e-3, 2.5, 1e4] {
                let expected = caller_solution(&x, &y, &w, lambda, standardize);
                let scale_b = expected.amax();
                // Per-column penalties on gamma.
                let pen = column_penalties(&problem, &scaling, lambda, sq);
                let mut a = zm.transpose() * &zm;
                for j in 0..p {
                    a[(j, j)] += pen[j];
                }
                let gamma = a.lu().solve(&(zm.transpose() * &t)).expect("regular");
                for j in 0..p {
                    let b = gamma[j] * scaling.target_scale / scaling.scale[j];
                    assert!(
                        (b - expected[j]).abs() <= 1e-9 * scale_b.max(expected[j].abs()),
                        "seed {seed} lambda {lambda} column {j}: {b} vs {}",
                        expected[j]
                    );
                }
                // Uniform penalty through the column factors.
                let map = PenaltyMap::new(&problem, &scaling, sq);
                let zh = DMatrix::from_fn(n, p, |i, j| zm[(i, j)] * map.factors[j]);
                let mut ah = zh.transpose() * &zh;
                for j in 0..p {
                    ah[(j, j)] += map.scaled(lambda);
                }
                let gh = ah.lu().solve(&(zh.transpose() * &t)).expect("regular");
                let b = map.to_caller(&scaling, gh.as_slice());
                for j in 0..p {
                    assert!(
                        (b[j] - expected[j]).abs() <= 1e-9 * scale_b.max(expected[j].abs()),
                        "map: seed {seed} lambda {lambda} column {j}: {} vs {}",
                        b[j],
                        expected[j]
                    );
                }
            }
        }
    }

    #[test]
    fn negative_and_non_finite_penalties_are_refused() {
        for bad in [-1.0, f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            assert!(matches!(
                check_penalty("penalty", bad),
                Err(Error::InvalidParameter {
                    name: "penalty",
                    ..
                })
            ));
        }
        assert_eq!(check_penalty("penalty", 0.0), Ok(0.0));
    }
}
