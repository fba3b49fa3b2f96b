//! Forecasts with prediction intervals, and online monitoring of new readings.
//!
//! # The forecasting filter
//! Let `z_t = y_t − x_tᵀβ` be the reading minus its regression part (mean, drift,
//! exogenous columns) on the original scale. Then `z` is an ARIMA process: with the
//! differencing polynomial `(1 − B)^d (1 − B^s)^D = 1 − Σ c_k B^k` (degree δ = d + D·s),
//! `z_t = u_t + Σ c_k z_{t−k}` where `u` is the fitted ARMA. The filter carries the state
//! `[α_t (ARMA state, length r); z_{t−1}, …, z_{t−δ}]` and its covariance: the last δ
//! readings enter the state, so a missing reading near the end of the series makes them
//! uncertain and the forecast variances say so. The filter starts at the first time the
//! δ previous readings are all present, with the ARMA state at its stationary
//! distribution — for δ = 0 this is exactly the likelihood filter.
//!
//! Forecast means and variances propagate this state without measurement updates, so the
//! variances are the exact finite-sample ones given the readings (not psi-weight sums
//! from an infinite past), and integrated models are handled in the same mechanism.
//! Once the state covariance after an update vanishes (trace below 1e-14) the filter
//! runs in steady state: O(r + δ) per reading.

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::estimate::{self, Coefs};
use crate::spec::{Blueprint, Term};

/// Trace threshold for steady state (σ² = 1 units).
const STEADY: f64 = 1e-14;

/// Everything the forecasting filter needs about the model (serialisable).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ForecastModel {
    pub r: usize,
    pub phi: Vec<f64>,
    pub rvec: Vec<f64>,
    /// Differencing coefficients c_1..c_δ.
    pub c: Vec<f64>,
    pub sigma2: f64,
    /// Regression terms and coefficients (original scale).
    pub regression: Vec<(Term, f64)>,
}

impl ForecastModel {
    pub(crate) fn new(
        bp: &Blueprint,
        coefs: &Coefs,
        sigma2: f64,
        regression: Vec<(Term, f64)>,
    ) -> Self {
        let (phi_e, theta_e) = estimate::expanded(coefs, bp.period);
        let r = phi_e.len().max(theta_e.len() + 1);
        let mut phi = vec![0.0; r];
        phi[..phi_e.len()].copy_from_slice(&phi_e);
        let mut rvec = vec![0.0; r];
        rvec[0] = 1.0;
        rvec[1..=theta_e.len()].copy_from_slice(&theta_e);
        // 1 − Σ c_k B^k = (1 − B)^d (1 − B^s)^D
        let mut poly = vec![1.0];
        for _ in 0..bp.d {
            poly = crate::lag::multiply(&poly, &[1.0, -1.0]);
        }
        for _ in 0..bp.seasonal_d {
            let mut f = vec![0.0; bp.period + 1];
            f[0] = 1.0;
            f[bp.period] = -1.0;
            poly = crate::lag::multiply(&poly, &f);
        }
        let c: Vec<f64> = poly[1..].iter().map(|v| -v).collect();
        ForecastModel {
            r,
            phi,
            rvec,
            c,
            sigma2,
            regression,
        }
    }

    pub(crate) fn dim(&self) -> usize {
        self.r + self.c.len()
    }

    pub(crate) fn exogenous(&self) -> usize {
        self.regression
            .iter()
            .filter(|(t, _)| matches!(t, Term::Exogenous(_)))
            .count()
    }

    /// Regression part x_tᵀβ at time index `t` with exogenous values `x`.
    fn regression_at(&self, t: u64, x: &[f64]) -> f64 {
        self.regression
            .iter()
            .map(|(term, b)| {
                b * match term {
                    Term::Mean => 1.0,
                    Term::Drift => t as f64,
                    Term::Exogenous(i) => x[i - 1],
                    _ => 0.0,
                }
            })
            .sum()
    }

