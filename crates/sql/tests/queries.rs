//! The SQL functions against the in-process library: every tag's fit and forecast from a
//! `GROUP BY` query (several partitions, so partial states are merged) equals, bitwise,
//! the same readings placed on the grid and fitted by lagwise directly; Parquet input
//! (strings as `Utf8View`); errors for bad settings, and per-group error texts.

use std::sync::Arc;

use datafusion::arrow::array::{
    Array, AsArray, Float64Array, RecordBatch, StringArray, StructArray, TimestampMillisecondArray,
};
use datafusion::arrow::datatypes::{DataType, Field, Float64Type, Int64Type, Schema, TimeUnit};
use datafusion::datasource::MemTable;
use datafusion::prelude::{ParquetReadOptions, SessionConfig, SessionContext};
use lagwise::{Blueprint, GridSettings, Simulator};

const CADENCE: i64 = 900_000;
const ORIGIN: i64 = 1_795_996_800_000; // 2026-11-30 00:00 UTC

/// One tag's readings as the library sees them: name, epoch ms, values (NaN = missing).
type TagSeries = (String, Vec<i64>, Vec<f64>);

/// `tags` tags of `n` readings each, rows shuffled (out of time order), a few missing.
fn readings(tags: usize, n: usize) -> (RecordBatch, Vec<TagSeries>) {
    let sim = Simulator::builder()
        .autoregressive(&[0.7])
        .level(52.0)
        .innovation_sd(0.3)
        .build()
        .unwrap();
    let mut rows: Vec<(String, i64, Option<f64>)> = Vec::new();
    let mut truth = Vec::new();
    for k in 0..tags {
        let tag = format!("KB-SS{:04}-TR", 400 + k);
        let x = sim.generate(n, 70 + k as u64);
        let times: Vec<i64> = (0..n as i64).map(|i| ORIGIN + i * CADENCE).collect();
        let values: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, v)| if (i + k) % 97 == 0 { f64::NAN } else { *v })
            .collect();
        for i in 0..n {
            rows.push((
                tag.clone(),
                times[i],
                (!values[i].is_nan()).then_some(values[i]),
            ));
        }
        truth.push((tag, times, values));
    }
    // A fixed shuffle: rows arrive out of order across tags and times.
    let len = rows.len();
    for i in 0..len {
        rows.swap(i, (i * 7_919 + 13) % len);
    }
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, false),
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
            false,
        ),
        Field::new("value", DataType::Float64, true),
    ]));
    let batch = RecordBatch::try_new(
        schema,
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
    )
    .unwrap();
    (batch, truth)
}

fn context(partitions: usize) -> SessionContext {
    let ctx = SessionContext::new_with_config(
        SessionConfig::new()
            .with_target_partitions(partitions)
            .with_batch_size(512),
    );
    lagwise_sql::register(&ctx);
    ctx
}

/// `batch` as a memory table of two partitions (its two halves).
fn two_partitions(batch: &RecordBatch) -> Arc<MemTable> {
    let half = batch.num_rows() / 2;
    let parts = vec![
        vec![batch.slice(0, half)],
        vec![batch.slice(half, batch.num_rows() - half)],
    ];
    Arc::new(MemTable::try_new(batch.schema(), parts).unwrap())
}

fn blueprint() -> (Blueprint, String) {
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let json = lagwise::blueprint_to_json(&bp).unwrap();
    (bp, json)
}

async fn rows_of(ctx: &SessionContext, sql: &str) -> Vec<RecordBatch> {
    ctx.sql(sql).await.unwrap().collect().await.unwrap()
}

fn own_fit(bp: &Blueprint, times: &[i64], values: &[f64]) -> lagwise::FittedModel {
    let grid = lagwise::place_on_grid(
        times,
        values,
        &GridSettings::builder(CADENCE).build().unwrap(),
    )
    .unwrap();
    bp.fit(&grid.values).unwrap().with_time_axis(grid.axis)
}

