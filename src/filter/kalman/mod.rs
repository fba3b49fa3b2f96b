//! The exact Kalman filter of the ARMA state-space form, in parts that each do one job:
//! `start` (the form and its stationary start), `chandrasekhar` (the O(r) opening phase),
//! `covariance` (the O(r²) covariance recursion), `gaps` (factored steps across missing
//! readings in large states), `likelihood` (the public functions); this file holds the
//! workspace and the phase machine of one pass (full → steady → direct).

use crate::base::error::{Error, Result};
use crate::filter::innovations::{direct_recursion, segment_dot};
use crate::filter::lanes::{Lane, MAX_LANES, add_lane_sums};
use crate::model::lag;

mod chandrasekhar;
mod covariance;
mod gaps;
mod likelihood;
mod score;
mod start;

use crate::filter::ring::RingCovariance;
use chandrasekhar::CHANDRASEKHAR_TOLERANCE;
use chandrasekhar::open_side_by_side;
use gaps::GapFactors;
pub use likelihood::{exact_log_likelihood, reference_log_likelihood};
pub(crate) use score::{AdjointScratch, PassDerivatives};

/// Largest state dimension with the fixed-size full-covariance step.
const SMALL_STATE: usize = 4;

/// Convergence threshold on trace(P⁺) for leaving the full-covariance (Riccati) phase.
pub(crate) const STEADY_TOLERANCE: f64 = 1e-14;

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
    /// The covariance of the dense full phase (after gaps in small states, or when the
    /// factored step hands over).
    ring: RingCovariance,
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
    /// Heap bytes held by this workspace.
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        [
            b(&self.phi),
            b(&self.rvec),
            b(&self.ar_nz),
            b(&self.ma_nz),
            b(&self.p),
            b(&self.pn),
            b(&self.ch_g),
            b(&self.ch_w),
            self.gap.heap_bytes(),
            self.ring.heap_bytes(),
            b(&self.kcol),
            b(&self.state),
            b(&self.tmp),
            b(&self.gamma_u),
            b(&self.gamma_x),
            b(&self.psi),
            b(&self.kappa),
            b(&self.dl_a),
            b(&self.dl_b),
            b(&self.macov),
            b(&self.innov),
            b(&self.fvar),
        ]
        .iter()
        .sum()
    }
}

impl KalmanWorkspace {
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
    const RING: usize = 4;

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
    fn begin_pass(&mut self, n: usize, ncols: usize, cross: &mut [f64], stop_at_direct: bool) {
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
        self.gap.clear();
        self.ring.invalidate();
    }

