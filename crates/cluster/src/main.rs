//! `lagwise-node`: one binary for every machine of a Ballista cluster running lagwise's
//! SQL functions, in one of three roles.
//!
//! ```text
//! lagwise-node scheduler [--bind ADDR] [--port N] [--advertise HOST]
//!                        [--executor-timeout SECS] [--ready-executors N] [--task-attempts N]
//! lagwise-node executor  --scheduler HOST:PORT [--bind ADDR] [--advertise HOST]
//!                        [--data-port N] [--slots N] [--memory-pool BYTES] [--work-dir DIR]
//! lagwise-node sql       --scheduler HOST:PORT [--table NAME=PARQUET_PATH]...
//!                        (--query SQL | --file FILE) [--partitions N]
//! ```
//!
//! Every node binds 127.0.0.1 and a free port unless told otherwise, and prints the
//! address it listens on as its first line. `--exit-with-parent` stops a node when the
//! process that started it ends (for scripts and tests). Log level: the environment
//! variable `LAGWISE_NODE_LOG` (error, warn, info, debug; default warn), to stderr.

use std::io::Write;
use std::net::IpAddr;
use std::process::ExitCode;
use std::time::Duration;

use datafusion::arrow::util::pretty::pretty_format_batches;
use datafusion::prelude::{ParquetReadOptions, SessionConfig};
use lagwise_cluster::{
    BoundScheduler, ClusterError, ExecutorSettings, PlannedExecutor, SchedulerSettings,
};

const USAGE: &str = "usage: lagwise-node (scheduler | executor | sql) [options]; \
                     see the crate's documentation or README for the options";

fn main() -> ExitCode {
    install_logger();
    let args: Vec<String> = std::env::args().skip(1).collect();
    let Some((role, rest)) = args.split_first() else {
        eprintln!("{USAGE}");
        return ExitCode::from(2);
    };
    let options = match Options::parse(rest) {
        Ok(o) => o,
        Err(e) => {
            eprintln!("lagwise-node: {e}\n{USAGE}");
            return ExitCode::from(2);
        }
    };
    if options.flag("exit-with-parent") {
        exit_with_parent();
    }
    let runtime = match tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .thread_stack_size(32 * 1024 * 1024)
        .build()
    {
        Ok(r) => r,
        Err(e) => {
            eprintln!("lagwise-node: cannot start the runtime: {e}");
            return ExitCode::FAILURE;
        }
    };
    let outcome = match role.as_str() {
        "scheduler" => runtime.block_on(scheduler(&options)),
        "executor" => runtime.block_on(executor(&options)),
        "sql" => runtime.block_on(sql(&options)),
        "--help" | "-h" | "help" => {
            println!("{USAGE}");
            Ok(())
        }
        other => Err(ClusterError::Setting(format!("unknown role {other:?}"))),
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("lagwise-node {role}: {e}");
            ExitCode::FAILURE
        }
    }
}

async fn scheduler(o: &Options) -> Result<(), ClusterError> {
    o.only(&[
        "bind",
        "port",
        "advertise",
        "executor-timeout",
        "ready-executors",
        "task-attempts",
        "stock",
        "exit-with-parent",
    ])?;
    let defaults = SchedulerSettings::default();
    let settings = SchedulerSettings {
        bind: o.parsed("bind")?.unwrap_or(defaults.bind),
        port: o.parsed("port")?.unwrap_or(defaults.port),
        advertise: o.value("advertise").map(str::to_string),
        executor_timeout: o
            .parsed::<u64>("executor-timeout")?
            .map_or(defaults.executor_timeout, Duration::from_secs),
        ready_executors: o
            .parsed("ready-executors")?
            .unwrap_or(defaults.ready_executors),
        task_attempts: o.parsed("task-attempts")?.unwrap_or(defaults.task_attempts),
        stock: o.flag("stock"),
    };
    let bound = BoundScheduler::bind(settings)?;
    announce(&format!("scheduler listening on {}", bound.address()));
    bound.serve().await
}

async fn executor(o: &Options) -> Result<(), ClusterError> {
    o.only(&[
        "scheduler",
        "bind",
        "advertise",
        "data-port",
        "slots",
        "memory-pool",
        "work-dir",
        "stock",
        "exit-with-parent",
    ])?;
    let defaults = ExecutorSettings::default();
    let settings = ExecutorSettings {
        scheduler: host_port(o.required("scheduler")?)?,
        bind: o.parsed::<IpAddr>("bind")?.unwrap_or(defaults.bind),
        advertise: o.value("advertise").map(str::to_string),
        data_port: o.parsed("data-port")?.unwrap_or(0),
        slots: o.parsed("slots")?.unwrap_or(defaults.slots),
        memory_pool: o.parsed("memory-pool")?,
        work_dir: o.value("work-dir").map(str::to_string),
        stock: o.flag("stock"),
    };
    let bind = settings.bind;
    let planned = PlannedExecutor::plan(settings)?;
    announce(&format!(
        "executor listening on {bind}:{} (data)",
        planned.data_port()
    ));
    planned.serve().await
}

