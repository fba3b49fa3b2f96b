//! Fitting one blueprint over many series in parallel.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use rayon::prelude::*;

use crate::base::error::{Error, ErrorKind, Result};
use crate::estimate::StageRecord;
use crate::fit::fitted::{
    CoefficientEstimate, FitWarning, FitWorkspace, FittedModel, LogLikelihood, ReadingCounts,
    ResidualCheck,
};
use crate::forecast::{Monitor, ShiftTest};
use crate::model::blueprint::{Blueprint, ModelShape};
use crate::model::coefficients::Term;
use crate::select::events::{EventSettings, SensorEvent};
use crate::select::search::SearchSettings;
use crate::stats::criteria::InformationCriteria;
use crate::stats::portmanteau::LagPValue;

/// Progress of a running batch, passed to the progress callback.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub struct Progress {
    /// Series finished so far (fitted or failed).
    pub done: usize,
    /// Of those, series that failed.
    pub failed: usize,
    /// Series in the batch.
    pub total: usize,
}

type ProgressFn = dyn Fn(Progress) + Send + Sync;

/// Batch settings. Build with [`Fleet::builder`].
///
/// A [`Fleet`] holds the batch settings (threads, residual-check lags, alarm level,
/// progress callback, cancellation flag); `fit_*` methods take the series as slices, as
/// the rows of a 2-D ndarray, or as a ragged collection with the caller's ids. Each
/// series gets its own result — a compact [`FitSummary`] or a typed error — so one bad
/// series never aborts the batch.
///
/// # Determinism
/// Every series is fitted independently on a per-worker workspace whose history does
/// not influence results, and results are returned in input order, so each series'
/// result is **bit-identical whatever the thread count** (tested).
///
/// # Memory
/// Summaries keep estimates, standard errors, likelihood, criteria, convergence, the
/// residual check's p-values and a ready-to-use [`Monitor`] — not the residuals — so a
/// fleet's results stay small next to its input. Fit one series with
/// [`Blueprint::fit`](crate::Blueprint::fit) when the full [`FittedModel`] is needed.
#[derive(Clone)]
pub struct Fleet {
    threads: Option<usize>,
    check_lags: Option<usize>,
    alpha: f64,
    alarm_level: f64,
    monitors: bool,
    progress: Option<Arc<ProgressFn>>,
    cancel: Option<Arc<AtomicBool>>,
    events: Option<EventSettings>,
    shift_test: Option<ShiftTest>,
}

impl std::fmt::Debug for Fleet {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Fleet")
            .field("threads", &self.threads)
            .field("check_lags", &self.check_lags)
            .field("alpha", &self.alpha)
            .field("alarm_level", &self.alarm_level)
            .field("monitors", &self.monitors)
            .field("progress", &self.progress.is_some())
            .field("cancel", &self.cancel.is_some())
            .field("events", &self.events)
            .finish()
    }
}

/// Builder for [`Fleet`].
#[derive(Clone, Default)]
pub struct FleetBuilder {
    threads: Option<usize>,
    check_lags: Option<usize>,
    alpha: Option<f64>,
    alarm_level: Option<f64>,
    monitors: Option<bool>,
    progress: Option<Arc<ProgressFn>>,
    cancel: Option<Arc<AtomicBool>>,
    events: Option<EventSettings>,
    shift_test: Option<ShiftTest>,
}

impl std::fmt::Debug for FleetBuilder {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("FleetBuilder")
            .field("threads", &self.threads)
            .finish_non_exhaustive()
    }
}

