//! State-space form of an ARMA model and its exact Kalman filter.

use crate::base::error::{Error, Result};
use crate::filter::innovations::{direct_recursion, segment_dot};
use crate::filter::lanes::add_lane_sums;
use crate::model::lag;

/// Largest state dimension with the fixed-size full-covariance step.
const SMALL_STATE: usize = 4;

/// Convergence threshold on trace(P⁺) for leaving the full-covariance (Riccati) phase.
pub(crate) const STEADY_TOLERANCE: f64 = 1e-14;

/// Convergence threshold on `|w|²/F` for leaving the Chandrasekhar phase (the rank-one
/// step of the covariance; stricter than [`STEADY_TOLERANCE`] because the remaining
/// distance is this step divided by one minus the convergence rate).
const CHANDRASEKHAR_TOLERANCE: f64 = 1e-16;

/// The filter's reusable workspace. Sized by `prepare`; reused across evaluations of the
/// same shape without allocating.
#[derive(Debug, Default, Clone)]
pub(crate) struct KalmanWorkspace {
    pub(crate) r: usize,
    /// Nominal AR and MA lengths of the model last set.
    p_len: usize,
    q_len: usize,
    phi: Vec<f64>,
    rvec: Vec<f64>,
    ar_nz: Vec<(usize, f64)>,
    ma_nz: Vec<(usize, f64)>,
    p: Vec<f64>,
    pn: Vec<f64>,
    /// Chandrasekhar quantities: `G = T P Zᵀ` and the factor `w` of `P_{t+1} − P_t =
    /// −w wᵀ / F_t`.
    ch_g: Vec<f64>,
    ch_w: Vec<f64>,
    /// F at the end of the opening Chandrasekhar phase.
    ch_f: f64,
    /// Across gaps (large states): `P_{t+1} − P_t = W M Wᵀ` with `W` (r × rank, column-
    /// major) and `M` (rank × rank), `F_t` and `G_t` (in `ch_g`); see
    /// [`KalmanWorkspace::gappy`].
    gap: GapFactors,
    kcol: Vec<f64>,
    state: Vec<f64>,
    tmp: Vec<f64>,
    // initial covariance helpers
    gamma_u: Vec<f64>,
    gamma_x: Vec<f64>,
    psi: Vec<f64>,
    kappa: Vec<f64>,
    dl_a: Vec<f64>,
    dl_b: Vec<f64>,
    macov: Vec<(usize, f64)>,
    /// Innovations per column (column-major, `n` each).
    pub(crate) innov: Vec<f64>,
    /// Innovation variance factors `F_t` (σ² = 1 units); NaN where missing.
    pub(crate) fvar: Vec<f64>,
    /// Steps spent in the full-covariance phase during the last pass.
    pub(crate) full_steps: usize,
    /// The phase the last complete pass ended in.
    ended_in: Phase,
    /// Which recursions run the full-covariance phase (the usual route except in the
    /// equivalence tests, which compare the routes).
    route: Route,
}

/// The factored covariance step of [`KalmanWorkspace::gappy`] and its scratch space.
#[derive(Debug, Default, Clone)]
struct GapFactors {
    /// Whether the factors describe the current time (set where a gap is met).
    ready: bool,
    /// Where the covariance was last known in full (the stationary start or a steady
    /// state), for the covariance recursion to replay from if the rank grows too large.
    anchor: usize,
    anchor_steady: bool,
    f: f64,
    rank: usize,
    w: Vec<f64>,
    m: Vec<f64>,
    w_next: Vec<f64>,
    m_next: Vec<f64>,
    /// G_{t+1}, accumulated during the column sweep.
    g_next: Vec<f64>,
    a: Vec<f64>,
    ma: Vec<f64>,
    norms: Vec<f64>,
    kept: Vec<usize>,
}

/// State sizes above which gaps are bridged by the factored (Chandrasekhar-type) step
/// rather than the covariance recursion (at small sizes the O(r²) recursion is as cheap).
const GAPPY_MIN_STATE: usize = 8;

/// Which code runs the full-covariance phase. Every route gives the same likelihood to
/// rounding; the equivalence tests compare them.
#[cfg_attr(not(test), allow(dead_code))]
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
enum Route {
    /// Chandrasekhar recursions, fixed-size for small states.
    #[default]
    Usual,
    /// Chandrasekhar recursions on the workspace vectors for every state size.
    Dynamic,
    /// The covariance (Riccati) recursion throughout.
    Riccati,
}

/// Accumulated results of one filter pass.
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct PassTotals {
    /// Σ ln F_t over non-missing readings.
    pub log_det: f64,
    /// Number of non-missing readings.
    pub used: usize,
}

impl KalmanWorkspace {
    /// Set the model (expanded φ and θ, conventions of [`inverse_roots`](crate::inverse_roots)) and compute the
    /// stationary initial covariance. Errors if the AR part is not stationary.
    pub(crate) fn set_model(&mut self, phi: &[f64], theta: &[f64]) -> Result<()> {
        let p = phi.len();
        let q = theta.len();
        let r = p.max(q + 1);
        self.r = r;
        self.p_len = p;
        self.q_len = q;
        resize(&mut self.phi, r);
        resize(&mut self.rvec, r);
        self.phi[..p].copy_from_slice(phi);
        self.rvec[0] = 1.0;
        self.rvec[1..=q].copy_from_slice(theta);
        lag::nonzero_lags(phi, &mut self.ar_nz);
        lag::nonzero_lags(theta, &mut self.ma_nz);
        resize(&mut self.p, r * r);
        resize(&mut self.pn, (r + 1) * (r + 1));
        resize(&mut self.kcol, r);
        resize(&mut self.tmp, r);
        resize(&mut self.ch_g, r);
        resize(&mut self.ch_w, r);
        self.stationary_covariance(p, q)
    }

    /// `P₀` for σ² = 1 into `self.p` (see module docs).
    fn stationary_covariance(&mut self, p: usize, q: usize) -> Result<()> {
        let r = self.r;
        let lags = r + q + 1;
        // γ_u: autocovariances of the AR part driven by unit white noise.
        resize(&mut self.gamma_u, lags);
        resize(&mut self.kappa, p);
        resize(&mut self.dl_a, p + 1);
        resize(&mut self.dl_b, p + 1);
        if p == 0 {
            self.gamma_u[0] = 1.0;
        } else {
            // Step-down into κ, then the forward recursion to ρ(0..=p).
            self.dl_a[..p].copy_from_slice(&self.phi[..p]);
            if !lag::step_down_in_place(&mut self.dl_a[..p], &mut self.dl_b[..p]) {
                return Err(Error::numerical(
                    "exact likelihood",
                    "the AR part is not stationary",
                ));
            }
            self.kappa[..p].copy_from_slice(&self.dl_a[..p]);
            let v = lag::autocorrelations_from_partials(
                &self.kappa[..p],
                &mut self.gamma_u[..=p],
                &mut self.dl_a,
                &mut self.dl_b,
            );
            // γ(0) = 1/Π(1−κ²) = 1/v for unit innovations.
            let g0 = 1.0 / v;
            for h in 1..=p {
                self.gamma_u[h] *= g0;
            }
            self.gamma_u[0] = g0;
            if !g0.is_finite() {
                return Err(Error::numerical(
                    "exact likelihood",
                    "the AR part is too close to a unit root",
                ));
            }
        }
        for h in (p + 1)..lags {
            let mut s = 0.0;
            for &(i, c) in &self.ar_nz {
                s += c * self.gamma_u[h - i];
            }
            self.gamma_u[h] = s;
        }
        let gu = |h: isize, g: &[f64]| g[h.unsigned_abs()];
        // MA autocovariances c_m = Σ_j θ_j θ_{j+m} (θ₀ = 1) over non-zero terms.
        self.macov.clear();
        let nz = self.ma_nz.len();
        let term = |k: usize, ma: &[(usize, f64)]| if k == 0 { (0usize, 1.0) } else { ma[k - 1] };
        for a in 0..=nz {
            for b in a..=nz {
                let (la, ca) = term(a, &self.ma_nz);
                let (lb, cb) = term(b, &self.ma_nz);
                let m = lb - la;
                let v = ca * cb;
                if let Some(e) = self.macov.iter_mut().find(|e| e.0 == m) {
                    e.1 += v;
                } else {
                    self.macov.push((m, v));
                }
            }
        }
        // γ_x(h) = Σ_m c_|m| γ_u(h + m), h = 0..r
        resize(&mut self.gamma_x, r + 1);
        for h in 0..=r {
            let mut s = 0.0;
            for &(m, c) in &self.macov {
                if m == 0 {
                    s += c * self.gamma_u[h];
                } else {
                    s += c
                        * (gu(h as isize + m as isize, &self.gamma_u)
                            + gu(h as isize - m as isize, &self.gamma_u));
                }
            }
            self.gamma_x[h] = s;
        }
        // ψ-weights 0..r
        resize(&mut self.psi, r + 1);
        lag::psi_weights_into(&self.ar_nz, &self.rvec[1..=q], &mut self.psi);
        // First row.
        let pm = &mut self.p;
        pm[0] = self.gamma_x[0];
        for j in 1..r {
            let mut s = 0.0;
            for &(k, c) in &self.ar_nz {
                if k > j {
                    s += c * self.gamma_x[k - j];
                }
            }
            for k in j..r {
                let th = self.rvec[k];
                if th != 0.0 {
                    s += th * self.psi[k - j];
                }
            }
            pm[j] = s;
            pm[j * r] = s;
        }
        // Diagonal fill.
        let p00 = pm[0];
        for i in 0..r.saturating_sub(1) {
            for j in i..r - 1 {
                let v = pm[i * r + j]
                    - self.rvec[i] * self.rvec[j]
                    - self.phi[i] * self.phi[j] * p00
                    - self.phi[i] * pm[j + 1]
                    - self.phi[j] * pm[i + 1];
                pm[(i + 1) * r + (j + 1)] = v;
                pm[(j + 1) * r + (i + 1)] = v;
            }
        }
        if pm.iter().any(|v| !v.is_finite()) || !(pm[0] > 0.0) {
            return Err(Error::numerical(
                "exact likelihood",
                "stationary covariance is not finite",
            ));
        }
        Ok(())
    }

