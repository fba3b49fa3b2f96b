//! What the engines cost on top of lagwise: the same series fitted (AR(1) + mean, exact
//! likelihood) three ways in one run —
//! 1. `Fleet::fit_slices` on the series already in memory (the reference),
//! 2. DataFusion in this process: `SELECT tag, lw_fit(ts, value, …) FROM readings GROUP
//!    BY tag` over a Parquet directory of the same readings (tag, timestamp, value; rows
//!    in time order per file, each tag in one of 16 files), then the same files laid out
//!    one per `bucket=NN/` directory and grouped by (bucket, tag) with the engine keeping
//!    file partitions (`datafusion.optimizer.preserve_file_partitions`), and by bucket
//!    alone with the by-tag function `lw_fit_by_tag`,
//! 3. the same query on a Ballista cluster: a scheduler and two executors started here
//!    from `lagwise-node` (next to this example's binary) as separate processes on
//!    127.0.0.1, stopped at the end; their peak resident memory is read from /proc.
//!
//! ```text
//! cargo build --profile engine --workspace --bins --examples
//! target/engine/examples/engine_bench [series] [readings] [threads]   (default 100000 1000 2)
//! ```
//!
//! The `engine` profile (root Cargo.toml) compiles the engine's dependencies at
//! opt-level 1 (a full release build of DataFusion and Ballista takes more than 25
//! minutes on 2 cores) and lagwise with its numeric dependencies at opt-level 3. Writes
//! the Parquet files under `target/engine-bench/`. Invented data from lagwise's simulator.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::time::{Duration, Instant};

use datafusion::arrow::array::{Float64Array, RecordBatch, StringArray, TimestampMillisecondArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema, TimeUnit};
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::prelude::{ParquetReadOptions, SessionConfig, SessionContext};
use lagwise::{Blueprint, Fleet, Simulator};

type Failure = Box<dyn std::error::Error>;

const CADENCE_MS: i64 = 900_000;
/// 2026-11-25 00:00 UTC.
const ORIGIN_MS: i64 = 1_795_564_800_000;
const FILES: usize = 16;

