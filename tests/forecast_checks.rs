//! Forecast intervals by Monte Carlo, monotone widths, and monitor equivalence.

use lagwise::{Blueprint, Estimator, FitWorkspace, KnownModel, Simulator, Term};
use proptest::prelude::*;

/// Empirical coverage of 80% and 95% intervals over 2000 simulated continuations, for a
/// stationary ARMA(1,1) and a seasonally differenced SARIMA(1,0,0)(0,1,1)₁₂, with the
/// model's coefficients known (held), so the intervals should be exact. Each horizon's
/// coverage must be within ±2 percentage points of nominal (binomial sd ≤ 0.9 points).
#[test]
fn interval_coverage_monte_carlo() {
    struct Case {
        sim: Simulator,
        blueprint: Blueprint,
    }
    let arma = Case {
        sim: Simulator::builder()
            .autoregressive(&[0.7])
            .moving_average(&[0.3])
            .level(20.0)
            .build()
            .unwrap(),
        blueprint: Blueprint::builder()
            .nonseasonal(1, 0, 1)
            .hold(Term::Ar(1), 0.7)
            .hold(Term::Ma(1), 0.3)
            .hold(Term::Mean, 20.0)
            .estimator(Estimator::ExactLikelihood)
            .build()
            .unwrap(),
    };
    let seasonal = Case {
        sim: Simulator::builder()
            .autoregressive(&[0.5])
            .seasonal(&[], &[-0.6], 12)
            .differencing(0, 1)
            .build()
            .unwrap(),
        blueprint: Blueprint::builder()
            .nonseasonal(1, 0, 0)
            .seasonal(0, 1, 1, 12)
            .hold(Term::Ar(1), 0.5)
            .hold(Term::SeasonalMa(1), -0.6)
            .estimator(Estimator::ExactLikelihood)
            .build()
            .unwrap(),
    };
    let reps = 2000;
    let n = 150;
    let horizons = [1usize, 6, 12];
    for (label, case) in [("ARMA(1,1)", arma), ("SARIMA(1,0,0)(0,1,1)12", seasonal)] {
        let mut inside = vec![[0usize; 2]; horizons.len()];
        let mut ws = FitWorkspace::new();
        for rep in 0..reps {
            let path = case.sim.generate(n + 12, 77_000 + rep);
            let fit = case.blueprint.fit_with(&path[..n], &mut ws).unwrap();
            // σ² is estimated from the history; scale back to the known σ = 1 so the
            // check is of the predictor, not of the variance estimate.
            let scale = 1.0 / fit.innovation_variance().sqrt();
            let fc = fit.forecast(12, &[0.8, 0.95]).unwrap();
            for (k, &h) in horizons.iter().enumerate() {
                let st = &fc.steps[h - 1];
                let actual = path[n + h - 1];
                for (l, z) in [1.2815515655446004, 1.959963984540054].iter().enumerate() {
                    if (actual - st.mean).abs() <= z * st.sd * scale {
                        inside[k][l] += 1;
                    }
                }
            }
        }
        for (k, &h) in horizons.iter().enumerate() {
            for (l, nominal) in [0.8, 0.95].iter().enumerate() {
                let rate = inside[k][l] as f64 / reps as f64;
                assert!(
                    (rate - nominal).abs() <= 0.02,
                    "{label} h={h} level {nominal}: coverage {rate}"
                );
            }
        }
    }
}

#[test]
fn future_regressors_are_required_and_checked() {
    let x: Vec<f64> = (0..300).map(|t| 10.0 + (t as f64 / 9.0).sin()).collect();
    let y: Vec<f64> = x
        .iter()
        .enumerate()
        .map(|(t, v)| 2.0 * v + ((t * 7919) % 13) as f64 * 0.05)
        .collect();
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .exogenous(1)
        .build()
        .unwrap()
        .fit_regression(&y, &[&x])
        .unwrap();
    assert!(fit.forecast(5, &[0.9]).is_err());
    assert!(
        fit.forecast_given_regressors(5, &[0.9], &[&x[..4]])
            .is_err()
    );
    let fc = fit
        .forecast_given_regressors(5, &[0.9], &[&x[..5]])
        .unwrap();
    assert_eq!(fc.steps.len(), 5);
    let mut bad = x[..5].to_vec();
    bad[2] = f64::INFINITY;
    assert!(fit.forecast_given_regressors(5, &[0.9], &[&bad]).is_err());
    assert!(fit.forecast(5, &[1.5]).is_err());
}

