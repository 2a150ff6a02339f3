//! Fit states: summaries of rows that absorb data block by block, merge
//! with each other and finish into the same [`Fit`] the in-memory solvers
//! return.
//!
//! A state is created for `p` columns, `k >= 1` targets, with or without an
//! intercept (and optionally with column names). [`FitState::absorb`] takes
//! one block of rows (design `n x p`, targets `n x k`, optional weights);
//! [`FitState::merge`] folds in another state built from other rows (in
//! another thread, another process: with the `serde` feature a state can be
//! written and read back); `finish` turns the state into one [`Fit`] per
//! target. The order of blocks and merges changes the result by rounding
//! only.
//!
//! Two kinds:
//! - [`TriangleState`] keeps the triangular factor `R` of a QR of the
//!   centered, weighted rows `sqrt(w_i) (x_i - m, y_i - m_y)`. It keeps the
//!   accuracy of [`crate::Qr`] (which reduces row blocks the same way).
//! - [`CrossProductState`] keeps the centered cross-product matrix of
//!   `[x, y]`: cheaper to update, with the accuracy of the normal
//!   equations ([`crate::Cholesky`]); it refuses to finish when too few
//!   digits would survive.
//!
//! **One path.** A block given to [`FitState::absorb`] is validated and
//! summarised by the parallel pass of a [`crate::Problem`], reduced by the
//! in-memory solvers' own parallel row pass (a fixed partition and fold
//! tree: the same bits for any thread count) and folded in; the in-memory
//! [`crate::Qr`] and [`crate::Cholesky`] are this path with the whole
//! problem as one block, finished as the states finish. Absorbing a large
//! block costs about what the in-memory fit of the same rows costs.
//!
//! Both keep the total weight, the weighted means of the columns and
//! targets, and each column's extremes; their size is `O((p + k)^2)`,
//! whatever the number of rows. Two states with different means merge
//! exactly (in exact arithmetic) by the pooled-moment correction: the
//! triangle gains the row `sqrt(W_a W_b / (W_a + W_b)) (m_a - m_b)` before
//! it is re-triangularised, the cross products the term
//! `(W_a W_b / (W_a + W_b)) d d^T` with `d = m_a - m_b`.
//!
//! **Scaling.** Every column is held divided by an exact power of two (its
//! range about the mean, or its largest magnitude without an intercept),
//! and the weights by a power of four (so `sqrt(w)` by a power of two).
//! When a later block or state widens a column's range, the stored column
//! is rescaled by an exact power of two. Data near `1e-300` or `1e300` are
//! held like data near 1. (A block whose weights exceed the earlier ones by
//! more than about `1e300` rescales the earlier rows' contributions below
//! the range of `f64`: they then count as zero.)
//!
//! **Row numbers.** Errors about a row (a NaN, a negative weight) name its
//! row in the whole stream: the rows absorbed before the block plus its
//! row in the block.
//!
//! **Serde** (feature `serde`): both states serialise to the plain form
//! [`StateData`] (tag, version, shape, totals, the sum of the log weights,
//! means, extremes, exponents and the `(p + k)^2` stored matrix). Reading a state back validates it;
//! deserialise a [`StateData`] and convert it with `TryFrom` to get the
//! typed [`Error::InvalidState`] (deserialising a state directly reports
//! the same text as the format's own error).
//!
//! **Inference.** [`TriangleState::inference`] and
//! [`CrossProductState::inference`] give the classical [`crate::Inference`]
//! of one target (standard errors, intervals, R², the F test, the
//! log-likelihood) without the rows; a sandwich covariance needs them
//! again and is refused there.
//!
//! **Second pass.** What needs the rows again is a blockwise second pass
//! over the same rows in the same order (block sizes free): per-row
//! leverage, residuals, studentized and deleted studentized residuals,
//! Cook's distances and leave-one-out residuals ([`BlockDiagnostics`]),
//! then the inference with any covariance, HC0-HC3 included. Both kinds
//! of state offer it, through one engine that reads the state's triangular
//! factor (the triangle's `R`, or `L^T` of the cross products' Cholesky
//! factor): [`TriangleState::second_pass`] and
//! [`CrossProductState::second_pass`] give a [`SecondPass`] for one
//! target; `second_pass_many` gives a [`ManyTargetsPass`] serving every
//! target in one read of the rows (the leverage once, the rest per
//! target).
//!
//! **Penalty path.** [`TriangleState::ridge_path`] gives a
//! [`crate::StateRidgePath`]: ridge fits, effective degrees of freedom, residual
//! sums of squares and generalized cross-validation at any penalty, from
//! one SVD of the state's triangle; the leave-one-out criterion needs the
//! rows and is refused.
//!
//! **Reports.** A state's fits report the solver `"qr-state"`,
//! `"cholesky-state"`, `"svd-state"` (minimum norm) or `"ridge-state"`,
//! the factorisation used, and fingerprint 0: a state fit is not tied to
//! one [`crate::Problem`], so the in-memory inference (which checks the
//! fingerprint of its problem) refuses it.
//!
//! ```
//! use leastline::{FitState, Problem, Qr, Solver, TriangleState};
//! use ndarray::{array, s};
//!
//! // Hourly readings of a greenhouse: heating power and vent opening
//! // against the temperature rise, arriving in two batches.
//! let x = array![[1.0, 0.2], [2.0, 0.1], [3.0, 0.4], [4.0, 0.3], [5.0, 0.5], [6.0, 0.2]];
//! let y = array![2.9, 4.6, 7.3, 8.9, 11.2, 12.6];
//! let mut first = TriangleState::new(2, 1, true)?;
//! first.absorb_target(x.slice(s![..3, ..]), y.slice(s![..3]), None)?;
//! let mut second = TriangleState::new(2, 1, true)?;
//! second.absorb_target(x.slice(s![3.., ..]), y.slice(s![3..]), None)?;
//! first.merge(&second)?;
//! let fits = first.finish()?;
//! let whole = Qr::new().fit(&Problem::new(x.view(), y.view())?)?;
//! for (a, b) in fits[0].model.coefficients().iter().zip(whole.model.coefficients()) {
//!     assert!((a - b).abs() <= 1e-12 * b.abs());
//! }
//! # Ok::<(), leastline::Error>(())
//! ```

