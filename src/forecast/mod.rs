//! Forecasts with prediction intervals, and online monitoring of new readings, from the
//! forecasting filter (see the filter layer) at the end of a fitted series.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, Result};
use crate::base::grid::TimeAxis;
use crate::base::screen::{ConstantPolicy, screen};
use crate::estimate;
use crate::filter::forecasting::{FilterState, ForecastModel, terminal_state};
use crate::fit::fitted::FittedModel;
use crate::model::blueprint::Blueprint;

mod fill;
mod known;
mod online;
pub use fill::{FilledReading, GapFill};
pub use known::KnownModel;
use online::ShiftState;
pub use online::{ShiftFinding, ShiftTest, ShiftTestBuilder};

/// One horizon step of a [`Forecast`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ForecastStep {
    /// Steps ahead (1 = the next reading).
    pub step: usize,
    /// Index on the original time axis.
    pub index: u64,
    /// Its time (UTC epoch milliseconds) when the model has a time axis.
    pub time_ms: Option<i64>,
    /// Point forecast (conditional mean).
    pub mean: f64,
    /// Forecast standard deviation.
    pub sd: f64,
    /// The prediction intervals, one per requested level, in the order requested; read
    /// one by its level with [`ForecastStep::interval`].
    pub intervals: Vec<PredictionInterval>,
}

impl ForecastStep {
    /// The interval at `level` (as requested, e.g. 0.95), if it was requested.
    pub fn interval(&self, level: f64) -> Option<&PredictionInterval> {
        self.intervals
            .iter()
            .find(|i| (i.level - level).abs() <= 1e-12)
    }
}

/// A two-sided prediction interval `mean ± z·sd` at one level.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct PredictionInterval {
    /// Coverage level (e.g. 0.95).
    pub level: f64,
    /// Lower bound.
    pub lower: f64,
    /// Upper bound.
    pub upper: f64,
}

/// Forecasts `1..=h` steps ahead with intervals at the requested levels.
///
/// Let `z_t = y_t − x_tᵀβ` be the reading minus its regression part (mean, drift,
/// exogenous columns) on the original scale. Then `z` is an ARIMA process: with the
/// differencing polynomial `(1 − B)^d (1 − B^s)^D = 1 − Σ c_k B^k` (degree δ = d + D·s),
/// `z_t = u_t + Σ c_k z_{t−k}` where `u` is the fitted ARMA. The filter carries the state
/// `[α_t (ARMA state, length r); z_{t−1}, …, z_{t−δ}]` and its covariance: the last δ
/// readings enter the state, so a missing reading near the end of the series makes them
/// uncertain and the forecast variances say so. The filter starts at the first time the
/// δ previous readings are all present, with the ARMA state at its stationary
/// distribution — for δ = 0 this is exactly the likelihood filter.
///
/// Forecast means and variances propagate this state without measurement updates, so the
/// variances are the exact finite-sample ones given the readings (not psi-weight sums
/// from an infinite past), and integrated models are handled in the same mechanism.
/// Once the state covariance after an update vanishes (trace below 1e-14) the filter
/// runs in steady state: O(r + δ) per reading.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct Forecast {
    /// Interval levels, as requested (e.g. 0.8 and 0.95).
    pub levels: Vec<f64>,
    /// One entry per step.
    pub steps: Vec<ForecastStep>,
}

fn quantiles(levels: &[f64]) -> Result<Vec<f64>> {
    levels
        .iter()
        .map(|&l| crate::base::dist::two_sided_quantile(l, "forecast"))
        .collect()
}