    /// Run the filter over `ncols` columns of length `n` stored column-major in `data`
    /// (column 0 decides missingness). Innovations go to `self.innov`, F to `self.fvar`;
    /// `cross` (ncols×ncols, row-major) receives Σ v_i v_j / F.
    pub(crate) fn pass(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        cross: &mut [f64],
    ) -> PassTotals {
        self.pass_until(data, n, ncols, cross, false).0
    }

    /// Length of the innovation ring kept by [`Self::pass_until`] when it stops at the
    /// direct phase (enough for the lanes' MA history, a power of two).
    pub(crate) const RING: usize = 4;

    /// [`Self::pass`], optionally stopping where the direct phase would begin; then the
    /// second value is that time `t` (readings before `t` are done, `cross` holds their
    /// part) and [`Self::lane_at`] gives the state to continue from. Stopping runs need no
    /// series-length buffers: innovations go to a ring of [`Self::RING`] per column and F
    /// is not kept. They require a series without missing readings.
    pub(crate) fn pass_until(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        cross: &mut [f64],
        stop_at_direct: bool,
    ) -> (PassTotals, Option<usize>) {
        self.begin_pass(n, ncols, cross, stop_at_direct);
        self.pass_from(data, n, ncols, cross, stop_at_direct, None)
    }

    /// Size and clear the buffers of a pass (see [`Self::pass_until`]).
    pub(crate) fn begin_pass(
        &mut self,
        n: usize,
        ncols: usize,
        cross: &mut [f64],
        stop_at_direct: bool,
    ) {
        let stride = if stop_at_direct { Self::RING } else { n };
        let r = self.r;
        resize(&mut self.state, ncols * r);
        // Every entry of these two is written by the pass: size them, don't clear them.
        ensure_len(&mut self.innov, ncols * stride);
        if !stop_at_direct {
            ensure_len(&mut self.fvar, n);
        }
        for v in cross.iter_mut() {
            *v = 0.0;
        }
        for v in self.state.iter_mut() {
            *v = 0.0;
        }
        self.gap.ready = false;
    }

    /// The pass after [`Self::begin_pass`]. `opened` is where an opening Chandrasekhar
    /// phase run elsewhere ([`open_side_by_side`]) stopped: `(t, converged, totals)`;
    /// `None` runs it here.
    pub(crate) fn pass_from(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        cross: &mut [f64],
        stop_at_direct: bool,
        opened: Option<(usize, bool, PassTotals)>,
    ) -> (PassTotals, Option<usize>) {
        debug_assert!(!stop_at_direct || !data[..n].iter().any(|v| v.is_nan()));
        // Innovation of column c at time t lives at c·stride + (t & mask).
        let (stride, mask) = if stop_at_direct {
            (Self::RING, Self::RING - 1)
        } else {
            (n, usize::MAX)
        };
        let r = self.r;
        let mut totals = PassTotals::default();
        let mut phase = Phase::Full;
        self.full_steps = 0;
        let mut t = 0;
        if let Some((next, steady, opened_totals)) = opened {
            totals = opened_totals;
            phase = self.after_opening(next, n, steady);
            t = next;
        }
        while t < n {
            let missing = data[t].is_nan();
            match phase {
                Phase::Full => {
                    let riccati = self.route == Route::Riccati;
                    if t == 0 && !missing && !riccati {
                        // From the stationary start the covariance moves by a rank-one
                        // step each reading: O(r) Chandrasekhar recursions until the
                        // gain has converged, a missing reading or the end.
                        let (next, steady) = self.chandrasekhar(
                            data,
                            n,
                            ncols,
                            cross,
                            &mut totals,
                            (stride, mask),
                            !stop_at_direct,
                        );
                        phase = self.after_opening(next, n, steady);
                        t = next;
                        continue;
                    }
                    if t == 0 && missing && !stop_at_direct && self.gappy_allowed() {
                        // Missing first reading: P₁ = P₀, so the step is zero (rank 0).
                        let f0 = self.gain_from_covariance();
                        let gap = &mut self.gap;
                        gap.anchor = 0;
                        gap.anchor_steady = false;
                        gap.f = f0;
                        gap.rank = 0;
                        gap.ready = true;
                    }
                    if self.gap.ready {
                        let (next, how) = self.gappy(data, n, ncols, t, cross, &mut totals);
                        self.full_steps += next - t;
                        t = next;
                        if how == Some(true) {
                            phase = Phase::Steady(0);
                        }
                        continue;
                    }
                    self.full_steps += 1;
                    let f = self.p[0];
                    if missing {
                        self.fvar[t] = f64::NAN;
                        for c in 0..ncols {
                            self.innov[c * stride + (t & mask)] = f64::NAN;
                        }
                        self.predict_states(ncols);
                        self.predict_covariance_no_update();
                    } else {
                        if !stop_at_direct {
                            self.fvar[t] = f;
                        }
                        totals.log_det += f.ln();
                        totals.used += 1;
                        for i in 0..r {
                            self.kcol[i] = self.p[i] / f;
                        }
                        for c in 0..ncols {
                            let v = data[c * n + t] - self.state[c * r];
                            self.innov[c * stride + (t & mask)] = v;
                            let st = &mut self.state[c * r..(c + 1) * r];
                            for i in 0..r {
                                st[i] += self.kcol[i] * v;
                            }
                        }
                        accumulate_cross(&self.innov, stride, t & mask, ncols, f, cross);
                        self.predict_states(ncols);
                        let trace = self.predict_covariance_after_update(f);
                        // Converged when the updated covariance vanishes: then the
                        // gain is R and every later F is 1. (F − 1 alone only sees
                        // P⁺[1][1]; seasonal components converge later.)
                        if trace < STEADY_TOLERANCE {
                            phase = Phase::Steady(0);
                        }
                    }
                }
                Phase::Steady(count) => {
                    if missing {
                        self.gap_from_steady(t);
                        phase = Phase::Full;
                        continue;
                    }
                    if !stop_at_direct {
                        self.fvar[t] = 1.0;
                    }
                    totals.used += 1;
                    for c in 0..ncols {
                        let v = data[c * n + t] - self.state[c * r];
                        self.innov[c * stride + (t & mask)] = v;
                        let st = &mut self.state[c * r..(c + 1) * r];
                        for i in 0..r {
                            st[i] += self.rvec[i] * v;
                        }
                    }
                    accumulate_cross(&self.innov, stride, t & mask, ncols, 1.0, cross);
                    self.predict_states(ncols);
                    phase = if count + 1 >= r {
                        Phase::Direct
                    } else {
                        Phase::Steady(count + 1)
                    };
                }
                Phase::Direct => {
                    if stop_at_direct {
                        return (totals, Some(t));
                    }
                    // Tight loop until the next missing reading or the end.
                    let start = t;
                    let mut end = t;
                    while end < n && !data[end].is_nan() {
                        end += 1;
                    }
                    if crate::filter::lanes::fits(self.p_len, self.q_len, ncols) {
                        let mut lane = [self.lane_at(n, usize::MAX, ncols, start)];
                        crate::filter::lanes::run(
                            data,
                            n,
                            ncols,
                            self.p_len,
                            self.q_len,
                            start,
                            end,
                            &mut lane,
                            Some(&mut self.innov[..ncols * n]),
                        );
                        add_lane_sums(&lane[0], ncols, cross);
                        for f in &mut self.fvar[start..end] {
                            *f = 1.0;
                        }
                        totals.used += end - start;
                        t = end;
                        if t < n {
                            self.rebuild_states(data, n, ncols, t);
                            self.gap_from_steady(t);
                            phase = Phase::Full;
                        }
                        continue;
                    }
                    for c in 0..ncols {
                        let w = &data[c * n..(c + 1) * n];
                        let v = &mut self.innov[c * n..(c + 1) * n];
                        direct_recursion(w, v, start, end, &self.ar_nz, &self.ma_nz);
                    }
                    for f in &mut self.fvar[start..end] {
                        *f = 1.0;
                    }
                    for i in 0..ncols {
                        for j in i..ncols {
                            cross[i * ncols + j] += segment_dot(
                                &self.innov[i * n + start..i * n + end],
                                &self.innov[j * n + start..j * n + end],
                            );
                        }
                    }
                    totals.used += end - start;
                    t = end;
                    if t < n {
                        // Missing reading at t: rebuild the predicted state and go full.
                        self.rebuild_states(data, n, ncols, t);
                        self.gap_from_steady(t);
                        phase = Phase::Full;
                    }
                    continue;
                }
            }
            t += 1;
        }
        self.ended_in = phase;
        (totals, None)
    }