mod cross;
mod inference;
mod rows;
mod second_pass;
pub(crate) mod triangle;
#[cfg(feature = "serde")]
mod wire;

pub use cross::CrossProductState;
pub use second_pass::{BlockDiagnostics, ManyTargetsPass, SecondPass};
pub use triangle::TriangleState;
#[cfg(feature = "serde")]
pub use wire::{StateData, STATE_FORMAT, STATE_VERSION};

use faer::MatMut;
use ndarray::{ArrayView1, ArrayView2, Axis};

use crate::error::{Error, Input, Result};
use crate::observe::Observer;
use crate::scaled::{exponent, ldexp, pow2_scale};
use crate::solver::{assemble, Fit, Origin, Solved};

/// What every fit state can do: absorb blocks of rows, merge with a state
/// of the same shape, and finish into one [`Fit`] per target.
pub trait FitState: Sized {
    /// Absorbs a block: design `x` (`n x p`, any layout), targets `y`
    /// (`n x k`), optional weights (length `n`, finite and `>= 0`).
    ///
    /// # Errors
    /// [`Error::ColumnCountMismatch`], [`Error::TargetCountMismatch`] and
    /// [`Error::LengthMismatch`] for shapes; [`Error::NonFinite`] and
    /// [`Error::InvalidWeight`] naming the row in the whole stream;
    /// [`Error::WeightRange`] for a positive weight too small beside the
    /// largest weight seen; [`Error::TooLarge`] if the working block cannot
    /// be allocated. On error the state is unchanged.
    fn absorb(
        &mut self,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<()>;

    /// [`FitState::absorb`] for a state of one target given as a vector.
    ///
    /// # Errors
    /// As [`FitState::absorb`].
    fn absorb_target(
        &mut self,
        x: ArrayView2<'_, f64>,
        y: ArrayView1<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
    ) -> Result<()> {
        self.absorb(x, y.insert_axis(Axis(1)), w)
    }

    /// [`FitState::absorb`], reporting the rows reduced to `observer` as it
    /// goes (stage [`crate::Stage::Factor`]; the states of this crate
    /// report every row block of their parallel pass) and stopping with
    /// [`Error::Stopped`] when it says so. The result is that of
    /// [`FitState::absorb`], bit for bit.
    ///
    /// # Errors
    /// As [`FitState::absorb`]; [`Error::Stopped`]. On error the state is
    /// unchanged.
    fn absorb_observed(
        &mut self,
        x: ArrayView2<'_, f64>,
        y: ArrayView2<'_, f64>,
        w: Option<ArrayView1<'_, f64>>,
        observer: &dyn crate::Observer,
    ) -> Result<()> {
        let watch = crate::observe::Watch::new(observer);
        watch.begin(crate::Stage::Factor, x.nrows());
        let before = self.layout().rows;
        self.absorb(x, y, w)?;
        watch.rows_done(self.layout().rows - before);
        Ok(())
    }

    /// Folds `other` (built from other rows) into this state.
    ///
    /// # Errors
    /// [`Error::StateMismatch`] when the column counts, target counts,
    /// intercepts or column names differ. On error the state is unchanged.
    fn merge(&mut self, other: &Self) -> Result<()>;

    /// The closed-form fit of every target (QR for [`TriangleState`],
    /// Cholesky for [`CrossProductState`]) at the default rank tolerance.
    ///
    /// # Errors
    /// As the state's own `finish_with`.
    fn finish(&self) -> Result<Vec<Fit>>;

    /// The shape and totals of the state.
    fn layout(&self) -> StateLayout<'_>;
}

/// The shape and totals of a fit state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StateLayout<'a> {
    /// Columns of the design (not counting the intercept).
    pub columns: usize,
    /// Targets fitted.
    pub targets: usize,
    /// Whether an intercept is fitted.
    pub intercept: bool,
    /// Column names, when given.
    pub names: Option<&'a [String]>,
    /// Rows absorbed (zero weights included).
    pub rows: usize,
    /// Rows with a non-zero weight.
    pub usable_rows: usize,
    /// Sum of the weights (rows when unweighted); infinite when the sum
    /// exceeds the range of `f64`.
    pub total_weight: f64,
}