    /// Check the model's internal consistency (used when restoring from storage).
    pub(crate) fn validate(&self) -> std::result::Result<(), String> {
        if self.r == 0 || self.phi.len() != self.r || self.rvec.len() != self.r {
            return Err(format!(
                "state dimension {} does not match coefficient lengths {} and {}",
                self.r,
                self.phi.len(),
                self.rvec.len()
            ));
        }
        if !(self.sigma2 > 0.0 && self.sigma2.is_finite()) {
            return Err(format!(
                "innovation variance {} is not positive",
                self.sigma2
            ));
        }
        if self
            .phi
            .iter()
            .chain(&self.rvec)
            .chain(&self.c)
            .any(|v| !v.is_finite())
        {
            return Err("non-finite coefficient".into());
        }
        if !crate::lag::is_stationary(&self.phi) {
            return Err("AR coefficients are not stationary".into());
        }
        if !crate::lag::is_invertible(&self.rvec[1..]) {
            return Err("MA coefficients are not invertible".into());
        }
        if (self.rvec[0] - 1.0).abs() > 0.0 {
            return Err("the first MA weight must be 1".into());
        }
        Ok(())
    }
}

/// The filter's state after some readings (serialisable; restored monitors resume here).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct FilterState {
    /// Predicted state for the next reading: α (r) then z lags (δ).
    pub s: Vec<f64>,
    /// Its covariance (σ² = 1 units), row-major; empty in steady state.
    pub cov: Vec<f64>,
    /// Index of the next reading on the original time axis.
    pub next_index: u64,
}

impl FilterState {
    /// A placeholder for a candidate fit whose state is computed only if it is kept.
    pub(crate) fn pending() -> Self {
        FilterState {
            s: Vec::new(),
            cov: Vec::new(),
            next_index: 0,
        }
    }

    /// Start at time `t0` with the δ lags `lags` (newest first).
    fn start(m: &ForecastModel, lags: &[f64], t0: u64) -> Result<Self> {
        let r = m.r;
        let dim = m.dim();
        let mut s = vec![0.0; dim];
        s[r..].copy_from_slice(lags);
        let mut kw = crate::kalman::KalmanWorkspace::default();
        let theta: Vec<f64> = m.rvec[1..].to_vec();
        let phi: Vec<f64> = m.phi.clone();
        kw.set_model(trim(&phi), trim(&theta))?;
        let p0 = kw.stationary_matrix();
        let r0 = kw.r;
        let mut cov = vec![0.0; dim * dim];
        for i in 0..r0.min(r) {
            for j in 0..r0.min(r) {
                cov[i * dim + j] = p0[i * r0 + j];
            }
        }
        Ok(FilterState {
            s,
            cov,
            next_index: t0,
        })
    }

    fn steady(&self) -> bool {
        self.cov.is_empty()
    }

    /// Covariance of the predicted state, materialised (steady: RRᵀ in the α block).
    fn covariance(&self, m: &ForecastModel) -> Vec<f64> {
        if !self.steady() {
            return self.cov.clone();
        }
        let dim = m.dim();
        let mut c = vec![0.0; dim * dim];
        for i in 0..m.r {
            for j in 0..m.r {
                c[i * dim + j] = m.rvec[i] * m.rvec[j];
            }
        }
        c
    }

    /// Prediction of z for the next reading and its variance factor F (σ² = 1 units).
    fn predict(&self, m: &ForecastModel) -> (f64, f64) {
        let r = m.r;
        let mean = self.s[0]
            + m.c
                .iter()
                .zip(&self.s[r..])
                .map(|(c, z)| c * z)
                .sum::<f64>();
        if self.steady() {
            return (mean, 1.0);
        }
        (mean, zcz(m, &self.cov))
    }