fn main() -> Result<(), Failure> {
    let args: Vec<usize> = std::env::args()
        .skip(1)
        .map(|a| a.parse())
        .collect::<Result<_, _>>()?;
    let series = args.first().copied().unwrap_or(100_000);
    let readings = args.get(1).copied().unwrap_or(1_000);
    let threads = args.get(2).copied().unwrap_or(2);
    // `ENGINE_BENCH_ONLY=bucket,cluster` runs the fleet and the stages named (rows, flat,
    // bucket, tags, cluster); by default all of them. `ENGINE_BENCH_PLAN` prints the bucket
    // query's plan.
    let only = std::env::var("ENGINE_BENCH_ONLY").ok();
    let wanted = |stage: &str| {
        only.as_deref()
            .is_none_or(|o| o.split(',').any(|s| s.trim() == stage))
    };
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../target/engine-bench");
    println!(
        "{series} series × {readings} readings, AR(1) + mean by exact likelihood, {threads} threads"
    );

    // The readings: Kestrel Bay's differential pressures, one simulator per tag.
    let started = Instant::now();
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .level(4.2)
        .innovation_sd(0.05)
        .build()?;
    let data: Vec<Vec<f64>> = (0..series)
        .map(|k| sim.generate(readings, 5_000 + k as u64))
        .collect();
    let tags: Vec<String> = (0..series).map(|k| format!("KB-SS{k:06}-DP")).collect();
    write_parquet(&dir, &tags, &data, false)?;
    let by_bucket = dir.with_file_name("engine-bench-by-bucket");
    write_parquet(&by_bucket, &tags, &data, true)?;
    println!(
        "readings simulated and written twice as {FILES} Parquet files in {:.1} s",
        started.elapsed().as_secs_f64()
    );
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build()?;
    let json = lagwise::blueprint_to_json(&bp)?;
    let sql = format!(
        "SELECT tag, lw_fit(ts, value, '{json}', {CADENCE_MS})['sigma2'] AS sigma2 FROM readings GROUP BY tag"
    );
    let bucket_sql = format!(
        "SELECT tag, lw_fit(ts, value, '{json}', {CADENCE_MS})['sigma2'] AS sigma2 FROM by_bucket GROUP BY bucket, tag"
    );
    // The by-tag function: the engine groups by bucket only, the function splits each
    // bucket's rows by tag.
    let tags_sql = format!(
        "SELECT f['tag'] AS tag, f['sigma2'] AS sigma2 FROM (
           SELECT unnest(lw_fit_by_tag(tag, ts, value, '{json}', {CADENCE_MS})) AS f
           FROM by_bucket GROUP BY bucket)"
    );

    // 1. The fleet on the slices.
    let fleet = Fleet::builder().threads(threads).build()?;
    let slices: Vec<&[f64]> = data.iter().map(Vec::as_slice).collect();
    let time_fleet = || {
        let t = Instant::now();
        let report = fleet.fit_slices(&bp, &slices);
        let s = t.elapsed().as_secs_f64();
        assert_eq!(report.fitted(), series, "every series fits");
        s
    };
    let fleet_s = time_fleet();
    println!("Fleet on the slices:             {fleet_s:8.2} s");

    // 1b. What `lw_fit` does for each tag, without any engine: the readings placed on
    // the grid, the fit, the full residual check, the criteria and the stored model text.
    if wanted("rows") {
        let t = Instant::now();
        row_work(&bp, &data, threads)?;
        let row_s = t.elapsed().as_secs_f64();
        println!(
            "  (lw_fit's work per tag without an engine: {row_s:.2} s, {:.2}× the fleet)",
            row_s / fleet_s
        );
    }

    // 2. DataFusion in this process.
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(threads)
        .enable_all()
        .build()?;
    let config = SessionConfig::new().with_target_partitions(threads);
    if wanted("flat") {
        let ctx = SessionContext::new_with_config(config.clone());
        lagwise_sql::register(&ctx);
        let (rows, in_process_s, floor_s) = runtime.block_on(async {
            ctx.register_parquet("readings", path_text(&dir)?, ParquetReadOptions::default())
                .await?;
            // The engine's own floor: reading the files and grouping the rows by tag.
            let t = Instant::now();
            ctx.sql("SELECT tag, count(value) FROM readings GROUP BY tag")
                .await?
                .collect()
                .await?;
            let floor_s = t.elapsed().as_secs_f64();
            let t = Instant::now();
            let out = ctx.sql(&sql).await?.collect().await?;
            Ok::<_, Failure>((row_count(&out), t.elapsed().as_secs_f64(), floor_s))
        })?;
        assert_eq!(rows, series);
        println!("  (the engine alone, count per tag: {floor_s:.2} s)");
        println!(
            "DataFusion in process:           {in_process_s:8.2} s  ({:+.1}% against the fleet)",
            100.0 * (in_process_s / fleet_s - 1.0)
        );
        drop(ctx);
    }

    // 2b. The same readings laid out one tag bucket per directory (`bucket=NN/`, Hive
    // style), the engine told to keep those file partitions: grouping by (bucket, tag)
    // then needs no shuffle, and the aggregate runs in one phase where the rows are read.
    // (Tried: one partition per bucket file with the files' order (tag, time) declared,
    // so that the aggregate emits each tag as the next starts: 18.7 s against 14.3 s.)
    // 2b. The same readings laid out one tag bucket per directory (`bucket=NN/`, Hive
    // style), the engine told to keep those file partitions: grouping by (bucket, tag)
    // then needs no shuffle, and the aggregate runs in one phase where the rows are read.
    // (Tried: one partition per bucket file with the files' order (tag, time) declared,
    // so that the aggregate emits each tag as the next starts: slower.)
    // 2c. The by-tag function on the same files, grouped by bucket alone.
    let stages = [
        (
            "bucket",
            &bucket_sql,
            "SELECT tag, max(ts), count(value) FROM by_bucket GROUP BY bucket, tag",
            "DataFusion, files by tag bucket:",
        ),
        (
            "tags",
            &tags_sql,
            "SELECT bucket, count(tag), max(ts), count(value) FROM by_bucket GROUP BY bucket",
            "DataFusion, by tag in buckets:  ",
        ),
    ];
    // `ENGINE_BENCH_ROUNDS=n`: n − 1 more rounds of the fleet and each in-process bucket
    // query in turn, so that the ratio is seen several times on a noisy machine.
    let rounds = std::env::var("ENGINE_BENCH_ROUNDS")
        .ok()
        .and_then(|r| r.parse().ok())
        .unwrap_or(1);
    let bench = BucketBench {
        runtime: &runtime,
        threads,
        by_bucket: &by_bucket,
        fleet_s,
        first_query: !wanted("flat"),
        expected: series,
        rounds,
        time_fleet: &time_fleet,
    };
    for (stage, query, floor, label) in stages {
        if wanted(stage) {
            bench.run([floor, query], label)?;
        }
    }

    if wanted("cluster") {
        // 3. A Ballista cluster on loopback: a scheduler and two executors with
        // `threads / 2` slots each (at least one), so the cluster uses the same cores.
        let node = std::env::current_exe()?
            .parent()
            .and_then(Path::parent)
            .map(|p| p.join("lagwise-node"))
            .ok_or("cannot locate lagwise-node")?;
        let slots = (threads / 2).max(1).to_string();
        let (scheduler, line) = start(&node, &["scheduler", "--ready-executors", "2"])?;
        let address = line
            .strip_prefix("scheduler listening on ")
            .ok_or("unexpected scheduler output")?
            .to_string();
        let mut executors = Vec::new();
        for _ in 0..2 {
            executors.push(
                start(
                    &node,
                    &["executor", "--scheduler", &address, "--slots", &slots],
                )?
                .0,
            );
        }
        let mut nodes = Nodes(vec![scheduler]);
        nodes.0.extend(executors);
        std::thread::sleep(Duration::from_secs(3));
        let cluster_s = runtime.block_on(async {
            let ctx = lagwise_cluster::connect_with(
                &format!("df://{address}"),
                config.clone().with_target_partitions(2 * FILES),
            )
            .await?;
            ctx.register_parquet("readings", path_text(&dir)?, ParquetReadOptions::default())
                .await?;
            let t = Instant::now();
            let out = lagwise_cluster::collect(&ctx, &sql).await?;
            let s = t.elapsed().as_secs_f64();
            assert_eq!(row_count(&out), series);
            Ok::<_, Failure>(s)
        })?;
        println!(
            "Ballista, 2 executors × {slots} slots: {cluster_s:8.2} s  ({:+.1}% against the fleet)",
            100.0 * (cluster_s / fleet_s - 1.0)
        );
        // The bucket layout on the cluster (the same option travels with the session),
        // grouped by (bucket, tag) and with the by-tag function by bucket.
        for (query, label) in [
            (&bucket_sql, "Ballista, files by tag bucket:  "),
            (&tags_sql, "Ballista, by tag in buckets:    "),
        ] {
            let bucketed = runtime.block_on(async {
                let mut config = config.clone().with_target_partitions(2 * FILES);
                keep_file_partitions(&mut config);
                let ctx = lagwise_cluster::connect_with(&format!("df://{address}"), config).await?;
                let options = ParquetReadOptions::default()
                    .table_partition_cols(vec![("bucket".to_string(), DataType::Int32)]);
                ctx.register_parquet("by_bucket", path_text(&by_bucket)?, options)
                    .await?;
                let t = Instant::now();
                let out = lagwise_cluster::collect(&ctx, query).await?;
                let s = t.elapsed().as_secs_f64();
                assert_eq!(row_count(&out), series);
                Ok::<_, Failure>(s)
            });
            match bucketed {
                Ok(s) => println!(
                    "{label} {s:8.2} s  ({:+.1}% against the fleet)",
                    100.0 * (s / fleet_s - 1.0)
                ),
                Err(e) => println!("{label} failed: {e}"),
            }
        }
        for (k, child) in nodes.0.iter().enumerate().skip(1) {
            println!(
                "  executor {k}: peak resident memory {:.0} MB",
                peak_mb(child.id()).unwrap_or(f64::NAN)
            );
        }
        println!(
            "  scheduler:  peak resident memory {:.0} MB",
            peak_mb(nodes.0[0].id()).unwrap_or(f64::NAN)
        );
    }
    Ok(())
}

