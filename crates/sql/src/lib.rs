//! lagwise as SQL aggregate functions on DataFusion: each tag's readings, gathered by a
//! `GROUP BY`, are placed on a regular grid and fitted, searched, forecast or checked —
//! inside the query engine, in parallel over partitions, with the rows never leaving it.
//!
//! ```sql
//! SELECT tag, lw_fit(ts, value, '<blueprint JSON>', 900000) AS fit
//! FROM readings GROUP BY tag
//! ```
//!
//! | function | arguments | returns |
//! |---|---|---|
//! | `lw_fit` | `ts, value, blueprint, cadence_ms` | a model row: model, coefficients (term, value, se), sigma2, log_likelihood, aicc, bic, white, whiteness_p, readings, missing, stored, note, error |
//! | `lw_choose` | `ts, value, cadence_ms, period[, cycles]` | a model row for the order search's choice (`cycles` such as `'672:10'`: long cycles by harmonics, each `period:max_harmonics`) |
//! | `lw_ahead` | `ts, value, blueprint, cadence_ms, horizon, levels` | `{steps, error}`: one step per horizon step with its UTC time, mean, sd and bounds per level |
//! | `lw_check` | `ts, value, blueprint, cadence_ms` | the residual check: whiteness, normality, changing variance, verdict |
//! | `lw_watch` (window) | `ts, value, stored, alarm_level` | per new reading: prediction, sd, interval, z, outside, slot (see [`watch_function`]) |
//! | `lw_fit_by_tag`, `lw_choose_by_tag`, `lw_ahead_by_tag`, `lw_check_by_tag` | `tag`, then the same arguments | a list with one row per tag of the group, in tag order: `tag` and the per-tag function's fields |
//!
//! The by-tag functions are for groups of many tags — a bucket of tags, a site, a
//! Hive-style partition of the files:
//!
//! ```sql
//! SELECT f['tag'] AS tag, f['sigma2'] AS sigma2
//! FROM (SELECT unnest(lw_fit_by_tag(tag, ts, value, '<blueprint JSON>', 900000)) AS f
//!       FROM readings GROUP BY bucket)
//! ```
//!
//! Each tag's row equals the per-tag function's row, bit for bit. The engine then hashes a
//! small key per row instead of the tag's text, and the function splits the group's rows
//! by tag itself, one look-up per run of rows of the same tag (historian exports hold a
//! tag's readings together). Every group is evaluated by one engine thread: group by a
//! key with at least as many values as the engine has partitions.
//!
//! `ts` is a timestamp column of any unit (or `BIGINT` epoch milliseconds); `value` any
//! numeric column, `NULL` = a missing reading; `blueprint` the persisted blueprint text
//! (`lagwise::blueprint_to_json`); `cadence_ms` the grid's spacing; `levels` a JSON list
//! such as `'[0.8, 0.95]'`. The settings must be constants: every executor reads them
//! from the query itself (a function object's own fields never travel between engine
//! processes). A malformed setting fails the query with a message that names it; a group
//! that cannot be fitted (no readings, all missing, an infinite reading, too few
//! readings) gets its error text in the row's `error` field and nulls elsewhere.
//!
//! Time order inside the aggregate: the accumulator keeps (time, value) pairs and the grid
//! sorts them, so no `ORDER BY` is needed and the plan carries no extra sort; its state
//! between the partial and final stages is the two lists, and [`Accumulator::size`]
//! counts their capacity so memory pools and spilling see the true cost.

use std::hash::Hash;
use std::sync::Arc;

use datafusion::arrow::array::RecordBatch;
use datafusion::arrow::array::{
    Array, ArrayRef, AsArray, BooleanBuilder, Float64Builder, Int64Builder, ListArray, ListBuilder,
    StringBuilder, StructArray, StructBuilder, TimestampMillisecondBuilder,
};
use datafusion::arrow::buffer::{NullBuffer, OffsetBuffer};
use datafusion::arrow::datatypes::{
    DataType, Field, FieldRef, Fields, Float64Type, Int64Type, Schema, TimeUnit,
    TimestampMillisecondType,
};
use datafusion::common::utils::SingleRowListArrayBuilder;
use datafusion::common::{DataFusionError, Result, ScalarValue, exec_err, plan_err};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::function::{PartitionEvaluatorArgs, WindowUDFFieldArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDF, AggregateUDFImpl, ColumnarValue, EmitTo, GroupsAccumulator,
    PartitionEvaluator, Signature, Volatility, WindowUDF, WindowUDFImpl,
};
use datafusion::prelude::SessionContext;
use lagwise::{Blueprint, FittedModel, GridSettings, SearchSettings};
use std::borrow::Cow;

mod by_tag;
use by_tag::{TagAccumulator, TagGroups, tagged_rows};

/// The functions this crate provides, ready to register.
pub fn functions() -> Vec<AggregateUDF> {
    [false, true]
        .into_iter()
        .flat_map(|tagged| {
            [Job::Fit, Job::Choose, Job::Ahead, Job::Check]
                .map(|job| AggregateUDF::from(SeriesFunction::new(job, tagged)))
        })
        .collect()
}

/// Register every function on `ctx` (for a Ballista client: after the context has been
/// made remote).
pub fn register(ctx: &SessionContext) {
    for f in functions() {
        ctx.register_udaf(f);
    }
    ctx.register_udwf(watch_function());
}

/// Which job a function does.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
enum Job {
    Fit,
    Choose,
    Ahead,
    Check,
}

impl Job {
    fn name(self) -> &'static str {
        match self {
            Job::Fit => "lw_fit",
            Job::Choose => "lw_choose",
            Job::Ahead => "lw_ahead",
            Job::Check => "lw_check",
        }
    }
    /// The name of the function that does the job for every tag of a group.
    fn tagged_name(self) -> &'static str {
        match self {
            Job::Fit => "lw_fit_by_tag",
            Job::Choose => "lw_choose_by_tag",
            Job::Ahead => "lw_ahead_by_tag",
            Job::Check => "lw_check_by_tag",
        }
    }
    /// The function's name, with a tag column first or without.
    fn function_name(self, tagged: bool) -> &'static str {
        if tagged {
            self.tagged_name()
        } else {
            self.name()
        }
    }
    /// An optional last argument after the settings.
    fn optional(self) -> Option<&'static str> {
        match self {
            Job::Choose => Some("cycles"),
            _ => None,
        }
    }
    /// The settings' names as given in a call with `args` arguments (the optional one
    /// included when present), or `None` for a wrong count.
    fn named(self, args: usize) -> Option<Vec<&'static str>> {
        let mut names = self.settings().to_vec();
        if args == 2 + names.len() {
            return Some(names);
        }
        let extra = self.optional()?;
        names.push(extra);
        (args == 2 + names.len()).then_some(names)
    }
    /// The call's shape for messages: `(ts, value, cadence_ms, period[, cycles])`, with
    /// `tag, ` first for the by-tag functions.
    fn call(self, tagged: bool) -> String {
        let lead = if tagged { "tag, " } else { "" };
        let mut out = format!("({lead}ts, value, {}", self.settings().join(", "));
        if let Some(extra) = self.optional() {
            out.push_str(&format!("[, {extra}]"));
        }
        out.push(')');
        out
    }
    /// Arguments after `ts, value`.
    fn settings(self) -> &'static [&'static str] {
        match self {
            Job::Fit | Job::Check => &["blueprint", "cadence_ms"],
            Job::Choose => &["cadence_ms", "period"],
            Job::Ahead => &["blueprint", "cadence_ms", "horizon", "levels"],
        }
    }
}

/// The type a setting is taken as: a one-entry dictionary of `value`. The engine turns
/// every argument of an aggregate into a column for each batch of rows it reads; a plain
/// text constant is copied into every row (the blueprint's JSON: megabytes per batch,
/// most of the cost of reading a table), a dictionary constant is one value and a shared
/// key column.
fn constant_type(value: DataType) -> DataType {
    DataType::Dictionary(Box::new(DataType::Int32), Box::new(value))
}