    /// Consume one z value (NaN = missing) and move to the next time.
    /// Returns the innovation and F for a present reading.
    fn step(&mut self, m: &ForecastModel, z: f64) -> Option<(f64, f64)> {
        let r = m.r;
        let dim = m.dim();
        let (pred, f) = self.predict(m);
        let out = if z.is_nan() {
            if self.steady() {
                self.cov = self.covariance(m);
            }
            None
        } else {
            let v = z - pred;
            if self.steady() {
                for i in 0..r {
                    self.s[i] += m.rvec[i] * v;
                }
            } else {
                // K = Cov Zᵀ / F; s += K v; Cov −= K (Z Cov).
                let zc = z_times(m, &self.cov);
                for i in 0..dim {
                    self.s[i] += zc[i] / f * v;
                }
                let mut trace = 0.0;
                for i in 0..dim {
                    let ki = zc[i] / f;
                    for j in 0..dim {
                        self.cov[i * dim + j] -= ki * zc[j];
                    }
                    trace += self.cov[i * dim + i];
                }
                if trace.abs() < STEADY {
                    self.cov.clear();
                }
            }
            Some((v, f))
        };
        self.advance(m);
        out
    }

    /// Transition to the next time without an observation of its own (the lag block
    /// takes z_t = Z s, which equals the reading after an update).
    fn advance(&mut self, m: &ForecastModel) {
        let r = m.r;
        let dim = m.dim();
        let delta = m.c.len();
        let zt = self.s[0]
            + m.c
                .iter()
                .zip(&self.s[r..])
                .map(|(c, z)| c * z)
                .sum::<f64>();
        let a0 = self.s[0];
        for i in 0..r - 1 {
            self.s[i] = m.phi[i] * a0 + self.s[i + 1];
        }
        self.s[r - 1] = m.phi[r - 1] * a0;
        if delta > 0 {
            self.s.copy_within(r..dim - 1, r + 1);
            self.s[r] = zt;
        }
        if !self.steady() {
            // Cov ← Ta Cov Taᵀ + Q in two row sweeps: H = Cov Taᵀ (the transition applied
            // to each row), then Ta H (rows of H combined), written back in place.
            let nz: Vec<(usize, f64)> =
                m.c.iter()
                    .enumerate()
                    .filter(|(_, c)| **c != 0.0)
                    .map(|(k, c)| (r + k, *c))
                    .collect();
            let mut h = vec![0.0; dim * dim];
            for (x, y) in self.cov.chunks_exact(dim).zip(h.chunks_exact_mut(dim)) {
                transition_vector(m, &nz, x, y);
            }
            let (h0, cov) = (&h[..dim], &mut self.cov);
            for i in 0..dim {
                let out = &mut cov[i * dim..(i + 1) * dim];
                if i < r {
                    let fi = m.phi[i];
                    if i + 1 < r {
                        let below = &h[(i + 1) * dim..(i + 2) * dim];
                        for ((o, a), b) in out.iter_mut().zip(h0).zip(below) {
                            *o = fi * a + b;
                        }
                    } else {
                        for (o, a) in out.iter_mut().zip(h0) {
                            *o = fi * a;
                        }
                    }
                } else if i == r {
                    out.copy_from_slice(h0);
                    for &(k, c) in &nz {
                        for (o, v) in out.iter_mut().zip(&h[k * dim..(k + 1) * dim]) {
                            *o += c * v;
                        }
                    }
                } else {
                    out.copy_from_slice(&h[(i - 1) * dim..i * dim]);
                }
            }
            for i in 0..r {
                for j in 0..r {
                    self.cov[i * dim + j] += m.rvec[i] * m.rvec[j];
                }
            }
        }
        self.next_index += 1;
    }
}

/// `y = Ta x` for the augmented transition (`nz`: the non-zero lag weights `(r + k, c_k)`).
fn transition_vector(m: &ForecastModel, nz: &[(usize, f64)], x: &[f64], y: &mut [f64]) {
    let r = m.r;
    let dim = x.len();
    let x0 = x[0];
    for j in 0..r - 1 {
        y[j] = m.phi[j] * x0 + x[j + 1];
    }
    y[r - 1] = m.phi[r - 1] * x0;
    if dim > r {
        y[r] = x0 + nz.iter().map(|&(k, c)| c * x[k]).sum::<f64>();
        y[r + 1..dim].copy_from_slice(&x[r..dim - 1]);
    }
}

fn trim(v: &[f64]) -> &[f64] {
    let mut k = v.len();
    while k > 0 && v[k - 1] == 0.0 {
        k -= 1;
    }
    &v[..k]
}

