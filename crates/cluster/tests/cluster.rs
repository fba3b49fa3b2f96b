//! A real cluster on this machine: a scheduler and two executors started from the
//! `lagwise-node` binary as separate processes on free 127.0.0.1 ports, queried by a
//! client in this process over Parquet files of a few thousand tags. Every fit and
//! forecast must equal, bitwise, the in-process `Fleet` on the same files; a killed
//! executor must not produce a partial answer; nodes built without lagwise's functions
//! must give an error that says what to do. Every process started here is killed and
//! reaped when its guard drops, and each node ends itself if this process dies
//! (`--exit-with-parent`).

use std::collections::HashMap;
use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::time::{Duration, Instant};

use datafusion::arrow::array::{
    Array, AsArray, Float64Array, RecordBatch, StringArray, StructArray, TimestampMillisecondArray,
};
use datafusion::arrow::datatypes::{
    DataType, Field, Float64Type, Int64Type, Schema, TimeUnit, TimestampMillisecondType,
};
use lagwise::{Blueprint, Fleet, GridSettings, Simulator};
use lagwise_cluster::ClusterError;
use lagwise_columnar::{FleetTables, TableLayout};

const CADENCE: i64 = 900_000;
const ORIGIN: i64 = 1_795_996_800_000; // 2026-11-30 00:00 UTC
const NODE: &str = env!("CARGO_BIN_EXE_lagwise-node");

/// A started node: killed (SIGKILL) and reaped on drop.
struct Node {
    child: Child,
    role: String,
}

impl Node {
    /// Starts `lagwise-node <args>` and returns it with the first line it printed.
    fn start(args: &[&str], log: &Path) -> (Node, String) {
        let mut child = Command::new(NODE)
            .args(args)
            .arg("--exit-with-parent")
            .stdout(Stdio::piped())
            .stderr(std::fs::File::create(log).unwrap())
            .spawn()
            .unwrap();
        let mut out = BufReader::new(child.stdout.take().unwrap());
        let mut line = String::new();
        out.read_line(&mut line).unwrap();
        // Keep draining stdout so the node never blocks on a full pipe.
        std::thread::spawn(move || std::io::copy(&mut out, &mut std::io::sink()));
        let role = args[0].to_string();
        assert!(!line.is_empty(), "{role} printed nothing; log: {log:?}");
        (Node { child, role }, line.trim().to_string())
    }

    fn pid(&self) -> u32 {
        self.child.id()
    }

    fn alive(&mut self) -> bool {
        matches!(self.child.try_wait(), Ok(None))
    }
}

impl Drop for Node {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
        eprintln!("stopped {} (pid {})", self.role, self.child.id());
    }
}

/// A scheduler and its executors, each executor with its own work directory.
struct Cluster {
    /// Held so that it is stopped with the cluster.
    _scheduler: Node,
    address: String,
    executors: Vec<(Node, PathBuf)>,
    dir: PathBuf,
}

impl Cluster {
    fn start(name: &str, executors: usize, stock_executors: bool, stock_scheduler: bool) -> Self {
        let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(format!("cluster-{name}"));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        let ready = executors.to_string();
        let mut args = vec![
            "scheduler",
            "--executor-timeout",
            "10",
            "--ready-executors",
            &ready,
        ];
        if stock_scheduler {
            args.push("--stock");
        }
        let (scheduler, line) = Node::start(&args, &dir.join("scheduler.log"));
        let address = line
            .strip_prefix("scheduler listening on ")
            .unwrap_or_else(|| panic!("unexpected first line {line:?}"))
            .to_string();
        assert!(address.starts_with("127.0.0.1:"), "{address}");
        let mut list = Vec::new();
        for k in 0..executors {
            let work = dir.join(format!("executor-{k}"));
            std::fs::create_dir_all(&work).unwrap();
            let mut args = vec![
                "executor",
                "--scheduler",
                &address,
                "--slots",
                "2",
                "--work-dir",
                work.to_str().unwrap(),
            ];
            if stock_executors {
                args.push("--stock");
            }
            let (node, line) = Node::start(&args, &dir.join(format!("executor-{k}.log")));
            assert!(
                line.starts_with("executor listening on 127.0.0.1:"),
                "{line}"
            );
            list.push((node, work));
        }
        let cluster = Cluster {
            _scheduler: scheduler,
            address,
            executors: list,
            dir,
        };
        cluster.wait_ready();
        cluster
    }

