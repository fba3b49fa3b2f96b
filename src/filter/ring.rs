//! A symmetric state covariance under a shift-register transition, ring-indexed so that
//! the shift costs nothing: the dense step of the exact filter (the ARMA companion form)
//! and of the forecasting filter (the same form beside the differencing lags).
//!
//! The transition is `x' = S x + E x + q e` with `S` the shift `x'_i = x_{i+1}` (the last
//! entry receives zero), `E` sparse and `q` the noise loading; readings observe `Z x`
//! with `Z` sparse. Logical entry `(i, j)`, `0 ≤ i, j ≤ dim`, lives at physical
//! `(ph(i), ph(j))` of a `(dim+1)×(dim+1)` row-major buffer, `ph(i) = (i + off) mod
//! (dim+1)`, of which only the upper triangle (physical row ≤ column) is kept; logical row
//! and column `dim` are a zero border. `S P Sᵀ` is then `off += 1` and zeroing the row
//! and column that became the border; the `E` terms touch the rows and columns `E` names;
//! an update is one rank-one downdate of the triangle, about (dim+1)²/2 multiply-adds.
//! For the ARMA form (`Z = e₀`, `E` reading column 0 only) an update zeroes row 0, so
//! the `E` terms of the step after it vanish and are skipped.

/// See the module documentation.
#[derive(Debug, Default, Clone)]
pub(crate) struct RingCovariance {
    dim: usize,
    s: usize,
    off: usize,
    /// Whether the buffer holds the covariance of the current pass (see
    /// [`Self::invalidate`]).
    set: bool,
    q: Vec<f64>,
    /// `P Zᵀ` in physical order (from [`Self::gain_column`]).
    zc: Vec<f64>,
    /// Columns of `P` that `E` reads, saved before a shift (logical order, `s` each).
    saved: Vec<f64>,
    /// `E`'s non-zero entries as (row, index into `e_cols`, coefficient).
    e_nz: Vec<(usize, usize, f64)>,
    /// The distinct columns `E` reads.
    e_cols: Vec<usize>,
    z_nz: Vec<(usize, f64)>,
    /// The noise loading, kept as a reused buffer for building `noise_pairs` (the exact
    /// filter reconfigures at every evaluation, which must not allocate).
    noise_nz: Vec<(usize, f64)>,
    /// `q qᵀ`'s entries on and above the diagonal: (row, column, product).
    noise_pairs: Vec<(usize, usize, f64)>,
    /// `Z = e₀` and `E` reads column 0 only.
    coordinate: bool,
}