/// Forecast `horizon` steps from `state`.
pub(crate) fn forecast_from(
    m: &ForecastModel,
    state: &FilterState,
    axis: Option<TimeAxis>,
    horizon: usize,
    levels: &[f64],
    future: &[&[f64]],
) -> Result<Forecast> {
    const WHAT: &str = "forecast";
    let zq = quantiles(levels)?;
    let k = m.exogenous();
    if future.len() != k {
        return Err(Error::invalid(
            WHAT,
            format!(
                "{} future regressor columns given, the model has {k}",
                future.len()
            ),
        ));
    }
    for (j, col) in future.iter().enumerate() {
        if col.len() < horizon {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "future regressor column {} has {} values, {horizon} needed",
                    j + 1,
                    col.len()
                ),
            ));
        }
        if let Some(i) = col[..horizon].iter().position(|v| !v.is_finite()) {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "future regressor column {} is not finite at step {}",
                    j + 1,
                    i + 1
                ),
            ));
        }
    }
    let mut st = state.clone();
    st.materialise(m);
    let mut steps = Vec::with_capacity(horizon);
    let mut x = vec![0.0; k];
    for h in 0..horizon {
        for (j, col) in future.iter().enumerate() {
            x[j] = col[h];
        }
        let (zm, f) = st.predict(m);
        let mean = zm + m.regression_at(st.next_index, &x);
        let sd = (m.sigma2 * f.max(0.0)).sqrt();
        let intervals = levels
            .iter()
            .zip(&zq)
            .map(|(&level, q)| PredictionInterval {
                level,
                lower: mean - q * sd,
                upper: mean + q * sd,
            })
            .collect();
        steps.push(ForecastStep {
            step: h + 1,
            index: st.next_index,
            time_ms: axis.and_then(|a| a.time_of(st.next_index)),
            mean,
            sd,
            intervals,
        });
        st.advance(m);
    }
    Ok(Forecast {
        levels: levels.to_vec(),
        steps,
    })
}

/// Forecasting and monitoring from a fitted model (the model keeps the forecasting
/// filter's state at the end of its series, so it needs no data here).
impl FittedModel {
    /// Forecast `horizon` readings past the end of the fitted series with prediction
    /// intervals at `levels` (e.g. `&[0.8, 0.95]`). Means and variances are exact given
    /// the readings (filter-based), integrated back through the differencing, and
    /// account for missing readings at the end of the series. Models with exogenous
    /// regressors need [`FittedModel::forecast_given_regressors`].
    ///
    /// ```
    /// use lagwise::{Blueprint, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let x = Simulator::builder().autoregressive(&[0.8]).level(60.0).build()?.generate(500, 5);
    /// let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
    /// let fc = fit.forecast(96, &[0.8, 0.95])?;
    /// let (s1, s96) = (&fc.steps[0], &fc.steps[95]);
    /// assert!(s96.sd > s1.sd);                       // wider further out
    /// let (i80, i95) = (s1.interval(0.8).unwrap(), s1.interval(0.95).unwrap());
    /// assert!(i95.lower < i80.lower && i80.upper < i95.upper); // 80% inside 95%
    /// # Ok(()) }
    /// ```
    pub fn forecast(&self, horizon: usize, levels: &[f64]) -> Result<Forecast> {
        forecast_from(
            &self.forecaster,
            &self.terminal,
            self.time_axis,
            horizon,
            levels,
            &[],
        )
    }

    /// [`FittedModel::forecast`] with future values of the exogenous regressors (one
    /// column per regressor, at least `horizon` values each).
    pub fn forecast_given_regressors(
        &self,
        horizon: usize,
        levels: &[f64],
        future: &[&[f64]],
    ) -> Result<Forecast> {
        forecast_from(
            &self.forecaster,
            &self.terminal,
            self.time_axis,
            horizon,
            levels,
            future,
        )
    }

    /// A monitor that continues from the end of the fitted series, flagging readings
    /// outside the two-sided interval at `alarm_level` (e.g. 0.99).
    pub fn monitor(&self, alarm_level: f64) -> Result<Monitor> {
        Monitor::new(
            self.forecaster.clone(),
            self.terminal.clone(),
            alarm_level,
            self.time_axis,
        )
    }