async fn sql(o: &Options) -> Result<(), ClusterError> {
    o.only(&["scheduler", "table", "query", "file", "partitions"])?;
    let (host, port) = host_port(o.required("scheduler")?)?;
    let query = match (o.value("query"), o.value("file")) {
        (Some(q), None) => q.to_string(),
        (None, Some(f)) => std::fs::read_to_string(f)
            .map_err(|e| ClusterError::Setting(format!("cannot read {f}: {e}")))?,
        _ => {
            return Err(ClusterError::Setting(
                "give the query as exactly one of --query or --file".into(),
            ));
        }
    };
    let mut config = SessionConfig::new();
    if let Some(p) = o.parsed::<usize>("partitions")? {
        config = config.with_target_partitions(p.max(1));
    }
    let ctx = lagwise_cluster::connect_with(&format!("df://{host}:{port}"), config).await?;
    for table in o.values("table") {
        let (name, path) = table.split_once('=').ok_or_else(|| {
            ClusterError::Setting(format!("--table wants NAME=PATH, got {table:?}"))
        })?;
        // A directory is a table of all its Parquet files; the engine only treats a path
        // as a directory when it ends with a slash.
        let path = if std::path::Path::new(path).is_dir() && !path.ends_with('/') {
            format!("{path}/")
        } else {
            path.to_string()
        };
        ctx.register_parquet(name, &path, ParquetReadOptions::default())
            .await?;
    }
    let batches = lagwise_cluster::collect(&ctx, &query).await?;
    let text = pretty_format_batches(&batches).map_err(datafusion::error::DataFusionError::from)?;
    announce(&text.to_string());
    Ok(())
}

/// Prints one line (or block) to stdout and flushes, so a script reading the first line
/// sees it at once.
fn announce(line: &str) {
    let mut out = std::io::stdout().lock();
    let _ = writeln!(out, "{line}");
    let _ = out.flush();
}

fn host_port(text: &str) -> Result<(String, u16), ClusterError> {
    let (host, port) = text
        .rsplit_once(':')
        .ok_or_else(|| ClusterError::Setting(format!("{text:?} is not HOST:PORT")))?;
    let port = port
        .parse::<u16>()
        .map_err(|_| ClusterError::Setting(format!("{port:?} is not a port number")))?;
    if host.is_empty() || port == 0 {
        return Err(ClusterError::Setting(format!("{text:?} is not HOST:PORT")));
    }
    Ok((host.to_string(), port))
}

/// `--name value` pairs and bare `--flag`s, in order.
#[derive(Debug)]
struct Options(Vec<(String, Option<String>)>);

const FLAGS: [&str; 2] = ["exit-with-parent", "stock"];

impl Options {
    fn parse(args: &[String]) -> Result<Self, ClusterError> {
        let mut out = Vec::new();
        let mut it = args.iter();
        while let Some(arg) = it.next() {
            let name = arg
                .strip_prefix("--")
                .ok_or_else(|| ClusterError::Setting(format!("unexpected argument {arg:?}")))?;
            if FLAGS.contains(&name) {
                out.push((name.to_string(), None));
            } else {
                let value = it
                    .next()
                    .ok_or_else(|| ClusterError::Setting(format!("--{name} needs a value")))?;
                out.push((name.to_string(), Some(value.clone())));
            }
        }
        Ok(Self(out))
    }

    fn only(&self, allowed: &[&str]) -> Result<(), ClusterError> {
        match self.0.iter().find(|(n, _)| !allowed.contains(&n.as_str())) {
            Some((n, _)) => Err(ClusterError::Setting(format!(
                "--{n} does not apply to this role"
            ))),
            None => Ok(()),
        }
    }

    fn flag(&self, name: &str) -> bool {
        self.0.iter().any(|(n, _)| n == name)
    }

    fn values<'a>(&'a self, name: &'a str) -> impl Iterator<Item = &'a str> + 'a {
        self.0
            .iter()
            .filter(move |(n, _)| n == name)
            .filter_map(|(_, v)| v.as_deref())
    }

    fn value(&self, name: &str) -> Option<&str> {
        self.0
            .iter()
            .rev()
            .find(|(n, _)| n == name)
            .and_then(|(_, v)| v.as_deref())
    }

    fn required(&self, name: &str) -> Result<&str, ClusterError> {
        self.value(name)
            .ok_or_else(|| ClusterError::Setting(format!("--{name} is required for this role")))
    }

    fn parsed<T: std::str::FromStr>(&self, name: &str) -> Result<Option<T>, ClusterError> {
        self.value(name)
            .map(|v| {
                v.parse::<T>()
                    .map_err(|_| ClusterError::Setting(format!("--{name}: cannot read {v:?}")))
            })
            .transpose()
    }
}

/// Ends this process when its parent ends (the parent of an orphan changes), so that a
/// script or test killed without cleaning up leaves no node running.
fn exit_with_parent() {
    let parent = std::os::unix::process::parent_id();
    std::thread::spawn(move || {
        loop {
            std::thread::sleep(Duration::from_millis(200));
            if std::os::unix::process::parent_id() != parent {
                std::process::exit(0);
            }
        }
    });
}

/// A logger for the engine's messages: stderr, level from `LAGWISE_NODE_LOG`.
struct StderrLog;

static LOGGER: StderrLog = StderrLog;

impl log::Log for StderrLog {
    fn enabled(&self, metadata: &log::Metadata<'_>) -> bool {
        metadata.level() <= log::max_level()
    }
    fn log(&self, record: &log::Record<'_>) {
        if self.enabled(record.metadata()) {
            eprintln!("[{} {}] {}", record.level(), record.target(), record.args());
        }
    }
    fn flush(&self) {}
}

fn install_logger() {
    let level = std::env::var("LAGWISE_NODE_LOG")
        .ok()
        .and_then(|v| v.parse::<log::LevelFilter>().ok())
        .unwrap_or(log::LevelFilter::Warn);
    if log::set_logger(&LOGGER).is_ok() {
        log::set_max_level(level);
    }
}
