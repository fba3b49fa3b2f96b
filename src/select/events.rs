//! Sensor events on the innovations: additive outliers (a single wrong reading),
//! innovational outliers (a shock that propagates through the model's dynamics), level
//! shifts (a step that stays, e.g. after maintenance) and temporary changes (a step that
//! decays), found by the iterative procedure of Chen & Liu (1993, Journal of the American
//! Statistical Association 88, 284–297).
//!
//! Each kind leaves a known pattern on the one-step residuals: an event of size ω at
//! reading T adds ω·x_k to the residual at T + k, where x = π(B)ξ(B) with π(B) =
//! φ(B)α(B)/θ(B) the model's residual filter (α the differencing) and ξ the event's
//! shape on the series (additive outlier 1; innovational outlier 1/π(B); level shift
//! 1/(1 − B); temporary change 1/(1 − δB)). The size is estimated by least squares on
//! the residuals, ω̂ = Σ x_k e_{T+k} / Σ x_k², and judged by τ = ω̂·√(Σ x_k²)/σ̂ with a
//! robust residual scale σ̂ = 1.4826·MAD.
//!
//! The procedure: (1) from the current model's residuals, find the reading and kind with
//! the largest |τ|; if it exceeds the screening value (the critical value C less 1),
//! record it, remove its pattern from the residuals and look again; (2) when a round finds
//! events, check by refitting whether an innovational outlier or temporary change is a
//! level shift hidden by the contaminated model, remove their effects from the series,
//! refit the model
//! (conditional sum of squares) and search the original series' residuals under the new
//! model afresh, until a round finds the same events; (3) estimate the sizes jointly by least squares of the
//! residuals on the events' patterns and drop the least significant while its |t| < C;
//! (4) refit the model with the remaining events as regressors (regression with ARMA
//! errors, the caller's estimator, so sizes come with standard errors), dropping any that
//! falls below C there. Missing readings and
//! readings lost to differencing carry no residual and take no event.

use serde::{Deserialize, Serialize};

use crate::base::dist::two_sided_quantile;
use crate::base::error::{Error, Result};
use crate::base::screen::{ConstantPolicy, screen};
use crate::filter::patterns::{event_response, pi_weights, psi_weights};
use crate::fit::fitted::{FitWorkspace, FittedModel};
use crate::model::coefficients::Term;
use crate::model::event::{EventKind, effect_at};

/// Settings of an event search (build with [`EventSettings::builder`]).
#[derive(Debug, Clone, PartialEq)]
pub struct EventSettings {
    kinds: Vec<EventKind>,
    critical: Option<f64>,
    decay: f64,
    max_rounds: usize,
    max_events: Option<usize>,
}

impl Default for EventSettings {
    fn default() -> Self {
        EventSettings {
            kinds: EventKind::ALL.to_vec(),
            critical: None,
            decay: 0.7,
            max_rounds: 4,
            max_events: None,
        }
    }
}

impl EventSettings {
    /// Start from the defaults: all four kinds, the critical value by series length
    /// ([`event_critical_value`]), temporary changes decaying by 0.7 per reading (Chen &
    /// Liu's choice), at most 4 detect-and-refit rounds, at most one event per 20 readings.
    pub fn builder() -> EventSettingsBuilder {
        EventSettingsBuilder {
            settings: EventSettings::default(),
        }
    }
    /// The kinds looked for.
    pub fn kinds(&self) -> &[EventKind] {
        &self.kinds
    }
    /// The fixed critical value, if set (else by length).
    pub fn critical(&self) -> Option<f64> {
        self.critical
    }
    /// Decay per reading of a temporary change.
    pub fn decay(&self) -> f64 {
        self.decay
    }
    /// Rounds of detection and refit.
    pub fn max_rounds(&self) -> usize {
        self.max_rounds
    }
}

/// Builder of [`EventSettings`].
#[derive(Debug, Clone)]
pub struct EventSettingsBuilder {
    settings: EventSettings,
}

impl EventSettingsBuilder {
    /// Look only for these kinds.
    pub fn kinds(&mut self, kinds: &[EventKind]) -> &mut Self {
        self.settings.kinds = kinds.to_vec();
        self
    }
    /// A fixed critical value for |τ| instead of the one by series length.
    pub fn critical_value(&mut self, c: f64) -> &mut Self {
        self.settings.critical = Some(c);
        self
    }
    /// Decay per reading of a temporary change (0 < δ < 1).
    pub fn decay(&mut self, decay: f64) -> &mut Self {
        self.settings.decay = decay;
        self
    }
    /// Rounds of detection and refit (at least 1).
    pub fn max_rounds(&mut self, rounds: usize) -> &mut Self {
        self.settings.max_rounds = rounds;
        self
    }
    /// At most this many events in all.
    pub fn max_events(&mut self, events: usize) -> &mut Self {
        self.settings.max_events = Some(events);
        self
    }
    /// Check and build.
    pub fn build(&self) -> Result<EventSettings> {
        const WHAT: &str = "event settings";
        let s = &self.settings;
        if s.kinds.is_empty() {
            return Err(Error::invalid(WHAT, "no event kind to look for"));
        }
        if let Some(c) = s.critical
            && !(c > 0.0 && c.is_finite())
        {
            return Err(Error::invalid(
                WHAT,
                format!("critical value {c} must be positive"),
            ));
        }
        if !(s.decay > 0.0 && s.decay < 1.0) {
            return Err(Error::invalid(
                WHAT,
                format!("decay {} must lie strictly between 0 and 1", s.decay),
            ));
        }
        if s.max_rounds == 0 {
            return Err(Error::invalid(WHAT, "at least one round is needed"));
        }
        let mut kinds = s.kinds.clone();
        kinds.sort_by_key(|k| EventKind::ALL.iter().position(|a| a == k));
        kinds.dedup();
        Ok(EventSettings { kinds, ..s.clone() })
    }
}

