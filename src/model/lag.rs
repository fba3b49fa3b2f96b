//! Lag polynomials: products, ψ- and π-weights, inverse roots, admissibility checks and
//! the partial-autocorrelation reparameterisation.

use crate::base::error::{Error, Result};

/// Expand `(1 ∓ Σa_iB^i)(1 ∓ Σb_jB^{js})` into `out` as a coefficient list in the sign
/// convention of the factor kind (`is_ma`: `1 + Σθ_jB^j`; otherwise `1 − Σφ_iB^i`);
/// allocation-free once `out` has capacity. The one seasonal expansion of the crate.
pub(crate) fn expand_into(a: &[f64], b: &[f64], period: usize, is_ma: bool, out: &mut Vec<f64>) {
    let period = period.max(1);
    let len = a.len() + b.len() * period;
    out.clear();
    out.resize(len, 0.0);
    for (i, &ai) in a.iter().enumerate() {
        out[i] += ai;
    }
    for (j, &bj) in b.iter().enumerate() {
        let lag = (j + 1) * period;
        out[lag - 1] += bj;
        for (i, &ai) in a.iter().enumerate() {
            // AR: −(−a)(−b) = −ab in "1 − Σc" form; MA: +ab.
            out[lag + i] += if is_ma { ai * bj } else { -ai * bj };
        }
    }
}

/// The non-zero coefficients of `[c₁, c₂, …]` as `(lag, c)` pairs in lag order (seasonal
/// polynomials are mostly zeros; the recursions run over these pairs only).
pub(crate) fn nonzero_lags(coefs: &[f64], out: &mut Vec<(usize, f64)>) {
    out.clear();
    out.extend(
        coefs
            .iter()
            .enumerate()
            .filter(|(_, v)| **v != 0.0)
            .map(|(i, v)| (i + 1, *v)),
    );
}

/// Product of two polynomials given as full coefficient vectors (lowest power first).
///
/// ```
/// // (1 − 0.5B)(1 − 0.8B¹²) = 1 − 0.5B − 0.8B¹² + 0.4B¹³
/// let p = lagwise::multiply(&[1.0, -0.5], &[1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, -0.8]);
/// assert_eq!(p.len(), 14);
/// assert!((p[13] - 0.4).abs() < 1e-15 && p[12] == -0.8 && p[1] == -0.5);
/// ```
pub fn multiply(a: &[f64], b: &[f64]) -> Vec<f64> {
    if a.is_empty() || b.is_empty() {
        return Vec::new();
    }
    let mut out = vec![0.0; a.len() + b.len() - 1];
    for (i, &x) in a.iter().enumerate() {
        if x == 0.0 {
            continue;
        }
        for (j, &y) in b.iter().enumerate() {
            out[i + j] += x * y;
        }
    }
    out
}

/// AR coefficients `[φ₁…]` of the product `φ(B)Φ(B^s)`, in the `1 − Σφ_iB^i` convention.
pub fn expand_autoregressive(nonseasonal: &[f64], seasonal: &[f64], period: usize) -> Vec<f64> {
    let mut out = Vec::new();
    expand_into(nonseasonal, seasonal, period, false, &mut out);
    out
}

/// MA coefficients `[θ₁…]` of the product `θ(B)Θ(B^s)`, in the `1 + Σθ_iB^i` convention.
pub fn expand_moving_average(nonseasonal: &[f64], seasonal: &[f64], period: usize) -> Vec<f64> {
    let mut out = Vec::new();
    expand_into(nonseasonal, seasonal, period, true, &mut out);
    out
}

/// Step-down recursion: partial autocorrelations `κ₁…κ_p` of the AR factor with
/// coefficients `phi` (`1 − Σφ_iB^i`). Returns `None` as soon as some `|κ_k| ≥ 1`
/// (the factor is not stationary) or the coefficients are not finite.
pub fn step_down(phi: &[f64]) -> Option<Vec<f64>> {
    let mut a = phi.to_vec();
    let mut b = vec![0.0; phi.len()];
    step_down_in_place(&mut a, &mut b).then_some(a)
}

