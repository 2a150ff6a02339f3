//! Independent cross-check against nalgebra (a general-purpose linear-algebra
//! crate, dev-dependency): on random least-squares problems whose
//! conditioning is chosen, the QR and SVD solvers (and refined QR) agree
//! with nalgebra's Householder-QR least-squares solution (condition numbers
//! from nalgebra's SVD) to within what the condition
//! number allows.
//!
//! Construction: `X = U diag(s) V^T` with `U` (n x p) and `V` (p x p) the
//! orthonormal factors of nalgebra QR decompositions of Gaussian matrices
//! and singular values spread geometrically from 1 down to `1 / cond`, then
//! `y = X b + noise`. With an intercept, the reference solves for the
//! design `[1 X]`, and the tolerance uses that matrix's condition number.
//!
//! Tolerance (standard least-squares perturbation theory, e.g. Wedin's
//! bound for a backward-stable solver; here `k` = condition number of the
//! reference design, `eps` = f64 epsilon, `r` = residual):
//! `|b - b_ref| / |b_ref| <= c * k * eps * (1 + k * |r| / (|X| |b_ref|))`,
//! with `c = 32`: the bound's constant grows with the dimensions in the
//! worst case; measured over these cases the largest ratio of the distance
//! to `k * eps * (...)` is about 2.6 (for k = 1), so 32 leaves a factor of
//! 12 and still fails an error of 1e-6 on a well-conditioned problem.
//! Seeded: the proptest runner's seed is fixed.