    /// After a complete one-column pass over `data` (length `n`): the predicted state for
    /// time `n`, if the filter ended with its gain converged (its covariance is then RRᵀ);
    /// `None` if it was still in the full-covariance phase.
    pub(crate) fn steady_terminal_state(&mut self, data: &[f64], n: usize) -> Option<&[f64]> {
        match self.ended_in {
            Phase::Full => None,
            Phase::Steady(_) => Some(&self.state[..self.r]),
            Phase::Direct => {
                // The direct phase keeps innovations only: rebuild the state from them.
                self.rebuild_states(data, n, 1, n);
                Some(&self.state[..self.r])
            }
        }
    }

    /// The phase after an opening Chandrasekhar stretch that ended at `t`.
    fn after_opening(&mut self, t: usize, n: usize, steady: bool) -> Phase {
        self.full_steps = t;
        if steady {
            return Phase::Steady(0);
        }
        if t < n {
            if self.gappy_allowed() {
                // Missing at t: P_{t+1} − P_t = −w wᵀ/F + G Gᵀ/F (the update that did not
                // happen), rank two.
                let r = self.r;
                let f = self.ch_f;
                let gap = &mut self.gap;
                gap.anchor = 0;
                gap.anchor_steady = false;
                gap.f = f;
                gap.rank = 2;
                ensure_len(&mut gap.w, 2 * r);
                ensure_len(&mut gap.m, 4);
                gap.w[..r].copy_from_slice(&self.ch_w);
                gap.w[r..2 * r].copy_from_slice(&self.ch_g);
                gap.m.copy_from_slice(&[-1.0 / f, 0.0, 0.0, 1.0 / f]);
                gap.ready = true;
            } else {
                // A gap before convergence: the covariance recursion takes over. P_t
                // depends on the model only, so replay it.
                for _ in 0..t {
                    let f = self.p[0];
                    self.predict_covariance_after_update(f);
                }
            }
        }
        Phase::Full
    }

    /// `G = T P e₁` into `ch_g` from the covariance in `self.p`; returns `F = P[0][0]`.
    fn gain_from_covariance(&mut self) -> f64 {
        let r = self.r;
        let f0 = self.p[0];
        for i in 0..r {
            let below = if i + 1 < r { self.p[(i + 1) * r] } else { 0.0 };
            self.ch_g[i] = self.phi[i] * f0 + below;
        }
        f0
    }

    /// Whether gaps go through [`Self::gappy`] (large states, not forced off by a test).
    fn gappy_allowed(&self) -> bool {
        self.r > GAPPY_MIN_STATE && self.route != Route::Riccati
    }

    /// A gap met in the steady state at time `t` (the state means are current): the
    /// covariance is RRᵀ. Prepares the factored step (large states) or the covariance
    /// recursion.
    fn gap_from_steady(&mut self, t: usize) {
        self.reset_covariance_to_steady();
        if !self.gappy_allowed() {
            return;
        }
        // P_t = RRᵀ: F = 1, G = T R; missing at t: P_{t+1} − P_t = G Gᵀ (the update from
        // the steady state changes nothing).
        let r = self.r;
        for i in 0..r {
            let below = if i + 1 < r { self.rvec[i + 1] } else { 0.0 };
            self.ch_g[i] = self.phi[i] + below;
        }
        let gap = &mut self.gap;
        gap.anchor = t;
        gap.anchor_steady = true;
        gap.f = 1.0;
        gap.rank = 1;
        ensure_len(&mut gap.w, r);
        ensure_len(&mut gap.m, 1);
        gap.w[..r].copy_from_slice(&self.ch_g);
        gap.m[0] = 1.0;
        gap.ready = true;
    }