/// What both kinds of state share: shape, totals, means, extremes and the
/// power-of-two scales of the stored matrix.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Core {
    pub p: usize,
    pub k: usize,
    pub intercept: bool,
    pub names: Option<Vec<String>>,
    pub rows: usize,
    pub usable: usize,
    /// Sum of the weights divided by `4^wexp`.
    pub weight: f64,
    pub wexp: i32,
    /// Largest weight seen (0 before any usable row).
    pub largest_weight: f64,
    /// `sum ln w_i` over the usable rows (0 without weights): the
    /// log-likelihood's weight term.
    pub log_weights: f64,
    /// Weighted means of the `p + k` columns (0 without an intercept).
    pub means: Vec<f64>,
    /// Smallest and largest value of each column over usable rows
    /// (`+inf` and `-inf` before any).
    pub lo: Vec<f64>,
    pub hi: Vec<f64>,
    /// Column `j` of the stored matrix is held divided by `2^exps[j]`
    /// (and `sqrt(w)` by `2^wexp`).
    pub exps: Vec<i32>,
}

/// How two cores were combined (see [`Core::combine`]).
pub(crate) enum Combined {
    /// The other state had no usable row: nothing to fold in.
    KeepSelf,
    /// This state had no usable row: take the other's matrix, shifted.
    TakeOther { shift: Vec<i32>, wshift: i32 },
    /// Both had rows: shift both matrices and add the correction.
    Both {
        self_shift: Vec<i32>,
        self_wshift: i32,
        other_shift: Vec<i32>,
        other_wshift: i32,
        /// `W_a W_b / W` in the new weight units.
        factor: f64,
        /// `(m_a - m_b) / 2^exps` in the new column units (zeros without
        /// an intercept).
        d: Vec<f64>,
    },
}

/// `(a - b) / 2^e`, without overflow of the difference.
pub(crate) fn scaled_diff(a: f64, b: f64, e: i32) -> f64 {
    let d = a - b;
    if d.is_finite() {
        ldexp(d, -e)
    } else {
        ldexp(0.5 * a - 0.5 * b, 1 - e)
    }
}

/// Scale exponent of a column with extremes `lo..=hi` over usable rows:
/// the exponent of its range (with an intercept) or of its largest
/// magnitude, so that centered values divided by `2^e` are below 2.
fn column_exp(lo: f64, hi: f64, intercept: bool) -> i32 {
    if lo > hi || !lo.is_finite() || !hi.is_finite() {
        return 0;
    }
    if intercept && hi > lo {
        let d = hi - lo;
        return if d.is_finite() {
            exponent(d)
        } else {
            exponent(0.5 * hi - 0.5 * lo) + 1
        };
    }
    exponent(lo.abs().max(hi.abs()))
}

