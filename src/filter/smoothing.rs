//! The fixed-interval smoother: each missing reading's mean and variance given every
//! present reading, on the original scale (through differencing), for a given model.
//!
//! The forward pass is the forecasting filter on the augmented state (ARMA block and the
//! δ lags of the differencing), started where δ consecutive readings are present; it
//! keeps, per reading, the prediction, its variance factor `F_t` and the row `Z P_t`.
//! The backward pass is de Jong's (1989) smoother in the form of Durbin & Koopman (2012,
//! §4.4–4.5): `r_{t−1} = Zᵀv_t/F_t + L_tᵀ r_t`, `N_{t−1} = ZᵀZ/F_t + L_tᵀ N_t L_t` at a
//! present reading and `r_{t−1} = Tᵀr_t`, `N_{t−1} = TᵀN_tT` at a missing one, with
//! `L_t = T − K_t Z`; a missing reading's smoothed value is `Z a_t + Z P_t r_{t−1}` and
//! its variance `Z P_t Zᵀ − Z P_t N_{t−1} P_t Zᵀ`. `TᵀNT` uses the transition's companion
//! structure, so a step costs O(m²) for a state of m = r + δ.
//!
//! The initial values of an integrated model have a diffuse prior (Kohn & Ansley 1986):
//! a pass started at the first run of δ present readings conditions on every reading
//! when no reading before that run is present. When the run is not at the start, the
//! pass runs on the time-reversed series (a Gaussian ARMA and its differencing are the
//! same model read backwards), which is exact when no reading after its own start run is
//! present; readings that neither pass covers exactly are reported, not guessed.

use crate::base::error::{Error, Result};
use crate::filter::forecasting::{FilterState, ForecastModel, z_times_into};

/// One missing reading, smoothed (variance in units of σ²; the regression part not
/// added).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct SmoothedGap {
    pub index: usize,
    pub mean: f64,
    pub variance: f64,
}

/// What the smoother found.
#[derive(Debug, Clone, PartialEq, Default)]
pub(crate) struct Smoothing {
    /// Smoothed missing readings, in time order.
    pub gaps: Vec<SmoothedGap>,
    /// Missing readings the smoother could not fill exactly (in time order).
    pub unfilled: Vec<usize>,
    /// Present readings that were not conditioned on (none in the exact cases).
    pub unused_present: usize,
}

/// First `t0 ≥ δ` with the δ readings before it present.
fn start_run(z: &[f64], delta: usize) -> Option<usize> {
    let mut run = 0;
    for t in 0..=z.len() {
        if run >= delta {
            return Some(t);
        }
        if t < z.len() && !z[t].is_nan() {
            run += 1;
        } else {
            run = 0;
        }
    }
    None
}

/// Smooth every missing reading of `z` (the series with its regression part removed,
/// NaN where missing).
pub(crate) fn smooth_gaps(m: &ForecastModel, z: &[f64]) -> Result<Smoothing> {
    let n = z.len();
    let delta = m.c.len();
    let missing: Vec<usize> = (0..n).filter(|&t| z[t].is_nan()).collect();
    if missing.is_empty() {
        return Ok(Smoothing::default());
    }
    let Some(fwd) = start_run(z, delta) else {
        return Err(Error::numerical(
            "gap filling",
            format!("no {delta} consecutive readings to start the integrated filter from"),
        ));
    };
    let forward_exact = z[..fwd - delta].iter().all(|v| v.is_nan());
    let reversed: Vec<f64> = z.iter().rev().copied().collect();
    let rev = start_run(&reversed, delta).expect("a forward start run is also a backward one");
    let backward_exact = reversed[..rev - delta].iter().all(|v| v.is_nan());
    // Readings covered: forward pass t ≥ fwd; backward pass t ≤ n − 1 − rev.
    let mut out = Smoothing::default();
    let mut filled = vec![None; n];
    if forward_exact {
        for g in pass(m, z, fwd)? {
            filled[g.index] = Some(g);
        }
    }
    let need_backward = missing.iter().any(|&t| filled[t].is_none());
    if need_backward && backward_exact {
        for g in pass(m, &reversed, rev)? {
            let t = n - 1 - g.index;
            if filled[t].is_none() {
                filled[t] = Some(SmoothedGap { index: t, ..g });
            }
        }
    }
    if !forward_exact && !backward_exact {
        // Neither pass sees every reading: the forward one, conditioning on the readings
        // from its start run on; the earlier present readings are counted as unused.
        out.unused_present = z[..fwd - delta].iter().filter(|v| !v.is_nan()).count();
        for g in pass(m, z, fwd)? {
            filled[g.index] = Some(g);
        }
    }
    for &t in &missing {
        match filled[t] {
            Some(g) => out.gaps.push(g),
            None => out.unfilled.push(t),
        }
    }
    Ok(out)
}