    /// Waits until the scheduler reports the executors registered (`/readyz`).
    fn wait_ready(&self) {
        let start = Instant::now();
        while start.elapsed() < Duration::from_secs(60) {
            if http_status(&self.address, "/readyz") == Some(200) {
                return;
            }
            std::thread::sleep(Duration::from_millis(200));
        }
        panic!("cluster not ready after 60 s; logs in {:?}", self.dir);
    }

    fn url(&self) -> String {
        format!("df://{}", self.address)
    }
}

/// The status code of a plain HTTP/1.1 GET on loopback.
fn http_status(address: &str, path: &str) -> Option<u16> {
    let mut s = TcpStream::connect(address).ok()?;
    s.set_read_timeout(Some(Duration::from_secs(2))).ok()?;
    write!(
        s,
        "GET {path} HTTP/1.1\r\nHost: {address}\r\nConnection: close\r\n\r\n"
    )
    .ok()?;
    let mut head = [0u8; 12];
    s.read_exact(&mut head).ok()?;
    std::str::from_utf8(&head[9..12]).ok()?.parse().ok()
}

/// `tags` tags of `n` readings in `files` Parquet files, rows out of time order, a few
/// readings missing; returns the directory.
fn write_readings(dir: &Path, tags: usize, n: usize, files: usize) -> PathBuf {
    let data = dir.join("readings");
    std::fs::create_dir_all(&data).unwrap();
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .level(4.2)
        .innovation_sd(0.05)
        .build()
        .unwrap();
    let mut rows: Vec<(String, i64, Option<f64>)> = Vec::with_capacity(tags * n);
    for k in 0..tags {
        let tag = format!("KB-SS{:04}-DP", k);
        let x = sim.generate(n, 1_000 + k as u64);
        for (i, v) in x.iter().enumerate() {
            let missing = (i * 31 + k) % 89 == 0;
            rows.push((
                tag.clone(),
                ORIGIN + i as i64 * CADENCE,
                (!missing).then_some(*v),
            ));
        }
    }
    let len = rows.len();
    for i in 0..len {
        rows.swap(i, (i * 7_919 + 13) % len);
    }
    let per_file = len.div_ceil(files);
    for (f, chunk) in rows.chunks(per_file).enumerate() {
        let rows: Vec<(&str, i64, Option<f64>)> =
            chunk.iter().map(|r| (r.0.as_str(), r.1, r.2)).collect();
        write_rows(&data, &format!("part-{f}.parquet"), &rows);
    }
    data
}

/// The in-process answer: the same files read, placed on the grid and fitted by `Fleet`.
fn fleet_answer(data: &Path, bp: &Blueprint) -> FleetTables {
    let mut batches = Vec::new();
    let mut files: Vec<_> = std::fs::read_dir(data)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    files.sort();
    for f in files {
        batches.extend(lagwise_columnar::read_parquet(&f).unwrap());
    }
    let series = lagwise_columnar::tags_from_batches(
        &batches,
        &TableLayout::new("tag", "ts", "value"),
        &GridSettings::builder(CADENCE).build().unwrap(),
    )
    .unwrap();
    let fleet = Fleet::builder().ready_monitors(true).build().unwrap();
    FleetTables::fit(&series, bp, &fleet)
}

fn blueprint() -> (Blueprint, String) {
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let json = lagwise::blueprint_to_json(&bp).unwrap();
    (bp, json)
}

fn tag_at(column: &dyn Array, row: usize) -> String {
    match column.data_type() {
        DataType::Utf8View => column.as_string_view().value(row).to_string(),
        DataType::LargeUtf8 => column.as_string::<i64>().value(row).to_string(),
        _ => column.as_string::<i32>().value(row).to_string(),
    }
}

/// A named float column (present by construction of the result tables).
fn floats(column: Option<&datafusion::arrow::array::ArrayRef>) -> &Float64Array {
    column.expect("column").as_primitive::<Float64Type>()
}