/// `m_a + (W_b / W) (m_b - m_a)`, kept between the two means.
fn pooled_mean(ma: f64, mb: f64, frac: f64) -> f64 {
    let d = mb - ma;
    let m = if d.is_finite() {
        ma + frac * d
    } else {
        ma + 2.0 * (frac * (0.5 * mb - 0.5 * ma))
    };
    m.clamp(ma.min(mb), ma.max(mb))
}

impl Core {
    pub fn new(p: usize, k: usize, intercept: bool) -> Result<Self> {
        if k == 0 {
            return Err(Error::InvalidParameter {
                name: "targets",
                value: 0.0,
                reason: "a state fits at least one target",
            });
        }
        if p == 0 && !intercept {
            return Err(Error::NothingToFit);
        }
        let width = p.checked_add(k).ok_or(Error::TooLarge {
            what: "fit state",
            bytes: u128::MAX,
        })?;
        crate::alloc::reserve_matrices("fit state", width, width, 1)?;
        Ok(Core {
            p,
            k,
            intercept,
            names: None,
            rows: 0,
            usable: 0,
            weight: 0.0,
            wexp: 0,
            largest_weight: 0.0,
            log_weights: 0.0,
            means: vec![0.0; width],
            lo: vec![f64::INFINITY; width],
            hi: vec![f64::NEG_INFINITY; width],
            exps: vec![0; width],
        })
    }

    /// Columns of the stored matrix: `p + k`.
    pub fn width(&self) -> usize {
        self.p + self.k
    }

    pub fn set_names(&mut self, names: Vec<String>) -> Result<()> {
        if names.len() != self.p {
            return Err(Error::ColumnCountMismatch {
                expected: self.p,
                found: names.len(),
            });
        }
        self.names = Some(names);
        Ok(())
    }

