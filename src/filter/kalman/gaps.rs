//! Gaps in large-state filters: the factored (Chandrasekhar-type) step that carries the
//! covariance change `W M Wᵀ` across missing readings, with the covariance recursion as
//! the fall-back.

use super::*;

/// The factored covariance step of [`KalmanWorkspace::gappy`] and its scratch space.
#[derive(Debug, Default, Clone)]
pub(super) struct GapFactors {
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
pub(super) const GAPPY_MIN_STATE: usize = 8;

impl GapFactors {
    /// Heap bytes held by the factors and their scratch.
    pub(super) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        b(&self.w)
            + b(&self.m)
            + b(&self.w_next)
            + b(&self.m_next)
            + b(&self.g_next)
            + b(&self.a)
            + b(&self.ma)
            + b(&self.norms)
            + b(&self.kept)
    }
    /// Forget the factors (a new pass begins).
    pub(super) fn clear(&mut self) {
        self.ready = false;
    }
    /// Whether the factors describe the current time.
    pub(super) fn is_ready(&self) -> bool {
        self.ready
    }
    /// A missing first reading: `P₁ = P₀`, so the step is zero (rank 0); `f0 = P₀[0][0]`.
    pub(super) fn open_at_start(&mut self, f0: f64) {
        self.anchor = 0;
        self.anchor_steady = false;
        self.f = f0;
        self.rank = 0;
        self.ready = true;
    }
    /// A missing reading met by the Chandrasekhar phase, whose last step is `−w wᵀ/F`:
    /// the step across the gap is `−w wᵀ/F + G Gᵀ/F` (the update that did not happen),
    /// rank two.
    pub(super) fn open_after_chandrasekhar(&mut self, f: f64, w: &[f64], g: &[f64]) {
        let r = w.len();
        self.anchor = 0;
        self.anchor_steady = false;
        self.f = f;
        self.rank = 2;
        ensure_len(&mut self.w, 2 * r);
        ensure_len(&mut self.m, 4);
        self.w[..r].copy_from_slice(w);
        self.w[r..2 * r].copy_from_slice(g);
        self.m.copy_from_slice(&[-1.0 / f, 0.0, 0.0, 1.0 / f]);
        self.ready = true;
    }
}

impl KalmanWorkspace {
    /// Whether gaps go through [`Self::gappy`] (large states, not forced off by a test).
    pub(super) fn gappy_allowed(&self) -> bool {
        self.r > GAPPY_MIN_STATE && self.route != Route::Riccati
    }

    /// A gap met in the steady state at time `t` (the state means are current): the
    /// covariance is RRᵀ. Prepares the factored step (large states) or the covariance
    /// recursion.
    pub(super) fn gap_from_steady(&mut self, t: usize) {
        self.ring.set_steady();
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
    /// the rank grew past max(r/8, 8) or F fell below 1 (`None`: the ring covariance then holds
    /// `P_t` for the covariance recursion, replayed from the anchor).
    #[allow(clippy::too_many_arguments)]
    pub(super) fn gappy(
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
        // Hand over to the dense ring step (≈ (r+1)² flops) past r/8 columns, but not
        // below 8: at r = 98 (period 96, 2% missing in runs) one exact evaluation took
        // 11.5 ms at r/8 against 17–28 ms at r/2 (the factored sweep is O(r·rank) and
        // its work is replayed when it hands over late); at r = 14 (period 12) a bound of
        // 2 cost 40–90% against the factored step, which brings short gaps back to the
        // steady state on its own.
        let max_rank = (r / 8).max(8);
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
                if gap.anchor_steady {
                    self.ring.set_steady();
                } else {
                    self.ring.load(&self.p);
                }
                for k in anchor..t {
                    if data[k].is_nan() {
                        self.ring.step_missing();
                    } else {
                        let fk = self.ring.f();
                        self.ring.step_present(fk);
                    }
                }
                return (t, None);
            }
        }
        (t, Some(false))
    }
}