#[tokio::test]
async fn fits_equal_the_library_bitwise() {
    let (batch, truth) = readings(24, 600);
    let ctx = context(4);
    // Two batches in separate partitions of a memory table: the aggregate runs in
    // partial and final stages and merges states.
    ctx.register_table("readings", two_partitions(&batch))
        .unwrap();
    let (bp, json) = blueprint();
    let sql = format!(
        "SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) AS fit FROM readings GROUP BY tag ORDER BY tag"
    );
    // The plan aggregates in two stages (partial states merged after repartitioning by
    // tag) and sorts only the output rows, never the readings.
    let plan = rows_of(&ctx, &format!("EXPLAIN {sql}")).await;
    let plan = datafusion::arrow::util::pretty::pretty_format_batches(&plan)
        .unwrap()
        .to_string();
    assert!(plan.contains("mode=Partial"), "{plan}");
    assert!(plan.contains("mode=FinalPartitioned"), "{plan}");
    let sorts = plan.matches("SortExec").count() + plan.matches("SortPreservingMergeExec").count();
    assert!(sorts <= 2, "{plan}");
    assert!(!plan.contains("SortExec: expr=[ts"), "{plan}");
    let out = rows_of(&ctx, &sql).await;
    let mut seen = 0;
    for b in &out {
        let tags = b.column(0).as_string::<i32>();
        let fit = b.column(1).as_struct();
        for r in 0..b.num_rows() {
            let (tag, times, values) = truth.iter().find(|t| t.0 == tags.value(r)).unwrap();
            let own = own_fit(&bp, times, values);
            let field = |name: &str| fit.column_by_name(name).unwrap().clone();
            assert!(field("error").is_null(r), "{tag}");
            let coefs = field("coefficients");
            let coefs = coefs.as_list::<i32>().value(r);
            let coefs: &StructArray = coefs.as_struct();
            let vals = coefs
                .column_by_name("value")
                .unwrap()
                .as_primitive::<Float64Type>();
            assert_eq!(vals.len(), own.coefficients().len());
            for (i, c) in own.coefficients().iter().enumerate() {
                assert_eq!(
                    vals.value(i).to_bits(),
                    c.value.to_bits(),
                    "{tag} {}",
                    c.term
                );
            }
            let sigma2 = field("sigma2");
            assert_eq!(
                sigma2.as_primitive::<Float64Type>().value(r).to_bits(),
                own.innovation_variance().to_bits()
            );
            let readings = field("readings");
            assert_eq!(
                readings.as_primitive::<Int64Type>().value(r) as usize,
                values.iter().filter(|v| !v.is_nan()).count()
            );
            // The stored model restores and forecasts like the library's own.
            let stored = field("stored");
            let back = lagwise::model_from_json(stored.as_string::<i32>().value(r)).unwrap();
            assert_eq!(
                back.forecast(3, &[0.9]).unwrap(),
                own.forecast(3, &[0.9]).unwrap()
            );
            seen += 1;
        }
    }
    assert_eq!(seen, 24);
}