    pub fn layout(&self) -> StateLayout<'_> {
        StateLayout {
            columns: self.p,
            targets: self.k,
            intercept: self.intercept,
            names: self.names.as_deref(),
            rows: self.rows,
            usable_rows: self.usable,
            total_weight: ldexp(self.weight, 2 * self.wexp),
        }
    }

    /// Checks that two states describe the same problem.
    pub fn check_same(&self, other: &Core) -> Result<()> {
        let pairs = [
            ("column count", self.p, other.p),
            ("target count", self.k, other.k),
            (
                "intercept",
                usize::from(self.intercept),
                usize::from(other.intercept),
            ),
        ];
        for (what, left, right) in pairs {
            if left != right {
                return Err(Error::StateMismatch { what, left, right });
            }
        }
        match (&self.names, &other.names) {
            (None, None) => Ok(()),
            (Some(a), Some(b)) => match a.iter().zip(b).position(|(x, y)| x != y) {
                None => Ok(()),
                Some(j) => Err(Error::StateMismatch {
                    what: "column names",
                    left: j,
                    right: j,
                }),
            },
            (a, b) => Err(Error::StateMismatch {
                what: "column names given",
                left: usize::from(a.is_some()),
                right: usize::from(b.is_some()),
            }),
        }
    }

    /// Checks a block's shapes and values; rows are numbered from
    /// `self.rows`.
    pub(crate) fn check_block(
        &self,
        x: &ArrayView2<'_, f64>,
        y: &ArrayView2<'_, f64>,
        w: Option<&ArrayView1<'_, f64>>,
    ) -> Result<()> {
        self.check_shapes(x, y, w)?;
        self.check_values(x, y, w)
    }

    /// Checks a block's shapes against the state's.
    pub(crate) fn check_shapes(
        &self,
        x: &ArrayView2<'_, f64>,
        y: &ArrayView2<'_, f64>,
        w: Option<&ArrayView1<'_, f64>>,
    ) -> Result<()> {
        let n = x.nrows();
        if x.ncols() != self.p {
            return Err(Error::ColumnCountMismatch {
                expected: self.p,
                found: x.ncols(),
            });
        }
        if y.nrows() != n {
            return Err(Error::LengthMismatch {
                input: Input::Target,
                design_rows: n,
                len: y.nrows(),
            });
        }
        if y.ncols() != self.k {
            return Err(Error::TargetCountMismatch {
                expected: self.k,
                found: y.ncols(),
            });
        }
        if let Some(w) = w {
            if w.len() != n {
                return Err(Error::LengthMismatch {
                    input: Input::Weights,
                    design_rows: n,
                    len: w.len(),
                });
            }
        }
        Ok(())
    }

    /// Checks a block's values (finite, weights `>= 0`); rows are numbered
    /// from `self.rows`.
    pub(crate) fn check_values(
        &self,
        x: &ArrayView2<'_, f64>,
        y: &ArrayView2<'_, f64>,
        w: Option<&ArrayView1<'_, f64>>,
    ) -> Result<()> {
        let base = self.rows;
        if let Some(w) = w {
            for (i, &value) in w.iter().enumerate() {
                if !crate::error::finite_nonnegative(value) {
                    return Err(Error::InvalidWeight {
                        row: base.saturating_add(i),
                        value,
                    });
                }
            }
        }
        for (i, row) in x.rows().into_iter().enumerate() {
            if let Some((j, &value)) = row.iter().enumerate().find(|(_, v)| !v.is_finite()) {
                return Err(Error::NonFinite {
                    input: Input::Design,
                    row: base.saturating_add(i),
                    column: Some(j),
                    column_name: None,
                    value,
                });
            }
        }
        for (i, row) in y.rows().into_iter().enumerate() {
            if let Some((t, &value)) = row.iter().enumerate().find(|(_, v)| !v.is_finite()) {
                return Err(Error::NonFinite {
                    input: Input::Target,
                    row: base.saturating_add(i),
                    column: (self.k > 1).then_some(t),
                    column_name: None,
                    value,
                });
            }
        }
        Ok(())
    }

    /// Makes `self` the core of the union of both states' rows and says
    /// how each stored matrix must be shifted (and corrected) to match.
    pub fn combine(&mut self, other: &Core) -> Combined {
        let rows = self.rows.saturating_add(other.rows);
        if other.usable == 0 {
            self.rows = rows;
            return Combined::KeepSelf;
        }
        let width = self.width();
        let lo: Vec<f64> = (0..width).map(|j| self.lo[j].min(other.lo[j])).collect();
        let hi: Vec<f64> = (0..width).map(|j| self.hi[j].max(other.hi[j])).collect();
        let exps: Vec<i32> = (0..width)
            .map(|j| column_exp(lo[j], hi[j], self.intercept))
            .collect();
        if self.usable == 0 {
            let shift = (0..width).map(|j| other.exps[j] - exps[j]).collect();
            *self = Core {
                rows,
                names: self.names.clone(),
                lo,
                hi,
                exps,
                ..other.clone()
            };
            return Combined::TakeOther { shift, wshift: 0 };
        }
        let wexp = self.wexp.max(other.wexp);
        let wa = ldexp(self.weight, 2 * (self.wexp - wexp));
        let wb = ldexp(other.weight, 2 * (other.wexp - wexp));
        let total = wa + wb;
        let frac = wb / total;
        let factor = wa * frac;
        let d: Vec<f64> = (0..width)
            .map(|j| {
                if self.intercept {
                    scaled_diff(self.means[j], other.means[j], exps[j])
                } else {
                    0.0
                }
            })
            .collect();
        let self_shift = (0..width).map(|j| self.exps[j] - exps[j]).collect();
        let other_shift = (0..width).map(|j| other.exps[j] - exps[j]).collect();
        let combined = Combined::Both {
            self_shift,
            self_wshift: self.wexp - wexp,
            other_shift,
            other_wshift: other.wexp - wexp,
            factor,
            d,
        };
        if self.intercept {
            for j in 0..width {
                self.means[j] = pooled_mean(self.means[j], other.means[j], frac);
            }
        }
        self.rows = rows;
        self.usable = self.usable.saturating_add(other.usable);
        self.weight = total;
        self.wexp = wexp;
        self.largest_weight = self.largest_weight.max(other.largest_weight);
        self.log_weights += other.log_weights;
        self.lo = lo;
        self.hi = hi;
        self.exps = exps;
        combined
    }

    /// The frame a finish works in (see [`Frame`]).
    ///
    /// # Errors
    /// [`Error::NoRows`], [`Error::AllWeightsZero`], [`Error::TooFewRows`]
    /// when `determined`; [`Error::SpreadOverflow`] for a column whose
    /// values about the mean exceed the range of `f64`.
    pub fn frame(&self, tolerance: f64, determined: bool) -> Result<Frame> {
        if self.rows == 0 {
            return Err(Error::NoRows);
        }
        if self.usable == 0 {
            return Err(Error::AllWeightsZero { rows: self.rows });
        }
        let parameters = self.p + usize::from(self.intercept);
        if determined && self.usable < parameters {
            return Err(Error::TooFewRows {
                usable_rows: self.usable,
                parameters,
            });
        }
        let width = self.width();
        let mut exps = Vec::with_capacity(width);
        let mut constant = Vec::with_capacity(width);
        let mut bound = Vec::with_capacity(width);
        let sqrt_w = self.weight.sqrt();
        for j in 0..width {
            let (lo, hi, m) = (self.lo[j], self.hi[j], self.means[j]);
            let raw = lo.abs().max(hi.abs());
            let centered = (hi - m).abs().max((m - lo).abs());
            if !centered.is_finite() {
                return Err(Error::SpreadOverflow {
                    input: if j < self.p {
                        Input::Design
                    } else {
                        Input::Target
                    },
                    column: if j < self.p {
                        Some(j)
                    } else {
                        (self.k > 1).then_some(j - self.p)
                    },
                    column_name: None,
                });
            }
            let e = exponent(pow2_scale(centered));
            exps.push(e);
            constant.push(j < self.p && centered <= tolerance * raw);
            bound.push(sqrt_w * ldexp(raw, -e));
        }
        Ok(Frame {
            exps,
            constant,
            bound,
            tolerance,
        })
    }

    /// Default relative rank tolerance: `max(usable rows, columns) * eps`
    /// (as the in-memory solvers).
    pub fn default_tolerance(&self) -> f64 {
        self.usable.max(self.p).max(1) as f64 * f64::EPSILON
    }

    /// The intercept `m_y - m_x . beta` for target `t` (0 without one),
    /// formed again in scaled units when a product leaves the range.
    pub fn intercept_for(&self, frame: &Frame, t: usize, beta: &[f64]) -> f64 {
        if !self.intercept {
            return 0.0;
        }
        let my = self.means[self.p + t];
        let mut acc = my;
        for (m, b) in self.means.iter().zip(beta) {
            acc -= m * b;
        }
        if acc.is_finite() {
            return acc;
        }
        let ey = frame.exps[self.p + t];
        let mut sum = 0.0;
        for (j, (m, b)) in self.means.iter().zip(beta).enumerate() {
            let ej = frame.exps[j];
            sum += ldexp(*m, -ej) * ldexp(*b, ej - ey);
        }
        my - ldexp(sum, ey)
    }

    /// The origin a state's fits record: its names and counts, and
    /// fingerprint 0 (a state fit is not tied to one [`crate::Problem`]).
    pub fn origin(&self) -> Origin<'_> {
        Origin {
            names: self.names.as_deref(),
            columns: self.p,
            usable_rows: self.usable,
            intercept: self.intercept,
            fingerprint: 0,
        }
    }

    /// The numbers of the fit of target `t` with slopes `beta` (caller's
    /// units), from sums of squares given in the frame's units as
    /// `(m, e)` (value `m 2^e`): the intercept is formed here, the sums
    /// are carried to the caller's units in scaled form.
    #[allow(clippy::too_many_arguments)]
    pub fn solved(
        &self,
        frame: &Frame,
        t: usize,
        beta: Vec<f64>,
        rank: Option<usize>,
        condition: Option<f64>,
        rss: (f64, i32),
        tss: (f64, i32),
        penalty: f64,
    ) -> Solved {
        let units = 2 * frame.exps[self.p + t] + 2 * self.wexp;
        let intercept = self.intercept_for(frame, t, &beta);
        Solved {
            beta,
            intercept,
            rank,
            condition,
            rss: (rss.0, rss.1 + units),
            tss: (tss.0, tss.1 + units),
            penalty,
        }
    }

    /// A state's [`Fit`] of target `t` (see [`Core::solved`]), reported
    /// under `solver` with its `factorization`.
    #[allow(clippy::too_many_arguments)]
    pub fn fit(
        &self,
        frame: &Frame,
        t: usize,
        (solver, factorization): (&str, &str),
        beta: Vec<f64>,
        rank: Option<usize>,
        condition: Option<f64>,
        rss: (f64, i32),
        tss: (f64, i32),
        penalty: f64,
    ) -> Result<Fit> {
        let solved = self.solved(frame, t, beta, rank, condition, rss, tss, penalty);
        assemble(&self.origin(), solver, Some(factorization), solved)
    }
}

