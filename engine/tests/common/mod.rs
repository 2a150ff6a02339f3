//! Shared pieces of the engine tests: a generated table of greenhouse
//! sensor readings written as multi-file Parquet and CSV, query helpers,
//! and the in-memory reference fits.
#![allow(dead_code)]

use std::collections::BTreeMap;
use std::fs::File;
use std::io::Write;
use std::path::Path;
use std::sync::Arc;

use datafusion::arrow::array::{
    Array, AsArray, Float64Array, ListArray, RecordBatch, StringArray, StructArray,
};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Field, Float64Type, Schema, SchemaRef, UInt64Type};
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::parquet::file::properties::WriterProperties;
use datafusion::prelude::*;
use leastline::ndarray::{Array1, Array2};
use leastline::{Fit, Problem, Qr, Solver};
use leastline_engine::Outcome;

/// Columns of the generated table besides the group.
pub const COLUMNS: [&str; 3] = ["light", "humidity", "vent"];

/// One row: group, target `growth`, weight `trust`, the three columns.
#[derive(Debug, Clone)]
pub struct Row {
    pub group: String,
    pub growth: f64,
    pub trust: f64,
    pub x: [f64; 3],
}

/// A small deterministic generator (SplitMix64) so the tests need no
/// random-number crate of their own.
pub struct Gen(u64);

impl Gen {
    pub fn new(seed: u64) -> Self {
        Gen(seed)
    }
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in `[0, 1)`.
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
}

/// Groups and their row counts: unequal sizes; `elm` has `vent` an exact
/// combination of the other two columns (rank 2 of 3).
pub const GROUPS: [(&str, usize); 5] = [
    ("alder", 2100),
    ("birch", 730),
    ("cedar", 95),
    ("dogwood", 12),
    ("elm", 310),
];

/// The rows of every group, shuffled together.
pub fn readings(seed: u64) -> Vec<Row> {
    let mut g = Gen::new(seed);
    let mut rows = Vec::new();
    for (k, (name, n)) in GROUPS.iter().enumerate() {
        let shift = k as f64;
        for _ in 0..*n {
            let x = if *name == "elm" {
                let a = (g.next_u64() % 41) as f64 - 20.0;
                let b = (g.next_u64() % 23) as f64;
                [a, b, a - 2.0 * b]
            } else {
                [
                    g.range(100.0, 900.0) + 50.0 * shift,
                    g.range(40.0, 95.0),
                    g.range(-3.0, 3.0) * (1.0 + shift),
                ]
            };
            let noise = g.range(-1.0, 1.0) * (0.5 + shift);
            let growth =
                3.0 + shift + 0.012 * x[0] - (0.2 + 0.01 * shift) * x[1] + 1.7 * x[2] + noise;
            rows.push(Row {
                group: name.to_string(),
                growth,
                trust: 0.25 + 3.0 * g.unit(),
                x,
            });
        }
    }
    for i in (1..rows.len()).rev() {
        let j = (g.next_u64() % (i as u64 + 1)) as usize;
        rows.swap(i, j);
    }
    rows
}

pub fn schema() -> SchemaRef {
    let mut fields = vec![
        Field::new("grp", DataType::Utf8, false),
        Field::new("growth", DataType::Float64, true),
        Field::new("trust", DataType::Float64, true),
    ];
    fields.extend(
        COLUMNS
            .iter()
            .map(|c| Field::new(*c, DataType::Float64, true)),
    );
    Arc::new(Schema::new(fields))
}

fn batch(rows: &[Row]) -> RecordBatch {
    let f = |get: &dyn Fn(&Row) -> f64| -> Arc<dyn Array> {
        Arc::new(Float64Array::from_iter_values(rows.iter().map(get)))
    };
    let mut cols: Vec<Arc<dyn Array>> = vec![
        Arc::new(StringArray::from_iter_values(
            rows.iter().map(|r| r.group.as_str()),
        )),
        f(&|r| r.growth),
        f(&|r| r.trust),
    ];
    for j in 0..3 {
        cols.push(f(&move |r: &Row| r.x[j]));
    }
    RecordBatch::try_new(schema(), cols).unwrap()
}

