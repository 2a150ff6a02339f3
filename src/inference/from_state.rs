//! Classical (and, after a second pass, sandwich) inference from a triangular factor that a fit state holds
//! (see [`crate::TriangleState::inference`] and
//! [`crate::CrossProductState::inference`]): the same numbers as
//! [`Inference::with_options`], without the rows.

use faer::{Mat, MatRef};

use super::{
    estimates_from_covariance, goodness, intercept_row, refuse, residual_spread, Basis,
    CovarianceKind, Inference, InferenceOptions, InferenceRefusal,
};
use crate::error::Result;
use crate::linalg::{products::congruence_into, triangular};
use crate::scaled::{exponent, ldexp, pow2};

/// What a finished state gives inference for one target, in the state's
/// frame (column `j` divided by `2^col_exps[j]`, the target by
/// `2^target_exp`, weights by `2^weight_exp`).
pub(crate) struct FactorParts<'a> {
    /// `p x p` upper-triangular factor of the centered, weighted design.
    pub r: MatRef<'a, f64>,
    /// Slopes in the frame's units (`R gamma = Q^T t`).
    pub gamma: &'a [f64],
    /// The fit's slopes and intercept in caller units.
    pub beta: &'a [f64],
    pub intercept_value: f64,
    /// Residual norm and the target's (centered) norm, frame units.
    pub rnorm: f64,
    pub tnorm: f64,
    pub col_exps: &'a [i32],
    pub target_exp: i32,
    pub weight_exp: i32,
    /// Sum of the weights divided by `2^weight_exp`.
    pub total_weight: f64,
    /// Column and target means in caller units (zeros without intercept).
    pub means: &'a [f64],
    pub target_mean: f64,
    pub usable_rows: usize,
    pub intercept: bool,
    /// `sum ln w_i` over the usable rows.
    pub log_weights: f64,
    pub names: Vec<String>,
    pub solver: String,
    /// The middle matrix of a sandwich covariance in orthonormal
    /// coordinates (`q x q`, frame units divided by `4^e`, `2^e` the
    /// power of two at or below `rnorm`), formed by the state's second
    /// pass over the rows; `None` for the classical covariance.
    pub meat: Option<MatRef<'a, f64>>,
}

/// Checks what can be refused before anything is factored: the level, the
/// covariance (a sandwich needs the rows) and the residual degrees of
/// freedom.
pub(crate) fn precheck(
    options: &InferenceOptions,
    usable_rows: usize,
    parameters: usize,
) -> Result<()> {
    precheck_rows(options, usable_rows, parameters, false)
}

/// [`precheck`], where `rows_seen` says a second pass has formed the
/// middle matrix a sandwich covariance needs.
pub(crate) fn precheck_rows(
    options: &InferenceOptions,
    usable_rows: usize,
    parameters: usize,
    rows_seen: bool,
) -> Result<()> {
    options.check()?;
    if options.covariance != CovarianceKind::Classical && !rows_seen {
        return Err(refuse(InferenceRefusal::NeedsRows {
            covariance: options.covariance,
        }));
    }
    if usable_rows <= parameters {
        return Err(refuse(InferenceRefusal::NoResidualDegreesOfFreedom {
            usable_rows,
            parameters,
        }));
    }
    Ok(())
}

/// Classical inference from a factor (after [`precheck`]).
pub(crate) fn from_factor(parts: FactorParts<'_>, options: InferenceOptions) -> Result<Inference> {
    let FactorParts { r, gamma, .. } = parts;
    let p = r.ncols();
    let has_intercept = parts.intercept;
    let q = p + usize::from(has_intercept);
    let n = parts.usable_rows;
    precheck_rows(&options, n, q, parts.meat.is_some())?;
    let df = n - q;
    let dff = df as f64;
    crate::alloc::reserve_matrices("inference matrices", q + 1, q + 1, 3)?;
    let unit_condition = goodness::condition_number(r)?;
    let mut v = Mat::<f64>::zeros(q, q);
    triangular::inverse_upper_into(v.as_mut().submatrix_mut(0, 0, p, p), r);
    let collinearity = goodness::collinearity(
        r,
        v.as_ref().submatrix(0, 0, p, p),
        unit_condition,
        has_intercept,
    );
    let ey = parts.target_exp;
    let sqrt_w = parts.total_weight.sqrt();
    let a: Vec<f64> = (0..p)
        .map(|j| ldexp(parts.means[j], -parts.col_exps[j]))
        .collect();
    let b0 = ldexp(parts.intercept_value, -ey);
    if has_intercept {
        intercept_row(&mut v, r, &a, sqrt_w);
    }
    let rss_norm = parts.rnorm;
    let sigma_scaled = rss_norm / dff.sqrt();
    let sigma_exp = exponent(sigma_scaled);
    let sigma_m = ldexp(sigma_scaled, -sigma_exp);
    let residual_exp = exponent(rss_norm.max(f64::MIN_POSITIVE));
    let meat = parts.meat;
    let mut covariance = ndarray::Array2::<f64>::zeros((q, q));
    congruence_into(
        crate::linalg::as_faer_mut(&mut covariance),
        v.as_ref(),
        meat,
        if meat.is_some() {
            1.0
        } else {
            sigma_m * sigma_m
        },
    );
    drop(v);
    let cov_exp = if meat.is_some() {
        2 * residual_exp
    } else {
        2 * sigma_exp
    };
    let mut units: Vec<i32> = (0..p).map(|j| ey - parts.col_exps[j]).collect();
    if has_intercept {
        units.push(ey);
    }
    let (coefficients, intercept, critical) = estimates_from_covariance(
        &mut covariance,
        cov_exp,
        &units,
        (parts.beta, has_intercept.then_some(parts.intercept_value)),
        (gamma, b0),
        options.level,
        dff,
    )?;
    let ws_exp = parts.weight_exp;
    let (residual_variance, residual_sd) = residual_spread(sigma_m, sigma_exp, ey, ws_exp)?;
    let tnorm = parts.tnorm;
    let goodness = goodness::compute(goodness::Inputs {
        n,
        centered: has_intercept,
        log_weights: parts.log_weights,
        r,
        gamma,
        meat,
        meat_exp: 2 * residual_exp,
        sigma_scaled,
        rss_norm,
        // The target's norm squared, when it is a normal number; else
        // the norm itself is used.
        tss_scaled: tnorm * tnorm,
        t_norm: tnorm,
        sum_exp: 2 * ey + ws_exp,
        df,
        parameters: q,
    })?;
    let basis = Basis {
        r: ndarray::Array2::from_shape_fn((p, p), |(i, j)| if i <= j { r[(i, j)] } else { 0.0 }),
        scale: parts.col_exps.iter().map(|&e| pow2(e)).collect(),
        target_scale: pow2(ey),
        weight_scale: pow2(ws_exp),
        total_weight: parts.total_weight,
        means: parts.means.to_vec(),
        target_mean: parts.target_mean,
        meat: meat.map(|m| ndarray::Array2::from_shape_fn((q, q), |(i, j)| m[(i, j)])),
        meat_exp: 2 * residual_exp,
        sigma_scaled,
        gamma: gamma.to_vec(),
        fingerprint: 0,
    };
    Ok(Inference {
        options,
        solver: parts.solver,
        names: parts.names,
        coefficients,
        intercept,
        covariance,
        residual_variance,
        residual_sd,
        residual_df: df,
        usable_rows: n,
        parameters: q,
        critical_value: critical,
        fit_distance: 0.0,
        goodness,
        collinearity,
        basis,
    })
}
