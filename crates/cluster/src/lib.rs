//! lagwise's SQL functions on a Ballista cluster.
//!
//! Ballista loads no plugins: a function runs on a node only if that node's binary was
//! built with it. This crate builds the one binary, `lagwise-node`, that every machine of
//! the cluster runs in one of three roles, and the pieces it is made of, for users who
//! would rather build their own:
//!
//! | side | what it needs | here |
//! |---|---|---|
//! | scheduler | a session builder that knows the functions (it decodes the client's plan) | [`scheduler_session`], [`BoundScheduler`] |
//! | executor | a function registry that knows them (it decodes the tasks) | [`executor_registry`], [`PlannedExecutor`] |
//! | client | the functions registered on the context *after* it was made remote | [`connect`] |
//!
//! Functions registered on a session state before it is made remote are dropped without a
//! word by the engine, and a cluster started from the engine's own binaries rejects the
//! functions with messages that do not say what to do; [`connect`] probes the cluster
//! once and [`explain`] turns those messages into [`ClusterError::NodesWithoutFunctions`].
//!
//! Executors *pull* their tasks: each asks the scheduler for work whenever it has a free
//! slot (and at least every 5 s while busy, which is also how the scheduler knows it is
//! alive). With the engine's default, the scheduler pushing tasks to executors, Ballista
//! 55.0 lost track of a surviving executor's slots when another executor died while a
//! later stage was reading its shuffle output — the stage rolled back, the survivor's
//! finished tasks were no longer counted as freeing their slots, and the query waited
//! for ever (`a_killed_executor_never_leaves_a_partial_answer` caught it). Pulling keeps
//! the slot count on the executor, and executors listen on one port (shuffle data) only.
//!
//! Nothing here authenticates or encrypts: the engine's gRPC and Arrow Flight ports
//! accept any peer that can reach them. The nodes bind to 127.0.0.1 unless told
//! otherwise; run them inside a private network (see the crate's README section).

use std::net::{IpAddr, Ipv4Addr, SocketAddr, TcpListener as StdListener};
use std::sync::Arc;
use std::time::Duration;

use ballista::prelude::{SessionConfigExt, SessionContextExt};
use ballista_core::config::TaskSchedulingPolicy;
use ballista_core::registry::BallistaFunctionRegistry;
use ballista_core::utils::default_session_builder;
use ballista_executor::executor_process::{ExecutorProcessConfig, start_executor_process};
use ballista_scheduler::cluster::BallistaCluster;
use ballista_scheduler::config::SchedulerConfig;
use ballista_scheduler::scheduler_process::{create_scheduler, start_grpc_service_with_listener};
use datafusion::arrow::array::RecordBatch;
use datafusion::error::DataFusionError;
use datafusion::execution::SessionState;
use datafusion::prelude::{SessionConfig, SessionContext};
use datafusion_proto::protobuf::{LogicalPlanNode, PhysicalPlanNode};

/// What can go wrong between a client and a cluster.
#[derive(Debug, thiserror::Error)]
pub enum ClusterError {
    /// A node of the cluster was not built with lagwise's functions (started from the
    /// engine's stock binaries, or from another build).
    #[error(
        "the cluster's {side} does not know lagwise's functions: start every scheduler and \
         executor with `lagwise-node scheduler` / `lagwise-node executor` (the same \
         lagwise-node build everywhere), not with the engine's stock binaries. \
         The engine said: {detail}"
    )]
    NodesWithoutFunctions {
        /// "scheduler" or "executors".
        side: &'static str,
        /// The engine's own message.
        detail: String,
    },
    /// An executor could not decode a task. The engine gives the reason only in the
    /// executor's log; the usual one is an executor started from the engine's stock
    /// binary or from another build than the client's.
    #[error(
        "an executor could not decode a task of this query (the reason is in that \
         executor's log). Usually the executors were started from the engine's stock \
         binary or from a different build: start every executor with `lagwise-node \
         executor` of the same build as the client. The engine said: {detail}"
    )]
    TaskRejected {
        /// The engine's own message.
        detail: String,
    },
    /// The scheduler could not be reached or refused the session.
    #[error("cannot reach the scheduler at {url}: {detail}")]
    Unreachable {
        /// The address tried.
        url: String,
        /// The engine's message.
        detail: String,
    },
    /// A setting of a node is not valid.
    #[error("invalid node setting: {0}")]
    Setting(String),
    /// Any other error of the engine, passed on unchanged.
    #[error(transparent)]
    Engine(#[from] DataFusionError),
    /// The engine's node code failed (a port taken, a scheduler gone).
    #[error("node failed: {0}")]
    Node(String),
}

/// Result of this crate's functions.
pub type Result<T> = std::result::Result<T, ClusterError>;

