//! Small dense linear algebra in pure Rust (k ≤ a few dozen): Cholesky solves, symmetric
//! inverses and Householder least squares. Matrices are row-major `k×k` slices.

/// Solve `A x = b` for symmetric positive definite `A` (row-major `k×k`) by Cholesky,
/// in place: `a` is overwritten by its factor, `b` by the solution. Returns `false` if
/// `A` is not numerically positive definite. Allocation-free.
pub(crate) fn cholesky_solve(a: &mut [f64], b: &mut [f64], k: usize) -> bool {
    if !cholesky_factor(a, k) {
        return false;
    }
    cholesky_substitute(a, b, k);
    true
}

/// Solve `A x = b` for a general square `A` (row-major `k×k`) by LU with partial
/// pivoting, in place: `a` is overwritten by its factors, `b` by the solution. Returns
/// `false` if a pivot vanishes (numerically singular `A`). Allocation-free.
pub(crate) fn lu_solve(a: &mut [f64], b: &mut [f64], k: usize) -> bool {
    let scale = a.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let floor = scale * 1e-14;
    for col in 0..k {
        let mut best = col;
        for row in col + 1..k {
            if a[row * k + col].abs() > a[best * k + col].abs() {
                best = row;
            }
        }
        let pivot = a[best * k + col];
        if !(pivot.abs() > floor) || !pivot.is_finite() {
            return false;
        }
        if best != col {
            for j in 0..k {
                a.swap(best * k + j, col * k + j);
            }
            b.swap(best, col);
        }
        for row in col + 1..k {
            let f = a[row * k + col] / pivot;
            if f != 0.0 {
                for j in col + 1..k {
                    a[row * k + j] -= f * a[col * k + j];
                }
                b[row] -= f * b[col];
            }
            a[row * k + col] = 0.0;
        }
    }
    for i in (0..k).rev() {
        let mut s = b[i];
        for j in i + 1..k {
            s -= a[i * k + j] * b[j];
        }
        b[i] = s / a[i * k + i];
    }
    true
}

/// Solve `L Lᵀ x = b` in place given the lower factor `l` (row-major `k×k`).
fn cholesky_substitute(l: &[f64], b: &mut [f64], k: usize) {
    // Forward: L y = b
    for i in 0..k {
        let mut s = b[i];
        for j in 0..i {
            s -= l[i * k + j] * b[j];
        }
        b[i] = s / l[i * k + i];
    }
    // Backward: Lᵀ x = y
    for i in (0..k).rev() {
        let mut s = b[i];
        for j in i + 1..k {
            s -= l[j * k + i] * b[j];
        }
        b[i] = s / l[i * k + i];
    }
}

/// Lower Cholesky factor in place (upper triangle left untouched). `false` if not SPD.
pub(crate) fn cholesky_factor(a: &mut [f64], k: usize) -> bool {
    // Relative pivot floor: a pivot this small compared with the diagonal is treated as
    // singular (the design or Hessian is rank deficient to working precision).
    let max_diag = (0..k).map(|i| a[i * k + i].abs()).fold(0.0, f64::max);
    let floor = max_diag * 1e-14;
    for j in 0..k {
        let mut d = a[j * k + j];
        for m in 0..j {
            d -= a[j * k + m] * a[j * k + m];
        }
        if !(d > floor) || !d.is_finite() {
            return false;
        }
        let l = d.sqrt();
        a[j * k + j] = l;
        for i in j + 1..k {
            let mut s = a[i * k + j];
            for m in 0..j {
                s -= a[i * k + m] * a[j * k + m];
            }
            a[i * k + j] = s / l;
        }
    }
    true
}

/// Inverse of a symmetric positive definite matrix (row-major), or `None`.
pub(crate) fn invert_spd(a: &[f64], k: usize) -> Option<Vec<f64>> {
    let mut f = a.to_vec();
    if !cholesky_factor(&mut f, k) {
        return None;
    }
    let mut inv = vec![0.0; k * k];
    let mut col = vec![0.0; k];
    for c in 0..k {
        col.iter_mut().for_each(|v| *v = 0.0);
        col[c] = 1.0;
        cholesky_substitute(&f, &mut col, k);
        for i in 0..k {
            inv[i * k + c] = col[i];
        }
    }
    // Symmetrise against rounding.
    for i in 0..k {
        for j in 0..i {
            let m = 0.5 * (inv[i * k + j] + inv[j * k + i]);
            inv[i * k + j] = m;
            inv[j * k + i] = m;
        }
    }
    Some(inv)
}