/// What the in-process bucket stages share.
struct BucketBench<'a> {
    runtime: &'a tokio::runtime::Runtime,
    threads: usize,
    by_bucket: &'a Path,
    fleet_s: f64,
    /// The stage's query is the process's first large one.
    first_query: bool,
    /// Result rows (one per tag).
    expected: usize,
    rounds: usize,
    /// Fits the fleet again, giving its wall time.
    time_fleet: &'a dyn Fn() -> f64,
}

impl BucketBench<'_> {
    /// One query over the bucket files in a new in-process context: the engine's floor
    /// (reading every column, no fitting), then the query itself, once more before that
    /// when it is the process's first large query, then further rounds of the fleet and
    /// the query in turn.
    fn run(&self, [floor, query]: [&str; 2], label: &str) -> Result<(), Failure> {
        let mut bucket_config = SessionConfig::new().with_target_partitions(self.threads);
        keep_file_partitions(&mut bucket_config);
        let ctx = SessionContext::new_with_config(bucket_config);
        lagwise_sql::register(&ctx);
        let ctx = &ctx;
        let timed = |sql: String| async move {
            let t = Instant::now();
            let out = ctx.sql(&sql).await?.collect().await?;
            Ok::<_, Failure>((row_count(&out), t.elapsed().as_secs_f64()))
        };
        let (rows, bucket_s, plan) = self.runtime.block_on(async {
            let options = ParquetReadOptions::default()
                .table_partition_cols(vec![("bucket".to_string(), DataType::Int32)]);
            ctx.register_parquet("by_bucket", path_text(self.by_bucket)?, options)
                .await?;
            let explained = ctx
                .sql(&format!("EXPLAIN {query}"))
                .await?
                .collect()
                .await?;
            let plan =
                datafusion::arrow::util::pretty::pretty_format_batches(&explained)?.to_string();
            let (_, floor_s) = timed(floor.to_string()).await?;
            println!("  (the engine alone, every column read and grouped: {floor_s:.2} s)");
            // When this is the process's first large query, its memory is touched for the
            // first time (page faults, slow on a fresh virtual machine); a second run
            // reuses it, as a long-running process does.
            if self.first_query {
                let (_, s) = timed(query.to_string()).await?;
                println!(
                    "  (first run in this process, memory not yet touched: {s:.2} s, {:.2}× the fleet)",
                    s / self.fleet_s
                );
            }
            let (rows, s) = timed(query.to_string()).await?;
            Ok::<_, Failure>((rows, s, plan))
        })?;
        if std::env::var_os("ENGINE_BENCH_PLAN").is_some() {
            println!("{plan}");
        }
        if rows != self.expected {
            return Err(format!("{label} gave {rows} rows for {} tags", self.expected).into());
        }
        let single = plan.contains("SinglePartitioned") && !plan.contains("RepartitionExec");
        println!(
            "{label} {bucket_s:8.2} s  ({:+.1}% against the fleet; one-phase aggregate without a shuffle: {single})",
            100.0 * (bucket_s / self.fleet_s - 1.0)
        );
        if self.rounds > 1 {
            let mut ratios = vec![bucket_s / self.fleet_s];
            for _ in 1..self.rounds {
                let fleet_s = (self.time_fleet)();
                let (_, s) = self.runtime.block_on(timed(query.to_string()))?;
                ratios.push(s / fleet_s);
            }
            let listed: Vec<String> = ratios.iter().map(|r| format!("{r:.3}")).collect();
            ratios.sort_by(f64::total_cmp);
            println!(
                "  ({} rounds of the fleet and this query in turn: {}× the fleet; median {:.3}×)",
                self.rounds,
                listed.join(", "),
                ratios[ratios.len() / 2]
            );
        }
        Ok(())
    }
}