/// Nullable fields from (name, type) pairs.
fn nullable(spec: Vec<(&str, DataType)>) -> Fields {
    spec.into_iter()
        .map(|(name, t)| Field::new(name, t, true))
        .collect()
}

/// The time argument's type: any timestamp, or integers as epoch milliseconds.
fn time_type(function: &str, t: &DataType) -> Result<DataType> {
    match t {
        DataType::Timestamp(_, _) | DataType::Int64 => Ok(t.clone()),
        DataType::Int32 | DataType::UInt32 | DataType::UInt64 => Ok(DataType::Int64),
        other => plan_err!(
            "{function}: the time column must be a timestamp or BIGINT epoch milliseconds, not {other}"
        ),
    }
}

fn utc_ms() -> DataType {
    DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into()))
}

fn coefficient_fields() -> Fields {
    Fields::from(vec![
        Field::new("term", DataType::Utf8, false),
        Field::new("value", DataType::Float64, false),
        Field::new("se", DataType::Float64, true),
    ])
}

fn model_fields() -> Fields {
    Fields::from(vec![
        Field::new("model", DataType::Utf8, true),
        Field::new(
            "coefficients",
            DataType::List(Arc::new(Field::new(
                "item",
                DataType::Struct(coefficient_fields()),
                true,
            ))),
            true,
        ),
        Field::new("sigma2", DataType::Float64, true),
        Field::new("log_likelihood", DataType::Float64, true),
        Field::new("aicc", DataType::Float64, true),
        Field::new("bic", DataType::Float64, true),
        Field::new("white", DataType::Boolean, true),
        Field::new("whiteness_p", DataType::Float64, true),
        Field::new("readings", DataType::Int64, true),
        Field::new("missing", DataType::Int64, true),
        Field::new("stored", DataType::Utf8, true),
        Field::new("note", DataType::Utf8, true),
        Field::new("error", DataType::Utf8, true),
    ])
}

fn float_list() -> DataType {
    DataType::List(Arc::new(Field::new("item", DataType::Float64, true)))
}

fn step_fields() -> Fields {
    Fields::from(vec![
        Field::new("step", DataType::Int64, false),
        Field::new("at", utc_ms(), true),
        Field::new("mean", DataType::Float64, false),
        Field::new("sd", DataType::Float64, false),
        Field::new("lower", float_list(), true),
        Field::new("upper", float_list(), true),
    ])
}

fn ahead_fields() -> Fields {
    Fields::from(vec![
        Field::new(
            "steps",
            DataType::List(Arc::new(Field::new(
                "item",
                DataType::Struct(step_fields()),
                true,
            ))),
            true,
        ),
        Field::new("error", DataType::Utf8, true),
    ])
}

fn check_fields() -> Fields {
    nullable(vec![
        ("white", DataType::Boolean),
        ("whiteness_p", DataType::Float64),
        ("lags", DataType::Int64),
        ("normality_p", DataType::Float64),
        ("variance_change_p", DataType::Float64),
        ("verdict", DataType::Utf8),
        ("error", DataType::Utf8),
    ])
}

/// One of the crate's aggregate functions.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
struct SeriesFunction {
    job: Job,
    /// Takes a tag column first and does the job for every tag of a group (`lw_*_by_tag`).
    tagged: bool,
    signature: Signature,
}

impl SeriesFunction {
    fn new(job: Job, tagged: bool) -> Self {
        SeriesFunction {
            job,
            tagged,
            signature: Signature::user_defined(Volatility::Immutable),
        }
    }

    /// Types for `ts, value, settings…` (the arguments after the tag).
    fn coerce_series(&self, arg_types: &[DataType]) -> Result<Vec<DataType>> {
        let name = self.name();
        let Some(names) = self.job.named(arg_types.len()) else {
            return plan_err!(
                "{name} takes {}; {} arguments given",
                self.job.call(self.tagged),
                arg_types.len() + usize::from(self.tagged)
            );
        };
        let ts = time_type(name, &arg_types[0])?;
        if !(arg_types[1].is_numeric() || arg_types[1] == DataType::Null) {
            return plan_err!(
                "{name}: the value column must be numeric, not {}",
                arg_types[1]
            );
        }
        let mut out = vec![ts, DataType::Float64];
        for (setting, t) in names.iter().zip(&arg_types[2..]) {
            out.push(match *setting {
                "blueprint" | "levels" | "cycles" => constant_type(DataType::Utf8),
                "cadence_ms" | "horizon" | "period" => {
                    // (Coercion runs again on coerced types: a dictionary of integers.)
                    let value = match t {
                        DataType::Dictionary(_, v) => v.as_ref(),
                        t => t,
                    };
                    if !value.is_integer() {
                        return plan_err!("{name}: {setting} must be an integer, not {t}");
                    }
                    constant_type(DataType::Int64)
                }
                _ => t.clone(),
            });
        }
        Ok(out)
    }

    fn task(&self, exprs: &[Arc<dyn datafusion::physical_expr::PhysicalExpr>]) -> Result<Task> {
        let lead = usize::from(self.tagged);
        if exprs.len() < lead {
            return plan_err!(
                "{}: expected arguments {}",
                self.name(),
                self.job.call(true)
            );
        }
        Task::from_literals(self.job, self.tagged, &exprs[lead..])
    }
}

impl AggregateUDFImpl for SeriesFunction {
    fn name(&self) -> &str {
        self.job.function_name(self.tagged)
    }
    fn signature(&self) -> &Signature {
        &self.signature
    }
    fn coerce_types(&self, arg_types: &[DataType]) -> Result<Vec<DataType>> {
        if !self.tagged {
            return self.coerce_series(arg_types);
        }
        let Some((tag, rest)) = arg_types.split_first() else {
            return plan_err!(
                "{} takes {}; no arguments given",
                self.name(),
                self.job.call(true)
            );
        };
        let tag = match tag {
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => tag.clone(),
            DataType::Null => DataType::Utf8View,
            DataType::Dictionary(_, v)
                if matches!(
                    v.as_ref(),
                    DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View
                ) =>
            {
                DataType::Utf8View
            }
            other => {
                return plan_err!("{}: the tag column must be text, not {other}", self.name());
            }
        };
        let mut out = vec![tag];
        out.extend(self.coerce_series(rest)?);
        Ok(out)
    }
    fn return_type(&self, _arg_types: &[DataType]) -> Result<DataType> {
        let fields = match self.job {
            Job::Fit | Job::Choose => model_fields(),
            Job::Ahead => ahead_fields(),
            Job::Check => check_fields(),
        };
        Ok(if self.tagged {
            tagged_rows(&fields)
        } else {
            DataType::Struct(fields)
        })
    }
    fn accumulator(&self, acc_args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        let task = self.task(acc_args.exprs)?;
        Ok(if self.tagged {
            Box::new(TagAccumulator(TagGroups::new(task)))
        } else {
            Box::new(SeriesAccumulator {
                task,
                times: GroupTimes::default(),
                values: Vec::new(),
            })
        })
    }
    fn groups_accumulator_supported(&self, _args: AccumulatorArgs) -> bool {
        true
    }
    fn create_groups_accumulator(
        &self,
        args: AccumulatorArgs,
    ) -> Result<Box<dyn GroupsAccumulator>> {
        let task = self.task(args.exprs)?;
        Ok(if self.tagged {
            Box::new(TagGroups::new(task))
        } else {
            Box::new(SeriesGroups {
                task,
                gathered: Gathered::default(),
            })
        })
    }
    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        let list = |part: &str, item: DataType| {
            Arc::new(Field::new(
                format!("{}[{part}]", args.name),
                DataType::List(Arc::new(Field::new("item", item, true))),
                true,
            ))
        };
        let mut fields = Vec::with_capacity(3);
        if self.tagged {
            // One tag per reading (the state of a by-tag function is its readings with
            // their tags: only plans with a partial and a final stage use it).
            fields.push(list("tags", DataType::Utf8));
        }
        fields.push(list("times", DataType::Int64));
        fields.push(list("values", DataType::Float64));
        Ok(fields)
    }
}

