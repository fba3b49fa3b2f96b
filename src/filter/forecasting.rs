//! The forecasting filter: the state of a fitted model at the end of its series, on the
//! original scale, from which forecasts and monitors continue.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, Result};
use crate::filter::kalman::STEADY_TOLERANCE;
use crate::filter::ring::RingCovariance;
use crate::model::blueprint::Blueprint;
use crate::model::coefficients::FactorCoefficients;
use crate::model::coefficients::Term;

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
        coefs: &FactorCoefficients,
        sigma2: f64,
        regression: Vec<(Term, f64)>,
    ) -> Self {
        let (phi_e, theta_e) = coefs.expanded(bp.period);
        let r = phi_e.len().max(theta_e.len() + 1);
        let mut phi = vec![0.0; r];
        phi[..phi_e.len()].copy_from_slice(&phi_e);
        let mut rvec = vec![0.0; r];
        rvec[0] = 1.0;
        rvec[1..=theta_e.len()].copy_from_slice(&theta_e);
        // 1 − Σ c_k B^k = (1 − B)^d (1 − B^s)^D
        let mut poly = vec![1.0];
        for _ in 0..bp.d {
            poly = crate::model::lag::multiply(&poly, &[1.0, -1.0]);
        }
        for _ in 0..bp.seasonal_d {
            let mut f = vec![0.0; bp.period + 1];
            f[0] = 1.0;
            f[bp.period] = -1.0;
            poly = crate::model::lag::multiply(&poly, &f);
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
    pub(crate) fn regression_at(&self, t: u64, x: &[f64]) -> f64 {
        self.regression
            .iter()
            .map(|(term, b)| {
                b * match term {
                    Term::Mean => 1.0,
                    Term::Drift => t as f64,
                    Term::Exogenous(i) => x[i - 1],
                    Term::CycleCos { .. } | Term::CycleSin { .. } => {
                        crate::model::cycles::term_wave(*term, t).unwrap_or(0.0)
                    }
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
        if !crate::model::lag::is_stationary(&self.phi) {
            return Err("AR coefficients are not stationary".into());
        }
        if !crate::model::lag::is_invertible(&self.rvec[1..]) {
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
    /// Buffers of the covariance steps, reused from reading to reading.
    #[serde(skip)]
    pub scratch: StepScratch,
}

/// Buffers of the forecasting filter's covariance steps (`Z·Cov`, the half-transformed
/// covariance, the non-zero differencing lags), kept with the state so that a step
/// through missing readings allocates nothing once they have grown. Not part of the
/// state: never stored, and equal whatever they hold.
#[derive(Debug, Clone, Default)]
pub(crate) struct StepScratch {
    zc: Vec<f64>,
    h: Vec<f64>,
    nz: Vec<(usize, f64)>,
}

impl PartialEq for StepScratch {
    fn eq(&self, _: &Self) -> bool {
        true
    }
}

impl FilterState {
    /// A placeholder for a candidate fit whose state is computed only if it is kept.
    pub(crate) fn pending() -> Self {
        FilterState {
            s: Vec::new(),
            cov: Vec::new(),
            next_index: 0,
            scratch: StepScratch::default(),
        }
    }

    /// Start at time `t0` with the δ lags `lags` (newest first).
    pub(crate) fn start(m: &ForecastModel, lags: &[f64], t0: u64) -> Result<Self> {
        let r = m.r;
        let dim = m.dim();
        let mut s = vec![0.0; dim];
        s[r..].copy_from_slice(lags);
        let mut kw = crate::filter::kalman::KalmanWorkspace::default();
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
            scratch: StepScratch::default(),
        })
    }

    /// Whether this state (as restored from storage) fits `m`: the model itself is
    /// admissible, the sizes agree and every entry is finite.
    pub(crate) fn validate_for(&self, m: &ForecastModel) -> std::result::Result<(), String> {
        m.validate()?;
        let dim = m.dim();
        if self.s.len() != dim {
            return Err(format!(
                "state has {} entries, the model needs {dim}",
                self.s.len()
            ));
        }
        if !self.cov.is_empty() && self.cov.len() != dim * dim {
            return Err(format!(
                "state covariance has {} entries, the model needs {}",
                self.cov.len(),
                dim * dim
            ));
        }
        if self.s.iter().chain(&self.cov).any(|v| !v.is_finite()) {
            return Err("non-finite state".into());
        }
        Ok(())
    }

    /// Become a copy of `other`, reusing this state's buffers (no allocation once they
    /// have grown to size).
    pub(crate) fn copy_from(&mut self, other: &FilterState) {
        self.s.clone_from(&other.s);
        self.cov.clone_from(&other.cov);
        self.next_index = other.next_index;
    }

    pub(crate) fn steady(&self) -> bool {
        self.cov.is_empty()
    }

    /// Leave the steady state: materialise its covariance (RRᵀ in the α block) in the
    /// state's own buffer (its capacity kept from before, so no allocation once grown).
    pub(crate) fn materialise(&mut self, m: &ForecastModel) {
        if self.steady() {
            steady_covariance_into(m, &mut self.cov);
        }
    }

    /// Prediction of z for the next reading and its variance factor F (σ² = 1 units).
    pub(crate) fn predict(&self, m: &ForecastModel) -> (f64, f64) {
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
    pub(crate) fn step(&mut self, m: &ForecastModel, z: f64) -> Option<(f64, f64)> {
        let r = m.r;
        let dim = m.dim();
        let (pred, f) = self.predict(m);
        let out = if z.is_nan() {
            self.materialise(m);
            None
        } else {
            let v = z - pred;
            if self.steady() {
                for i in 0..r {
                    self.s[i] += m.rvec[i] * v;
                }
            } else {
                // K = Cov Zᵀ / F; s += K v; Cov −= K (Z Cov).
                let zc = &mut self.scratch.zc;
                z_times_into(m, &self.cov, zc);
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
                if trace.abs() < STEADY_TOLERANCE {
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
    pub(crate) fn advance(&mut self, m: &ForecastModel) {
        self.advance_mean(m);
        if !self.steady() {
            self.advance_covariance(m);
        }
        self.next_index += 1;
    }

    /// The state mean's part of [`Self::advance`] (`next_index` unchanged).
    fn advance_mean(&mut self, m: &ForecastModel) {
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
    }

    /// The covariance's part of [`Self::advance`].
    fn advance_covariance(&mut self, m: &ForecastModel) {
        let r = m.r;
        let dim = m.dim();
        {
            // Cov ← Ta Cov Taᵀ + Q in two row sweeps: H = Cov Taᵀ (the transition applied
            // to each row), then Ta H (rows of H combined), written back in place.
            let StepScratch { h, nz, .. } = &mut self.scratch;
            nz.clear();
            nz.extend(
                m.c.iter()
                    .enumerate()
                    .filter(|(_, c)| **c != 0.0)
                    .map(|(k, c)| (r + k, *c)),
            );
            h.resize(dim * dim, 0.0);
            for (x, y) in self.cov.chunks_exact(dim).zip(h.chunks_exact_mut(dim)) {
                transition_vector(m, nz, x, y);
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
                    for &(k, c) in nz.iter() {
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

/// Z·Cov (row vector) with Z = [e₀ᵀ, c], into a caller buffer.
pub(crate) fn z_times_into(m: &ForecastModel, cov: &[f64], out: &mut Vec<f64>) {
    let dim = m.dim();
    let r = m.r;
    out.clear();
    out.extend_from_slice(&cov[..dim]);
    for (k, &c) in m.c.iter().enumerate() {
        if c != 0.0 {
            let row = &cov[(r + k) * dim..(r + k + 1) * dim];
            for (o, v) in out.iter_mut().zip(row) {
                *o += c * v;
            }
        }
    }
}

fn zcz(m: &ForecastModel, cov: &[f64]) -> f64 {
    // Z Cov Zᵀ with Z = e₀ + Σ c_k e_{r+k}, from the entries the non-zero c_k touch (the
    // same sums, in the same order, as forming Z·Cov first).
    let dim = m.dim();
    let r = m.r;
    let zc_at = |j: usize| {
        let mut v = cov[j];
        for (k, &c) in m.c.iter().enumerate() {
            if c != 0.0 {
                v += c * cov[(r + k) * dim + j];
            }
        }
        v
    };
    zc_at(0)
        + m.c
            .iter()
            .enumerate()
            .map(|(k, c)| c * zc_at(r + k))
            .sum::<f64>()
}

/// The steady state's covariance (RRᵀ in the α block, zero elsewhere) into `out`.
fn steady_covariance_into(m: &ForecastModel, out: &mut Vec<f64>) {
    let dim = m.dim();
    out.clear();
    out.resize(dim * dim, 0.0);
    for i in 0..m.r {
        for j in 0..m.r {
            out[i * dim + j] = m.rvec[i] * m.rvec[j];
        }
    }
}

/// The terminal state from the ARMA filter on `w_t = z_t − Σ c_k z_{t−k}` (`z` holds the
/// δ lags before t0 and every reading from t0 on, none missing): the α block is that
/// filter's predicted state, the lag block the last δ readings (known: zero covariance).
/// Converged by the end, the covariance is the steady one; otherwise the α block is the
/// filter's `P_n` from its opening recursions ([`KalmanWorkspace::opening_terminal`];
/// `None` if they do not converge: the dense filter then carries the covariance).
///
/// [`KalmanWorkspace::opening_terminal`]: crate::filter::kalman::KalmanWorkspace::opening_terminal
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
    let mut kw = crate::filter::kalman::KalmanWorkspace::default();
    kw.set_model(trim(&m.phi), trim(&m.rvec[1..]))?;
    if kw.r != m.r {
        return Ok(None);
    }
    let mut cross = [0.0];
    kw.pass(&w, w.len(), 1, &mut cross);
    let (r, dim) = (m.r, m.dim());
    let mut cov = Vec::new();
    let alpha = match kw.steady_terminal_state(&w, w.len()) {
        Some(alpha) => alpha.to_vec(),
        None => {
            // Not converged by the end: the opening's covariance at the end, continued at
            // most as far as costs what the dense filter would ((dim+1)² against (r+1)²
            // per reading).
            let cap = w.len() * (dim + 1) * (dim + 1) / ((r + 1) * (r + 1));
            let mut p = Vec::new();
            let Some(alpha) = kw.opening_terminal(w.len(), cap, &mut p) else {
                return Ok(None);
            };
            cov.resize(dim * dim, 0.0);
            for i in 0..r {
                cov[i * dim..i * dim + r].copy_from_slice(&p[i * r..(i + 1) * r]);
            }
            alpha.to_vec()
        }
    };
    let mut s = alpha;
    s.extend((1..=delta).map(|k| z[n - k]));
    Ok(Some(FilterState {
        s,
        cov,
        next_index,
        scratch: StepScratch::default(),
    }))
}

/// Run the forecasting filter over a whole series (original scale) and return its final
/// state. `regressors` are the exogenous columns over the series. Without a missing
/// reading after the start the ARMA filter's state is taken over (exact once it has
/// converged); otherwise, or if it has not converged, the dense augmented filter runs.
pub(crate) fn terminal_state(
    m: &ForecastModel,
    series: &[f64],
    regressors: &[&[f64]],
) -> Result<FilterState> {
    terminal_state_by(m, series, regressors, true)
}

/// [`terminal_state`] by the dense augmented filter throughout (the reference route the
/// tests compare with).
#[cfg(test)]
pub(crate) fn dense_terminal_state(
    m: &ForecastModel,
    series: &[f64],
    regressors: &[&[f64]],
) -> Result<FilterState> {
    terminal_state_by(m, series, regressors, false)
}

fn terminal_state_by(
    m: &ForecastModel,
    series: &[f64],
    regressors: &[&[f64]],
    steady_allowed: bool,
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
    if steady_allowed && !series[t0..].iter().any(|v| v.is_nan()) {
        // No missing reading from t0 on: the lag block of the augmented state stays known,
        // and its ARMA block is the estimation filter's on the differenced readings.
        let z: Vec<f64> = (t0 - delta..n).map(|t| z_at(t, &mut xbuf)).collect();
        if let Some(st) = steady_terminal(m, &z, delta, n as u64)? {
            return Ok(st);
        }
    }
    let mut st = FilterState::start(m, &lags, t0 as u64)?;
    let z_of = |t: usize, xbuf: &mut Vec<f64>| {
        if series[t].is_nan() {
            f64::NAN
        } else {
            z_at(t, xbuf)
        }
    };
    if steady_allowed {
        let mut ring = RingCovariance::default();
        run_on_ring(m, &mut st, &mut ring, (t0..n).map(|t| z_of(t, &mut xbuf)));
    } else {
        for t in t0..n {
            st.step(m, z_of(t, &mut xbuf));
        }
    }
    Ok(st)
}

/// Position of the augmented state's entry `i` (α then the lags, newest first) in the
/// ring's order: the lags oldest first, then α, so that the whole transition is the
/// ring's shift plus sparse terms (`u'_i = u_{i+1}`; the newest lag receives
/// `α₀ + Σ c_k z_{t−k}`, α the AR terms).
fn ring_position(m: &ForecastModel, i: usize) -> usize {
    let (r, delta) = (m.r, m.c.len());
    if i < r {
        delta + i
    } else {
        delta - 1 - (i - r)
    }
}

/// [`FilterState::step`] over the readings `z` (NaN = missing) with the covariance on a
/// [`RingCovariance`] (about (dim+1)²/2 multiply-adds per reading instead of ≈ 3·dim²·2
/// for the row-major steps, which remain the reference); the state's mean steps are the
/// same code. `st` starts as [`FilterState::start`] left it and ends as the steps would
/// leave it (its covariance row-major again, or empty in the steady state).
fn run_on_ring(
    m: &ForecastModel,
    st: &mut FilterState,
    ring: &mut RingCovariance,
    z: impl Iterator<Item = f64>,
) {
    let (r, delta) = (m.r, m.c.len());
    let dim = m.dim();
    let pos = |i: usize| ring_position(m, i);
    // Transition terms: the newest lag takes Σ c_k z_{t−k} (z_{t−k} is lag k, at ring
    // position δ − k), α_i takes φ_i α₀; observation α₀ + Σ c_k lag k; noise R on α.
    let e_lags =
        m.c.iter()
            .enumerate()
            .filter(|(_, c)| **c != 0.0)
            .map(|(k, &c)| (delta - 1, delta - 1 - k, c));
    let e_ar = m
        .phi
        .iter()
        .enumerate()
        .filter(|(_, c)| **c != 0.0)
        .map(|(i, &c)| (delta + i, delta, c));
    let z_lags =
        m.c.iter()
            .enumerate()
            .filter(|(_, c)| **c != 0.0)
            .map(|(k, &c)| (delta - 1 - k, c));
    let noise = m
        .rvec
        .iter()
        .enumerate()
        .filter(|(_, c)| **c != 0.0)
        .map(|(i, &c)| (delta + i, c));
    ring.configure(
        dim,
        e_lags.chain(e_ar),
        std::iter::once((delta, 1.0)).chain(z_lags),
        noise,
    );
    let mut steady = st.steady();
    if steady {
        ring.set_steady();
    } else {
        // Start: covariance in the α block only (the lags are known).
        let mut alpha = vec![0.0; r * r];
        for i in 0..r {
            alpha[i * r..(i + 1) * r].copy_from_slice(&st.cov[i * dim..i * dim + r]);
        }
        ring.clear();
        ring.load_block(&alpha, r, delta);
        st.cov.clear();
    }
    for zt in z {
        if steady {
            if !zt.is_nan() {
                st.step(m, zt);
                continue;
            }
            ring.set_steady();
            steady = false;
        }
        if zt.is_nan() {
            st.advance_mean(m);
            ring.step_missing();
        } else {
            let (pred, _) = st.predict(m);
            let f = ring.f();
            ring.gain_column();
            let v = zt - pred;
            for i in 0..dim {
                st.s[i] += ring.gain_entry(pos(i)) / f * v;
            }
            let trace = ring.update(f);
            st.advance_mean(m);
            if trace.abs() < STEADY_TOLERANCE {
                steady = true;
            } else {
                ring.predict(true);
            }
        }
        st.next_index += 1;
    }
    if !steady {
        st.cov.resize(dim * dim, 0.0);
        for i in 0..dim {
            for j in 0..dim {
                st.cov[i * dim + j] = ring.entry(pos(i), pos(j));
            }
        }
    }
}
