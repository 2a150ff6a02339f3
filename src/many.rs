//! Many targets over one design, in memory: one factorisation for all of
//! them through a fit state with `k` targets (fed by
//! [`crate::state::absorb_rows`]).

use ndarray::{ArrayView1, ArrayView2, Axis};

use crate::error::{Error, Input, Result};
use crate::observe::{Observer, Unobserved};
use crate::problem::Problem;
use crate::ridge::{Ridge, RidgeFactorization};
use crate::solver::{Fit, Solver};
use crate::solvers::{Cholesky, Qr, Svd};
use crate::state::{absorb_rows, CrossProductState, FitState, TriangleState};

/// Many targets over one design: the rows of `x` (`n x p`) against each
/// column of `ys` (`n x k`), with the same optional weights and intercept.
///
/// Built like a [`Problem`] ([`ManyTargets::builder`], then
/// [`with_weights`](ManyTargetsBuilder::with_weights),
/// [`with_intercept`](ManyTargetsBuilder::with_intercept),
/// [`with_names`](ManyTargetsBuilder::with_names),
/// [`build`](ManyTargetsBuilder::build)). [`ManyTargets::fit`] fits all `k`
/// targets with one factorisation of the design (through a fit state with
/// `k` targets, see [`crate::state`]) and returns one [`Fit`] per target,
/// each with its own report; [`ManyTargets::fit_each`] fits each target on
/// its own with any solver (the gradient solvers, or a setting the shared
/// factorisation does not offer).
///
/// ```
/// use leastline::{ManyTargets, Qr};
/// use ndarray::array;
///
/// // Two bakeries' daily bread sales against the oven hours and the
/// // number of market stalls open that day.
/// let x = array![[6.0, 3.0], [7.0, 5.0], [5.5, 2.0], [8.0, 6.0], [6.5, 4.0], [7.5, 3.0]];
/// let ys = array![
///     [120.0, 80.0],
///     [141.0, 97.0],
///     [108.0, 71.0],
///     [163.0, 110.0],
///     [131.0, 90.0],
///     [147.0, 91.0],
/// ];
/// let many = ManyTargets::builder(x.view(), ys.view())
///     .with_names(["oven_hours", "stalls"])
///     .build()?;
/// let fits = many.fit(&Qr::new())?;
/// assert_eq!(fits.len(), 2);
/// assert_eq!(fits[1].model.names(), ["oven_hours", "stalls"]);
/// # Ok::<(), leastline::Error>(())
/// ```
#[derive(Debug, Clone)]
pub struct ManyTargets<'a> {
    design: ArrayView2<'a, f64>,
    targets: ArrayView2<'a, f64>,
    weights: Option<ArrayView1<'a, f64>>,
    intercept: bool,
    names: Option<Vec<String>>,
}

/// Settings for a [`ManyTargets`] before validation.
#[derive(Debug, Clone)]
pub struct ManyTargetsBuilder<'a> {
    inner: ManyTargets<'a>,
}

impl<'a> ManyTargetsBuilder<'a> {
    /// Observation weights, one per row, each finite and `>= 0` (as
    /// [`crate::ProblemBuilder::with_weights`]).
    pub fn with_weights(mut self, weights: ArrayView1<'a, f64>) -> Self {
        self.inner.weights = Some(weights);
        self
    }

    /// Whether to fit an intercept for every target (default `true`).
    pub fn with_intercept(mut self, intercept: bool) -> Self {
        self.inner.intercept = intercept;
        self
    }

    /// A name for every column of the design (as
    /// [`crate::ProblemBuilder::with_names`]); every target's model carries
    /// them.
    pub fn with_names<S: Into<String>>(mut self, names: impl IntoIterator<Item = S>) -> Self {
        self.inner.names = Some(names.into_iter().map(Into::into).collect());
        self
    }