/// The `cycles` argument of `lw_choose`: `period:max_harmonics` pairs separated by commas,
/// e.g. `'672:10'` (a weekly cycle of quarter-hour readings, up to 10 harmonics) or
/// `'96:8, 672:6'`.
fn cycle_bounds(text: &str, name: &str) -> Result<Vec<(usize, usize)>> {
    text.split(',')
        .filter(|part| !part.trim().is_empty())
        .map(|part| {
            let pair = part
                .split_once(':')
                .and_then(|(p, k)| Some((p.trim().parse().ok()?, k.trim().parse().ok()?)));
            pair.map_or_else(
                || {
                    plan_err!(
                        "{}: cycles '{text}' must be period:max_harmonics pairs separated by commas, such as '672:10' or '96:8, 672:6'",
                        name
                    )
                },
                Ok,
            )
        })
        .collect()
}

/// A function's settings, read from its constant arguments.
#[derive(Debug, Clone)]
struct Task {
    job: Job,
    /// Done for every tag of a group (the `lw_*_by_tag` functions).
    tagged: bool,
    grid: GridSettings,
    blueprint: Option<Blueprint>,
    /// The order search's settings (`lw_choose`).
    search: Option<SearchSettings>,
    horizon: usize,
    levels: Vec<f64>,
}

impl Task {
    /// The function's name, for messages.
    fn name(&self) -> &'static str {
        self.job.function_name(self.tagged)
    }

    /// The settings of `job` from `exprs`: `ts, value, settings…` (after the tag for a
    /// by-tag function).
    fn from_literals(
        job: Job,
        tagged: bool,
        exprs: &[Arc<dyn datafusion::physical_expr::PhysicalExpr>],
    ) -> Result<Self> {
        let name = job.function_name(tagged);
        let Some(names) = job.named(exprs.len()) else {
            return plan_err!("{}: expected arguments {}", name, job.call(tagged));
        };
        // A constant: a literal, or an expression of literals (a cast the planner has not
        // folded), evaluated without rows; a dictionary constant gives its one value.
        let literal = |i: usize| -> Result<ScalarValue> {
            let no_rows = RecordBatch::new_empty(Arc::new(Schema::empty()));
            match exprs[i].evaluate(&no_rows) {
                Ok(ColumnarValue::Scalar(ScalarValue::Dictionary(_, v))) => Ok(*v),
                Ok(ColumnarValue::Scalar(v)) => Ok(v),
                _ => plan_err!(
                    "{}: {} must be a constant (executors read settings from the query)",
                    name,
                    names[i - 2]
                ),
            }
        };
        let text = |i: usize| -> Result<String> {
            match literal(i)? {
                ScalarValue::Utf8(Some(s))
                | ScalarValue::LargeUtf8(Some(s))
                | ScalarValue::Utf8View(Some(s)) => Ok(s),
                other => plan_err!("{}: {} must be text, got {other}", name, names[i - 2]),
            }
        };
        let integer = |i: usize| -> Result<i64> {
            match literal(i)? {
                ScalarValue::Int64(Some(v)) => Ok(v),
                other => other
                    .cast_to(&DataType::Int64)
                    .ok()
                    .and_then(|v| match v {
                        ScalarValue::Int64(Some(v)) => Some(v),
                        _ => None,
                    })
                    .map_or_else(
                        || plan_err!("{}: {} must be an integer, got {other}", name, names[i - 2]),
                        Ok,
                    ),
            }
        };
        let at = |name: &str| {
            2 + names
                .iter()
                .position(|n| *n == name)
                .expect("known setting")
        };
        let cadence = integer(at("cadence_ms"))?;
        let grid = GridSettings::builder(cadence)
            .build()
            .map_err(|e| DataFusionError::Plan(format!("{}: cadence_ms: {e}", name)))?;
        let blueprint = if names.contains(&"blueprint") {
            let json = text(at("blueprint"))?;
            Some(
                lagwise::blueprint_from_json(&json)
                    .map_err(|e| DataFusionError::Plan(format!("{}: blueprint: {e}", name)))?,
            )
        } else {
            None
        };
        let period = if names.contains(&"period") {
            let p = integer(at("period"))?;
            if !(1..=lagwise::MAX_PERIOD as i64).contains(&p) {
                return plan_err!(
                    "{}: period {p} must be 1 (no seasonal cycle) to {}",
                    name,
                    lagwise::MAX_PERIOD
                );
            }
            p as usize
        } else {
            1
        };
        let search =
            if job == Job::Choose {
                let mut settings = SearchSettings::builder();
                settings.period(period);
                if names.contains(&"cycles") {
                    for (cycle, bound) in cycle_bounds(&text(at("cycles"))?, name)? {
                        settings.cycle(cycle, bound);
                    }
                }
                Some(settings.build().map_err(|e| {
                    DataFusionError::Plan(format!("{}: search settings: {e}", name))
                })?)
            } else {
                None
            };
        let (horizon, levels) = if job == Job::Ahead {
            let h = integer(at("horizon"))?;
            if !(1..=100_000).contains(&h) {
                return plan_err!("{}: horizon {h} must be 1 to 100,000 steps", name);
            }
            let text = text(at("levels"))?;
            let levels: Vec<f64> = serde_json::from_str(&text).map_err(|e| {
                DataFusionError::Plan(format!(
                    "{}: levels must be a JSON list of numbers such as [0.8, 0.95]: {e}",
                    name
                ))
            })?;
            if levels.is_empty() || levels.iter().any(|l| !(*l > 0.0 && *l < 1.0)) {
                return plan_err!(
                    "{}: levels {text} must be one or more numbers in (0, 1)",
                    name
                );
            }
            (h as usize, levels)
        } else {
            (0, Vec::new())
        };
        Ok(Task {
            job,
            tagged,
            grid,
            blueprint,
            search,
            horizon,
            levels,
        })
    }
}

/// Gathers one group's (time, value) pairs; fits at the end.
#[derive(Debug)]
struct SeriesAccumulator {
    task: Task,
    /// Epoch milliseconds.
    times: GroupTimes,
    /// NaN = missing.
    values: Vec<f64>,
}

/// Epoch milliseconds from a timestamp or integer column; a null time is an error.
fn times_ms<'a>(array: &'a ArrayRef, what: &str) -> Result<Cow<'a, [i64]>> {
    if array.null_count() > 0 {
        return exec_err!("{what}: a reading has no time (NULL timestamp)");
    }
    // (multiply, divide) from the column's unit to milliseconds; milliseconds are
    // borrowed as they are.
    let (up, down): (i64, i64) = match array.data_type() {
        DataType::Timestamp(TimeUnit::Millisecond, _) => {
            return Ok(Cow::Borrowed(
                array.as_primitive::<TimestampMillisecondType>().values(),
            ));
        }
        DataType::Int64 => return Ok(Cow::Borrowed(array.as_primitive::<Int64Type>().values())),
        DataType::Timestamp(TimeUnit::Second, _) => (1_000, 1),
        DataType::Timestamp(TimeUnit::Microsecond, _) => (1, 1_000),
        DataType::Timestamp(TimeUnit::Nanosecond, _) => (1, 1_000_000),
        other => return exec_err!("{what}: time column of type {other}"),
    };
    let raw = datafusion::arrow::compute::cast(array, &DataType::Int64)?;
    Ok(Cow::Owned(
        raw.as_primitive::<Int64Type>()
            .values()
            .iter()
            .map(|v| v.saturating_mul(up).div_euclid(down))
            .collect(),
    ))
}

/// Readings as `f64` from any numeric column, `NULL` as NaN (missing); a `Float64` column
/// without nulls is borrowed as it is.
fn readings_of(array: &ArrayRef) -> Result<Cow<'_, [f64]>> {
    if array.null_count() == 0
        && let Some(p) = array.as_primitive_opt::<Float64Type>()
    {
        return Ok(Cow::Borrowed(p.values()));
    }
    let v = datafusion::arrow::compute::cast(array, &DataType::Float64)?;
    let v = v.as_primitive::<Float64Type>();
    Ok(Cow::Owned(
        (0..v.len())
            .map(|i| if v.is_null(i) { f64::NAN } else { v.value(i) })
            .collect(),
    ))
}