use leastline::{Problem, Qr, Solver, Svd};
use nalgebra::{DMatrix, DVector};
use ndarray::{Array1, Array2};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// Standard normal draws by the Box-Muller transform.
fn gaussian(rng: &mut ChaCha8Rng) -> f64 {
    use rand::RngExt;
    let u1: f64 = rng.random_range(f64::EPSILON..1.0);
    let u2: f64 = rng.random_range(0.0..1.0);
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

fn orthonormal(rows: usize, cols: usize, rng: &mut ChaCha8Rng) -> DMatrix<f64> {
    let g = DMatrix::from_fn(rows, cols, |_, _| gaussian(rng));
    g.qr().q().columns(0, cols).into_owned()
}

struct Case {
    x: Array2<f64>,
    y: Array1<f64>,
    intercept: bool,
}

fn build(seed: u64, n: usize, p: usize, log_cond: f64, noise: f64, intercept: bool) -> Case {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let u = orthonormal(n, p, &mut rng);
    let v = orthonormal(p, p, &mut rng);
    let s = DVector::from_fn(p, |i, _| {
        let t = if p == 1 {
            0.0
        } else {
            i as f64 / (p - 1) as f64
        };
        10f64.powf(-log_cond * t)
    });
    let xm = u * DMatrix::from_diagonal(&s) * v.transpose();
    let b = DVector::from_fn(p, |_, _| gaussian(&mut rng));
    let mut y = &xm * b;
    let offset = if intercept {
        5.0 * gaussian(&mut rng)
    } else {
        0.0
    };
    for yi in y.iter_mut() {
        *yi += offset + noise * gaussian(&mut rng);
    }
    Case {
        x: Array2::from_shape_fn((n, p), |(i, j)| xm[(i, j)]),
        y: Array1::from_iter(y.iter().copied()),
        intercept,
    }
}

/// nalgebra's QR least-squares solution `[b0,] b`, the 2-norm condition (SVD)
/// number of the design it solved for, its norm and the residual norm.
fn reference(case: &Case) -> (Vec<f64>, f64, f64, f64) {
    let (n, p) = case.x.dim();
    let k = p + usize::from(case.intercept);
    let a = DMatrix::from_fn(n, k, |i, j| {
        if case.intercept {
            if j == 0 {
                1.0
            } else {
                case.x[[i, j - 1]]
            }
        } else {
            case.x[[i, j]]
        }
    });
    let y = DVector::from_iterator(n, case.y.iter().copied());
    let svd = a.clone().svd(true, true);
    let smax = svd.singular_values.max();
    let smin = svd.singular_values.min();
    // The reference solution comes from nalgebra's Householder QR: its SVD
    // loses the small singular vectors' accuracy at condition numbers near
    // 1e8 (seen on a 12 x 2 case where the SVD solve was off by 7e-3 while
    // QR and the exact rational solution agreed to 8 and 11 digits), so the
    // SVD serves only for the condition number.
    let qr = a.clone().qr();
    let qty = qr.q().transpose() * &y;
    let sol = qr.r().solve_upper_triangular(&qty).expect("full rank");
    let resid = (&y - &a * &sol).norm();
    (sol.iter().copied().collect(), smax / smin, smax, resid)
}

fn ours(fit: &leastline::Fit, intercept: bool) -> Vec<f64> {
    let mut out = Vec::new();
    if intercept {
        out.push(fit.model.intercept());
    }
    out.extend(fit.model.coefficients().iter());
    out
}

fn relative_distance(a: &[f64], b: &[f64]) -> f64 {
    let num: f64 = a.iter().zip(b).map(|(x, y)| (x - y) * (x - y)).sum();
    let den: f64 = b.iter().map(|y| y * y).sum();
    (num / den).sqrt()
}

fn check(case: &Case) -> Result<(), TestCaseError> {
    let (n, p) = case.x.dim();
    let (best, cond, norm_a, resid) = reference(case);
    let b_norm = best.iter().map(|v| v * v).sum::<f64>().sqrt();
    let c = 32.0;
    let tol = c * cond * f64::EPSILON * (1.0 + cond * resid / (norm_a * b_norm));
    let problem = Problem::builder(case.x.view(), case.y.view())
        .with_intercept(case.intercept)
        .build()
        .map_err(|e| TestCaseError::fail(e.to_string()))?;
    let solvers: [(&str, Box<dyn Solver>); 3] = [
        ("qr", Box::new(Qr::new())),
        ("svd", Box::new(Svd::new())),
        ("refined qr", Box::new(Qr::refined())),
    ];
    for (name, solver) in solvers {
        let fit = solver
            .fit(&problem)
            .map_err(|e| TestCaseError::fail(format!("{name}: {e}")))?;
        if name == "svd" {
            prop_assert_eq!(fit.report.rank, Some(p));
        }
        let dist = relative_distance(&ours(&fit, case.intercept), &best);
        prop_assert!(
            dist <= tol,
            "{}: relative distance {:e} > tolerance {:e} (cond {:e}, n {}, p {})",
            name,
            dist,
            tol,
            cond,
            n,
            p
        );
    }
    Ok(())
}

fn config() -> Config {
    Config {
        cases: 48,
        rng_seed: RngSeed::Fixed(0x5eed_ac0c),
        failure_persistence: None,
        ..Config::default()
    }
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn solvers_agree_with_nalgebra_svd(
        seed in any::<u64>(),
        n in 12usize..120,
        p in 1usize..8,
        log_cond in 0.0f64..10.0,
        log_noise in -12.0f64..0.0,
        intercept in any::<bool>(),
    ) {
        let case = build(seed, n, p, log_cond, 10f64.powf(log_noise), intercept);
        check(&case)?;
    }
}

/// The tolerance is not vacuous: a perturbation of one part in 10^6 in one
/// coefficient of a well-conditioned problem fails it.
#[test]
fn tolerance_detects_a_wrong_answer() {
    let case = build(7, 60, 4, 1.0, 1e-3, false);
    let (best, cond, norm_a, resid) = reference(&case);
    let b_norm = best.iter().map(|v| v * v).sum::<f64>().sqrt();
    let tol = 32.0 * cond * f64::EPSILON * (1.0 + cond * resid / (norm_a * b_norm));
    let mut wrong = best.clone();
    wrong[0] *= 1.0 + 1e-6;
    assert!(relative_distance(&wrong, &best) > tol, "tolerance {tol:e}");
}
