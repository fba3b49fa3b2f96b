//! The analytic gradient of the conditional-sum-of-squares objective, by derivative
//! recursions, for series without missing readings.
//!
//! With `θ(B)e = φ(B)x` run from the conditioning point `c` (`e_t = 0` before it; `x` the
//! data less the profiled regression part) and `φ = φ_ns(B)Φ(Bˢ)`, `θ = θ_ns(B)Θ(Bˢ)`,
//! differentiating the recursion gives, for `t ≥ c`,
//!
//! ```text
//! ∂e_t/∂φ_j = −b_{t−j},    b = θ(B)⁻¹ [Φ(Bˢ)x]   run from c − j
//! ∂e_t/∂Φ_J = −b_{t−Js},   b = θ(B)⁻¹ [φ_ns(B)x] run from c − Js
//! ∂e_t/∂θ_j = −h_{t−j},    h = θ(B)⁻¹ [Θ(Bˢ)e]   run from c
//! ∂e_t/∂Θ_J = −h_{t−Js},   h = θ(B)⁻¹ [θ_ns(B)e] run from c
//! ```
//!
//! (zero before their starts), and `∂S/∂· = 2 Σ_{t≥c} e_t ∂e_t/∂·` for `S = Σ e_t²`; the
//! regression coefficients are at their optimum, so they stay fixed (envelope theorem).
//! One filter per AR coefficient and one per MA factor, against two objective
//! evaluations per free coordinate for central differences.

use super::{EvalWorkspace, Evaluation, Prepared};
use crate::model::coefficients::{Factor, FactorCoefficients};

/// Series-length scratch of the analytic CSS gradient (reused across gradients).
#[derive(Debug, Default, Clone)]
pub(crate) struct CssGradientScratch {
    e: Vec<f64>,
    x: Vec<f64>,
    u: Vec<f64>,
    b: Vec<f64>,
}

impl CssGradientScratch {
    /// Heap bytes held.
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        b(&self.e) + b(&self.x) + b(&self.u) + b(&self.b)
    }
}

