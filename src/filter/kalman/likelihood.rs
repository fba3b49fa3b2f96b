//! The public likelihood functions over the filter, and the checks they share.

use super::*;

/// Exact Gaussian log-likelihood of a zero-mean ARMA series (NaN = missing) with known
/// innovation variance, by the Kalman filter.
///
/// `phi` and `theta` are the expanded coefficient lists in the conventions of
/// [`inverse_roots`](crate::inverse_roots) (`1 − Σφ_iB^i`, `1 + Σθ_jB^j`); multiply seasonal factors out first with
/// [`lag::expand_autoregressive`] / [`lag::expand_moving_average`]. Errors if the AR part is
/// not stationary, the MA part is not invertible, σ² is not positive, the series is empty,
/// all missing, or holds ±inf.
///
/// ```
/// # fn main() -> Result<(), lagwise::Error> {
/// // AR(1), φ = 0.5, σ² = 1, one reading x: log L = −½(ln 2π + ln γ₀ + x²/γ₀), γ₀ = 4/3.
/// let ll = lagwise::exact_log_likelihood(&[0.5], &[], 1.0, &[1.0])?;
/// let g0: f64 = 4.0 / 3.0;
/// assert!((ll + 0.5 * ((2.0 * std::f64::consts::PI).ln() + g0.ln() + 1.0 / g0)).abs() < 1e-14);
/// # Ok(()) }
/// ```
///
/// # Form
/// An ARMA(p, q) (seasonal factors already multiplied out) with `r = max(p, q + 1)` has
/// the state `α_t` of length `r`, observation `w_t = α_t[0]`, and
///
/// ```text
/// α_{t+1} = T α_t + R e_{t+1},   T = [φ | I_{r−1} over 0],   R = (1, θ₁, …, θ_{r−1})ᵀ
/// ```
///
/// with no observation noise (Harvey 1989, §3.4). The filter works with σ² = 1; the
/// innovation variance is concentrated out of the likelihood by the estimators.
///
/// # Stationary start in O(r²)
/// The initial covariance `P₀` solves `P = TPTᵀ + RRᵀ`. Its first row is built from the
/// theoretical autocovariances `γ(h)` and ψ-weights (`P₀[0][j] = Σ_{k>j} φ_k γ(k−j) +
/// Σ_{k≥j} θ_k ψ_{k−j}`), and the rest follows from the same equation read diagonally:
/// `P[i+1][j+1] = P[i][j] − R_iR_j − φ_{i+1}φ_{j+1}P[0][0] − φ_{i+1}P[0][j+1] −
/// φ_{j+1}P[0][i+1]` (0-based `i, j`, 1-based `φ`). The autocovariances come from the partial autocorrelations of the
/// AR factor (step-down, then Durbin–Levinson forward), filtered by the MA factor's own
/// autocovariances — never from an r²×r² solve (Gardner, Harvey & Phillips 1980 use such
/// a solve; r reaches ~100 for seasonal models).
///
/// # Three phases per pass
/// 1. **Full**: from the stationary start the covariance moves by a rank-one step per
///    reading, so the Chandrasekhar recursions (Morf, Sidhu & Kailath 1974) carry the
///    gain in O(r) per step. After a missing reading (NaN: no measurement update) the
///    covariance recursion takes over, exploiting the companion structure, O(r²) per step.
/// 2. **Steady**: once the gain has converged to `R` (for an invertible MA part: the
///    Chandrasekhar step `|w|²/F` below 1e-16, or the trace of the updated covariance
///    `P⁺_t` below 1e-14 in the covariance recursion) the state is updated in O(r) for
///    `r` steps.
/// 3. **Direct**: the filter is then exactly the innovations recursion
///    `v_t = w_t − Σφ_i w_{t−i} − Σθ_j v_{t−j}` over the non-zero coefficients only
///    (4 terms for an AR(1)×seasonal MA(1) at r = 97). A missing reading rebuilds the
///    state from the last r readings and innovations and returns to phase 1.
///
/// Several columns (the series and regression columns) share one pass: the covariance
/// and gain are computed once, the state means once per column, which is how regression
/// coefficients are profiled out by GLS inside the likelihood.
pub fn exact_log_likelihood(
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<f64> {
    let mut ws = checked_workspace(
        "exact log-likelihood",
        phi,
        theta,
        innovation_variance,
        series,
    )?;
    let mut cross = [0.0];
    let totals = ws.pass(series, series.len(), 1, &mut cross);
    Ok(gaussian_log_likelihood(
        totals.used,
        totals.log_det,
        cross[0],
        innovation_variance,
    ))
}

/// The exact log-likelihood by the plain covariance (Riccati) recursion at every reading,
/// with no Chandrasekhar phase and no steady-state switch: O(r²) per reading, the
/// reference that [`exact_log_likelihood`] is tested against and a way to time what the
/// fast phases save. Same conventions and errors as [`exact_log_likelihood`].
pub fn reference_log_likelihood(
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<f64> {
    let mut ws = checked_workspace(
        "reference log-likelihood",
        phi,
        theta,
        innovation_variance,
        series,
    )?;
    let (ld, ss, m) = ws.covariance_recursion_totals(series);
    Ok(gaussian_log_likelihood(m, ld, ss, innovation_variance))
}

/// `log L = −½ (m ln(2πσ²) + Σ ln F_t + Σ v_t²/F_t / σ²)` from a pass's totals over `m`
/// readings (the filter works with σ² = 1).
fn gaussian_log_likelihood(m: usize, log_det: f64, sum_squares: f64, sigma2: f64) -> f64 {
    -0.5 * (m as f64 * (2.0 * std::f64::consts::PI * sigma2).ln() + log_det + sum_squares / sigma2)
}

/// The checks shared by the public likelihood functions, then a workspace set to the model.
pub(super) fn checked_workspace(
    what: &'static str,
    phi: &[f64],
    theta: &[f64],
    innovation_variance: f64,
    series: &[f64],
) -> Result<KalmanWorkspace> {
    crate::base::screen::screen(series, what, 1, crate::base::screen::ConstantPolicy::Allow)?;
    if !(innovation_variance > 0.0 && innovation_variance.is_finite()) {
        return Err(Error::invalid(
            what,
            format!("innovation variance {innovation_variance} must be positive"),
        ));
    }
    if !lag::is_stationary(phi) {
        return Err(Error::invalid(
            what,
            "the AR coefficients are not stationary",
        ));
    }
    if !lag::is_invertible(theta) {
        return Err(Error::invalid(
            what,
            "the MA coefficients are not invertible",
        ));
    }
    let mut ws = KalmanWorkspace::default();
    ws.set_model(phi, theta)?;
    Ok(ws)
}

impl KalmanWorkspace {
    /// `(Σ ln F_t, Σ v_t²/F_t, readings used)` of the plain covariance recursion at every
    /// reading (σ² = 1), from the stationary start of the model set last: the reference
    /// route of [`reference_log_likelihood`] and of the filter's equivalence tests.
    pub(super) fn covariance_recursion_totals(&mut self, series: &[f64]) -> (f64, f64, usize) {
        let r = self.r;
        let mut a = vec![0.0; r];
        let (mut ld, mut ss, mut m) = (0.0, 0.0, 0usize);
        for &x in series {
            let f = self.p[0];
            if x.is_nan() {
                self.predict_covariance_no_update();
            } else {
                let v = x - a[0];
                ld += f.ln();
                ss += v * v / f;
                m += 1;
                for i in 0..r {
                    a[i] += self.p[i] / f * v;
                }
                let _ = self.predict_covariance_after_update(f);
            }
            let a0 = a[0];
            for i in 0..r - 1 {
                a[i] = self.phi[i] * a0 + a[i + 1];
            }
            a[r - 1] = self.phi[r - 1] * a0;
        }
        (ld, ss, m)
    }
}