/// The critical value for |τ| by series length: the two-sided normal quantile that
/// holds the chance of any false event in a clean series near 5% when every reading
/// is tested for each of `kinds` kinds (Bonferroni: `Φ⁻¹(1 − 0.05 / (2·kinds·n))`):
/// 3.84 at n = 100 with four kinds, 4.21 at n = 500, 4.52 at n = 2,016, 4.85 at
/// n = 10⁴. A fixed value can be set instead ([`EventSettingsBuilder::critical_value`];
/// 3 to 4 is common practice for short series).
pub fn event_critical_value(readings: usize, kinds: usize) -> f64 {
    let tests = (readings.max(1) * kinds.max(1)) as f64;
    two_sided_quantile(1.0 - 0.05 / tests, "event critical value").unwrap_or(3.5)
}

/// Stage I screens at the critical value less this margin; the joint stages then keep only
/// events whose |t| reaches the critical value itself. A model fitted to a contaminated
/// series can hide a large event (a level shift absorbed into φ ≈ 0.9 leaves |τ| ≈ 3.8
/// for a 6σ shift at n = 500); screening lower finds it, the joint stages confirm it.
/// The margin trades such rescues against cost, since every screened candidate costs a
/// provisional refit: in the detection study (`examples/event_study.rs`) margins 0, 0.5
/// and 1.0 found 92%, 98% and 100% of 5σ level shifts at n = 500, and in the fleet
/// benchmark (`examples/fleet.rs -- --events`) the search cost 2.1×, 2.1× and 3.8× the
/// plain fit. 0.5 keeps most of the rescue at the cost target.
const SCREEN_MARGIN: f64 = 0.5;

/// One event found.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct SensorEvent {
    /// Kind.
    pub kind: EventKind,
    /// Index of the reading where it starts.
    pub index: u64,
    /// Its time (UTC epoch ms) when the model has a time axis.
    pub time_ms: Option<i64>,
    /// Size ω on the series' scale (for a level shift: the step; for an additive outlier:
    /// how far the reading is off).
    pub size: f64,
    /// Standard error of the size from the joint refit.
    pub std_error: Option<f64>,
    /// The size over its standard error in the joint refit (the detection statistic τ
    /// when no standard error is available).
    pub statistic: f64,
}

/// The result of [`FittedModel::find_events`].
#[derive(Debug, Clone, Serialize, Deserialize)]
#[non_exhaustive]
pub struct EventSearch {
    /// Events, in time order.
    pub events: Vec<SensorEvent>,
    /// The model refitted with the events as regressors (after the caller's own
    /// regressors, if any). Without events: the model searched, unchanged.
    pub model: FittedModel,
    /// The critical value used.
    pub critical_value: f64,
    /// Detect-and-refit rounds run.
    pub rounds: usize,
    /// The series with the events' effects removed (missing readings stay NaN).
    #[serde(with = "crate::base::nan_as_null")]
    pub adjusted: Vec<f64>,
    /// Decay of temporary changes (needed to extend their regressors).
    pub decay: f64,
}

impl EventSearch {
    /// The events' regressor columns for `horizon` readings after the series (to pass to
    /// [`FittedModel::forecast_given_regressors`] of [`EventSearch::model`], after the
    /// caller's own future columns): a level shift stays 1, a temporary change decays,
    /// additive outliers are 0, innovational outliers continue their ψ-weights.
    pub fn columns_ahead(&self, series_len: usize, horizon: usize) -> Vec<Vec<f64>> {
        let psi = psi_weights(&self.model.forecaster, series_len + horizon);
        self.events
            .iter()
            .map(|e| {
                (series_len..series_len + horizon)
                    .map(|t| effect_at(e.kind, e.index as usize, t, self.decay, &psi))
                    .collect()
            })
            .collect()
    }
}

/// The residual pattern of a unit event of each kind (x = π(B)ξ(B)), with its constant
/// tail split off: `head[k] = x_k − tail` for k < head.len(), x_k = tail beyond.
struct Pattern {
    head: Vec<f64>,
    tail: f64,
    /// `head_k² + 2·tail·head_k`: the head's share of Σx² (see [`score`]).
    square: Vec<f64>,
    /// Prefix sums of `square`: the head's share of Σx² where every reading has a
    /// residual, in O(1).
    square_prefix: Vec<f64>,
}