impl EvalWorkspace {
    /// `∂F/∂c` for every factor coefficient `c` (held ones included) of `F = −log L / m`,
    /// the CSS objective per used reading, at the point of the last conditional
    /// evaluation (`coefs`, its result `out`), into `grad` (shaped like `coefs`). `false`
    /// when it cannot be had this way (missing readings, or a degenerate sum of squares).
    pub(crate) fn css_coefficient_gradient(
        &mut self,
        prep: &Prepared,
        coefs: &FactorCoefficients,
        period: usize,
        out: &Evaluation,
        grad: &mut FactorCoefficients,
    ) -> bool {
        if prep.has_missing {
            return false;
        }
        let n = prep.n;
        let cond = self.phi.len().min(n);
        let s = period.max(1);
        let scratch = &mut self.css_grad;
        resize(&mut scratch.e, n);
        resize(&mut scratch.x, n);
        resize(&mut scratch.u, n);
        resize(&mut scratch.b, n);
        for t in 0..n {
            let mut x = prep.data[t];
            let mut e = self.css_innov[t];
            // The regression part at its optimum: corrections to the preliminary offsets.
            for (c, (b, o)) in out.beta.iter().zip(&prep.beta_offset).enumerate() {
                let d = b - o;
                x -= d * prep.data[(c + 1) * n + t];
                e -= d * self.css_innov[(c + 1) * n + t];
            }
            scratch.x[t] = x;
            scratch.e[t] = if t < cond { 0.0 } else { e };
        }
        let ss: f64 = scratch.e[cond..].iter().map(|v| v * v).sum();
        if !(ss > 0.0 && ss.is_finite()) {
            return false;
        }
        // ∂F/∂c = ½ (∂S/∂c) / S, and ∂S/∂c = −2 Σ e_t b_{t−lag}.
        let scale = -1.0 / ss;
        let lagged_dot = |e: &[f64], b: &[f64], lag: usize| -> f64 {
            (cond.max(lag)..n).map(|t| e[t] * b[t - lag]).sum::<f64>()
        };
        for f in Factor::ALL {
            let g = grad.of_mut(f);
            g.clear();
            g.resize(coefs.of(f).len(), 0.0);
        }
        // AR factors: the forcing is the other AR factor applied to x.
        polynomial_apply(&scratch.x, &coefs.seasonal_ar, s, false, &mut scratch.u);
        for j in 1..=coefs.ar.len() {
            inverse_ma(
                &scratch.u,
                &self.ma_nz,
                cond.saturating_sub(j),
                &mut scratch.b,
            );
            grad.ar[j - 1] = scale * lagged_dot(&scratch.e, &scratch.b, j);
        }
        polynomial_apply(&scratch.x, &coefs.ar, 1, false, &mut scratch.u);
        for big in 1..=coefs.seasonal_ar.len() {
            let lag = big * s;
            inverse_ma(
                &scratch.u,
                &self.ma_nz,
                cond.saturating_sub(lag),
                &mut scratch.b,
            );
            grad.seasonal_ar[big - 1] = scale * lagged_dot(&scratch.e, &scratch.b, lag);
        }
        // MA factors: the forcing is the other MA factor applied to e.
        if !coefs.ma.is_empty() {
            polynomial_apply(&scratch.e, &coefs.seasonal_ma, s, true, &mut scratch.u);
            inverse_ma(&scratch.u, &self.ma_nz, cond, &mut scratch.b);
            for j in 1..=coefs.ma.len() {
                grad.ma[j - 1] = scale * lagged_dot(&scratch.e, &scratch.b, j);
            }
        }
        if !coefs.seasonal_ma.is_empty() {
            polynomial_apply(&scratch.e, &coefs.ma, 1, true, &mut scratch.u);
            inverse_ma(&scratch.u, &self.ma_nz, cond, &mut scratch.b);
            for big in 1..=coefs.seasonal_ma.len() {
                grad.seasonal_ma[big - 1] = scale * lagged_dot(&scratch.e, &scratch.b, big * s);
            }
        }
        true
    }
}

/// `out = P(Bˢ) x` for the factor `P = 1 − Σ a_i B^{is}` (AR sign) or `1 + Σ a_i B^{is}`
/// (`is_ma`), with readings before the start taken as zero.
fn polynomial_apply(x: &[f64], a: &[f64], s: usize, is_ma: bool, out: &mut [f64]) {
    let sign = if is_ma { 1.0 } else { -1.0 };
    for t in 0..x.len() {
        let mut v = x[t];
        for (i, ai) in a.iter().enumerate() {
            let lag = (i + 1) * s;
            if t >= lag {
                v += sign * ai * x[t - lag];
            }
        }
        out[t] = v;
    }
}

/// `b = θ(B)⁻¹ u` from `start` (`b_τ = u_τ − Σ θ_l b_{τ−l}`, zero before `start`), with
/// `θ`'s non-zero expanded coefficients `ma_nz`.
fn inverse_ma(u: &[f64], ma_nz: &[(usize, f64)], start: usize, b: &mut [f64]) {
    let n = u.len();
    let start = start.min(n);
    b[..start].fill(0.0);
    let guarded = ma_nz.last().map_or(start, |&(l, _)| (start + l).min(n));
    for t in start..guarded {
        let mut v = u[t];
        for &(l, th) in ma_nz {
            if t >= start + l {
                v -= th * b[t - l];
            }
        }
        b[t] = v;
    }
    for t in guarded..n {
        let mut v = u[t];
        for &(l, th) in ma_nz {
            v -= th * b[t - l];
        }
        b[t] = v;
    }
}

fn resize(v: &mut Vec<f64>, n: usize) {
    if v.len() != n {
        v.resize(n, 0.0);
    }
}

#[cfg(test)]
mod tests {
    use super::super::{ObjectiveKind, prepare};
    use super::*;
    use crate::model::blueprint::Blueprint;
    use crate::model::simulate::Simulator;

