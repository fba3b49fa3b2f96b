//! The gradient of the exact objective by the filter's adjoint, for series without
//! missing readings.
//!
//! The objective per used reading, with σ² concentrated and the regression profiled by
//! GLS, is `F = (1/2m) (Σ ln F_t + Σ v_t²/F_t / σ̂²) + const`; both are at their optimum,
//! so they stay fixed when differentiating (envelope theorem), and the columns combine
//! into one (`x = y − Xδ`, whose innovations are the same combination: the filter is
//! linear in the data). One evaluation and one reverse sweep
//! ([`KalmanWorkspace::pass_adjoint`]) give `∂F` in the expanded `φ`, `θ` and in the first
//! column of the stationary covariance `P₀`; these move with the optimiser's coordinates
//! through a map that sees no data (the coordinate transform, the product of the
//! seasonal factors, the stationary start: O(r²)), differentiated by central differences.
//! Cost: about three evaluations against `2k` for central differences of the objective.

use super::*;
use crate::filter::kalman::{AdjointScratch, PassDerivatives};

/// Reused buffers of the exact score.
#[derive(Debug, Default, Clone)]
pub(crate) struct ExactScoreScratch {
    adjoint: AdjointScratch,
    /// The combined column and its innovations.
    x: Vec<f64>,
    e: Vec<f64>,
    /// The filter that gives the perturbed models' stationary start.
    filter: KalmanWorkspace,
    coefs: FactorCoefficients,
    phi: Vec<f64>,
    theta: Vec<f64>,
    /// Per coordinate: how the expanded `φ` (r), `θ` (q) and `P₀`'s first column (r)
    /// move with it.
    dphi: Vec<f64>,
    dtheta: Vec<f64>,
    dcol: Vec<f64>,
    /// The adjoint's derivatives.
    phi_bar: Vec<f64>,
    theta_bar: Vec<f64>,
    col_bar: Vec<f64>,
    ar_lags: Vec<usize>,
    ma_lags: Vec<usize>,
}

impl ExactScoreScratch {
    /// Heap bytes held.
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        let coefs: usize = Factor::ALL.iter().map(|f| b(self.coefs.of(*f))).sum();
        self.adjoint.heap_bytes()
            + self.filter.heap_bytes()
            + coefs
            + [
                b(&self.x),
                b(&self.e),
                b(&self.phi),
                b(&self.theta),
                b(&self.dphi),
                b(&self.dtheta),
                b(&self.dcol),
                b(&self.phi_bar),
                b(&self.theta_bar),
                b(&self.col_bar),
            ]
            .iter()
            .sum::<usize>()
            + b(&self.ar_lags)
            + b(&self.ma_lags)
    }
}

impl EvalWorkspace {
    /// The exact objective's gradient at coordinates `x` (see the module docs), `None`
    /// where it cannot be had this way: an inadmissible point or neighbour, missing
    /// readings, or an opening too long to store.
    pub(super) fn exact_gradient(
        &mut self,
        prep: &Prepared,
        bp: &Blueprint,
        layout: &Layout,
        x: &[f64],
        out: &mut Evaluation,
    ) -> Option<Vec<f64>> {
        if prep.has_missing {
            return None;
        }
        let mut coefs = std::mem::take(&mut self.coefs);
        let ok = layout.natural(x, &mut coefs, &mut self.kappa, &mut self.tmp)
            && self
                .evaluate(prep, bp, &coefs, ObjectiveKind::Exact, None, out)
                .is_ok();
        self.coefs = coefs;
        if !ok {
            return None;
        }
        let mut sc = std::mem::take(&mut self.exact_score);
        let g = self.exact_gradient_from(prep, bp, layout, x, out, &mut sc);
        self.exact_score = sc;
        g
    }