fn pattern(kind: EventKind, pi: &[f64], decay: f64) -> Pattern {
    let x = event_response(kind, pi, decay);
    let n = x.len();
    let tail = x[n - 1];
    let scale = x
        .iter()
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    let keep = x
        .iter()
        .rposition(|v| (v - tail).abs() > 1e-8 * scale)
        .map_or(1, |k| k + 1);
    let head: Vec<f64> = x[..keep].iter().map(|v| v - tail).collect();
    let square: Vec<f64> = head.iter().map(|h| h * h + 2.0 * tail * h).collect();
    let mut square_prefix = Vec::with_capacity(square.len() + 1);
    square_prefix.push(0.0);
    for q in &square {
        square_prefix.push(square_prefix.last().copied().unwrap_or(0.0) + q);
    }
    Pattern {
        head,
        tail,
        square,
        square_prefix,
    }
}

/// The residuals as the scan reads them: values with missing ones as 0, a 1/0 mask, and
/// suffix sums of both (so a pattern's constant tail costs O(1) per reading).
struct Scan {
    values: Vec<f64>,
    mask: Vec<f64>,
    suffix_sum: Vec<f64>,
    suffix_count: Vec<f64>,
}

impl Scan {
    fn new(e: &[f64]) -> Scan {
        let n = e.len();
        let mut scan = Scan {
            values: e
                .iter()
                .map(|v| if v.is_finite() { *v } else { 0.0 })
                .collect(),
            mask: e
                .iter()
                .map(|v| f64::from(u8::from(v.is_finite())))
                .collect(),
            suffix_sum: vec![0.0; n + 1],
            suffix_count: vec![0.0; n + 1],
        };
        scan.refresh();
        scan
    }
    fn refresh(&mut self) {
        for t in (0..self.values.len()).rev() {
            self.suffix_sum[t] = self.suffix_sum[t + 1] + self.values[t];
            self.suffix_count[t] = self.suffix_count[t + 1] + self.mask[t];
        }
    }
}

/// Dot product in four lanes (lets the compiler vectorise; the scan is the event
/// search's hot loop).
fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a4, b4) = (a[..n].chunks_exact(4), b[..n].chunks_exact(4));
    let (ra, rb) = (a4.remainder(), b4.remainder());
    let mut acc = [0.0f64; 4];
    for (x, y) in a4.zip(b4) {
        for l in 0..4 {
            acc[l] += x[l] * y[l];
        }
    }
    let tail: f64 = ra.iter().zip(rb).map(|(x, y)| x * y).sum();
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// ω̂ and τ for an event starting at `at` with pattern `p`: with x_k = head_k + tail,
/// Σx_k e_{at+k} = Σ head_k e_{at+k} + tail·Σ_{t≥at} e_t and Σx_k² (over readings with a
/// residual) = Σ (head_k² + 2·tail·head_k) + tail²·count — two short dot products and
/// two suffix sums.
fn score(p: &Pattern, scan: &Scan, at: usize, sigma: f64) -> Option<(f64, f64)> {
    let (sxe, sxx) = sums(p, scan, at);
    if !(sxx > 1e-12) {
        return None;
    }
    let omega = sxe / sxx;
    Some((omega, omega * sxx.sqrt() / sigma))
}

/// Σx_k e_{at+k} for every reading and every kind from one correlation: with `a` the
/// additive outlier's sums (x = π), a level shift's (x = π/(1 − B)) satisfy
/// l(at) = a(at) + l(at + 1), a temporary change's (x = π/(1 − δB)) t(at) = a(at) +
/// δ·t(at + 1), and an innovational outlier's (x = 1) are the residuals themselves — so
/// the scan's cost is that of the additive outlier's pattern alone.
#[derive(Default)]
struct CrossSums {
    spike: Vec<f64>,
    shift: Vec<f64>,
    temporary: Vec<f64>,
    shock: Vec<f64>,
}

impl CrossSums {
    fn refresh(&mut self, spike: &Pattern, scan: &Scan, decay: f64) {
        let n = scan.values.len();
        for v in [
            &mut self.spike,
            &mut self.shift,
            &mut self.temporary,
            &mut self.shock,
        ] {
            v.clear();
            v.resize(n, 0.0);
        }
        let c = spike.tail;
        for at in 0..n {
            let m = spike.head.len().min(n - at);
            self.spike[at] =
                dot(&spike.head[..m], &scan.values[at..at + m]) + c * scan.suffix_sum[at];
        }
        let (mut shift, mut temporary) = (0.0, 0.0);
        for at in (0..n).rev() {
            shift += self.spike[at];
            temporary = self.spike[at] + decay * temporary;
            self.shift[at] = shift;
            self.temporary[at] = temporary;
        }
        self.shock.copy_from_slice(&scan.values);
    }
    fn of(&self, kind: EventKind) -> &[f64] {
        match kind {
            EventKind::AdditiveOutlier => &self.spike,
            EventKind::LevelShift => &self.shift,
            EventKind::TemporaryChange => &self.temporary,
            _ => &self.shock,
        }
    }
}

/// Σx_k² over the readings with a residual (see [`score`]).
fn squares(p: &Pattern, scan: &Scan, at: usize) -> f64 {
    let n = scan.values.len();
    let m = p.head.len().min(n - at);
    let c = p.tail;
    // Σx² depends only on which readings have a residual: without a gap under the
    // pattern's head it is a prefix sum.
    let head_share = if scan.suffix_count[at] - scan.suffix_count[at + m] == m as f64 {
        p.square_prefix[m]
    } else {
        dot(&p.square[..m], &scan.mask[at..at + m])
    };
    head_share + c * c * scan.suffix_count[at]
}

