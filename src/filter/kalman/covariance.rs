//! Covariance algebra of the companion form: the dense covariance (Riccati) recursion
//! of the filter's full phase on a ring-indexed matrix ([`RingCovariance`]), and the
//! plain row-major recursion kept as the reference route.

use super::*;

/// The state covariance of the filter's dense full phase, stored so that the companion
/// shift costs nothing. Logical entry `(i, j)`, `0 ≤ i, j ≤ r`, lives at physical
/// `(ph(i), ph(j))` of an `(r+1)×(r+1)` row-major buffer, `ph(i) = (i + off) mod (r+1)`,
/// of which only the upper triangle (physical row ≤ column) is kept (the matrix is
/// symmetric); logical row and column `r` are a zero border. One step of
/// `P ← T(P − P e₁e₁ᵀP / F)Tᵀ + RRᵀ` is then a rank-one downdate of that triangle,
/// `off += 1` (the shift `M[i+1][j+1]`), zeroing the row and column that became the
/// border, and `RRᵀ` on the non-zero entries of `R` only: the AR terms `φ_i M[0][j+1]`
/// vanish because the update zeroes row 0 of `M`. A step without a measurement keeps them
/// (non-zero `φ` rows and columns only). About (r+1)² flops per reading instead of
/// ≈ 11r² in two passes of the row-major form.
#[derive(Debug, Default, Clone)]
pub(super) struct RingCovariance {
    r: usize,
    s: usize,
    off: usize,
    /// Whether the buffer holds the covariance of the current pass (see
    /// [`Self::invalidate`]).
    set: bool,
    q: Vec<f64>,
    /// Row 0 (logical order, or physical order inside the downdate), length `r + 1`.
    row: Vec<f64>,
    /// Non-zero `φ_{i+1}` by logical row `i`, and non-zero `R_i`.
    phi_nz: Vec<(usize, f64)>,
    r_nz: Vec<(usize, f64)>,
}