    /// Checks the shapes and names. The values (NaN, infinities, bad
    /// weights) are checked as the rows are read by a fit, which names
    /// the row, and for a target its column.
    ///
    /// # Errors
    /// [`Error::LengthMismatch`] when the targets or weights do not have
    /// one row per design row; [`Error::NoRows`];
    /// [`Error::InvalidParameter`] (`targets`) for zero target columns;
    /// [`Error::NothingToFit`] for zero columns without an intercept;
    /// [`Error::NameCountMismatch`], [`Error::InvalidName`] for names.
    pub fn build(self) -> Result<ManyTargets<'a>> {
        let many = self.inner;
        let n = many.design.nrows();
        crate::problem::check_row_counts(
            n,
            many.targets.nrows(),
            many.weights.as_ref().map(|w| w.len()),
        )?;
        if many.targets.ncols() == 0 {
            return Err(Error::InvalidParameter {
                name: "targets",
                value: 0.0,
                reason: "at least one target column is needed",
            });
        }
        if many.design.ncols() == 0 && !many.intercept {
            return Err(Error::NothingToFit);
        }
        if let Some(names) = &many.names {
            crate::model::check_names(names, many.design.ncols())?;
        }
        Ok(many)
    }
}

impl<'a> ManyTargets<'a> {
    /// Starts from a design (`n x p`, any layout) and targets (`n x k`, one
    /// column per target); intercept on, no weights.
    pub fn builder(
        design: ArrayView2<'a, f64>,
        targets: ArrayView2<'a, f64>,
    ) -> ManyTargetsBuilder<'a> {
        ManyTargetsBuilder {
            inner: ManyTargets {
                design,
                targets,
                weights: None,
                intercept: true,
                names: None,
            },
        }
    }

    /// Checks an unweighted problem with an intercept.
    ///
    /// # Errors
    /// As [`ManyTargetsBuilder::build`].
    pub fn new(design: ArrayView2<'a, f64>, targets: ArrayView2<'a, f64>) -> Result<Self> {
        Self::builder(design, targets).build()
    }

    /// Number of targets `k`.
    pub fn targets(&self) -> usize {
        self.targets.ncols()
    }

    /// Rows of the design.
    pub fn rows(&self) -> usize {
        self.design.nrows()
    }

    /// Columns of the design.
    pub fn columns(&self) -> usize {
        self.design.ncols()
    }

    /// The single-target [`Problem`] of target `t`.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] (`target`) when `t >= k`; as
    /// [`crate::ProblemBuilder::build`], a non-finite target value naming
    /// its row and the target `t` as its column.
    pub fn problem(&self, t: usize) -> Result<Problem<'a>> {
        if t >= self.targets() {
            return Err(Error::InvalidParameter {
                name: "target",
                value: t as f64,
                reason: "must be below the number of targets",
            });
        }
        let mut builder = Problem::builder(self.design, self.targets.index_axis_move(Axis(1), t))
            .with_intercept(self.intercept);
        if let Some(w) = self.weights {
            builder = builder.with_weights(w);
        }
        if let Some(names) = &self.names {
            builder = builder.with_names(names.iter().cloned());
        }
        builder.build().map_err(|e| match e {
            Error::NonFinite {
                input: Input::Target,
                row,
                column: None,
                column_name,
                value,
            } => Error::NonFinite {
                input: Input::Target,
                row,
                column: Some(t),
                column_name,
                value,
            },
            other => other,
        })
    }

    /// A state of this problem's shape (and names), holding every row.
    fn absorbed<S: FitState + Clone>(&self, state: S, observer: &dyn Observer) -> Result<S> {
        let mut state = state;
        absorb_rows(
            &mut state,
            self.design,
            self.targets,
            self.weights,
            observer,
        )?;
        Ok(state)
    }

    fn triangle(&self, observer: &dyn Observer) -> Result<TriangleState> {
        let mut state = TriangleState::new(self.columns(), self.targets(), self.intercept)?;
        if let Some(names) = &self.names {
            state = state.with_names(names.clone())?;
        }
        self.absorbed(state, observer)
    }

    fn cross(&self, observer: &dyn Observer) -> Result<CrossProductState> {
        let mut state = CrossProductState::new(self.columns(), self.targets(), self.intercept)?;
        if let Some(names) = &self.names {
            state = state.with_names(names.clone())?;
        }
        self.absorbed(state, observer)
    }

    /// Fits every target with one factorisation shared by all (see
    /// [`SharedSolver`]): one [`Fit`] per target, in the order of the
    /// columns of `ys`.
    ///
    /// # Errors
    /// As [`ManyTargets::fit_observed`].
    pub fn fit(&self, solver: &dyn SharedSolver) -> Result<Vec<Fit>> {
        self.fit_observed(solver, &Unobserved)
    }

    /// [`ManyTargets::fit`], calling `observer` after every row block of
    /// the pass that reads the rows into the factorisation.
    ///
    /// # Errors
    /// [`Error::NonFinite`] naming the row and, for a target, the target
    /// as its column; [`Error::InvalidWeight`] naming the row; the errors
    /// of the state's finish ([`TriangleState::finish_with`],
    /// [`TriangleState::finish_min_norm`], [`TriangleState::finish_ridge`],
    /// [`CrossProductState::finish_with`]); [`Error::InvalidParameter`]
    /// for a solver setting the shared factorisation does not offer;
    /// [`Error::Stopped`] when the observer stops.
    pub fn fit_observed(
        &self,
        solver: &dyn SharedSolver,
        observer: &dyn Observer,
    ) -> Result<Vec<Fit>> {
        let fits = solver.fit_many(self, observer)?;
        let Some(names) = &self.names else {
            return Ok(fits);
        };
        fits.into_iter()
            .map(|mut fit| {
                fit.model = fit.model.with_names(names.iter().cloned())?;
                Ok(fit)
            })
            .collect()
    }

    /// Fits each target on its own with `solver` (any solver, the gradient
    /// ones included): the fits `solver.fit(&self.problem(t)?)` for every
    /// `t`.
    ///
    /// # Errors
    /// As [`ManyTargets::problem`] and the solver's own fit.
    pub fn fit_each(&self, solver: &dyn Solver) -> Result<Vec<Fit>> {
        (0..self.targets())
            .map(|t| solver.fit(&self.problem(t)?))
            .collect()
    }
}