/// Σx_k e_{at+k} and Σx_k² (see [`score`]).
fn sums(p: &Pattern, scan: &Scan, at: usize) -> (f64, f64) {
    let n = scan.values.len();
    let m = p.head.len().min(n - at);
    let c = p.tail;
    let sxe = dot(&p.head[..m], &scan.values[at..at + m]) + c * scan.suffix_sum[at];
    (sxe, squares(p, scan, at))
}

fn robust_scale(e: &[f64]) -> Option<f64> {
    let mut a: Vec<f64> = e.iter().copied().filter(|v| v.is_finite()).collect();
    if a.len() < 8 {
        return None;
    }
    let mid = a.len() / 2;
    a.select_nth_unstable_by(mid, f64::total_cmp);
    let med = a[mid];
    let mut dev: Vec<f64> = a.iter().map(|v| (v - med).abs()).collect();
    dev.select_nth_unstable_by(mid, f64::total_cmp);
    let s = 1.4826 * dev[mid];
    (s > 0.0 && s.is_finite()).then_some(s)
}

/// A detected event before the joint refit.
#[derive(Debug, Clone, Copy)]
struct Found {
    kind: EventKind,
    at: usize,
    size: f64,
    tau: f64,
}

/// One round of detection on the residuals `e` (NaN = none) of a model with π-weights
/// `pi`: events found, largest |τ| first, each removed from `e` before the next look.
fn detect(
    mut e: Vec<f64>,
    pi: &[f64],
    settings: &EventSettings,
    critical: f64,
    budget: usize,
) -> Vec<Found> {
    let n = e.len();
    let Some(sigma) = robust_scale(&e) else {
        return Vec::new();
    };
    let patterns: Vec<(EventKind, Pattern)> = settings
        .kinds
        .iter()
        .map(|&k| (k, pattern(k, pi, settings.decay)))
        .collect();
    let spike = pattern(EventKind::AdditiveOutlier, pi, settings.decay);
    let mut scan = Scan::new(&e);
    let mut cross = CrossSums::default();
    let mut taken = vec![false; n];
    // A level shift at the first reading with a residual is the series' own level (the
    // mean, or the start of an integrated model): not an event, and not estimable
    // beside it.
    let first = e.iter().position(|v| v.is_finite()).unwrap_or(n);
    // Σx² per kind and reading: it depends only on which readings have a residual, so
    // it holds for every scan of this round. Readings that cannot take an event hold 0.
    let squares_at: Vec<Vec<f64>> = patterns
        .iter()
        .map(|(kind, p)| {
            (0..n)
                .map(|at| {
                    let barred =
                        scan.mask[at] == 0.0 || (at == first && *kind == EventKind::LevelShift);
                    if barred { 0.0 } else { squares(p, &scan, at) }
                })
                .collect()
        })
        .collect();
    let mut found = Vec::new();
    while found.len() < budget {
        // The largest |τ| is the largest (Σxe)²/Σx²: no square root or size per reading;
        // ties go to the earlier reading, then the earlier kind.
        let mut best: Option<(usize, usize, f64)> = None;
        cross.refresh(&spike, &scan, settings.decay);
        for (j, (kind, _)) in patterns.iter().enumerate() {
            let sums = cross.of(*kind);
            let mut top = (f64::NEG_INFINITY, 0usize);
            for (at, (&sxe, &sxx)) in sums.iter().zip(&squares_at[j]).enumerate() {
                if sxx > 1e-12 && !taken[at] {
                    let r = sxe * sxe / sxx;
                    if r > top.0 {
                        top = (r, at);
                    }
                }
            }
            if top.0 > f64::NEG_INFINITY
                && best.is_none_or(|b| top.0 > b.2 || (top.0 == b.2 && top.1 < b.0))
            {
                best = Some((top.1, j, top.0));
            }
        }
        let best = best.and_then(|(at, j, _)| {
            let (kind, p) = &patterns[j];
            score(p, &scan, at, sigma).map(|(size, tau)| Found {
                kind: *kind,
                at,
                size,
                tau,
            })
        });
        let Some(b) = best.filter(|b| b.tau.abs() > critical) else {
            break;
        };
        let p = &patterns
            .iter()
            .find(|(k, _)| *k == b.kind)
            .expect("kind searched")
            .1;
        remove_pattern(&mut e, p, b.at, b.size);
        for t in b.at..n {
            if scan.mask[t] != 0.0 {
                scan.values[t] = e[t];
            }
        }
        scan.refresh();
        taken[b.at] = true;
        found.push(b);
    }
    found
}