/// Checks every fitted row against the fleet's summary, bit for bit; returns the rows seen.
fn check_fits(out: &[RecordBatch], fleet: &FleetTables) -> usize {
    let mut seen = 0;
    for b in out {
        let fit = b.column(1).as_struct();
        let field = |name: &str| fit.column_by_name(name).unwrap().clone();
        for r in 0..b.num_rows() {
            let tag = tag_at(b.column(0).as_ref(), r);
            let own = fleet.summary(&tag).unwrap().unwrap();
            assert!(field("error").is_null(r), "{tag}");
            let coefs = field("coefficients");
            let coefs = coefs.as_list::<i32>().value(r);
            let coefs: &StructArray = coefs.as_struct();
            let value = floats(coefs.column_by_name("value"));
            let se = floats(coefs.column_by_name("se"));
            assert_eq!(value.len(), own.coefficients.len(), "{tag}");
            for (i, c) in own.coefficients.iter().enumerate() {
                assert_eq!(value.value(i).to_bits(), c.value.to_bits(), "{tag}");
                assert_eq!(
                    se.value(i).to_bits(),
                    c.std_error.unwrap_or(f64::NAN).to_bits(),
                    "{tag}"
                );
            }
            let sigma2 = field("sigma2");
            assert_eq!(
                sigma2.as_primitive::<Float64Type>().value(r).to_bits(),
                own.innovation_variance.to_bits(),
                "{tag}"
            );
            let readings = field("readings");
            assert_eq!(
                readings.as_primitive::<Int64Type>().value(r) as usize,
                own.counts.total - own.counts.missing,
                "{tag}"
            );
            seen += 1;
        }
    }
    seen
}

/// Checks every forecast row against the fleet's forecast table, bit for bit.
fn check_forecasts(out: &[RecordBatch], fleet: &FleetTables, horizon: usize) -> usize {
    let table = fleet.forecasts(horizon, &[0.8, 0.95]).unwrap();
    let mut own: HashMap<(String, i64), (u64, u64, u64, i64)> = HashMap::new();
    let tags = table.column(0).as_string::<i32>();
    let steps = table
        .column(1)
        .as_primitive::<datafusion::arrow::datatypes::UInt32Type>();
    let times = table.column(2).as_primitive::<TimestampMillisecondType>();
    let mean = table.column(3).as_primitive::<Float64Type>();
    let lower95 = floats(table.column_by_name("lower_95"));
    let upper80 = floats(table.column_by_name("upper_80"));
    for r in 0..table.num_rows() {
        own.insert(
            (tags.value(r).to_string(), steps.value(r) as i64),
            (
                mean.value(r).to_bits(),
                lower95.value(r).to_bits(),
                upper80.value(r).to_bits(),
                times.value(r),
            ),
        );
    }
    let mut seen = 0;
    for b in out {
        for r in 0..b.num_rows() {
            let tag = tag_at(b.column(0).as_ref(), r);
            let step = b.column(1).as_primitive::<Int64Type>().value(r);
            let at = b
                .column(2)
                .as_primitive::<TimestampMillisecondType>()
                .value(r);
            let got = (
                b.column(3).as_primitive::<Float64Type>().value(r).to_bits(),
                b.column(4).as_primitive::<Float64Type>().value(r).to_bits(),
                b.column(5).as_primitive::<Float64Type>().value(r).to_bits(),
                at,
            );
            assert_eq!(
                own.get(&(tag.clone(), step)),
                Some(&got),
                "{tag} step {step}"
            );
            seen += 1;
        }
    }
    seen
}

fn fit_sql(json: &str) -> String {
    format!("SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) AS fit FROM readings GROUP BY tag")
}

fn ahead_sql(json: &str, horizon: usize) -> String {
    format!(
        "SELECT tag, s.step, s.at, s.mean, s.lower[2], s.upper[1] FROM (
           SELECT tag, unnest(lw_ahead(ts, value, '{json}', {CADENCE}, {horizon}, '[0.8, 0.95]')['steps']) AS s
           FROM readings GROUP BY tag)"
    )
}

/// Six partitions: more tasks per stage than one executor has slots.
fn partitions(n: usize) -> datafusion::prelude::SessionConfig {
    datafusion::prelude::SessionConfig::new().with_target_partitions(n)
}

/// A client of `cluster` with `partitions` target partitions and the given Parquet
/// directories registered as tables.
async fn client(
    cluster: &Cluster,
    partitions_wanted: usize,
    tables: &[(&str, &Path)],
) -> datafusion::prelude::SessionContext {
    let ctx = lagwise_cluster::connect_with(&cluster.url(), partitions(partitions_wanted))
        .await
        .unwrap();
    for (name, dir) in tables {
        ctx.register_parquet(
            *name,
            dir.to_str().unwrap(),
            datafusion::prelude::ParquetReadOptions::default(),
        )
        .await
        .unwrap();
    }
    ctx
}

