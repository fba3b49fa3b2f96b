//! Kestrel Bay's return temperatures and flows as a historian would export them — a long
//! Parquet table (tag, timestamp, value), rows out of order, drop-outs as NULL — queried
//! with lagwise's SQL functions on DataFusion: each tag's model, its whiteness, and a
//! day-ahead forecast at 80% and 95%.
//!
//! Run: `cargo run -p lagwise-sql --example historian_sql -- [substations]` (default 6).
//! Writes `target/kestrel-bay/historian/part-*.parquet` (invented data from lagwise's
//! simulator).

use std::sync::Arc;

use datafusion::arrow::array::{Float64Array, RecordBatch, StringArray, TimestampMillisecondArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema, TimeUnit};
use datafusion::arrow::util::pretty::print_batches;
use datafusion::prelude::{ParquetReadOptions, SessionContext};
use lagwise::{Blueprint, Dropouts, Simulator};

/// 2026-11-25 00:00 UTC, the demo's first reading.
const ORIGIN_MS: i64 = 1_795_564_800_000;
const CADENCE_MS: i64 = 900_000;
const DAYS: usize = 7;

fn daily(t: usize, amplitude: f64) -> f64 {
    let phase = 2.0 * std::f64::consts::PI * (t % 96) as f64 / 96.0;
    amplitude * (phase - 1.2).sin()
}

fn tables(substations: usize) -> Result<Vec<RecordBatch>, Box<dyn std::error::Error>> {
    let n = 96 * DAYS;
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, false),
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
            false,
        ),
        Field::new("value", DataType::Float64, true),
    ]));
    let mut batches = Vec::new();
    for s in 0..substations {
        let id = 417 + s;
        let tr = Simulator::builder()
            .autoregressive(&[0.7])
            .seasonal(&[], &[-0.5], 96)
            .innovation_sd(0.25)
            .build()?
            .generate(n, 10 * id as u64);
        let fl = Simulator::builder()
            .autoregressive(&[0.5])
            .moving_average(&[0.3])
            .innovation_sd(1.5)
            .dropouts(Dropouts::new(0.004, 12.0))
            .build()?
            .generate(n, 10 * id as u64 + 1);
        let mut rows: Vec<(String, i64, Option<f64>)> = Vec::with_capacity(2 * n);
        for t in 0..n {
            let at = ORIGIN_MS + t as i64 * CADENCE_MS;
            rows.push((
                format!("KB-SS{id:04}-TR"),
                at,
                Some(52.0 + daily(t, 4.0) + tr[t]),
            ));
            let f = 18.0 + daily(t, 6.0) + fl[t];
            rows.push((format!("KB-SS{id:04}-FL"), at, (!f.is_nan()).then_some(f)));
        }
        // The historian exports in its own order, not by time.
        rows.reverse();
        batches.push(RecordBatch::try_new(
            schema.clone(),
            vec![
                Arc::new(StringArray::from_iter_values(
                    rows.iter().map(|r| r.0.as_str()),
                )),
                Arc::new(
                    TimestampMillisecondArray::from_iter_values(rows.iter().map(|r| r.1))
                        .with_timezone("UTC"),
                ),
                Arc::new(Float64Array::from_iter(rows.iter().map(|r| r.2))),
            ],
        )?);
    }
    Ok(batches)
}

#[tokio::main]
async fn main() -> Result<(), Box<dyn std::error::Error>> {
    let substations: usize = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(6);
    let dir =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../target/kestrel-bay/historian");
    std::fs::create_dir_all(&dir)?;
    for (i, batch) in tables(substations)?.iter().enumerate() {
        let file = std::fs::File::create(dir.join(format!("part-{i}.parquet")))?;
        let mut w = datafusion::parquet::arrow::ArrowWriter::try_new(file, batch.schema(), None)?;
        w.write(batch)?;
        w.close()?;
    }
    let ctx = SessionContext::new();
    lagwise_sql::register(&ctx);
    ctx.register_parquet(
        "readings",
        dir.to_str().unwrap_or("."),
        ParquetReadOptions::default(),
    )
    .await?;
    let daily_cycle = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .seasonal(0, 1, 1, 96)
        .build()?;
    let bp = lagwise::blueprint_to_json(&daily_cycle)?;
    // The same text serves any other engine session (scripts/cluster_check.sh reads it).
    println!("blueprint: {bp}");
    println!("Models, one row per tag ({substations} substations, 7 days of 15-minute readings):");
    let models = ctx
        .sql(&format!(
            "SELECT tag, fit['model'] AS model, round(sqrt(fit['sigma2']), 3) AS sd,
                    fit['white'] AS white, round(fit['whiteness_p'], 3) AS p,
                    fit['readings'] AS readings, fit['missing'] AS missing, fit['error'] AS error
             FROM (SELECT tag, lw_fit(ts, value, '{bp}', {CADENCE_MS}) AS fit
                   FROM readings GROUP BY tag)
             ORDER BY tag"
        ))
        .await?
        .collect()
        .await?;
    print_batches(&models)?;
    println!("\nDay-ahead forecasts, every 6 hours (80% and 95% bounds):");
    let ahead = ctx
        .sql(&format!(
            "SELECT tag, s.at AS at, round(s.mean, 2) AS mean,
                    round(s.lower[1], 2) AS low80, round(s.upper[1], 2) AS high80,
                    round(s.lower[2], 2) AS low95, round(s.upper[2], 2) AS high95
             FROM (SELECT tag, unnest(lw_ahead(ts, value, '{bp}', {CADENCE_MS}, 96, '[0.8, 0.95]')['steps']) AS s
                   FROM readings GROUP BY tag)
             WHERE s.step % 24 = 0
             ORDER BY tag, s.step"
        ))
        .await?
        .collect()
        .await?;
    print_batches(&ahead)?;
    println!(
        "\nlagwise informs operators; it does not replace protection systems, statutory alarms or site procedures."
    );
    Ok(())
}