    /// A monitor positioned after `history` (any series on the same time axis, starting
    /// at index 0), using this model's coefficients without refitting — e.g. after a
    /// restart with recent readings from the historian.
    pub fn monitor_from_history(
        &self,
        history: &[f64],
        regressors: &[&[f64]],
        alarm_level: f64,
    ) -> Result<Monitor> {
        monitor_after(
            &self.blueprint,
            &self.forecaster,
            self.time_axis,
            history,
            regressors,
            alarm_level,
            "monitor",
        )
    }
}

/// A monitor for the model of `blueprint` (its forecasting model `forecaster`) positioned
/// after `history` and its regressor columns.
pub(crate) fn monitor_after(
    blueprint: &Blueprint,
    forecaster: &ForecastModel,
    axis: Option<TimeAxis>,
    history: &[f64],
    regressors: &[&[f64]],
    alarm_level: f64,
    what: &'static str,
) -> Result<Monitor> {
    screen(history, what, 1, ConstantPolicy::Allow)?;
    estimate::check_regressors(blueprint, history.len(), regressors, what)?;
    let state = terminal_state(forecaster, history, regressors)?;
    Monitor::new(forecaster.clone(), state, alarm_level, axis)
}

/// What the monitor says about one new reading.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ReadingCheck {
    /// Index of the reading on the original time axis.
    pub index: u64,
    /// Its time (UTC epoch milliseconds) when the monitor has a time axis.
    pub time_ms: Option<i64>,
    /// The reading (NaN if missing; `null` when serialised).
    #[serde(with = "crate::base::nan_as_null::one")]
    pub reading: f64,
    /// One-step forecast made before seeing it.
    pub predicted: f64,
    /// One-step forecast standard deviation.
    pub sd: f64,
    /// Interval at the monitor's alarm level.
    pub lower: f64,
    /// Interval at the monitor's alarm level.
    pub upper: f64,
    /// Standardized innovation `(reading − predicted)/sd`; `None` for a missing reading.
    pub standardized: Option<f64>,
    /// Whether the reading fell outside the interval.
    pub outside: bool,
    /// With a shift test: the larger of its two CUSUMs after this reading, signed
    /// (+ upward), in innovation standard deviations; it signals above
    /// [`ShiftTest::threshold`].
    #[serde(default)]
    pub cusum: Option<f64>,
    /// With a shift test: the spike or level shift it called at this reading.
    #[serde(default)]
    pub finding: Option<ShiftFinding>,
}

/// Online monitor: updates a fitted model's filter with each new reading, flags
/// readings outside the prediction interval, and forecasts from the latest state.
///
/// ```
/// use lagwise::{Blueprint, Simulator};
/// # fn main() -> Result<(), lagwise::Error> {
/// let sim = Simulator::builder().autoregressive(&[0.7]).level(85.0).innovation_sd(0.2).build()?;
/// let history = sim.generate(1_000, 1);
/// let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&history)?;
/// let mut watch = fit.monitor(0.999)?;
/// let check = watch.observe(history[999] + 5.0)?; // a spike
/// assert!(check.outside);
/// let next = watch.forecast(4, &[0.8, 0.95])?;
/// assert_eq!(next.steps.len(), 4);
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "MonitorRecord")]
pub struct Monitor {
    pub(crate) model: ForecastModel,
    pub(crate) state: FilterState,
    pub(crate) alarm_level: f64,
    pub(crate) alarm_z: f64,
    pub(crate) axis: Option<TimeAxis>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub(crate) shift: Option<Box<ShiftState>>,
}

/// The stored form of a monitor; restoring validates it.
#[derive(Deserialize)]
struct MonitorRecord {
    model: ForecastModel,
    state: FilterState,
    alarm_level: f64,
    #[serde(default)]
    axis: Option<TimeAxis>,
    #[serde(default)]
    shift: Option<Box<ShiftState>>,
}

impl TryFrom<MonitorRecord> for Monitor {
    type Error = String;
    fn try_from(r: MonitorRecord) -> std::result::Result<Self, String> {
        let mut m =
            Monitor::new(r.model, r.state, r.alarm_level, r.axis).map_err(|e| e.to_string())?;
        m.shift = r.shift;
        m.validate()?;
        Ok(m)
    }
}