/// The units a finish works in: column `j` divided by `2^exps[j]`, the
/// power of two at or below its largest centered magnitude (as the
/// in-memory solvers scale), so that condition numbers and rank decisions
/// match theirs.
#[derive(Debug, Clone)]
pub(crate) struct Frame {
    pub exps: Vec<i32>,
    /// Design columns constant beside the intercept (to the tolerance).
    pub constant: Vec<bool>,
    /// `sqrt(W) max|x_j| / 2^exps[j]`: the bound of the raw column's norm
    /// that rank decisions compare pivots with.
    pub bound: Vec<f64>,
    pub tolerance: f64,
}

impl Frame {
    /// Rank threshold of design column `j`.
    pub fn threshold(&self, j: usize) -> f64 {
        if self.constant[j] {
            f64::INFINITY
        } else {
            self.tolerance * self.bound[j]
        }
    }
}

/// Shifts column `j` of the upper part (rows `0..=j`) or the whole of a
/// square matrix by `2^(shift[j] + wshift)`.
pub(crate) fn shift_columns(mut m: MatMut<'_, f64>, shift: &[i32], wshift: i32, upper: bool) {
    for (j, &s) in shift.iter().enumerate() {
        let e = s + wshift;
        if e == 0 {
            continue;
        }
        let rows = if upper { j + 1 } else { m.nrows() };
        for i in 0..rows {
            m[(i, j)] = ldexp(m[(i, j)], e);
        }
    }
}

