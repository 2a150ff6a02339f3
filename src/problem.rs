//! A validated least-squares problem: design, target, optional weights and
//! whether an intercept is fitted.
//!
//! Validation happens once, in [`ProblemBuilder::build`]; the same pass
//! computes the (weighted) column means that every solver uses to fit the
//! intercept by centering, and the column ranges used for internal scaling.
//! The design is borrowed, never copied.

use ndarray::{s, ArrayView1, ArrayView2, Axis};
use rayon::prelude::*;

use crate::error::{Error, Input, Result};
use crate::linalg::extended::Accumulator;
use crate::linalg::kernels::{self, ColumnSummary};
use crate::scaled::Neumaier;

/// Rows per chunk of the validation pass and of the passes over a
/// problem's rows that keep one number per row (extended-precision
/// residuals): the crate's one block size, [`crate::linalg::block_rows`],
/// for rows of `p + 1` numbers.
pub(crate) fn row_chunk(p: usize) -> usize {
    crate::linalg::block_rows(p + 1)
}

/// A validated weighted least-squares problem.
///
/// It minimises `sum_i w_i (y_i - b0 - x_i . b)^2` over the coefficients `b`
/// and, when the intercept is on, over `b0`. Weights default to 1.
///
/// The intercept is never a column of ones: every solver works with the
/// columns centered by their weighted means and recovers
/// `b0 = mean(y) - mean(x) . b` afterwards.
///
/// ```
/// use leastline::Problem;
/// use ndarray::array;
///
/// let x = array![[1.0, 0.5], [2.0, 0.1], [3.0, 0.7], [4.0, 0.2]];
/// let y = array![3.1, 4.9, 7.2, 8.8];
/// let w = array![1.0, 1.0, 2.0, 0.5];
/// let problem = Problem::builder(x.view(), y.view()).with_weights(w.view()).build()?;
/// assert_eq!(problem.rows(), 4);
/// assert_eq!(problem.columns(), 2);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct Problem<'a> {
    design: ArrayView2<'a, f64>,
    target: ArrayView1<'a, f64>,
    weights: Option<ArrayView1<'a, f64>>,
    intercept: bool,
    names: Option<Vec<String>>,
    pub(crate) stats: Stats,
}

/// Settings for a [`Problem`] before validation.
#[derive(Debug, Clone)]
pub struct ProblemBuilder<'a> {
    design: ArrayView2<'a, f64>,
    target: ArrayView1<'a, f64>,
    weights: Option<ArrayView1<'a, f64>>,
    intercept: bool,
    names: Option<Vec<String>>,
}

/// Per-column summaries computed during validation (internal).
#[derive(Debug, Clone)]
pub(crate) struct Stats {
    /// Weighted column means (zeros without an intercept).
    pub means: Vec<f64>,
    /// Largest |x_ij| over rows with non-zero weight.
    pub raw_max: Vec<f64>,
    /// Largest |x_ij - mean_j| over rows with non-zero weight.
    pub centered_max: Vec<f64>,
    /// Weighted mean of the target (0 without an intercept).
    pub target_mean: f64,
    /// Largest |y_i - target_mean| over rows with non-zero weight.
    pub target_centered_max: f64,
    /// Power of four dividing every weight internally: the one at or below
    /// the largest weight (so that `sqrt(w)` is divided by an exact power
    /// of two, as a fit state holds it).
    pub weight_scale: f64,
    /// Largest weight (1 without weights).
    pub largest_weight: f64,
    /// Smallest and largest value of each column over rows with non-zero
    /// weight.
    pub lo: Vec<f64>,
    pub hi: Vec<f64>,
    /// Smallest and largest target value over rows with non-zero weight.
    pub target_lo: f64,
    pub target_hi: f64,
    /// Sum of weights divided by `weight_scale`.
    pub total_weight: f64,
    /// Rows with a non-zero weight.
    pub usable_rows: usize,
    /// See [`Problem::fingerprint`].
    pub fingerprint: u64,
    /// The centered target sum of squares as `(mantissa, exponent)`,
    /// formed on first use (see [`Problem::centered_target_squares`]).
    pub target_squares: std::sync::OnceLock<(f64, i32)>,
}

