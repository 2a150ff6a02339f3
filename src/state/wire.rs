//! The serialised form of the fit states (feature `serde`).

use faer::Mat;
use serde::{Deserialize, Serialize};

use super::{Core, CrossProductState, TriangleState};
use crate::error::{Error, Result};

/// The `format` tag of a serialised fit state.
pub const STATE_FORMAT: &str = "leastline-fit-state";

/// The `version` of the serialised form written by this crate.
pub const STATE_VERSION: u32 = 2;

/// The plain serialised form of a [`TriangleState`] or a
/// [`CrossProductState`] (what their `Serialize` writes and their
/// `Deserialize` reads and validates). Its size is `O((p + k)^2)`,
/// whatever the number of rows absorbed.
///
/// The stored matrix `M` (`(p + k)` square, row by row in `matrix`) holds
/// column `j` divided by `2^exponents[j]` and, for the triangle, rows
/// multiplied by `sqrt(w)` divided by `2^weight_exponent`; for the cross
/// products entry `(i, j)` is divided by
/// `2^(exponents[i] + exponents[j] + 2 weight_exponent)`. The total weight
/// is `weight * 4^weight_exponent`.
///
/// Reading back checks every field: the tag, version and kind; sizes
/// against `columns` and `targets`; finite numbers; a non-negative weight
/// that is zero exactly when no row is usable; means within the column
/// extremes (zero without an intercept); exponents within the range of
/// `f64`; a triangle with zeros below its diagonal, or a symmetric cross
/// product with a non-negative diagonal. A failed check is
/// [`Error::InvalidState`] naming the field and entry.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StateData {
    /// Always [`STATE_FORMAT`].
    pub format: String,
    /// The form's version ([`STATE_VERSION`]).
    pub version: u32,
    /// `"triangle"` or `"cross-product"`.
    pub kind: String,
    /// Design columns `p`.
    pub columns: usize,
    /// Targets `k`.
    pub targets: usize,
    /// Whether an intercept is fitted.
    pub intercept: bool,
    /// Column names, when given.
    pub names: Option<Vec<String>>,
    /// Rows absorbed (zero weights included).
    pub rows: usize,
    /// Rows with non-zero weight.
    pub usable_rows: usize,
    /// Total weight divided by `4^weight_exponent`.
    pub weight: f64,
    /// See `weight`.
    pub weight_exponent: i32,
    /// Largest weight seen.
    pub largest_weight: f64,
    /// `sum ln w_i` over the usable rows (0 without weights or rows): the
    /// weight term of the log-likelihood (added in version 2).
    pub log_weight_sum: f64,
    /// Weighted means of the `p` columns then the `k` targets.
    pub means: Vec<f64>,
    /// Smallest value of each column over usable rows (`"inf"` before any).
    #[serde(with = "crate::serde_float::floats")]
    pub lows: Vec<f64>,
    /// Largest value of each column over usable rows (`"-inf"` before any).
    #[serde(with = "crate::serde_float::floats")]
    pub highs: Vec<f64>,
    /// Power-of-two exponent of each column of the stored matrix.
    pub exponents: Vec<i32>,
    /// The stored matrix, row by row.
    pub matrix: Vec<f64>,
}

const TRIANGLE: &str = "triangle";
const CROSS: &str = "cross-product";

fn invalid(field: &'static str, index: usize, reason: &'static str) -> Error {
    Error::InvalidState {
        field,
        index,
        reason,
    }
}

fn to_data(core: &Core, kind: &str, m: &Mat<f64>) -> StateData {
    let width = core.width();
    StateData {
        format: STATE_FORMAT.to_string(),
        version: STATE_VERSION,
        kind: kind.to_string(),
        columns: core.p,
        targets: core.k,
        intercept: core.intercept,
        names: core.names.clone(),
        rows: core.rows,
        usable_rows: core.usable,
        weight: core.weight,
        weight_exponent: core.wexp,
        largest_weight: core.largest_weight,
        log_weight_sum: core.log_weights,
        means: core.means.clone(),
        lows: core.lo.clone(),
        highs: core.hi.clone(),
        exponents: core.exps.clone(),
        matrix: (0..width * width)
            .map(|i| m[(i / width, i % width)])
            .collect(),
    }
}