/// Let a scan of Hive-style directories declare its partitioning by the partition column
/// and let a grouping that includes that column use it as it is, however few the
/// partitions (by default DataFusion re-shuffles below 4).
fn keep_file_partitions(config: &mut SessionConfig) {
    let optimizer = &mut config.options_mut().optimizer;
    optimizer.preserve_file_partitions = 1;
    optimizer.subset_repartition_threshold = 1;
}

/// Grid, fit, residual check, criteria and stored text for every series, on `threads`
/// threads (what `lw_fit` computes per group).
fn row_work(bp: &Blueprint, data: &[Vec<f64>], threads: usize) -> Result<(), Failure> {
    let grid = lagwise::GridSettings::builder(CADENCE_MS).build()?;
    let chunk = data.len().div_ceil(threads.max(1));
    std::thread::scope(|scope| {
        let handles: Vec<_> = data
            .chunks(chunk.max(1))
            .map(|part| {
                let grid = &grid;
                scope.spawn(move || -> Result<usize, String> {
                    let mut ws = lagwise::FitWorkspace::new();
                    let mut bytes = 0;
                    for x in part {
                        let times: Vec<i64> = (0..x.len() as i64)
                            .map(|i| ORIGIN_MS + i * CADENCE_MS)
                            .collect();
                        let g =
                            lagwise::place_on_grid(&times, x, grid).map_err(|e| e.to_string())?;
                        let m = bp.fit_with(&g.values, &mut ws).map_err(|e| e.to_string())?;
                        let m = m.with_time_axis(g.axis);
                        let check = m.residual_check(m.default_check_lags(), 0.05).ok();
                        let criteria = m.criteria().ok();
                        let text = lagwise::model_to_json(&m).map_err(|e| e.to_string())?;
                        bytes += text.len()
                            + usize::from(check.is_some())
                            + usize::from(criteria.is_some());
                    }
                    Ok(bytes)
                })
            })
            .collect();
        for h in handles {
            h.join().map_err(|_| "a thread panicked")??;
        }
        Ok::<_, Failure>(())
    })
}