#[tokio::test]
async fn forecasts_from_parquet_equal_the_library() {
    let (batch, truth) = readings(6, 400);
    let dir = std::env::temp_dir().join(format!("lagwise-sql-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let file = dir.join("part-0.parquet");
    let mut writer = datafusion::parquet::arrow::ArrowWriter::try_new(
        std::fs::File::create(&file).unwrap(),
        batch.schema(),
        None,
    )
    .unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
    let ctx = context(3);
    ctx.register_parquet(
        "readings",
        dir.to_str().unwrap(),
        ParquetReadOptions::default(),
    )
    .await
    .unwrap();
    let (bp, json) = blueprint();
    let out = rows_of(
        &ctx,
        &format!(
            "SELECT tag, s.step, s.at, s.mean, s.lower[2] AS low95 FROM (
               SELECT tag, unnest(lw_ahead(ts, value, '{json}', {CADENCE}, 96, '[0.8, 0.95]')['steps']) AS s
               FROM readings GROUP BY tag) ORDER BY tag, s.step"
        ),
    )
    .await;
    let total: usize = out.iter().map(|b| b.num_rows()).sum();
    assert_eq!(total, 6 * 96);
    for b in &out {
        let tags = b.column(0).as_string_view_or_utf8();
        for r in 0..b.num_rows() {
            let tag = tags(r);
            let (_, times, values) = truth.iter().find(|t| t.0 == tag).unwrap();
            let own = own_fit(&bp, times, values)
                .forecast(96, &[0.8, 0.95])
                .unwrap();
            let step = b.column(1).as_primitive::<Int64Type>().value(r) as usize;
            let s = &own.steps[step - 1];
            assert_eq!(
                b.column(3).as_primitive::<Float64Type>().value(r).to_bits(),
                s.mean.to_bits()
            );
            assert_eq!(
                b.column(4).as_primitive::<Float64Type>().value(r).to_bits(),
                s.intervals[1].lower.to_bits()
            );
            let at = b
                .column(2)
                .as_primitive::<datafusion::arrow::datatypes::TimestampMillisecondType>();
            assert_eq!(Some(at.value(r)), s.time_ms);
        }
    }
    std::fs::remove_dir_all(&dir).ok();
}

trait TagText {
    fn as_string_view_or_utf8(&self) -> Box<dyn Fn(usize) -> String + '_>;
}

impl TagText for Arc<dyn Array> {
    fn as_string_view_or_utf8(&self) -> Box<dyn Fn(usize) -> String + '_> {
        match self.data_type() {
            DataType::Utf8View => {
                let a = self.as_string_view();
                Box::new(move |i| a.value(i).to_string())
            }
            DataType::LargeUtf8 => {
                let a = self.as_string::<i64>();
                Box::new(move |i| a.value(i).to_string())
            }
            _ => {
                let a = self.as_string::<i32>();
                Box::new(move |i| a.value(i).to_string())
            }
        }
    }
}

#[tokio::test]
async fn bad_settings_fail_the_query_and_bad_groups_their_row() {
    let (batch, _) = readings(3, 200);
    let ctx = context(2);
    ctx.register_batch("readings", batch).unwrap();
    let (_, json) = blueprint();
    let fails = |sql: String| {
        let ctx = ctx.clone();
        async move {
            match ctx.sql(&sql).await {
                Err(e) => e.to_string(),
                Ok(df) => match df.collect().await {
                    Err(e) => e.to_string(),
                    Ok(_) => panic!("query succeeded: {sql}"),
                },
            }
        }
    };
    let e = fails(format!(
        "SELECT tag, lw_fit(ts, value, '{{\"not\": 1}}', {CADENCE}) FROM readings GROUP BY tag"
    ))
    .await;
    assert!(e.contains("blueprint"), "{e}");
    let e = fails(format!(
        "SELECT tag, lw_fit(ts, value, '{json}', 0) FROM readings GROUP BY tag"
    ))
    .await;
    assert!(e.contains("cadence"), "{e}");
    let e = fails(format!(
        "SELECT tag, lw_ahead(ts, value, '{json}', {CADENCE}, 4, '[1.5]') FROM readings GROUP BY tag"
    ))
    .await;
    assert!(e.contains("levels"), "{e}");
    let e = fails(format!(
        "SELECT tag, lw_fit(ts, value, tag, {CADENCE}) FROM readings GROUP BY tag"
    ))
    .await;
    assert!(e.contains("constant"), "{e}");
    let e = fails(format!(
        "SELECT tag, lw_fit(tag, value, '{json}', {CADENCE}) FROM readings GROUP BY tag"
    ))
    .await;
    assert!(e.contains("time column"), "{e}");
    // A group whose readings are all missing: its own row says why; the others fit.
    let out = rows_of(
        &ctx,
        &format!(
            "SELECT tag, lw_fit(ts, CASE WHEN tag = 'KB-SS0401-TR' THEN NULL ELSE value END, '{json}', {CADENCE})['error'] AS error
             FROM readings GROUP BY tag ORDER BY tag"
        ),
    )
    .await;
    let errors: Vec<Option<String>> = out
        .iter()
        .flat_map(|b| {
            let e = b.column(1).as_string::<i32>();
            (0..b.num_rows())
                .map(|i| (!e.is_null(i)).then(|| e.value(i).to_string()))
                .collect::<Vec<_>>()
        })
        .collect();
    assert_eq!(errors.len(), 3);
    assert!(errors[0].is_none() && errors[2].is_none());
    assert!(
        errors[1].as_deref().is_some_and(|e| e.contains("missing")),
        "{errors:?}"
    );
}