impl Accumulator for SeriesAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let what = self.task.name();
        let times = times_ms(&values[0], what)?;
        let readings = readings_of(&values[1])?;
        if times.len() != readings.len() {
            return exec_err!("{what}: time and value columns differ in length");
        }
        self.times.extend(&times);
        self.values.extend_from_slice(&readings);
        Ok(())
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let (times, values) = (states[0].as_list::<i32>(), states[1].as_list::<i32>());
        for row in 0..times.len() {
            if times.is_null(row) {
                continue;
            }
            self.times
                .extend(times.value(row).as_primitive::<Int64Type>().values());
            let v = values.value(row);
            self.values.extend_from_slice(&readings_of(&v)?);
        }
        Ok(())
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        let times = std::mem::take(&mut self.times).into_vec();
        let times: ArrayRef = Arc::new(datafusion::arrow::array::Int64Array::from(times));
        let values: ArrayRef = Arc::new(datafusion::arrow::array::Float64Array::from(
            std::mem::take(&mut self.values),
        ));
        Ok(vec![
            SingleRowListArrayBuilder::new(times).build_list_scalar(),
            SingleRowListArrayBuilder::new(values).build_list_scalar(),
        ])
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        let outcome = run(&self.task, &self.times, &self.values);
        let array = result_rows(&self.task, std::iter::once(outcome));
        Ok(ScalarValue::Struct(Arc::new(array)))
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self)
            + self.times.heap_bytes()
            + self.values.capacity() * std::mem::size_of::<f64>()
            + self.task.levels.capacity() * std::mem::size_of::<f64>()
    }
}

/// Every group's (time, value) pairs of one partition, by group index: the engine's
/// grouped path, with no accumulator object, batch slice or `ScalarValue` per group. Rows
/// are appended to their group's vectors as they come; states leave as two list arrays
/// and results as one struct array for all groups emitted. Each group's result is the
/// same function of its readings as [`SeriesAccumulator`]'s.
#[derive(Debug)]
struct SeriesGroups {
    task: Task,
    gathered: Gathered,
}

/// Series gathered by index: each one's times and readings.
#[derive(Debug, Default)]
struct Gathered {
    /// Epoch milliseconds, per series.
    times: Vec<GroupTimes>,
    /// NaN = missing, per series.
    values: Vec<Vec<f64>>,
    /// Heap bytes of the series' vectors' buffers (kept current as they grow).
    bytes: usize,
}

/// One group's timestamps: while they step evenly (a healthy sensor's readings in time
/// order, the usual case) only the first, the step and the count are kept — half the
/// memory a group holds until it is evaluated; the first time that breaks the pattern
/// turns them into a list.
#[derive(Debug, Clone, PartialEq)]
enum GroupTimes {
    /// `first + k·step` for k < `count`.
    Even { first: i64, step: i64, count: usize },
    /// As they came.
    Listed(Vec<i64>),
}

impl Default for GroupTimes {
    fn default() -> Self {
        GroupTimes::Even {
            first: 0,
            step: 0,
            count: 0,
        }
    }
}

impl GroupTimes {
    fn len(&self) -> usize {
        match self {
            GroupTimes::Even { count, .. } => *count,
            GroupTimes::Listed(v) => v.len(),
        }
    }

    /// Heap bytes held.
    fn heap_bytes(&self) -> usize {
        match self {
            GroupTimes::Even { .. } => 0,
            GroupTimes::Listed(v) => v.capacity() * std::mem::size_of::<i64>(),
        }
    }

    /// The k-th time of an even run (`None` on overflow).
    fn even_at(first: i64, step: i64, k: usize) -> Option<i64> {
        i64::try_from(k)
            .ok()
            .and_then(|k| step.checked_mul(k))
            .and_then(|d| first.checked_add(d))
    }

    /// Appends `times`, staying even while they continue the pattern.
    fn extend(&mut self, mut times: &[i64]) {
        if let GroupTimes::Even { first, step, count } = self {
            let (mut f, mut st, mut n) = (*first, *step, *count);
            let mut rest = times;
            // The first two times set the pattern.
            while n < 2 {
                let Some((&t, tail)) = rest.split_first() else {
                    break;
                };
                if n == 0 {
                    f = t;
                } else if let Some(d) = t.checked_sub(f) {
                    st = d;
                } else {
                    break;
                }
                n += 1;
                rest = tail;
            }
            if n >= 2 {
                // Each time one step on from the one before (one addition per reading);
                // the last one's time computed directly then confirms that every
                // `first + k·step` of the run is exact (|k·step| grows with k).
                let mut last = Self::even_at(f, st, n - 1).unwrap_or(f);
                let mut run = rest
                    .iter()
                    .take_while(|&&t| {
                        let next = last.checked_add(st);
                        last = t;
                        next == Some(t)
                    })
                    .count();
                if run > 0 && Self::even_at(f, st, n + run - 1).is_none() {
                    run = (0..run)
                        .take_while(|&i| Self::even_at(f, st, n + i) == Some(rest[i]))
                        .count();
                }
                n += run;
                rest = &rest[run..];
            }
            (*first, *step, *count) = (f, st, n);
            if rest.is_empty() {
                return;
            }
            let mut listed = Vec::with_capacity(n + rest.len());
            listed.extend((0..n).map(|k| f + st * k as i64));
            *self = GroupTimes::Listed(listed);
            times = rest;
        }
        if let GroupTimes::Listed(v) = self {
            v.extend_from_slice(times);
        }
    }

    /// The times, one per reading.
    fn into_vec(self) -> Vec<i64> {
        match self {
            GroupTimes::Listed(v) => v,
            even => {
                let mut buffer = Vec::with_capacity(even.len());
                even.as_slice(&mut buffer);
                buffer
            }
        }
    }

    /// The times as a slice, written into `buffer` when they are even.
    fn as_slice<'a>(&'a self, buffer: &'a mut Vec<i64>) -> &'a [i64] {
        match self {
            GroupTimes::Listed(v) => v,
            GroupTimes::Even { first, step, count } => {
                buffer.clear();
                buffer.extend((0..*count).map(|k| first + step * k as i64));
                buffer
            }
        }
    }
}

impl Gathered {
    fn grow_to(&mut self, groups: usize) {
        if self.times.len() < groups {
            self.times.resize_with(groups, GroupTimes::default);
            self.values.resize_with(groups, Vec::new);
        }
    }

    /// Append readings to group `g`, keeping the byte count current.
    fn extend(&mut self, g: usize, times: &[i64], values: &[f64]) {
        let (t, v) = (&mut self.times[g], &mut self.values[g]);
        let before = t.heap_bytes() + v.capacity() * 8;
        t.extend(times);
        v.extend_from_slice(values);
        self.bytes = self.bytes + t.heap_bytes() + v.capacity() * 8 - before;
    }

    /// Rows `rows` of a batch appended to series `g`: all of them at once, or those
    /// that `filter` passes.
    fn extend_rows(
        &mut self,
        g: usize,
        times: &[i64],
        readings: &[f64],
        rows: std::ops::Range<usize>,
        filter: Option<&datafusion::arrow::array::BooleanArray>,
    ) {
        match filter {
            None => self.extend(g, &times[rows.clone()], &readings[rows]),
            Some(f) => {
                for i in rows.filter(|&i| f.is_valid(i) && f.value(i)) {
                    self.extend(g, &times[i..=i], &readings[i..=i]);
                }
            }
        }
    }

    /// The groups `emit_to` asks for, removed from the accumulator.
    fn take(&mut self, emit_to: EmitTo) -> (Vec<GroupTimes>, Vec<Vec<f64>>) {
        let times = emit_to.take_needed(&mut self.times);
        let values = emit_to.take_needed(&mut self.values);
        let gone: usize = times
            .iter()
            .zip(&values)
            .map(|(t, v)| t.heap_bytes() + v.capacity() * 8)
            .sum();
        self.bytes -= gone.min(self.bytes);
        (times, values)
    }

