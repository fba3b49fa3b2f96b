//! The monitor's online shift test: is an unusual reading a single spike or the start of
//! a level that stays?
//!
//! **Detection** is a two-sided CUSUM (Page 1954) on the standardized one-step
//! innovations, which are independent N(0, 1) while the model holds. The reference value
//! k is half the innovation-mean shift it is tuned to catch; the threshold h is solved
//! from the wanted in-control average run length (the mean number of readings between
//! false signals, Brook & Evans 1972; see [`crate::cusum_threshold`]).
//!
//! **Telling the kinds apart** uses the patterns the two kinds leave on the innovations
//! (Chen & Liu 1993): a spike (additive outlier) of size ω at reading T adds ω·π_j to the
//! innovation at T + j, a level shift adds ω·(π_0 + … + π_j), with π the model's residual
//! filter. A decision is opened by a reading outside the alarm interval (onset: that
//! reading) or by a CUSUM signal (onset: the reading after the chart last stood at 0, the
//! usual change-point estimate), and taken once `decision_window` readings from the onset
//! are in (or at once, when the signal comes later). Over the readings from the onset the
//! size of each kind is estimated by weighted least squares with its standard error; the
//! reading is called a *level shift* only when the CUSUM has signalled in the shift's
//! direction and the shift explains the innovations better than a spike (larger |ω/se|);
//! otherwise it is a *spike* when the spike's statistic reaches the alarm quantile; else
//! nothing is called (a lone reading just outside the interval that the next readings do
//! not confirm). So false level shifts come no more often than false CUSUM signals.
//!
//! **Acting on it, without a refit**: the monitor keeps the filter state at two recent
//! block starts and the filter inputs since. After a shift it adds ω to its level offset
//! and replays the readings from the onset with the step removed; after a spike it
//! replays with the spike reading treated as missing — the state is then exactly the one
//! the filter would have had with the event known beforehand.

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, Result};
use crate::filter::forecasting::{FilterState, ForecastModel};
use crate::filter::patterns::{event_response, pi_weights};
use crate::model::event::EventKind;
use crate::stats::cusum::cusum_threshold;

const WHAT: &str = "shift test";

/// Settings of the monitor's online shift test (build with [`ShiftTest::builder`]); the
/// CUSUM threshold is solved when it is built.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShiftTest {
    in_control_run: f64,
    catch: f64,
    threshold: f64,
    window: usize,
    look_back: usize,
    relevel: bool,
    discount_spikes: bool,
}

impl ShiftTest {
    /// Start from the defaults: 20,000 readings between false shift signals on average
    /// (≈ 208 days of 15-minute readings), tuned to catch a shift of one innovation
    /// standard deviation (k = ½), an 8-reading decision window, a 96-reading look-back,
    /// re-levelling after shifts and discounting spikes.
    pub fn builder() -> ShiftTestBuilder {
        ShiftTestBuilder::default()
    }
    /// Mean number of in-control readings between false shift signals.
    pub fn in_control_run(&self) -> f64 {
        self.in_control_run
    }
    /// The CUSUM's reference value k (innovation standard deviations).
    pub fn reference(&self) -> f64 {
        self.catch / 2.0
    }
    /// The CUSUM's decision threshold h (innovation standard deviations).
    pub fn threshold(&self) -> f64 {
        self.threshold
    }
    /// Readings from the onset before a kind is decided.
    pub fn decision_window(&self) -> usize {
        self.window
    }
    /// The average number of readings to a signal when the innovations' mean moves by
    /// `shift` standard deviations (a level shift of size ω moves it by ω·π(1)/σ once
    /// the pattern has settled).
    pub fn run_length_at(&self, shift: f64) -> Result<f64> {
        crate::stats::cusum::cusum_run_length(self.reference(), self.threshold, shift)
    }
    fn check(&self) -> std::result::Result<(), String> {
        let ok = self.in_control_run.is_finite()
            && self.catch.is_finite()
            && self.threshold.is_finite()
            && self.threshold > 0.0
            && self.window >= 1
            && self.look_back >= self.window;
        ok.then_some(())
            .ok_or_else(|| "shift test settings out of range".to_string())
    }
}

