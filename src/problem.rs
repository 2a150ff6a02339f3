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
use crate::linalg::kernels::{self, ColumnSummary};

/// Rows per chunk in the parallel passes over the design.
pub(crate) const STATS_CHUNK: usize = 4096;

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
/// let problem = Problem::builder(x.view(), y.view()).weights(w.view()).build()?;
/// assert_eq!(problem.rows(), 4);
/// assert_eq!(problem.cols(), 2);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct Problem<'a> {
    design: ArrayView2<'a, f64>,
    target: ArrayView1<'a, f64>,
    weights: Option<ArrayView1<'a, f64>>,
    intercept: bool,
    pub(crate) stats: Stats,
}

/// Settings for a [`Problem`] before validation.
#[derive(Debug, Clone)]
pub struct ProblemBuilder<'a> {
    design: ArrayView2<'a, f64>,
    target: ArrayView1<'a, f64>,
    weights: Option<ArrayView1<'a, f64>>,
    intercept: bool,
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
    /// Power of two dividing every weight internally (max weight scale).
    pub weight_scale: f64,
    /// Sum of weights divided by `weight_scale`.
    pub total_weight: f64,
    /// Rows with a non-zero weight.
    pub usable_rows: usize,
}

impl<'a> ProblemBuilder<'a> {
    /// Observation weights, one per row, each finite and `>= 0`. A weight of
    /// zero removes the row from the fit; a weight of 2 counts the row twice.
    pub fn weights(mut self, weights: ArrayView1<'a, f64>) -> Self {
        self.weights = Some(weights);
        self
    }

    /// Whether to fit an intercept (default `true`).
    pub fn intercept(mut self, intercept: bool) -> Self {
        self.intercept = intercept;
        self
    }

    /// Validates the inputs and computes the column summaries.
    ///
    /// # Errors
    /// [`Error::LengthMismatch`] when the target or weights do not have one
    /// entry per row; [`Error::NoRows`]; [`Error::NothingToFit`] for zero
    /// columns without an intercept; [`Error::NonFinite`] naming the input,
    /// row and column of the first NaN or infinity; [`Error::InvalidWeight`]
    /// for a negative or non-finite weight; [`Error::AllWeightsZero`].
    pub fn build(self) -> Result<Problem<'a>> {
        let (n, p) = self.design.dim();
        if self.target.len() != n {
            return Err(Error::LengthMismatch {
                input: Input::Target,
                design_rows: n,
                len: self.target.len(),
            });
        }
        if let Some(w) = &self.weights {
            if w.len() != n {
                return Err(Error::LengthMismatch {
                    input: Input::Weights,
                    design_rows: n,
                    len: w.len(),
                });
            }
        }
        if n == 0 {
            return Err(Error::NoRows);
        }
        if p == 0 && !self.intercept {
            return Err(Error::NothingToFit);
        }
        let weight_scale = match &self.weights {
            Some(w) => check_weights(w)?,
            None => 1.0,
        };
        check_vector(&self.target, Input::Target)?;
        let stats = compute_stats(
            &self.design,
            &self.target,
            self.weights.as_ref(),
            weight_scale,
            self.intercept,
        )?;
        Ok(Problem {
            design: self.design,
            target: self.target,
            weights: self.weights,
            intercept: self.intercept,
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
        }
    }