/// Householder QR of the columns `a` (column-major, overwritten: `v` below the diagonal,
/// R above it, R's diagonal in `rdiag`), applying the reflections to `b` (→ Qᵀb). Stops
/// at the first column that is dependent on the earlier ones to working precision and
/// returns how many columns were reduced.
fn householder(a: &mut [Vec<f64>], b: &mut [f64], rdiag: &mut [f64]) -> usize {
    let k = a.len();
    for j in 0..k {
        let norm = a[j][j..].iter().map(|v| v * v).sum::<f64>().sqrt();
        if !(norm > 1e-13) {
            return j;
        }
        let alpha = if a[j][j] > 0.0 { -norm } else { norm };
        // v = x − alpha e1, stored in a[j][j..]
        a[j][j] -= alpha;
        let vnorm2 = a[j][j..].iter().map(|v| v * v).sum::<f64>();
        rdiag[j] = alpha;
        if vnorm2 == 0.0 {
            continue;
        }
        let (head, tail) = a.split_at_mut(j + 1);
        let v = &head[j][j..];
        for col in tail.iter_mut() {
            let dot: f64 = v.iter().zip(&col[j..]).map(|(p, q)| p * q).sum();
            let f = 2.0 * dot / vnorm2;
            for (c, vi) in col[j..].iter_mut().zip(v) {
                *c -= f * vi;
            }
        }
        let dot: f64 = v.iter().zip(&b[j..]).map(|(p, q)| p * q).sum();
        let f = 2.0 * dot / vnorm2;
        for (c, vi) in b[j..].iter_mut().zip(v) {
            *c -= f * vi;
        }
    }
    k
}

/// Residual sums of squares of the nested least-squares fits of `y` on the first
/// `1, 2, …` columns (one QR: with `Qᵀy = c`, the fit on `j` columns leaves `Σ_{i≥j} c_i²`).
/// Stops before the first column that is dependent on the earlier ones (scaled to unit
/// norm first, as in [`least_squares`]).
pub(crate) fn nested_residual_sums(columns: &[Vec<f64>], y: &[f64]) -> Vec<f64> {
    let n = y.len();
    if columns.iter().any(|c| c.len() != n) {
        return Vec::new();
    }
    let mut a: Vec<Vec<f64>> = columns
        .iter()
        .map(|c| {
            let s = c.iter().map(|v| v * v).sum::<f64>().sqrt();
            let s = if s > 0.0 { s } else { 1.0 };
            c.iter().map(|v| v / s).collect()
        })
        .collect();
    let k = a.len().min(n);
    a.truncate(k);
    let mut b = y.to_vec();
    let mut rdiag = vec![0.0; k];
    let done = householder(&mut a, &mut b, &mut rdiag);
    // tail[j] = Σ_{i≥j} b_i²
    let mut tail = vec![0.0; done + 1];
    tail[done] = b[done..].iter().map(|v| v * v).sum();
    for j in (0..done).rev() {
        tail[j] = tail[j + 1] + b[j] * b[j];
    }
    tail[1..].to_vec()
}

/// Least squares `min ‖y − Xβ‖` by Householder QR with column scaling.
/// `x` is column-major (`columns[j]` has `n` rows). Returns `(β, R⁻¹R⁻ᵀ)` — the
/// coefficients and the unscaled covariance factor `(XᵀX)⁻¹` — or `None` if `X` is
/// rank deficient to working precision.
pub(crate) fn least_squares(columns: &[Vec<f64>], y: &[f64]) -> Option<(Vec<f64>, Vec<f64>)> {
    least_squares_owned(columns.to_vec(), y.to_vec())
}