impl<'a> ProblemBuilder<'a> {
    /// Observation weights, one per row, each finite and `>= 0`. A weight of
    /// zero removes the row from the fit; a weight of 2 counts the row twice.
    pub fn with_weights(mut self, weights: ArrayView1<'a, f64>) -> Self {
        self.weights = Some(weights);
        self
    }

    /// Whether to fit an intercept (default `true`).
    pub fn with_intercept(mut self, intercept: bool) -> Self {
        self.intercept = intercept;
        self
    }

    /// A name for every column of the design, in its order. Fits, models,
    /// inference and its summary use them (without names they use `x0`,
    /// `x1`, ...). They are checked by [`Self::build`]: one per column,
    /// each holding a visible character, no two alike.
    ///
    /// ```
    /// use leastline::{Problem, Qr, Solver};
    /// use ndarray::array;
    ///
    /// // Hours of sunshine and of irrigation against a greenhouse's yield.
    /// let x = array![[6.0, 1.0], [7.5, 0.5], [5.0, 2.0], [8.0, 1.5], [6.5, 0.0]];
    /// let y = array![12.1, 13.0, 11.8, 15.2, 10.9];
    /// let problem = Problem::builder(x.view(), y.view())
    ///     .with_names(["sunshine", "irrigation"])
    ///     .build()?;
    /// let fit = Qr::new().fit(&problem)?;
    /// assert_eq!(fit.model.names(), ["sunshine", "irrigation"]);
    /// assert_eq!(fit.inference(&problem)?.names, ["sunshine", "irrigation"]);
    /// # Ok::<(), leastline::Error>(())
    /// ```
    pub fn with_names<S: Into<String>>(mut self, names: impl IntoIterator<Item = S>) -> Self {
        self.names = Some(names.into_iter().map(Into::into).collect());
        self
    }

    /// Validates the inputs and computes the column summaries.
    ///
    /// # Errors
    /// [`Error::LengthMismatch`] when the target or weights do not have one
    /// entry per row; [`Error::NoRows`]; [`Error::NothingToFit`] for zero
    /// columns without an intercept; [`Error::NonFinite`] naming the input,
    /// row and column of the first NaN or infinity; [`Error::InvalidWeight`]
    /// for a negative or non-finite weight; [`Error::AllWeightsZero`];
    /// with names, [`Error::NameCountMismatch`] when their count is not
    /// the number of columns and [`Error::InvalidName`] for an empty or
    /// repeated name.
    pub fn build(self) -> Result<Problem<'a>> {
        let (n, p) = self.design.dim();
        check_row_counts(n, self.target.len(), self.weights.as_ref().map(|w| w.len()))?;
        if p == 0 && !self.intercept {
            return Err(Error::NothingToFit);
        }
        if let Some(names) = &self.names {
            crate::model::check_names(names, p)?;
        }
        let (weight_scale, largest_weight) = match &self.weights {
            Some(w) => check_weights(w)?,
            None => (1.0, 1.0),
        };
        check_vector(&self.target, Input::Target)?;
        let stats = compute_stats(
            &self.design,
            &self.target,
            self.weights.as_ref(),
            (weight_scale, largest_weight),
            self.intercept,
        )
        .map_err(|e| e.name_columns(self.names.as_deref()))?;
        Ok(Problem {
            design: self.design,
            target: self.target,
            weights: self.weights,
            intercept: self.intercept,
            names: self.names,
            stats,
        })
    }
}

