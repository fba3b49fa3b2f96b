//! The Chandrasekhar recursions (Morf, Sidhu & Kailath 1974) of the opening phase from the
//! stationary start, for one filter and for up to four filters side by side.

use super::*;

/// Convergence threshold on `|w|²/F` for leaving the Chandrasekhar phase (the rank-one
/// step of the covariance; stricter than [`STEADY_TOLERANCE`] because the remaining
/// distance is this step divided by one minus the convergence rate).
pub(super) const CHANDRASEKHAR_TOLERANCE: f64 = 1e-16;

/// The Chandrasekhar steps of [`KalmanWorkspace::chandrasekhar`] from t = 0 (states `st`
/// zero on entry, `ncols` columns of length `r = phi.len()`). Σ ln F_t is taken as the log
/// of products of up to 16 factors (F_t ≥ 1), one logarithm per 16 readings.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub(super) fn chandrasekhar_steps(
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
pub(super) fn cross_two(v0: f64, v1: f64, f: f64, cross: &mut [f64]) {
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

pub(super) fn open_group<const R: usize, const C: usize>(
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

impl KalmanWorkspace {
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
    pub(super) fn chandrasekhar(
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
}

impl KalmanWorkspace {
    /// After a complete one-column pass over `n` readings whose opening Chandrasekhar
    /// phase ran to the end without converging (no missing reading): the predicted state
    /// for time `n`, with its covariance `P_n` (σ² = 1, r×r row-major) into `cov`. Since
    /// `P_{t+1} = P_t − w_t w_tᵀ/F_t` and the limit is `RRᵀ`,
    ///
    /// ```text
    /// P_n = RRᵀ + Σ_{t ≥ n} w_t w_tᵀ / F_t,
    /// ```
    ///
    /// the opening's recursions replayed to `n` and continued (the model alone decides
    /// them) until they converge: O(r) per reading to `n`, then O(r²) per further step
    /// for at most `cap` steps. `None` when the pass was not of that kind or the
    /// recursions did not converge within `cap` steps (an MA root on the unit circle).
    pub(crate) fn opening_terminal(
        &self,
        n: usize,
        cap: usize,
        cov: &mut Vec<f64>,
    ) -> Option<&[f64]> {
        let r = self.r;
        if r == 0
            || self.route == Route::Riccati
            || !matches!(self.ended_in, Phase::Full)
            || self.full_steps != n
        {
            return None;
        }
        let (mut g, mut w) = (vec![0.0; r], vec![0.0; r]);
        let p0 = &self.p;
        let mut f = p0[0];
        for i in 0..r {
            let below = if i + 1 < r { p0[(i + 1) * r] } else { 0.0 };
            g[i] = self.phi[i] * f + below;
        }
        w.copy_from_slice(&g);
        let step = |g: &mut [f64], w: &mut [f64], f: &mut f64| -> f64 {
            let w0 = w[0];
            let k = w0 / *f;
            *f -= w0 * k;
            let mut size = 0.0;
            for i in 0..r {
                let u = self.phi[i] * w0 + if i + 1 < r { w[i + 1] } else { 0.0 };
                let gi = g[i];
                g[i] = gi - k * u;
                let wi = u - k * gi;
                w[i] = wi;
                size += wi * wi;
            }
            size
        };
        for _ in 0..n {
            step(&mut g, &mut w, &mut f);
        }
        cov.clear();
        cov.resize(r * r, 0.0);
        let mut converged = false;
        for _ in 0..cap {
            let inv = 1.0 / f;
            for i in 0..r {
                let a = w[i] * inv;
                for (c, wj) in cov[i * r + i..(i + 1) * r].iter_mut().zip(&w[i..]) {
                    *c += a * wj;
                }
            }
            let size = step(&mut g, &mut w, &mut f);
            if size < CHANDRASEKHAR_TOLERANCE * f && f - 1.0 < 1e-10 {
                converged = true;
                break;
            }
        }
        if !converged {
            return None;
        }
        for i in 0..r {
            for j in i..r {
                let v = cov[i * r + j] + self.rvec[i] * self.rvec[j];
                cov[i * r + j] = v;
                cov[j * r + i] = v;
            }
        }
        Some(&self.state[..r])
    }
}