/// `y = T x` for the augmented transition.
fn transition(m: &ForecastModel, x: &[f64], y: &mut [f64]) {
    let r = m.r;
    let dim = x.len();
    let x0 = x[0];
    for j in 0..r - 1 {
        y[j] = m.phi[j] * x0 + x[j + 1];
    }
    y[r - 1] = m.phi[r - 1] * x0;
    if dim > r {
        y[r] = x0 + m.c.iter().zip(&x[r..]).map(|(c, v)| c * v).sum::<f64>();
        y[r + 1..dim].copy_from_slice(&x[r..dim - 1]);
    }
}

/// `y = Tᵀ x` for the augmented transition.
fn transition_transposed(m: &ForecastModel, x: &[f64], y: &mut [f64]) {
    let r = m.r;
    let dim = x.len();
    let mut y0 = m.phi.iter().zip(&x[..r]).map(|(p, v)| p * v).sum::<f64>();
    if dim > r {
        y0 += x[r];
    }
    y[1..r].copy_from_slice(&x[..r - 1]);
    y[0] = y0;
    for (k, &c) in m.c.iter().enumerate() {
        let i = r + k;
        y[i] = c * x[r] + if i + 1 < dim { x[i + 1] } else { 0.0 };
    }
}

/// `N ← Tᵀ N T` for symmetric N (row-major), using `h` as workspace.
fn sandwich(m: &ForecastModel, nm: &mut [f64], h: &mut [f64], dim: usize) {
    // H = N T: row i of H is Tᵀ applied to row i of N.
    for (row, out) in nm.chunks_exact(dim).zip(h.chunks_exact_mut(dim)) {
        transition_transposed(m, row, out);
    }
    // G = Tᵀ H: column j of G is Tᵀ applied to column j of H; G is symmetric, so its
    // row j is that column. Transpose H into N, then apply Tᵀ to each row.
    for i in 0..dim {
        for j in 0..dim {
            nm[j * dim + i] = h[i * dim + j];
        }
    }
    for (row, out) in nm.chunks_exact(dim).zip(h.chunks_exact_mut(dim)) {
        transition_transposed(m, row, out);
    }
    nm.copy_from_slice(h);
}

