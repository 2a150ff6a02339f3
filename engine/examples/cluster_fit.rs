//! Fits one model per orchard block on a Ballista cluster started
//! in-process (a scheduler and an executor on the loopback address), from
//! a Parquet table this example writes, and prints each block's fit next
//! to the in-process DataFusion answer.
//!
//! `cargo run -p leastline-engine --example cluster_fit`

use std::sync::Arc;

use ballista::prelude::*;
use datafusion::arrow::array::{Float64Array, RecordBatch, StringArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::arrow::util::pretty::pretty_format_batches;
use datafusion::error::Result;
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::prelude::*;

const SQL: &str = "SELECT block, fit['coefficients'] AS slopes, fit['intercept'] AS base, \
                   fit['r_squared'] AS r2, fit['refusal'] AS refusal \
                   FROM (SELECT block, lsq_fit(yield_kg, rain_mm, sun_h) AS fit \
                         FROM harvest GROUP BY block) ORDER BY block";

fn write_table(dir: &std::path::Path) -> Result<()> {
    let schema = Arc::new(Schema::new(vec![
        Field::new("block", DataType::Utf8, false),
        Field::new("yield_kg", DataType::Float64, false),
        Field::new("rain_mm", DataType::Float64, false),
        Field::new("sun_h", DataType::Float64, false),
    ]));
    for part in 0..3u32 {
        let n = 400 + 300 * part as usize;
        let block: Vec<&str> = (0..n).map(|i| ["north", "river", "hill"][i % 3]).collect();
        let rain: Vec<f64> = (0..n)
            .map(|i| 20.0 + ((i * 37 + 11 * part as usize) % 90) as f64)
            .collect();
        let sun: Vec<f64> = (0..n)
            .map(|i| 4.0 + ((i * 13 + 5) % 17) as f64 * 0.5)
            .collect();
        let yld: Vec<f64> = (0..n)
            .map(|i| {
                let wobble = ((i * 7919 + part as usize) % 101) as f64 / 101.0 - 0.5;
                12.0 + 0.08 * rain[i] + 1.3 * sun[i] + (i % 3) as f64 + wobble
            })
            .collect();
        let batch = RecordBatch::try_new(
            schema.clone(),
            vec![
                Arc::new(StringArray::from(block)),
                Arc::new(Float64Array::from(yld)),
                Arc::new(Float64Array::from(rain)),
                Arc::new(Float64Array::from(sun)),
            ],
        )?;
        let file = std::fs::File::create(dir.join(format!("harvest-{part}.parquet")))?;
        let mut w = ArrowWriter::try_new(file, schema.clone(), None)?;
        w.write(&batch)?;
        w.close()?;
    }
    Ok(())
}

#[tokio::main]
async fn main() -> Result<()> {
    let dir = std::env::temp_dir().join(format!("leastline-cluster-fit-{}", std::process::id()));
    std::fs::create_dir_all(&dir)?;
    write_table(&dir)?;
    let path = dir.to_string_lossy().to_string();

    // Scheduler and executor in-process, both knowing the aggregates.
    let state = leastline_engine::session_state()
        .with_config(SessionConfig::new_with_ballista().with_target_partitions(3))
        .build();
    let cluster = SessionContext::standalone_with_state(state).await?;
    // The client's planning state replaces the aggregate list: add ours.
    leastline_engine::register(&cluster);
    cluster
        .register_parquet("harvest", &path, ParquetReadOptions::default())
        .await?;
    let on_cluster = cluster.sql(SQL).await?.collect().await?;
    println!(
        "On the Ballista cluster:\n{}",
        pretty_format_batches(&on_cluster)?
    );

    let local = SessionContext::new_with_state(leastline_engine::session_state().build());
    local
        .register_parquet("harvest", &path, ParquetReadOptions::default())
        .await?;
    let in_process = local.sql(SQL).await?.collect().await?;
    println!(
        "In-process DataFusion:\n{}",
        pretty_format_batches(&in_process)?
    );
    std::fs::remove_dir_all(&dir)?;
    Ok(())
}