/// Checks a caller's rank tolerance (finite, `>= 0`).
pub(crate) fn check_tolerance(value: f64) -> Result<f64> {
    crate::solver::check_tolerance("rank_tolerance", value)
}

/// Absorbs the rows of `x` (`n x p`), `ys` (`n x k`) and the optional
/// weights `w` into `state` as one block, reduced in parallel by the row
/// pass of the in-memory solvers (fixed partition and fold tree: the same
/// bits for any thread count), calling `observer` after each row block of
/// that pass (stage [`crate::Stage::Factor`], the rows done so far out of `n`).
///
/// The result is that of [`FitState::absorb`] with the same arrays, bit for
/// bit. Rows in errors are numbered in the whole stream (the rows the state
/// held before, plus the row in `x`).
///
/// # Errors
/// As [`FitState::absorb`] (shapes are checked before any row is read);
/// [`Error::Stopped`] when the observer stops. On any error the state is
/// left as it was before the call.
///
/// ```
/// use leastline::state::absorb_rows;
/// use leastline::{FitState, TriangleState, Unobserved};
/// use ndarray::Array2;
///
/// // Three sensors on a bridge deck, each read against the load and the
/// // air temperature, 20,000 readings.
/// let n = 20_000;
/// let x = Array2::from_shape_fn((n, 2), |(i, j)| ((i * (j + 2)) % 31) as f64);
/// let ys = Array2::from_shape_fn((n, 3), |(i, t)| {
///     (t + 1) as f64 * x[(i, 0)] - 0.5 * x[(i, 1)] + ((i * 7 + t) % 5) as f64 * 0.01
/// });
/// let mut state = TriangleState::new(2, 3, true)?;
/// absorb_rows(&mut state, x.view(), ys.view(), None, &Unobserved)?;
/// assert_eq!(state.layout().rows, n);
/// let fits = state.finish()?;
/// assert!((fits[2].model.coefficients()[0] - 3.0).abs() < 1e-3);
/// # Ok::<(), leastline::Error>(())
/// ```
pub fn absorb_rows<S: FitState>(
    state: &mut S,
    x: ArrayView2<'_, f64>,
    ys: ArrayView2<'_, f64>,
    w: Option<ArrayView1<'_, f64>>,
    observer: &dyn Observer,
) -> Result<()> {
    state.absorb_observed(x, ys, w, observer)
}