#[tokio::test]
async fn order_search_and_residual_check_run_per_tag() {
    let (batch, _) = readings(2, 500);
    let ctx = context(2);
    ctx.register_batch("readings", batch).unwrap();
    let (_, json) = blueprint();
    let out = rows_of(
        &ctx,
        &format!(
            "SELECT tag, lw_choose(ts, value, {CADENCE}, 1)['model'] AS chosen,
                    lw_check(ts, value, '{json}', {CADENCE})['white'] AS white
             FROM readings GROUP BY tag ORDER BY tag"
        ),
    )
    .await;
    let b = &out[0];
    assert_eq!(b.num_rows(), 2);
    let chosen = b.column(1).as_string::<i32>();
    assert!(chosen.value(0).starts_with("ARMA"), "{}", chosen.value(0));
    assert!(!b.column(2).is_null(0));
    // The by-tag search chooses the same model for each tag, with the same explanation.
    let per_tag = rows_of(
        &ctx,
        &format!(
            "SELECT tag, c['model'] AS model, c['note'] AS note, c['sigma2'] AS sigma2 FROM (
               SELECT tag, lw_choose(ts, value, {CADENCE}, 1) AS c FROM readings GROUP BY tag)
             ORDER BY tag"
        ),
    )
    .await;
    let by_tag = rows_of(
        &ctx,
        &format!(
            "SELECT c['tag'] AS tag, c['model'] AS model, c['note'] AS note, c['sigma2'] AS sigma2
             FROM (SELECT unnest(lw_choose_by_tag(tag, ts, value, {CADENCE}, 1)) AS c FROM readings)"
        ),
    )
    .await;
    let text = |batches: &[RecordBatch]| {
        datafusion::arrow::util::pretty::pretty_format_batches(batches)
            .unwrap()
            .to_string()
    };
    assert_eq!(text(&by_tag), text(&per_tag));
    assert!(text(&by_tag).contains("KB-SS0401-TR"), "{}", text(&by_tag));
}

/// `lw_watch` over new readings joined with the stored models from `lw_fit`: every
/// check equals the library's monitor on the same readings (a dropped row is a missing
/// reading; a spike breaks its interval).
#[tokio::test]
async fn watching_new_readings_equals_the_library_monitor() {
    let (batch, truth) = readings(4, 700);
    let ctx = context(3);
    ctx.register_batch("everything", batch).unwrap();
    let (bp, json) = blueprint();
    let split = ORIGIN + 600 * CADENCE;
    rows_of(
        &ctx,
        &format!(
            "CREATE TABLE models AS SELECT tag, lw_fit(ts, value, '{json}', {CADENCE})['stored'] AS stored
             FROM everything WHERE ts < to_timestamp_millis({split}) GROUP BY tag"
        ),
    )
    .await;
    // New readings: one row dropped (slot 650 of the first tag), one spike.
    rows_of(
        &ctx,
        &format!(
            "CREATE TABLE news AS SELECT tag, ts,
                    CASE WHEN tag = 'KB-SS0401-TR' AND ts = to_timestamp_millis({spike}) THEN value + 5 ELSE value END AS value
             FROM everything
             WHERE ts >= to_timestamp_millis({split})
               AND NOT (tag = 'KB-SS0400-TR' AND ts = to_timestamp_millis({gap}))",
            spike = ORIGIN + 620 * CADENCE,
            gap = ORIGIN + 650 * CADENCE
        ),
    )
    .await;
    let out = rows_of(
        &ctx,
        "SELECT n.tag, n.ts, lw_watch(n.ts, n.value, m.stored, 0.999)
                OVER (PARTITION BY n.tag ORDER BY n.ts) AS w
         FROM news n JOIN models m ON n.tag = m.tag ORDER BY n.tag, n.ts",
    )
    .await;
    let mut checked = 0;
    let mut outside = 0;
    for (tag, times, values) in &truth {
        let own = own_fit(&bp, &times[..600], &values[..600]);
        let mut monitor = own.monitor(0.999).unwrap();
        let mut expected = Vec::new();
        for i in 600..700 {
            let mut v = values[i];
            if tag == "KB-SS0401-TR" && i == 620 {
                v += 5.0;
            }
            if tag == "KB-SS0400-TR" && i == 650 {
                monitor.observe(f64::NAN).unwrap();
                continue;
            }
            expected.push(monitor.observe(v).unwrap());
        }
        let mut got = Vec::new();
        for b in &out {
            let tags = b.column(0).as_string::<i32>();
            let w = b.column(2).as_struct();
            let predicted = w
                .column_by_name("predicted")
                .unwrap()
                .as_primitive::<Float64Type>()
                .clone();
            let flags = w.column_by_name("outside").unwrap().as_boolean().clone();
            for r in 0..b.num_rows() {
                if tags.value(r) == tag {
                    got.push((predicted.value(r), flags.value(r)));
                }
            }
        }
        assert_eq!(got.len(), expected.len(), "{tag}");
        for (g, e) in got.iter().zip(&expected) {
            assert_eq!(g.0.to_bits(), e.predicted.to_bits(), "{tag}");
            assert_eq!(g.1, e.outside, "{tag}");
            checked += 1;
            outside += usize::from(g.1);
        }
    }
    assert_eq!(checked, 4 * 100 - 1);
    assert!(outside >= 1, "the spike broke no interval");
}