/// Builder of [`ShiftTest`].
#[derive(Debug, Clone, Default)]
pub struct ShiftTestBuilder {
    in_control_run: Option<f64>,
    catch: Option<f64>,
    window: Option<usize>,
    look_back: Option<usize>,
    relevel: Option<bool>,
    discount_spikes: Option<bool>,
}

impl ShiftTestBuilder {
    /// Mean number of readings between false shift signals while the model holds
    /// (in-control average run length; at least 50, at most 10⁹).
    pub fn in_control_run(&mut self, readings: f64) -> &mut Self {
        self.in_control_run = Some(readings);
        self
    }
    /// The innovation-mean shift, in innovation standard deviations, the test is tuned
    /// to catch fastest (k = half of it; 0.2 to 6).
    pub fn catch_shift(&mut self, sd: f64) -> &mut Self {
        self.catch = Some(sd);
        self
    }
    /// Readings from the onset before a kind is decided (1 to 96): longer tells the
    /// kinds apart more surely, shorter reacts sooner.
    pub fn decision_window(&mut self, readings: usize) -> &mut Self {
        self.window = Some(readings);
        self
    }
    /// How far back an onset can be placed (readings; at least the decision window, at
    /// most 10,000): the monitor keeps between one and two look-backs of filter inputs.
    pub fn look_back(&mut self, readings: usize) -> &mut Self {
        self.look_back = Some(readings);
        self
    }
    /// Whether a level shift moves the monitor's level (default `true`); without it
    /// the shift is only reported.
    pub fn relevel(&mut self, on: bool) -> &mut Self {
        self.relevel = Some(on);
        self
    }
    /// Whether a spike reading is replayed as missing, so it leaves no trace in the
    /// filter (default `true`).
    pub fn discount_spikes(&mut self, on: bool) -> &mut Self {
        self.discount_spikes = Some(on);
        self
    }
    /// Check the settings and solve the CUSUM threshold.
    pub fn build(&self) -> Result<ShiftTest> {
        let run = self.in_control_run.unwrap_or(20_000.0);
        if !(run.is_finite() && (50.0..=1e9).contains(&run)) {
            return Err(Error::invalid(
                WHAT,
                format!("in-control run length {run} must be in [50, 1e9] readings"),
            ));
        }
        let catch = self.catch.unwrap_or(1.0);
        if !(catch.is_finite() && (0.2..=6.0).contains(&catch)) {
            return Err(Error::invalid(
                WHAT,
                format!("shift to catch {catch} must be in [0.2, 6] standard deviations"),
            ));
        }
        let window = self.window.unwrap_or(8);
        if !(1..=96).contains(&window) {
            return Err(Error::invalid(
                WHAT,
                format!("decision window {window} must be 1 to 96 readings"),
            ));
        }
        let look_back = self.look_back.unwrap_or(96);
        if !(window..=10_000).contains(&look_back) {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "look-back {look_back} must be at least the decision window ({window}) \
                     and at most 10,000 readings"
                ),
            ));
        }
        Ok(ShiftTest {
            in_control_run: run,
            catch,
            threshold: cusum_threshold(catch / 2.0, run)?,
            window,
            look_back,
            relevel: self.relevel.unwrap_or(true),
            discount_spikes: self.discount_spikes.unwrap_or(true),
        })
    }
}