/// Z·Cov (row vector) with Z = [e₀ᵀ, c].
fn z_times(m: &ForecastModel, cov: &[f64]) -> Vec<f64> {
    let dim = m.dim();
    let r = m.r;
    let mut out = cov[..dim].to_vec();
    for (k, &c) in m.c.iter().enumerate() {
        if c != 0.0 {
            let row = &cov[(r + k) * dim..(r + k + 1) * dim];
            for (o, v) in out.iter_mut().zip(row) {
                *o += c * v;
            }
        }
    }
    out
}

fn zcz(m: &ForecastModel, cov: &[f64]) -> f64 {
    let zc = z_times(m, cov);
    let r = m.r;
    zc[0]
        + m.c
            .iter()
            .enumerate()
            .map(|(k, c)| c * zc[r + k])
            .sum::<f64>()
}

#[cfg(test)]
thread_local! {
    /// Tests only: build terminal states by the dense augmented filter throughout.
    static DENSE_ONLY: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// The terminal state from the ARMA filter on `w_t = z_t − Σ c_k z_{t−k}` (`z` holds the
/// δ lags before t0 and every reading from t0 on, none missing): the α block is that
/// filter's predicted state, the lag block the last δ readings. Exact when the filter has
/// converged by the end (`None` otherwise: the dense filter then carries the covariance).
fn steady_terminal(
    m: &ForecastModel,
    z: &[f64],
    delta: usize,
    next_index: u64,
) -> Result<Option<FilterState>> {
    let n = z.len();
    let w: Vec<f64> = (delta..n)
        .map(|t| {
            z[t] - m
                .c
                .iter()
                .enumerate()
                .map(|(k, c)| c * z[t - 1 - k])
                .sum::<f64>()
        })
        .collect();
    let mut kw = crate::kalman::KalmanWorkspace::default();
    kw.set_model(trim(&m.phi), trim(&m.rvec[1..]))?;
    if kw.r != m.r {
        return Ok(None);
    }
    let mut cross = [0.0];
    kw.pass(&w, w.len(), 1, &mut cross);
    let Some(alpha) = kw.steady_terminal_state(&w, w.len()) else {
        return Ok(None);
    };
    let mut s = alpha.to_vec();
    s.extend((1..=delta).map(|k| z[n - k]));
    Ok(Some(FilterState {
        s,
        cov: Vec::new(),
        next_index,
    }))
}

/// Run the forecasting filter over a whole series (original scale) and return its final
/// state. `regressors` are the exogenous columns over the series.
pub(crate) fn terminal_state(
    m: &ForecastModel,
    series: &[f64],
    regressors: &[&[f64]],
) -> Result<FilterState> {
    let delta = m.c.len();
    let n = series.len();
    let mut xbuf = vec![0.0; regressors.len()];
    let z_at = |t: usize, xbuf: &mut Vec<f64>| {
        for (j, col) in regressors.iter().enumerate() {
            xbuf[j] = col[t];
        }
        series[t] - m.regression_at(t as u64, xbuf)
    };
    // First t0 ≥ δ with the δ previous readings present.
    let mut t0 = None;
    let mut run = 0;
    for t in 0..=n {
        if run >= delta {
            t0 = Some(t);
            break;
        }
        if t < n && !series[t].is_nan() {
            run += 1;
        } else {
            run = 0;
        }
    }
    let t0 = t0.ok_or_else(|| {
        Error::numerical(
            "forecast",
            format!("no {delta} consecutive readings to start the integrated filter from"),
        )
    })?;
    let lags: Vec<f64> = (1..=delta).map(|k| z_at(t0 - k, &mut xbuf)).collect();
    #[cfg(test)]
    let dense_only = DENSE_ONLY.with(|d| d.get());
    #[cfg(not(test))]
    let dense_only = false;
    if !dense_only && !series[t0..].iter().any(|v| v.is_nan()) {
        // No missing reading from t0 on: the lag block of the augmented state stays known,
        // and its ARMA block is the estimation filter's on the differenced readings.
        let z: Vec<f64> = (t0 - delta..n).map(|t| z_at(t, &mut xbuf)).collect();
        if let Some(st) = steady_terminal(m, &z, delta, n as u64)? {
            return Ok(st);
        }
    }
    let mut st = FilterState::start(m, &lags, t0 as u64)?;
    for t in t0..n {
        let z = if series[t].is_nan() {
            f64::NAN
        } else {
            z_at(t, &mut xbuf)
        };
        st.step(m, z);
    }
    Ok(st)
}

/// One horizon step of a [`Forecast`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ForecastStep {
    /// Steps ahead (1 = the next reading).
    pub step: usize,
    /// Index on the original time axis.
    pub index: u64,
    /// Point forecast (conditional mean).
    pub mean: f64,
    /// Forecast standard deviation.
    pub sd: f64,
    /// `(lower, upper)` bounds, one pair per requested level, in the order requested.
    pub bounds: Vec<(f64, f64)>,
}

