//! The adjoint (reverse-mode derivatives) of a gap-free pass: every derivative of the
//! exact objective for the price of about two passes, whatever the number of
//! coefficients (central differences need two passes per coefficient).
//!
//! A gap-free pass from the stationary start has two parts (see the module docs of the
//! filter): the opening Chandrasekhar steps for `t < t₁`, with the state update
//!
//! ```text
//! v_t = x_t − a_t[0],   a_{t+1}[i] = φ_{i+1} a_t[0] + a_t[i+1] + G_t[i] v_t / F_t
//! F_{t+1} = F_t − w_t[0]²/F_t,  u = T w_t,  G_{t+1} = G_t − (w_t[0]/F_t) u,
//! w_{t+1} = u − (w_t[0]/F_t) G_t,   F₀ = P₀[0][0],  G₀ = w₀ = T P₀ e₁,
//! ```
//!
//! and, from `t₁` on (the gain converged to `R`, `F = 1`), the steady and direct phases,
//! which are one recursion: `v_t = x_t − Σ_{k ≤ d} (φ_k x_{t−k} + θ_k v_{t−k}) − a_{t₁}[d]`
//! with `d = t − t₁` (the last term only for `d < r`). For the objective
//! `J = α Σ ln F_t + β Σ v_t²/F_t` the reverse sweep runs the tail backwards
//! (`μ_t = ∂J/∂v_t = 2β v_t − Σ_j θ_j μ_{t+j}`, O(non-zero lags) per reading), hands
//! `∂J/∂a_{t₁}` to the opening, and runs the opening's steps backwards (O(r) per reading,
//! from `w_t` and `F_t` stored by a model-only replay; `G_t = G_{t+1} + (w_t[0]/F_t) T w_t`
//! is recovered on the way back, and the adjoints of the shifted vectors `a` and `w` live
//! in buffers that slide by one slot per step instead of being copied). It ends with the
//! explicit derivatives in the expanded `φ` and `θ` and those in the first column of
//! `P₀`, which the caller chains to its own coordinates.

use super::*;

/// Most values the reverse sweep stores for the opening (`r + 2` per reading, 32 MB);
/// longer openings are left to central differences.
const MAX_STORED: usize = 1 << 22;

/// Reused buffers of [`KalmanWorkspace::pass_adjoint`].
#[derive(Debug, Default, Clone)]
pub(crate) struct AdjointScratch {
    /// `(w_t, 0, F_t)` per opening step, `r + 2` each.
    opening: Vec<f64>,
    /// `G_t`, recovered backwards from `G_{t₁}`.
    g: Vec<f64>,
    /// `μ_t` of the tail.
    mu: Vec<f64>,
    /// Adjoints: of `a_t` at `abar[t..t + r]`, of `w_t` at `wbar[t..t + r]` (sliding),
    /// of `G_t` in place.
    abar: Vec<f64>,
    wbar: Vec<f64>,
    gbar: Vec<f64>,
    /// The AR lags (0-based) the sparse part of a step visits: non-zero or asked for.
    lags: Vec<usize>,
}

impl AdjointScratch {
    /// Heap bytes held.
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        [
            b(&self.opening),
            b(&self.g),
            b(&self.mu),
            b(&self.abar),
            b(&self.wbar),
            b(&self.gbar),
        ]
        .iter()
        .sum::<usize>()
            + b(&self.lags)
    }
}

/// The derivatives [`KalmanWorkspace::pass_adjoint`] writes: `phi[i]` = ∂J/∂φ_{i+1}
/// (length `r`), `theta[j]` = ∂J/∂θ_{j+1} (length of the expanded MA part), `column[i]` =
/// ∂J/∂P₀[i][0] (length `r`). Only the lags asked for are written in `phi` and `theta`.
pub(crate) struct PassDerivatives<'a> {
    pub phi: &'a mut [f64],
    pub theta: &'a mut [f64],
    pub column: &'a mut [f64],
}

