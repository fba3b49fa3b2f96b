//! The state-space form of an ARMA model and its stationary start: the initial
//! covariance in O(r²) from the autocovariances and ψ-weights.

use super::*;

impl KalmanWorkspace {
    /// Set the model (expanded φ and θ, conventions of [`inverse_roots`](crate::inverse_roots)) and compute the
    /// stationary initial covariance. Errors if the AR part is not stationary.
    pub(crate) fn set_model(&mut self, phi: &[f64], theta: &[f64]) -> Result<()> {
        let (p, q) = self.set_polynomials(phi, theta);
        let r = self.r;
        resize(&mut self.pn, (r + 1) * (r + 1));
        resize(&mut self.kcol, r);
        resize(&mut self.tmp, r);
        resize(&mut self.ch_g, r);
        resize(&mut self.ch_w, r);
        self.ring.set_companion(&self.phi, &self.rvec);
        self.stationary_covariance(p, q, true)
    }

    /// Only the first column of `P₀` (into `self.p[j·r]`, `j < r`; the rest of `self.p` is
    /// left stale) for a model that is not run: the exact score's perturbed starts.
    pub(crate) fn set_model_start_column(&mut self, phi: &[f64], theta: &[f64]) -> Result<()> {
        let (p, q) = self.set_polynomials(phi, theta);
        self.stationary_covariance(p, q, false)
    }

    /// The expanded polynomials, their non-zero lags and the state dimension; `p` sized.
    fn set_polynomials(&mut self, phi: &[f64], theta: &[f64]) -> (usize, usize) {
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
        if self.p.len() != r * r {
            self.p.resize(r * r, 0.0);
        }
        (p, q)
    }

    /// `P₀` for σ² = 1 into `self.p` (see module docs); with `fill` false only its first
    /// row and column.
    pub(super) fn stationary_covariance(&mut self, p: usize, q: usize, fill: bool) -> Result<()> {
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
        if !fill {
            if pm[..r].iter().any(|v| !v.is_finite()) || !(pm[0] > 0.0) {
                return Err(Error::numerical(
                    "exact likelihood",
                    "stationary covariance is not finite",
                ));
            }
            return Ok(());
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
}