/// Forecasts `1..=h` steps ahead with intervals at the requested levels.
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
        .map(|&l| crate::correlogram::two_sided_quantile(l, "forecast"))
        .collect()
}

/// Forecast `horizon` steps from `state`.
pub(crate) fn forecast_from(
    m: &ForecastModel,
    state: &FilterState,
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
    if st.steady() {
        st.cov = st.covariance(m);
    }
    let mut steps = Vec::with_capacity(horizon);
    let mut x = vec![0.0; k];
    for h in 0..horizon {
        for (j, col) in future.iter().enumerate() {
            x[j] = col[h];
        }
        let (zm, f) = st.predict(m);
        let mean = zm + m.regression_at(st.next_index, &x);
        let sd = (m.sigma2 * f.max(0.0)).sqrt();
        let bounds = zq.iter().map(|q| (mean - q * sd, mean + q * sd)).collect();
        steps.push(ForecastStep {
            step: h + 1,
            index: st.next_index,
            mean,
            sd,
            bounds,
        });
        st.advance(m);
    }
    Ok(Forecast {
        levels: levels.to_vec(),
        steps,
    })
}

/// What the monitor says about one new reading.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ReadingCheck {
    /// Index of the reading on the original time axis.
    pub index: u64,
    /// The reading (NaN if missing).
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
}

/// The stored form of a monitor; restoring validates it.
#[derive(Deserialize)]
struct MonitorRecord {
    model: ForecastModel,
    state: FilterState,
    alarm_level: f64,
}

impl TryFrom<MonitorRecord> for Monitor {
    type Error = String;
    fn try_from(r: MonitorRecord) -> std::result::Result<Self, String> {
        let m = Monitor::new(r.model, r.state, r.alarm_level).map_err(|e| e.to_string())?;
        m.validate()?;
        Ok(m)
    }
}

impl Monitor {
    pub(crate) fn new(model: ForecastModel, state: FilterState, alarm_level: f64) -> Result<Self> {
        let alarm_z = crate::correlogram::two_sided_quantile(alarm_level, "monitor")?;
        Ok(Monitor {
            model,
            state,
            alarm_level,
            alarm_z,
        })
    }

