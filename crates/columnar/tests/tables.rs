//! Long tables in, result tables out, through Parquet: a historian-like export of three
//! invented Kestrel Bay tags — out of order, a duplicated reading, jitter, an outage, null
//! values — placed on a 15-minute grid, fitted as a fleet, forecast and watched, every
//! table written to Parquet and read back equal.

use std::sync::Arc;

use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, TimestampMillisecondType};
use arrow_array::{
    Array, ArrayRef, Float64Array, Int64Array, LargeStringArray, RecordBatch, StringArray,
    StringViewArray, TimestampMicrosecondArray,
};
use arrow_schema::{DataType, Field, Schema, TimeUnit};
use lagwise::{Blueprint, Fleet, GridSettings, Simulator};
use lagwise_columnar::{
    FleetTables, TableError, TableLayout, read_parquet, tags_from_batches, write_parquet,
};

const Q: i64 = 900_000;
const T0: i64 = 1_795_564_800_000; // 2026-11-25 00:00 UTC

/// Rows (tag, epoch ms, value) of three tags, 600 slots each, made messy.
fn rows() -> Vec<(String, i64, Option<f64>)> {
    let mut out = Vec::new();
    for (k, tag) in ["KB-SS0417-TS", "KB-SS0418-TS", "KB-SS1203-TS"]
        .iter()
        .enumerate()
    {
        let x = Simulator::builder()
            .autoregressive(&[0.8])
            .level(88.0)
            .innovation_sd(0.2)
            .build()
            .unwrap()
            .generate(600, 40 + k as u64);
        for (i, v) in x.iter().enumerate() {
            if (300..312).contains(&i) && k == 1 {
                continue; // a three-hour outage
            }
            let jitter = if i % 7 == 0 { 20_000 } else { 0 };
            let value = if i == 50 && k == 2 { None } else { Some(*v) };
            out.push((tag.to_string(), T0 + i as i64 * Q + jitter, value));
        }
    }
    // A duplicated reading and the rows out of order.
    out.push(("KB-SS0417-TS".into(), T0 + 10 * Q + 5_000, Some(90.0)));
    out.reverse();
    out
}

fn batch_with_tags(tags: ArrayRef, rows: &[(String, i64, Option<f64>)]) -> RecordBatch {
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", tags.data_type().clone(), false),
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Microsecond, Some("UTC".into())),
            false,
        ),
        Field::new("value", DataType::Float64, true),
    ]));
    RecordBatch::try_new(
        schema,
        vec![
            tags,
            Arc::new(
                TimestampMicrosecondArray::from(
                    rows.iter().map(|r| r.1 * 1000).collect::<Vec<_>>(),
                )
                .with_timezone("UTC"),
            ),
            Arc::new(Float64Array::from(
                rows.iter().map(|r| r.2).collect::<Vec<_>>(),
            )),
        ],
    )
    .unwrap()
}

fn batch() -> RecordBatch {
    let r = rows();
    let tags: Vec<&str> = r.iter().map(|x| x.0.as_str()).collect();
    batch_with_tags(Arc::new(StringArray::from(tags)), &r)
}

fn grid() -> GridSettings {
    GridSettings::builder(Q)
        .tolerance_ms(60_000)
        .build()
        .unwrap()
}

fn layout() -> TableLayout {
    TableLayout::new("tag", "ts", "value")
}