/// The nodes started here, killed and reaped when dropped (also on an early return).
struct Nodes(Vec<Child>);

impl Drop for Nodes {
    fn drop(&mut self) {
        for c in &mut self.0 {
            let _ = c.kill();
            let _ = c.wait();
        }
    }
}

fn start(node: &Path, args: &[&str]) -> Result<(Child, String), Failure> {
    let mut child = Command::new(node)
        .args(args)
        .arg("--exit-with-parent")
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .map_err(|e| format!("cannot start {}: {e}", node.display()))?;
    let mut out = BufReader::new(child.stdout.take().ok_or("no stdout")?);
    let mut line = String::new();
    out.read_line(&mut line)?;
    std::thread::spawn(move || std::io::copy(&mut out, &mut std::io::sink()));
    Ok((child, line.trim().to_string()))
}

/// Peak resident set (VmHWM) of a process, in MB.
fn peak_mb(pid: u32) -> Option<f64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

fn row_count(batches: &[RecordBatch]) -> usize {
    batches.iter().map(RecordBatch::num_rows).sum()
}

fn path_text(dir: &Path) -> Result<&str, Failure> {
    dir.to_str().ok_or_else(|| "path is not UTF-8".into())
}

/// The long table in `FILES` files, tag k in file k mod `FILES`, each tag's rows in time
/// order; `by_bucket`: file k mod `FILES` under `bucket=NN/` (the bucket a Hive-style
/// partition column read from the path).
fn write_parquet(
    dir: &PathBuf,
    tags: &[String],
    data: &[Vec<f64>],
    by_bucket: bool,
) -> Result<(), Failure> {
    let _ = std::fs::remove_dir_all(dir);
    std::fs::create_dir_all(dir)?;
    let schema = Arc::new(Schema::new(vec![
        Field::new("tag", DataType::Utf8, false),
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
            false,
        ),
        Field::new("value", DataType::Float64, true),
    ]));
    for f in 0..FILES {
        let path = if by_bucket {
            let sub = dir.join(format!("bucket={f}"));
            std::fs::create_dir_all(&sub)?;
            sub.join("part.parquet")
        } else {
            dir.join(format!("part-{f:02}.parquet"))
        };
        let file = std::fs::File::create(path)?;
        let mut w = ArrowWriter::try_new(file, schema.clone(), None)?;
        // Batches of about 64 tags.
        let members: Vec<usize> = (f..tags.len()).step_by(FILES).collect();
        for group in members.chunks(64) {
            let n: usize = group.iter().map(|&k| data[k].len()).sum();
            let mut tag = Vec::with_capacity(n);
            let mut ts = Vec::with_capacity(n);
            let mut value = Vec::with_capacity(n);
            for &k in group {
                for (i, v) in data[k].iter().enumerate() {
                    tag.push(tags[k].as_str());
                    ts.push(ORIGIN_MS + i as i64 * CADENCE_MS);
                    value.push(*v);
                }
            }
            w.write(&RecordBatch::try_new(
                schema.clone(),
                vec![
                    Arc::new(StringArray::from(tag)),
                    Arc::new(TimestampMillisecondArray::from(ts).with_timezone("UTC")),
                    Arc::new(Float64Array::from(value)),
                ],
            )?)?;
        }
        w.close()?;
    }
    Ok(())
}
