//! Covariance algebra of the companion form on the row-major `P`: the plain covariance
//! (Riccati) recursion kept as the reference route (the filter's own dense phase runs on
//! [`RingCovariance`](crate::filter::ring::RingCovariance)).

use super::*;

impl KalmanWorkspace {
    /// `G = T P e₁` into `ch_g` from the covariance in `self.p`; returns `F = P[0][0]`.
    pub(super) fn gain_from_covariance(&mut self) -> f64 {
        let r = self.r;
        let f0 = self.p[0];
        for i in 0..r {
            let below = if i + 1 < r { self.p[(i + 1) * r] } else { 0.0 };
            self.ch_g[i] = self.phi[i] * f0 + below;
        }
        f0
    }

    /// P ← T(P − k kᵀ F)Tᵀ + RRᵀ with k = P[:,0]/F on the row-major `self.p` (the
    /// reference route).
    /// Returns the trace of the updated covariance `P⁺` (zero once the state is known).
    pub(super) fn predict_covariance_after_update(&mut self, f: f64) -> f64 {
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

    pub(super) fn predict_covariance_no_update(&mut self) {
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
    pub(super) fn companion_transform(&mut self) {
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
}