    /// The full phase across gaps for large states, from time `t0` where [`GapFactors`]
    /// are ready, without the O(r²) covariance. With `δ_t = P_{t+1} − P_t = W M Wᵀ`,
    /// `a = W[0, :]`, `U = T W`: `F_{t+1} = F_t + aᵀMa`, `G_{t+1} = G_t + U M a`, and the
    /// next factors depend on whether readings t and t+1 are present (P) or missing (M):
    ///
    /// ```text
    /// P,P: W ← U − G_t aᵀ/F_t,          M ← M − (Ma)(Ma)ᵀ/F_{t+1}
    /// P,M: W ← [U, G_t],                M ← diag(M, 1/F_t)
    /// M,P: W ← [U − G_t aᵀ/F_t, G_t],   M ← diag(M − (Ma)(Ma)ᵀ/F_{t+1}, −1/F_t)
    /// M,M: W ← U,                       M unchanged
    /// ```
    ///
    /// (P,P is the Chandrasekhar step; the others add or drop the update that did not
    /// happen.) Columns whose contribution falls below 1e-17 are dropped. Returns where
    /// it stopped and why: the gain converged (`Some(true)`), the end (`Some(false)`), or
    /// the rank grew past r/2 or F fell below 1 (`None`: `self.p` then holds `P_t` for
    /// the covariance recursion, replayed from the anchor).
    #[allow(clippy::too_many_arguments)]
    fn gappy(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        t0: usize,
        cross: &mut [f64],
        totals: &mut PassTotals,
    ) -> (usize, Option<bool>) {
        debug_assert!(self.innov.len() >= ncols * n && self.fvar.len() >= n);
        let r = self.r;
        let max_rank = (r / 2).max(2);
        let mut t = t0;
        self.gap.ready = false;
        let mut f = self.gap.f;
        while t < n {
            let missing = data[t].is_nan();
            // The measurement and the state means: a ← T a + G v / F.
            if missing {
                self.fvar[t] = f64::NAN;
                for c in 0..ncols {
                    self.innov[c * n + t] = f64::NAN;
                }
                self.predict_states(ncols);
            } else {
                self.fvar[t] = f;
                totals.log_det += f.ln();
                totals.used += 1;
                let inv = 1.0 / f;
                for c in 0..ncols {
                    let st = &mut self.state[c * r..(c + 1) * r];
                    let a0 = st[0];
                    let v = data[c * n + t] - a0;
                    self.innov[c * n + t] = v;
                    let gv = v * inv;
                    for i in 0..r - 1 {
                        st[i] = self.phi[i] * a0 + st[i + 1] + self.ch_g[i] * gv;
                    }
                    st[r - 1] = self.phi[r - 1] * a0 + self.ch_g[r - 1] * gv;
                }
                accumulate_cross(&self.innov, n, t, ncols, f, cross);
            }
            // The covariance factors for t + 1.
            let next_missing = t + 1 < n && data[t + 1].is_nan();
            let gap = &mut self.gap;
            let k = gap.rank;
            ensure_len(&mut gap.a, k);
            ensure_len(&mut gap.ma, k);
            let mut s = 0.0;
            for j in 0..k {
                gap.a[j] = gap.w[j * r];
            }
            for j in 0..k {
                let mut v = 0.0;
                for l in 0..k {
                    v += gap.m[j * k + l] * gap.a[l];
                }
                gap.ma[j] = v;
                s += gap.a[j] * v;
            }
            let f_next = f + s;
            // The update at t that did not happen (missing, then present) or the one at
            // t + 1 that will not (present, then missing) adds a column G_t.
            let extra = match (missing, next_missing) {
                (true, false) => Some(-1.0 / f),
                (false, true) => Some(1.0 / f),
                _ => None,
            };
            let k2 = k + usize::from(extra.is_some());
            ensure_len(&mut gap.w_next, r * k2);
            ensure_len(&mut gap.m_next, k2 * k2);
            ensure_len(&mut gap.norms, k2);
            // One sweep per column: u = T w, the new column (u, or u − G_t a_j/F_t), its
            // norm, and G_{t+1} = G_t + Σ_j u (Ma)_j accumulated in `g_next`.
            ensure_len(&mut gap.g_next, r);
            gap.g_next.copy_from_slice(&self.ch_g);
            let phi = &self.phi[..r];
            for j in 0..k {
                let col = &gap.w[j * r..(j + 1) * r];
                let out = &mut gap.w_next[j * r..(j + 1) * r];
                let w0 = col[0];
                let aj = if next_missing { 0.0 } else { gap.a[j] / f };
                let mj = gap.ma[j];
                let g = &self.ch_g[..r];
                let acc = &mut gap.g_next[..r];
                // Element-wise over i < r − 1 (zipped: no bounds checks, vectorisable),
                // then the last row, then the norm by the four-way dot.
                for ((((o, a), &gi), &ph), &below) in out[..r - 1]
                    .iter_mut()
                    .zip(acc[..r - 1].iter_mut())
                    .zip(&g[..r - 1])
                    .zip(&phi[..r - 1])
                    .zip(&col[1..r])
                {
                    let u = ph * w0 + below;
                    *o = u - gi * aj;
                    *a += u * mj;
                }
                let u = phi[r - 1] * w0;
                out[r - 1] = u - g[r - 1] * aj;
                acc[r - 1] += u * mj;
                gap.norms[j] = segment_dot(out, out).sqrt();
                let shrink = if next_missing { 0.0 } else { mj / f_next };
                for l in 0..k {
                    gap.m_next[j * k2 + l] = gap.m[j * k + l] - shrink * gap.ma[l];
                }
            }
            if let Some(weight) = extra {
                gap.w_next[k * r..(k + 1) * r].copy_from_slice(&self.ch_g);
                gap.norms[k] = self.ch_g.iter().map(|v| v * v).sum::<f64>().sqrt();
                for l in 0..k {
                    gap.m_next[k * k2 + l] = 0.0;
                    gap.m_next[l * k2 + k] = 0.0;
                }
                gap.m_next[k * k2 + k] = weight;
            }
            // G_{t+1} = G_t + U M a, F_{t+1} = F_t + aᵀ M a.
            self.ch_g.copy_from_slice(&gap.g_next);
            f = f_next;
            // Drop columns that no longer contribute (|column| · Σ_l |M_jl| |column_l|
            // below 1e-17), then swap the new factors in.
            gap.kept.clear();
            let mut total = 0.0;
            for j in 0..k2 {
                let reach: f64 = (0..k2)
                    .map(|l| gap.m_next[j * k2 + l].abs() * gap.norms[l])
                    .sum();
                let size = gap.norms[j] * reach;
                if size >= 1e-17 {
                    gap.kept.push(j);
                    total += size;
                }
            }
            let keep = gap.kept.len();
            for (p, &j) in gap.kept.iter().enumerate() {
                if p != j {
                    gap.w_next.copy_within(j * r..(j + 1) * r, p * r);
                }
            }
            ensure_len(&mut gap.m, keep * keep);
            for (p, &jp) in gap.kept.iter().enumerate() {
                for (q, &jq) in gap.kept.iter().enumerate() {
                    gap.m[p * keep + q] = gap.m_next[jp * k2 + jq];
                }
            }
            std::mem::swap(&mut gap.w, &mut gap.w_next);
            gap.rank = keep;
            t += 1;
            if !next_missing && t < n && total < CHANDRASEKHAR_TOLERANCE * f && f - 1.0 < 1e-10 {
                return (t, Some(true));
            }
            // F_t ≥ 1 in exact arithmetic; a factored step that loses that (rounding in
            // the indefinite M) hands over like a too-wide one.
            if keep > max_rank || !(f >= 1.0 - 1e-9) {
                // Too many directions to track (or lost accuracy): rebuild P_t from the
                // last full covariance and continue with the covariance recursion.
                let anchor = gap.anchor;
                // (A stationary anchor left `self.p` untouched: it still holds P₀.)
                if gap.anchor_steady {
                    self.reset_covariance_to_steady();
                }
                for k in anchor..t {
                    if data[k].is_nan() {
                        self.predict_covariance_no_update();
                    } else {
                        let fk = self.p[0];
                        self.predict_covariance_after_update(fk);
                    }
                }
                return (t, None);
            }
        }
        (t, Some(false))
    }

    /// The full-covariance phase from the stationary start (t = 0) by the Chandrasekhar
    /// recursions (Morf, Sidhu & Kailath 1974): with `P₁ = P₀` stationary, `P_{t+1} − P_t
    /// = −w_t w_tᵀ / F_t` stays rank one, and with `G_t = T P_t Zᵀ`, `a = w_t[0]`, `u = T
    /// w_t`:
    ///
    /// ```text
    /// F_{t+1} = F_t − a²/F_t,   G_{t+1} = G_t − (a/F_t) u,   w_{t+1} = u − (a/F_t) G_t
    /// ```
    ///
    /// (w₁ = G₁), O(r) per reading instead of O(r²). Runs over present readings until the
    /// gain has converged to `R` (second value `true`: `|w|²/F < CHANDRASEKHAR_TOLERANCE`
    /// and `F − 1 < 1e-10`; a non-invertible MA part converges elsewhere and stays here), a
    /// missing reading or the end; returns where it stopped. Small states with at most
    /// two columns run in fixed-size arrays (the same body; bitwise the same results).
    #[allow(clippy::too_many_arguments)]
    fn chandrasekhar(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        cross: &mut [f64],
        totals: &mut PassTotals,
        ring: (usize, usize),
        keep_fvar: bool,
    ) -> (usize, bool) {
        let r = self.r;
        // F₁ = P₀[0][0], G₁ = T P₀ e₁, w₁ = G₁, predicted states zero.
        let f0 = self.gain_from_covariance();
        self.ch_w.copy_from_slice(&self.ch_g);
        let fixed = self.route == Route::Usual;
        let fvar = if keep_fvar {
            Some(&mut self.fvar[..n])
        } else {
            None
        };
        macro_rules! fixed {
            ($r:literal) => {{
                let mut phi = [0.0; $r];
                let mut g = [0.0; $r];
                let mut w = [0.0; $r];
                let mut st = [0.0; 2 * $r];
                phi.copy_from_slice(&self.phi);
                g.copy_from_slice(&self.ch_g);
                w.copy_from_slice(&self.ch_w);
                let out = chandrasekhar_steps(
                    &phi,
                    &mut g,
                    &mut w,
                    &mut st[..ncols * $r],
                    f0,
                    data,
                    n,
                    ncols,
                    cross,
                    totals,
                    &mut self.innov,
                    ring,
                    fvar,
                );
                self.state[..ncols * $r].copy_from_slice(&st[..ncols * $r]);
                out
            }};
        }
        let (t, steady, f) = if fixed && ncols <= 2 && r <= SMALL_STATE {
            match r {
                1 => fixed!(1),
                2 => fixed!(2),
                3 => fixed!(3),
                _ => fixed!(4),
            }
        } else {
            chandrasekhar_steps(
                &self.phi,
                &mut self.ch_g,
                &mut self.ch_w,
                &mut self.state[..ncols * r],
                f0,
                data,
                n,
                ncols,
                cross,
                totals,
                &mut self.innov,
                ring,
                fvar,
            )
        };
        self.ch_f = f;
        (t, steady)
    }