    fn exact_gradient_from(
        &mut self,
        prep: &Prepared,
        bp: &Blueprint,
        layout: &Layout,
        x: &[f64],
        out: &Evaluation,
        sc: &mut ExactScoreScratch,
    ) -> Option<Vec<f64>> {
        let k = x.len();
        let (r, p, q) = (self.kalman.r, self.phi.len(), self.theta.len());
        // How the data-free quantities move with each coordinate.
        sc.dphi.clear();
        sc.dphi.resize(k * r, 0.0);
        sc.dtheta.clear();
        sc.dtheta.resize(k * q, 0.0);
        sc.dcol.clear();
        sc.dcol.resize(k * r, 0.0);
        let mut z = x.to_vec();
        for i in 0..k {
            // Richardson's extrapolation of central differences at steps h and h/2: the
            // adjoint's terms can be large and cancel (an MA root near the unit circle makes
            // the start matter for the whole series), so this part must be accurate.
            let h = 1e-4 * x[i].abs().max(1.0);
            for (step, weight) in [(h, -1.0 / 3.0), (0.5 * h, 4.0 / 3.0)] {
                for sign in [1.0, -1.0] {
                    z[i] = x[i] + sign * step;
                    if !layout.natural(&z, &mut sc.coefs, &mut self.kappa, &mut self.tmp) {
                        return None;
                    }
                    sc.coefs.expand_into(bp.period, &mut sc.phi, &mut sc.theta);
                    if sc.phi.len() != p
                        || sc.theta.len() != q
                        || sc
                            .filter
                            .set_model_start_column(&sc.phi, &sc.theta)
                            .is_err()
                        || sc.filter.r != r
                    {
                        return None;
                    }
                    let s = weight * sign / (2.0 * step);
                    for (d, v) in sc.dphi[i * r..i * r + p].iter_mut().zip(&sc.phi) {
                        *d += s * v;
                    }
                    for (d, v) in sc.dtheta[i * q..(i + 1) * q].iter_mut().zip(&sc.theta) {
                        *d += s * v;
                    }
                    let p0 = sc.filter.stationary_matrix();
                    for j in 0..r {
                        sc.dcol[i * r + j] += s * p0[j * r];
                    }
                }
            }
            z[i] = x[i];
        }
        sc.ar_lags.clear();
        sc.ar_lags
            .extend((1..=p).filter(|&l| (0..k).any(|i| sc.dphi[i * r + l - 1] != 0.0)));
        sc.ma_lags.clear();
        sc.ma_lags
            .extend((1..=q).filter(|&l| (0..k).any(|i| sc.dtheta[i * q + l - 1] != 0.0)));
        // The combined column at the profiled regression coefficients.
        let n = prep.n;
        sc.x.clear();
        sc.x.extend_from_slice(&prep.data[..n]);
        sc.e.clear();
        sc.e.extend_from_slice(&self.kalman.innov[..n]);
        for (c, (b, o)) in out.beta.iter().zip(&prep.beta_offset).enumerate() {
            let d = b - o;
            let (col, innov) = (
                &prep.data[(c + 1) * n..(c + 2) * n],
                &self.kalman.innov[(c + 1) * n..(c + 2) * n],
            );
            for t in 0..n {
                sc.x[t] -= d * col[t];
                sc.e[t] -= d * innov[t];
            }
        }
        let m = out.used as f64;
        let weights = (0.5 / m, 0.5 / (m * out.innovation_variance));
        for (buf, len) in [
            (&mut sc.phi_bar, r),
            (&mut sc.theta_bar, q),
            (&mut sc.col_bar, r),
        ] {
            buf.clear();
            buf.resize(len, 0.0);
        }
        let done = self.kalman.pass_adjoint(
            &sc.x,
            &sc.e,
            weights,
            &sc.ar_lags,
            &sc.ma_lags,
            &mut sc.adjoint,
            PassDerivatives {
                phi: &mut sc.phi_bar,
                theta: &mut sc.theta_bar,
                column: &mut sc.col_bar,
            },
        );
        if !done {
            return None;
        }
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(a, b)| a * b).sum::<f64>();
        let g: Vec<f64> = (0..k)
            .map(|i| {
                dot(&sc.phi_bar, &sc.dphi[i * r..(i + 1) * r])
                    + dot(&sc.theta_bar, &sc.dtheta[i * q..(i + 1) * q])
                    + dot(&sc.col_bar, &sc.dcol[i * r..(i + 1) * r])
            })
            .collect();
        g.iter().all(|v| v.is_finite()).then_some(g)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::simulate::Simulator;