    /// Heap bytes held, the index vectors included.
    fn heap_bytes(&self) -> usize {
        self.bytes
            + self.times.capacity() * std::mem::size_of::<GroupTimes>()
            + self.values.capacity() * std::mem::size_of::<Vec<f64>>()
    }
}

impl GroupsAccumulator for SeriesGroups {
    fn update_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        opt_filter: Option<&datafusion::arrow::array::BooleanArray>,
        total_num_groups: usize,
    ) -> Result<()> {
        let what = self.task.name();
        let times = times_ms(&values[0], what)?;
        let readings = readings_of(&values[1])?;
        if times.len() != readings.len() || times.len() != group_indices.len() {
            return exec_err!("{what}: time and value columns differ in length");
        }
        self.gathered.grow_to(total_num_groups);
        // Rows of one group usually come in runs (each tag's readings in time order):
        // one append per run.
        let mut row = 0;
        while row < group_indices.len() {
            let g = group_indices[row];
            let end = row
                + group_indices[row..]
                    .iter()
                    .position(|&h| h != g)
                    .unwrap_or(group_indices.len() - row);
            self.gathered
                .extend_rows(g, &times, &readings, row..end, opt_filter);
            row = end;
        }
        Ok(())
    }

    fn merge_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        total_num_groups: usize,
    ) -> Result<()> {
        let (times, readings) = (values[0].as_list::<i32>(), values[1].as_list::<i32>());
        self.gathered.grow_to(total_num_groups);
        for (row, &g) in group_indices.iter().enumerate() {
            if times.is_null(row) {
                continue;
            }
            let t = times.value(row);
            let t = t.as_primitive::<Int64Type>().values();
            let v = readings.value(row);
            // The states this accumulator writes hold plain f64 (NaN = missing): taken as
            // they are; anything else is converted.
            match v.as_primitive_opt::<Float64Type>() {
                Some(p) if p.null_count() == 0 => self.gathered.extend(g, t, p.values()),
                _ => {
                    let v = readings_of(&v)?;
                    self.gathered.extend(g, t, &v);
                }
            }
        }
        Ok(())
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        use datafusion::arrow::array::{Float64Array, Int64Array};
        let (times, values) = self.gathered.take(emit_to);
        let offsets = OffsetBuffer::<i32>::from_lengths(times.iter().map(GroupTimes::len));
        let mut all = Vec::with_capacity(times.iter().map(GroupTimes::len).sum());
        let mut buffer = Vec::new();
        for t in &times {
            all.extend_from_slice(t.as_slice(&mut buffer));
        }
        Ok(state_lists(
            &offsets,
            None,
            vec![
                Arc::new(Int64Array::from(all)),
                Arc::new(Float64Array::from(values.concat())),
            ],
        ))
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        let (times, values) = self.gathered.take(emit_to);
        let task = &self.task;
        let outcomes = times.iter().zip(&values).map(|(t, v)| run(task, t, v));
        Ok(Arc::new(result_rows(task, outcomes)))
    }

    /// Each row as its own group's state (one reading per list; a row the filter drops is
    /// a null list, which `merge_batch` skips).
    fn convert_to_state(
        &self,
        values: &[ArrayRef],
        opt_filter: Option<&datafusion::arrow::array::BooleanArray>,
    ) -> Result<Vec<ArrayRef>> {
        use datafusion::arrow::array::{Float64Array, Int64Array};
        let what = self.task.name();
        let times = times_ms(&values[0], what)?;
        let readings = readings_of(&values[1])?;
        Ok(one_row_lists(
            vec![
                Arc::new(Int64Array::from(times.into_owned())),
                Arc::new(Float64Array::from(readings.into_owned())),
            ],
            opt_filter,
        ))
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self)
            + self.gathered.heap_bytes()
            + self.task.levels.capacity() * std::mem::size_of::<f64>()
    }
}

/// State columns: each of `arrays` cut into lists at `offsets` (one list per group),
/// with `nulls` for groups that have no state.
fn state_lists(
    offsets: &OffsetBuffer<i32>,
    nulls: Option<NullBuffer>,
    arrays: Vec<ArrayRef>,
) -> Vec<ArrayRef> {
    arrays
        .into_iter()
        .map(|array| -> ArrayRef {
            Arc::new(ListArray::new(
                Arc::new(Field::new("item", array.data_type().clone(), true)),
                offsets.clone(),
                array,
                nulls.clone(),
            ))
        })
        .collect()
}

/// Each row of `arrays` as its own group's state: one-entry lists, a row the filter drops
/// a null list (which `merge_batch` skips).
fn one_row_lists(
    arrays: Vec<ArrayRef>,
    opt_filter: Option<&datafusion::arrow::array::BooleanArray>,
) -> Vec<ArrayRef> {
    let n = arrays.first().map_or(0, |a| a.len());
    let offsets = OffsetBuffer::<i32>::from_lengths(std::iter::repeat_n(1, n));
    let nulls = opt_filter.map(|f| {
        NullBuffer::from(
            (0..n)
                .map(|i| f.is_valid(i) && f.value(i))
                .collect::<Vec<_>>(),
        )
    });
    state_lists(&offsets, nulls, arrays)
}

/// What one group comes to.
struct Outcome {
    model: FittedModel,
    note: Option<String>,
    present: usize,
    missing: usize,
}

thread_local! {
    /// One fit workspace per engine thread, reused by every group that thread evaluates
    /// (as a fleet reuses one per worker): the fit's buffers are not allocated anew for
    /// each tag. Results do not depend on what a workspace held before.
    static WORKSPACE: std::cell::RefCell<lagwise::FitWorkspace> =
        std::cell::RefCell::new(lagwise::FitWorkspace::new());
}

fn run(task: &Task, times: &GroupTimes, values: &[f64]) -> std::result::Result<Outcome, String> {
    let grid = match *times {
        _ if times.len() == 0 => return Err("the group has no readings".into()),
        // An even run goes onto the grid without a timestamp per reading.
        GroupTimes::Even { first, step, .. } => {
            lagwise::place_evenly(first, step, values, &task.grid)
        }
        GroupTimes::Listed(ref t) => lagwise::place_on_grid(t, values, &task.grid),
    }
    .map_err(|e| e.to_string())?;
    let present = grid.values.iter().filter(|v| !v.is_nan()).count();
    let missing = grid.values.len() - present;
    let (model, note) = match (&task.blueprint, task.job) {
        (_, Job::Choose) => {
            let settings = task.search.clone().unwrap_or_default();
            let out = lagwise::search_orders(&grid.values, &settings).map_err(|e| e.to_string())?;
            (out.model, Some(out.explanation))
        }
        (Some(bp), _) => {
            let fitted = WORKSPACE.with_borrow_mut(|ws| bp.fit_with(&grid.values, ws));
            (fitted.map_err(|e| e.to_string())?, None)
        }
        (None, _) => return Err("no blueprint".into()),
    };
    Ok(Outcome {
        model: model.with_time_axis(grid.axis),
        note,
        present,
        missing,
    })
}

/// The result rows of `outcomes` (in order) as one struct array of `job`'s type: one
/// builder for all of a batch's groups.
fn result_rows(
    task: &Task,
    outcomes: impl ExactSizeIterator<Item = std::result::Result<Outcome, String>>,
) -> StructArray {
    let fields = match task.job {
        Job::Fit | Job::Choose => model_fields(),
        Job::Ahead => ahead_fields(),
        Job::Check => check_fields(),
    };
    let mut b = StructBuilder::from_fields(fields, outcomes.len());
    for outcome in outcomes {
        match task.job {
            Job::Fit | Job::Choose => append_model(&mut b, outcome),
            Job::Ahead => append_ahead(&mut b, outcome, task),
            Job::Check => append_check(&mut b, outcome),
        }
        b.append(true);
    }
    b.finish()
}