/// `lw_choose` with long cycles: a weekly shape by harmonics beside AR noise (three weeks
/// of quarter-hour readings), the search's choice equal to the library's on the same
/// grid; a malformed `cycles` argument fails the query and names the argument.
#[tokio::test]
async fn order_search_with_weekly_cycles() {
    let n = 3 * 672;
    let sim = Simulator::builder()
        .autoregressive(&[0.7])
        .level(52.0)
        .innovation_sd(0.3)
        .wave(96, 1, 3.0, -1.0)
        .wave(672, 1, 1.0, 0.5)
        .build()
        .unwrap();
    let x = sim.generate(n, 5);
    let times: Vec<i64> = (0..n as i64).map(|i| ORIGIN + i * CADENCE).collect();
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, false),
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
            false,
        ),
        Field::new("value", DataType::Float64, true),
    ]));
    let batch = RecordBatch::try_new(
        schema,
        vec![
            Arc::new(StringArray::from_iter_values(std::iter::repeat_n(
                "KB-SS0417-TR",
                n,
            ))),
            Arc::new(
                TimestampMillisecondArray::from_iter_values(times.iter().copied())
                    .with_timezone("UTC"),
            ),
            Arc::new(Float64Array::from(x.clone())),
        ],
    )
    .unwrap();
    let ctx = context(2);
    ctx.register_batch("readings", batch).unwrap();
    let out = rows_of(
        &ctx,
        &format!(
            "SELECT tag, lw_choose(ts, value, {CADENCE}, 1, '96:4, 672:3') AS m
             FROM readings GROUP BY tag"
        ),
    )
    .await;
    let row = out[0].column(1).as_struct();
    let model = row.column(0).as_string::<i32>().value(0).to_string();
    let sigma2 = row.column(2).as_primitive::<Float64Type>().value(0);
    let settings = lagwise::SearchSettings::builder()
        .cycle(96, 4)
        .cycle(672, 3)
        .build()
        .unwrap();
    let own = lagwise::search_orders(&x, &settings).unwrap();
    assert_eq!(model, own.model.blueprint().shape_label());
    assert!(model.contains("harmonics 96:1, 672:1"), "{model}");
    assert_eq!(sigma2, own.model.innovation_variance());
    for bad in ["'672'", "'672:x'", "'672:400'"] {
        let sql = format!(
            "SELECT tag, lw_choose(ts, value, {CADENCE}, 1, {bad}) FROM readings GROUP BY tag"
        );
        let e = match ctx.sql(&sql).await {
            Err(e) => e.to_string(),
            Ok(df) => df.collect().await.err().map(|e| e.to_string()).unwrap(),
        };
        assert!(
            e.contains("lw_choose") && (e.contains("cycles") || e.contains("harmonics")),
            "{e}"
        );
    }
}