/// The step-down recursion, allocation-free and the one copy of it in the crate: on entry
/// `a` holds `[φ₁…φ_p]` of `1 − Σφ_iB^i`; on success it holds the partial
/// autocorrelations `[κ₁…κ_p]` (step k reads κ_k = a[k−1] and rewrites only a[..k−1]).
/// `b` is scratch of at least `p − 1` entries. `false` if an entry is not finite or a
/// partial autocorrelation is not strictly inside (−1, 1) (then `a` holds no meaning).
pub(crate) fn step_down_in_place(a: &mut [f64], b: &mut [f64]) -> bool {
    if a.iter().any(|v| !v.is_finite()) {
        return false;
    }
    for k in (1..=a.len()).rev() {
        let kk = a[k - 1];
        if !(kk.abs() < 1.0) {
            return false;
        }
        let denom = 1.0 - kk * kk;
        for j in 1..k {
            b[j - 1] = (a[j - 1] + kk * a[k - j - 1]) / denom;
        }
        a[..k - 1].copy_from_slice(&b[..k - 1]);
    }
    true
}

/// Forward Durbin–Levinson from partial autocorrelations `κ₁…κ_p` to the autocorrelations
/// `ρ(0..=p)` of the AR process they define, written into `rho` (at least `p + 1`
/// entries); `a` and `b` are scratch of at least `p` entries. Returns `Π(1 − κ_k²)`, the
/// innovation variance of a unit-variance process (so `γ(0) = 1/` it for unit
/// innovations). Allocation-free.
pub(crate) fn autocorrelations_from_partials(
    kappa: &[f64],
    rho: &mut [f64],
    a: &mut [f64],
    b: &mut [f64],
) -> f64 {
    let mut v = 1.0;
    rho[0] = 1.0;
    for k in 1..=kappa.len() {
        let kk = kappa[k - 1];
        let mut r = kk * v;
        for j in 1..k {
            r += a[j - 1] * rho[k - j];
        }
        rho[k] = r;
        for j in 1..k {
            b[j - 1] = a[j - 1] - kk * a[k - j - 1];
        }
        b[k - 1] = kk;
        a[..k].copy_from_slice(&b[..k]);
        v *= 1.0 - kk * kk;
    }
    v
}

/// Whether `1 − Σφ_iB^i` has all roots outside the unit circle.
pub fn is_stationary(phi: &[f64]) -> bool {
    step_down(phi).is_some()
}

/// Whether `1 + Σθ_iB^i` has all roots outside the unit circle.
pub fn is_invertible(theta: &[f64]) -> bool {
    let mut a: Vec<f64> = theta.iter().map(|t| -t).collect();
    let mut b = vec![0.0; theta.len()];
    step_down_in_place(&mut a, &mut b)
}

/// Durbin–Levinson forward map from partial autocorrelations `κ` (each in (−1, 1)) to AR
/// coefficients `φ`, written into `out` (same length). Allocation-free.
pub(crate) fn coefficients_from_partials(kappa: &[f64], out: &mut [f64], tmp: &mut [f64]) {
    let p = kappa.len();
    for k in 0..p {
        let kk = kappa[k];
        tmp[..k].copy_from_slice(&out[..k]);
        for j in 0..k {
            out[j] = tmp[j] - kk * tmp[k - 1 - j];
        }
        out[k] = kk;
    }
}

/// Largest partial autocorrelation the optimiser's reparameterisation can produce.
pub(crate) const KAPPA_LIMIT: f64 = 1.0 - 1e-7;

/// Map unconstrained reals to the coefficients of an admissible AR factor
/// (`κ = (1 − 1e-7)·tanh u`).
/// `kappa` and `tmp` are scratch of the same length as `u`. Allocation-free.
pub(crate) fn admissible_from_unconstrained(
    u: &[f64],
    out: &mut [f64],
    kappa: &mut [f64],
    tmp: &mut [f64],
) {
    // |κ| ≤ 1 − 1e-7: the optimiser can approach a unit root to within 1e-7 in partial
    // autocorrelation but never reach the boundary, where products of seasonal factors
    // lose admissibility to rounding.
    for (k, &v) in kappa.iter_mut().zip(u) {
        *k = KAPPA_LIMIT * v.tanh();
    }
    coefficients_from_partials(kappa, out, tmp);
}

/// Inverse of [`admissible_from_unconstrained`]: `u = atanh κ`. `None` if not admissible.
pub(crate) fn unconstrained_from_admissible(phi: &[f64]) -> Option<Vec<f64>> {
    step_down(phi).map(|k| {
        k.iter()
            .map(|v| (v / KAPPA_LIMIT).clamp(-0.999_999, 0.999_999).atanh())
            .collect()
    })
}