impl<'a> Problem<'a> {
    /// Starts a problem from a design (`n x p`, any memory layout) and a
    /// target (length `n`); intercept on, no weights.
    pub fn builder(design: ArrayView2<'a, f64>, target: ArrayView1<'a, f64>) -> ProblemBuilder<'a> {
        ProblemBuilder {
            design,
            target,
            weights: None,
            intercept: true,
            names: None,
        }
    }

    /// Validates an unweighted problem with an intercept.
    ///
    /// # Errors
    /// As [`ProblemBuilder::build`].
    pub fn new(design: ArrayView2<'a, f64>, target: ArrayView1<'a, f64>) -> Result<Self> {
        Self::builder(design, target).build()
    }

    /// The column names given to [`ProblemBuilder::with_names`], if any.
    pub fn names(&self) -> Option<&[String]> {
        self.names.as_deref()
    }

    /// The design matrix as given.
    pub fn design(&self) -> ArrayView2<'a, f64> {
        self.design
    }

    /// The target vector as given.
    pub fn target(&self) -> ArrayView1<'a, f64> {
        self.target
    }

    /// The weights, if any were given.
    pub fn weights(&self) -> Option<ArrayView1<'a, f64>> {
        self.weights
    }

    /// Whether an intercept is fitted.
    pub fn has_intercept(&self) -> bool {
        self.intercept
    }

    /// Number of rows `n`.
    pub fn rows(&self) -> usize {
        self.design.nrows()
    }

    /// Number of columns `p` (not counting the intercept).
    pub fn columns(&self) -> usize {
        self.design.ncols()
    }

    /// Rows with a non-zero weight (all rows when unweighted).
    pub fn usable_rows(&self) -> usize {
        self.stats.usable_rows
    }

    /// Number of parameters: columns plus one for the intercept.
    pub fn parameters(&self) -> usize {
        self.columns() + usize::from(self.intercept)
    }

    /// Sum of the weights (`n` when unweighted).
    pub fn total_weight(&self) -> f64 {
        self.stats.total_weight * self.stats.weight_scale
    }

    /// Weighted column means used for centering (zeros without an intercept).
    pub fn column_means(&self) -> &[f64] {
        &self.stats.means
    }

    /// Weighted mean of the target (zero without an intercept).
    pub fn target_mean(&self) -> f64 {
        self.stats.target_mean
    }

    /// Weight of row `i` divided by the internal weight scale (1 when unweighted).
    #[inline]
    pub(crate) fn scaled_weight(&self, i: usize) -> f64 {
        match &self.weights {
            Some(w) => w[i] / self.stats.weight_scale,
            None => 1.0,
        }
    }

    /// Checks that an unpenalised fit is determined by the usable rows.
    pub(crate) fn require_determined(&self) -> Result<()> {
        let parameters = self.parameters();
        if self.stats.usable_rows < parameters {
            return Err(Error::TooFewRows {
                usable_rows: self.stats.usable_rows,
                parameters,
            });
        }
        Ok(())
    }

    /// A 64-bit hash of the problem, computed during validation: its shape,
    /// whether it has an intercept, its weight sum and weighted means, the
    /// extremes of every column and of the target, and checksums
    /// `sum_i c_i v_i` of every column, the target and the scaled weights
    /// with fixed pseudo-random multipliers `c_i` per row. Fits record it
    /// ([`crate::FitReport::fingerprint`]) and inference refuses a problem
    /// whose fingerprint differs. The same data in any memory layout give
    /// the same fingerprint; a change of any value almost surely changes it.
    pub fn fingerprint(&self) -> u64 {
        self.stats.fingerprint
    }

    /// The weighted sum of squares of the target about its weighted mean
    /// (about 0 without an intercept), `sum_i w_i (y_i - ybar)^2 = m 2^e`,
    /// as `(m, e)`: formed once, on first use, from the target divided by
    /// the power of two at or below its largest centered magnitude (no
    /// overflow or underflow whatever the target's scale), and kept.
    pub(crate) fn centered_target_squares(&self) -> (f64, i32) {
        *self.stats.target_squares.get_or_init(|| {
            let sy = pow2_scale(self.stats.target_centered_max);
            let m = centered_target_sum_of_squares(self, 1.0 / sy);
            let e =
                2 * crate::scaled::exponent(sy) + crate::scaled::exponent(self.stats.weight_scale);
            (m, e)
        })
    }

    /// The default relative rank tolerance: `max(usable rows, columns) * eps`.
    pub fn default_rank_tolerance(&self) -> f64 {
        self.stats.usable_rows.max(self.columns()).max(1) as f64 * f64::EPSILON
    }
}

/// The power of two at or below `|v|` (see [`crate::scaled::pow2_scale`]).
pub(crate) use crate::scaled::pow2_scale;

/// Checks the weights and returns the weight scale: the power of two at or
/// below the largest weight.
fn check_weights(w: &ArrayView1<'_, f64>) -> Result<(f64, f64)> {
    let mut max = 0.0_f64;
    for (row, &value) in w.iter().enumerate() {
        if !crate::error::finite_nonnegative(value) {
            return Err(Error::InvalidWeight { row, value });
        }
        max = max.max(value);
    }
    if max == 0.0 {
        return Err(Error::AllWeightsZero { rows: w.len() });
    }
    // The power of four at or below the largest weight.
    let e = crate::scaled::exponent(max);
    let scale = crate::scaled::pow2(e - e.rem_euclid(2));
    // Every positive weight must keep a normal value once divided by the
    // scale, or its row would be dropped (or its weight rounded) silently.
    for (row, &value) in w.iter().enumerate() {
        if value > 0.0 && value / scale < f64::MIN_POSITIVE {
            return Err(Error::WeightRange {
                row,
                value,
                largest: max,
            });
        }
    }
    Ok((scale, max))
}