/// The executor's function registry: every function a client's session knows — the
/// engine's defaults, including the list and struct functions (`unnest`'s companions,
/// `['field']` and `[i]` access) that the engine's own executor registry lacks — plus
/// lagwise's aggregate and window functions.
pub fn executor_registry() -> BallistaFunctionRegistry {
    let ctx = SessionContext::new_with_state(
        datafusion::execution::SessionStateBuilder::new()
            .with_default_features()
            .build(),
    );
    lagwise_sql::register(&ctx);
    let state = ctx.state();
    let mut registry = BallistaFunctionRegistry::default();
    registry.scalar_functions.extend(
        state
            .scalar_functions()
            .iter()
            .map(|(k, v)| (k.clone(), v.clone())),
    );
    registry.aggregate_functions.extend(
        state
            .aggregate_functions()
            .iter()
            .map(|(k, v)| (k.clone(), v.clone())),
    );
    registry.window_functions.extend(
        state
            .window_functions()
            .iter()
            .map(|(k, v)| (k.clone(), v.clone())),
    );
    registry
}

/// The scheduler's session builder: the engine's default session with lagwise's
/// functions registered, so that the scheduler can decode plans that call them.
pub fn scheduler_session(config: SessionConfig) -> datafusion::common::Result<SessionState> {
    let state = default_session_builder(config)?;
    let ctx = SessionContext::new_with_state(state);
    lagwise_sql::register(&ctx);
    Ok(ctx.state())
}

/// The shortest executor timeout a scheduler accepts (busy executors report every 5 s).
pub const MIN_EXECUTOR_TIMEOUT_S: u64 = 10;

/// Settings of a scheduler node.
#[derive(Debug, Clone)]
pub struct SchedulerSettings {
    /// Address to bind (default 127.0.0.1).
    pub bind: IpAddr,
    /// Port to bind; 0 picks a free one (default 0).
    pub port: u16,
    /// Host name or address executors and clients use to reach this scheduler
    /// (default: the bound address).
    pub advertise: Option<String>,
    /// How long an executor may stay silent before its tasks are given to others
    /// (default 30 s, at least [`MIN_EXECUTOR_TIMEOUT_S`]; the engine's own default is
    /// 180 s).
    pub executor_timeout: Duration,
    /// Executors needed before the scheduler reports itself ready on `/readyz`
    /// (default 1).
    pub ready_executors: usize,
    /// How often a failed task is retried before the query fails (default 4).
    pub task_attempts: usize,
    /// Start without lagwise's functions, exactly as the engine's stock scheduler does.
    /// Only for checking that clients get a clear error from such a cluster.
    pub stock: bool,
}

impl Default for SchedulerSettings {
    fn default() -> Self {
        Self {
            bind: IpAddr::V4(Ipv4Addr::LOCALHOST),
            port: 0,
            advertise: None,
            executor_timeout: Duration::from_secs(30),
            ready_executors: 1,
            task_attempts: 4,
            stock: false,
        }
    }
}

/// A scheduler whose port is bound and known, ready to serve.
#[derive(Debug)]
pub struct BoundScheduler {
    listener: StdListener,
    settings: SchedulerSettings,
}

impl BoundScheduler {
    /// Binds the scheduler's port (a free one when the settings say 0).
    pub fn bind(settings: SchedulerSettings) -> Result<Self> {
        let listener =
            StdListener::bind(SocketAddr::new(settings.bind, settings.port)).map_err(|e| {
                ClusterError::Node(format!(
                    "cannot bind the scheduler to {}:{}: {e}",
                    settings.bind, settings.port
                ))
            })?;
        listener
            .set_nonblocking(true)
            .map_err(|e| ClusterError::Node(e.to_string()))?;
        Ok(Self { listener, settings })
    }

    /// The address the scheduler listens on.
    pub fn address(&self) -> SocketAddr {
        self.listener
            .local_addr()
            .unwrap_or_else(|_| SocketAddr::new(self.settings.bind, self.settings.port))
    }