/// One forward filter from `t0` and the backward smoother over `z`: the missing readings
/// from `t0` on, smoothed.
fn pass(m: &ForecastModel, z: &[f64], t0: usize) -> Result<Vec<SmoothedGap>> {
    let delta = m.c.len();
    let r = m.r;
    let dim = m.dim();
    let n = z.len();
    let steps = n - t0;
    let lags: Vec<f64> = (1..=delta).map(|k| z[t0 - k]).collect();
    let mut st = FilterState::start(m, &lags, t0 as u64)?;
    let mut zc_all = vec![0.0; steps * dim];
    let mut pred = vec![0.0; steps];
    let mut fvar = vec![0.0; steps];
    let mut innov = vec![f64::NAN; steps];
    let mut zc_now = Vec::with_capacity(dim);
    for (k, t) in (t0..n).enumerate() {
        let (p, f) = st.predict(m);
        let zc = &mut zc_all[k * dim..(k + 1) * dim];
        if st.steady() {
            zc.fill(0.0);
            zc[..r].copy_from_slice(&m.rvec);
        } else {
            z_times_into(m, &st.cov, &mut zc_now);
            zc.copy_from_slice(&zc_now);
        }
        pred[k] = p;
        fvar[k] = f;
        if let Some((v, _)) = st.step(m, z[t]) {
            innov[k] = v;
        }
    }
    let mut zrow = vec![0.0; dim];
    zrow[0] = 1.0;
    zrow[r..].copy_from_slice(&m.c);
    let mut rv = vec![0.0; dim];
    let mut nm = vec![0.0; dim * dim];
    let mut h = vec![0.0; dim * dim];
    let mut g = vec![0.0; dim];
    let mut kvec = vec![0.0; dim];
    let mut u = vec![0.0; dim];
    let mut p = vec![0.0; dim];
    let mut out = Vec::new();
    for k in (0..steps).rev() {
        let zc = &zc_all[k * dim..(k + 1) * dim];
        let v = innov[k];
        if v.is_nan() {
            sandwich(m, &mut nm, &mut h, dim);
            transition_transposed(m, &rv, &mut g);
            rv.copy_from_slice(&g);
            let mean = pred[k] + dot(zc, &rv);
            let variance = fvar[k] - quadratic(zc, &nm, dim);
            out.push(SmoothedGap {
                index: t0 + k,
                mean,
                variance: variance.max(0.0),
            });
            continue;
        }
        let f = fvar[k];
        // K = T P Zᵀ / F; u = N K; q = Kᵀ N K; p = Tᵀ u; Kᵀ r.
        transition(m, zc, &mut kvec);
        for kv in kvec.iter_mut() {
            *kv /= f;
        }
        for (i, ui) in u.iter_mut().enumerate() {
            *ui = dot(&nm[i * dim..(i + 1) * dim], &kvec);
        }
        let q = dot(&kvec, &u);
        transition_transposed(m, &u, &mut p);
        let kr = dot(&kvec, &rv);
        sandwich(m, &mut nm, &mut h, dim);
        // N ← TᵀNT − p Z − Zᵀ pᵀ + (q + 1/F) ZᵀZ.
        let w = q + 1.0 / f;
        for i in 0..dim {
            let row = &mut nm[i * dim..(i + 1) * dim];
            let (pi, zi) = (p[i], zrow[i]);
            for j in 0..dim {
                row[j] += -pi * zrow[j] - zi * p[j] + w * zi * zrow[j];
            }
        }
        transition_transposed(m, &rv, &mut g);
        let scale = v / f - kr;
        for i in 0..dim {
            rv[i] = g[i] + zrow[i] * scale;
        }
    }
    out.reverse();
    Ok(out)
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn quadratic(x: &[f64], m: &[f64], dim: usize) -> f64 {
    (0..dim)
        .map(|i| x[i] * dot(&m[i * dim..(i + 1) * dim], x))
        .sum()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn model(phi: &[f64], theta: &[f64], c: &[f64]) -> ForecastModel {
        let r = phi.len().max(theta.len() + 1);
        let mut p = vec![0.0; r];
        p[..phi.len()].copy_from_slice(phi);
        let mut rvec = vec![0.0; r];
        rvec[0] = 1.0;
        rvec[1..=theta.len()].copy_from_slice(theta);
        ForecastModel {
            r,
            phi: p,
            rvec,
            c: c.to_vec(),
            sigma2: 1.0,
            regression: Vec::new(),
        }
    }

    /// Tᵀ is the transpose of T: ⟨T x, y⟩ = ⟨x, Tᵀ y⟩ for random vectors.
    #[test]
    fn transposed_transition_is_the_adjoint() {
        let m = model(&[0.5, -0.2], &[0.3, 0.1, 0.05], &[1.0, 0.0, 1.0, -1.0]);
        let dim = m.dim();
        let x: Vec<f64> = (0..dim).map(|i| (i as f64 * 0.7).sin()).collect();
        let y: Vec<f64> = (0..dim).map(|i| (i as f64 * 1.3).cos()).collect();
        let (mut tx, mut ty) = (vec![0.0; dim], vec![0.0; dim]);
        transition(&m, &x, &mut tx);
        transition_transposed(&m, &y, &mut ty);
        assert!((dot(&tx, &y) - dot(&x, &ty)).abs() < 1e-14);
    }

    /// No missing reading: nothing to smooth; all missing: a typed error.
    #[test]
    fn edge_cases() {
        let m = model(&[0.5], &[], &[1.0]);
        assert!(smooth_gaps(&m, &[1.0, 2.0, 3.0]).unwrap().gaps.is_empty());
        assert!(smooth_gaps(&m, &[f64::NAN, f64::NAN]).is_err());
    }
}