impl FleetBuilder {
    /// Worker threads (default: rayon's global pool, i.e. one per core).
    pub fn threads(&mut self, threads: usize) -> &mut Self {
        self.threads = Some(threads);
        self
    }
    /// Lags of the residual check (default: [`FittedModel::default_check_lags`]).
    pub fn check_lags(&mut self, lags: usize) -> &mut Self {
        self.check_lags = Some(lags);
        self
    }
    /// Significance level of the residual check (default 0.05).
    pub fn check_alpha(&mut self, alpha: f64) -> &mut Self {
        self.alpha = Some(alpha);
        self
    }
    /// Alarm level of each series' monitor (default 0.999).
    pub fn alarm_level(&mut self, level: f64) -> &mut Self {
        self.alarm_level = Some(level);
        self
    }
    /// Whether each summary carries a ready [`Monitor`] (default `true`). A monitor is
    /// about 300 bytes per series; batch analytics that only need the fitted
    /// coefficients and checks can leave it out.
    pub fn ready_monitors(&mut self, keep: bool) -> &mut Self {
        self.monitors = Some(keep);
        self
    }
    /// Called after every finished series with the running counts. Keep it cheap; it
    /// runs on the worker threads.
    pub fn progress(&mut self, callback: impl Fn(Progress) + Send + Sync + 'static) -> &mut Self {
        self.progress = Some(Arc::new(callback));
        self
    }
    /// A flag that, once set, makes workers skip every series not yet started; those
    /// get [`ErrorKind::Cancelled`]. Series already being fitted finish.
    pub fn cancel_flag(&mut self, flag: Arc<AtomicBool>) -> &mut Self {
        self.cancel = Some(flag);
        self
    }
    /// Also look for sensor events in every series (see
    /// [`FittedModel::find_events`](crate::FittedModel::find_events)); each summary lists
    /// them in [`FitSummary::events`]. The summary still describes the model fitted
    /// without them (its monitor needs no regressors); the refit that holds the events is
    /// one `find_events` away for a series that needs it.
    pub fn find_events(&mut self, settings: &EventSettings) -> &mut Self {
        self.events = Some(settings.clone());
        self
    }
    /// Give every ready monitor the online shift test `test` (see
    /// [`Monitor::with_shift_test`]); without ready monitors it has no effect. A monitor
    /// with the test keeps up to two look-backs of readings (≈ 5 KB at the default 96).
    pub fn shift_test(&mut self, test: &ShiftTest) -> &mut Self {
        self.shift_test = Some(test.clone());
        self
    }
    /// Build the fleet (checks the settings).
    pub fn build(&self) -> Result<Fleet> {
        const WHAT: &str = "fleet";
        if self.threads == Some(0) {
            return Err(Error::invalid(WHAT, "thread count must be at least 1"));
        }
        let alpha = self.alpha.unwrap_or(0.05);
        if !(alpha > 0.0 && alpha < 1.0) {
            return Err(Error::invalid(
                WHAT,
                format!("check alpha {alpha} must be in (0, 1)"),
            ));
        }
        let alarm_level = self.alarm_level.unwrap_or(0.999);
        if !(alarm_level > 0.0 && alarm_level < 1.0) {
            return Err(Error::invalid(
                WHAT,
                format!("alarm level {alarm_level} must be in (0, 1)"),
            ));
        }
        if self.check_lags == Some(0) {
            return Err(Error::invalid(WHAT, "check lags must be at least 1"));
        }
        Ok(Fleet {
            threads: self.threads,
            check_lags: self.check_lags,
            alpha,
            alarm_level,
            monitors: self.monitors.unwrap_or(true),
            progress: self.progress.clone(),
            cancel: self.cancel.clone(),
            events: self.events.clone(),
            shift_test: self.shift_test.clone(),
        })
    }
}

/// What a fleet keeps of one fitted series.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct FitSummary {
    /// Estimated and held coefficients with standard errors.
    pub coefficients: Vec<CoefficientEstimate>,
    /// Innovation variance σ².
    pub innovation_variance: f64,
    /// Log-likelihood, typed.
    pub log_likelihood: LogLikelihood,
    /// Criteria (exact fits only).
    pub criteria: Option<InformationCriteria>,
    /// Reading counts.
    pub counts: ReadingCounts,
    /// The optimisation in brief (every stage is in the single fit's
    /// [`FittedModel::stages`]).
    pub optimisation: OptimisationDigest,
    /// Warnings.
    pub warnings: Vec<FitWarning>,
    /// The residual check, digested (the full per-lag scan is one
    /// [`FittedModel::residual_check`] away on a single refit).
    pub whiteness: WhitenessDigest,
    /// The fitted shape (`Display`: e.g. `ARMA(1,1) + mean`; useful after an order
    /// search).
    pub shape: ModelShape,
    /// For order searches: the search's explanation of its choice.
    pub search_note: Option<String>,
    /// Sensor events found (only when the fleet was built with
    /// [`FleetBuilder::find_events`]).
    #[serde(default)]
    pub events: Vec<SensorEvent>,
    /// A monitor positioned after the series (boxed: most of a summary's size).
    monitor: Option<Box<Monitor>>,
}