fn check_vector(v: &ArrayView1<'_, f64>, input: Input) -> Result<()> {
    for (row, &value) in v.iter().enumerate() {
        if !value.is_finite() {
            return Err(Error::NonFinite {
                input,
                row,
                column: None,
                column_name: None,
                value,
            });
        }
    }
    Ok(())
}

/// Partial column summaries of one chunk of rows.
struct Partial {
    sums: Vec<Neumaier>,
    min: Vec<f64>,
    max: Vec<f64>,
    /// Extremes over every row, zero weights included.
    all_min: Vec<f64>,
    all_max: Vec<f64>,
    /// Fingerprint sums `sum_i c_i x_ij`, `sum_i c_i y_i`, `sum_i c_i w~_i`
    /// over every row.
    mix: Vec<f64>,
    ymix: f64,
    wmix: f64,
    ysum: Neumaier,
    ymin: f64,
    ymax: f64,
    y_all_min: f64,
    y_all_max: f64,
    wsum: Neumaier,
    usable: usize,
}

impl Partial {
    fn new(p: usize) -> Self {
        Partial {
            sums: vec![Neumaier::default(); p],
            min: vec![f64::INFINITY; p],
            max: vec![f64::NEG_INFINITY; p],
            all_min: vec![f64::INFINITY; p],
            all_max: vec![f64::NEG_INFINITY; p],
            mix: vec![0.0; p],
            ymix: 0.0,
            wmix: 0.0,
            ysum: Neumaier::default(),
            ymin: f64::INFINITY,
            ymax: f64::NEG_INFINITY,
            y_all_min: f64::INFINITY,
            y_all_max: f64::NEG_INFINITY,
            wsum: Neumaier::default(),
            usable: 0,
        }
    }

    /// Takes the target value of a row of scaled weight `wi` (possibly 0)
    /// and fingerprint multiplier `c`.
    #[inline]
    fn add_target(&mut self, wi: f64, yi: f64, c: f64) {
        self.ymix += c * yi;
        self.wmix += c * wi;
        self.y_all_min = self.y_all_min.min(yi);
        self.y_all_max = self.y_all_max.max(yi);
        if wi == 0.0 {
            return;
        }
        self.usable += 1;
        self.wsum.add(wi);
        self.ysum.add(wi * yi);
        self.ymin = self.ymin.min(yi);
        self.ymax = self.ymax.max(yi);
    }
}

/// The summaries of rows `r0..r1` of a design whose rows are contiguous,
/// vectorised across the columns. `None` when the rows are not contiguous or
/// a value is not finite: the scalar scan then finds the first offender.
/// Sums, minima and maxima equal the scalar scan's bit for bit.
fn fast_chunk(
    x: &ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    weight_scale: f64,
    r0: usize,
    r1: usize,
) -> Option<Partial> {
    let p = x.ncols();
    let xb = x.slice(s![r0..r1, ..]);
    if p > 1 && xb.strides()[1] != 1 {
        return fast_chunk_by_columns(xb, y, w, weight_scale, r0, r1);
    }
    let (summary, mut part) = kernels::dispatch(
        #[inline(always)]
        || {
            let mut summary = ColumnSummary::new(p);
            let mut part = Partial::new(0);
            for (local, row) in xb.rows().into_iter().enumerate() {
                let xs = row.to_slice()?;
                let i = r0 + local;
                let wi = w.map_or(1.0, |w| w[i] / weight_scale);
                let c = row_multiplier(i);
                if wi == 0.0 {
                    summary.check_row(xs, c);
                } else {
                    summary.add_row(xs, wi, w.is_some(), c);
                }
                part.add_target(wi, y[i], c);
            }
            Some((summary, part))
        },
    )?;
    if !summary.all_finite() {
        return None;
    }
    part.sums = summary
        .sum
        .iter()
        .zip(&summary.comp)
        .map(|(&sum, &comp)| Neumaier { sum, comp })
        .collect();
    part.min = summary.min;
    part.max = summary.max;
    part.all_min = summary.all_min;
    part.all_max = summary.all_max;
    part.mix = summary.mix;
    Some(part)
}