    /// Serves until the process is stopped.
    pub async fn serve(self) -> Result<()> {
        let address = self.address();
        let s = &self.settings;
        if s.ready_executors == 0 || s.task_attempts == 0 {
            return Err(ClusterError::Setting(
                "ready executors and task attempts must be at least 1".into(),
            ));
        }
        // Executors report on every poll for work: every 50 ms when idle, at least every
        // 5 s when every slot is busy.
        let timeout = s.executor_timeout.as_secs();
        if timeout < MIN_EXECUTOR_TIMEOUT_S {
            return Err(ClusterError::Setting(format!(
                "an executor timeout of {timeout} s is too short: busy executors report every \
                 5 s, so give at least {MIN_EXECUTOR_TIMEOUT_S} s"
            )));
        }
        let mut config = SchedulerConfig {
            bind_host: address.ip().to_string(),
            bind_port: address.port(),
            external_host: s
                .advertise
                .clone()
                .unwrap_or_else(|| address.ip().to_string()),
            executor_timeout_seconds: timeout,
            no_executors_grace_period_seconds: timeout,
            expire_dead_executor_interval_seconds: (timeout / 4).max(1),
            min_ready_executors: s.ready_executors,
            task_max_failures: s.task_attempts,
            stage_max_failures: s.task_attempts,
            scheduling_policy: TaskSchedulingPolicy::PullStaged,
            ..SchedulerConfig::default()
        };
        if !s.stock {
            config = config.with_override_session_builder(Arc::new(scheduler_session));
        }
        config
            .validate()
            .map_err(|e| ClusterError::Setting(e.to_string()))?;
        let config = Arc::new(config);
        let cluster = BallistaCluster::new_from_config(&config)
            .await
            .map_err(|e| ClusterError::Node(e.to_string()))?;
        let scheduler = create_scheduler::<LogicalPlanNode, PhysicalPlanNode>(cluster, config)
            .await
            .map_err(|e| ClusterError::Node(e.to_string()))?;
        let listener = tokio::net::TcpListener::from_std(self.listener)
            .map_err(|e| ClusterError::Node(e.to_string()))?;
        start_grpc_service_with_listener(listener, scheduler)
            .await
            .map_err(|e| ClusterError::Node(e.to_string()))
    }
}

/// Settings of an executor node.
#[derive(Debug, Clone)]
pub struct ExecutorSettings {
    /// The scheduler's host and port.
    pub scheduler: (String, u16),
    /// Address to bind (default 127.0.0.1).
    pub bind: IpAddr,
    /// Host name or address the scheduler and the other executors use to reach this one
    /// (default: the bound address).
    pub advertise: Option<String>,
    /// Port for shuffle data (Arrow Flight), the executor's only listening port; 0 picks
    /// a free one (default 0).
    pub data_port: u16,
    /// Tasks run at once (default: the machine's cores).
    pub slots: usize,
    /// Memory pool in bytes shared by the running tasks; aggregates beyond it spill
    /// (default: the engine's share of the machine's memory).
    pub memory_pool: Option<u64>,
    /// Directory for shuffle files (default: a temporary directory).
    pub work_dir: Option<String>,
    /// Start without lagwise's functions, exactly as the engine's stock executor does.
    /// Only for checking that clients get a clear error from such a cluster.
    pub stock: bool,
}

impl Default for ExecutorSettings {
    fn default() -> Self {
        Self {
            scheduler: ("127.0.0.1".into(), 50050),
            bind: IpAddr::V4(Ipv4Addr::LOCALHOST),
            advertise: None,
            data_port: 0,
            slots: std::thread::available_parallelism().map_or(1, |n| n.get()),
            memory_pool: None,
            work_dir: None,
            stock: false,
        }
    }
}

/// A free port on `bind`, found by binding port 0 and letting it go (the executor
/// library binds its ports itself; another process could take the port in between, in
/// which case the executor fails to start with a clear message).
fn free_port(bind: IpAddr) -> Result<u16> {
    let listener = StdListener::bind(SocketAddr::new(bind, 0))
        .map_err(|e| ClusterError::Node(format!("cannot find a free port on {bind}: {e}")))?;
    listener
        .local_addr()
        .map(|a| a.port())
        .map_err(|e| ClusterError::Node(e.to_string()))
}

/// An executor with its ports chosen.
#[derive(Debug)]
pub struct PlannedExecutor {
    settings: ExecutorSettings,
}

impl PlannedExecutor {
    /// Chooses the executor's ports (free ones where the settings say 0).
    pub fn plan(mut settings: ExecutorSettings) -> Result<Self> {
        if settings.slots == 0 {
            return Err(ClusterError::Setting(
                "an executor needs at least one slot".into(),
            ));
        }
        if settings.memory_pool == Some(0) {
            return Err(ClusterError::Setting(
                "a memory pool of 0 bytes leaves no room for any task".into(),
            ));
        }
        if settings.data_port == 0 {
            settings.data_port = free_port(settings.bind)?;
        }
        Ok(Self { settings })
    }

    /// The data port (shuffle output is served from it).
    pub fn data_port(&self) -> u16 {
        self.settings.data_port
    }