impl FitSummary {
    /// A monitor positioned after the series, ready for new readings (absent when the
    /// fleet was built with [`FleetBuilder::ready_monitors`]`(false)`).
    pub fn monitor(&self) -> Option<&Monitor> {
        self.monitor.as_deref()
    }
    /// Take the ready monitor out of the summary (to keep watching the series).
    pub fn take_monitor(&mut self) -> Option<Monitor> {
        self.monitor.take().map(|m| *m)
    }
    /// Put a monitor (back) into the summary, e.g. after feeding it new readings.
    pub fn put_monitor(&mut self, monitor: Monitor) {
        self.monitor = Some(Box::new(monitor));
    }
}

/// The optimisation of one fleet series in brief.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct OptimisationDigest {
    /// Stages run (1, or 2 for CSS-started likelihood).
    pub stages: u8,
    /// Whether every stage met its convergence criterion.
    pub converged: bool,
    /// Objective evaluations over all stages.
    pub evaluations: u32,
    /// Quasi-Newton iterations over all stages.
    pub iterations: u32,
    /// The last stage's record (its objective, gradient norm and stop reason).
    pub last: StageRecord,
}

impl OptimisationDigest {
    fn from_stages(stages: &[StageRecord]) -> Option<Self> {
        let sat = |v: usize| u32::try_from(v).unwrap_or(u32::MAX);
        Some(OptimisationDigest {
            stages: u8::try_from(stages.len()).unwrap_or(u8::MAX),
            converged: stages.iter().all(|s| s.converged()),
            evaluations: sat(stages.iter().map(|s| s.evaluations).sum()),
            iterations: sat(stages.iter().map(|s| s.iterations).sum()),
            last: *stages.last()?,
        })
    }
}

/// The residual check of one fleet series in a few numbers: the Ljung–Box verdict at the
/// last checked lag and the weakest lag of the scan.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct WhitenessDigest {
    /// Lags scanned, `1..=H`; the verdict is the Ljung–Box test at `H`.
    pub lags_checked: usize,
    /// Ljung–Box p-value at `H` (`None` when no degrees of freedom are left there).
    pub p_value_at_last_lag: Option<f64>,
    /// The lag with the smallest Ljung–Box p-value over the scan, and that p-value
    /// (`None` when no lag has degrees of freedom).
    pub weakest_lag: Option<LagPValue>,
    /// Whether the residuals passed the check.
    pub white: bool,
}

impl WhitenessDigest {
    fn from_check(check: &ResidualCheck) -> Self {
        let rows = check.portmanteau.rows();
        let weakest_lag = check.portmanteau.smallest_ljung_box_p_value();
        WhitenessDigest {
            lags_checked: rows.len(),
            p_value_at_last_lag: rows.last().and_then(|r| r.ljung_box_p_value),
            weakest_lag,
            white: check.white,
        }
    }
}

impl FitSummary {
    /// One coefficient by term.
    pub fn coefficient(&self, term: Term) -> Option<&CoefficientEstimate> {
        self.coefficients.iter().find(|c| c.term == term)
    }
    /// Whether every optimisation stage converged.
    pub fn converged(&self) -> bool {
        self.optimisation.converged
    }
    /// Total objective evaluations over the stages.
    pub fn evaluations(&self) -> usize {
        self.optimisation.evaluations as usize
    }

    fn from_model(
        m: &FittedModel,
        lags: Option<usize>,
        alpha: f64,
        alarm: Option<f64>,
    ) -> Result<Self> {
        let lags = lags.unwrap_or_else(|| m.default_check_lags());
        let check = m.residual_check(lags, alpha)?;
        Ok(FitSummary {
            coefficients: m.coefficients().to_vec(),
            innovation_variance: m.innovation_variance(),
            log_likelihood: m.log_likelihood(),
            criteria: m.criteria().ok(),
            counts: m.reading_counts(),
            optimisation: OptimisationDigest::from_stages(m.stages()).ok_or_else(|| {
                Error::numerical("fleet", "the fit recorded no optimisation stage")
            })?,
            warnings: m.warnings().to_vec(),
            whiteness: WhitenessDigest::from_check(&check),
            shape: m.blueprint().shape(),
            search_note: None,
            events: Vec::new(),
            monitor: match alarm {
                Some(level) => Some(Box::new(m.monitor(level)?)),
                None => None,
            },
        })
    }
}

/// Results of a batch, in input order.
#[derive(Debug, Clone)]
pub struct FleetReport<I> {
    outcomes: Vec<SeriesOutcome<I>>,
    cancelled: bool,
    elapsed: Duration,
}