/// The by-tag functions, grouped by a coarse key (two groups, in two stages with merged
/// states), by the tag itself, without `GROUP BY` (the whole table one group) and over
/// tags as `Utf8`, `LargeUtf8` and `Utf8View`: every tag's row equals the per-tag
/// function's row for that tag, bit for bit, and each list is in tag order.
#[tokio::test]
async fn by_tag_functions_equal_the_per_tag_ones() {
    let (batch, _) = readings(24, 500);
    let ctx = context(4);
    ctx.register_table("readings", two_partitions(&batch))
        .unwrap();
    let (_, json) = blueprint();
    let per_tag = rows_of(
        &ctx,
        &format!(
            "SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) AS r,
                    lw_ahead(ts, value, '{json}', {CADENCE}, 8, '[0.9]') AS a,
                    lw_check(ts, value, '{json}', {CADENCE}) AS c
             FROM readings GROUP BY tag ORDER BY tag"
        ),
    )
    .await;
    let per_tag =
        datafusion::arrow::compute::concat_batches(&per_tag[0].schema(), &per_tag).unwrap();
    assert_eq!(per_tag.num_rows(), 24);
    // Rows of a struct column as text (floats printed to the last bit by the formatter's
    // shortest round-trip form), the tag field left out.
    let rendered = |rows: &StructArray, r: usize| -> String {
        let fields: Vec<String> = rows
            .fields()
            .iter()
            .zip(rows.columns())
            .filter(|(f, _)| f.name() != "tag")
            .map(|(f, c)| {
                let v = datafusion::common::ScalarValue::try_from_array(c, r).unwrap();
                format!("{}={v:?}", f.name())
            })
            .collect();
        fields.join("; ")
    };
    let tags = per_tag.column(0).as_string::<i32>();
    let fits = per_tag.column(1).as_struct();
    let aheads = per_tag.column(2).as_struct();
    let own_fit: Vec<String> = (0..24).map(|r| rendered(fits, r)).collect();
    let own_ahead: Vec<String> = (0..24).map(|r| rendered(aheads, r)).collect();
    let checks = per_tag.column(3).as_struct();
    let own_check: Vec<String> = (0..24).map(|r| rendered(checks, r)).collect();
    assert!(own_fit.iter().all(|t| t.contains("sigma2=Float64(")));

    for tag_type in ["Utf8", "LargeUtf8", "Utf8View"] {
        for grouping in ["GROUP BY tag < 'KB-SS0410-TR'", "GROUP BY tag", ""] {
            let sql = format!(
                "SELECT lw_fit_by_tag(arrow_cast(tag, '{tag_type}'), ts, value, '{json}', {CADENCE}) AS f,
                        lw_ahead_by_tag(arrow_cast(tag, '{tag_type}'), ts, value, '{json}', {CADENCE}, 8, '[0.9]') AS a,
                        lw_check_by_tag(arrow_cast(tag, '{tag_type}'), ts, value, '{json}', {CADENCE}) AS c
                 FROM readings {grouping}"
            );
            let out = rows_of(&ctx, &sql).await;
            let mut seen = 0;
            for b in &out {
                for (col, own) in [(0, &own_fit), (1, &own_ahead), (2, &own_check)] {
                    let lists = b.column(col).as_list::<i32>();
                    for g in 0..b.num_rows() {
                        let rows = lists.value(g);
                        let rows = rows.as_struct();
                        let names = rows.column_by_name("tag").unwrap().as_string::<i32>();
                        for r in 0..rows.len() {
                            assert!(r == 0 || names.value(r - 1) < names.value(r), "tag order");
                            let k = (0..24).find(|&k| tags.value(k) == names.value(r)).unwrap();
                            assert_eq!(rendered(rows, r), own[k], "{tag_type} {grouping}");
                            seen += 1;
                        }
                    }
                }
            }
            assert_eq!(seen, 3 * 24, "{tag_type} {grouping}");
        }
    }
    // A tag column that is not text is refused with a message that names it.
    let e = ctx
        .sql(&format!(
            "SELECT lw_fit_by_tag(value, ts, value, '{json}', {CADENCE}) FROM readings"
        ))
        .await
        .map(|_| ())
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("lw_fit_by_tag: the tag column must be text"),
        "{e}"
    );
}