    fn objective(ws: &mut EvalWorkspace, prep: &Prepared, bp: &Blueprint, z: &[f64]) -> f64 {
        let layout = Layout::new(bp);
        let c = natural(&layout, z, ws).unwrap();
        let mut out = Evaluation::default();
        ws.evaluate(prep, bp, &c, ObjectiveKind::Exact, None, &mut out)
            .unwrap();
        out.neg_log_likelihood / out.used as f64
    }

    /// Richardson-extrapolated central difference of `f` along coordinate `i`.
    fn numeric(f: &mut dyn FnMut(&[f64]) -> f64, x: &[f64], i: usize) -> f64 {
        let mut diff = |h: f64| {
            let mut up = x.to_vec();
            up[i] += h;
            let mut down = x.to_vec();
            down[i] -= h;
            (f(&up) - f(&down)) / (2.0 * h)
        };
        let (d1, d2) = (diff(1e-4), diff(5e-5));
        (4.0 * d2 - d1) / 3.0
    }

    /// The adjoint against central differences of the objective itself (the filter as it
    /// runs, phases and all), at points away from the optimum, for shapes that cover every
    /// factor, a long seasonal MA (opening of hundreds of readings, then the direct phase),
    /// an opening that never converges (an MA root near the unit circle), a profiled mean,
    /// drift and exogenous columns.
    #[test]
    fn exact_score_matches_central_differences() {
        let sim = Simulator::builder()
            .autoregressive(&[0.5, 0.2])
            .moving_average(&[0.3])
            .seasonal(&[0.3], &[-0.4], 12)
            .level(40.0)
            .build()
            .unwrap();
        let x = sim.generate(600, 17);
        let ex1: Vec<f64> = (0..600).map(|t| (t as f64 / 9.0).sin()).collect();
        let ex2: Vec<f64> = (0..600).map(|t| ((t * t) % 7) as f64).collect();
        let c = |ar: &[f64], ma: &[f64], sar: &[f64], sma: &[f64]| FactorCoefficients {
            ar: ar.to_vec(),
            ma: ma.to_vec(),
            seasonal_ar: sar.to_vec(),
            seasonal_ma: sma.to_vec(),
        };
        let bp = |p, d, q, sp, sd, sq, s, mean: bool, exo| {
            let mut b = Blueprint::builder();
            b.nonseasonal(p, d, q).mean_term(mean).exogenous(exo);
            if s > 1 {
                b.seasonal(sp, sd, sq, s);
            }
            b.build().unwrap()
        };
        let cases: Vec<(Blueprint, Vec<&[f64]>, FactorCoefficients)> = vec![
            (
                bp(1, 0, 1, 0, 0, 0, 1, true, 0),
                vec![],
                c(&[0.6], &[0.3], &[], &[]),
            ),
            (
                bp(2, 0, 2, 0, 0, 0, 1, false, 0),
                vec![],
                c(&[0.4, 0.1], &[0.2, -0.1], &[], &[]),
            ),
            (
                bp(0, 0, 1, 0, 0, 0, 1, false, 0),
                vec![],
                c(&[], &[-0.97], &[], &[]),
            ),
            (
                bp(1, 0, 1, 0, 0, 0, 1, false, 0),
                vec![],
                c(&[0.2], &[-0.999], &[], &[]),
            ),
            (
                bp(3, 0, 0, 0, 0, 0, 1, true, 0),
                vec![],
                c(&[0.5, 0.1, -0.2], &[], &[], &[]),
            ),
            (
                bp(1, 0, 1, 1, 0, 1, 12, true, 0),
                vec![],
                c(&[0.6], &[0.25], &[0.2], &[-0.3]),
            ),
            (
                bp(2, 0, 1, 1, 1, 2, 4, false, 0),
                vec![],
                c(&[0.3, 0.2], &[0.4], &[-0.2], &[-0.5, 0.2]),
            ),
            (
                bp(1, 0, 1, 0, 1, 1, 12, false, 0),
                vec![],
                c(&[0.5], &[0.3], &[], &[-0.6]),
            ),
            (
                bp(1, 0, 1, 0, 0, 0, 1, true, 2),
                vec![&ex1, &ex2],
                c(&[0.7], &[-0.2], &[], &[]),
            ),
        ];
        let mut openings = vec![];
        for (bp, regressors, c) in cases {
            let prep = prepare(&bp, &x, &regressors).unwrap();
            let layout = Layout::new(&bp);
            let z = coordinates(&layout, &c).unwrap();
            let mut ws = EvalWorkspace::default();
            let mut out = Evaluation::default();
            let g = ws
                .exact_gradient(&prep, &bp, &layout, &z, &mut out)
                .unwrap_or_else(|| panic!("{}: no adjoint", bp.shape()));
            let t1 = ws.kalman.full_steps;
            openings.push((t1, prep.n));
            // With an MA root at 0.999 the start matters to the end of the series: the
            // adjoint's terms reach 2·10⁴ and cancel to O(1), and the objective's own
            // rounding limits the numeric reference to about 1e-7 there.
            let tolerance = if c.ma.iter().any(|m| m.abs() > 0.99) {
                1e-6
            } else {
                1e-7
            };
            for i in 0..z.len() {
                let num = numeric(&mut |p| objective(&mut ws, &prep, &bp, p), &z, i);
                assert!(
                    (g[i] - num).abs() <= tolerance * num.abs().max(1e-3),
                    "{} (opening {t1} of {}): coordinate {i} adjoint {} numeric {num}",
                    bp.shape(),
                    prep.n,
                    g[i]
                );
            }
        }
        // Both kinds of pass were exercised: openings that handed over to the direct phase
        // and one that ran to the end.
        assert!(openings.iter().any(|&(t1, n)| t1 < n && t1 > 100));
        assert!(openings.iter().any(|&(t1, n)| t1 == n));
    }

