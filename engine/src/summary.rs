//! One group's running fit: a mergeable state of the core crate, or the
//! reason the group was refused; its encoding as the aggregate's state
//! (an Arrow `Binary` value); and its finish into an [`Outcome`].
//!
//! Encoding (first byte, then the payload):
//! - `0`: no row yet (empty payload);
//! - `1`: a state, the JSON of [`StateData`] (validated when read);
//! - `2`: a refusal, its UTF-8 text;
//! - `3`: raw rows, `rows x (columns + 2)` little-endian `f64` values
//!   (target, weight, then the columns): the state of single rows that
//!   DataFusion asks for when it skips the partial aggregation.

use datafusion::arrow::array::{Array, Float64Array};
use datafusion::common::{DataFusionError, Result};
use leastline::inference::InferenceOptions;
use leastline::ndarray::{Array1, Array2, ShapeBuilder};
use leastline::{CrossProductState, Error, FitState, Input, StateData, TriangleState};

use crate::options::{FitOptions, StateKind};

const EMPTY: u8 = 0;
const STATE: u8 = 1;
const REFUSED: u8 = 2;
const ROWS: u8 = 3;

/// The columns of one call: names of the target, weights and design
/// columns, and the options.
#[derive(Debug, Clone)]
pub(crate) struct Shape {
    pub target: String,
    pub weight: Option<String>,
    pub columns: Vec<String>,
    pub options: FitOptions,
}

/// A state of either kind.
#[derive(Debug, Clone)]
pub(crate) enum State {
    Triangle(TriangleState),
    Cross(CrossProductState),
}

/// One group's running fit.
#[derive(Debug, Clone, Default)]
pub(crate) enum Summary {
    /// No row seen yet.
    #[default]
    Empty,
    Open(Box<State>),
    Refused(String),
}

/// A finished group: what goes into the result struct.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Outcome {
    /// Coefficients in the order of the columns (`None` when refused).
    pub coefficients: Option<Vec<f64>>,
    /// The intercept (`None` without one or when refused).
    pub intercept: Option<f64>,
    /// Classical standard errors of the coefficients, in their order, from
    /// the state's own inference (`None` for a ridge fit, whose estimator is
    /// biased, and where the state refuses inference, e.g. with no residual
    /// degrees of freedom).
    pub std_errors: Option<Vec<f64>>,
    /// Weighted residual sum of squares.
    pub residual_ss: Option<f64>,
    /// Rows with a non-zero weight that entered the fit.
    pub rows_used: u64,
    /// Numerical rank (also given for a rank-deficient refusal).
    pub rank: Option<u64>,
    /// 2-norm condition number of the scaled, centered design.
    pub condition: Option<f64>,
    /// Coefficient of determination.
    pub r_squared: Option<f64>,
    /// Why no fit was returned.
    pub refusal: Option<String>,
}

/// The rows of one batch as `f64` columns (nulls already excluded by the
/// caller's row selection).
pub(crate) struct Columns<'a> {
    pub y: &'a Float64Array,
    pub w: Option<&'a Float64Array>,
    pub x: Vec<&'a Float64Array>,
}

impl Columns<'_> {
    /// Whether row `i` has a value in every column (rows with a null are
    /// skipped, as SQL aggregates skip nulls).
    pub fn complete(&self, i: usize) -> bool {
        self.y.is_valid(i)
            && self.w.is_none_or(|w| w.is_valid(i))
            && self.x.iter().all(|c| c.is_valid(i))
    }

    /// Whether any column has a null.
    pub fn has_nulls(&self) -> bool {
        self.y.null_count() > 0
            || self.w.is_some_and(|w| w.null_count() > 0)
            || self.x.iter().any(|c| c.null_count() > 0)
    }
}

fn alloc_error(what: &str, n: usize) -> DataFusionError {
    DataFusionError::ResourcesExhausted(format!(
        "cannot allocate {n} values for the {what} of a fit block"
    ))
}

fn gather(n: usize, what: &str, f: impl Iterator<Item = f64>) -> Result<Vec<f64>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n).map_err(|_| alloc_error(what, n))?;
    v.extend(f);
    Ok(v)
}