fn append_model(b: &mut StructBuilder, outcome: std::result::Result<Outcome, String>) {
    {
        let (o, err) = match &outcome {
            Ok(o) => (Some(o), None),
            Err(e) => (None, Some(e.as_str())),
        };
        let m = o.map(|o| &o.model);
        let check = m.and_then(|m| m.residual_check(m.default_check_lags(), 0.05).ok());
        let criteria = m.and_then(|m| m.criteria().ok());
        b.field_builder::<StringBuilder>(0)
            .expect("model")
            .append_option(m.map(|m| m.blueprint().shape_label()));
        {
            let list = b
                .field_builder::<ListBuilder<Box<dyn datafusion::arrow::array::ArrayBuilder>>>(1)
                .expect("coefficients");
            match m {
                Some(m) => {
                    let items = list
                        .values()
                        .as_any_mut()
                        .downcast_mut::<StructBuilder>()
                        .expect("coefficient struct");
                    for c in m.coefficients() {
                        items
                            .field_builder::<StringBuilder>(0)
                            .expect("term")
                            .append_value(c.term.to_string());
                        items
                            .field_builder::<Float64Builder>(1)
                            .expect("value")
                            .append_value(c.value);
                        items
                            .field_builder::<Float64Builder>(2)
                            .expect("se")
                            .append_option(c.std_error);
                        items.append(true);
                    }
                    list.append(true);
                }
                None => list.append(false),
            }
        }
        let f = |b: &mut StructBuilder, i: usize, v: Option<f64>| {
            b.field_builder::<Float64Builder>(i)
                .expect("float")
                .append_option(v);
        };
        f(b, 2, m.map(|m| m.innovation_variance()));
        f(b, 3, m.map(|m| m.log_likelihood().value()));
        f(b, 4, criteria.as_ref().and_then(|c| c.akaike_corrected));
        f(b, 5, criteria.as_ref().map(|c| c.schwarz));
        b.field_builder::<BooleanBuilder>(6)
            .expect("white")
            .append_option(check.as_ref().map(|c| c.white));
        f(
            b,
            7,
            check.as_ref().and_then(|c| {
                c.portmanteau
                    .rows()
                    .last()
                    .and_then(|r| r.ljung_box_p_value)
            }),
        );
        let i = |b: &mut StructBuilder, k: usize, v: Option<usize>| {
            b.field_builder::<Int64Builder>(k)
                .expect("integer")
                .append_option(v.map(|v| v as i64));
        };
        i(b, 8, o.map(|o| o.present));
        i(b, 9, o.map(|o| o.missing));
        b.field_builder::<StringBuilder>(10)
            .expect("stored")
            .append_option(m.and_then(|m| lagwise::model_to_json(m).ok()));
        b.field_builder::<StringBuilder>(11)
            .expect("note")
            .append_option(o.and_then(|o| o.note.clone()));
        b.field_builder::<StringBuilder>(12)
            .expect("error")
            .append_option(err);
    }
}

fn append_ahead(b: &mut StructBuilder, outcome: std::result::Result<Outcome, String>, task: &Task) {
    let forecast = outcome.and_then(|o| {
        o.model
            .forecast(task.horizon, &task.levels)
            .map_err(|e| e.to_string())
    });
    {
        {
            let list = b
                .field_builder::<ListBuilder<Box<dyn datafusion::arrow::array::ArrayBuilder>>>(0)
                .expect("steps");
            match &forecast {
                Ok(fc) => {
                    let items = list
                        .values()
                        .as_any_mut()
                        .downcast_mut::<StructBuilder>()
                        .expect("step struct");
                    for s in &fc.steps {
                        items
                            .field_builder::<Int64Builder>(0)
                            .expect("step")
                            .append_value(s.step as i64);
                        items
                            .field_builder::<TimestampMillisecondBuilder>(1)
                            .expect("at")
                            .append_option(s.time_ms);
                        items
                            .field_builder::<Float64Builder>(2)
                            .expect("mean")
                            .append_value(s.mean);
                        items
                            .field_builder::<Float64Builder>(3)
                            .expect("sd")
                            .append_value(s.sd);
                        for (k, bound) in [(4, true), (5, false)] {
                            let l = items
                                .field_builder::<ListBuilder<Box<dyn datafusion::arrow::array::ArrayBuilder>>>(k)
                                .expect("bounds");
                            let vals = l
                                .values()
                                .as_any_mut()
                                .downcast_mut::<Float64Builder>()
                                .expect("bound values");
                            for i in &s.intervals {
                                vals.append_value(if bound { i.lower } else { i.upper });
                            }
                            l.append(true);
                        }
                        items.append(true);
                    }
                    list.append(true);
                }
                Err(_) => list.append(false),
            }
        }
        b.field_builder::<StringBuilder>(1)
            .expect("error")
            .append_option(forecast.as_ref().err());
    }
}

fn append_check(b: &mut StructBuilder, outcome: std::result::Result<Outcome, String>) {
    let check = outcome.and_then(|o| {
        let m = &o.model;
        m.residual_check(m.default_check_lags(), 0.05)
            .map_err(|e| e.to_string())
    });
    {
        let c = check.as_ref().ok();
        b.field_builder::<BooleanBuilder>(0)
            .expect("white")
            .append_option(c.map(|c| c.white));
        b.field_builder::<Float64Builder>(1)
            .expect("p")
            .append_option(c.and_then(|c| {
                c.portmanteau
                    .rows()
                    .last()
                    .and_then(|r| r.ljung_box_p_value)
            }));
        b.field_builder::<Int64Builder>(2)
            .expect("lags")
            .append_option(c.map(|c| c.portmanteau.rows().len() as i64));
        b.field_builder::<Float64Builder>(3)
            .expect("normality")
            .append_option(c.and_then(|c| c.normality.as_ref().map(|t| t.p_value)));
        b.field_builder::<Float64Builder>(4)
            .expect("variance")
            .append_option(c.and_then(|c| c.variance_change.as_ref().map(|t| t.p_value)));
        b.field_builder::<StringBuilder>(5)
            .expect("verdict")
            .append_option(c.map(|c| c.verdict_line()));
        b.field_builder::<StringBuilder>(6)
            .expect("error")
            .append_option(check.as_ref().err());
    }
}

/// The window function `lw_watch(ts, value, stored, alarm_level) OVER (PARTITION BY tag
/// ORDER BY ts)`: each new reading checked against its one-step prediction interval by a
/// monitor that starts where the stored model's series ended (`stored` is `lw_fit`'s
/// `stored` field, e.g. joined from a models table). Rows are placed on the model's time
/// axis by their times (slots without a row are missing readings, so the monitor's time
/// runs on); a row at or before a slot already seen, or a partition without a usable
/// model, gets a null result.
pub fn watch_function() -> WindowUDF {
    WindowUDF::from(WatchFunction {
        signature: Signature::user_defined(Volatility::Immutable),
    })
}

fn watch_fields() -> Fields {
    nullable(vec![
        ("predicted", DataType::Float64),
        ("sd", DataType::Float64),
        ("lower", DataType::Float64),
        ("upper", DataType::Float64),
        ("z", DataType::Float64),
        ("outside", DataType::Boolean),
        ("at", DataType::Int64),
    ])
}

#[derive(Debug, Clone, PartialEq, Eq, Hash)]
struct WatchFunction {
    signature: Signature,
}