fn tmp(name: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("lagwise-columnar-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

#[test]
fn a_messy_export_lands_on_the_grid() {
    let series = tags_from_batches(&[batch()], &layout(), &grid()).unwrap();
    assert_eq!(series.len(), 3);
    assert_eq!(series[0].tag, "KB-SS0417-TS");
    let a = &series[0].series;
    assert_eq!(a.axis.origin_ms(), T0);
    assert_eq!(a.values.len(), 600);
    assert_eq!(a.report.merged, 1, "the duplicated reading");
    assert!(a.report.out_of_order > 0);
    let b = &series[1].series;
    assert_eq!(
        b.values[300..312].iter().filter(|v| v.is_nan()).count(),
        12,
        "the outage"
    );
    assert!(
        series[2].series.values[50].is_nan(),
        "a null value is a missing reading"
    );
}

#[test]
fn string_views_and_large_strings_read_alike() {
    let r = rows();
    let plain = tags_from_batches(&[batch()], &layout(), &grid()).unwrap();
    let view = batch_with_tags(
        Arc::new(StringViewArray::from(
            r.iter().map(|x| x.0.as_str()).collect::<Vec<_>>(),
        )),
        &r,
    );
    let large = batch_with_tags(
        Arc::new(LargeStringArray::from(
            r.iter().map(|x| x.0.as_str()).collect::<Vec<_>>(),
        )),
        &r,
    );
    for b in [view, large] {
        let other = tags_from_batches(&[b], &layout(), &grid()).unwrap();
        assert_eq!(other.len(), plain.len());
        for (x, y) in other.iter().zip(&plain) {
            assert_eq!(x.tag, y.tag);
            assert_eq!(x.series.report, y.series.report);
        }
    }
}

#[test]
fn fleet_results_round_trip_through_parquet() {
    // The export itself through Parquet first.
    let path = tmp("export.parquet");
    write_parquet(&path, &[batch()]).unwrap();
    let back = read_parquet(&path).unwrap();
    let series = tags_from_batches(&back, &layout(), &grid()).unwrap();
    let history: Vec<_> = series
        .iter()
        .map(|s| {
            let mut h = s.clone();
            h.series.values.truncate(560);
            h
        })
        .collect();
    let tonight: Vec<_> = series
        .iter()
        .map(|s| {
            let mut t = s.clone();
            t.series.axis = lagwise::TimeAxis::new(s.series.axis.origin_ms() + 560 * Q, Q).unwrap();
            t.series.values = s.series.values[560..].to_vec();
            if t.tag == "KB-SS0418-TS" {
                t.series.values[5] += 5.0; // a reading that breaks its interval
            }
            t
        })
        .collect();
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let mut tables = FleetTables::fit(&history, &bp, &Fleet::builder().threads(2).build().unwrap());

    let models = tables.models().unwrap();
    assert_eq!(models.num_rows(), 3);
    let sigma2 = models
        .column_by_name("sigma2")
        .unwrap()
        .as_primitive::<Float64Type>();
    let white = models.column_by_name("white").unwrap().as_boolean();
    for r in 0..3 {
        assert!(
            (sigma2.value(r) - 0.04).abs() < 0.01,
            "σ² near 0.2²: {}",
            sigma2.value(r)
        );
        assert!(white.value(r));
    }
    let terms = models.column_by_name("terms").unwrap().as_list::<i32>();
    let t0 = terms.value(0);
    let names = t0.as_string::<i32>();
    assert_eq!((names.value(0), names.value(1)), ("phi.1", "mean"));
    let est = models
        .column_by_name("estimates")
        .unwrap()
        .as_list::<i32>()
        .value(0);
    let phi = est.as_primitive::<Float64Type>().value(0);
    assert!((phi - 0.8).abs() < 0.1, "φ = {phi}");
    assert!(models.column_by_name("error").unwrap().is_null(0));

    let fc = tables.forecasts(8, &[0.8, 0.95]).unwrap();
    assert_eq!(fc.num_rows(), 24);
    let time = fc
        .column_by_name("time")
        .unwrap()
        .as_primitive::<TimestampMillisecondType>();
    assert_eq!(
        time.value(0),
        T0 + 560 * Q,
        "the first step is the slot after the history"
    );
    let (lo, hi) = (
        fc.column_by_name("lower_95")
            .unwrap()
            .as_primitive::<Float64Type>(),
        fc.column_by_name("upper_80")
            .unwrap()
            .as_primitive::<Float64Type>(),
    );
    assert!(lo.value(3) < hi.value(3));

    let watch = tables.watch(&tonight).unwrap();
    assert_eq!(watch.num_rows(), 3 * 40);
    let alarm = watch.column_by_name("alarm").unwrap().as_boolean();
    let tag = watch.column_by_name("tag").unwrap().as_string::<i32>();
    let alarms: Vec<(String, i64)> = (0..watch.num_rows())
        .filter(|&r| alarm.value(r))
        .map(|r| {
            let t = watch
                .column_by_name("time")
                .unwrap()
                .as_primitive::<TimestampMillisecondType>();
            (tag.value(r).to_string(), t.value(r))
        })
        .collect();
    assert!(
        alarms.contains(&("KB-SS0418-TS".into(), T0 + 565 * Q)),
        "{alarms:?}"
    );
    // The monitors moved on: a second watch continues after the first.
    assert_eq!(tables.watch(&tonight).unwrap().num_rows(), 0);

    for (name, table) in [("models", models), ("forecasts", fc), ("watch", watch)] {
        let p = tmp(&format!("{name}.parquet"));
        write_parquet(&p, std::slice::from_ref(&table)).unwrap();
        let back = read_parquet(&p).unwrap();
        assert_eq!(back.len(), 1);
        assert_eq!(back[0], table, "{name} round trip");
    }
}

#[test]
fn a_failed_tag_keeps_its_error_text() {
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, false),
        Field::new("ts", DataType::Int64, false),
        Field::new("value", DataType::Float64, true),
    ]));
    let b = RecordBatch::try_new(
        schema,
        vec![
            Arc::new(StringArray::from(vec!["short"; 3])),
            Arc::new(Int64Array::from(vec![T0, T0 + Q, T0 + 2 * Q])),
            Arc::new(Float64Array::from(vec![1.0, 2.0, 3.0])),
        ],
    )
    .unwrap();
    let series = tags_from_batches(&[b], &layout(), &grid()).unwrap();
    let bp = Blueprint::builder().nonseasonal(2, 0, 2).build().unwrap();
    let tables = FleetTables::fit(&series, &bp, &Fleet::builder().build().unwrap());
    let m = tables.models().unwrap();
    let err = m.column_by_name("error").unwrap().as_string::<i32>();
    assert!(!err.is_null(0) && !err.value(0).is_empty());
    assert!(m.column_by_name("model").unwrap().is_null(0));
    assert_eq!(tables.forecasts(4, &[0.9]).unwrap().num_rows(), 0);
}

#[test]
fn bad_tables_are_typed_errors() {
    let b = batch();
    assert!(matches!(
        tags_from_batches(std::slice::from_ref(&b), &TableLayout::new("tag", "time", "value"), &grid()),
        Err(TableError::MissingColumn(c)) if c == "time"
    ));
    assert!(matches!(
        tags_from_batches(&[b], &TableLayout::new("value", "ts", "value"), &grid()),
        Err(TableError::ColumnType { .. })
    ));
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, true),
        Field::new("ts", DataType::Int64, false),
        Field::new("value", DataType::Float64, true),
    ]));
    let nulls = RecordBatch::try_new(
        schema,
        vec![
            Arc::new(StringArray::from(vec![Some("a"), None])),
            Arc::new(Int64Array::from(vec![T0, T0 + Q])),
            Arc::new(Float64Array::from(vec![1.0, 2.0])),
        ],
    )
    .unwrap();
    assert!(matches!(
        tags_from_batches(&[nulls], &layout(), &grid()),
        Err(TableError::NullKey {
            row: 1,
            what: "tag",
            ..
        })
    ));
    assert!(matches!(
        read_parquet(tmp("absent.parquet")),
        Err(TableError::File { .. })
    ));
}