/// The solvers that can fit many targets with one shared factorisation
/// ([`ManyTargets::fit`]): [`Qr`] (the triangle state's QR finish; no
/// refinement), [`Cholesky`] (the cross-product state's normal
/// equations), [`Svd`] (the triangle state's minimum-norm finish) and
/// [`Ridge`] (the triangle state's ridge finish, the augmented QR; no
/// standardising). Their reports name the state solvers (`"qr-state"`,
/// `"cholesky-state"`, `"svd-state"`, `"ridge-state"`).
pub trait SharedSolver: Solver {
    /// Fits every target of `many` through one state.
    ///
    /// # Errors
    /// See [`ManyTargets::fit_observed`].
    fn fit_many(&self, many: &ManyTargets<'_>, observer: &dyn Observer) -> Result<Vec<Fit>>;
}

impl SharedSolver for Qr {
    fn fit_many(&self, many: &ManyTargets<'_>, observer: &dyn Observer) -> Result<Vec<Fit>> {
        self.check()?;
        if self.refinement.is_some() {
            return Err(Error::InvalidParameter {
                name: "refinement",
                value: 1.0,
                reason: "a shared factorisation of many targets has no refinement; use fit_each",
            });
        }
        many.triangle(observer)?.finish_with(self.rank_tolerance)
    }
}

impl SharedSolver for Cholesky {
    fn fit_many(&self, many: &ManyTargets<'_>, observer: &dyn Observer) -> Result<Vec<Fit>> {
        self.check()?;
        many.cross(observer)?
            .finish_with(self.rank_tolerance, Some(self.min_digits))
    }
}

impl SharedSolver for Svd {
    fn fit_many(&self, many: &ManyTargets<'_>, observer: &dyn Observer) -> Result<Vec<Fit>> {
        self.check()?;
        many.triangle(observer)?
            .finish_min_norm(self.rank_tolerance)
    }
}

impl SharedSolver for Ridge {
    fn fit_many(&self, many: &ManyTargets<'_>, observer: &dyn Observer) -> Result<Vec<Fit>> {
        self.check()?;
        if self.standardize {
            return Err(Error::InvalidParameter {
                name: "standardize",
                value: 1.0,
                reason: "a shared factorisation of many targets penalises the coefficients as given; use fit_each",
            });
        }
        if !matches!(
            self.factorization,
            RidgeFactorization::ByShape | RidgeFactorization::AugmentedQr
        ) {
            return Err(Error::InvalidParameter {
                name: "factorization",
                value: 0.0,
                reason: "many targets share the augmented QR: choose ByShape or AugmentedQr, or use fit_each",
            });
        }
        many.triangle(observer)?.finish_ridge(self.penalty)
    }
}