    /// Validates an unweighted problem with an intercept.
    ///
    /// # Errors
    /// As [`ProblemBuilder::build`].
    pub fn new(design: ArrayView2<'a, f64>, target: ArrayView1<'a, f64>) -> Result<Self> {
        Self::builder(design, target).build()
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
    pub fn cols(&self) -> usize {
        self.design.ncols()
    }

    /// Rows with a non-zero weight (all rows when unweighted).
    pub fn usable_rows(&self) -> usize {
        self.stats.usable_rows
    }

    /// Number of parameters: columns plus one for the intercept.
    pub fn parameters(&self) -> usize {
        self.cols() + usize::from(self.intercept)
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

    /// The default relative rank tolerance: `max(usable rows, columns) * eps`.
    pub fn default_rank_tolerance(&self) -> f64 {
        self.stats.usable_rows.max(self.cols()).max(1) as f64 * f64::EPSILON
    }
}

/// Returns the power of two at or below `|v|`, clamped to a safe exponent
/// range (so that its inverse is finite); 1 for zero.
pub(crate) fn pow2_scale(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return 1.0;
    }
    let e = v.abs().log2().floor().clamp(-1000.0, 1000.0);
    e.exp2()
}

fn check_weights(w: &ArrayView1<'_, f64>) -> Result<f64> {
    let mut max = 0.0_f64;
    for (row, &value) in w.iter().enumerate() {
        if !value.is_finite() || value < 0.0 {
            return Err(Error::InvalidWeight { row, value });
        }
        max = max.max(value);
    }
    if max == 0.0 {
        return Err(Error::AllWeightsZero { rows: w.len() });
    }
    Ok(pow2_scale(max))
}

fn check_vector(v: &ArrayView1<'_, f64>, input: Input) -> Result<()> {
    for (row, &value) in v.iter().enumerate() {
        if !value.is_finite() {
            return Err(Error::NonFinite {
                input,
                row,
                column: None,
                value,
            });
        }
    }
    Ok(())
}

/// Compensated (Neumaier) accumulator.
#[derive(Clone, Copy, Default)]
struct Neumaier {
    sum: f64,
    comp: f64,
}

impl Neumaier {
    #[inline]
    fn add(&mut self, v: f64) {
        let t = self.sum + v;
        if self.sum.abs() >= v.abs() {
            self.comp += (self.sum - t) + v;
        } else {
            self.comp += (v - t) + self.sum;
        }
        self.sum = t;
    }
    fn value(self) -> f64 {
        self.sum + self.comp
    }
}

/// Partial column summaries of one chunk of rows.
struct Partial {
    sums: Vec<Neumaier>,
    min: Vec<f64>,
    max: Vec<f64>,
    ysum: Neumaier,
    ymin: f64,
    ymax: f64,
    wsum: Neumaier,
    usable: usize,
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
            let mut part = Partial {
                sums: Vec::new(),
                min: Vec::new(),
                max: Vec::new(),
                ysum: Neumaier::default(),
                ymin: f64::INFINITY,
                ymax: f64::NEG_INFINITY,
                wsum: Neumaier::default(),
                usable: 0,
            };
            for (local, row) in xb.rows().into_iter().enumerate() {
                let xs = row.to_slice()?;
                let i = r0 + local;
                let wi = w.map_or(1.0, |w| w[i] / weight_scale);
                if wi == 0.0 {
                    summary.check_row(xs);
                    continue;
                }
                part.usable += 1;
                part.wsum.add(wi);
                summary.add_row(xs, wi, w.is_some());
                let yi = y[i];
                part.ysum.add(wi * yi);
                part.ymin = part.ymin.min(yi);
                part.ymax = part.ymax.max(yi);
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
    Some(part)
}

/// [`fast_chunk`] for a design whose columns are contiguous: four columns
/// at a time, each column's rows in order (four independent chains), so the
/// sums are the scalar scan's bit for bit.
fn fast_chunk_by_columns(
    xb: ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    weight_scale: f64,
    r0: usize,
    r1: usize,
) -> Option<Partial> {
    let p = xb.ncols();
    let cols: Vec<&[f64]> = (0..p)
        .map(|j| xb.index_axis_move(Axis(1), j).to_slice())
        .collect::<Option<_>>()?;
    let wts: Vec<f64> = (r0..r1)
        .map(|i| w.map_or(1.0, |w| w[i] / weight_scale))
        .collect();
    let mut part = Partial {
        sums: vec![Neumaier::default(); p],
        min: vec![f64::INFINITY; p],
        max: vec![f64::NEG_INFINITY; p],
        ysum: Neumaier::default(),
        ymin: f64::INFINITY,
        ymax: f64::NEG_INFINITY,
        wsum: Neumaier::default(),
        usable: 0,
    };
    let finite = kernels::dispatch(
        #[inline(always)]
        || {
            let mut finite = true;
            let mut j = 0;
            while j < p {
                let q = (p - j).min(4);
                let mut s = [0.0f64; 4];
                let mut c = [0.0f64; 4];
                let mut lo = [f64::INFINITY; 4];
                let mut hi = [f64::NEG_INFINITY; 4];
                let mut ck = [0.0f64; 4];
                for (local, &wi) in wts.iter().enumerate() {
                    for l in 0..q {
                        let v = cols[j + l][local];
                        ck[l] += v * 0.0;
                        if wi == 0.0 {
                            continue;
                        }
                        let a = if w.is_some() { wi * v } else { v };
                        let t = s[l] + a;
                        let bp = t - s[l];
                        c[l] += (s[l] - (t - bp)) + (a - bp);
                        s[l] = t;
                        lo[l] = if v < lo[l] { v } else { lo[l] };
                        hi[l] = if v > hi[l] { v } else { hi[l] };
                    }
                }
                for l in 0..q {
                    finite &= ck[l] == 0.0;
                    part.sums[j + l] = Neumaier {
                        sum: s[l],
                        comp: c[l],
                    };
                    part.min[j + l] = lo[l];
                    part.max[j + l] = hi[l];
                }
                j += q;
            }
            finite
        },
    );
    if !finite {
        return None;
    }
    for (local, &wi) in wts.iter().enumerate() {
        if wi == 0.0 {
            continue;
        }
        part.usable += 1;
        part.wsum.add(wi);
        let yi = y[r0 + local];
        part.ysum.add(wi * yi);
        part.ymin = part.ymin.min(yi);
        part.ymax = part.ymax.max(yi);
    }
    Some(part)
}

fn compute_stats(
    x: &ArrayView2<'_, f64>,
    y: &ArrayView1<'_, f64>,
    w: Option<&ArrayView1<'_, f64>>,
    weight_scale: f64,
    intercept: bool,
) -> Result<Stats> {
    let (n, p) = x.dim();
    let chunks: Vec<usize> = (0..n.div_ceil(STATS_CHUNK)).collect();
    // Each chunk scans its rows in order, so the first error of the lowest
    // chunk is the first error in row-major order.
    let partials: Vec<std::result::Result<Partial, Error>> = chunks
        .par_iter()
        .map(|&c| {
            let r0 = c * STATS_CHUNK;
            let r1 = (r0 + STATS_CHUNK).min(n);
            if let Some(part) = fast_chunk(x, y, w, weight_scale, r0, r1) {
                return Ok(part);
            }
            let mut part = Partial {
                sums: vec![Neumaier::default(); p],
                min: vec![f64::INFINITY; p],
                max: vec![f64::NEG_INFINITY; p],
                ysum: Neumaier::default(),
                ymin: f64::INFINITY,
                ymax: f64::NEG_INFINITY,
                wsum: Neumaier::default(),
                usable: 0,
            };
            for i in r0..r1 {
                let row = x.index_axis(Axis(0), i);
                for (j, &v) in row.iter().enumerate() {
                    if !v.is_finite() {
                        return Err(Error::NonFinite {
                            input: Input::Design,
                            row: i,
                            column: Some(j),
                            value: v,
                        });
                    }
                }
                let wi = w.map_or(1.0, |w| w[i] / weight_scale);
                if wi == 0.0 {
                    continue;
                }
                part.usable += 1;
                part.wsum.add(wi);
                for (j, &v) in row.iter().enumerate() {
                    part.sums[j].add(wi * v);
                    part.min[j] = part.min[j].min(v);
                    part.max[j] = part.max[j].max(v);
                }
                let yi = y[i];
                part.ysum.add(wi * yi);
                part.ymin = part.ymin.min(yi);
                part.ymax = part.ymax.max(yi);
            }
            Ok(part)
        })
        .collect();
    let mut sums = vec![Neumaier::default(); p];
    let mut min = vec![f64::INFINITY; p];
    let mut max = vec![f64::NEG_INFINITY; p];
    let mut ysum = Neumaier::default();
    let (mut ymin, mut ymax) = (f64::INFINITY, f64::NEG_INFINITY);
    let mut wsum = Neumaier::default();
    let mut usable = 0;
    for part in partials {
        let part = part?;
        for j in 0..p {
            sums[j].add(part.sums[j].sum);
            sums[j].add(part.sums[j].comp);
            min[j] = min[j].min(part.min[j]);
            max[j] = max[j].max(part.max[j]);
        }
        ysum.add(part.ysum.sum);
        ysum.add(part.ysum.comp);
        ymin = ymin.min(part.ymin);
        ymax = ymax.max(part.ymax);
        wsum.add(part.wsum.sum);
        wsum.add(part.wsum.comp);
        usable += part.usable;
    }
    let total_weight = wsum.value();
    // Means: sum(w x) / W. Each term w x may overflow only if |x| * w
    // exceeds f64, which the weight scaling (max weight <= 2) rules out for
    // finite x below about 9e307; guard anyway by averaging min and max.
    let mean_of = |s: Neumaier, lo: f64, hi: f64| -> f64 {
        if !intercept {
            return 0.0;
        }
        let m = s.value() / total_weight;
        if m.is_finite() {
            m.clamp(lo, hi)
        } else {
            0.5 * lo + 0.5 * hi
        }
    };
    let means: Vec<f64> = (0..p).map(|j| mean_of(sums[j], min[j], max[j])).collect();
    let raw_max: Vec<f64> = (0..p).map(|j| max[j].abs().max(min[j].abs())).collect();
    let centered_max: Vec<f64> = (0..p)
        .map(|j| (max[j] - means[j]).abs().max((means[j] - min[j]).abs()))
        .collect();
    let target_mean = mean_of(ysum, ymin, ymax);
    Ok(Stats {
        means,
        raw_max,
        centered_max,
        target_mean,
        target_centered_max: (ymax - target_mean).abs().max((target_mean - ymin).abs()),
        weight_scale,
        total_weight,
        usable_rows: usable,
    })
}