/// Validates everything but the matrix's structure; returns the core and
/// the matrix.
fn from_data(d: StateData, kind: &str) -> Result<(Core, Mat<f64>)> {
    if d.format != STATE_FORMAT {
        return Err(invalid("format", 0, "not a leastline fit state"));
    }
    if d.version != STATE_VERSION {
        return Err(invalid("version", 0, "unknown version"));
    }
    if d.kind != kind {
        return Err(invalid("kind", 0, "another kind of state"));
    }
    let mut core = Core::new(d.columns, d.targets, d.intercept)?;
    let width = core.width();
    if let Some(names) = d.names {
        if names.len() != d.columns {
            return Err(invalid("names", names.len(), "one name per column"));
        }
        core.names = Some(names);
    }
    if d.usable_rows > d.rows {
        return Err(invalid("usable_rows", 0, "more than the rows"));
    }
    let nonneg = crate::error::finite_nonnegative;
    if !nonneg(d.weight) || (d.weight > 0.0) != (d.usable_rows > 0) {
        return Err(invalid(
            "weight",
            0,
            "must be finite, >= 0, and positive exactly when rows are usable",
        ));
    }
    if !nonneg(d.largest_weight) || (d.largest_weight > 0.0) != (d.usable_rows > 0) {
        return Err(invalid(
            "largest_weight",
            0,
            "must be finite, >= 0, and positive exactly when rows are usable",
        ));
    }
    if !d.log_weight_sum.is_finite() || (d.usable_rows == 0 && d.log_weight_sum != 0.0) {
        return Err(invalid(
            "log_weight_sum",
            0,
            "must be finite, and 0 when no row is usable",
        ));
    }
    if !(-600..=600).contains(&d.weight_exponent) {
        return Err(invalid("weight_exponent", 0, "outside the range of f64"));
    }
    for (field, len) in [
        ("means", d.means.len()),
        ("lows", d.lows.len()),
        ("highs", d.highs.len()),
        ("exponents", d.exponents.len()),
    ] {
        if len != width {
            return Err(invalid(field, len, "one entry per column and target"));
        }
    }
    if d.matrix.len() != width.saturating_mul(width) {
        return Err(invalid("matrix", d.matrix.len(), "(p + k)^2 entries"));
    }
    for j in 0..width {
        let (lo, hi, m) = (d.lows[j], d.highs[j], d.means[j]);
        if d.usable_rows == 0 {
            if lo != f64::INFINITY || hi != f64::NEG_INFINITY || m != 0.0 {
                return Err(invalid("lows", j, "extremes of a state without rows"));
            }
        } else if !lo.is_finite() || !hi.is_finite() || lo > hi {
            return Err(invalid("lows", j, "extremes must be finite, low <= high"));
        }
        if !m.is_finite() {
            return Err(invalid("means", j, "not finite"));
        }
        if d.usable_rows > 0 && d.intercept && !(lo <= m && m <= hi) {
            return Err(invalid("means", j, "outside the column's extremes"));
        }
        if !d.intercept && m != 0.0 {
            return Err(invalid("means", j, "must be 0 without an intercept"));
        }
        if !(-1100..=1100).contains(&d.exponents[j]) {
            return Err(invalid("exponents", j, "outside the range of f64"));
        }
    }
    if let Some(i) = d.matrix.iter().position(|v| !v.is_finite()) {
        return Err(invalid("matrix", i, "not finite"));
    }
    if d.usable_rows == 0 {
        if let Some(i) = d.matrix.iter().position(|&v| v != 0.0) {
            return Err(invalid("matrix", i, "non-zero in a state without rows"));
        }
    }
    core.rows = d.rows;
    core.usable = d.usable_rows;
    core.weight = d.weight;
    core.wexp = d.weight_exponent;
    core.largest_weight = d.largest_weight;
    core.log_weights = d.log_weight_sum;
    core.means = d.means;
    core.lo = d.lows;
    core.hi = d.highs;
    core.exps = d.exponents;
    let m = Mat::from_fn(width, width, |i, j| d.matrix[i * width + j]);
    Ok((core, m))
}

impl From<TriangleState> for StateData {
    fn from(s: TriangleState) -> Self {
        to_data(&s.core, TRIANGLE, &s.r)
    }
}

impl TryFrom<StateData> for TriangleState {
    type Error = Error;

    fn try_from(d: StateData) -> Result<Self> {
        let (core, r) = from_data(d, TRIANGLE)?;
        let width = core.width();
        for i in 0..width {
            for j in 0..i {
                if r[(i, j)] != 0.0 {
                    return Err(invalid("matrix", i * width + j, "below the diagonal"));
                }
            }
        }
        Ok(TriangleState { core, r })
    }
}

impl From<CrossProductState> for StateData {
    fn from(s: CrossProductState) -> Self {
        to_data(&s.core, CROSS, &s.c)
    }
}

impl TryFrom<StateData> for CrossProductState {
    type Error = Error;

    fn try_from(d: StateData) -> Result<Self> {
        let (core, c) = from_data(d, CROSS)?;
        let width = core.width();
        for i in 0..width {
            if c[(i, i)] < 0.0 {
                return Err(invalid("matrix", i * width + i, "negative diagonal"));
            }
            for j in 0..i {
                if c[(i, j)] != c[(j, i)] {
                    return Err(invalid("matrix", i * width + j, "not symmetric"));
                }
            }
        }
        Ok(CrossProductState { core, c })
    }
}

macro_rules! via_data {
    ($t:ty) => {
        impl Serialize for $t {
            fn serialize<S: serde::Serializer>(
                &self,
                s: S,
            ) -> std::result::Result<S::Ok, S::Error> {
                StateData::from(self.clone()).serialize(s)
            }
        }

        impl<'de> Deserialize<'de> for $t {
            fn deserialize<D: serde::Deserializer<'de>>(
                d: D,
            ) -> std::result::Result<Self, D::Error> {
                let data = StateData::deserialize(d)?;
                <$t>::try_from(data).map_err(serde::de::Error::custom)
            }
        }
    };
}

via_data!(TriangleState);
via_data!(CrossProductState);