impl Monitor {
    pub(crate) fn new(
        model: ForecastModel,
        state: FilterState,
        alarm_level: f64,
        axis: Option<TimeAxis>,
    ) -> Result<Self> {
        let alarm_z = crate::base::dist::two_sided_quantile(alarm_level, "monitor")?;
        Ok(Monitor {
            model,
            state,
            alarm_level,
            alarm_z,
            axis,
            shift: None,
        })
    }

    /// The same monitor running the online shift test `test` from its next reading
    /// (replacing any test it had; the level offset starts at 0).
    ///
    /// ```
    /// use lagwise::{Blueprint, EventKind, ShiftTest, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let sim = Simulator::builder().autoregressive(&[0.6]).level(85.0).build()?;
    /// let x = sim.generate(1_300, 3);
    /// let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x[..1_000])?;
    /// let mut watch = fit.monitor(0.999)?.with_shift_test(&ShiftTest::builder().build()?);
    /// // Readings after valve work sit 6 units higher (the innovations' sd is 1).
    /// let called: Vec<_> = x[1_000..]
    ///     .iter()
    ///     .enumerate()
    ///     .map(|(i, v)| watch.observe(if i >= 100 { v + 6.0 } else { *v }))
    ///     .collect::<Result<Vec<_>, _>>()?
    ///     .into_iter()
    ///     .filter_map(|c| c.finding)
    ///     .collect();
    /// assert_eq!(called.len(), 1);
    /// assert_eq!((called[0].kind, called[0].onset), (EventKind::LevelShift, 1_100));
    /// assert!((called[0].size - 6.0).abs() < 1.0);
    /// assert!((watch.level_offset() - 6.0).abs() < 0.5); // re-levelled, estimate refined
    /// # Ok(()) }
    /// ```
    pub fn with_shift_test(mut self, test: &ShiftTest) -> Self {
        self.shift = Some(Box::new(ShiftState::new(test.clone(), &self.state)));
        self
    }

    /// The shift test the monitor runs, if any.
    pub fn shift_test(&self) -> Option<&ShiftTest> {
        self.shift.as_deref().map(ShiftState::test)
    }

    /// The level the shift test has added to the model's mean: the sum of the
    /// re-levelled shifts, the latest at its current estimate (0 without a test).
    pub fn level_offset(&self) -> f64 {
        self.shift.as_deref().map_or(0.0, ShiftState::level)
    }

    /// The same monitor with another alarm level.
    pub fn with_alarm_level(mut self, level: f64) -> Result<Self> {
        self.alarm_z = crate::base::dist::two_sided_quantile(level, "monitor")?;
        self.alarm_level = level;
        Ok(self)
    }

    /// Alarm level of the interval (e.g. 0.99).
    pub fn alarm_level(&self) -> f64 {
        self.alarm_level
    }

    /// Index of the next reading on the original time axis.
    pub fn next_index(&self) -> u64 {
        self.state.next_index
    }

    /// The time axis the monitor's indices are on, if its model has one.
    pub fn time_axis(&self) -> Option<TimeAxis> {
        self.axis
    }

    /// The time (UTC epoch milliseconds) of the next reading, with a time axis.
    pub fn next_time_ms(&self) -> Option<i64> {
        self.axis.and_then(|a| a.time_of(self.state.next_index))
    }

    /// Whether the filter is in steady state (O(r + δ) per reading).
    pub fn is_steady(&self) -> bool {
        self.state.steady()
    }

    /// Take one reading (NaN = missing: time advances without an update).
    /// For models with exogenous regressors use [`Monitor::observe_given_regressors`].
    pub fn observe(&mut self, reading: f64) -> Result<ReadingCheck> {
        self.observe_given_regressors(reading, &[])
    }