impl WindowUDFImpl for WatchFunction {
    fn name(&self) -> &str {
        "lw_watch"
    }
    fn signature(&self) -> &Signature {
        &self.signature
    }
    fn coerce_types(&self, arg_types: &[DataType]) -> Result<Vec<DataType>> {
        if arg_types.len() != 4 {
            return plan_err!(
                "lw_watch takes (ts, value, stored model, alarm level); {} arguments given",
                arg_types.len()
            );
        }
        let ts = time_type("lw_watch", &arg_types[0])?;
        if !matches!(
            arg_types[2],
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View
        ) {
            return plan_err!(
                "lw_watch: the stored model must be text, not {}",
                arg_types[2]
            );
        }
        Ok(vec![
            ts,
            DataType::Float64,
            DataType::Utf8,
            DataType::Float64,
        ])
    }
    fn partition_evaluator(
        &self,
        _args: PartitionEvaluatorArgs,
    ) -> Result<Box<dyn PartitionEvaluator>> {
        Ok(Box::<WatchEvaluator>::default())
    }
    fn field(&self, field_args: WindowUDFFieldArgs) -> Result<FieldRef> {
        Ok(Arc::new(Field::new(
            field_args.name(),
            DataType::Struct(watch_fields()),
            true,
        )))
    }
}

/// The monitor of one partition (one tag): made from the first row that carries a stored
/// model and an alarm level, then fed every row in time order.
#[derive(Debug, Default)]
struct WatchEvaluator {
    watch: Option<(lagwise::Monitor, lagwise::TimeAxis)>,
}

/// One row's inputs, read from the argument arrays.
struct WatchRow<'a> {
    time: i64,
    reading: f64,
    stored: Option<&'a str>,
    level: Option<f64>,
}

impl WatchEvaluator {
    /// Checks one reading: `None` when the partition has no usable model yet or the
    /// reading falls before the monitor's next slot (already seen).
    fn check(&mut self, row: WatchRow<'_>) -> Option<lagwise::ReadingCheck> {
        if self.watch.is_none() {
            let (text, level) = (row.stored?, row.level?);
            let model = lagwise::model_from_json(text).ok()?;
            let axis = model.time_axis()?;
            self.watch = Some((model.monitor(level).ok()?, axis));
        }
        let (m, axis) = self.watch.as_mut()?;
        let (slot, _) = axis.nearest_slot(row.time)?;
        if slot < m.next_index() {
            return None;
        }
        while m.next_index() < slot {
            m.observe(f64::NAN).ok()?;
        }
        m.observe(row.reading).ok()
    }

    /// Checks rows `rows` of the argument arrays into `b` (only those rows are read).
    fn check_rows(
        &mut self,
        values: &[ArrayRef],
        rows: std::ops::Range<usize>,
        b: &mut StructBuilder,
    ) -> Result<()> {
        let (start, n) = (rows.start, rows.len());
        let (time_column, reading_column) = (values[0].slice(start, n), values[1].slice(start, n));
        let times = times_ms(&time_column, "lw_watch")?;
        let readings = readings_of(&reading_column)?;
        let stored = datafusion::arrow::compute::cast(&values[2].slice(start, n), &DataType::Utf8)?;
        let stored = stored.as_string::<i32>();
        let levels =
            datafusion::arrow::compute::cast(&values[3].slice(start, n), &DataType::Float64)?;
        let levels = levels.as_primitive::<Float64Type>();
        for row in 0..n {
            let check = self.check(WatchRow {
                time: times[row],
                reading: readings[row],
                stored: (!stored.is_null(row)).then(|| stored.value(row)),
                level: (!levels.is_null(row)).then(|| levels.value(row)),
            });
            let f = |b: &mut StructBuilder, k: usize, v: Option<f64>| {
                b.field_builder::<Float64Builder>(k)
                    .expect("float")
                    .append_option(v);
            };
            f(b, 0, check.map(|c| c.predicted));
            f(b, 1, check.map(|c| c.sd));
            f(b, 2, check.map(|c| c.lower));
            f(b, 3, check.map(|c| c.upper));
            f(b, 4, check.and_then(|c| c.standardized));
            b.field_builder::<BooleanBuilder>(5)
                .expect("outside")
                .append_option(check.map(|c| c.outside));
            b.field_builder::<Int64Builder>(6)
                .expect("at")
                .append_option(check.map(|c| c.index as i64));
            b.append(true);
        }
        Ok(())
    }
}

impl PartitionEvaluator for WatchEvaluator {
    /// Row by row, in time order, needing nothing but the current row: the engine can
    /// stream a partition through the monitor instead of holding it whole (and plans a
    /// streaming window operator, which also travels between cluster nodes).
    fn supports_bounded_execution(&self) -> bool {
        true
    }

    fn is_causal(&self) -> bool {
        true
    }

    fn evaluate(
        &mut self,
        values: &[ArrayRef],
        range: &std::ops::Range<usize>,
    ) -> Result<ScalarValue> {
        let row = range.start;
        let mut b = StructBuilder::from_fields(watch_fields(), 1);
        self.check_rows(values, row..row + 1, &mut b)?;
        Ok(ScalarValue::Struct(Arc::new(b.finish())))
    }