/// Columns of [`fast_chunk_by_columns`] summarised together: one vector of
/// lanes, each lane one column's chains.
const COLUMN_LANES: usize = 8;

/// The sums and extremes of one group of up to [`COLUMN_LANES`] columns
/// (a group with fewer columns repeats its last column in the spare lanes,
/// whose results are dropped). Each lane runs its column's rows in order,
/// so every sum is the scalar scan's bit for bit; the lanes are fixed in
/// number so that the loop body is one vector of each quantity.
#[inline(always)]
fn column_group<const WEIGHTED: bool>(
    cols: [&[f64]; COLUMN_LANES],
    wts: &[f64],
    mults: &[f64],
) -> [[f64; COLUMN_LANES]; 8] {
    let mut s = [0.0f64; COLUMN_LANES];
    let mut c = [0.0f64; COLUMN_LANES];
    let mut lo = [f64::INFINITY; COLUMN_LANES];
    let mut hi = [f64::NEG_INFINITY; COLUMN_LANES];
    let mut ck = [0.0f64; COLUMN_LANES];
    let mut all_lo = [f64::INFINITY; COLUMN_LANES];
    let mut all_hi = [f64::NEG_INFINITY; COLUMN_LANES];
    let mut mix = [0.0f64; COLUMN_LANES];
    let n = mults.len();
    for local in 0..n {
        let mult = mults[local];
        let wi = if WEIGHTED { wts[local] } else { 1.0 };
        let mut v = [0.0f64; COLUMN_LANES];
        for l in 0..COLUMN_LANES {
            v[l] = cols[l][local];
        }
        for l in 0..COLUMN_LANES {
            ck[l] += v[l] * 0.0;
            mix[l] += mult * v[l];
            all_lo[l] = if v[l] < all_lo[l] { v[l] } else { all_lo[l] };
            all_hi[l] = if v[l] > all_hi[l] { v[l] } else { all_hi[l] };
        }
        if WEIGHTED && wi == 0.0 {
            continue;
        }
        for l in 0..COLUMN_LANES {
            let a = if WEIGHTED { wi * v[l] } else { v[l] };
            let t = s[l] + a;
            let bp = t - s[l];
            c[l] += (s[l] - (t - bp)) + (a - bp);
            s[l] = t;
            lo[l] = if v[l] < lo[l] { v[l] } else { lo[l] };
            hi[l] = if v[l] > hi[l] { v[l] } else { hi[l] };
        }
    }
    [s, c, lo, hi, ck, all_lo, all_hi, mix]
}

/// [`fast_chunk`] for a design whose columns are contiguous: eight columns
/// at a time, each column's rows in order (eight independent chains), so
/// the sums are the scalar scan's bit for bit.
fn fast_chunk_by_columns(
    xb: ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    weight_scale: f64,
    r0: usize,
    r1: usize,
) -> Option<Partial> {
    let p = xb.ncols();
    let len = r1 - r0;
    let cols: Vec<&[f64]> = (0..p)
        .map(|j| xb.index_axis_move(Axis(1), j).to_slice())
        .collect::<Option<_>>()?;
    if cols.iter().any(|c| c.len() != len) {
        return None;
    }
    let wts: Vec<f64> = match w {
        Some(w) => (r0..r1).map(|i| w[i] / weight_scale).collect(),
        None => Vec::new(),
    };
    let mults: Vec<f64> = (r0..r1).map(row_multiplier).collect();
    let mut part = Partial::new(p);
    let finite = kernels::dispatch(
        #[inline(always)]
        || {
            let mut finite = true;
            let mut j = 0;
            while j < p {
                let q = (p - j).min(COLUMN_LANES);
                let group: [&[f64]; COLUMN_LANES] = std::array::from_fn(|l| cols[j + l.min(q - 1)]);
                let [s, c, lo, hi, ck, all_lo, all_hi, mix] = if w.is_some() {
                    column_group::<true>(group, &wts, &mults)
                } else {
                    column_group::<false>(group, &wts, &mults)
                };
                for l in 0..q {
                    finite &= ck[l] == 0.0;
                    part.sums[j + l] = Neumaier {
                        sum: s[l],
                        comp: c[l],
                    };
                    part.min[j + l] = lo[l];
                    part.max[j + l] = hi[l];
                    part.all_min[j + l] = all_lo[l];
                    part.all_max[j + l] = all_hi[l];
                    part.mix[j + l] = mix[l];
                }
                j += q;
            }
            finite
        },
    );
    if !finite {
        return None;
    }
    for (local, &c) in mults.iter().enumerate() {
        let wi = if w.is_some() { wts[local] } else { 1.0 };
        part.add_target(wi, y[r0 + local], c);
    }
    Some(part)
}