/// The result for one series of a batch: its id and its summary or typed error.
#[derive(Debug, Clone)]
#[non_exhaustive]
pub struct SeriesOutcome<I> {
    /// The caller's id (the position for slices and rows).
    pub id: I,
    /// The summary, or why this series failed.
    pub result: Result<FitSummary>,
}

impl<I> FleetReport<I> {
    /// One outcome per input series, in input order.
    pub fn outcomes(&self) -> &[SeriesOutcome<I>] {
        &self.outcomes
    }
    /// The outcomes, owned (to move summaries and monitors out).
    pub fn into_outcomes(self) -> Vec<SeriesOutcome<I>> {
        self.outcomes
    }
    /// Whether the cancellation flag stopped the batch early.
    pub fn cancelled(&self) -> bool {
        self.cancelled
    }
    /// Wall-clock time of the batch.
    pub fn elapsed(&self) -> Duration {
        self.elapsed
    }
    /// Number of series fitted successfully.
    pub fn fitted(&self) -> usize {
        self.outcomes.iter().filter(|o| o.result.is_ok()).count()
    }
    /// Ids and errors of the series that failed (cancelled ones included).
    pub fn failures(&self) -> impl Iterator<Item = (&I, &Error)> {
        self.outcomes
            .iter()
            .filter_map(|o| o.result.as_ref().err().map(|e| (&o.id, e)))
    }
}

impl Fleet {
    /// Start configuring a batch.
    pub fn builder() -> FleetBuilder {
        FleetBuilder::default()
    }

    /// Fit `blueprint` to every slice; ids are the positions.
    ///
    /// ```
    /// use lagwise::{Blueprint, Fleet, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let sim = Simulator::builder().autoregressive(&[0.6]).level(80.0).build()?;
    /// let series: Vec<Vec<f64>> = (0..8).map(|seed| sim.generate(300, seed)).collect();
    /// let mut bad = vec![f64::NAN; 300];
    /// bad[0] = 1.0;
    /// let mut all: Vec<&[f64]> = series.iter().map(|s| s.as_slice()).collect();
    /// all.push(&bad); // one poisoned series does not stop the batch
    /// let report = Fleet::builder().threads(2).build()?
    ///     .fit_slices(&Blueprint::builder().nonseasonal(1, 0, 0).build()?, &all);
    /// assert_eq!(report.fitted(), 8);
    /// assert_eq!(report.failures().next().map(|(id, _)| *id), Some(8));
    /// # Ok(()) }
    /// ```
    pub fn fit_slices(&self, blueprint: &Blueprint, series: &[&[f64]]) -> FleetReport<usize> {
        let items: Vec<(usize, &[f64])> = series.iter().copied().enumerate().collect();
        self.run(blueprint, &items)
    }

    /// Fit `blueprint` to every row of a 2-D array (rows = series); ids are row numbers.
    pub fn fit_rows(
        &self,
        blueprint: &Blueprint,
        rows: ndarray::ArrayView2<'_, f64>,
    ) -> FleetReport<usize> {
        with_rows(rows, |items| self.run(blueprint, items))
    }

    /// Fit `blueprint` to a ragged collection with the caller's ids.
    pub fn fit_ragged<I: Clone + Send + Sync>(
        &self,
        blueprint: &Blueprint,
        series: &[(I, &[f64])],
    ) -> FleetReport<I> {
        self.run(blueprint, series)
    }

    /// Search orders for every series (see [`search_orders`](crate::search_orders)); each
    /// summary describes the chosen model and carries the search's explanation. Ids are
    /// the positions.
    pub fn search_slices(
        &self,
        settings: &SearchSettings,
        series: &[&[f64]],
    ) -> FleetReport<usize> {
        let items: Vec<(usize, &[f64])> = series.iter().copied().enumerate().collect();
        self.search(settings, &items)
    }

    /// [`Fleet::search_slices`] over the rows of a 2-D array; ids are row numbers.
    pub fn search_rows(
        &self,
        settings: &SearchSettings,
        rows: ndarray::ArrayView2<'_, f64>,
    ) -> FleetReport<usize> {
        with_rows(rows, |items| self.search(settings, items))
    }

    /// [`Fleet::search_slices`] over a ragged collection with the caller's ids.
    pub fn search_ragged<I: Clone + Send + Sync>(
        &self,
        settings: &SearchSettings,
        series: &[(I, &[f64])],
    ) -> FleetReport<I> {
        self.search(settings, series)
    }