/// The job directories (`<job>/<stage>/<partition>/…`) in an executor's work directory.
fn jobs_in(work: &Path) -> Vec<std::ffi::OsString> {
    std::fs::read_dir(work)
        .map(|entries| {
            entries
                .filter_map(|e| e.ok())
                .filter(|e| e.path().is_dir())
                .map(|e| e.file_name())
                .collect()
        })
        .unwrap_or_default()
}

/// Whether some job other than `old` has written output of its second stage (the final
/// aggregate, which reads the first stage's shuffle files) in any of the work directories.
fn second_stage_began(works: &[PathBuf], old: &[std::ffi::OsString]) -> bool {
    works.iter().any(|w| {
        jobs_in(w)
            .iter()
            .any(|j| !old.contains(j) && w.join(j).join("2").is_dir())
    })
}

fn files_under(dir: &Path) -> usize {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return 0;
    };
    entries
        .map(|e| {
            let p = e.unwrap().path();
            if p.is_dir() { files_under(&p) } else { 1 }
        })
        .sum()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn fits_and_forecasts_on_two_executors_equal_the_fleet_bitwise() {
    const TAGS: usize = 3_000;
    let cluster = Cluster::start("equal", 2, false, false);
    let data = write_readings(&cluster.dir, TAGS, 400, 6);
    let (bp, json) = blueprint();
    let fleet = fleet_answer(&data, &bp);
    let ctx = client(&cluster, 6, &[("readings", &data)]).await;
    let fits = lagwise_cluster::collect(&ctx, &fit_sql(&json))
        .await
        .unwrap();
    assert_eq!(check_fits(&fits, &fleet), TAGS);
    // The by-tag function, the engine grouping by a coarse key (two groups, partial
    // states of readings with their tags shuffled between the executors).
    let by_tag = format!(
        "SELECT f['tag'] AS tag, f AS fit FROM (
           SELECT unnest(lw_fit_by_tag(tag, ts, value, '{json}', {CADENCE})) AS f
           FROM readings GROUP BY tag < 'KB-SS1500-DP')"
    );
    let fits = lagwise_cluster::collect(&ctx, &by_tag).await.unwrap();
    assert_eq!(check_fits(&fits, &fleet), TAGS);
    let ahead = lagwise_cluster::collect(&ctx, &ahead_sql(&json, 8))
        .await
        .unwrap();
    assert_eq!(check_forecasts(&ahead, &fleet, 8), TAGS * 8);
    // Both executors ran tasks: each wrote shuffle files into its own work directory.
    for (node, work) in &cluster.executors {
        assert!(
            files_under(work) > 0,
            "executor pid {} ran no task",
            node.pid()
        );
    }
    drop(ctx);
    drop(cluster);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_killed_executor_never_leaves_a_partial_answer() {
    const TAGS: usize = 3_000;
    let mut cluster = Cluster::start("fault", 2, false, false);
    let data = write_readings(&cluster.dir, TAGS, 600, 12);
    let (bp, json) = blueprint();
    let fleet = fleet_answer(&data, &bp);
    let ctx = client(&cluster, 6, &[("readings", &data)]).await;
    let works: Vec<PathBuf> = cluster.executors.iter().map(|e| e.1.clone()).collect();
    let old_jobs: Vec<_> = works.iter().flat_map(|w| jobs_in(w)).collect();
    let query = {
        let ctx = ctx.clone();
        let sql = fit_sql(&json);
        tokio::spawn(async move { lagwise_cluster::collect(&ctx, &sql).await })
    };
    // Kill the second executor while the query runs (SIGKILL: no goodbye to the
    // scheduler), once the final aggregate has begun to emit: its remaining tasks still
    // read the first stage's shuffle files, some of them on the victim, so the scheduler
    // must roll that stage back and re-run the lost tasks on the survivor. (With the
    // engine's default push scheduling, and with its adaptive planner, that case left the
    // job hanging for good; a kill at a fixed time missed it or came after the end.)
    let waited = Instant::now();
    while !second_stage_began(&works, &old_jobs) {
        assert!(
            !query.is_finished(),
            "the query ended before its second stage wrote anything"
        );
        assert!(
            waited.elapsed() < Duration::from_secs(120),
            "the second stage wrote no output in 2 minutes"
        );
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    assert!(
        !query.is_finished(),
        "the query ended before the kill: make it longer"
    );
    let (victim, _) = &mut cluster.executors[1];
    assert!(victim.alive(), "the executor ended before it was killed");
    victim.child.kill().unwrap();
    victim.child.wait().unwrap();
    let started = Instant::now();
    // Completed or failed within bounds: never hanging (the executor timeout is 10 s
    // here).
    let answer = tokio::time::timeout(Duration::from_secs(300), query)
        .await
        .expect("the query hung after the kill");
    match answer.unwrap() {
        // Completed on the survivor: every tag, every bit.
        Ok(fits) => assert_eq!(check_fits(&fits, &fleet), TAGS),
        // Or failed, saying so.
        Err(e) => {
            let text = e.to_string();
            assert!(!text.is_empty());
            eprintln!("query failed after the kill, as allowed: {text}");
        }
    }
    eprintln!("answered {:?} after the kill", started.elapsed());
    assert!(cluster.executors[0].0.alive());
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn nodes_without_the_functions_get_a_message_that_says_what_to_do() {
    let cluster = Cluster::start("stock-executor", 1, true, false);
    match lagwise_cluster::connect(&cluster.url()).await {
        Err(e @ ClusterError::NodesWithoutFunctions { side, .. }) => {
            assert_eq!(side, "executors", "{e:?}");
            assert!(e.to_string().contains("lagwise-node executor"), "{e}");
        }
        Err(other) => panic!("expected a clear error, got {other:?}"),
        Ok(_) => panic!("a cluster without the functions accepted the probe"),
    }
    drop(cluster);
    let cluster = Cluster::start("stock-scheduler", 1, false, true);
    match lagwise_cluster::connect(&cluster.url()).await {
        Err(e @ ClusterError::NodesWithoutFunctions { side, .. }) => {
            assert_eq!(side, "scheduler");
            assert!(e.to_string().contains("lagwise-node scheduler"), "{e}");
        }
        Err(other) => panic!("expected a clear error, got {other:?}"),
        Ok(_) => panic!("a cluster without the functions accepted the probe"),
    }
}

/// Writes one Parquet file with the given (tag, ts, value) rows into `dir`.
fn write_rows(dir: &Path, name: &str, rows: &[(&str, i64, Option<f64>)]) {
    std::fs::create_dir_all(dir).unwrap();
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
            Arc::new(StringArray::from_iter_values(rows.iter().map(|r| r.0))),
            Arc::new(
                TimestampMillisecondArray::from_iter_values(rows.iter().map(|r| r.1))
                    .with_timezone("UTC"),
            ),
            Arc::new(Float64Array::from_iter(rows.iter().map(|r| r.2))),
        ],
    )
    .unwrap();
    lagwise_columnar::write_parquet(dir.join(name), &[batch]).unwrap();
}

