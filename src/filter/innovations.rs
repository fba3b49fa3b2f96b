//! The innovations recursion in direct form, `v_t = w_t − Σφ_iw_{t−i} − Σθ_jv_{t−j}`:
//! the conditional-sum-of-squares objective, and the exact filter once its gain has
//! converged (the two differ only in their starting values). Also the dot product the
//! regression cross-products are summed with.

/// Dense small shapes (non-zero lags exactly `1..=p` and `1..=q`, `p, q ≤ 3`) as arrays,
/// for the specialised kernels; `None` for any other shape.
fn dense_small(
    ar_nz: &[(usize, f64)],
    ma_nz: &[(usize, f64)],
) -> Option<(usize, usize, [f64; 3], [f64; 3])> {
    let dense = |nz: &[(usize, f64)]| nz.iter().enumerate().all(|(k, e)| e.0 == k + 1);
    if !(dense(ar_nz) && dense(ma_nz) && ar_nz.len() <= 3 && ma_nz.len() <= 3) {
        return None;
    }
    let mut phi = [0.0; 3];
    let mut theta = [0.0; 3];
    for (k, e) in ar_nz.iter().enumerate() {
        phi[k] = e.1;
    }
    for (k, e) in ma_nz.iter().enumerate() {
        theta[k] = e.1;
    }
    Some((ar_nz.len(), ma_nz.len(), phi, theta))
}

/// Call `$kernel::<P, Q>($args…)` for the runtime shape `($p, $q)`, `P, Q ≤ 3`.
macro_rules! dispatch_small {
    ($p:expr, $q:expr, $kernel:ident, $($arg:expr),*) => {
        match ($p, $q) {
            (0, 0) => $kernel::<0, 0>($($arg),*),
            (0, 1) => $kernel::<0, 1>($($arg),*),
            (0, 2) => $kernel::<0, 2>($($arg),*),
            (0, 3) => $kernel::<0, 3>($($arg),*),
            (1, 0) => $kernel::<1, 0>($($arg),*),
            (1, 1) => $kernel::<1, 1>($($arg),*),
            (1, 2) => $kernel::<1, 2>($($arg),*),
            (1, 3) => $kernel::<1, 3>($($arg),*),
            (2, 0) => $kernel::<2, 0>($($arg),*),
            (2, 1) => $kernel::<2, 1>($($arg),*),
            (2, 2) => $kernel::<2, 2>($($arg),*),
            (2, 3) => $kernel::<2, 3>($($arg),*),
            (3, 0) => $kernel::<3, 0>($($arg),*),
            (3, 1) => $kernel::<3, 1>($($arg),*),
            (3, 2) => $kernel::<3, 2>($($arg),*),
            _ => $kernel::<3, 3>($($arg),*),
        }
    };
}

/// `v_t = w_t − Σφ_i w_{t−i} − Σθ_j v_{t−j}` for `t` in `start..end` (all lags in range).
///
/// Dense small shapes (non-zero lags exactly `1..=p` and `1..=q`, `p, q ≤ 3`) run a
/// specialised kernel that keeps the MA history in registers so that only `θ₁v_{t−1}`
/// is on the loop-carried path; everything else walks the sparse coefficient lists.
#[inline]
pub(crate) fn direct_recursion(
    w: &[f64],
    v: &mut [f64],
    start: usize,
    end: usize,
    ar_nz: &[(usize, f64)],
    ma_nz: &[(usize, f64)],
) {
    if start >= end {
        return;
    }
    if let Some((p, q, phi, theta)) = dense_small(ar_nz, ma_nz) {
        dispatch_small!(p, q, dense_kernel, w, v, start, end, &phi, &theta);
        return;
    }
    for t in start..end {
        let mut pred = 0.0;
        for &(i, c) in ar_nz {
            pred += c * w[t - i];
        }
        let mut ma = 0.0;
        for &(j, c) in ma_nz {
            ma += c * v[t - j];
        }
        v[t] = (w[t] - pred) - ma;
    }
}

/// The dense kernel behind [`direct_recursion`]; requires `start ≥ max(P, Q)`.
#[inline(always)]
fn dense_kernel<const P: usize, const Q: usize>(
    w: &[f64],
    v: &mut [f64],
    start: usize,
    end: usize,
    phi: &[f64; 3],
    theta: &[f64; 3],
) {
    let mut hist = [0.0f64; 3];
    for j in 0..Q {
        hist[j] = v[start - 1 - j];
    }
    let w = &w[..end];
    let v = &mut v[..end];
    for t in start..end {
        let mut x = w[t];
        for i in 0..P {
            x -= phi[i] * w[t - 1 - i];
        }
        for j in 1..Q {
            x -= theta[j] * hist[j];
        }
        let e = if Q > 0 { x - theta[0] * hist[0] } else { x };
        if Q > 0 {
            for j in (1..Q).rev() {
                hist[j] = hist[j - 1];
            }
            hist[0] = e;
        }
        v[t] = e;
    }
}

/// Σ a_t b_t over `start..end`, four lanes.
#[inline]
pub(crate) fn segment_dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 4];
    let ca = a.chunks_exact(4);
    let cb = b.chunks_exact(4);
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in ca.zip(cb) {
        for k in 0..4 {
            acc[k] += x[k] * y[k];
        }
    }
    (acc[0] + acc[2]) + (acc[1] + acc[3]) + tail
}