impl State {
    fn new(shape: &Shape) -> leastline::Result<State> {
        let p = shape.columns.len();
        let names = shape.columns.clone();
        Ok(match shape.options.state {
            StateKind::Triangle => State::Triangle(
                TriangleState::new(p, 1, shape.options.intercept)?.with_names(names)?,
            ),
            StateKind::CrossProduct => State::Cross(
                CrossProductState::new(p, 1, shape.options.intercept)?.with_names(names)?,
            ),
        })
    }

    fn absorb(
        &mut self,
        x: &Array2<f64>,
        y: &Array1<f64>,
        w: Option<&Array1<f64>>,
    ) -> leastline::Result<()> {
        let w = w.map(|w| w.view());
        match self {
            State::Triangle(s) => s.absorb_target(x.view(), y.view(), w),
            State::Cross(s) => s.absorb_target(x.view(), y.view(), w),
        }
    }

    fn merge(&mut self, other: &State) -> leastline::Result<()> {
        match (self, other) {
            (State::Triangle(a), State::Triangle(b)) => a.merge(b),
            (State::Cross(a), State::Cross(b)) => a.merge(b),
            _ => Err(Error::InvalidState {
                field: "kind",
                index: 0,
                reason: "another kind of state than this call accumulates",
            }),
        }
    }

    fn usable_rows(&self) -> usize {
        match self {
            State::Triangle(s) => s.layout().usable_rows,
            State::Cross(s) => s.layout().usable_rows,
        }
    }

    fn to_data(&self) -> StateData {
        match self {
            State::Triangle(s) => StateData::from(s.clone()),
            State::Cross(s) => StateData::from(s.clone()),
        }
    }
}

/// The refusal text of a core error met while absorbing rows: what was
/// wrong and in which column of the call (the row number the core gives
/// counts rows of one partial state, which means nothing to the query).
fn row_refusal(e: &Error, shape: &Shape) -> String {
    match e {
        Error::NonFinite {
            input,
            column,
            value,
            ..
        } => {
            let column = match (input, column) {
                (Input::Target, _) => shape.target.as_str(),
                (Input::Weights, _) => shape.weight.as_deref().unwrap_or("weights"),
                (_, Some(c)) => shape.columns.get(*c).map_or("?", String::as_str),
                (_, None) => "?",
            };
            format!("non-finite value {value} in column {column} of a row of this group")
        }
        Error::InvalidWeight { value, .. } => format!(
            "weight {value} in column {} of a row of this group: weights must be finite and >= 0",
            shape.weight.as_deref().unwrap_or("weights")
        ),
        other => other.to_string(),
    }
}

impl Summary {
    /// Absorbs the rows `rows` of `cols` (all complete).
    pub fn absorb_rows(&mut self, shape: &Shape, cols: &Columns<'_>, rows: &[u32]) -> Result<()> {
        if rows.is_empty() || matches!(self, Summary::Refused(_)) {
            return Ok(());
        }
        let n = rows.len();
        let p = cols.x.len();
        let mut data = Vec::new();
        data.try_reserve_exact(n * p)
            .map_err(|_| alloc_error("design", n * p))?;
        for c in &cols.x {
            let v = c.values();
            data.extend(rows.iter().map(|&i| v[i as usize]));
        }
        let x = Array2::from_shape_vec((n, p).f(), data)
            .map_err(|e| DataFusionError::Internal(e.to_string()))?;
        let yv = cols.y.values();
        let y = Array1::from(gather(n, "target", rows.iter().map(|&i| yv[i as usize]))?);
        let w = match cols.w {
            Some(w) => {
                let wv = w.values();
                Some(Array1::from(gather(
                    n,
                    "weights",
                    rows.iter().map(|&i| wv[i as usize]),
                )?))
            }
            None => None,
        };
        self.absorb_block(shape, &x, &y, w.as_ref());
        Ok(())
    }

    fn absorb_block(
        &mut self,
        shape: &Shape,
        x: &Array2<f64>,
        y: &Array1<f64>,
        w: Option<&Array1<f64>>,
    ) {
        if let Summary::Empty = self {
            *self = match State::new(shape) {
                Ok(s) => Summary::Open(Box::new(s)),
                Err(e) => Summary::Refused(e.to_string()),
            };
        }
        if let Summary::Open(s) = self {
            if let Err(e) = s.absorb(x, y, w) {
                *self = Summary::Refused(row_refusal(&e, shape));
            }
        }
    }