/// Bad input on the cluster: a bad group fails its own row, a bad setting or a wrong
/// column type fails the query with a message naming it, and no executor goes down —
/// the same cluster answers a good query afterwards (including the watch window
/// function, which must travel to the executors too).
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bad_input_fails_its_row_or_the_query_and_no_executor_goes_down() {
    let mut cluster = Cluster::start("bad-input", 2, false, false);
    let data = cluster.dir.join("mixed");
    let sim = Simulator::builder()
        .autoregressive(&[0.5])
        .build()
        .unwrap()
        .generate(300, 7);
    let mut rows: Vec<(&str, i64, Option<f64>)> = Vec::new();
    for (i, v) in sim.iter().enumerate() {
        let at = ORIGIN + i as i64 * CADENCE;
        rows.push(("good", at, Some(*v)));
        rows.push(("all-missing", at, None));
        rows.push((
            "infinite",
            at,
            Some(if i == 150 { f64::INFINITY } else { *v }),
        ));
    }
    rows.push(("one-reading", ORIGIN, Some(1.0)));
    write_rows(&data, "part-0.parquet", &rows);
    // Timestamps as text: the wrong type for the time column.
    let text_times = cluster.dir.join("text-times");
    {
        let schema = Arc::new(Schema::new(vec![
            Field::new("tag", DataType::Utf8, false),
            Field::new("ts", DataType::Utf8, false),
            Field::new("value", DataType::Float64, true),
        ]));
        let batch = RecordBatch::try_new(
            schema,
            vec![
                Arc::new(StringArray::from(vec!["a", "a"])),
                Arc::new(StringArray::from(vec![
                    "2026-11-30T00:00",
                    "2026-11-30T00:15",
                ])),
                Arc::new(Float64Array::from(vec![1.0, 2.0])),
            ],
        )
        .unwrap();
        std::fs::create_dir_all(&text_times).unwrap();
        lagwise_columnar::write_parquet(text_times.join("part-0.parquet"), &[batch]).unwrap();
    }
    let ctx = client(&cluster, 4, &[("readings", &data), ("texts", &text_times)]).await;
    let (_, json) = blueprint();

    // Bad groups: their rows carry the reason, the good group fits.
    let out = lagwise_cluster::collect(
        &ctx,
        &format!(
            "SELECT tag, fit['error'] AS error FROM (SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) AS fit FROM readings GROUP BY tag) ORDER BY tag"
        ),
    )
    .await
    .unwrap();
    let mut errors = HashMap::new();
    for b in &out {
        for r in 0..b.num_rows() {
            let e = b.column(1);
            let text = (!e.is_null(r)).then(|| tag_at(e.as_ref(), r));
            errors.insert(tag_at(b.column(0).as_ref(), r), text);
        }
    }
    assert_eq!(errors.len(), 4, "{errors:?}");
    assert_eq!(errors["good"], None);
    for (tag, word) in [
        ("all-missing", "missing"),
        ("infinite", "finite"),
        ("one-reading", "reading"),
    ] {
        let e = errors[tag].as_deref().unwrap_or("");
        assert!(e.contains(word), "{tag}: {e:?}");
    }

    // Bad settings and a wrong column type fail the query, naming the culprit.
    for (sql, word) in [
        (
            format!(
                "SELECT tag, lw_fit(ts, value, '{{\"no\": 1}}', {CADENCE}) FROM readings GROUP BY tag"
            ),
            "blueprint",
        ),
        (
            format!(
                "SELECT tag, lw_ahead(ts, value, '{json}', {CADENCE}, 4, '[2]') FROM readings GROUP BY tag"
            ),
            "levels",
        ),
        (
            format!("SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) FROM texts GROUP BY tag"),
            "time column",
        ),
    ] {
        match lagwise_cluster::collect(&ctx, &sql).await {
            Ok(_) => panic!("accepted: {sql}"),
            Err(e) => assert!(e.to_string().contains(word), "{sql}: {e}"),
        }
    }

    // Nobody went down: both executors alive, and the cluster still answers, including
    // the window function.
    for (node, _) in &mut cluster.executors {
        assert!(node.alive(), "executor pid {} died", node.pid());
    }
    let out = lagwise_cluster::collect(
        &ctx,
        &format!(
            "WITH models AS (
               SELECT tag, fit['stored'] AS stored FROM (
                 SELECT tag, lw_fit(ts, value, '{json}', {CADENCE}) AS fit
                 FROM readings WHERE ts < to_timestamp_millis({split}) GROUP BY tag)
               WHERE fit['error'] IS NULL)
             SELECT r.tag, lw_watch(r.ts, r.value, m.stored, 0.99) OVER (PARTITION BY r.tag ORDER BY r.ts)['z'] AS z
             FROM readings r JOIN models m ON r.tag = m.tag
             WHERE r.ts >= to_timestamp_millis({split})",
            split = ORIGIN + 250 * CADENCE
        ),
    )
    .await
    .unwrap();
    let rows: usize = out.iter().map(|b| b.num_rows()).sum();
    assert_eq!(rows, 50);
}

/// A scheduler address nobody listens on: the client says it cannot reach it.
#[tokio::test]
async fn an_address_without_a_scheduler_is_reported_unreachable() {
    // A port that was free a moment ago (bound, then let go).
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    match lagwise_cluster::connect(&format!("df://127.0.0.1:{port}")).await {
        Err(e @ ClusterError::Unreachable { .. }) => {
            assert!(e.to_string().contains("cannot reach the scheduler"), "{e}")
        }
        Err(other) => panic!("expected Unreachable, got {other:?}"),
        Ok(_) => panic!("connected to nothing"),
    }
}