/// [`least_squares`] on columns and a target the caller hands over (they are overwritten
/// by the factorisation): no copy of the data, bitwise the same result.
pub(crate) fn least_squares_owned(
    mut a: Vec<Vec<f64>>,
    mut b: Vec<f64>,
) -> Option<(Vec<f64>, Vec<f64>)> {
    let k = a.len();
    let n = b.len();
    if k == 0 || n < k || a.iter().any(|c| c.len() != n) {
        return None;
    }
    // Scale columns to unit norm (improves conditioning of the reported covariance).
    let scales: Vec<f64> = a
        .iter()
        .map(|c| {
            let s = c.iter().map(|v| v * v).sum::<f64>().sqrt();
            if s > 0.0 { s } else { 1.0 }
        })
        .collect();
    for (c, s) in a.iter_mut().zip(&scales) {
        c.iter_mut().for_each(|v| *v /= s);
    }
    let mut rdiag = vec![0.0; k];
    if householder(&mut a, &mut b, &mut rdiag) < k {
        return None;
    }
    // R: diagonal rdiag, above-diagonal a[col][row] for row < col.
    let r = |i: usize, j: usize| if i == j { rdiag[i] } else { a[j][i] };
    let mut beta = vec![0.0; k];
    for i in (0..k).rev() {
        let mut s = b[i];
        for j in i + 1..k {
            s -= r(i, j) * beta[j];
        }
        beta[i] = s / r(i, i);
    }
    // (RᵀR)⁻¹ = R⁻¹R⁻ᵀ; R⁻¹ by back substitution.
    let mut rinv = vec![0.0; k * k];
    for c in 0..k {
        for i in (0..=c).rev() {
            let mut s = if i == c { 1.0 } else { 0.0 };
            for j in i + 1..=c {
                s -= r(i, j) * rinv[j * k + c];
            }
            rinv[i * k + c] = s / r(i, i);
        }
    }
    let mut cov = vec![0.0; k * k];
    for i in 0..k {
        for j in 0..k {
            let s: f64 = (i.max(j)..k)
                .map(|m| rinv[i * k + m] * rinv[j * k + m])
                .sum();
            cov[i * k + j] = s / (scales[i] * scales[j]);
        }
    }
    for (bi, s) in beta.iter_mut().zip(&scales) {
        *bi /= s;
    }
    Some((beta, cov))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A system whose first pivot is zero (needs a row swap): x = (1, 2, 3) by hand.
    #[test]
    fn lu_solves_with_pivoting() {
        let mut a = [0.0, 2.0, 1.0, 1.0, 1.0, 1.0, 2.0, -1.0, 4.0];
        let mut b = [7.0, 6.0, 12.0];
        assert!(lu_solve(&mut a, &mut b, 3));
        for (x, want) in b.iter().zip([1.0, 2.0, 3.0]) {
            assert!((x - want).abs() < 1e-12, "{x}");
        }
        let mut singular = [1.0, 2.0, 2.0, 4.0];
        assert!(!lu_solve(&mut singular, &mut [1.0, 2.0], 2));
    }

    #[test]
    fn cholesky_and_inverse() {
        let a = [4.0, 2.0, 0.6, 2.0, 5.0, 1.0, 0.6, 1.0, 3.0];
        let inv = invert_spd(&a, 3).unwrap();
        for i in 0..3 {
            for j in 0..3 {
                let s: f64 = (0..3).map(|m| a[i * 3 + m] * inv[m * 3 + j]).sum();
                assert!((s - if i == j { 1.0 } else { 0.0 }).abs() < 1e-14);
            }
        }
        let mut f = a;
        let mut b = [1.0, 2.0, 3.0];
        assert!(cholesky_solve(&mut f, &mut b, 3));
        for i in 0..3 {
            let s: f64 = (0..3).map(|m| a[i * 3 + m] * b[m]).sum();
            assert!((s - [1.0, 2.0, 3.0][i]).abs() < 1e-14);
        }
        assert!(invert_spd(&[1.0, 1.0, 1.0, 1.0], 2).is_none());
    }

    #[test]
    fn least_squares_exact_fit() {
        let x0 = vec![1.0; 5];
        let x1: Vec<f64> = (0..5).map(|i| i as f64).collect();
        let y: Vec<f64> = x1.iter().map(|t| 2.0 - 0.5 * t).collect();
        let (b, cov) = least_squares(&[x0, x1], &y).unwrap();
        assert!((b[0] - 2.0).abs() < 1e-14 && (b[1] + 0.5).abs() < 1e-14);
        // (XᵀX)⁻¹ for x = 0..4 with intercept: [[0.6, -0.2], [-0.2, 0.1]]
        assert!(
            (cov[0] - 0.6).abs() < 1e-14
                && (cov[1] + 0.2).abs() < 1e-14
                && (cov[3] - 0.1).abs() < 1e-14
        );
        assert!(least_squares(&[vec![1.0; 3], vec![2.0; 3]], &[1.0, 2.0, 3.0]).is_none());
    }

    #[test]
    fn nested_sums_match_separate_fits() {
        let n = 60;
        let cols: Vec<Vec<f64>> = (0..5)
            .map(|j| {
                (0..n)
                    .map(|t| ((t * (j + 3) * 7919) % 101) as f64 / 50.0 - 1.0)
                    .collect()
            })
            .collect();
        let y: Vec<f64> = (0..n).map(|t| ((t * 104729) % 97) as f64 / 40.0).collect();
        let nested = nested_residual_sums(&cols, &y);
        assert_eq!(nested.len(), 5);
        for j in 1..=5 {
            let (b, _) = least_squares(&cols[..j], &y).unwrap();
            let ssr: f64 = (0..n)
                .map(|i| {
                    let fit: f64 = (0..j).map(|c| b[c] * cols[c][i]).sum();
                    (y[i] - fit).powi(2)
                })
                .sum();
            assert!(
                (nested[j - 1] - ssr).abs() < 1e-10 * ssr,
                "{j}: {} vs {ssr}",
                nested[j - 1]
            );
        }
        // A dependent column ends the list.
        let mut dep = cols.clone();
        dep[2] = dep[0].iter().map(|v| 2.0 * v).collect();
        assert_eq!(nested_residual_sums(&dep, &y).len(), 2);
    }
}