    /// Take one reading with the current values of the exogenous regressors.
    pub fn observe_given_regressors(
        &mut self,
        reading: f64,
        regressors: &[f64],
    ) -> Result<ReadingCheck> {
        const WHAT: &str = "monitor";
        let k = self.model.exogenous();
        if regressors.len() != k {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "{} regressor values given, the model has {k}",
                    regressors.len()
                ),
            ));
        }
        if reading.is_infinite() {
            return Err(Error::new(
                crate::base::error::ErrorKind::NonFiniteReading {
                    what: WHAT,
                    index: self.state.next_index as usize,
                    value: reading,
                },
            ));
        }
        if regressors.iter().any(|v| !v.is_finite()) {
            return Err(Error::invalid(WHAT, "regressor values must be finite"));
        }
        let m = &self.model;
        let index = self.state.next_index;
        let applied = self.shift.as_deref().map_or(0.0, |s| s.offset);
        let reg = m.regression_at(index, regressors) + applied;
        let (zm, f) = self.state.predict(m);
        let (shift_mean, shift_var) = self
            .shift
            .as_deref()
            .map_or((0.0, 0.0), |s| s.correction(index));
        let predicted = zm + reg + shift_mean;
        let filter_sd = (m.sigma2 * f).sqrt();
        let sd = (m.sigma2 * f + shift_var).sqrt();
        let (lower, upper) = (predicted - self.alarm_z * sd, predicted + self.alarm_z * sd);
        let z = if reading.is_nan() {
            f64::NAN
        } else {
            reading - reg
        };
        self.state.step(m, z);
        let standardized = (!reading.is_nan()).then(|| (reading - predicted) / sd);
        let outside = !reading.is_nan() && (reading < lower || reading > upper);
        let (cusum, finding) = match self.shift.as_deref_mut() {
            Some(test) => {
                let step = test.record(
                    m,
                    &mut self.state,
                    index,
                    z,
                    z - zm - shift_mean,
                    sd,
                    filter_sd,
                    outside,
                    self.alarm_z,
                    self.axis,
                );
                (Some(step.cusum), step.finding)
            }
            None => (None, None),
        };
        Ok(ReadingCheck {
            index,
            time_ms: self.axis.and_then(|a| a.time_of(index)),
            reading,
            predicted,
            sd,
            lower,
            upper,
            standardized,
            outside,
            cusum,
            finding,
        })
    }

    /// Take several readings in order (no exogenous regressors).
    pub fn observe_batch(&mut self, readings: &[f64]) -> Result<Vec<ReadingCheck>> {
        readings.iter().map(|&r| self.observe(r)).collect()
    }

    /// Forecast `horizon` steps from the latest reading, with intervals at `levels`.
    pub fn forecast(&self, horizon: usize, levels: &[f64]) -> Result<Forecast> {
        self.forecast_given_regressors(horizon, levels, &[])
    }

    /// Forecast with future values of the exogenous regressors (one column per
    /// regressor, at least `horizon` values each).
    pub fn forecast_given_regressors(
        &self,
        horizon: usize,
        levels: &[f64],
        future: &[&[f64]],
    ) -> Result<Forecast> {
        // An unsettled level shift enters at its latest estimate.
        let settled = self
            .shift
            .as_deref()
            .and_then(|s| s.settled_copy(&self.model, &self.state));
        let (state, offset) = match &settled {
            Some((s, state)) => (state, s.offset),
            None => (&self.state, self.level_offset()),
        };
        let mut fc = forecast_from(&self.model, state, self.axis, horizon, levels, future)?;
        if offset != 0.0 {
            for step in &mut fc.steps {
                step.mean += offset;
                for i in &mut step.intervals {
                    i.lower += offset;
                    i.upper += offset;
                }
            }
        }
        Ok(fc)
    }

    pub(crate) fn validate(&self) -> std::result::Result<(), String> {
        self.state.validate_for(&self.model)?;
        if let Some(test) = &self.shift {
            test.validate(&self.model, self.state.next_index)?;
        }
        if !(self.alarm_level > 0.0 && self.alarm_level < 1.0) {
            return Err(format!("alarm level {} outside (0, 1)", self.alarm_level));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::filter::forecasting::dense_terminal_state;
    use crate::model::blueprint::Blueprint;
    use crate::model::simulate::Simulator;

    /// A simulated series at level 40: AR and MA parts, seasonal (AR, MA, period) and
    /// differencing (d, D), `n` readings from `seed`.
    fn simulated(
        ar: &[f64],
        ma: &[f64],
        seasonal: (&[f64], &[f64], usize),
        differencing: (usize, usize),
        n: usize,
        seed: u64,
    ) -> Vec<f64> {
        Simulator::builder()
            .autoregressive(ar)
            .moving_average(ma)
            .seasonal(seasonal.0, seasonal.1, seasonal.2)
            .differencing(differencing.0, differencing.1)
            .level(40.0)
            .build()
            .unwrap()
            .generate(n, seed)
    }

    /// With missing readings the terminal state comes from the ring-indexed augmented
    /// filter: its mean and covariance equal the row-major steps' (`FilterState::step`)
    /// to rounding — ARMA, integrated with drift, seasonal differencing with seasonal MA
    /// and with seasonal AR (transition terms on both blocks), a regression — with gaps
    /// early (the filter reaches its steady state between them), in runs, and near the
    /// end (the covariance is still carried at the end).
    #[test]
    fn ring_terminal_matches_row_major_filter_through_gaps() {
        let sim = |ar: &[f64], ma: &[f64], sar: &[f64], sma: &[f64], d: usize, sd: usize| {
            simulated(ar, ma, (sar, sma, 12), (d, sd), 400, 5)
        };
        let outdoor: Vec<f64> = (0..400).map(|t| (t as f64 / 30.0).sin()).collect();
        let cases: Vec<(Blueprint, Vec<f64>, bool)> = vec![
            (
                Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap(),
                sim(&[0.6], &[0.3], &[], &[], 0, 0),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(0, 1, 1)
                    .drift_term(true)
                    .build()
                    .unwrap(),
                sim(&[], &[0.5], &[], &[], 1, 0),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 1)
                    .seasonal(0, 1, 1, 12)
                    .build()
                    .unwrap(),
                sim(&[0.5], &[0.2], &[], &[-0.6], 0, 1),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 1, 0)
                    .seasonal(1, 1, 0, 12)
                    .build()
                    .unwrap(),
                sim(&[0.4], &[], &[-0.3], &[], 1, 1),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .exogenous(1)
                    .build()
                    .unwrap(),
                sim(&[0.7], &[], &[], &[], 0, 0),
                true,
            ),
        ];
        let patterns: [&[usize]; 3] = [
            &[30, 31, 32, 150],
            &[40, 41, 42, 43, 44, 45, 200, 201, 330, 331, 332],
            &[20, 120, 121, 390, 396, 397],
        ];
        for (bp, x, exo) in cases {
            let regs: Vec<&[f64]> = if exo { vec![&outdoor] } else { vec![] };
            let model = bp.fit_regression(&x, &regs).unwrap();
            for pattern in patterns {
                let mut gappy = x.clone();
                for &t in pattern {
                    gappy[t] = f64::NAN;
                }
                let ring = terminal_state(&model.forecaster, &gappy, &regs).unwrap();
                let dense = dense_terminal_state(&model.forecaster, &gappy, &regs).unwrap();
                let label = format!("{} {pattern:?}", bp.shape_label());
                assert_eq!(ring.next_index, dense.next_index, "{label}");
                assert_eq!(ring.cov.len(), dense.cov.len(), "{label}");
                for (a, b) in ring
                    .s
                    .iter()
                    .zip(&dense.s)
                    .chain(ring.cov.iter().zip(&dense.cov))
                {
                    assert!(
                        (a - b).abs() <= 1e-9 * (1.0 + b.abs()),
                        "{label}: {a} vs {b}"
                    );
                }
            }
        }
    }

    /// The terminal state taken from the ARMA filter equals the dense augmented filter's:
    /// non-seasonal, integrated with drift, seasonal with differencing, and a regression
    /// with ARMA errors; forecasts from both agree to rounding.
    #[test]
    fn steady_terminal_matches_dense_filter() {
        let sim = |ar: &[f64], ma: &[f64], sma: &[f64], s: usize, d: usize, sd: usize| {
            simulated(ar, ma, (&[], sma, s), (d, sd), 600, 11)
        };
        let outdoor: Vec<f64> = (0..600).map(|t| (t as f64 / 30.0).sin()).collect();
        let cases: Vec<(Blueprint, Vec<f64>, bool)> = vec![
            (
                Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap(),
                sim(&[0.6], &[0.3], &[], 1, 0, 0),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(0, 1, 1)
                    .drift_term(true)
                    .build()
                    .unwrap(),
                sim(&[], &[0.5], &[], 1, 1, 0),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 1)
                    .seasonal(0, 1, 1, 12)
                    .build()
                    .unwrap(),
                sim(&[0.5], &[0.2], &[-0.6], 12, 0, 1),
                false,
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .exogenous(1)
                    .build()
                    .unwrap(),
                sim(&[0.7], &[], &[], 1, 0, 0),
                true,
            ),
        ];
        // A seasonal MA over 20 cycles: the filter has not converged by the end, and the
        // covariance comes from its opening recursions continued (≈ 36 cycles to
        // converge at Θ = −0.6).
        let unconverged = (
            Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .seasonal(0, 1, 1, 24)
                .build()
                .unwrap(),
            simulated(&[0.5], &[0.2], (&[], &[-0.6], 24), (0, 1), 480, 11),
            false,
        );
        let cases = cases.into_iter().map(|c| (c, true));
        for ((bp, x, exo), converged) in cases.chain([(unconverged, false)]) {
            let regs: Vec<&[f64]> = if exo { vec![&outdoor] } else { vec![] };
            let model = bp.fit_regression(&x, &regs).unwrap();
            let fast = terminal_state(&model.forecaster, &x, &regs).unwrap();
            let dense = dense_terminal_state(&model.forecaster, &x, &regs).unwrap();
            let label = bp.shape_label();
            if converged {
                assert!(fast.cov.is_empty(), "{label}: steady path not taken");
            } else {
                assert_eq!(
                    fast.cov.len(),
                    dense.cov.len(),
                    "{label}: opening path not taken"
                );
                for (a, b) in fast.cov.iter().zip(&dense.cov) {
                    assert!(
                        (a - b).abs() <= 1e-9 * (1.0 + b.abs()),
                        "{label}: {a} vs {b}"
                    );
                }
            }
            assert_eq!(fast.next_index, dense.next_index, "{label}");
            assert_eq!(fast.s.len(), dense.s.len(), "{label}");
            for (a, b) in fast.s.iter().zip(&dense.s) {
                assert!(
                    (a - b).abs() <= 1e-9 * (1.0 + b.abs()),
                    "{label}: {a} vs {b}"
                );
            }
            let future: Vec<f64> = (0..24).map(|t| (t as f64 / 7.0).cos()).collect();
            let fregs: Vec<&[f64]> = if exo { vec![&future] } else { vec![] };
            let f1 = forecast_from(&model.forecaster, &fast, None, 24, &[0.95], &fregs).unwrap();
            let f2 = forecast_from(&model.forecaster, &dense, None, 24, &[0.95], &fregs).unwrap();
            for (a, b) in f1.steps.iter().zip(&f2.steps) {
                assert!(
                    (a.mean - b.mean).abs() <= 1e-9 * (1.0 + b.mean.abs()),
                    "{label}"
                );
                assert!((a.sd - b.sd).abs() <= 1e-9 * b.sd, "{label}");
            }
        }
    }
}
