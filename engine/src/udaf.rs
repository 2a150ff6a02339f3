//! The aggregate functions and their accumulators.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, BinaryArray, BooleanArray, Float64Array};
use datafusion::arrow::datatypes::{DataType, Field, FieldRef};
use datafusion::common::{plan_err, DataFusionError, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDFImpl, EmitTo, GroupsAccumulator, Signature, Volatility,
};
use datafusion::physical_expr::expressions::Literal;

use crate::options::FitOptions;
use crate::output;
use crate::summary::{Columns, Outcome, Shape, Summary};

/// A least-squares fit as an aggregate function: `lsq_fit(y, x1, ..., xp)`
/// or, with an options string literal and a weight column,
/// `lsq_fit_with('options', y, w, x1, ..., xp)`. See the crate
/// documentation for the result and the options.
#[derive(Debug, PartialEq, Eq, Hash)]
pub struct LeastSquares {
    name: &'static str,
    weighted: bool,
    signature: Signature,
}

impl LeastSquares {
    /// `lsq_fit(y, x1, ..., xp)`: unweighted, with intercept, triangle
    /// state.
    pub fn plain() -> Self {
        LeastSquares {
            name: "lsq_fit",
            weighted: false,
            signature: Signature::user_defined(Volatility::Immutable),
        }
    }

    /// `lsq_fit_with('options', y, w, x1, ..., xp)`: weights and options
    /// (see [`FitOptions`]).
    pub fn with_options() -> Self {
        LeastSquares {
            name: "lsq_fit_with",
            weighted: true,
            signature: Signature::user_defined(Volatility::Immutable),
        }
    }

    /// Arguments before the design columns.
    fn leading(&self) -> usize {
        if self.weighted {
            3
        } else {
            1
        }
    }

    fn shape(&self, args: &AccumulatorArgs) -> Result<Arc<Shape>> {
        if args.is_distinct {
            return plan_err!("{} does not take DISTINCT", self.name);
        }
        let names: Vec<String> = args
            .expr_fields
            .iter()
            .map(|f| f.name().to_string())
            .collect();
        let lead = self.leading();
        if names.len() <= lead {
            return plan_err!("{} needs at least one design column", self.name);
        }
        let options = if self.weighted {
            let text: Option<String> =
                args.exprs[0]
                    .downcast_ref::<Literal>()
                    .and_then(|l| match l.value() {
                        ScalarValue::Utf8(s)
                        | ScalarValue::LargeUtf8(s)
                        | ScalarValue::Utf8View(s) => Some(s.clone().unwrap_or_default()),
                        _ => None,
                    });
            let Some(text) = text else {
                return plan_err!(
                    "the first argument of {} (the options) must be a string literal",
                    self.name
                );
            };
            FitOptions::parse(&text)
                .map_err(|e| DataFusionError::Plan(format!("{}: {e}", self.name)))?
        } else {
            FitOptions::default()
        };
        Ok(Arc::new(Shape {
            target: names[lead - if self.weighted { 2 } else { 1 }].clone(),
            weight: self.weighted.then(|| names[2].clone()),
            columns: names[lead..].to_vec(),
            options,
        }))
    }
}