fn model_and_path() -> impl Strategy<Value = (usize, Vec<f64>)> {
    (0usize..3, any::<u64>()).prop_map(|(kind, seed)| {
        let sim = match kind {
            0 => Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.2])
                .level(5.0)
                .build(),
            1 => Simulator::builder()
                .moving_average(&[-0.5])
                .differencing(1, 0)
                .build(),
            _ => Simulator::builder()
                .autoregressive(&[0.4])
                .seasonal(&[], &[-0.5], 6)
                .differencing(0, 1)
                .build(),
        };
        (kind, sim.unwrap().generate(160, seed))
    })
}

fn blueprint(kind: usize) -> Blueprint {
    match kind {
        0 => Blueprint::builder().nonseasonal(1, 0, 1).build(),
        1 => Blueprint::builder().nonseasonal(0, 1, 1).build(),
        _ => Blueprint::builder()
            .nonseasonal(1, 0, 0)
            .seasonal(0, 1, 1, 6)
            .build(),
    }
    .unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(20))]

    /// Interval width never shrinks with the horizon (stationary and integrated models).
    #[test]
    fn widths_non_decreasing((kind, x) in model_and_path()) {
        let fit = blueprint(kind).fit(&x).unwrap();
        let fc = fit.forecast(30, &[0.9]).unwrap();
        for w in fc.steps.windows(2) {
            prop_assert!(w[1].sd >= w[0].sd * (1.0 - 1e-12), "{} then {}", w[0].sd, w[1].sd);
        }
    }

    /// A monitor fed k readings forecasts exactly like a fresh filter over the extended
    /// series with the same coefficients.
    #[test]
    fn monitor_equals_refiltering((kind, x) in model_and_path(), k in 1usize..40, gap in 0usize..40) {
        let n = 110;
        let mut ext = x[..n + k].to_vec();
        if gap < k {
            ext[n + gap] = f64::NAN; // a missing reading while monitoring
        }
        let fit = blueprint(kind).fit(&ext[..n]).unwrap();
        let mut live = fit.monitor(0.99).unwrap();
        let checks = live.observe_batch(&ext[n..]).unwrap();
        prop_assert_eq!(checks.len(), k);
        let fresh = fit.monitor_from_history(&ext, &[], 0.99).unwrap();
        prop_assert_eq!(live.next_index(), fresh.next_index());
        let (a, b) = (live.forecast(8, &[0.95]).unwrap(), fresh.forecast(8, &[0.95]).unwrap());
        for (p, q) in a.steps.iter().zip(&b.steps) {
            prop_assert!((p.mean - q.mean).abs() <= 1e-9 * q.mean.abs().max(1.0));
            prop_assert!((p.sd - q.sd).abs() <= 1e-9 * q.sd);
        }
    }
}

#[test]
fn monitor_flags_spikes_and_missing_readings() {
    let x = Simulator::builder()
        .autoregressive(&[0.5])
        .level(80.0)
        .innovation_sd(0.1)
        .build()
        .unwrap()
        .generate(600, 8);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit(&x[..500])
        .unwrap();
    let mut m = fit.monitor(0.999).unwrap();
    let ok = m.observe(x[500]).unwrap();
    assert!(!ok.outside && ok.standardized.is_some());
    let gap = m.observe(f64::NAN).unwrap();
    assert!(gap.standardized.is_none() && !gap.outside);
    assert!(!m.is_steady()); // a missing reading re-opens the covariance
    let spike = m.observe(x[502] + 3.0).unwrap();
    assert!(spike.outside && spike.standardized.unwrap() > 5.0);
    assert!(m.observe(f64::INFINITY).is_err());
    assert_eq!(m.next_index(), 503);
}