/// Move an AR coefficient set strictly inside the admissible region: if it is not
/// admissible, shrink its partial autocorrelations to at most `limit` in modulus.
/// Used for starting values.
pub(crate) fn pull_inside(phi: &[f64], limit: f64) -> Vec<f64> {
    if let Some(k) = step_down(phi)
        && k.iter().all(|v| v.abs() <= limit)
    {
        return phi.to_vec();
    }
    // Shrink geometrically: φ_i λ^i scales every root outwards by 1/λ.
    let mut lambda: f64 = 0.95;
    for _ in 0..200 {
        let trial: Vec<f64> = phi
            .iter()
            .enumerate()
            .map(|(i, v)| v * lambda.powi(i as i32 + 1))
            .collect();
        if let Some(k) = step_down(&trial)
            && k.iter().all(|v| v.abs() <= limit)
        {
            return trial;
        }
        lambda *= 0.95;
    }
    vec![0.0; phi.len()]
}

/// ψ-weights `ψ₀…ψ_{count−1}` of `θ(B)/φ(B)` (the MA(∞) representation).
///
/// ```
/// // AR(1), φ = 0.5: ψ_j = 0.5^j
/// let psi = lagwise::psi_weights(&[0.5], &[], 4);
/// assert_eq!(psi, vec![1.0, 0.5, 0.25, 0.125]);
/// ```
pub fn psi_weights(phi: &[f64], theta: &[f64], count: usize) -> Vec<f64> {
    let mut ar = Vec::new();
    nonzero_lags(phi, &mut ar);
    let mut psi = vec![0.0; count];
    psi_weights_into(&ar, theta, &mut psi);
    psi
}

/// ψ-weights `ψ_0..ψ_{len−1}` into `psi`, over the non-zero AR terms `ar` (from
/// [`nonzero_lags`]); allocation-free, the one ψ recursion of the crate.
pub(crate) fn psi_weights_into(ar: &[(usize, f64)], theta: &[f64], psi: &mut [f64]) {
    for j in 0..psi.len() {
        let mut v = if j == 0 {
            1.0
        } else {
            theta.get(j - 1).copied().unwrap_or(0.0)
        };
        for &(i, c) in ar {
            if i > j {
                break;
            }
            v += c * psi[j - i];
        }
        psi[j] = v;
    }
}

/// π-weights `π₀…π_{count−1}` of `φ(B)/θ(B)` (the AR(∞) representation), so that
/// `e_t = Σ π_j (x_{t−j} − μ)`.
///
/// ```
/// // MA(1), θ = 0.5: π_j = (−0.5)^j
/// let pi = lagwise::pi_weights(&[], &[0.5], 4);
/// assert_eq!(pi, vec![1.0, -0.5, 0.25, -0.125]);
/// ```
pub fn pi_weights(phi: &[f64], theta: &[f64], count: usize) -> Vec<f64> {
    let mut pi = vec![0.0; count];
    for j in 0..count {
        let mut v = if j == 0 {
            1.0
        } else {
            -phi.get(j - 1).copied().unwrap_or(0.0)
        };
        for (i, &t) in theta.iter().enumerate() {
            if i + 1 > j {
                break;
            }
            v -= t * pi[j - i - 1];
        }
        pi[j] = v;
    }
    pi
}

/// A complex number, as used for reporting inverse roots.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Complex {
    /// Real part.
    pub re: f64,
    /// Imaginary part.
    pub im: f64,
}

impl Complex {
    /// Modulus `|z|`.
    pub fn modulus(self) -> f64 {
        self.re.hypot(self.im)
    }
    fn mul(self, o: Complex) -> Complex {
        Complex {
            re: self.re * o.re - self.im * o.im,
            im: self.re * o.im + self.im * o.re,
        }
    }
    fn add(self, o: Complex) -> Complex {
        Complex {
            re: self.re + o.re,
            im: self.im + o.im,
        }
    }
    fn sub(self, o: Complex) -> Complex {
        Complex {
            re: self.re - o.re,
            im: self.im - o.im,
        }
    }
    fn div(self, o: Complex) -> Complex {
        let d = o.re * o.re + o.im * o.im;
        Complex {
            re: (self.re * o.re + self.im * o.im) / d,
            im: (self.im * o.re - self.re * o.im) / d,
        }
    }
}