impl AggregateUDFImpl for LeastSquares {
    fn name(&self) -> &str {
        self.name
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn return_type(&self, _arg_types: &[DataType]) -> Result<DataType> {
        Ok(output::result_type())
    }

    fn coerce_types(&self, arg_types: &[DataType]) -> Result<Vec<DataType>> {
        let lead = self.leading();
        if arg_types.len() <= lead {
            return plan_err!(
                "{} takes {}at least one design column; got {} arguments",
                self.name,
                if self.weighted {
                    "an options string, a target, a weight column and "
                } else {
                    "a target and "
                },
                arg_types.len()
            );
        }
        arg_types
            .iter()
            .enumerate()
            .map(|(i, t)| {
                if self.weighted && i == 0 {
                    return match t {
                        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => {
                            Ok(DataType::Utf8)
                        }
                        _ => plan_err!(
                            "argument 0 of {} (the options) must be a string, not {t}",
                            self.name
                        ),
                    };
                }
                if t.is_numeric() || *t == DataType::Null {
                    Ok(DataType::Float64)
                } else {
                    plan_err!(
                        "argument {i} of {} must be numeric, not {t} (arguments count from 0)",
                        self.name
                    )
                }
            })
            .collect()
    }

    fn accumulator(&self, acc_args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        Ok(Box::new(FitAccumulator {
            shape: self.shape(&acc_args)?,
            lead: self.leading(),
            summary: Summary::Empty,
        }))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        Ok(vec![Arc::new(Field::new(
            format!("{}[fit state]", args.name),
            DataType::Binary,
            true,
        ))])
    }

    fn groups_accumulator_supported(&self, _args: AccumulatorArgs) -> bool {
        true
    }

    fn create_groups_accumulator(
        &self,
        args: AccumulatorArgs,
    ) -> Result<Box<dyn GroupsAccumulator>> {
        Ok(Box::new(FitGroups {
            shape: self.shape(&args)?,
            lead: self.leading(),
            groups: Vec::new(),
        }))
    }
}

fn float_column(values: &[ArrayRef], i: usize) -> Result<&Float64Array> {
    values
        .get(i)
        .and_then(|a| a.as_any().downcast_ref::<Float64Array>())
        .ok_or_else(|| {
            DataFusionError::Internal(format!("fit argument {i} is not a Float64 column"))
        })
}

fn columns<'a>(values: &'a [ArrayRef], lead: usize) -> Result<Columns<'a>> {
    let weighted = lead == 3;
    let y = float_column(values, lead - if weighted { 2 } else { 1 })?;
    let w = if weighted {
        Some(float_column(values, 2)?)
    } else {
        None
    };
    let x = (lead..values.len())
        .map(|i| float_column(values, i))
        .collect::<Result<Vec<_>>>()?;
    Ok(Columns { y, w, x })
}

/// Rows of the batch that enter the fit: selected by the filter (when
/// given) and complete.
fn selected(cols: &Columns<'_>, filter: Option<&BooleanArray>) -> Result<Vec<u32>> {
    let n = cols.y.len();
    let n32 = u32::try_from(n)
        .map_err(|_| DataFusionError::Execution(format!("a batch of {n} rows is too long")))?;
    let nulls = cols.has_nulls();
    let keep = |i: usize| {
        filter.is_none_or(|f| f.is_valid(i) && f.value(i)) && (!nulls || cols.complete(i))
    };
    let mut rows = Vec::new();
    rows.try_reserve_exact(n).map_err(|_| {
        DataFusionError::ResourcesExhausted(format!("cannot list the {n} rows of a batch"))
    })?;
    rows.extend((0..n32).filter(|&i| keep(i as usize)));
    Ok(rows)
}

fn state_size(shape: &Shape) -> usize {
    let w = shape.columns.len() + 1;
    std::mem::size_of::<Summary>() + 8 * (w * w + 4 * w)
}

fn decode_all<'a>(
    values: &'a [ArrayRef],
    shape: &'a Shape,
) -> Result<impl Iterator<Item = Result<(usize, Summary)>> + 'a> {
    let states = values
        .first()
        .and_then(|a| a.as_any().downcast_ref::<BinaryArray>())
        .ok_or_else(|| DataFusionError::Internal("fit state is not a Binary column".into()))?;
    Ok((0..states.len())
        .filter(move |&i| states.is_valid(i))
        .map(move |i| Summary::decode(states.value(i), shape).map(|s| (i, s))))
}

/// The accumulator of one group (used when DataFusion does not group).
#[derive(Debug)]
struct FitAccumulator {
    shape: Arc<Shape>,
    lead: usize,
    summary: Summary,
}

impl Accumulator for FitAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let cols = columns(values, self.lead)?;
        let rows = selected(&cols, None)?;
        self.summary.absorb_rows(&self.shape, &cols, &rows)
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        let outcome = self.summary.finish(&self.shape);
        Ok(ScalarValue::Struct(Arc::new(output::build(
            &[outcome],
            &self.shape.columns,
        ))))
    }

    fn size(&self) -> usize {
        state_size(&self.shape)
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        Ok(vec![ScalarValue::Binary(Some(self.summary.encode()?))])
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        for item in decode_all(states, &self.shape)? {
            let (_, s) = item?;
            self.summary.merge(s)?;
        }
        Ok(())
    }
}