/// Splits the rows into files of the given fractions (unequal sizes).
pub fn split<'a>(rows: &'a [Row], fractions: &[f64]) -> Vec<&'a [Row]> {
    let mut parts = Vec::new();
    let mut start = 0;
    for (i, f) in fractions.iter().enumerate() {
        let end = if i + 1 == fractions.len() {
            rows.len()
        } else {
            start + (f * rows.len() as f64) as usize
        };
        parts.push(&rows[start..end]);
        start = end;
    }
    parts
}

/// Writes each part as a Parquet file with row groups of at most
/// `row_group` rows.
pub fn write_parquet(dir: &Path, parts: &[&[Row]], row_group: usize) {
    std::fs::create_dir_all(dir).unwrap();
    for (i, part) in parts.iter().enumerate() {
        let file = File::create(dir.join(format!("part-{i}.parquet"))).unwrap();
        let props = WriterProperties::builder()
            .set_max_row_group_row_count(Some(row_group))
            .build();
        let mut w = ArrowWriter::try_new(file, schema(), Some(props)).unwrap();
        for chunk in part.chunks(row_group.max(1) / 2 + 1) {
            w.write(&batch(chunk)).unwrap();
        }
        w.close().unwrap();
    }
}

/// Writes each part as a CSV file with a header (values in Rust's
/// shortest round-trip form, so the file holds every bit).
pub fn write_csv(dir: &Path, parts: &[&[Row]]) {
    std::fs::create_dir_all(dir).unwrap();
    for (i, part) in parts.iter().enumerate() {
        let mut f =
            std::io::BufWriter::new(File::create(dir.join(format!("part-{i}.csv"))).unwrap());
        writeln!(f, "grp,growth,trust,{}", COLUMNS.join(",")).unwrap();
        for r in *part {
            writeln!(
                f,
                "{},{:?},{:?},{:?},{:?},{:?}",
                r.group, r.growth, r.trust, r.x[0], r.x[1], r.x[2]
            )
            .unwrap();
        }
    }
}

/// A context with the fit aggregates and `target_partitions` partitions.
pub fn context(target_partitions: usize) -> SessionContext {
    let config = SessionConfig::new().with_target_partitions(target_partitions);
    let state = leastline_engine::session_state()
        .with_config(config)
        .build();
    SessionContext::new_with_state(state)
}

pub async fn register_parquet(ctx: &SessionContext, dir: &Path) {
    ctx.register_parquet(
        "readings",
        dir.to_str().unwrap(),
        ParquetReadOptions::default(),
    )
    .await
    .unwrap();
}

pub async fn register_csv(ctx: &SessionContext, dir: &Path) {
    let schema = schema();
    let opts = CsvReadOptions::new().schema(&schema).has_header(true);
    ctx.register_csv("readings", dir.to_str().unwrap(), opts)
        .await
        .unwrap();
}

/// One group's result, read back from the struct: the column names and the rest as the crate's [`Outcome`]
/// (reached through `Deref`).
#[derive(Debug, Clone, PartialEq)]
pub struct Got {
    pub columns: Vec<String>,
    pub outcome: Outcome,
}

impl std::ops::Deref for Got {
    type Target = Outcome;
    fn deref(&self) -> &Outcome {
        &self.outcome
    }
}

impl std::ops::DerefMut for Got {
    fn deref_mut(&mut self) -> &mut Outcome {
        &mut self.outcome
    }
}

fn opt_f64(s: &StructArray, name: &str, i: usize) -> Option<f64> {
    let a = s
        .column_by_name(name)
        .unwrap()
        .as_primitive::<Float64Type>();
    a.is_valid(i).then(|| a.value(i))
}