/// Inverse roots of the lag polynomial `1 + c₁B + … + c_kB^k` (pass `c₁…c_k`), i.e. the
/// roots of `z^k + c₁z^{k−1} + … + c_k`, by the Aberth–Ehrlich iteration. For an AR factor
/// pass `−φ`; for an MA factor pass `θ`. Sorted by decreasing modulus.
///
/// ```
/// // 1 − 0.5B has the inverse root 0.5.
/// let r = lagwise::inverse_roots(&[-0.5]).unwrap();
/// assert!((r[0].re - 0.5).abs() < 1e-12 && r[0].im.abs() < 1e-12);
/// ```
///
/// # Conventions
/// An autoregressive factor is `φ(B) = 1 − φ₁B − … − φ_pB^p` and a moving-average factor
/// is `θ(B) = 1 + θ₁B + … + θ_qB^q`; the model is `φ(B)(x_t − μ) = θ(B)e_t`. Functions
/// here take the coefficient lists `[φ₁…φ_p]` / `[θ₁…θ_q]` in those conventions.
///
/// A factor is *admissible* (stationary for AR, invertible for MA) when every root of the
/// polynomial lies strictly outside the unit circle; equivalently every *inverse* root has
/// modulus below one. The check used here is the step-down (reverse Durbin–Levinson,
/// Schur–Cohn) recursion: the coefficients map one-to-one to partial autocorrelations
/// `κ₁…κ_p`, and the factor is admissible exactly when every `|κ_k| < 1`.
///
/// The optimisers work on unconstrained reals `u_k`, mapped to `κ_k = tanh(u_k)` and then
/// to coefficients by the Durbin–Levinson recursion (Barndorff-Nielsen & Schou 1973;
/// Jones 1980; Monahan 1984), so every trial point is an admissible model.
pub fn inverse_roots(c: &[f64]) -> Result<Vec<Complex>> {
    // Trim trailing zeros: they are roots at zero of the reversed polynomial.
    let mut k = c.len();
    while k > 0 && c[k - 1] == 0.0 {
        k -= 1;
    }
    let zeros = c.len() - k;
    let c = &c[..k];
    if c.iter().any(|v| !v.is_finite()) {
        return Err(Error::invalid(
            "inverse roots",
            "coefficients must be finite",
        ));
    }
    let mut roots: Vec<Complex> = Vec::with_capacity(c.len() + zeros);
    if k > 0 {
        // Monic polynomial z^k + c1 z^{k-1} + ... + ck; coefficients highest first.
        let coef: Vec<f64> = std::iter::once(1.0).chain(c.iter().copied()).collect();
        let bound = 1.0 + c.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let eval = |z: Complex| -> (Complex, Complex) {
            let mut p = Complex {
                re: coef[0],
                im: 0.0,
            };
            let mut dp = Complex { re: 0.0, im: 0.0 };
            for &a in &coef[1..] {
                dp = dp.mul(z).add(p);
                p = p.mul(z).add(Complex { re: a, im: 0.0 });
            }
            (p, dp)
        };
        let r0 = bound.clamp(0.5, 2.0);
        let mut z: Vec<Complex> = (0..k)
            .map(|i| {
                let ang = 2.0 * std::f64::consts::PI * (i as f64 + 0.25) / k as f64 + 0.4;
                Complex {
                    re: r0 * ang.cos(),
                    im: r0 * ang.sin(),
                }
            })
            .collect();
        for _ in 0..500 {
            let mut moved = 0.0f64;
            for i in 0..k {
                let (p, dp) = eval(z[i]);
                if p.re == 0.0 && p.im == 0.0 {
                    continue;
                }
                let ratio = p.div(dp);
                let mut s = Complex { re: 0.0, im: 0.0 };
                for j in 0..k {
                    if j != i {
                        let d = z[i].sub(z[j]);
                        if d.re != 0.0 || d.im != 0.0 {
                            s = s.add(Complex { re: 1.0, im: 0.0 }.div(d));
                        }
                    }
                }
                let denom = Complex { re: 1.0, im: 0.0 }.sub(ratio.mul(s));
                let step = ratio.div(denom);
                if step.re.is_finite() && step.im.is_finite() {
                    z[i] = z[i].sub(step);
                    moved = moved.max(step.modulus() / (1.0 + z[i].modulus()));
                }
            }
            if moved < 1e-15 {
                break;
            }
        }
        for r in &mut z {
            if r.im.abs() <= 1e-12 * (1.0 + r.re.abs()) {
                r.im = 0.0;
            }
        }
        roots.extend(z);
    }
    roots.extend(std::iter::repeat_n(Complex { re: 0.0, im: 0.0 }, zeros));
    roots.sort_by(|a, b| b.modulus().total_cmp(&a.modulus()));
    Ok(roots)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `[1, sign·c₁, …]` at the given stride: a factor as a full coefficient vector.
    fn expand_factor(coefs: &[f64], stride: usize, sign: f64) -> Vec<f64> {
        let mut out = vec![0.0; coefs.len() * stride + 1];
        out[0] = 1.0;
        for (i, &c) in coefs.iter().enumerate() {
            out[(i + 1) * stride] = sign * c;
        }
        out
    }

    /// The seasonal expansion equals the product of the two factors (by `multiply`).
    #[test]
    fn expansion_matches_polynomial_product() {
        let cases: [(&[f64], &[f64], usize); 4] = [
            (&[0.5, -0.2], &[0.3], 4),
            (&[0.4], &[0.6, 0.1], 3),
            (&[], &[0.7], 12),
            (&[0.2, 0.1, 0.05], &[], 1),
        ];
        for (a, b, s) in cases {
            for (is_ma, sign) in [(false, -1.0), (true, 1.0)] {
                let mut out = Vec::new();
                expand_into(a, b, s, is_ma, &mut out);
                let full = multiply(&expand_factor(a, 1, sign), &expand_factor(b, s, sign));
                assert_eq!(out.len() + 1, full.len());
                for (k, v) in out.iter().enumerate() {
                    assert!(
                        (sign * v - full[k + 1]).abs() < 1e-15,
                        "{a:?} {b:?} {s} {is_ma}"
                    );
                }
            }
        }
    }

    #[test]
    fn step_down_round_trips_durbin_levinson() {
        let kappa = [0.5, -0.3, 0.7, 0.1];
        let mut phi = [0.0; 4];
        let mut tmp = [0.0; 4];
        coefficients_from_partials(&kappa, &mut phi, &mut tmp);
        let back = step_down(&phi).unwrap();
        for (a, b) in kappa.iter().zip(&back) {
            assert!((a - b).abs() < 1e-14);
        }
    }

    #[test]
    fn admissibility_agrees_with_roots() {
        // 1 − 1.5B + 0.56B² = (1 − 0.7B)(1 − 0.8B): stationary.
        assert!(is_stationary(&[1.5, -0.56]));
        // (1 − 1.1B)(1 − 0.5B) = 1 − 1.6B + 0.55B²: not stationary.
        assert!(!is_stationary(&[1.6, -0.55]));
        assert!(!is_stationary(&[1.0]));
        assert!(is_invertible(&[0.9]) && !is_invertible(&[-1.0]));
        let r = inverse_roots(&[-1.5, 0.56]).unwrap();
        assert!((r[0].modulus() - 0.8).abs() < 1e-10 && (r[1].modulus() - 0.7).abs() < 1e-10);
    }

    #[test]
    fn product_times_inverse_is_one() {
        // φ(B)·(ψ(B) of 1/φ(B)) = 1 up to truncation.
        let phi = [0.6, -0.2, 0.1];
        let psi = psi_weights(&phi, &[], 30);
        let prod = multiply(&expand_factor(&phi, 1, -1.0), &psi);
        assert!((prod[0] - 1.0).abs() < 1e-15);
        assert!(prod[1..30].iter().all(|v| v.abs() < 1e-14));
        // θ(B)·π(B) = φ(B).
        let theta = [0.4, 0.3];
        let pi = pi_weights(&phi, &theta, 30);
        let prod = multiply(&expand_factor(&theta, 1, 1.0), &pi);
        let want = expand_factor(&phi, 1, -1.0);
        for j in 0..30 {
            let w = want.get(j).copied().unwrap_or(0.0);
            assert!((prod[j] - w).abs() < 1e-13, "j={j}");
        }
    }

    #[test]
    fn seasonal_expansion() {
        let ar = expand_autoregressive(&[0.5], &[0.3], 4);
        // (1 − 0.5B)(1 − 0.3B⁴) = 1 − 0.5B − 0.3B⁴ + 0.15B⁵
        assert_eq!(ar.len(), 5);
        assert!((ar[0] - 0.5).abs() < 1e-15 && (ar[3] - 0.3).abs() < 1e-15);
        assert!((ar[4] + 0.15).abs() < 1e-15);
        let ma = expand_moving_average(&[0.4], &[0.6], 3);
        // (1 + 0.4B)(1 + 0.6B³) = 1 + 0.4B + 0.6B³ + 0.24B⁴
        assert!((ma[3] - 0.24).abs() < 1e-15 && ma[1] == 0.0);
    }

    #[test]
    fn roots_of_a_seasonal_factor() {
        // 1 − 0.9^12 B^12: twelve inverse roots of modulus 0.9.
        let mut c = vec![0.0; 12];
        c[11] = -0.9f64.powi(12);
        let r = inverse_roots(&c).unwrap();
        assert_eq!(r.len(), 12);
        assert!(r.iter().all(|z| (z.modulus() - 0.9).abs() < 1e-9));
    }

    #[test]
    fn pull_inside_makes_admissible() {
        let p = pull_inside(&[1.2, 0.1], 0.99);
        assert!(is_stationary(&p));
    }
}