    /// Registers with the scheduler and runs tasks until stopped.
    pub async fn serve(self) -> Result<()> {
        let s = self.settings;
        let config = ExecutorProcessConfig {
            bind_host: s.bind.to_string(),
            external_host: Some(s.advertise.clone().unwrap_or_else(|| s.bind.to_string())),
            port: s.data_port,
            scheduler_host: s.scheduler.0.clone(),
            scheduler_port: s.scheduler.1,
            scheduler_connect_timeout_seconds: 20,
            vcores: s.slots,
            work_dir: s.work_dir.clone(),
            memory_pool_size: s.memory_pool,
            task_scheduling_policy: TaskSchedulingPolicy::PullStaged,
            print_thread_info: false,
            override_function_registry: (!s.stock).then(|| Arc::new(executor_registry())),
            ..ExecutorProcessConfig::default()
        };
        start_executor_process(Arc::new(config))
            .await
            .map_err(|e| ClusterError::Node(e.to_string()))
    }
}

/// A client session on a cluster: made remote first, lagwise's functions registered
/// after, then one small query that calls a lagwise function to check that the
/// scheduler and an executor know it.
pub async fn connect(scheduler_url: &str) -> Result<SessionContext> {
    connect_with(scheduler_url, SessionConfig::new()).await
}

/// [`connect`] with the caller's session settings (partitions, batch size).
///
/// Ballista's adaptive planner is switched off for the session: lagwise's aggregates gain
/// nothing from it (no joins to re-plan), and with Ballista 55.0 its rollback after an
/// executor dies while a later stage reads the shuffle left the job hanging for good
/// (`a_killed_executor_never_leaves_a_partial_answer` caught it); the static planner
/// re-runs the lost tasks.
pub async fn connect_with(scheduler_url: &str, config: SessionConfig) -> Result<SessionContext> {
    let config = config.with_ballista_adaptive_query_planner(false);
    let state = datafusion::execution::SessionStateBuilder::new()
        .with_default_features()
        .with_config(config)
        .build();
    let ctx = SessionContext::remote_with_state(scheduler_url, state)
        .await
        .map_err(|e| ClusterError::Unreachable {
            url: scheduler_url.to_string(),
            detail: e.to_string(),
        })?;
    lagwise_sql::register(&ctx);
    // The probe calls nothing but a lagwise function on constants: a task it cannot get
    // decoded means executors without lagwise's functions.
    match collect(&ctx, &probe_sql()?).await {
        Err(ClusterError::TaskRejected { detail }) => Err(ClusterError::NodesWithoutFunctions {
            side: "executors",
            detail,
        }),
        // The session is made lazily: an address nobody listens on shows up here.
        Err(ClusterError::Engine(e)) if unreachable(&e) => Err(ClusterError::Unreachable {
            url: scheduler_url.to_string(),
            detail: e.to_string(),
        }),
        Err(other) => Err(other),
        Ok(_) => Ok(ctx),
    }
}

/// Whether an engine error says that the scheduler could not be reached at all.
fn unreachable(error: &DataFusionError) -> bool {
    let text = error.to_string();
    text.contains("ConnectError") || text.contains("Connection refused")
}

/// The probe: a residual check of two readings (too few to fit, so its row holds an
/// error text; what matters is that every side could plan and run the function).
fn probe_sql() -> Result<String> {
    let blueprint = lagwise::Blueprint::builder()
        .nonseasonal(0, 0, 0)
        .build()
        .and_then(|b| lagwise::blueprint_to_json(&b))
        .map_err(|e| ClusterError::Setting(e.to_string()))?;
    Ok(format!(
        "SELECT lw_check(t, v, '{blueprint}', 1000) AS probe \
         FROM (VALUES (0, 1.0), (1000, 2.0)) AS readings(t, v)"
    ))
}

/// Runs a query on a cluster and collects its rows, with the engine's messages about
/// nodes built without lagwise's functions turned into
/// [`ClusterError::NodesWithoutFunctions`] or [`ClusterError::TaskRejected`].
pub async fn collect(ctx: &SessionContext, sql: &str) -> Result<Vec<RecordBatch>> {
    ctx.sql(sql)
        .await
        .map_err(explain)?
        .collect()
        .await
        .map_err(explain)
}

/// Turns the engine's messages about nodes without lagwise's functions into messages
/// that say what to do; other errors pass unchanged.
pub fn explain(error: DataFusionError) -> ClusterError {
    let text = error.to_string();
    if text.contains("ExtensionCodec is not provided") && text.contains("lw_") {
        // Executors decode physical plans (a task that fails to decode fails the job);
        // the scheduler decodes the client's logical plan (the submission fails).
        let side = if text.contains("PhysicalExtensionCodec") {
            "executors"
        } else {
            "scheduler"
        };
        ClusterError::NodesWithoutFunctions { side, detail: text }
    } else if text.contains("could not be prepared or was rejected by executor") {
        ClusterError::TaskRejected { detail: text }
    } else {
        ClusterError::Engine(error)
    }
}