    /// Folds another group summary in (a refusal wins).
    pub fn merge(&mut self, other: Summary) -> Result<()> {
        match (&mut *self, other) {
            (_, Summary::Empty) | (Summary::Refused(_), _) => {}
            (Summary::Empty, o) | (_, o @ Summary::Refused(_)) => *self = o,
            (Summary::Open(a), Summary::Open(b)) => {
                a.merge(&b).map_err(|e| {
                    DataFusionError::Execution(format!(
                        "a partial fit state does not fit this call: {e}"
                    ))
                })?;
            }
        }
        Ok(())
    }

    /// The encoded state (see the module documentation).
    pub fn encode(&self) -> Result<Vec<u8>> {
        Ok(match self {
            Summary::Empty => vec![EMPTY],
            Summary::Refused(r) => {
                let mut v = vec![REFUSED];
                v.extend_from_slice(r.as_bytes());
                v
            }
            Summary::Open(s) => {
                let mut v = vec![STATE];
                serde_json::to_writer(&mut v, &s.to_data())
                    .map_err(|e| DataFusionError::Internal(format!("writing a fit state: {e}")))?;
                v
            }
        })
    }

    /// The state of one complete row `i` of `cols` (tag `3`).
    pub fn encode_row(cols: &Columns<'_>, i: usize) -> Vec<u8> {
        let mut v = Vec::with_capacity(1 + 8 * (cols.x.len() + 2));
        v.push(ROWS);
        let w = cols.w.map_or(1.0, |w| w.value(i));
        for value in [cols.y.value(i), w]
            .into_iter()
            .chain(cols.x.iter().map(|c| c.value(i)))
        {
            v.extend_from_slice(&value.to_le_bytes());
        }
        v
    }

    /// Reads an encoded state (untrusted: every field is checked, a state
    /// through the core's validation).
    ///
    /// # Errors
    /// An execution error naming what is wrong with the bytes.
    pub fn decode(bytes: &[u8], shape: &Shape) -> Result<Summary> {
        let bad =
            |why: String| DataFusionError::Execution(format!("invalid partial fit state: {why}"));
        let Some((&tag, payload)) = bytes.split_first() else {
            return Err(bad("empty value".into()));
        };
        match tag {
            EMPTY if payload.is_empty() => Ok(Summary::Empty),
            EMPTY => Err(bad("an empty state with a payload".into())),
            REFUSED => std::str::from_utf8(payload)
                .map(|s| Summary::Refused(s.to_string()))
                .map_err(|e| bad(format!("refusal text is not UTF-8: {e}"))),
            STATE => {
                let data: StateData =
                    serde_json::from_slice(payload).map_err(|e| bad(e.to_string()))?;
                let expected = (shape.columns.len(), 1, shape.options.intercept);
                if (data.columns, data.targets, data.intercept) != expected {
                    return Err(bad(format!(
                        "shape (columns {}, targets {}, intercept {}) where this call has {:?}",
                        data.columns, data.targets, data.intercept, expected
                    )));
                }
                if data.names.as_deref() != Some(shape.columns.as_slice()) {
                    return Err(bad("column names differ from this call's".into()));
                }
                let state = match shape.options.state {
                    StateKind::Triangle => TriangleState::try_from(data).map(State::Triangle),
                    StateKind::CrossProduct => CrossProductState::try_from(data).map(State::Cross),
                }
                .map_err(|e| bad(e.to_string()))?;
                Ok(Summary::Open(Box::new(state)))
            }
            ROWS => {
                let p = shape.columns.len();
                let width = 8 * (p + 2);
                if payload.is_empty() || payload.len() % width != 0 {
                    return Err(bad(format!(
                        "{} bytes of rows, not a positive multiple of {width}",
                        payload.len()
                    )));
                }
                let n = payload.len() / width;
                let value = |r: usize, j: usize| {
                    let at = r * width + 8 * j;
                    let mut b = [0u8; 8];
                    b.copy_from_slice(&payload[at..at + 8]);
                    f64::from_le_bytes(b)
                };
                let x = Array2::from_shape_fn((n, p).f(), |(r, j)| value(r, j + 2));
                let y = Array1::from_shape_fn(n, |r| value(r, 0));
                let w = Array1::from_shape_fn(n, |r| value(r, 1));
                let mut s = Summary::Empty;
                let weights = shape.weight.is_some().then_some(&w);
                if weights.is_none() && w.iter().any(|&v| v != 1.0) {
                    return Err(bad("weights in the rows of an unweighted call".into()));
                }
                s.absorb_block(shape, &x, &y, weights);
                Ok(s)
            }
            t => Err(bad(format!("unknown tag {t}"))),
        }
    }