/// Chen & Liu's stage II: regress the residuals `e` on the events' patterns (least
/// squares over the readings with a residual), update the sizes and statistics, and drop
/// the event with the smallest |t| while it is below `critical`.
fn confirm_on_residuals(found: &mut Vec<Found>, e: &[f64], pi: &[f64], decay: f64, critical: f64) {
    let rows: Vec<usize> = (0..e.len()).filter(|&t| e[t].is_finite()).collect();
    let y: Vec<f64> = rows.iter().map(|&t| e[t]).collect();
    while !found.is_empty() {
        let columns: Vec<Vec<f64>> = found
            .iter()
            .map(|f| {
                let p = pattern(f.kind, pi, decay);
                rows.iter()
                    .map(|&t| {
                        if t < f.at {
                            0.0
                        } else {
                            p.head.get(t - f.at).copied().unwrap_or(0.0) + p.tail
                        }
                    })
                    .collect()
            })
            .collect();
        let Some((omega, cov)) = crate::base::linalg::least_squares(&columns, &y) else {
            // Patterns that cannot be told apart: keep the stronger.
            let weakest = (0..found.len())
                .min_by(|&a, &b| found[a].tau.abs().total_cmp(&found[b].tau.abs()))
                .expect("events remain");
            found.remove(weakest);
            continue;
        };
        let k = found.len();
        let fitted: Vec<f64> = (0..y.len())
            .map(|r| y[r] - (0..k).map(|j| omega[j] * columns[j][r]).sum::<f64>())
            .collect();
        let Some(sigma) = robust_scale(&fitted) else {
            found.clear();
            return;
        };
        for (j, f) in found.iter_mut().enumerate() {
            f.size = omega[j];
            f.tau = omega[j] / (sigma * cov[j * k + j].max(0.0).sqrt());
        }
        let (j, t) = found
            .iter()
            .enumerate()
            .map(|(j, f)| (j, f.tau.abs()))
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .expect("events remain");
        if t >= critical {
            return;
        }
        found.remove(j);
    }
}

/// Check by refitting whether an innovational outlier or temporary change is a level
/// shift: the residual patterns alone mislead when the model was fitted to the
/// contaminated series — a level shift absorbed into φ ≈ 0.9 looks like an innovational
/// outlier of that model, and removing it as one leaves φ where it was. For each such
/// event, the series is adjusted with the event read as a level shift (sized on the
/// residuals with the other events removed), the model refitted, and the reading that
/// leaves the smaller innovation variance kept. (The other confusions — additive outlier
/// against the rest — do not bias the model's coefficients this way.)
fn retype(
    found: &mut [Found],
    series: &[f64],
    regressors: &[&[f64]],
    quick_bp: &crate::model::blueprint::Blueprint,
    current: &FittedModel,
    settings: &EventSettings,
    workspace: &mut FitWorkspace,
) -> Option<FittedModel> {
    let suspect = |f: &Found| {
        matches!(
            f.kind,
            EventKind::InnovationalOutlier | EventKind::TemporaryChange
        )
    };
    if !settings.kinds.contains(&EventKind::LevelShift) || !found.iter().any(suspect) {
        return None;
    }
    let n = series.len();
    let pi = pi_weights(&current.forecaster, n);
    let psi = psi_weights(&current.forecaster, n);
    let base = residuals_of(current);
    let sigma = robust_scale(&base)?;
    let refit_after = |trial: &[Found], workspace: &mut FitWorkspace| {
        let adjusted = adjust(series, trial, settings.decay, &psi);
        quick_refit(quick_bp, &adjusted, regressors, current, workspace).ok()
    };
    let mut best = refit_after(found, workspace)?;
    let shift = pattern(EventKind::LevelShift, &pi, settings.decay);
    for i in 0..found.len() {
        if !suspect(&found[i]) {
            continue;
        }
        // The residuals of the original series with every other event removed.
        let mut e = base.clone();
        for (j, f) in found.iter().enumerate() {
            if j != i {
                remove_pattern(&mut e, &pattern(f.kind, &pi, settings.decay), f.at, f.size);
            }
        }
        let Some((size, tau)) = score(&shift, &Scan::new(&e), found[i].at, sigma) else {
            continue;
        };
        let mut trial = found.to_vec();
        trial[i] = Found {
            kind: EventKind::LevelShift,
            size,
            tau,
            ..found[i]
        };
        if let Some(m) = refit_after(&trial, workspace)
            && m.innovation_variance() < best.innovation_variance()
        {
            found[i] = trial[i];
            best = m;
        }
    }
    Some(best)
}

/// A provisional refit for the detection rounds: conditional sum of squares started from
/// the current model's coefficients, without standard errors or forecasting state (the
/// rounds need only the coefficients and residuals).
fn quick_refit(
    bp: &crate::model::blueprint::Blueprint,
    series: &[f64],
    regressors: &[&[f64]],
    start: &FittedModel,
    workspace: &mut FitWorkspace,
) -> Result<FittedModel> {
    let prep = crate::estimate::prepare(bp, series, regressors)?;
    let from = start.factor_coefficients();
    Ok(bp
        .fit_prepared_from(series, prep, Some(&from), workspace)?
        .into_model())
}

/// `e[t] −= size·x_{t−at}` for t ≥ at (pattern `p`), where `e` has a value.
fn remove_pattern(e: &mut [f64], p: &Pattern, at: usize, size: f64) {
    for t in at..e.len() {
        let x = p.head.get(t - at).copied().unwrap_or(0.0) + p.tail;
        if e[t].is_finite() {
            e[t] -= size * x;
        }
    }
}

