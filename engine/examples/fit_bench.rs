//! Speed of the fit aggregate against a plain `SUM` over the same columns
//! (the cost of reading the Parquet files and moving the batches), in the
//! same engine and the same run.
//!
//! `cargo run --release -p leastline-engine --example fit_bench -- --rows 10000000`
//!
//! Options: `--rows N` (default 1,000,000), `--repeat R` (default 3; the
//! best of R runs of each query is reported), `--partitions P` (target
//! partitions, default: the CPU count), `--dir PATH` (where the Parquet
//! files go; default a fresh temporary folder, removed at the end).
//! The table has a target and 10 columns of `f64`, written as files of at
//! most 1,000,000 rows.

use std::sync::Arc;
use std::time::Instant;

use datafusion::arrow::array::{ArrayRef, AsArray, Float64Array, RecordBatch};
use datafusion::arrow::datatypes::Int64Type;
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::error::{DataFusionError, Result};
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::prelude::*;

const COLUMNS: usize = 10;
const FILE_ROWS: usize = 1_000_000;
const BATCH: usize = 65_536;

struct Args {
    rows: usize,
    repeat: usize,
    partitions: Option<usize>,
    dir: Option<std::path::PathBuf>,
}

fn args() -> Result<Args> {
    let mut a = Args {
        rows: 1_000_000,
        repeat: 3,
        partitions: None,
        dir: None,
    };
    let mut it = std::env::args().skip(1);
    while let Some(flag) = it.next() {
        let value = it
            .next()
            .ok_or_else(|| DataFusionError::Configuration(format!("{flag} needs a value")))?;
        let number = || {
            value.replace('_', "").parse::<usize>().map_err(|_| {
                DataFusionError::Configuration(format!("{flag} {value}: not a whole number"))
            })
        };
        match flag.as_str() {
            "--rows" => a.rows = number()?,
            "--repeat" => a.repeat = number()?.max(1),
            "--partitions" => a.partitions = Some(number()?.max(1)),
            "--dir" => a.dir = Some(value.clone().into()),
            _ => {
                return Err(DataFusionError::Configuration(format!(
                    "unknown option {flag}"
                )))
            }
        }
    }
    Ok(a)
}

/// Deterministic values (SplitMix64), so runs read the same table.
fn fill(seed: u64, n: usize, out: &mut [Vec<f64>]) {
    let mut s = seed;
    let mut next = || {
        s = s.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = s;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    for c in out.iter_mut() {
        c.clear();
    }
    for _ in 0..n {
        let mut y = 0.5;
        for (j, c) in out.iter_mut().enumerate().skip(1) {
            let v = next() * (j as f64 + 1.0);
            y += v * (0.3 + 0.1 * j as f64);
            c.push(v);
        }
        out[0].push(y + next() - 0.5);
    }
}

fn write(dir: &std::path::Path, rows: usize) -> Result<()> {
    let mut fields = vec![Field::new("y", DataType::Float64, false)];
    fields.extend((1..=COLUMNS).map(|j| Field::new(format!("x{j}"), DataType::Float64, false)));
    let schema = Arc::new(Schema::new(fields));
    let mut cols = vec![Vec::new(); COLUMNS + 1];
    let (mut done, mut file) = (0, 0);
    while done < rows {
        let in_file = FILE_ROWS.min(rows - done);
        let f = std::fs::File::create(dir.join(format!("rows-{file:04}.parquet")))?;
        let mut w = ArrowWriter::try_new(f, schema.clone(), None)?;
        let mut left = in_file;
        while left > 0 {
            let n = BATCH.min(left);
            fill((done + in_file - left) as u64, n, &mut cols);
            let arrays: Vec<ArrayRef> = cols
                .iter()
                .map(|c| Arc::new(Float64Array::from(c.clone())) as ArrayRef)
                .collect();
            w.write(&RecordBatch::try_new(schema.clone(), arrays)?)?;
            left -= n;
        }
        w.close()?;
        done += in_file;
        file += 1;
    }
    Ok(())
}

async fn best(ctx: &SessionContext, sql: &str, repeat: usize) -> Result<f64> {
    let mut best = f64::INFINITY;
    for _ in 0..repeat {
        let start = Instant::now();
        let batches = ctx.sql(sql).await?.collect().await?;
        let seconds = start.elapsed().as_secs_f64();
        if batches.iter().map(|b| b.num_rows()).sum::<usize>() != 1 {
            return Err(DataFusionError::Execution("expected one result row".into()));
        }
        best = best.min(seconds);
    }
    Ok(best)
}

#[tokio::main]
async fn main() -> Result<()> {
    let a = args()?;
    let (dir, owned) = match &a.dir {
        Some(d) => (d.clone(), false),
        None => (
            std::env::temp_dir().join(format!("leastline-fit-bench-{}", std::process::id())),
            true,
        ),
    };
    std::fs::create_dir_all(&dir)?;
    let have = std::fs::read_dir(&dir)?.count();
    if have == 0 {
        let t = Instant::now();
        write(&dir, a.rows)?;
        println!(
            "wrote {} rows x {} columns in {:.1} s",
            a.rows,
            COLUMNS + 1,
            t.elapsed().as_secs_f64()
        );
    }
    let mut config = SessionConfig::new();
    if let Some(p) = a.partitions {
        config = config.with_target_partitions(p);
    }
    let state = leastline_engine::session_state()
        .with_config(config)
        .build();
    let ctx = SessionContext::new_with_state(state);
    ctx.register_parquet(
        "t",
        dir.to_string_lossy().as_ref(),
        ParquetReadOptions::default(),
    )
    .await?;
    let xs: Vec<String> = (1..=COLUMNS).map(|j| format!("x{j}")).collect();
    let sums: Vec<String> = std::iter::once("y".to_string())
        .chain(xs.iter().cloned())
        .map(|c| format!("SUM({c})"))
        .collect();
    let sum_sql = format!("SELECT {} FROM t", sums.join(", "));
    let fit_sql = format!("SELECT lsq_fit(y, {}) FROM t", xs.join(", "));
    let counted = ctx.sql("SELECT COUNT(*) FROM t").await?.collect().await?;
    let n = counted
        .first()
        .map(|b| b.column(0).as_primitive::<Int64Type>().value(0))
        .ok_or_else(|| DataFusionError::Execution("no row count".into()))? as f64;
    println!("table: {n} rows in {}", dir.display());
    let sum = best(&ctx, &sum_sql, a.repeat).await?;
    let fit = best(&ctx, &fit_sql, a.repeat).await?;
    println!(
        "target partitions: {}",
        ctx.state().config().target_partitions()
    );
    println!("SUM of 11 columns: {sum:.3} s ({:.3e} rows/s)", n / sum);
    println!("lsq_fit, 10 columns: {fit:.3} s ({:.3e} rows/s)", n / fit);
    println!("fit / SUM time ratio: {:.2} (target <= 2)", fit / sum);
    if owned {
        std::fs::remove_dir_all(&dir)?;
    }
    Ok(())
}