/// The accumulator of all groups of one partition.
struct FitGroups {
    shape: Arc<Shape>,
    lead: usize,
    groups: Vec<Summary>,
}

impl FitGroups {
    fn grow(&mut self, total: usize) -> Result<()> {
        if total > self.groups.len() {
            self.groups
                .try_reserve(total - self.groups.len())
                .map_err(|_| {
                    DataFusionError::ResourcesExhausted(format!("cannot hold {total} fit groups"))
                })?;
            self.groups.resize_with(total, Summary::default);
        }
        Ok(())
    }
}

impl GroupsAccumulator for FitGroups {
    fn update_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        opt_filter: Option<&BooleanArray>,
        total_num_groups: usize,
    ) -> Result<()> {
        self.grow(total_num_groups)?;
        let cols = columns(values, self.lead)?;
        let mut rows = selected(&cols, opt_filter)?;
        let group_of = |i: u32| group_indices[i as usize];
        let Some(&first) = rows.first() else {
            return Ok(());
        };
        let g0 = group_of(first);
        if rows.iter().all(|&i| group_of(i) == g0) {
            let summary = self.groups.get_mut(g0).ok_or_else(|| {
                DataFusionError::Internal(format!("group {g0} beyond {total_num_groups}"))
            })?;
            return summary.absorb_rows(&self.shape, &cols, &rows);
        }
        // Rows of one group together, in their order within the batch.
        rows.sort_by_key(|&i| group_of(i));
        for run in rows.chunk_by(|&a, &b| group_of(a) == group_of(b)) {
            let g = group_of(run[0]);
            let summary = self.groups.get_mut(g).ok_or_else(|| {
                DataFusionError::Internal(format!("group {g} beyond {total_num_groups}"))
            })?;
            summary.absorb_rows(&self.shape, &cols, run)?;
        }
        Ok(())
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        let taken = emit_to.take_needed(&mut self.groups);
        let outcomes: Vec<Outcome> = taken.iter().map(|s| s.finish(&self.shape)).collect();
        Ok(Arc::new(output::build(&outcomes, &self.shape.columns)))
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        let taken = emit_to.take_needed(&mut self.groups);
        let encoded = taken
            .iter()
            .map(Summary::encode)
            .collect::<Result<Vec<_>>>()?;
        Ok(vec![Arc::new(BinaryArray::from_iter_values(encoded))])
    }

    fn merge_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        total_num_groups: usize,
    ) -> Result<()> {
        self.grow(total_num_groups)?;
        for item in decode_all(values, &self.shape)? {
            let (i, s) = item?;
            let g = *group_indices
                .get(i)
                .ok_or_else(|| DataFusionError::Internal(format!("no group for state row {i}")))?;
            self.groups
                .get_mut(g)
                .ok_or_else(|| {
                    DataFusionError::Internal(format!("group {g} beyond {total_num_groups}"))
                })?
                .merge(s)?;
        }
        Ok(())
    }

    fn convert_to_state(
        &self,
        values: &[ArrayRef],
        opt_filter: Option<&BooleanArray>,
    ) -> Result<Vec<ArrayRef>> {
        let cols = columns(values, self.lead)?;
        let n = cols.y.len();
        let rows = selected(&cols, opt_filter)?;
        let mut next = rows.iter().peekable();
        let empty = Summary::Empty.encode()?;
        let encoded: Vec<Vec<u8>> = (0..n)
            .map(|i| {
                if next.peek().is_some_and(|&&r| r as usize == i) {
                    next.next();
                    Summary::encode_row(&cols, i)
                } else {
                    empty.clone()
                }
            })
            .collect();
        Ok(vec![Arc::new(BinaryArray::from_iter_values(encoded))])
    }

    fn size(&self) -> usize {
        self.groups.capacity() * state_size(&self.shape)
    }
}