/// Largest magnitude whose weighted sums over a chunk cannot overflow
/// (`2^960`: `n * 2 * 2^960` stays finite for any realistic `n`), and the
/// smallest one whose products with the weights lose no digits that
/// matter beside the sum. Columns outside `[SAFE_MIN, SAFE_MAX]` have their
/// sums formed again from values divided by a power of two.
const SAFE_MAX: f64 = 9.745_314_011_4e288; // 2^960 exactly (shortest form)
const SAFE_MIN: f64 = 1.026_134_200_324_594_1e-289; // 2^-960 exactly

fn compute_stats(
    x: &ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    (weight_scale, largest_weight): (f64, f64),
    intercept: bool,
) -> Result<Stats> {
    let (n, p) = x.dim();
    let chunk = row_chunk(p);
    let chunks: Vec<usize> = (0..n.div_ceil(chunk)).collect();
    // Each chunk scans its rows in order, so the first error of the lowest
    // chunk is the first error in row-major order.
    let scan = |&c: &usize| {
        let r0 = c * chunk;
        let r1 = (r0 + chunk).min(n);
        if let Some(part) = fast_chunk(x, y, w, weight_scale, r0, r1) {
            return Ok(part);
        }
        let mut part = Partial::new(p);
        for i in r0..r1 {
            let row = x.index_axis(Axis(0), i);
            for (j, &v) in row.iter().enumerate() {
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        input: Input::Design,
                        row: i,
                        column: Some(j),
                        column_name: None,
                        value: v,
                    });
                }
                part.all_min[j] = part.all_min[j].min(v);
                part.all_max[j] = part.all_max[j].max(v);
            }
            let c = row_multiplier(i);
            for (j, &v) in row.iter().enumerate() {
                part.mix[j] += c * v;
            }
            let wi = w.map_or(1.0, |w| w[i] / weight_scale);
            if wi != 0.0 {
                for (j, &v) in row.iter().enumerate() {
                    part.sums[j].add(wi * v);
                    part.min[j] = part.min[j].min(v);
                    part.max[j] = part.max[j].max(v);
                }
            }
            part.add_target(wi, y[i], c);
        }
        Ok(part)
    };
    // A small problem is scanned on the calling thread: handing a few
    // chunks to the pool costs more than scanning them.
    let partials: Vec<std::result::Result<Partial, Error>> =
        if n.saturating_mul(p + 1) < crate::linalg::SERIAL_VALUES {
            chunks.iter().map(scan).collect()
        } else {
            chunks.par_iter().map(scan).collect()
        };
    let mut total = Partial::new(p);
    for part in partials {
        let part = part?;
        for j in 0..p {
            total.sums[j].add(part.sums[j].sum);
            total.sums[j].add(part.sums[j].comp);
            total.min[j] = total.min[j].min(part.min[j]);
            total.max[j] = total.max[j].max(part.max[j]);
            total.all_min[j] = total.all_min[j].min(part.all_min[j]);
            total.all_max[j] = total.all_max[j].max(part.all_max[j]);
            total.mix[j] += part.mix[j];
        }
        total.ymix += part.ymix;
        total.wmix += part.wmix;
        total.ysum.add(part.ysum.sum);
        total.ysum.add(part.ysum.comp);
        total.ymin = total.ymin.min(part.ymin);
        total.ymax = total.ymax.max(part.ymax);
        total.y_all_min = total.y_all_min.min(part.y_all_min);
        total.y_all_max = total.y_all_max.max(part.y_all_max);
        total.wsum.add(part.wsum.sum);
        total.wsum.add(part.wsum.comp);
        total.usable += part.usable;
    }
    let total_weight = total.wsum.value();
    let raw_max: Vec<f64> = (0..p)
        .map(|j| total.max[j].abs().max(total.min[j].abs()))
        .collect();
    let y_raw_max = total.ymax.abs().max(total.ymin.abs());
    let mut means = vec![0.0; p];
    let mut target_mean = 0.0;
    if intercept {
        // Sums of values of moderate size are right as they stand; the
        // others (values near the ends of the f64 range) are formed again,
        // each value divided by the power of two at or below the column's
        // largest magnitude (exact), so that they cannot overflow.
        let extreme = |big: f64, sum: Neumaier| {
            big > SAFE_MAX || (big > 0.0 && big < SAFE_MIN) || !sum.value().is_finite()
        };
        let redo: Vec<usize> = (0..p)
            .filter(|&j| extreme(raw_max[j], total.sums[j]))
            .collect();
        let redo_target = extreme(y_raw_max, total.ysum);
        let mut sums: Vec<Neumaier> = total.sums.clone();
        let mut ysum = total.ysum;
        let mut col_scale = vec![1.0; p];
        let mut y_scale = 1.0;
        if !redo.is_empty() || redo_target {
            for &j in &redo {
                col_scale[j] = pow2_scale(raw_max[j]);
            }
            if redo_target {
                y_scale = pow2_scale(y_raw_max);
            }
            let (s, t) = scaled_sums(
                x,
                y,
                w,
                weight_scale,
                &redo,
                &col_scale,
                redo_target,
                y_scale,
            );
            for (&j, v) in redo.iter().zip(s) {
                sums[j] = v;
            }
            if let Some(t) = t {
                ysum = t;
            }
        }
        for j in 0..p {
            // sum / W lies within the scaled column's range: no overflow.
            let m = (sums[j].value() / total_weight) * col_scale[j];
            means[j] = m.clamp(total.min[j], total.max[j]);
        }
        target_mean = ((ysum.value() / total_weight) * y_scale).clamp(total.ymin, total.ymax);
    }
    let spread = |lo: f64, hi: f64, m: f64| (hi - m).abs().max((m - lo).abs());
    let mut centered_max = Vec::with_capacity(p);
    for (j, &m) in means.iter().enumerate() {
        // Every row's centered value must be representable (zero weights
        // included: their residuals and fills are formed too).
        if !spread(total.all_min[j], total.all_max[j], m).is_finite() {
            return Err(Error::SpreadOverflow {
                input: Input::Design,
                column: Some(j),
                column_name: None,
            });
        }
        centered_max.push(spread(total.min[j], total.max[j], m));
    }
    if !spread(total.y_all_min, total.y_all_max, target_mean).is_finite() {
        return Err(Error::SpreadOverflow {
            input: Input::Target,
            column: None,
            column_name: None,
        });
    }
    let target_centered_max = spread(total.ymin, total.ymax, target_mean);
    let mut hash = Fingerprint::new();
    for v in [n, p, total.usable, usize::from(intercept)] {
        hash.word(v as u64);
    }
    for v in [
        weight_scale,
        total_weight,
        total.wmix,
        total.ymix,
        target_mean,
        total.ymin,
        total.ymax,
    ] {
        hash.word(v.to_bits());
    }
    for (j, &m) in means.iter().enumerate() {
        for v in [m, total.min[j], total.max[j], total.mix[j]] {
            hash.word(v.to_bits());
        }
    }
    Ok(Stats {
        means,
        raw_max,
        centered_max,
        target_mean,
        target_centered_max,
        weight_scale,
        largest_weight,
        lo: total.min.clone(),
        hi: total.max.clone(),
        target_lo: total.ymin,
        target_hi: total.ymax,
        total_weight,
        usable_rows: total.usable,
        fingerprint: hash.finish(),
        target_squares: std::sync::OnceLock::new(),
    })
}