impl RingCovariance {
    /// Heap bytes held.
    pub(super) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        b(&self.q)
            + b(&self.row)
            + self.phi_nz.capacity() * std::mem::size_of::<(usize, f64)>()
            + self.r_nz.capacity() * std::mem::size_of::<(usize, f64)>()
    }

    /// Size for the model with padded `φ` and `R` (both of length `r`).
    pub(super) fn set_model(&mut self, phi: &[f64], rvec: &[f64]) {
        let r = phi.len();
        self.r = r;
        self.s = r + 1;
        ensure_len(&mut self.q, self.s * self.s);
        ensure_len(&mut self.row, self.s);
        let nonzero = |v: &[f64], out: &mut Vec<(usize, f64)>| {
            out.clear();
            out.extend(
                v.iter()
                    .enumerate()
                    .filter(|(_, c)| **c != 0.0)
                    .map(|(i, c)| (i, *c)),
            );
        };
        nonzero(phi, &mut self.phi_nz);
        nonzero(rvec, &mut self.r_nz);
        self.set = false;
    }

    /// Mark the buffer stale (a new pass begins).
    pub(super) fn invalidate(&mut self) {
        self.set = false;
    }

    /// Whether the buffer holds this pass's covariance.
    pub(super) fn is_set(&self) -> bool {
        self.set
    }

    /// Load a symmetric row-major `r×r` covariance (its upper triangle is read).
    pub(super) fn load(&mut self, p: &[f64]) {
        let (r, s) = (self.r, self.s);
        self.off = 0;
        for i in 0..r {
            self.q[i * s + i..i * s + r].copy_from_slice(&p[i * r + i..(i + 1) * r]);
            self.q[i * s + r] = 0.0;
        }
        self.q[r * s + r] = 0.0;
        self.set = true;
    }

    /// The steady-state covariance `RRᵀ`.
    pub(super) fn set_steady(&mut self) {
        let s = self.s;
        self.off = 0;
        self.q.fill(0.0);
        for &(i, a) in &self.r_nz {
            for &(j, b) in &self.r_nz {
                if i <= j {
                    self.q[i * s + j] = a * b;
                }
            }
        }
        self.set = true;
    }

    #[inline]
    fn ph(&self, i: usize) -> usize {
        let k = i + self.off;
        if k >= self.s { k - self.s } else { k }
    }

    /// Index of the kept entry for physical `(a, b)`.
    #[inline]
    fn at(&self, a: usize, b: usize) -> usize {
        if a <= b {
            a * self.s + b
        } else {
            b * self.s + a
        }
    }

    /// `F = P[0][0]`.
    #[inline]
    pub(super) fn f(&self) -> f64 {
        self.q[self.off * self.s + self.off]
    }

    /// Logical entry `(i, j)`.
    #[cfg(test)]
    pub(super) fn entry(&self, i: usize, j: usize) -> f64 {
        self.q[self.at(self.ph(i), self.ph(j))]
    }

    /// Physical row `off` (logical row 0) into `self.row`, in physical order.
    fn physical_row0(&mut self) {
        let (s, o) = (self.s, self.off);
        for p in 0..o {
            self.row[p] = self.q[p * s + o];
        }
        self.row[o..].copy_from_slice(&self.q[o * s + o..(o + 1) * s]);
    }

    /// `k = P[:, 0] / f` in logical order.
    pub(super) fn gain_into(&mut self, f: f64, k: &mut [f64]) {
        self.physical_row0();
        let (r, s, o) = (self.r, self.s, self.off);
        // Logical i ↦ physical o + i for i < s − o, then i − (s − o).
        let head = (s - o).min(r);
        let inv = 1.0 / f;
        for (ki, &v) in k[..head].iter_mut().zip(&self.row[o..o + head]) {
            *ki = v * inv;
        }
        for (ki, &v) in k[head..r].iter_mut().zip(&self.row[..r - head]) {
            *ki = v * inv;
        }
    }

    /// The step after a reading with innovation variance `f`; returns the trace of the
    /// updated covariance `P⁺` (zero once the state is known).
    pub(super) fn step_present(&mut self, f: f64) -> f64 {
        let s = self.s;
        self.physical_row0();
        let inv = 1.0 / f;
        let mut trace = 0.0;
        for p in 0..s {
            let c = self.row[p] * inv;
            let qrow = &mut self.q[p * s + p..(p + 1) * s];
            if c != 0.0 {
                for (x, &u) in qrow.iter_mut().zip(&self.row[p..]) {
                    *x -= c * u;
                }
            }
            trace += qrow[0];
        }
        self.shift();
        self.add_rr();
        trace
    }

    /// The step across a missing reading: `P ← TPTᵀ + RRᵀ`.
    pub(super) fn step_missing(&mut self) {
        let (r, s) = (self.r, self.s);
        // Row 0 in logical order (its last entry is the border, zero).
        let o = self.off;
        for x in 0..s {
            self.row[x] = self.q[self.at(o, self.ph(x))];
        }
        let p00 = self.row[0];
        self.shift();
        for &(i, fi) in &self.phi_nz {
            let pi = self.ph(i);
            for j in 0..r {
                // φ_i M[0][j+1] at (i, j) and at (j, i): one kept entry, twice on the
                // diagonal.
                let v = fi * self.row[j + 1];
                let pj = self.ph(j);
                let k = self.at(pi, pj);
                self.q[k] += if pi == pj { 2.0 * v } else { v };
            }
            for &(j, fj) in &self.phi_nz {
                let pj = self.ph(j);
                if pi <= pj {
                    self.q[pi * s + pj] += fi * fj * p00;
                }
            }
        }
        self.add_rr();
    }

    /// `off += 1`, then zero the physical row and column that became the border.
    fn shift(&mut self) {
        let (s, o) = (self.s, self.off);
        self.q[o * s + o..(o + 1) * s].fill(0.0);
        for p in 0..o {
            self.q[p * s + o] = 0.0;
        }
        self.off = if o + 1 == s { 0 } else { o + 1 };
    }

    fn add_rr(&mut self) {
        let s = self.s;
        for &(i, a) in &self.r_nz {
            let pi = self.ph(i);
            for &(j, b) in &self.r_nz {
                let pj = self.ph(j);
                if pi <= pj {
                    self.q[pi * s + pj] += a * b;
                }
            }
        }
    }
}

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
    /// reference route; the filter's full phase uses [`RingCovariance`]).
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