impl RingCovariance {
    /// Heap bytes held.
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        let pairs = self.z_nz.capacity() + self.noise_nz.capacity();
        b(&self.q)
            + b(&self.zc)
            + b(&self.saved)
            + (self.e_nz.capacity() + self.noise_pairs.capacity())
                * std::mem::size_of::<(usize, usize, f64)>()
            + self.e_cols.capacity() * std::mem::size_of::<usize>()
            + pairs * std::mem::size_of::<(usize, f64)>()
    }

    /// The ARMA companion form with padded `φ` and `R = (1, θ₁, …)` (both of length r):
    /// `E = φ e₀ᵀ`, `Z = e₀`, noise `R`.
    pub(crate) fn set_companion(&mut self, phi: &[f64], rvec: &[f64]) {
        fn nonzero(v: &[f64]) -> impl Iterator<Item = (usize, f64)> + '_ {
            v.iter()
                .enumerate()
                .filter(|(_, c)| **c != 0.0)
                .map(|(i, c)| (i, *c))
        }
        self.configure(
            phi.len(),
            nonzero(phi).map(|(i, c)| (i, 0, c)),
            std::iter::once((0, 1.0)),
            nonzero(rvec),
        );
    }

    /// Size for a `dim`-dimensional state with transition corrections `e` (row, column,
    /// coefficient), observation `z` and noise loading `noise` (index, coefficient).
    pub(crate) fn configure(
        &mut self,
        dim: usize,
        e: impl Iterator<Item = (usize, usize, f64)>,
        z: impl Iterator<Item = (usize, f64)>,
        noise: impl Iterator<Item = (usize, f64)>,
    ) {
        self.dim = dim;
        self.s = dim + 1;
        ensure_len(&mut self.q, self.s * self.s);
        ensure_len(&mut self.zc, self.s);
        self.e_nz.clear();
        self.e_cols.clear();
        for (row, col, c) in e {
            let k = match self.e_cols.iter().position(|&b| b == col) {
                Some(k) => k,
                None => {
                    self.e_cols.push(col);
                    self.e_cols.len() - 1
                }
            };
            self.e_nz.push((row, k, c));
        }
        ensure_len(&mut self.saved, self.e_cols.len() * self.s);
        self.z_nz.clear();
        self.z_nz.extend(z);
        self.noise_nz.clear();
        self.noise_nz.extend(noise);
        self.noise_pairs.clear();
        for (k, &(i, a)) in self.noise_nz.iter().enumerate() {
            for &(j, b) in &self.noise_nz[k..] {
                self.noise_pairs.push((i, j, a * b));
            }
        }
        self.coordinate = self.z_nz == [(0, 1.0)] && self.e_cols.iter().all(|&b| b == 0);
        self.set = false;
    }

    /// Mark the buffer stale (a new pass begins).
    pub(crate) fn invalidate(&mut self) {
        self.set = false;
    }

    /// Whether the buffer holds this pass's covariance.
    pub(crate) fn is_set(&self) -> bool {
        self.set
    }

    /// Zero covariance.
    pub(crate) fn clear(&mut self) {
        self.off = 0;
        self.q.fill(0.0);
        self.set = true;
    }

    /// Load a symmetric row-major `dim×dim` covariance (its upper triangle is read).
    pub(crate) fn load(&mut self, p: &[f64]) {
        let (d, s) = (self.dim, self.s);
        self.off = 0;
        for i in 0..d {
            self.q[i * s + i..i * s + d].copy_from_slice(&p[i * d + i..(i + 1) * d]);
            self.q[i * s + d] = 0.0;
        }
        self.q[d * s + d] = 0.0;
        self.set = true;
    }

    /// Set the block at logical rows and columns `at..at + k` to the symmetric row-major
    /// `k×k` matrix `p` (after [`Self::clear`]).
    pub(crate) fn load_block(&mut self, p: &[f64], k: usize, at: usize) {
        for i in 0..k {
            for j in i..k {
                let cell = self.at(self.ph(at + i), self.ph(at + j));
                self.q[cell] = p[i * k + j];
            }
        }
    }

    /// The steady-state covariance `q qᵀ` (the noise loading's outer product).
    pub(crate) fn set_steady(&mut self) {
        self.clear();
        self.add_noise();
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

    /// Logical entry `(i, j)`.
    pub(crate) fn entry(&self, i: usize, j: usize) -> f64 {
        self.q[self.at(self.ph(i), self.ph(j))]
    }

    /// `F = Z P Zᵀ`.
    #[inline]
    pub(crate) fn f(&self) -> f64 {
        if self.coordinate {
            return self.q[self.off * self.s + self.off];
        }
        let mut f = 0.0;
        for &(a, wa) in &self.z_nz {
            for &(b, wb) in &self.z_nz {
                f += wa * wb * self.entry(a, b);
            }
        }
        f
    }

    /// `P Zᵀ` into the ring's own buffer (physical order): read it with
    /// [`Self::gain_entry`], use it with [`Self::update`].
    pub(crate) fn gain_column(&mut self) {
        let s = self.s;
        if self.coordinate {
            // Row 0: the column part above the diagonal, then the row part.
            let o = self.off;
            for p in 0..o {
                self.zc[p] = self.q[p * s + o];
            }
            self.zc[o..].copy_from_slice(&self.q[o * s + o..(o + 1) * s]);
            return;
        }
        self.zc.fill(0.0);
        for k in 0..self.z_nz.len() {
            let (a, w) = self.z_nz[k];
            let o = self.ph(a);
            for p in 0..o {
                self.zc[p] += w * self.q[p * s + o];
            }
            for (z, &v) in self.zc[o..].iter_mut().zip(&self.q[o * s + o..(o + 1) * s]) {
                *z += w * v;
            }
        }
    }

    /// Logical entry `i` of the last [`Self::gain_column`].
    #[inline]
    pub(crate) fn gain_entry(&self, i: usize) -> f64 {
        self.zc[self.ph(i)]
    }

    /// `k = P Zᵀ / f` in logical order (computes [`Self::gain_column`]).
    pub(crate) fn gain_into(&mut self, f: f64, k: &mut [f64]) {
        self.gain_column();
        let (d, s, o) = (self.dim, self.s, self.off);
        // Logical i ↦ physical o + i for i < s − o, then i − (s − o).
        let head = (s - o).min(d);
        let inv = 1.0 / f;
        for (ki, &v) in k[..head].iter_mut().zip(&self.zc[o..o + head]) {
            *ki = v * inv;
        }
        for (ki, &v) in k[head..d].iter_mut().zip(&self.zc[..d - head]) {
            *ki = v * inv;
        }
    }

    /// The measurement update `P ← P − (P Zᵀ)(Z P) / f` with the column of the last
    /// [`Self::gain_column`]; returns the trace of the updated covariance.
    pub(crate) fn update(&mut self, f: f64) -> f64 {
        let s = self.s;
        let inv = 1.0 / f;
        let mut trace = 0.0;
        for p in 0..s {
            let c = self.zc[p] * inv;
            let qrow = &mut self.q[p * s + p..(p + 1) * s];
            if c != 0.0 {
                for (x, &u) in qrow.iter_mut().zip(&self.zc[p..]) {
                    *x -= c * u;
                }
            }
            trace += qrow[0];
        }
        trace
    }

    /// The ARMA step after a reading with `f = P[0][0]`: update, then predict. Returns
    /// the trace of the updated covariance `P⁺` (zero once the state is known).
    pub(crate) fn step_present(&mut self, f: f64) -> f64 {
        self.gain_column();
        self.step_present_after_gain(f)
    }

    /// [`Self::step_present`] when [`Self::gain_column`] (or [`Self::gain_into`]) has
    /// run on the current covariance.
    pub(crate) fn step_present_after_gain(&mut self, f: f64) -> f64 {
        let trace = self.update(f);
        self.predict(true);
        trace
    }

    /// The step across a missing reading: `P ← (S + E) P (S + E)ᵀ + q qᵀ`.
    pub(crate) fn step_missing(&mut self) {
        self.predict(false);
    }

    /// `P ← (S + E) P (S + E)ᵀ + q qᵀ`; `updated`: right after [`Self::update`] (then the
    /// ARMA form skips the `E` terms, which read the zeroed row).
    pub(crate) fn predict(&mut self, updated: bool) {
        let skip_e = self.e_nz.is_empty() || (updated && self.coordinate);
        let with_e = !skip_e;
        if with_e {
            let s = self.s;
            for (k, &b) in self.e_cols.iter().enumerate() {
                let pb = self.ph(b);
                for x in 0..s {
                    self.saved[k * s + x] = self.q[self.at(self.ph(x), pb)];
                }
            }
        }
        self.shift();
        if with_e {
            self.add_transition_terms();
        }
        self.add_noise();
    }

    /// `S P Eᵀ + E P Sᵀ + E P Eᵀ` from the columns saved before the shift: row `i` of
    /// `S P` is row `i + 1` of `P`.
    fn add_transition_terms(&mut self) {
        let (d, s) = (self.dim, self.s);
        for &(j, kb, e) in &self.e_nz {
            let pj = self.ph(j);
            let col = &self.saved[kb * s..(kb + 1) * s];
            for i in 0..d {
                // e·P[i+1][b] at (i, j) and at (j, i): one kept entry, twice on the
                // diagonal.
                let v = e * col[i + 1];
                let pi = self.ph(i);
                let cell = self.at(pi, pj);
                self.q[cell] += if pi == pj { 2.0 * v } else { v };
            }
        }
        for &(i, ka, e1) in &self.e_nz {
            let pi = self.ph(i);
            let a = self.e_cols[ka];
            for &(j, kb, e2) in &self.e_nz {
                let pj = self.ph(j);
                if pi <= pj {
                    self.q[pi * s + pj] += e1 * e2 * self.saved[kb * s + a];
                }
            }
        }
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

    fn add_noise(&mut self) {
        for &(i, j, ab) in &self.noise_pairs {
            let cell = self.at(self.ph(i), self.ph(j));
            self.q[cell] += ab;
        }
    }
}

fn ensure_len(v: &mut Vec<f64>, len: usize) {
    if v.len() != len {
        v.resize(len, 0.0);
    }
}