/// A spike or level shift called by the monitor's online test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ShiftFinding {
    /// [`EventKind::AdditiveOutlier`] (a spike) or [`EventKind::LevelShift`].
    pub kind: EventKind,
    /// Index of the first reading the event touches.
    pub onset: u64,
    /// Its time (UTC epoch milliseconds) with a time axis.
    pub onset_time_ms: Option<i64>,
    /// Estimated size in reading units (the spike's excess, or the step).
    pub size: f64,
    /// Standard error of the size.
    pub se: f64,
    /// `size / se`.
    pub statistic: f64,
    /// Readings from the onset to the decision, inclusive.
    pub readings_used: usize,
    /// Whether the monitor acted on it (re-levelled, or replayed the spike as missing).
    pub applied: bool,
}

/// One reading kept for replay: the filter input (reading less regression and level
/// offset; NaN when missing), its innovation and one-step standard deviation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
struct Kept {
    #[serde(with = "crate::base::nan_as_null::one")]
    z: f64,
    #[serde(with = "crate::base::nan_as_null::one")]
    e: f64,
    sd: f64,
}

/// An open decision.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
struct Pending {
    /// The reading that opened the decision (a spike's place).
    onset: u64,
    /// The earliest onset a shift may have: the trigger or the CUSUM's last zero.
    earliest: u64,
    decide_at: u64,
    /// +1 / −1 once the CUSUM has signalled upward / downward, 0 before.
    signal: i8,
}

/// One kind's least-squares fit from an onset to the decision.
struct Estimate {
    onset: u64,
    size: f64,
    se: f64,
    sxe: f64,
}

impl Estimate {
    fn statistic(&self) -> f64 {
        self.size / self.se
    }
}

/// How far above the alarm quantile a shift's statistic must be to be called without a
/// CUSUM signal (only where a shift leaves a transient on the innovations that fades
/// within the decision window — integrated models — so the CUSUM may never signal).
const SHIFT_MARGIN: f64 = 1.0;

/// A level shift already applied and still being estimated: each reading from its onset
/// refines the size by weighted least squares on the innovations the filter would have
/// without the shift (recursive GLS), and predictions carry the difference between the
/// estimate and the applied size and the estimate's variance. When it settles the
/// difference is applied by a replay. Without this, a size estimated from a few
/// readings (biased away from 0 on a false signal) would bias the re-levelled monitor
/// and bring on a signal the other way.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct Settling {
    onset: u64,
    applied: f64,
    estimate: f64,
    sxe: f64,
    sxx: f64,
    /// The level shift's innovation pattern x_j (constant beyond its end).
    pattern: Vec<f64>,
    until: u64,
}

impl Settling {
    fn x(&self, index: u64) -> f64 {
        let j = (index - self.onset) as usize;
        self.pattern
            .get(j)
            .or(self.pattern.last())
            .copied()
            .unwrap_or(0.0)
    }
}

/// The running state of the test inside a monitor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ShiftState {
    test: ShiftTest,
    high: f64,
    low: f64,
    high_from: u64,
    low_from: u64,
    pub(crate) offset: f64,
    pending: Option<Pending>,
    settling: Option<Settling>,
    /// Filter states before readings `starts[0]` and `starts[1]`.
    snapshots: [FilterState; 2],
    starts: [u64; 2],
    /// Filter inputs from `starts[0]` on.
    kept: VecDeque<Kept>,
}

/// What the test adds to one reading's check.
pub(crate) struct ShiftStep {
    pub cusum: f64,
    pub finding: Option<ShiftFinding>,
}

impl ShiftState {
    pub(crate) fn new(test: ShiftTest, state: &FilterState) -> Self {
        // The kept inputs grow to between one and two look-backs (three while a shift
        // settles) in the first readings and are reused from then on.
        let kept = VecDeque::new();
        let at = state.next_index;
        ShiftState {
            test,
            high: 0.0,
            low: 0.0,
            high_from: at,
            low_from: at,
            offset: 0.0,
            pending: None,
            settling: None,
            snapshots: [state.clone(), state.clone()],
            starts: [at, at],
            kept,
        }
    }

    pub(crate) fn test(&self) -> &ShiftTest {
        &self.test
    }