/// The model's residuals on its own series, in the series' units.
fn residuals_of(model: &FittedModel) -> Vec<f64> {
    let sd = model.innovation_variance().sqrt();
    model
        .standardized_residuals()
        .iter()
        .map(|v| v * sd)
        .collect()
}

/// The series with the effects of `found` removed.
fn adjust(series: &[f64], found: &[Found], decay: f64, psi: &[f64]) -> Vec<f64> {
    (0..series.len())
        .map(|t| {
            series[t]
                - found
                    .iter()
                    .map(|f| f.size * effect_at(f.kind, f.at, t, decay, psi))
                    .sum::<f64>()
        })
        .collect()
}

impl FittedModel {
    /// Find sensor events — additive outliers, innovational outliers, level shifts,
    /// temporary changes — in `series` (the readings this model was fitted to; NaN =
    /// missing) by the procedure of Chen & Liu (1993) (see [`EventSettings`]), and refit
    /// the model with the events as regressors.
    ///
    /// ```
    /// use lagwise::{Blueprint, EventKind, EventSettings, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let mut x = Simulator::builder().autoregressive(&[0.5]).level(1.1).innovation_sd(0.02)
    ///     .build()?.generate(600, 9);
    /// for v in &mut x[400..] { *v += 0.12; } // valve work: the pressure steps up 0.12 bar
    /// x[150] += 0.15; // one bad reading
    /// let model = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
    /// let found = model.find_events(&x, &EventSettings::default())?;
    /// let shift = found.events.iter().find(|e| e.kind == EventKind::LevelShift).unwrap();
    /// assert_eq!(shift.index, 400);
    /// assert!((shift.size - 0.12).abs() < 0.03);
    /// assert!(found.events.iter().any(|e| e.kind == EventKind::AdditiveOutlier && e.index == 150));
    /// # Ok(()) }
    /// ```
    pub fn find_events(&self, series: &[f64], settings: &EventSettings) -> Result<EventSearch> {
        self.find_events_given_regressors(series, &[], settings)
    }