    /// The pass after [`Self::begin_pass`]. `opened` is where an opening Chandrasekhar
    /// phase run elsewhere ([`open_side_by_side`]) stopped: `(t, converged, totals)`;
    /// `None` runs it here.
    fn pass_from(
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
                        self.gap.open_at_start(f0);
                    }
                    if self.gap.is_ready() {
                        let (next, how) = self.gappy(data, n, ncols, t, cross, &mut totals);
                        self.full_steps += next - t;
                        t = next;
                        if how == Some(true) {
                            phase = Phase::Steady(0);
                        }
                        continue;
                    }
                    self.full_steps += 1;
                    if !self.ring.is_set() {
                        // The dense phase from the stationary start.
                        self.ring.load(&self.p);
                    }
                    let f = self.ring.f();
                    if missing {
                        self.fvar[t] = f64::NAN;
                        for c in 0..ncols {
                            self.innov[c * stride + (t & mask)] = f64::NAN;
                        }
                        self.predict_states(ncols);
                        self.ring.step_missing();
                    } else {
                        if !stop_at_direct {
                            self.fvar[t] = f;
                        }
                        totals.log_det += f.ln();
                        totals.used += 1;
                        self.ring.gain_into(f, &mut self.kcol);
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
                        // `gain_into` above computed the gain column of this covariance.
                        let trace = self.ring.step_present_after_gain(f);
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
                        phase = self.end_direct_run(data, n, ncols, t, phase);
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
                    phase = self.end_direct_run(data, n, ncols, t, phase);
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
                self.gap
                    .open_after_chandrasekhar(self.ch_f, &self.ch_w, &self.ch_g);
            } else {
                // A gap before convergence: the covariance recursion takes over. P_t
                // depends on the model only, so replay it.
                self.ring.load(&self.p);
                for _ in 0..t {
                    let f = self.ring.f();
                    self.ring.step_present(f);
                }
            }
        }
        Phase::Full
    }

    /// The lane that continues this filter's direct phase at time `t`: the model's
    /// coefficients and the innovations before `t` (column stride and index mask as the
    /// pass stored them: `(n, usize::MAX)`, or `(RING, RING − 1)` after a stopping pass).
    fn lane_at(
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

    /// The stationary covariance `P₀` (r×r, σ² = 1) of the model set last (passes leave it
    /// untouched; only the reference route overwrites it).
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

    /// Predicted state at time `t` from readings and innovations before `t`:
    /// `a_t[i] = Σ_{k=i+1}^{r} φ_k w_{t+i−k} + θ_k v_{t+i−k}` (steady-state identity).
    /// A direct-phase run ended at `t`: at a missing reading (`t < n`) rebuild the
    /// predicted state from the last readings and innovations and return to the
    /// full-covariance phase; at the end of the series stay in `phase`.
    fn end_direct_run(
        &mut self,
        data: &[f64],
        n: usize,
        ncols: usize,
        t: usize,
        phase: Phase,
    ) -> Phase {
        if t < n {
            self.rebuild_states(data, n, ncols, t);
            self.gap_from_steady(t);
            Phase::Full
        } else {
            phase
        }
    }

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

/// Where a filter run by [`run_to_direct_phase`] stands: its totals so far, and, unless
/// the whole series was consumed, the time its direct phase starts with the lane that
/// continues it (model and innovation history).
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct DirectPhase {
    pub(crate) totals: PassTotals,
    pub(crate) rest: Option<(usize, Lane)>,
}

/// Run up to [`MAX_LANES`] filters (models already set; `active` marks the usable ones)
/// over the same data until each reaches its direct phase: the opening Chandrasekhar
/// phases side by side ([`open_side_by_side`]), then each filter alone. Cross-products go
/// to `cross` (`ncols²` per filter). Every filter's arithmetic is exactly that of a
/// single pass, so what the lanes kernel continues is bitwise a single evaluation.
pub(crate) fn run_to_direct_phase(
    filters: &mut [KalmanWorkspace],
    active: &[bool],
    data: &[f64],
    n: usize,
    ncols: usize,
    cross: &mut [f64],
) -> [DirectPhase; MAX_LANES] {
    let kk = ncols * ncols;
    for (l, filter) in filters.iter_mut().enumerate() {
        if active[l] {
            filter.begin_pass(n, ncols, &mut cross[l * kk..(l + 1) * kk], true);
        }
    }
    let mut opened = [(0usize, false, PassTotals::default()); MAX_LANES];
    open_side_by_side(filters, active, data, n, ncols, cross, &mut opened);
    let mut out = [DirectPhase::default(); MAX_LANES];
    for (l, filter) in filters.iter_mut().enumerate() {
        if !active[l] {
            continue;
        }
        let lane_cross = &mut cross[l * kk..(l + 1) * kk];
        let (totals, stop) = filter.pass_from(data, n, ncols, lane_cross, true, Some(opened[l]));
        let ring = KalmanWorkspace::RING;
        out[l] = DirectPhase {
            totals,
            rest: stop.map(|t| (t, filter.lane_at(ring, ring - 1, ncols, t))),
        };
    }
    out
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
enum Phase {
    #[default]
    Full,
    Steady(usize),
    Direct,
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

    /// The ring-indexed dense step against the row-major recursion it replaces, entry by
    /// entry after every step: AR terms at several lags (seasonal AR included), sparse
    /// and dense MA parts, present and missing readings in runs, and a steady-state
    /// restart.
    #[test]
    fn ring_covariance_matches_row_major_recursion() {
        let seasonal_ar = lag::expand_autoregressive(&[0.4, -0.2], &[0.5], 6);
        let seasonal_ma = lag::expand_moving_average(&[0.3], &[-0.6], 6);
        let models: [(&[f64], &[f64]); 4] = [
            (&[0.6], &[0.3, 0.0, 0.0, 0.0, 0.0, 0.4]),
            (&seasonal_ar, &seasonal_ma),
            (&[0.2, 0.1, -0.3, 0.05], &[]),
            (&[], &[0.5, -0.4, 0.3, 0.2, 0.1, 0.1, 0.05]),
        ];
        let missing = |t: usize| matches!(t % 23, 3..=6) || t % 17 == 9;
        for (phi, theta) in models {
            let mut reference = KalmanWorkspace::default();
            reference.set_model(phi, theta).unwrap();
            let mut ws = KalmanWorkspace::default();
            ws.set_model(phi, theta).unwrap();
            let r = ws.r;
            ws.ring.load(&ws.p);
            for t in 0..120 {
                if t == 70 {
                    ws.ring.set_steady();
                    for i in 0..r {
                        for j in 0..r {
                            reference.p[i * r + j] = reference.rvec[i] * reference.rvec[j];
                        }
                    }
                }
                let f = reference.p[0];
                assert!(
                    (ws.ring.f() - f).abs() <= 1e-12 * f,
                    "{phi:?} {theta:?} t {t}"
                );
                if missing(t) {
                    reference.predict_covariance_no_update();
                    ws.ring.step_missing();
                } else {
                    let want = reference.predict_covariance_after_update(f);
                    let got = ws.ring.step_present(ws.ring.f());
                    assert!(
                        (got - want).abs() <= 1e-12 * (1.0 + want.abs()),
                        "trace at {t}"
                    );
                }
                for i in 0..r {
                    for j in 0..r {
                        let (a, b) = (ws.ring.entry(i, j), reference.p[i * r + j]);
                        assert!(
                            (a - b).abs() <= 1e-12 * (1.0 + b.abs()),
                            "{phi:?} {theta:?} t {t} ({i},{j}): {a} vs {b}"
                        );
                    }
                }
                let mut k = vec![0.0; r];
                let f = ws.ring.f();
                ws.ring.gain_into(f, &mut k);
                for i in 0..r {
                    let want = reference.p[i * r] / reference.p[0];
                    assert!(
                        (k[i] - want).abs() <= 1e-12 * (1.0 + want.abs()),
                        "gain {i}"
                    );
                }
            }
        }
    }

    /// Reference: the full-covariance recursion at every step (no phase switch).
    fn full_only(phi: &[f64], theta: &[f64], x: &[f64]) -> (f64, f64) {
        let mut refw = KalmanWorkspace::default();
        refw.set_model(phi, theta).unwrap();
        let (ld, ss, _) = refw.covariance_recursion_totals(x);
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