    fn evaluate_all(&mut self, values: &[ArrayRef], num_rows: usize) -> Result<ArrayRef> {
        let mut b = StructBuilder::from_fields(watch_fields(), num_rows);
        self.check_rows(values, 0..num_rows, &mut b)?;
        Ok(Arc::new(b.finish()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use datafusion::arrow::array::{Float64Array, Int64Array};

    /// The memory the accumulator reports covers what it holds: 8 bytes per reading for
    /// evenly stepped times (the value; the times are first, step and count), 16 once
    /// they break the pattern, and not more than twice that plus its fixed part.
    #[test]
    fn size_counts_the_readings_held() {
        let task = Task {
            job: Job::Fit,
            tagged: false,
            grid: GridSettings::builder(1_000).build().unwrap(),
            blueprint: None,
            search: None,
            horizon: 0,
            levels: Vec::new(),
        };
        let mut acc = SeriesAccumulator {
            task,
            times: GroupTimes::default(),
            values: Vec::new(),
        };
        let empty = acc.size();
        let n = 10_000;
        let times: ArrayRef = Arc::new(Int64Array::from_iter_values(0..n as i64));
        let values: ArrayRef = Arc::new(Float64Array::from_iter_values((0..n).map(|i| i as f64)));
        acc.update_batch(&[times, values.clone()]).unwrap();
        let held = acc.size() - empty;
        assert!(held >= 8 * n, "{held}");
        assert!(held <= 16 * n, "{held}");
        // A repeated time: the times are listed from then on.
        let times: ArrayRef = Arc::new(Int64Array::from_iter_values(
            (0..n as i64).map(|i| n as i64 - 1 + i),
        ));
        acc.update_batch(&[times, values]).unwrap();
        let held = acc.size() - empty;
        assert!(held >= 16 * 2 * n, "{held}");
        assert!(held <= 32 * 2 * n, "{held}");
        // The state hands the readings over and the accumulator shrinks back.
        let state = acc.state().unwrap();
        assert_eq!(state.len(), 2);
        assert_eq!(acc.size(), empty);
    }

    /// A group's times come back exactly as appended, in any chunks, whether they step
    /// evenly (kept as first, step, count), break the pattern at any point, overflow, or
    /// repeat; the byte count follows.
    #[test]
    fn group_times_come_back_as_appended() {
        let even: Vec<i64> = (0..50).map(|k| 1_767_225_600_000 + 900_000 * k).collect();
        let mut late = even.clone();
        late[31] += 1;
        let mut swapped = even.clone();
        swapped.swap(2, 3);
        let sequences: Vec<Vec<i64>> = vec![
            even.clone(),
            late,
            swapped,
            vec![7],
            vec![7, 7, 7, 7],
            vec![5, 3, 1, -1, -3],
            vec![i64::MAX - 2, i64::MAX - 1, i64::MAX, i64::MIN],
            vec![i64::MIN, 0, i64::MAX],
            vec![0, i64::MAX, -2],
            // Each time one step on, but `first + 2·step` overflows on the way.
            vec![i64::MAX, 0, -i64::MAX],
            vec![i64::MAX, 0, -i64::MAX, i64::MIN],
        ];
        for seq in &sequences {
            for chunk in [1, 2, 3, 7, seq.len()] {
                let mut t = GroupTimes::default();
                for part in seq.chunks(chunk) {
                    t.extend(part);
                }
                let mut buffer = vec![99; 3];
                assert_eq!(
                    t.as_slice(&mut buffer),
                    seq.as_slice(),
                    "{seq:?} by {chunk}"
                );
                assert_eq!(t.len(), seq.len());
            }
        }
        let mut t = GroupTimes::default();
        t.extend(&even);
        assert!(matches!(t, GroupTimes::Even { .. }));
        assert_eq!(t.heap_bytes(), 0);
        t.extend(&[0]);
        assert!(matches!(t, GroupTimes::Listed(_)));
        assert!(t.heap_bytes() >= 8 * 51);
        // The grouped accumulator holds 8 bytes per evenly stepped reading, 16 otherwise.
        let mut groups = SeriesGroups {
            task: ar1_task(),
            gathered: Gathered::default(),
        };
        let empty = groups.size();
        let n = 10_000;
        let times: ArrayRef = Arc::new(Int64Array::from_iter_values(
            (0..n as i64).map(|i| i * 1_000),
        ));
        let values: ArrayRef = Arc::new(Float64Array::from_iter_values((0..n).map(|i| i as f64)));
        groups
            .update_batch(&[times.clone(), values.clone()], &vec![0; n], None, 1)
            .unwrap();
        let held = groups.size() - empty;
        assert!((8 * n..=9 * n).contains(&held), "{held}");
        let jumbled: ArrayRef = Arc::new(Int64Array::from_iter_values(
            (0..n as i64).map(|i| (i * 7_919) % n as i64 * 1_000),
        ));
        groups
            .update_batch(&[jumbled, values], &vec![1; n], None, 2)
            .unwrap();
        let held = groups.size() - empty;
        assert!((24 * n..=34 * n).contains(&held), "{held}");
        let state = groups.state(EmitTo::All).unwrap();
        assert_eq!(state[0].len(), 2);
        assert_eq!(groups.gathered.bytes, 0);
    }

    /// Settings are taken as one-entry dictionaries (the engine then hands over one value
    /// and a shared key column per batch instead of the text copied into every row), the
    /// coercion gives the same types when run again on its own output, and settings
    /// are read from a literal or a constant expression (a cast), never from a column.
    #[test]
    fn settings_travel_as_dictionary_constants() {
        use datafusion::physical_expr::expressions::{CastExpr, Column, Literal};
        let f = SeriesFunction::new(Job::Fit, false);
        let ts = DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into()));
        let given = [
            ts.clone(),
            DataType::Float64,
            DataType::Utf8View,
            DataType::Int32,
        ];
        let coerced = f.coerce_types(&given).unwrap();
        assert_eq!(coerced[2], constant_type(DataType::Utf8));
        assert_eq!(coerced[3], constant_type(DataType::Int64));
        assert_eq!(f.coerce_types(&coerced).unwrap(), coerced);
        let bad = [ts, DataType::Float64, DataType::Utf8, DataType::Float64];
        assert!(f.coerce_types(&bad).is_err());

        let json =
            lagwise::blueprint_to_json(&Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap())
                .unwrap();
        let column: Arc<dyn datafusion::physical_expr::PhysicalExpr> =
            Arc::new(Column::new("ts", 0));
        let dictionary = ScalarValue::Dictionary(
            Box::new(DataType::Int32),
            Box::new(ScalarValue::Utf8(Some(json))),
        );
        let cadence: Arc<dyn datafusion::physical_expr::PhysicalExpr> = Arc::new(CastExpr::new(
            Arc::new(Literal::new(ScalarValue::Int32(Some(900_000)))),
            constant_type(DataType::Int64),
            None,
        ));
        let exprs: Vec<Arc<dyn datafusion::physical_expr::PhysicalExpr>> = vec![
            column.clone(),
            column.clone(),
            Arc::new(Literal::new(dictionary)),
            cadence.clone(),
        ];
        let task = Task::from_literals(Job::Fit, false, &exprs).unwrap();
        assert_eq!(task.grid, GridSettings::builder(900_000).build().unwrap());
        assert!(task.blueprint.is_some());
        // A setting read from a column is refused with a message that says why.
        let exprs = vec![column.clone(), column.clone(), column, cadence];
        let e = Task::from_literals(Job::Fit, false, &exprs).unwrap_err();
        assert!(
            e.to_string().contains("blueprint must be a constant"),
            "{e}"
        );
    }

    pub(crate) fn ar1_task() -> Task {
        let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
        Task {
            job: Job::Fit,
            tagged: false,
            grid: GridSettings::builder(1_000).build().unwrap(),
            blueprint: Some(bp),
            search: None,
            horizon: 0,
            levels: Vec::new(),
        }
    }

    /// Two tags' readings interleaved in one batch, as the engine hands them over.
    pub(crate) fn interleaved(n: usize) -> (Vec<ArrayRef>, Vec<usize>, Vec<Vec<f64>>) {
        let sim = lagwise::Simulator::builder()
            .autoregressive(&[0.6])
            .level(80.0)
            .build()
            .unwrap();
        let series = [sim.generate(n, 1), sim.generate(n, 2)];
        let mut times = Vec::new();
        let mut values = Vec::new();
        let mut groups = Vec::new();
        // Newest first, so the grid has to sort them.
        for t in (0..n).rev() {
            for (g, x) in series.iter().enumerate() {
                times.push((t * 1_000) as i64);
                values.push(x[t]);
                groups.push(g);
            }
        }
        let arrays: Vec<ArrayRef> = vec![
            Arc::new(Int64Array::from(times)),
            Arc::new(Float64Array::from(values)),
        ];
        (arrays, groups, series.to_vec())
    }

    /// The grouped accumulator: its size covers the readings held and returns to its fixed
    /// part when they leave; states merged elsewhere and groups emitted in two parts give
    /// results equal to fitting each tag's readings directly.
    #[test]
    fn grouped_path_holds_counts_and_equals_direct_fits() {
        let fresh = || SeriesGroups {
            task: ar1_task(),
            gathered: Gathered::default(),
        };
        let n = 400;
        let (arrays, groups, series) = interleaved(n);
        let mut partial = fresh();
        let empty = partial.size();
        partial.update_batch(&arrays, &groups, None, 2).unwrap();
        // Evenly stepped times are kept as (first, step, count): 8 bytes per reading.
        let held = partial.gathered.bytes;
        assert!(held >= 2 * 8 * n && held <= 2 * 16 * n, "{held}");
        assert!(partial.size() >= empty + held);
        let state = partial.state(EmitTo::All).unwrap();
        assert_eq!(partial.gathered.bytes, 0);
        // The final stage: groups numbered the other way round, emitted one at a time.
        let mut last = fresh();
        last.merge_batch(&state, &[1, 0], 2).unwrap();
        let first = last.evaluate(EmitTo::First(1)).unwrap();
        let second = last.evaluate(EmitTo::All).unwrap();
        for (array, tag) in [(first, 1), (second, 0)] {
            let rows = array.as_struct();
            assert_eq!(rows.len(), 1);
            let sigma2 = rows.column(2).as_primitive::<Float64Type>().value(0);
            let direct = ar1_task().blueprint.unwrap().fit(&series[tag]).unwrap();
            assert_eq!(sigma2, direct.innovation_variance(), "tag {tag}");
        }
        // Rows as their own groups (the engine's skip-partial path), with a filter.
        let filter = datafusion::arrow::array::BooleanArray::from(
            (0..2 * n).map(|i| i % 3 != 0).collect::<Vec<_>>(),
        );
        let own = partial.convert_to_state(&arrays, Some(&filter)).unwrap();
        assert_eq!(own[0].len(), 2 * n);
        assert_eq!(
            own[0].null_count(),
            (0..2 * n).filter(|i| i % 3 == 0).count()
        );
        // A filtered update keeps only the rows the filter passes.
        let mut filtered = fresh();
        filtered
            .update_batch(&arrays, &groups, Some(&filter), 2)
            .unwrap();
        let kept: usize = filtered.gathered.times.iter().map(GroupTimes::len).sum();
        assert_eq!(kept, 2 * n - own[0].null_count());
    }
}
