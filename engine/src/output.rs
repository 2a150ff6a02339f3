//! The result struct of a fit aggregate: one value per group.

use std::sync::Arc;

use datafusion::arrow::array::{
    ArrayRef, Float64Builder, ListBuilder, StringBuilder, StructArray, UInt64Builder,
};
use datafusion::arrow::datatypes::{DataType, Field, Fields};

use crate::summary::Outcome;

/// Field names of the result struct, in order.
pub const RESULT_FIELDS: [&str; 10] = [
    "columns",
    "coefficients",
    "intercept",
    "std_errors",
    "residual_ss",
    "rows_used",
    "rank",
    "condition",
    "r_squared",
    "refusal",
];

fn list_of(t: DataType) -> DataType {
    DataType::List(Arc::new(Field::new_list_field(t, true)))
}

/// The fields of the result struct (see the crate documentation).
pub fn result_fields() -> Fields {
    let types = [
        list_of(DataType::Utf8),
        list_of(DataType::Float64),
        DataType::Float64,
        list_of(DataType::Float64),
        DataType::Float64,
        DataType::UInt64,
        DataType::UInt64,
        DataType::Float64,
        DataType::Float64,
        DataType::Utf8,
    ];
    RESULT_FIELDS
        .iter()
        .zip(types)
        .map(|(name, t)| Field::new(*name, t, true))
        .collect()
}

/// The result struct's type.
pub fn result_type() -> DataType {
    DataType::Struct(result_fields())
}

/// One struct row per outcome; `columns` names the design columns.
pub(crate) fn build(outcomes: &[Outcome], columns: &[String]) -> StructArray {
    let n = outcomes.len();
    let mut names = ListBuilder::with_capacity(StringBuilder::new(), n);
    let mut coefficients = ListBuilder::with_capacity(Float64Builder::new(), n);
    let mut intercept = Float64Builder::with_capacity(n);
    let mut std_errors = ListBuilder::with_capacity(Float64Builder::new(), n);
    let mut rss = Float64Builder::with_capacity(n);
    let mut rows = UInt64Builder::with_capacity(n);
    let mut rank = UInt64Builder::with_capacity(n);
    let mut condition = Float64Builder::with_capacity(n);
    let mut r_squared = Float64Builder::with_capacity(n);
    let mut refusal = StringBuilder::new();
    for o in outcomes {
        names.append_value(columns.iter().map(|c| Some(c.as_str())));
        coefficients.append_option(o.coefficients.as_ref().map(|c| c.iter().map(|&v| Some(v))));
        intercept.append_option(o.intercept);
        std_errors.append_option(o.std_errors.as_ref().map(|v| v.iter().map(|&e| Some(e))));
        rss.append_option(o.residual_ss);
        rows.append_value(o.rows_used);
        rank.append_option(o.rank);
        condition.append_option(o.condition);
        r_squared.append_option(o.r_squared);
        refusal.append_option(o.refusal.as_deref());
    }
    let arrays: Vec<ArrayRef> = vec![
        Arc::new(names.finish()),
        Arc::new(coefficients.finish()),
        Arc::new(intercept.finish()),
        Arc::new(std_errors.finish()),
        Arc::new(rss.finish()),
        Arc::new(rows.finish()),
        Arc::new(rank.finish()),
        Arc::new(condition.finish()),
        Arc::new(r_squared.finish()),
        Arc::new(refusal.finish()),
    ];
    StructArray::new(result_fields(), arrays, None)
}