    /// The lane that continues this filter's direct phase at time `t`: the model's
    /// coefficients and the innovations before `t` (column stride and index mask as the
    /// pass stored them: `(n, usize::MAX)`, or `(RING, RING − 1)` after a stopping pass).
    pub(crate) fn lane_at(
        &self,
        stride: usize,
        mask: usize,
        ncols: usize,
        t: usize,
    ) -> crate::filter::lanes::Lane {
        let mut lane = crate::filter::lanes::Lane::default();
        lane.phi[..self.p_len].copy_from_slice(&self.phi[..self.p_len]);
        lane.theta[..self.q_len].copy_from_slice(&self.rvec[1..=self.q_len]);
        for c in 0..ncols {
            for j in 0..self.q_len {
                lane.hist[c][j] = self.innov[c * stride + ((t - 1 - j) & mask)];
            }
        }
        lane
    }

    /// The stationary covariance `P₀` (r×r, σ² = 1) right after `set_model`.
    pub(crate) fn stationary_matrix(&self) -> &[f64] {
        &self.p
    }

    fn predict_states(&mut self, ncols: usize) {
        let r = self.r;
        for c in 0..ncols {
            let st = &mut self.state[c * r..(c + 1) * r];
            let a0 = st[0];
            for i in 0..r - 1 {
                st[i] = self.phi[i] * a0 + st[i + 1];
            }
            st[r - 1] = self.phi[r - 1] * a0;
        }
    }

    /// P ← T(P − k kᵀ F)Tᵀ + RRᵀ with k = P[:,0]/F, using the companion structure.
    /// Returns the trace of the updated covariance `P⁺` (zero once the state is known).
    fn predict_covariance_after_update(&mut self, f: f64) -> f64 {
        let r = self.r;
        let s = r + 1;
        let mut trace = 0.0;
        // M = P − P[:,0] P[0,:] / F into the padded (r+1)×(r+1) buffer `pn` whose last
        // row and column stay zero, so the transform below needs no branches.
        for i in 0..r {
            let ki = self.p[i] / f;
            let (prow, mrow) = (&self.p[i * r..(i + 1) * r], &mut self.pn[i * s..i * s + r]);
            for ((m, &pv), &p0) in mrow.iter_mut().zip(prow).zip(&self.p[..r]) {
                *m = pv - ki * p0;
            }
            trace += self.pn[i * s + i];
        }
        self.companion_transform();
        trace
    }

    fn predict_covariance_no_update(&mut self) {
        let r = self.r;
        let s = r + 1;
        for i in 0..r {
            let (src, dst) = (&self.p[i * r..(i + 1) * r], &mut self.pn[i * s..i * s + r]);
            dst.copy_from_slice(src);
        }
        self.companion_transform();
    }

    /// p ← T M Tᵀ + RRᵀ with M in the padded buffer `pn` (row stride r+1, zero border):
    /// `P[i][j] = φ_iφ_j M00 + R_iR_j + φ_i M[0][j+1] + φ_j M[0][i+1] + M[i+1][j+1]`.
    fn companion_transform(&mut self) {
        let r = self.r;
        let s = r + 1;
        let m00 = self.pn[0];
        let (phi, rv) = (&self.phi[..r], &self.rvec[..r]);
        let m0 = &self.pn[1..s]; // M[0][j+1], j = 0..r (last is the zero border)
        for i in 0..r {
            let fi = phi[i];
            let ri = rv[i];
            let mi = self.pn[i + 1]; // M[0][i+1] (zero for i = r−1)
            let below = &self.pn[(i + 1) * s + 1..(i + 1) * s + 1 + r]; // M[i+1][j+1]
            let row = &mut self.p[i * r..(i + 1) * r];
            let a = fi * m00;
            for ((((out, &pj), &rj), &m0j), &bj) in
                row.iter_mut().zip(phi).zip(rv).zip(m0).zip(below)
            {
                *out = a * pj + ri * rj + fi * m0j + pj * mi + bj;
            }
        }
    }

    fn reset_covariance_to_steady(&mut self) {
        let r = self.r;
        for i in 0..r {
            for j in 0..r {
                self.p[i * r + j] = self.rvec[i] * self.rvec[j];
            }
        }
    }