    /// Finishes the group.
    pub fn finish(&self, shape: &Shape) -> Outcome {
        let state = match self {
            Summary::Empty => {
                return Outcome {
                    refusal: Some("no row of this group has a value in every column".into()),
                    ..Outcome::default()
                }
            }
            Summary::Refused(r) => {
                return Outcome {
                    refusal: Some(r.clone()),
                    ..Outcome::default()
                }
            }
            Summary::Open(s) => s.as_ref(),
        };
        let rows_used = state.usable_rows() as u64;
        let fits = match (state, shape.options.ridge) {
            (State::Triangle(s), Some(lambda)) => s.finish_ridge(lambda),
            (State::Triangle(s), None) => s.finish(),
            (State::Cross(s), _) => s.finish(),
        };
        let fit = match fits.map(|f| f.into_iter().next()) {
            Ok(Some(fit)) => fit,
            Ok(None) => {
                return Outcome {
                    rows_used,
                    refusal: Some("the state gave no fit".into()),
                    ..Outcome::default()
                }
            }
            Err(e) => {
                let rank = match &e {
                    Error::RankDeficient { rank, .. } => Some(*rank as u64),
                    _ => None,
                };
                return Outcome {
                    rows_used,
                    rank,
                    refusal: Some(e.to_string()),
                    ..Outcome::default()
                };
            }
        };
        let inference = match (state, shape.options.ridge) {
            (_, Some(_)) => None,
            (State::Triangle(s), None) => s.inference(0, InferenceOptions::new()).ok(),
            (State::Cross(s), None) => s.inference(0, InferenceOptions::new()).ok(),
        };
        let std_errors =
            inference.map(|inf| inf.coefficients.iter().map(|e| e.std_error).collect());
        let r = &fit.report;
        Outcome {
            coefficients: Some(fit.model.coefficients().to_vec()),
            std_errors,
            intercept: shape.options.intercept.then(|| fit.model.intercept()),
            residual_ss: Some(r.residual_sum_of_squares),
            rows_used: r.usable_rows as u64,
            rank: r.rank.map(|k| k as u64),
            condition: r.condition,
            r_squared: r.r_squared,
            refusal: None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn shape(state: StateKind) -> Shape {
        Shape {
            target: "load".into(),
            weight: None,
            columns: vec!["span".into(), "depth".into()],
            options: FitOptions {
                state,
                ..FitOptions::default()
            },
        }
    }

    /// A summary of `n` rows of a small bridge-load table.
    fn summary(shape: &Shape, n: usize, skew: f64) -> Summary {
        let y = Float64Array::from_iter_values(
            (0..n).map(|i| 3.0 + i as f64 * 0.7 + skew * ((i * i) % 5) as f64),
        );
        let a = Float64Array::from_iter_values((0..n).map(|i| i as f64));
        let b = Float64Array::from_iter_values((0..n).map(|i| ((i * 7) % 11) as f64));
        let cols = Columns {
            y: &y,
            w: None,
            x: vec![&a, &b],
        };
        let rows: Vec<u32> = (0..n as u32).collect();
        let mut s = Summary::Empty;
        s.absorb_rows(shape, &cols, &rows).unwrap();
        s
    }

    #[test]
    fn encoded_states_read_back_to_the_same_fit() {
        for kind in [StateKind::Triangle, StateKind::CrossProduct] {
            let sh = shape(kind);
            for s in [
                summary(&sh, 9, 0.1),
                Summary::Empty,
                Summary::Refused("no".into()),
            ] {
                let back = Summary::decode(&s.encode().unwrap(), &sh).unwrap();
                assert_eq!(back.finish(&sh), s.finish(&sh));
            }
        }
    }

    #[test]
    fn every_altered_byte_is_read_without_panic_and_checked() {
        let sh = shape(StateKind::Triangle);
        let bytes = summary(&sh, 7, 0.3).encode().unwrap();
        let mut rejected = 0;
        for at in 0..bytes.len() {
            for flip in [0x01u8, 0x20, 0x80] {
                let mut b = bytes.clone();
                b[at] ^= flip;
                if let Ok(s) = Summary::decode(&b, &sh) {
                    // What still reads is a valid state: its finish gives a
                    // fit or a refusal with finite numbers.
                    let o = s.finish(&sh);
                    for v in o.coefficients.unwrap_or_default() {
                        assert!(v.is_finite());
                    }
                } else {
                    rejected += 1;
                }
            }
            assert!(
                Summary::decode(&bytes[..at], &sh).is_err(),
                "prefix of {at} bytes"
            );
        }
        assert!(
            rejected > bytes.len(),
            "{rejected} of {} alterations rejected",
            3 * bytes.len()
        );
    }

    #[test]
    fn malformed_states_are_named() {
        let sh = shape(StateKind::Triangle);
        let good = String::from_utf8(summary(&sh, 6, 0.2).encode().unwrap()[1..].to_vec()).unwrap();
        let state = |json: String| {
            let mut v = vec![STATE];
            v.extend_from_slice(json.as_bytes());
            Summary::decode(&v, &sh).unwrap_err().to_string()
        };
        assert!(state(good.replace("\"span\"", "\"spam\"")).contains("column names"));
        assert!(state(good.replace("\"columns\":2", "\"columns\":3")).contains("shape"));
        assert!(state(good.replace("\"triangle\"", "\"cross-product\"")).contains("kind"));
        // An entry below the diagonal of the triangle (row 1, column 0).
        let data: StateData = serde_json::from_str(&good).unwrap();
        let mut bad = data.clone();
        bad.matrix[3] = 0.5;
        assert!(state(serde_json::to_string(&bad).unwrap()).contains("matrix"));
        let cross = shape(StateKind::CrossProduct);
        let mut v = vec![STATE];
        v.extend_from_slice(good.as_bytes());
        assert!(Summary::decode(&v, &cross).is_err());
        assert!(Summary::decode(&[], &sh)
            .unwrap_err()
            .to_string()
            .contains("empty"));
        assert!(Summary::decode(&[9], &sh)
            .unwrap_err()
            .to_string()
            .contains("tag 9"));
        assert!(Summary::decode(&[EMPTY, 1], &sh).is_err());
        assert!(Summary::decode(&[REFUSED, 0xff], &sh).is_err());
        assert!(Summary::decode(&[ROWS, 0, 0, 0], &sh)
            .unwrap_err()
            .to_string()
            .contains("multiple of 32"));
    }

    #[test]
    fn raw_rows_absorb_and_a_nan_names_its_column() {
        let sh = shape(StateKind::Triangle);
        let row = |y: f64, w: f64, a: f64, b: f64| {
            [y, w, a, b]
                .iter()
                .flat_map(|v| v.to_le_bytes())
                .collect::<Vec<u8>>()
        };
        let mut v = vec![ROWS];
        v.extend(row(1.0, 1.0, 2.0, f64::NAN));
        match Summary::decode(&v, &sh).unwrap() {
            Summary::Refused(r) => assert!(r.contains("NaN") && r.contains("depth"), "{r}"),
            other => panic!("{other:?}"),
        }
        let mut v = vec![ROWS];
        v.extend(row(1.0, 2.0, 2.0, 3.0));
        assert!(Summary::decode(&v, &sh)
            .unwrap_err()
            .to_string()
            .contains("weights"));
        // Rows given one by one merge into the fit of all of them.
        let whole = summary(&sh, 8, 0.4);
        let y: Vec<f64> = (0..8)
            .map(|i| 3.0 + i as f64 * 0.7 + 0.4 * ((i * i) % 5) as f64)
            .collect();
        let mut merged = Summary::Empty;
        for (i, yi) in y.iter().enumerate() {
            let mut v = vec![ROWS];
            v.extend(row(*yi, 1.0, i as f64, ((i * 7) % 11) as f64));
            merged.merge(Summary::decode(&v, &sh).unwrap()).unwrap();
        }
        let (a, b) = (merged.finish(&sh), whole.finish(&sh));
        for (x, z) in a.coefficients.unwrap().iter().zip(b.coefficients.unwrap()) {
            assert!((x - z).abs() <= 1e-13 * z.abs(), "{x} vs {z}");
        }
    }
}