    /// The same monitor with another alarm level.
    pub fn with_alarm_level(mut self, level: f64) -> Result<Self> {
        self.alarm_z = crate::correlogram::two_sided_quantile(level, "monitor")?;
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

    /// Whether the filter is in steady state (O(r + δ) per reading).
    pub fn is_steady(&self) -> bool {
        self.state.steady()
    }

    /// Take one reading (NaN = missing: time advances without an update).
    /// For models with exogenous regressors use [`Monitor::observe_with`].
    pub fn observe(&mut self, reading: f64) -> Result<ReadingCheck> {
        self.observe_with(reading, &[])
    }

    /// Take one reading with the current values of the exogenous regressors.
    pub fn observe_with(&mut self, reading: f64, regressors: &[f64]) -> Result<ReadingCheck> {
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
            return Err(Error::new(crate::ErrorKind::NonFiniteReading {
                what: WHAT,
                index: self.state.next_index as usize,
                value: reading,
            }));
        }
        if regressors.iter().any(|v| !v.is_finite()) {
            return Err(Error::invalid(WHAT, "regressor values must be finite"));
        }
        let m = &self.model;
        let index = self.state.next_index;
        let reg = m.regression_at(index, regressors);
        let (zm, f) = self.state.predict(m);
        let predicted = zm + reg;
        let sd = (m.sigma2 * f).sqrt();
        let (lower, upper) = (predicted - self.alarm_z * sd, predicted + self.alarm_z * sd);
        let z = if reading.is_nan() {
            f64::NAN
        } else {
            reading - reg
        };
        self.state.step(m, z);
        let standardized = (!reading.is_nan()).then(|| (reading - predicted) / sd);
        Ok(ReadingCheck {
            index,
            reading,
            predicted,
            sd,
            lower,
            upper,
            standardized,
            outside: !reading.is_nan() && (reading < lower || reading > upper),
        })
    }

    /// Take several readings in order (no exogenous regressors).
    pub fn observe_batch(&mut self, readings: &[f64]) -> Result<Vec<ReadingCheck>> {
        readings.iter().map(|&r| self.observe(r)).collect()
    }

    /// Forecast `horizon` steps from the latest reading, with intervals at `levels`.
    pub fn forecast(&self, horizon: usize, levels: &[f64]) -> Result<Forecast> {
        forecast_from(&self.model, &self.state, horizon, levels, &[])
    }

    /// Forecast with future values of the exogenous regressors (one column per
    /// regressor, at least `horizon` values each).
    pub fn forecast_with(
        &self,
        horizon: usize,
        levels: &[f64],
        future: &[&[f64]],
    ) -> Result<Forecast> {
        forecast_from(&self.model, &self.state, horizon, levels, future)
    }

    pub(crate) fn validate(&self) -> std::result::Result<(), String> {
        self.model.validate()?;
        let dim = self.model.dim();
        if self.state.s.len() != dim {
            return Err(format!(
                "state has {} entries, the model needs {dim}",
                self.state.s.len()
            ));
        }
        if !self.state.cov.is_empty() && self.state.cov.len() != dim * dim {
            return Err(format!(
                "state covariance has {} entries, the model needs {}",
                self.state.cov.len(),
                dim * dim
            ));
        }
        if self
            .state
            .s
            .iter()
            .chain(&self.state.cov)
            .any(|v| !v.is_finite())
        {
            return Err("non-finite state".into());
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
    use crate::{Blueprint, Simulator};

    /// The terminal state taken from the ARMA filter equals the dense augmented filter's:
    /// non-seasonal, integrated with drift, seasonal with differencing, and a regression
    /// with ARMA errors; forecasts from both agree to rounding.
    #[test]
    fn steady_terminal_matches_dense_filter() {
        let sim = |ar: &[f64], ma: &[f64], sma: &[f64], s: usize, d: usize, sd: usize| {
            Simulator::builder()
                .autoregressive(ar)
                .moving_average(ma)
                .seasonal(&[], sma, s)
                .differencing(d, sd)
                .level(40.0)
                .build()
                .unwrap()
                .generate(600, 11)
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
                    .periodic(0, 1, 1, 12)
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
        for (bp, x, exo) in cases {
            let regs: Vec<&[f64]> = if exo { vec![&outdoor] } else { vec![] };
            let model = bp.fit_regression(&x, &regs).unwrap();
            let fast = terminal_state(&model.forecaster, &x, &regs).unwrap();
            DENSE_ONLY.with(|d| d.set(true));
            let dense = terminal_state(&model.forecaster, &x, &regs).unwrap();
            DENSE_ONLY.with(|d| d.set(false));
            let label = bp.shape_label();
            assert!(fast.cov.is_empty(), "{label}: fast path not taken");
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
            let f1 = forecast_from(&model.forecaster, &fast, 24, &[0.95], &fregs).unwrap();
            let f2 = forecast_from(&model.forecaster, &dense, 24, &[0.95], &fregs).unwrap();
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