    /// What an unsettled level shift adds to the prediction of reading `index`: the
    /// mean (estimate less applied size, times the shift's innovation pattern) and the
    /// variance of the estimate's share.
    pub(crate) fn correction(&self, index: u64) -> (f64, f64) {
        match &self.settling {
            Some(s) => {
                let x = s.x(index);
                ((s.estimate - s.applied) * x, x * x / s.sxx)
            }
            None => (0.0, 0.0),
        }
    }

    /// The level added to the model's mean: the applied shifts, with an unsettled one
    /// at its latest estimate.
    pub(crate) fn level(&self) -> f64 {
        self.offset
            + self
                .settling
                .as_ref()
                .map_or(0.0, |s| s.estimate - s.applied)
    }

    /// Signed size of the larger chart (+ upward).
    fn cusum(&self) -> f64 {
        if self.high >= self.low {
            self.high
        } else {
            -self.low
        }
    }

    /// Record reading `index` (already stepped through `state`): its filter input `z`,
    /// innovation `e` (NaN if missing), one-step sd, whether it fell outside the alarm
    /// interval; may decide and act, replaying `state`.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn record(
        &mut self,
        model: &ForecastModel,
        state: &mut FilterState,
        index: u64,
        z: f64,
        e: f64,
        sd: f64,
        filter_sd: f64,
        outside: bool,
        alarm_z: f64,
        axis: Option<crate::base::grid::TimeAxis>,
    ) -> ShiftStep {
        self.kept.push_back(Kept { z, e, sd });
        if let Some(s) = &mut self.settling {
            let x = s.x(index);
            if e.is_finite() {
                let w = 1.0 / (filter_sd * filter_sd);
                s.sxe += x * (e + s.estimate * x) * w;
                s.sxx += x * x * w;
                s.estimate = s.sxe / s.sxx;
            }
        }
        let k = self.test.reference();
        let h = self.test.threshold;
        let u = e / sd;
        if u.is_finite() {
            self.high = (self.high + u - k).max(0.0);
            self.low = (self.low - u - k).max(0.0);
            if self.high == 0.0 {
                self.high_from = index + 1;
            }
            if self.low == 0.0 {
                self.low_from = index + 1;
            }
        }
        let window = self.test.window as u64;
        if outside && self.pending.is_none() {
            self.pending = Some(Pending {
                onset: index,
                earliest: index,
                decide_at: index + window - 1,
                signal: 0,
            });
        }
        let signal = if self.high > h {
            1
        } else if self.low > h {
            -1
        } else {
            0
        };
        if signal != 0 {
            let from = if signal > 0 {
                self.high_from
            } else {
                self.low_from
            };
            let from = from.max(self.starts[0]).min(index);
            let p = self.pending.get_or_insert(Pending {
                onset: from,
                earliest: from,
                decide_at: 0,
                signal,
            });
            p.signal = signal;
            p.earliest = p.earliest.min(from);
            p.decide_at = p.decide_at.max(p.onset + window - 1).max(index);
        }
        let mut finding = None;
        if let Some(p) = self.pending
            && index >= p.decide_at
        {
            self.pending = None;
            finding = self.decide(model, state, p, index, alarm_z, axis);
            // A called event or a spent signal restarts both charts.
            if finding.is_some() || p.signal != 0 {
                self.high = 0.0;
                self.low = 0.0;
                self.high_from = index + 1;
                self.low_from = index + 1;
            }
        }
        if self.pending.is_none() && self.settling.as_ref().is_some_and(|s| index + 1 >= s.until) {
            self.settle(model, state);
        }
        let onsets_kept = self
            .settling
            .as_ref()
            .is_none_or(|s| s.onset >= self.starts[1]);
        if self.pending.is_none()
            && onsets_kept
            && index + 1 - self.starts[1] >= self.test.look_back as u64
        {
            self.snapshots.swap(0, 1);
            self.snapshots[1].copy_from(state);
            let drop = (self.starts[1] - self.starts[0]) as usize;
            self.kept.drain(..drop.min(self.kept.len()));
            self.starts = [self.starts[1], index + 1];
        }
        ShiftStep {
            cusum: self.cusum(),
            finding,
        }
    }

    /// Estimate both kinds from `p.onset` to `now`, call one (or none) and act on it.
    fn decide(
        &mut self,
        model: &ForecastModel,
        state: &mut FilterState,
        p: Pending,
        now: u64,
        alarm_z: f64,
        axis: Option<crate::base::grid::TimeAxis>,
    ) -> Option<ShiftFinding> {
        self.settle(model, state);
        let earliest = p.earliest.max(self.starts[0]);
        // One set of π-weights serves the fits here and a settling shift's pattern.
        let look = self.test.look_back;
        let pi = pi_weights(model, ((now - earliest + 1) as usize).max(look));
        let spike_x = event_response(EventKind::AdditiveOutlier, &pi, 0.0);
        let shift_x = event_response(EventKind::LevelShift, &pi, 0.0);
        let kept = &self.kept;
        let start = self.starts[0];
        let fit = |x: &[f64], onset: u64| -> Option<Estimate> {
            let first = (onset - start) as usize;
            let (mut sxe, mut sxx) = (0.0, 0.0);
            for (j, xj) in x[..(now - onset + 1) as usize].iter().enumerate() {
                let r = kept[first + j];
                if r.e.is_finite() {
                    let w = 1.0 / (r.sd * r.sd);
                    sxe += xj * r.e * w;
                    sxx += xj * xj * w;
                }
            }
            (sxx > 0.0 && sxx.is_finite()).then(|| Estimate {
                onset,
                size: sxe / sxx,
                se: 1.0 / sxx.sqrt(),
                sxe,
            })
        };
        let spike = fit(&spike_x, p.onset);
        // A shift's onset: the best-fitting reading from the earliest candidate to the
        // trigger (Chen & Liu's maximum over places).
        let shift = (earliest..=p.onset.min(now))
            .filter_map(|o| fit(&shift_x, o))
            .max_by(|a, b| a.statistic().abs().total_cmp(&b.statistic().abs()));
        let stat = |f: &Option<Estimate>| f.as_ref().map_or(0.0, |e| e.statistic());
        let shift_wins = stat(&shift).abs() > stat(&spike).abs();
        // A shift whose trace on the innovations has faded within the decision window
        // (integrated models) cannot build up a CUSUM: its own statistic decides.
        let w = (self.test.window - 1).min(shift_x.len() - 1);
        let transient = shift_x[w].abs() < 0.1 * shift_x[0].abs();
        let called = if shift_wins
            && ((p.signal != 0 && stat(&shift).signum() == f64::from(p.signal))
                || (transient && stat(&shift).abs() >= alarm_z + SHIFT_MARGIN))
        {
            shift.map(|e| (EventKind::LevelShift, e))
        } else if shift_wins && !transient && p.signal == 0 && self.rising(&shift, now, p.onset) {
            // A shift fits better but the CUSUM has not confirmed it yet: keep the
            // decision open while the chart in its direction keeps climbing.
            self.pending = Some(Pending {
                decide_at: now + 1,
                ..p
            });
            None
        } else if stat(&spike).abs() >= alarm_z {
            spike.map(|e| (EventKind::AdditiveOutlier, e))
        } else {
            None
        };
        let (
            kind,
            Estimate {
                onset,
                size,
                se,
                sxe,
            },
        ) = called?;
        let first = (onset - start) as usize;
        let applied = match kind {
            EventKind::LevelShift if self.test.relevel => {
                self.move_level(first, size);
                self.settling = Some(Settling {
                    onset,
                    applied: size,
                    estimate: size,
                    sxe,
                    sxx: 1.0 / (se * se),
                    pattern: shift_x[..look].to_vec(),
                    until: (onset + look as u64).max(now + 1),
                });
                true
            }
            EventKind::AdditiveOutlier if self.test.discount_spikes => {
                self.kept[first].z = f64::NAN;
                true
            }
            _ => false,
        };
        if applied {
            self.replay(model, state);
        }
        Some(ShiftFinding {
            kind,
            onset,
            onset_time_ms: axis.and_then(|a| a.time_of(onset)),
            size,
            se,
            statistic: size / se,
            readings_used: (now - onset + 1) as usize,
            applied,
        })
    }

    /// Whether the chart in the direction of `shift` is above 0 and the decision opened
    /// at `onset` is younger than half the look-back.
    fn rising(&self, shift: &Option<Estimate>, now: u64, onset: u64) -> bool {
        let chart = match shift {
            Some(e) if e.size > 0.0 => self.high,
            Some(_) => self.low,
            None => 0.0,
        };
        chart > 0.0 && ((now - onset) as usize) < self.test.look_back / 2
    }

    /// Move the level by `size` from kept reading `first` on (the replay follows).
    fn move_level(&mut self, first: usize, size: f64) {
        for kept in self.kept.range_mut(first..) {
            kept.z -= size;
        }
        self.offset += size;
    }

    /// Apply an unsettled shift's latest estimate (replaying) and stop refining it.
    fn settle(&mut self, model: &ForecastModel, state: &mut FilterState) {
        let Some(s) = self.settling.take() else {
            return;
        };
        let change = s.estimate - s.applied;
        if change != 0.0 && change.is_finite() {
            self.move_level((s.onset - self.starts[0]) as usize, change);
            self.replay(model, state);
        }
    }

    /// The monitor's state as it would be with any unsettled shift applied at its
    /// latest estimate (for forecasts).
    pub(crate) fn settled_copy(
        &self,
        model: &ForecastModel,
        state: &FilterState,
    ) -> Option<(Self, FilterState)> {
        self.settling.as_ref()?;
        let (mut copy, mut st) = (self.clone(), state.clone());
        copy.settle(model, &mut st);
        Some((copy, st))
    }

    /// Run the filter again from the older snapshot over the kept inputs.
    fn replay(&mut self, model: &ForecastModel, state: &mut FilterState) {
        state.copy_from(&self.snapshots[0]);
        let second = (self.starts[1] - self.starts[0]) as usize;
        for (j, kept) in self.kept.iter_mut().enumerate() {
            if j == second {
                self.snapshots[1].copy_from(state);
            }
            let (pred, f) = state.predict(model);
            state.step(model, kept.z);
            kept.e = kept.z - pred;
            kept.sd = (model.sigma2 * f).sqrt();
        }
        if second == self.kept.len() {
            self.snapshots[1].copy_from(state);
        }
    }

    pub(crate) fn validate(
        &self,
        model: &ForecastModel,
        next: u64,
    ) -> std::result::Result<(), String> {
        self.test.check()?;
        for s in &self.snapshots {
            s.validate_for(model)?;
        }
        let ok = self.starts[0] <= self.starts[1]
            && self.starts[1] <= next
            && self.snapshots[0].next_index == self.starts[0]
            && self.snapshots[1].next_index == self.starts[1]
            && (next - self.starts[0]) as usize == self.kept.len()
            && self.high.is_finite()
            && self.low.is_finite()
            && self.offset.is_finite()
            && self
                .pending
                .is_none_or(|p| p.onset >= self.starts[0] && p.onset < next)
            && self.settling.as_ref().is_none_or(|s| {
                s.onset >= self.starts[0]
                    && s.onset < next
                    && s.sxx > 0.0
                    && s.sxx.is_finite()
                    && s.estimate.is_finite()
                    && s.applied.is_finite()
                    && !s.pattern.is_empty()
            });
        ok.then_some(())
            .ok_or_else(|| "shift test state does not match the monitor".to_string())
    }
}