    /// Predicted state at time `t` from readings and innovations before `t`:
    /// `a_t[i] = Σ_{k=i+1}^{r} φ_k w_{t+i−k} + θ_k v_{t+i−k}` (steady-state identity).
    fn rebuild_states(&mut self, data: &[f64], n: usize, ncols: usize, t: usize) {
        let r = self.r;
        for c in 0..ncols {
            let w = &data[c * n..(c + 1) * n];
            let v = &self.innov[c * n..(c + 1) * n];
            for i in 0..r {
                let mut s = 0.0;
                for k in i + 1..=r {
                    if t + i < k {
                        continue;
                    }
                    let idx = t + i - k;
                    s += self.phi[k - 1] * w[idx];
                    if k < r {
                        s += self.rvec[k] * v[idx];
                    }
                }
                self.state[c * r + i] = s;
            }
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
enum Phase {
    #[default]
    Full,
    Steady(usize),
    Direct,
}

/// The Chandrasekhar steps of [`KalmanWorkspace::chandrasekhar`] from t = 0 (states `st`
/// zero on entry, `ncols` columns of length `r = phi.len()`). Σ ln F_t is taken as the log
/// of products of up to 16 factors (F_t ≥ 1), one logarithm per 16 readings.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn chandrasekhar_steps(
    phi: &[f64],
    g: &mut [f64],
    w: &mut [f64],
    st: &mut [f64],
    f0: f64,
    data: &[f64],
    n: usize,
    ncols: usize,
    cross: &mut [f64],
    totals: &mut PassTotals,
    innov: &mut [f64],
    (stride, mask): (usize, usize),
    mut fvar: Option<&mut [f64]>,
) -> (usize, bool, f64) {
    let r = phi.len();
    for v in st.iter_mut() {
        *v = 0.0;
    }
    let mut f = f0;
    let mut product = 1.0;
    let mut factors = 0;
    let mut t = 0;
    let mut steady = false;
    while t < n && !data[t].is_nan() {
        let inv = 1.0 / f;
        if let Some(fv) = fvar.as_deref_mut() {
            fv[t] = f;
        }
        product *= f;
        factors += 1;
        if factors == 16 || product > 1e150 {
            totals.log_det += product.ln();
            product = 1.0;
            factors = 0;
        }
        totals.used += 1;
        // a_{t+1} = T a_t + G_t v_t / F_t per column.
        for c in 0..ncols {
            let a = &mut st[c * r..(c + 1) * r];
            let a0 = a[0];
            let v = data[c * n + t] - a0;
            innov[c * stride + (t & mask)] = v;
            let gv = v * inv;
            for i in 0..r - 1 {
                a[i] = phi[i] * a0 + a[i + 1] + g[i] * gv;
            }
            a[r - 1] = phi[r - 1] * a0 + g[r - 1] * gv;
        }
        match ncols {
            1 => {
                let v = innov[t & mask];
                cross[0] += v * v * inv;
            }
            2 => cross_two(innov[t & mask], innov[stride + (t & mask)], f, cross),
            _ => accumulate_cross(innov, stride, t & mask, ncols, f, cross),
        }
        let w0 = w[0];
        let k = w0 * inv;
        f -= w0 * k;
        let mut size = 0.0;
        for i in 0..r {
            let u = phi[i] * w0 + if i + 1 < r { w[i + 1] } else { 0.0 };
            let gi = g[i];
            g[i] = gi - k * u;
            let wi = u - k * gi;
            w[i] = wi;
            size += wi * wi;
        }
        t += 1;
        if size < CHANDRASEKHAR_TOLERANCE * f && f - 1.0 < 1e-10 {
            steady = true;
            break;
        }
    }
    if factors > 0 {
        totals.log_det += product.ln();
    }
    (t, steady, f)
}

/// `cross` (2×2 upper triangle) += v vᵀ / F, the same arithmetic as [`accumulate_cross`].
#[inline(always)]
fn cross_two(v0: f64, v1: f64, f: f64, cross: &mut [f64]) {
    let a = v0 / f;
    cross[0] += a * v0;
    cross[1] += a * v1;
    let b = v1 / f;
    cross[3] += b * v1;
}

/// The opening Chandrasekhar phases of several filters of one shape (`r ≤ 4`, at most two
/// columns, no missing readings; each after [`KalmanWorkspace::set_model`] and
/// [`KalmanWorkspace::begin_pass`] in stopping mode), four side by side in one loop so
/// that their division-bound recursions overlap. Per filter the arithmetic is exactly
/// that of [`chandrasekhar_steps`], so every result is bitwise the single-filter one.
/// `cross` holds `kk = ncols²` entries per filter. Returns `(t, converged, totals)` per
/// filter for [`KalmanWorkspace::pass_from`]; inactive filters are left alone.
pub(crate) fn open_side_by_side(
    filters: &mut [KalmanWorkspace],
    active: &[bool],
    data: &[f64],
    n: usize,
    ncols: usize,
    cross: &mut [f64],
    out: &mut [(usize, bool, PassTotals)],
) {
    let mut idx_all = [0usize; crate::filter::lanes::MAX_LANES];
    let mut count = 0;
    for l in (0..filters.len().min(crate::filter::lanes::MAX_LANES)).filter(|&l| active[l]) {
        idx_all[count] = l;
        count += 1;
    }
    if count == 0 {
        return;
    }
    let r = filters[idx_all[0]].r;
    for group in idx_all[..count].chunks(4) {
        macro_rules! go {
            ($r:literal, $c:literal) => {
                open_group::<$r, $c>(filters, group, data, n, cross, out)
            };
        }
        match (r, ncols) {
            (1, 1) => go!(1, 1),
            (2, 1) => go!(2, 1),
            (3, 1) => go!(3, 1),
            (4, 1) => go!(4, 1),
            (1, _) => go!(1, 2),
            (2, _) => go!(2, 2),
            (3, _) => go!(3, 2),
            _ => go!(4, 2),
        }
    }
}

fn open_group<const R: usize, const C: usize>(
    filters: &mut [KalmanWorkspace],
    group: &[usize],
    data: &[f64],
    n: usize,
    cross_all: &mut [f64],
    out: &mut [(usize, bool, PassTotals)],
) {
    const L: usize = 4;
    const RING: usize = KalmanWorkspace::RING;
    let kk = C * C;
    let mut phi = [[0.0f64; R]; L];
    let mut g = [[0.0f64; R]; L];
    let mut w = [[0.0f64; R]; L];
    let mut st = [[[0.0f64; R]; C]; L];
    let mut ring = [[[0.0f64; RING]; C]; L];
    let mut cross = [[0.0f64; 4]; L];
    let mut f = [1.0f64; L];
    let mut product = [1.0f64; L];
    let mut factors = [0usize; L];
    let mut totals = [PassTotals::default(); L];
    let mut done = [true; L];
    let mut stop = [(0usize, false); L];
    for (j, &l) in group.iter().enumerate() {
        let fl = &filters[l];
        let f0 = fl.p[0];
        for i in 0..R {
            phi[j][i] = fl.phi[i];
            let below = if i + 1 < R { fl.p[(i + 1) * R] } else { 0.0 };
            g[j][i] = fl.phi[i] * f0 + below;
        }
        w[j] = g[j];
        f[j] = f0;
        done[j] = false;
    }
    let mut live = group.len();
    let mut t = 0;
    while live > 0 && t < n {
        let y = [data[t], if C == 2 { data[n + t] } else { 0.0 }];
        for j in 0..L {
            if done[j] {
                continue;
            }
            let fj = f[j];
            let inv = 1.0 / fj;
            product[j] *= fj;
            factors[j] += 1;
            if factors[j] == 16 || product[j] > 1e150 {
                totals[j].log_det += product[j].ln();
                product[j] = 1.0;
                factors[j] = 0;
            }
            totals[j].used += 1;
            let mut v = [0.0f64; C];
            for c in 0..C {
                let a = &mut st[j][c];
                let a0 = a[0];
                let vc = y[c] - a0;
                v[c] = vc;
                ring[j][c][t & (RING - 1)] = vc;
                let gv = vc * inv;
                for i in 0..R - 1 {
                    a[i] = phi[j][i] * a0 + a[i + 1] + g[j][i] * gv;
                }
                a[R - 1] = phi[j][R - 1] * a0 + g[j][R - 1] * gv;
            }
            if C == 1 {
                cross[j][0] += v[0] * v[0] * inv;
            } else {
                cross_two(v[0], v[C - 1], fj, &mut cross[j]);
            }
            let w0 = w[j][0];
            let k = w0 * inv;
            let nf = fj - w0 * k;
            f[j] = nf;
            let mut size = 0.0;
            for i in 0..R {
                let u = phi[j][i] * w0 + if i + 1 < R { w[j][i + 1] } else { 0.0 };
                let gi = g[j][i];
                g[j][i] = gi - k * u;
                let wi = u - k * gi;
                w[j][i] = wi;
                size += wi * wi;
            }
            if size < CHANDRASEKHAR_TOLERANCE * nf && nf - 1.0 < 1e-10 {
                done[j] = true;
                stop[j] = (t + 1, true);
                live -= 1;
            }
        }
        t += 1;
    }
    for (j, &l) in group.iter().enumerate() {
        if !stop[j].1 {
            stop[j] = (t, false);
        }
        if factors[j] > 0 {
            totals[j].log_det += product[j].ln();
        }
        let fl = &mut filters[l];
        for c in 0..C {
            fl.state[c * R..(c + 1) * R].copy_from_slice(&st[j][c]);
            fl.innov[c * RING..(c + 1) * RING].copy_from_slice(&ring[j][c]);
        }
        cross_all[l * kk..(l + 1) * kk].copy_from_slice(&cross[j][..kk]);
        out[l] = (stop[j].0, stop[j].1, totals[j]);
    }
}

#[inline]
fn accumulate_cross(innov: &[f64], n: usize, t: usize, ncols: usize, f: f64, cross: &mut [f64]) {
    if ncols == 1 {
        let v = innov[t];
        cross[0] += v * v / f;
        return;
    }
    for i in 0..ncols {
        let vi = innov[i * n + t] / f;
        for j in i..ncols {
            cross[i * ncols + j] += vi * innov[j * n + t];
        }
    }
}

fn ensure_len(v: &mut Vec<f64>, len: usize) {
    if v.len() != len {
        v.resize(len, 0.0);
    }
}

fn resize(v: &mut Vec<f64>, len: usize) {
    if v.len() != len {
        v.resize(len, 0.0);
    }
    for x in v.iter_mut() {
        *x = 0.0;
    }
}

/// Exact Gaussian log-likelihood of a zero-mean ARMA series (NaN = missing) with known
/// innovation variance, by the Kalman filter.
///
/// `phi` and `theta` are the expanded coefficient lists in the conventions of
/// [`inverse_roots`](crate::inverse_roots) (`1 − Σφ_iB^i`, `1 + Σθ_jB^j`); multiply seasonal factors out first with
/// [`lag::expand_autoregressive`] / [`lag::expand_moving_average`]. Errors if the AR part is
/// not stationary, the MA part is not invertible, σ² is not positive, the series is empty,
/// all missing, or holds ±inf.
///
/// ```
/// # fn main() -> Result<(), lagwise::Error> {
/// // AR(1), φ = 0.5, σ² = 1, one reading x: log L = −½(ln 2π + ln γ₀ + x²/γ₀), γ₀ = 4/3.
/// let ll = lagwise::exact_log_likelihood(&[0.5], &[], 1.0, &[1.0])?;
/// let g0: f64 = 4.0 / 3.0;
/// assert!((ll + 0.5 * ((2.0 * std::f64::consts::PI).ln() + g0.ln() + 1.0 / g0)).abs() < 1e-14);
/// # Ok(()) }
/// ```
///
/// # Form
/// An ARMA(p, q) (seasonal factors already multiplied out) with `r = max(p, q + 1)` has
/// the state `α_t` of length `r`, observation `w_t = α_t[0]`, and
///
/// ```text
/// α_{t+1} = T α_t + R e_{t+1},   T = [φ | I_{r−1} over 0],   R = (1, θ₁, …, θ_{r−1})ᵀ
/// ```
///
/// with no observation noise (Harvey 1989, §3.4). The filter works with σ² = 1; the
/// innovation variance is concentrated out of the likelihood by the estimators.
///
/// # Stationary start in O(r²)
/// The initial covariance `P₀` solves `P = TPTᵀ + RRᵀ`. Its first row is built from the
/// theoretical autocovariances `γ(h)` and ψ-weights (`P₀[0][j] = Σ_{k>j} φ_k γ(k−j) +
/// Σ_{k≥j} θ_k ψ_{k−j}`), and the rest follows from the same equation read diagonally:
/// `P[i+1][j+1] = P[i][j] − R_iR_j − φ_{i+1}φ_{j+1}P[0][0] − φ_{i+1}P[0][j+1] −
/// φ_{j+1}P[0][i+1]` (0-based `i, j`, 1-based `φ`). The autocovariances come from the partial autocorrelations of the
/// AR factor (step-down, then Durbin–Levinson forward), filtered by the MA factor's own
/// autocovariances — never from an r²×r² solve (Gardner, Harvey & Phillips 1980 use such
/// a solve; r reaches ~100 for seasonal models).
///
/// # Three phases per pass
/// 1. **Full**: from the stationary start the covariance moves by a rank-one step per
///    reading, so the Chandrasekhar recursions (Morf, Sidhu & Kailath 1974) carry the
///    gain in O(r) per step. After a missing reading (NaN: no measurement update) the
///    covariance recursion takes over, exploiting the companion structure, O(r²) per step.
/// 2. **Steady**: once the gain has converged to `R` (for an invertible MA part: the
///    Chandrasekhar step `|w|²/F` below 1e-16, or the trace of the updated covariance
///    `P⁺_t` below 1e-14 in the covariance recursion) the state is updated in O(r) for
///    `r` steps.
/// 3. **Direct**: the filter is then exactly the innovations recursion
///    `v_t = w_t − Σφ_i w_{t−i} − Σθ_j v_{t−j}` over the non-zero coefficients only
///    (4 terms for an AR(1)×seasonal MA(1) at r = 97). A missing reading rebuilds the
///    state from the last r readings and innovations and returns to phase 1.
///
/// Several columns (the series and regression columns) share one pass: the covariance
/// and gain are computed once, the state means once per column, which is how regression
/// coefficients are profiled out by GLS inside the likelihood.
pub fn exact_log_likelihood(
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<f64> {
    let mut ws = checked_workspace(
        "exact log-likelihood",
        phi,
        theta,
        innovation_variance,
        series,
    )?;
    let mut cross = [0.0];
    let totals = ws.pass(series, series.len(), 1, &mut cross);
    let n = totals.used as f64;
    Ok(-0.5
        * (n * (2.0 * std::f64::consts::PI * innovation_variance).ln()
            + totals.log_det
            + cross[0] / innovation_variance))
}

/// The exact log-likelihood by the plain covariance (Riccati) recursion at every reading,
/// with no Chandrasekhar phase and no steady-state switch: O(r²) per reading, the
/// reference that [`exact_log_likelihood`] is tested against and a way to time what the
/// fast phases save. Same conventions and errors as [`exact_log_likelihood`].
pub fn reference_log_likelihood(
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<f64> {
    let mut ws = checked_workspace(
        "reference log-likelihood",
        phi,
        theta,
        innovation_variance,
        series,
    )?;
    let r = ws.r;
    let mut a = vec![0.0; r];
    let (mut ld, mut ss, mut m) = (0.0, 0.0, 0usize);
    for &x in series {
        let f = ws.p[0];
        if x.is_nan() {
            ws.predict_covariance_no_update();
        } else {
            let v = x - a[0];
            ld += f.ln();
            ss += v * v / f;
            m += 1;
            for i in 0..r {
                a[i] += ws.p[i] / f * v;
            }
            let _ = ws.predict_covariance_after_update(f);
        }
        let a0 = a[0];
        for i in 0..r - 1 {
            a[i] = ws.phi[i] * a0 + a[i + 1];
        }
        a[r - 1] = ws.phi[r - 1] * a0;
    }
    let n = m as f64;
    Ok(-0.5
        * (n * (2.0 * std::f64::consts::PI * innovation_variance).ln()
            + ld
            + ss / innovation_variance))
}

/// The checks shared by the public likelihood functions, then a workspace set to the model.
fn checked_workspace(
    what: &'static str,
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<KalmanWorkspace> {
    crate::base::screen::screen(series, what, 1, crate::base::screen::ConstantPolicy::Allow)?;
    if !(innovation_variance > 0.0 && innovation_variance.is_finite()) {
        return Err(Error::invalid(
            what,
            format!("innovation variance {innovation_variance} must be positive"),
        ));
    }
    if !lag::is_stationary(phi) {
        return Err(Error::invalid(
            what,
            "the AR coefficients are not stationary",
        ));
    }
    if !lag::is_invertible(theta) {
        return Err(Error::invalid(
            what,
            "the MA coefficients are not invertible",
        ));
    }
    let mut ws = KalmanWorkspace::default();
    ws.set_model(phi, theta)?;
    Ok(ws)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Dense stationary covariance by fixed-point iteration of P = TPTᵀ + RRᵀ.
    fn dense_p0(phi: &[f64], theta: &[f64]) -> Vec<f64> {
        let r = phi.len().max(theta.len() + 1);
        let mut t = vec![0.0; r * r];
        for i in 0..r {
            t[i * r] = phi.get(i).copied().unwrap_or(0.0);
            if i + 1 < r {
                t[i * r + i + 1] = 1.0;
            }
        }
        let mut rv = vec![0.0; r];
        rv[0] = 1.0;
        rv[1..=theta.len()].copy_from_slice(theta);
        let mut p = vec![0.0; r * r];
        for _ in 0..5000 {
            let mut tp = vec![0.0; r * r];
            for i in 0..r {
                for j in 0..r {
                    tp[i * r + j] = (0..r).map(|k| t[i * r + k] * p[k * r + j]).sum();
                }
            }
            let mut np = vec![0.0; r * r];
            for i in 0..r {
                for j in 0..r {
                    np[i * r + j] =
                        (0..r).map(|k| tp[i * r + k] * t[j * r + k]).sum::<f64>() + rv[i] * rv[j];
                }
            }
            p = np;
        }
        p
    }

    #[test]
    fn stationary_covariance_matches_lyapunov_iteration() {
        for (phi, theta) in [
            (vec![0.5], vec![]),
            (vec![], vec![0.4]),
            (vec![0.6, -0.3], vec![0.2]),
            (vec![0.3, 0.2, 0.1], vec![0.5, -0.2, 0.1]),
            (vec![0.5], vec![0.3, 0.0, 0.0, 0.4, 0.12]),
            (vec![1.2, -0.5], vec![]),
        ] {
            let mut ws = KalmanWorkspace::default();
            ws.set_model(&phi, &theta).unwrap();
            let want = dense_p0(&phi, &theta);
            for (a, b) in ws.p.iter().zip(&want) {
                assert!(
                    (a - b).abs() < 1e-10 * (1.0 + b.abs()),
                    "{phi:?} {theta:?}: {a} vs {b}\n{:?}\n{:?}",
                    ws.p,
                    want
                );
            }
        }
    }

    /// Reference: the full-covariance recursion at every step (no phase switch).
    fn full_only(phi: &[f64], theta: &[f64], x: &[f64]) -> (f64, f64) {
        let mut refw = KalmanWorkspace::default();
        refw.set_model(phi, theta).unwrap();
        let r = refw.r;
        let mut a = vec![0.0; r];
        let (mut ld, mut ss) = (0.0, 0.0);
        for t in 0..x.len() {
            let f = refw.p[0];
            if x[t].is_nan() {
                refw.predict_covariance_no_update();
            } else {
                let v = x[t] - a[0];
                ld += f.ln();
                ss += v * v / f;
                for i in 0..r {
                    a[i] += refw.p[i] / f * v;
                }
                let _ = refw.predict_covariance_after_update(f);
            }
            let a0 = a[0];
            for i in 0..r - 1 {
                a[i] = refw.phi[i] * a0 + a[i + 1];
            }
            a[r - 1] = refw.phi[r - 1] * a0;
        }
        (ld, ss)
    }

    #[test]
    fn seasonal_gaps_match_full_filter() {
        let phi = lag::expand_autoregressive(&[0.5], &[], 4);
        let theta = lag::expand_moving_average(&[], &[0.6], 4);
        let n = 150;
        let mut x: Vec<f64> = (0..n)
            .map(|t| ((t * 7919 % 113) as f64 / 50.0) - 1.1)
            .collect();
        for i in [
            3usize, 30, 31, 32, 33, 34, 35, 36, 37, 38, 39, 40, 41, 42, 90,
        ] {
            x[i] = f64::NAN;
        }
        let mut ws = KalmanWorkspace::default();
        ws.set_model(&phi, &theta).unwrap();
        let mut cross = [0.0];
        let tot = ws.pass(&x, n, 1, &mut cross);
        let (ld, ss) = full_only(&phi, &theta, &x);
        assert!(
            (tot.log_det - ld).abs() < 1e-9 && (cross[0] - ss).abs() < 1e-9 * ss,
            "{} {} vs {ld} {ss}",
            tot.log_det,
            cross[0]
        );
    }

    /// The Chandrasekhar phase against the covariance recursion (to rounding), and its
    /// fixed-size arrays against the workspace vectors (bit for bit): every small state
    /// size, near-unit MA roots, one to three columns, with gaps (which hand over to the
    /// covariance recursion) and without.
    #[test]
    fn chandrasekhar_phase_matches_riccati() {
        let n = 400;
        let base: Vec<f64> = (0..n)
            .map(|t| ((t * 7919 % 211) as f64 / 70.0 - 1.5) + 0.5 * ((t / 9) % 3) as f64)
            .collect();
        let mut gappy = base.clone();
        gappy[150] = f64::NAN;
        gappy[151] = f64::NAN;
        let mut early_gap = base.clone();
        early_gap[5] = f64::NAN;
        // Gaps at the start, long and short, close together, and a stretch of
        // alternating readings that pushes the factored step past its rank limit.
        let mut many_gaps = base.clone();
        for i in [0usize, 1, 40, 41, 42, 43, 44, 45, 46, 47, 60, 200, 201, 330] {
            many_gaps[i] = f64::NAN;
        }
        for i in (250..300).step_by(2) {
            many_gaps[i] = f64::NAN;
        }
        let models: [(&[f64], &[f64]); 7] = [
            (&[0.6], &[]),
            (&[0.5], &[0.95]),
            (&[0.4, 0.2], &[0.3, -0.99]),
            (&[0.3], &[0.2, 0.1, 0.97]),
            (&[0.1, 0.1, 0.1], &[0.5, 0.2]),
            (&[0.97], &[-0.4]),
            // seasonal shape, r = 13
            (
                &[0.5, 0., 0., 0., 0., 0., 0., 0., 0., 0., 0., 0.],
                &[0.3, 0., 0., 0., 0., 0., 0., 0., 0., 0., 0., 0.6, 0.18],
            ),
        ];
        for x in [&base, &gappy, &early_gap, &many_gaps] {
            for (phi, theta) in models {
                for ncols in [1, 2, 3] {
                    let mut data = x.clone();
                    data.extend((0..n).map(|_| 1.0));
                    data.extend((0..n).map(|t| t as f64 / n as f64));
                    let run = |route: Route| {
                        let mut ws = KalmanWorkspace {
                            route,
                            ..Default::default()
                        };
                        ws.set_model(phi, theta).unwrap();
                        let mut cross = vec![0.0; ncols * ncols];
                        let tot = ws.pass(&data, n, ncols, &mut cross);
                        let mut out = cross.clone();
                        out.push(tot.log_det);
                        out.push(tot.used as f64);
                        out.extend(&ws.innov[..ncols * n]);
                        out.extend(&ws.fvar[..n]);
                        (out, ws.full_steps)
                    };
                    let (usual, steps) = run(Route::Usual);
                    let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                    let label = format!("{phi:?} {theta:?} ncols {ncols}");
                    assert_eq!(bits(&usual), bits(&run(Route::Dynamic).0), "{label}");
                    let (riccati, riccati_steps) = run(Route::Riccati);
                    for (i, (a, b)) in usual.iter().zip(&riccati).enumerate() {
                        let same =
                            (a.is_nan() && b.is_nan()) || (a - b).abs() <= 1e-9 * (1.0 + b.abs());
                        assert!(same, "{label}: entry {i}: {a} vs {b}");
                    }
                    assert!(
                        steps > 10 || theta.is_empty(),
                        "{label}: {steps} full steps"
                    );
                    // The looser-looking threshold does not leave the phase much later.
                    assert!(
                        steps <= riccati_steps + riccati_steps / 4 + 20,
                        "{label}: {steps} vs {riccati_steps}"
                    );
                }
            }
        }
    }

    #[test]
    fn steady_switch_matches_full_filter() {
        // Compare against a pass forced to stay in the full phase (tolerance 0 via a
        // non-invertible-looking setup is not possible, so recompute with huge n split).
        let phi = [0.6, -0.2];
        let theta = [0.9];
        let n = 3000;
        let mut x = vec![0.0; n];
        let mut e_prev = 0.0;
        let mut seed = 12345u64;
        for t in 0..n {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let e = ((seed >> 11) as f64 / (1u64 << 53) as f64) - 0.5;
            let ar = phi[0] * if t >= 1 { x[t - 1] } else { 0.0 }
                + phi[1] * if t >= 2 { x[t - 2] } else { 0.0 };
            x[t] = ar + e + theta[0] * e_prev;
            e_prev = e;
        }
        x[1500] = f64::NAN;
        x[1501] = f64::NAN;
        let mut ws = KalmanWorkspace::default();
        ws.set_model(&phi, &theta).unwrap();
        let mut cross = [0.0];
        let tot = ws.pass(&x, n, 1, &mut cross);
        assert!(ws.full_steps < n / 2, "never reached steady state");
        let (ld, ss) = full_only(&phi, &theta, &x);
        let ll = |ld: f64, ss: f64| -0.5 * (ld + ss);
        let (got, want) = (ll(tot.log_det, cross[0]), ll(ld, ss));
        assert!((got - want).abs() < 1e-9 * want.abs(), "{got} vs {want}");
    }
}