/// The multiplier `c_i` in `[1, 2)` of row `i` in the fingerprint sums (a
/// fixed pseudo-random function of the row index: splitmix64).
#[inline(always)]
fn row_multiplier(i: usize) -> f64 {
    let mut z = (i as u64).wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^= z >> 31;
    1.0 + (z >> 12) as f64 * (1.0 / (1u64 << 52) as f64)
}

/// A 64-bit FNV-1a hash over 64-bit words, with a final avalanche.
struct Fingerprint(u64);

impl Fingerprint {
    fn new() -> Self {
        Fingerprint(0xcbf2_9ce4_8422_2325)
    }

    fn word(&mut self, w: u64) {
        for b in w.to_le_bytes() {
            self.0 ^= u64::from(b);
            self.0 = self.0.wrapping_mul(0x0100_0000_01b3);
        }
    }

    fn finish(self) -> u64 {
        let mut z = self.0;
        z = (z ^ (z >> 33)).wrapping_mul(0xff51_afd7_ed55_8ccd);
        z ^ (z >> 33)
    }
}

/// Weighted sums of the listed columns (and of the target when asked),
/// each value divided by its column's power-of-two scale first: one pass
/// over the rows in fixed chunks, partial sums added in chunk order.
#[allow(clippy::too_many_arguments)]
fn scaled_sums(
    x: &ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    weight_scale: f64,
    cols: &[usize],
    col_scale: &[f64],
    target: bool,
    y_scale: f64,
) -> (Vec<Neumaier>, Option<Neumaier>) {
    let n = x.nrows();
    let inv: Vec<f64> = cols.iter().map(|&j| 1.0 / col_scale[j]).collect();
    let inv_y = 1.0 / y_scale;
    let chunk = row_chunk(x.ncols());
    let parts: Vec<(Vec<Neumaier>, Neumaier)> = (0..n.div_ceil(chunk))
        .into_par_iter()
        .map(|c| {
            let mut acc = vec![Neumaier::default(); cols.len()];
            let mut yacc = Neumaier::default();
            for i in c * chunk..((c + 1) * chunk).min(n) {
                let wi = w.map_or(1.0, |w| w[i] / weight_scale);
                if wi == 0.0 {
                    continue;
                }
                for ((a, &j), &s) in acc.iter_mut().zip(cols).zip(&inv) {
                    a.add(wi * (x[(i, j)] * s));
                }
                if target {
                    yacc.add(wi * (y[i] * inv_y));
                }
            }
            (acc, yacc)
        })
        .collect();
    let mut sums = vec![Neumaier::default(); cols.len()];
    let mut ysum = Neumaier::default();
    for (acc, yacc) in parts {
        for (s, a) in sums.iter_mut().zip(acc) {
            s.add(a.sum);
            s.add(a.comp);
        }
        ysum.add(yacc.sum);
        ysum.add(yacc.comp);
    }
    (sums, target.then_some(ysum))
}