    /// [`FittedModel::find_events`] for a model with regressors (`regressors` one finite
    /// column per declared regressor over the series; the events' columns follow them in
    /// the refitted model).
    pub fn find_events_given_regressors(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
        settings: &EventSettings,
    ) -> Result<EventSearch> {
        const WHAT: &str = "event search";
        screen(series, WHAT, 1, ConstantPolicy::Allow)?;
        crate::estimate::check_regressors(self.blueprint(), series.len(), regressors, WHAT)?;
        if self.has_residuals() && self.residuals().len() != series.len() {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "the series has {} readings, the model was fitted to {}",
                    series.len(),
                    self.residuals().len()
                ),
            ));
        }
        let n = series.len();
        let critical = settings
            .critical
            .unwrap_or_else(|| event_critical_value(n, settings.kinds.len()));
        let budget = settings.max_events.unwrap_or((n / 20).max(1));
        let bp = self.blueprint().clone();
        let base_model = if self.has_residuals() {
            self.clone()
        } else {
            bp.fit_regression(series, regressors)?
        };
        // Rounds (Chen & Liu's stage I): the model is refitted (by conditional sum of
        // squares: quick, and only its coefficients are needed here) to the series
        // adjusted for the events of the previous round; the residuals of the original
        // series under that model (its own residuals plus the events' patterns) are
        // searched afresh, so an event can move or change kind as the model improves.
        // Stop when a round finds the same events as the one before.
        let mut workspace = FitWorkspace::new();
        let mut quick_bp = bp.clone();
        quick_bp.estimator = crate::model::blueprint::Estimator::ConditionalSumOfSquares;
        let mut found: Vec<Found> = Vec::new();
        let mut current = base_model.clone();
        let mut adjusted_by: Vec<Found> = Vec::new();
        let mut rounds = 0;
        let original_residuals = |model: &FittedModel, by: &[Found]| -> (Vec<f64>, Vec<f64>) {
            let pi = pi_weights(&model.forecaster, n);
            let mut e = residuals_of(model);
            for f in by {
                remove_pattern(&mut e, &pattern(f.kind, &pi, settings.decay), f.at, -f.size);
            }
            (e, pi)
        };
        while rounds < settings.max_rounds {
            rounds += 1;
            let (e, pi) = original_residuals(&current, &adjusted_by);
            let new = detect(e, &pi, settings, critical - SCREEN_MARGIN, budget);
            let same = new.len() == found.len()
                && new
                    .iter()
                    .all(|a| found.iter().any(|b| a.at == b.at && a.kind == b.kind));
            found = new;
            // Additive outliers below the critical value barely move the model: no
            // refit for them (stage II drops them). A level shift below it may be one
            // the contaminated model hides (φ drawn towards 1); it gets the refit.
            let quiet = found
                .iter()
                .all(|f| f.tau.abs() < critical && f.kind == EventKind::AdditiveOutlier);
            if found.is_empty() || same || quiet || rounds == settings.max_rounds {
                break;
            }
            let psi = psi_weights(&current.forecaster, n);
            // The retyping refits the model for the events it settles on; reuse it.
            let refitted = match retype(
                &mut found,
                series,
                regressors,
                &quick_bp,
                &current,
                settings,
                &mut workspace,
            ) {
                Some(m) => Ok(m),
                None => {
                    let adjusted = adjust(series, &found, settings.decay, &psi);
                    quick_refit(&quick_bp, &adjusted, regressors, &current, &mut workspace)
                }
            };
            match refitted {
                Ok(m) => {
                    current = m;
                    adjusted_by = found.clone();
                }
                Err(_) => break,
            }
        }
        // Stage II: the sizes jointly, by least squares of the original series' residuals
        // on the events' patterns (the model's coefficients held); the least significant
        // dropped while its |t| is below the critical value.
        if !found.is_empty() {
            let (e, pi) = original_residuals(&current, &adjusted_by);
            confirm_on_residuals(&mut found, &e, &pi, settings.decay, critical);
        }
        let none = |rounds| EventSearch {
            events: Vec::new(),
            model: base_model.clone(),
            critical_value: critical,
            rounds,
            adjusted: series.to_vec(),
            decay: settings.decay,
        };
        if found.is_empty() {
            return Ok(none(rounds));
        }
        // Stage III: the model refitted with the events as regressors (the caller's
        // estimator), so that sizes come with standard errors; an event that falls below
        // the critical value there is dropped and the model refitted.
        loop {
            found.sort_by_key(|f| f.at);
            let psi = psi_weights(&current.forecaster, n);
            let columns: Vec<Vec<f64>> = found
                .iter()
                .map(|f| {
                    (0..n)
                        .map(|t| effect_at(f.kind, f.at, t, settings.decay, &psi))
                        .collect()
                })
                .collect();
            let mut all: Vec<&[f64]> = regressors.to_vec();
            all.extend(columns.iter().map(Vec::as_slice));
            let mut joint_bp = bp.clone();
            joint_bp.exogenous = bp.exogenous + found.len();
            let joint = match joint_bp.fit_regression(series, &all) {
                Ok(j) => j,
                Err(_) => {
                    // Events that cannot be estimated together (e.g. two shifts a reading
                    // apart, or a shift the model's constant already carries): drop the
                    // one detected with the smallest |τ| and try again. The model itself
                    // was fitted, so a search whose events all fail reports none.
                    let weakest = (0..found.len())
                        .min_by(|&a, &b| found[a].tau.abs().total_cmp(&found[b].tau.abs()))
                        .expect("events remain");
                    found.remove(weakest);
                    if found.is_empty() {
                        return Ok(none(rounds));
                    }
                    continue;
                }
            };
            let stats: Vec<(f64, Option<f64>)> = (0..found.len())
                .map(|j| {
                    let c = joint.coefficient(Term::Exogenous(bp.exogenous + j + 1));
                    (
                        c.map_or(found[j].size, |c| c.value),
                        c.and_then(|c| c.std_error),
                    )
                })
                .collect();
            let weakest = stats
                .iter()
                .enumerate()
                .filter_map(|(j, (w, se))| se.map(|se| (j, (w / se).abs())))
                .min_by(|a, b| a.1.total_cmp(&b.1));
            if let Some((j, t)) = weakest
                && t < critical
            {
                found.remove(j);
                if found.is_empty() {
                    return Ok(none(rounds));
                }
                current = joint;
                continue;
            }
            let axis = self.time_axis();
            let events: Vec<SensorEvent> = found
                .iter()
                .zip(&stats)
                .map(|(f, &(size, se))| SensorEvent {
                    kind: f.kind,
                    index: f.at as u64,
                    time_ms: axis.and_then(|a| a.time_of(f.at as u64)),
                    size,
                    std_error: se,
                    statistic: se.map_or(f.tau, |se| size / se),
                })
                .collect();
            let sized: Vec<Found> = found
                .iter()
                .zip(&events)
                .map(|(f, e)| Found { size: e.size, ..*f })
                .collect();
            let adjusted = adjust(series, &sized, settings.decay, &psi);
            let model = match axis {
                Some(a) => joint.with_time_axis(a),
                None => joint,
            };
            return Ok(EventSearch {
                events,
                model,
                critical_value: critical,
                rounds,
                adjusted,
                decay: settings.decay,
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The critical values quoted in the documentation (checked with scipy:
    /// `norm.isf(0.05 / (2 * 4 * n))` = 3.836, 4.215, 4.519, 4.848).
    #[test]
    fn critical_values_by_length() {
        for (n, want) in [(100, 3.84), (500, 4.21), (2016, 4.52), (10_000, 4.85)] {
            let c = event_critical_value(n, 4);
            assert!((c - want).abs() < 0.006, "n = {n}: {c}");
        }
    }

    fn ar1(phi: f64) -> crate::filter::forecasting::ForecastModel {
        crate::filter::forecasting::ForecastModel {
            r: 1,
            phi: vec![phi],
            rvec: vec![1.0],
            c: Vec::new(),
            sigma2: 1.0,
            regression: Vec::new(),
        }
    }

    /// Residual patterns of unit events for an AR(1) model, against their closed forms
    /// from the definitions (π(B) = 1 − φB): AO 1, −φ, 0…; IO 1, 0…; LS 1, 1−φ, 1−φ…;
    /// TC 1, δ−φ, δ(δ−φ), δ²(δ−φ)….
    #[test]
    fn patterns_match_their_closed_forms() {
        let (phi, delta) = (0.6, 0.7);
        let pi = pi_weights(&ar1(phi), 50);
        assert_eq!(&pi[..3], &[1.0, -phi, 0.0]);
        let full = |kind| {
            let p = pattern(kind, &pi, delta);
            (0..50)
                .map(|k| p.head.get(k).copied().unwrap_or(0.0) + p.tail)
                .collect::<Vec<f64>>()
        };
        let ao = full(EventKind::AdditiveOutlier);
        assert!(
            (ao[0] - 1.0).abs() < 1e-15
                && (ao[1] + phi).abs() < 1e-15
                && ao[2..].iter().all(|v| v.abs() < 1e-15)
        );
        let io = full(EventKind::InnovationalOutlier);
        assert!(io[0] == 1.0 && io[1..].iter().all(|v| *v == 0.0));
        let ls = full(EventKind::LevelShift);
        assert!(
            ls[1..].iter().all(|v| (v - (1.0 - phi)).abs() < 1e-12),
            "{:?}",
            &ls[..4]
        );
        let tc = full(EventKind::TemporaryChange);
        for k in 1..20 {
            let want = delta.powi(k as i32 - 1) * (delta - phi);
            assert!(
                (tc[k] - want).abs() < 1e-12,
                "TC at {k}: {} vs {want}",
                tc[k]
            );
        }
    }

    /// The scan's sums from one correlation and two recursions equal each pattern's own
    /// dot products, and Σx² from prefix sums equals the masked dot product — on an
    /// ARMA(1,1) model's residuals with gaps (MA part: patterns with long heads).
    #[test]
    fn recursive_sums_equal_the_direct_ones() {
        let m = crate::filter::forecasting::ForecastModel {
            r: 2,
            phi: vec![0.6, 0.0],
            rvec: vec![1.0, 0.4],
            c: vec![1.0],
            sigma2: 1.0,
            regression: Vec::new(),
        };
        let n = 300;
        let pi = pi_weights(&m, n);
        let mut e: Vec<f64> = (0..n)
            .map(|t| ((t * 7919 % 101) as f64 - 50.0) / 17.0)
            .collect();
        for t in [0, 40, 41, 42, 150, 299] {
            e[t] = f64::NAN;
        }
        let scan = Scan::new(&e);
        let spike = pattern(EventKind::AdditiveOutlier, &pi, 0.7);
        let mut cross = CrossSums::default();
        cross.refresh(&spike, &scan, 0.7);
        for kind in EventKind::ALL {
            let p = pattern(kind, &pi, 0.7);
            for at in 0..n {
                let (sxe, sxx) = sums(&p, &scan, at);
                let direct_sxx = dot(&p.square[..p.head.len().min(n - at)], &scan.mask[at..])
                    + p.tail * p.tail * scan.suffix_count[at];
                // Both truncate the patterns where their terms fall below 1e-8 of the
                // largest: they agree to about that, summed over the readings.
                assert!(
                    (cross.of(kind)[at] - sxe).abs() <= 1e-6 * (1.0 + sxe.abs()),
                    "{kind:?} {at}: {} vs {sxe}",
                    cross.of(kind)[at]
                );
                assert!(
                    (sxx - direct_sxx).abs() <= 1e-12 * (1.0 + sxx),
                    "{kind:?} {at}"
                );
            }
        }
    }

    /// ω̂ and τ by the least-squares formulas on a hand-made residual vector: an LS of 2 at
    /// reading 10 of an AR(1) with φ = 0.5 leaves 2 at 10 and 1 from 11 on.
    #[test]
    fn score_recovers_an_exact_pattern() {
        let pi = pi_weights(&ar1(0.5), 40);
        let p = pattern(EventKind::LevelShift, &pi, 0.7);
        let mut e = vec![0.0; 40];
        e[10] = 2.0;
        for v in &mut e[11..] {
            *v = 1.0;
        }
        e[20] = f64::NAN; // a missing reading contributes nothing
        let (omega, tau) = score(&p, &Scan::new(&e), 10, 1.0).unwrap();
        assert!((omega - 2.0).abs() < 1e-12);
        // Σx² = 1 + 0.25·28 (29 later readings, one missing) = 8.
        assert!((tau - 2.0 * 8f64.sqrt()).abs() < 1e-12, "{tau}");
    }

    #[test]
    fn settings_are_checked() {
        assert!(EventSettings::builder().kinds(&[]).build().is_err());
        assert!(EventSettings::builder().decay(1.0).build().is_err());
        assert!(
            EventSettings::builder()
                .critical_value(-1.0)
                .build()
                .is_err()
        );
        assert!(EventSettings::builder().max_rounds(0).build().is_err());
        let s = EventSettings::builder()
            .kinds(&[
                EventKind::LevelShift,
                EventKind::AdditiveOutlier,
                EventKind::LevelShift,
            ])
            .build()
            .unwrap();
        assert_eq!(
            s.kinds(),
            &[EventKind::AdditiveOutlier, EventKind::LevelShift]
        );
    }
}