/// Reads `(group, fit struct)` rows: the group in column 0, the struct in
/// column 1.
pub fn read(batches: &[RecordBatch]) -> BTreeMap<String, Got> {
    let mut out = BTreeMap::new();
    for b in batches {
        let groups = cast(b.column(0), &DataType::Utf8).unwrap();
        let groups = groups.as_string::<i32>();
        let s = b.column(1).as_struct();
        for i in 0..b.num_rows() {
            let list = |name: &str| -> Option<Arc<dyn Array>> {
                let l: &ListArray = s.column_by_name(name).unwrap().as_list::<i32>();
                l.is_valid(i).then(|| l.value(i))
            };
            let columns = list("columns").unwrap();
            let columns = columns
                .as_string::<i32>()
                .iter()
                .map(|v| v.unwrap().to_string())
                .collect();
            let coefficients =
                list("coefficients").map(|a| a.as_primitive::<Float64Type>().values().to_vec());
            let rows = s
                .column_by_name("rows_used")
                .unwrap()
                .as_primitive::<UInt64Type>();
            let rank = s
                .column_by_name("rank")
                .unwrap()
                .as_primitive::<UInt64Type>();
            let refusal = s.column_by_name("refusal").unwrap().as_string::<i32>();
            out.insert(
                groups.value(i).to_string(),
                Got {
                    columns,
                    outcome: Outcome {
                        coefficients,
                        std_errors: list("std_errors")
                            .map(|a| a.as_primitive::<Float64Type>().values().to_vec()),
                        intercept: opt_f64(s, "intercept", i),
                        residual_ss: opt_f64(s, "residual_ss", i),
                        rows_used: rows.value(i),
                        rank: rank.is_valid(i).then(|| rank.value(i)),
                        condition: opt_f64(s, "condition", i),
                        r_squared: opt_f64(s, "r_squared", i),
                        refusal: refusal.is_valid(i).then(|| refusal.value(i).to_string()),
                    },
                },
            );
        }
    }
    out
}

pub async fn query(ctx: &SessionContext, sql: &str) -> BTreeMap<String, Got> {
    let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
    read(&batches)
}

/// The rows of one group as a design, a target and weights.
pub fn group_arrays(rows: &[Row], group: &str) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    let mine: Vec<&Row> = rows.iter().filter(|r| r.group == group).collect();
    let x = Array2::from_shape_fn((mine.len(), 3), |(i, j)| mine[i].x[j]);
    let y = Array1::from_iter(mine.iter().map(|r| r.growth));
    let w = Array1::from_iter(mine.iter().map(|r| r.trust));
    (x, y, w)
}

/// The core's in-memory QR fit of one group's rows.
pub fn reference(rows: &[Row], group: &str) -> leastline::Result<Fit> {
    let (x, y, _) = group_arrays(rows, group);
    Qr::new().fit(
        &Problem::builder(x.view(), y.view())
            .with_names(COLUMNS)
            .build()?,
    )
}

/// Significant digits shared by `a` and the reference `b`.
pub fn digits(a: f64, b: f64) -> f64 {
    if a == b {
        return f64::INFINITY;
    }
    -((a - b).abs() / b.abs()).log10()
}

/// Asserts that a group's aggregate result agrees with an in-memory fit to
/// `min` significant digits in every number.
pub fn assert_agrees(what: &str, got: &Got, fit: &Fit, min: f64) {
    assert_eq!(got.refusal, None, "{what}");
    let coef = got.coefficients.as_ref().expect("coefficients");
    for (j, (a, b)) in coef.iter().zip(fit.model.coefficients()).enumerate() {
        assert!(digits(*a, *b) >= min, "{what}: coefficient {j}: {a} vs {b}");
    }
    let pairs = [
        ("intercept", got.intercept, Some(fit.model.intercept())),
        (
            "residual_ss",
            got.residual_ss,
            Some(fit.report.residual_sum_of_squares),
        ),
        ("r_squared", got.r_squared, fit.report.r_squared),
        ("condition", got.condition, fit.report.condition),
    ];
    for (name, a, b) in pairs {
        let (a, b) = (a.expect(name), b.expect(name));
        assert!(digits(a, b) >= min, "{what}: {name}: {a} vs {b}");
    }
    assert_eq!(got.rows_used, fit.report.usable_rows as u64, "{what}");
    assert_eq!(got.rank, fit.report.rank.map(|r| r as u64), "{what}");
}