    fn search<I: Clone + Send + Sync>(
        &self,
        settings: &SearchSettings,
        items: &[(I, &[f64])],
    ) -> FleetReport<I> {
        self.run_with(items, |x, ws| {
            let out = crate::select::search::search_orders_with(x, settings, ws)?;
            let mut s = self.summary(&out.model)?;
            s.search_note = Some(out.explanation);
            self.add_events(&mut s, &out.model, x)?;
            Ok(s)
        })
    }

    /// A summary of `model` with its ready monitor (armed with the shift test) if kept.
    fn summary(&self, model: &FittedModel) -> Result<FitSummary> {
        let alarm = self.monitors.then_some(self.alarm_level);
        let mut s = FitSummary::from_model(model, self.check_lags, self.alpha, alarm)?;
        if let Some(test) = &self.shift_test
            && let Some(m) = s.monitor.take()
        {
            s.monitor = Some(Box::new(m.with_shift_test(test)));
        }
        Ok(s)
    }

    fn run<I: Clone + Send + Sync>(
        &self,
        blueprint: &Blueprint,
        items: &[(I, &[f64])],
    ) -> FleetReport<I> {
        self.run_with(items, |x, ws| {
            let m = blueprint.fit_with(x, ws)?;
            let mut s = self.summary(&m)?;
            self.add_events(&mut s, &m, x)?;
            Ok(s)
        })
    }

    /// The event search of one series, when asked for.
    fn add_events(&self, summary: &mut FitSummary, model: &FittedModel, x: &[f64]) -> Result<()> {
        if let Some(settings) = &self.events {
            summary.events = model.find_events(x, settings)?.events;
        }
        Ok(())
    }

    fn run_with<I: Clone + Send + Sync>(
        &self,
        items: &[(I, &[f64])],
        job: impl Fn(&[f64], &mut FitWorkspace) -> Result<FitSummary> + Send + Sync,
    ) -> FleetReport<I> {
        let start = Instant::now();
        let total = items.len();
        let done = AtomicUsize::new(0);
        let failed = AtomicUsize::new(0);
        let work = || -> Vec<SeriesOutcome<I>> {
            items
                .par_iter()
                .map_init(FitWorkspace::new, |ws, (id, series)| {
                    let result = if self
                        .cancel
                        .as_ref()
                        .is_some_and(|c| c.load(Ordering::Relaxed))
                    {
                        Err(Error::new(ErrorKind::Cancelled { what: "fleet" }))
                    } else {
                        job(series, ws)
                    };
                    let f = if result.is_err() {
                        failed.fetch_add(1, Ordering::Relaxed) + 1
                    } else {
                        failed.load(Ordering::Relaxed)
                    };
                    let d = done.fetch_add(1, Ordering::Relaxed) + 1;
                    if let Some(cb) = &self.progress {
                        cb(Progress {
                            done: d,
                            failed: f,
                            total,
                        });
                    }
                    SeriesOutcome {
                        id: id.clone(),
                        result,
                    }
                })
                .collect()
        };
        let outcomes = match self.threads {
            Some(t) => match rayon::ThreadPoolBuilder::new().num_threads(t).build() {
                Ok(pool) => pool.install(work),
                Err(_) => work(),
            },
            None => work(),
        };
        let cancelled = self
            .cancel
            .as_ref()
            .is_some_and(|c| c.load(Ordering::Relaxed));
        FleetReport {
            outcomes,
            cancelled,
            elapsed: start.elapsed(),
        }
    }
}

/// Run `f` over the rows of a 2-D array as `(row number, slice)` items, borrowing the rows
/// in place when the array is in standard layout and copying them otherwise.
fn with_rows<R>(rows: ndarray::ArrayView2<'_, f64>, f: impl FnOnce(&[(usize, &[f64])]) -> R) -> R {
    if rows.is_standard_layout() {
        let items: Vec<(usize, &[f64])> = rows
            .outer_iter()
            .enumerate()
            .map(|(i, r)| (i, r.to_slice().unwrap_or(&[])))
            .collect();
        f(&items)
    } else {
        let owned: Vec<Vec<f64>> = rows.outer_iter().map(|r| r.to_vec()).collect();
        let items: Vec<(usize, &[f64])> = owned
            .iter()
            .enumerate()
            .map(|(i, r)| (i, r.as_slice()))
            .collect();
        f(&items)
    }
}