    /// The adjoint against central differences of the dense covariance (Riccati)
    /// recursion at every reading — the reference route that shares no phase logic with
    /// the filter — with σ² held at its profiled value (the profile's derivative there).
    #[test]
    fn exact_score_matches_the_dense_reference() {
        let sim = Simulator::builder()
            .autoregressive(&[0.5])
            .moving_average(&[0.3])
            .seasonal(&[], &[-0.6], 12)
            .build()
            .unwrap();
        let x = sim.generate(400, 5);
        let cases = [
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 1)
                    .seasonal(0, 1, 1, 12)
                    .build()
                    .unwrap(),
                FactorCoefficients {
                    ar: vec![0.4],
                    ma: vec![0.2],
                    seasonal_ma: vec![-0.5],
                    ..Default::default()
                },
            ),
            (
                Blueprint::builder()
                    .nonseasonal(2, 0, 2)
                    .mean_term(false)
                    .build()
                    .unwrap(),
                FactorCoefficients {
                    ar: vec![0.3, 0.2],
                    ma: vec![0.5, -0.2],
                    ..Default::default()
                },
            ),
        ];
        for (bp, c) in cases {
            assert!(!bp.has_mean() && bp.exogenous_columns() == 0);
            let prep = prepare(&bp, &x, &[]).unwrap();
            let layout = Layout::new(&bp);
            let z = coordinates(&layout, &c).unwrap();
            let mut ws = EvalWorkspace::default();
            let mut out = Evaluation::default();
            let g = ws
                .exact_gradient(&prep, &bp, &layout, &z, &mut out)
                .unwrap();
            let (s2, m) = (out.innovation_variance, out.used as f64);
            let series = prep.data[..prep.n].to_vec();
            let mut reference = |p: &[f64]| {
                let (phi, theta) = natural(&layout, p, &mut ws).unwrap().expanded(bp.period);
                -crate::filter::kalman::reference_log_likelihood(&phi, &theta, s2, &series).unwrap()
                    / m
            };
            for i in 0..z.len() {
                let num = numeric(&mut reference, &z, i);
                assert!(
                    (g[i] - num).abs() <= 1e-7 * num.abs().max(1e-3),
                    "{}: coordinate {i} adjoint {} dense reference {num}",
                    bp.shape(),
                    g[i]
                );
            }
        }
    }
}