/// A model written down rather than fitted: AR(1) forecasts follow the textbook formulas
/// (Brockwell & Davis, Introduction to Time Series and Forecasting, §3.3; from memory):
/// mean `μ + φ^h (x_n − μ)`, variance `σ² (1 − φ^{2h}) / (1 − φ²)`.
#[test]
fn known_model_forecasts_follow_the_ar1_formulas() {
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let (phi, mu, s2) = (0.8, 88.0, 0.04);
    let model = KnownModel::new(&bp, &[(Term::Mean, mu), (Term::Ar(1), phi)], s2).unwrap();
    assert_eq!(model.coefficients()[0], (Term::Ar(1), phi)); // canonical order
    let history = [87.5, 88.3, f64::NAN, 88.9, 88.6];
    let fc = model
        .forecast_from_history(&history, &[], 6, &[0.95], &[])
        .unwrap();
    for (h, st) in fc.steps.iter().enumerate() {
        let h = (h + 1) as i32;
        let mean = mu + phi.powi(h) * (88.6 - mu);
        let var = s2 * (1.0 - phi.powi(2 * h)) / (1.0 - phi * phi);
        assert!((st.mean - mean).abs() < 1e-12, "step {h}");
        assert!((st.sd * st.sd - var).abs() < 1e-12, "step {h}");
    }
}

/// The coefficients and σ² of a fitted seasonal model, given back as a known model,
/// monitor and forecast exactly like the fitted model positioned on the same history.
#[test]
fn known_model_matches_the_fitted_model_it_copies() {
    let x = Simulator::builder()
        .autoregressive(&[0.5])
        .moving_average(&[0.3])
        .seasonal(&[], &[-0.5], 24)
        .differencing(0, 1)
        .level(40.0)
        .build()
        .unwrap()
        .generate(24 * 30, 5);
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .seasonal(0, 1, 1, 24)
        .build()
        .unwrap();
    let fit = bp.fit(&x[..24 * 25]).unwrap();
    let given: Vec<(Term, f64)> = fit
        .coefficients()
        .iter()
        .map(|c| (c.term, c.value))
        .collect();
    let known = KnownModel::new(&bp, &given, fit.innovation_variance()).unwrap();
    let a = fit.monitor_from_history(&x, &[], 0.99).unwrap();
    let b = known.monitor_from_history(&x, &[], 0.99).unwrap();
    assert_eq!(
        a.forecast(48, &[0.8]).unwrap(),
        b.forecast(48, &[0.8]).unwrap()
    );
}

/// Every way a written-down model can be wrong is a typed error naming the problem.
#[test]
fn known_model_refuses_bad_coefficients() {
    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
    let ok = [(Term::Ar(1), 0.5), (Term::Ma(1), 0.2), (Term::Mean, 3.0)];
    assert!(KnownModel::new(&bp, &ok, 1.0).is_ok());
    type Case<'a> = (&'a [(Term, f64)], f64, &'a str);
    let cases: [Case; 7] = [
        (&ok[..2], 1.0, "no value given for mean"),
        (
            &[ok[0], ok[1], ok[2], (Term::Ar(2), 0.1)],
            1.0,
            "is not a term",
        ),
        (
            &[ok[0], ok[1], ok[2], (Term::Ar(1), 0.1)],
            1.0,
            "given twice",
        ),
        (
            &[(Term::Ar(1), f64::NAN), ok[1], ok[2]],
            1.0,
            "must be finite",
        ),
        (
            &[(Term::Ar(1), 1.0), ok[1], ok[2]],
            1.0,
            "AR coefficients are not stationary",
        ),
        (
            &[ok[0], (Term::Ma(1), -1.5), ok[2]],
            1.0,
            "MA coefficients are not invertible",
        ),
        (&ok, 0.0, "innovation variance"),
    ];
    for (coefs, s2, want) in cases {
        let e = KnownModel::new(&bp, coefs, s2).unwrap_err();
        assert!(
            matches!(e.kind(), lagwise::ErrorKind::InvalidArgument { .. }),
            "{e}"
        );
        assert!(e.to_string().contains(want), "{e} (wanted: {want})");
    }
}