/// `sum_i w~_i ((y_i - ybar) / s_y)^2` with the scaled weights (`ybar` the
/// centering mean, 0 without an intercept), compensated; `inv_target_scale`
/// is `1 / s_y`. A statistic of the target alone, so it lives with the
/// problem (refinement and inference use it too).
pub(crate) fn centered_target_sum_of_squares(problem: &Problem<'_>, inv_target_scale: f64) -> f64 {
    let y = problem.target();
    let ym = problem.stats.target_mean;
    let a = inv_target_scale;
    let n = problem.rows();
    let chunk = row_chunk(problem.columns());
    let parts: Vec<Accumulator> = (0..n.div_ceil(chunk))
        .into_par_iter()
        .map(|c| {
            let mut acc = Accumulator::default();
            for i in c * chunk..((c + 1) * chunk).min(n) {
                let w = problem.scaled_weight(i);
                if w != 0.0 {
                    let d = (y[i] - ym) * a;
                    acc.add_weighted_product(w, d, d);
                }
            }
            acc
        })
        .collect();
    let mut total = Accumulator::default();
    for p in parts {
        total.merge(p);
    }
    total.value()
}

/// The shape checks every problem builder shares: the targets and the
/// weights have one entry (or row) per design row, and there is a row.
///
/// # Errors
/// [`Error::LengthMismatch`] naming the target or the weights;
/// [`Error::NoRows`].
pub(crate) fn check_row_counts(
    n: usize,
    target_rows: usize,
    weight_len: Option<usize>,
) -> Result<()> {
    if target_rows != n {
        return Err(Error::LengthMismatch {
            input: Input::Target,
            design_rows: n,
            len: target_rows,
        });
    }
    if let Some(len) = weight_len {
        if len != n {
            return Err(Error::LengthMismatch {
                input: Input::Weights,
                design_rows: n,
                len,
            });
        }
    }
    if n == 0 {
        return Err(Error::NoRows);
    }
    Ok(())
}