impl KalmanWorkspace {
    /// The derivatives of `J = α Σ ln F_t + β Σ v_t²/F_t` over the last pass, which must
    /// have been a complete one-pass run of the usual route over a series without missing
    /// readings, for the column `x` (length `n`) whose innovations `v` that pass gives
    /// (for several columns, a fixed combination of them: the filter is linear in the
    /// data). Explicit derivatives in the expanded coefficients at the lags in `ar_lags`
    /// and `ma_lags` (1-based) and in the first column of `P₀` go to `out`; how they move
    /// with the caller's coordinates is the caller's part. `false` (nothing written that
    /// can be used) when the pass is not of that kind or its opening is too long to store.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn pass_adjoint(
        &self,
        x: &[f64],
        v: &[f64],
        (alpha, beta): (f64, f64),
        ar_lags: &[usize],
        ma_lags: &[usize],
        s: &mut AdjointScratch,
        out: PassDerivatives<'_>,
    ) -> bool {
        let n = x.len();
        let r = self.r;
        let t1 = self.full_steps;
        if r == 0
            || n == 0
            || v.len() < n
            || self.route == Route::Riccati
            || t1 == 0
            || t1 > n
            || (t1 < n && !matches!(self.ended_in, Phase::Steady(_) | Phase::Direct))
            || t1.saturating_mul(r + 2) > MAX_STORED
            || out.phi.len() != r
            || out.column.len() != r
            || out.theta.len() != self.q_len
        {
            return false;
        }
        out.phi.fill(0.0);
        out.theta.fill(0.0);
        out.column.fill(0.0);
        s.abar.clear();
        s.abar.resize(t1 + r, 0.0);
        s.wbar.clear();
        s.wbar.resize(t1 + r + 1, 0.0);
        s.gbar.clear();
        s.gbar.resize(r, 0.0);
        s.lags.clear();
        s.lags.extend(self.ar_nz.iter().map(|&(i, _)| i - 1));
        for &l in ar_lags {
            if (1..=r).contains(&l) && !s.lags.contains(&(l - 1)) {
                s.lags.push(l - 1);
            }
        }
        self.tail_adjoint(
            x,
            v,
            beta,
            t1,
            ar_lags,
            ma_lags,
            s,
            &mut out.phi[..],
            out.theta,
        );
        self.replay_opening(t1, s);
        self.opening_adjoint(x, v, (alpha, beta), t1, s, out.phi, out.column);
        out.phi
            .iter()
            .chain(out.theta.iter())
            .chain(out.column.iter())
            .all(|d| d.is_finite())
    }

    /// The tail `t ≥ t₁` backwards: `μ_t`, the explicit derivatives at the lags asked
    /// for, and `∂J/∂a_{t₁}` into `s.abar[t₁..]`.
    #[allow(clippy::too_many_arguments)]
    fn tail_adjoint(
        &self,
        x: &[f64],
        v: &[f64],
        beta: f64,
        t1: usize,
        ar_lags: &[usize],
        ma_lags: &[usize],
        s: &mut AdjointScratch,
        phi_bar: &mut [f64],
        theta_bar: &mut [f64],
    ) {
        let n = x.len();
        let len = n - t1;
        s.mu.clear();
        s.mu.resize(len, 0.0);
        let mu = &mut s.mu;
        for d in (0..len).rev() {
            let mut m = 2.0 * beta * v[t1 + d];
            for &(j, th) in &self.ma_nz {
                if d + j < len {
                    m -= th * mu[d + j];
                }
            }
            mu[d] = m;
        }
        let lagged = |col: &[f64], lag: usize| -> f64 {
            if lag >= len {
                return 0.0;
            }
            mu[lag..]
                .iter()
                .zip(&col[t1..n - lag])
                .map(|(m, c)| m * c)
                .sum::<f64>()
        };
        for &k in ar_lags {
            if (1..=phi_bar.len()).contains(&k) {
                phi_bar[k - 1] -= lagged(x, k);
            }
        }
        for &k in ma_lags {
            if (1..=theta_bar.len()).contains(&k) {
                theta_bar[k - 1] -= lagged(v, k);
            }
        }
        for d in 0..self.r.min(len) {
            s.abar[t1 + d] = -mu[d];
        }
    }

    /// `(w_t, F_t)` for `t < t₁` from the stationary start as the opening computed them
    /// (the same arithmetic; the model alone decides them), and `G_{t₁}` into `s.g`.
    fn replay_opening(&self, t1: usize, s: &mut AdjointScratch) {
        let r = self.r;
        let width = r + 2;
        s.opening.clear();
        s.opening.resize(t1 * width, 0.0);
        s.g.clear();
        s.g.resize(r, 0.0);
        let (p0, phi, g) = (&self.p, &self.phi, &mut s.g);
        let mut f = p0[0];
        for i in 0..r {
            let below = if i + 1 < r { p0[(i + 1) * r] } else { 0.0 };
            g[i] = phi[i] * f + below;
        }
        s.opening[..r].copy_from_slice(g);
        for t in 0..t1 {
            let (done, rest) = s.opening.split_at_mut((t + 1) * width);
            let row = &mut done[t * width..];
            row[r + 1] = f;
            let w0 = row[0];
            let k = w0 / f;
            f -= w0 * k;
            // G_{t+1} = G − k u and w_{t+1} = u − k G with u = T w (written to the next
            // row, when there is one).
            let next = if t + 1 < t1 {
                Some(&mut rest[..r])
            } else {
                None
            };
            match next {
                Some(next) => {
                    for i in 0..r {
                        let u = phi[i] * w0 + row[i + 1];
                        let gi = g[i];
                        g[i] = gi - k * u;
                        next[i] = u - k * gi;
                    }
                }
                None => {
                    for i in 0..r {
                        let u = phi[i] * w0 + row[i + 1];
                        g[i] -= k * u;
                    }
                }
            }
        }
    }

    /// The opening `t < t₁` backwards from `∂J/∂a_{t₁}` in `s.abar[t₁..]`; then the start
    /// `F₀ = P₀[0][0]`, `G₀ = w₀ = T P₀ e₁` into the derivatives in `P₀`'s first column.
    #[allow(clippy::too_many_arguments)]
    fn opening_adjoint(
        &self,
        x: &[f64],
        v: &[f64],
        (alpha, beta): (f64, f64),
        t1: usize,
        s: &mut AdjointScratch,
        phi_bar: &mut [f64],
        column_bar: &mut [f64],
    ) {
        let r = self.r;
        let width = r + 2;
        let phi = &self.phi;
        let AdjointScratch {
            opening,
            g,
            abar,
            wbar,
            gbar,
            lags,
            ..
        } = s;
        let mut fbar = 0.0;
        for t in (0..t1).rev() {
            let row = &opening[t * width..(t + 1) * width];
            let (w, f) = (&row[..r + 1], row[r + 1]);
            let inv = 1.0 / f;
            let vt = v[t];
            let a0 = x[t] - vt;
            let c = vt * inv;
            let w0 = w[0];
            let k = w0 * inv;
            // F' = F − w₀k, G' = G − k u, w' = u − k G (k = w₀/F, u = T w) and the state
            // step a' = T a + G v / F (v = x − a[0]); the AR lags first (they read the
            // adjoints of step t + 1 before the dense loop overwrites them).
            let mut kbar = -w0 * fbar;
            let mut w0bar = -k * fbar;
            let mut sphi = 0.0;
            for &i in lags.iter() {
                let (gb, wb, ab) = (gbar[i], wbar[t + 1 + i], abar[t + 1 + i]);
                let ub = wb - k * gb;
                kbar -= gb * phi[i] * w0;
                w0bar += ub * phi[i];
                sphi += ab * phi[i];
                phi_bar[i] += ub * w0 + ab * a0;
                g[i] += k * phi[i] * w0;
            }
            let mut kb = [0.0; 4];
            let mut sg = [0.0; 4];
            let wb_next = &mut wbar[t + 1..t + 1 + r];
            let ab_next = &abar[t + 1..t + 1 + r];
            let w_next = &w[1..=r];
            // Four lanes of partial sums (the reductions would otherwise chain every
            // element's latency); the remainder goes to lane 0.
            let body = r - r % 4;
            for ((((gj, gb), wb), ab), wn) in g[..body]
                .chunks_exact_mut(4)
                .zip(gbar[..body].chunks_exact_mut(4))
                .zip(wb_next[..body].chunks_exact_mut(4))
                .zip(ab_next[..body].chunks_exact(4))
                .zip(w_next[..body].chunks_exact(4))
            {
                for l in 0..4 {
                    // G_t = G_{t+1} + k u (its AR part added above).
                    let gt = gj[l] + k * wn[l];
                    gj[l] = gt;
                    let (b, wv) = (gb[l], wb[l]);
                    kb[l] -= b * wn[l] + wv * gt;
                    sg[l] += ab[l] * gt;
                    wb[l] = wv - k * b;
                    gb[l] = b - k * wv + ab[l] * c;
                }
            }
            for j in body..r {
                let gt = g[j] + k * w_next[j];
                g[j] = gt;
                let (b, wv) = (gbar[j], wb_next[j]);
                kb[0] -= b * w_next[j] + wv * gt;
                sg[0] += ab_next[j] * gt;
                wb_next[j] = wv - k * b;
                gbar[j] = b - k * wv + ab_next[j] * c;
            }
            let kbar = kbar + (kb[0] + kb[1]) + (kb[2] + kb[3]);
            let sag = (sg[0] + sg[1]) + (sg[2] + sg[3]);
            wbar[t] = w0bar + kbar * inv;
            let vbar = (sag + 2.0 * beta * vt) * inv;
            fbar +=
                -kbar * k * inv - sag * vt * inv * inv + alpha * inv - beta * vt * vt * inv * inv;
            abar[t] = sphi - vbar;
        }
        // F₀ = P₀[0][0]; G₀[i] = φ_{i+1} P₀[0][0] + P₀[i+1][0]; w₀ = G₀.
        let p00 = self.p[0];
        let mut p00bar = fbar;
        for i in 0..r {
            let g0bar = gbar[i] + wbar[i];
            p00bar += g0bar * phi[i];
            phi_bar[i] += g0bar * p00;
            if i + 1 < r {
                column_bar[i + 1] = g0bar;
            }
        }
        column_bar[0] = p00bar;
    }
}
