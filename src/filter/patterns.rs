//! What a unit sensor event does to a model's one-step residuals: the ψ- and π-weights of
//! the full (differenced) ARIMA operator and, from them, each event kind's residual
//! pattern x = π(B)ξ(B) (Chen & Liu 1993), used by the event search and the monitor.

use crate::filter::forecasting::ForecastModel;
use crate::model::event::EventKind;

/// ψ-weights of the model's full (differenced) ARIMA operator θ(B)/(φ(B)α(B)).
pub(crate) fn psi_weights(m: &ForecastModel, n: usize) -> Vec<f64> {
    let denom = full_ar(m);
    let mut psi = vec![0.0; n];
    for k in 0..n {
        let mut v = if k < m.rvec.len() { m.rvec[k] } else { 0.0 };
        for (j, &a) in denom.iter().enumerate().skip(1) {
            if j > k {
                break;
            }
            v -= a * psi[k - j];
        }
        psi[k] = v;
    }
    psi
}

/// φ(B)α(B) as coefficients with the constant 1 first.
fn full_ar(m: &ForecastModel) -> Vec<f64> {
    let mut phi = vec![1.0];
    phi.extend(m.phi.iter().map(|v| -v));
    let mut alpha = vec![1.0];
    alpha.extend(m.c.iter().map(|v| -v));
    crate::model::lag::multiply(&phi, &alpha)
}

/// π-weights of the residual filter φ(B)α(B)/θ(B), n of them.
pub(crate) fn pi_weights(m: &ForecastModel, n: usize) -> Vec<f64> {
    let num = full_ar(m);
    let mut pi = vec![0.0; n];
    for k in 0..n {
        let mut v = if k < num.len() { num[k] } else { 0.0 };
        for j in 1..m.rvec.len().min(k + 1) {
            v -= m.rvec[j] * pi[k - j];
        }
        pi[k] = v;
    }
    pi
}

/// The residual pattern x_k (k = 0..pi.len()) of a unit event of `kind`: with π(B) the
/// residual filter and ξ(B) the event's shape on the series (additive outlier 1,
/// innovational outlier 1/π(B), level shift 1/(1 − B), temporary change 1/(1 − δB)).
pub(crate) fn event_response(kind: EventKind, pi: &[f64], decay: f64) -> Vec<f64> {
    let n = pi.len();
    let mut x = vec![0.0; n];
    match kind {
        EventKind::AdditiveOutlier => x.copy_from_slice(pi),
        EventKind::InnovationalOutlier => {
            if n > 0 {
                x[0] = 1.0;
            }
        }
        EventKind::LevelShift => {
            let mut acc = 0.0;
            for k in 0..n {
                acc += pi[k];
                x[k] = acc;
            }
        }
        EventKind::TemporaryChange => {
            let mut prev = 0.0;
            for k in 0..n {
                prev = pi[k] + decay * prev;
                x[k] = prev;
            }
        }
    }
    x
}