    /// `F = −log L_css / m` at natural coefficients `c`.
    fn objective(
        ws: &mut EvalWorkspace,
        prep: &Prepared,
        bp: &Blueprint,
        c: &FactorCoefficients,
    ) -> f64 {
        let mut out = Evaluation::default();
        ws.evaluate(prep, bp, c, ObjectiveKind::Conditional, None, &mut out)
            .unwrap();
        out.neg_log_likelihood / out.used as f64
    }

    /// The derivative recursions against central differences of the objective itself
    /// (Richardson-extrapolated, steps 1e-4 and 5e-5), coefficient by coefficient, for
    /// shapes that cover every factor, seasonal differencing, a profiled mean and two
    /// exogenous columns, at points away from the optimum.
    #[test]
    fn css_gradient_matches_central_differences() {
        let sim = Simulator::builder()
            .autoregressive(&[0.5, 0.2])
            .moving_average(&[0.3])
            .seasonal(&[0.3], &[-0.4], 12)
            .level(40.0)
            .build()
            .unwrap();
        let x = sim.generate(400, 17);
        let ex1: Vec<f64> = (0..400).map(|t| (t as f64 / 9.0).sin()).collect();
        let ex2: Vec<f64> = (0..400).map(|t| ((t * t) % 7) as f64).collect();
        let cases: Vec<(Blueprint, Vec<&[f64]>, FactorCoefficients)> = vec![
            (
                Blueprint::builder().nonseasonal(2, 0, 2).build().unwrap(),
                vec![],
                FactorCoefficients {
                    ar: vec![0.4, 0.1],
                    ma: vec![0.2, -0.1],
                    ..Default::default()
                },
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 1)
                    .seasonal(1, 0, 1, 12)
                    .build()
                    .unwrap(),
                vec![],
                FactorCoefficients {
                    ar: vec![0.6],
                    ma: vec![0.25],
                    seasonal_ar: vec![0.2],
                    seasonal_ma: vec![-0.3],
                },
            ),
            (
                Blueprint::builder()
                    .nonseasonal(2, 0, 1)
                    .seasonal(1, 1, 2, 4)
                    .build()
                    .unwrap(),
                vec![],
                FactorCoefficients {
                    ar: vec![0.3, 0.2],
                    ma: vec![0.4],
                    seasonal_ar: vec![-0.2],
                    seasonal_ma: vec![-0.5, 0.2],
                },
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 1)
                    .exogenous(2)
                    .build()
                    .unwrap(),
                vec![&ex1, &ex2],
                FactorCoefficients {
                    ar: vec![0.7],
                    ma: vec![-0.2],
                    ..Default::default()
                },
            ),
        ];
        for (bp, regressors, c) in cases {
            let prep = prepare(&bp, &x, &regressors).unwrap();
            let mut ws = EvalWorkspace::default();
            let mut out = Evaluation::default();
            ws.evaluate(&prep, &bp, &c, ObjectiveKind::Conditional, None, &mut out)
                .unwrap();
            let mut grad = FactorCoefficients::default();
            assert!(ws.css_coefficient_gradient(&prep, &c, bp.period, &out, &mut grad));
            for f in Factor::ALL {
                for i in 0..c.of(f).len() {
                    let mut diff = |h: f64| {
                        let mut up = c.clone();
                        up.of_mut(f)[i] += h;
                        let mut down = c.clone();
                        down.of_mut(f)[i] -= h;
                        (objective(&mut ws, &prep, &bp, &up)
                            - objective(&mut ws, &prep, &bp, &down))
                            / (2.0 * h)
                    };
                    let (d1, d2) = (diff(1e-4), diff(5e-5));
                    let numeric = (4.0 * d2 - d1) / 3.0;
                    let analytic = grad.of(f)[i];
                    assert!(
                        (analytic - numeric).abs() <= 1e-7 * numeric.abs().max(1e-3),
                        "{}: {f:?}[{i}] analytic {analytic} numeric {numeric}",
                        bp.shape()
                    );
                }
            }
        }
    }
}
