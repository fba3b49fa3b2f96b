//! Estimators against asymptotic theory, Monte Carlo, invariances and bad input.

use lagwise::{Blueprint, ErrorKind, Estimator, FitWorkspace, Simulator, Term};
use proptest::prelude::*;

fn fit_ar1(x: &[f64], ws: &mut FitWorkspace) -> lagwise::FittedModel {
    Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit_with(x, ws)
        .unwrap()
}

/// Brockwell & Davis, Introduction to Time Series and Forecasting, §5.2 (large-sample
/// distribution of ML estimators): the standard error of φ̂ is ≈ √((1−φ²)/n) for an AR(1) and
/// that of θ̂ ≈ √((1−θ²)/n) for an MA(1). Checked within 8% at n = 5000.
#[test]
fn asymptotic_standard_errors() {
    let n = 5000;
    let x = Simulator::builder()
        .autoregressive(&[0.5])
        .build()
        .unwrap()
        .generate(n, 21);
    let fit = fit_ar1(&x, &mut FitWorkspace::new());
    let se = fit.coefficient(Term::Ar(1)).unwrap().std_error.unwrap();
    let want = ((1.0 - 0.25) / n as f64).sqrt();
    assert!((se / want - 1.0).abs() < 0.08, "AR(1) se {se} vs {want}");

    let y = Simulator::builder()
        .moving_average(&[0.5])
        .build()
        .unwrap()
        .generate(n, 22);
    let fit = Blueprint::builder()
        .nonseasonal(0, 0, 1)
        .build()
        .unwrap()
        .fit(&y)
        .unwrap();
    let se = fit.coefficient(Term::Ma(1)).unwrap().std_error.unwrap();
    assert!((se / want - 1.0).abs() < 0.08, "MA(1) se {se} vs {want}");
}

/// Monte Carlo: nominal 95% intervals φ̂ ± 1.96 standard errors cover the true φ in 93–97% of 600
/// simulated AR(1) series (φ = 0.6, n = 300). Binomial sd at 600 draws ≈ 0.9 points.
#[test]
fn coverage_of_95_percent_intervals() {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .level(10.0)
        .build()
        .unwrap();
    let mut ws = FitWorkspace::new();
    let reps = 600;
    let mut covered = 0;
    for seed in 0..reps {
        let x = sim.generate(300, 10_000 + seed);
        let fit = fit_ar1(&x, &mut ws);
        let c = fit.coefficient(Term::Ar(1)).unwrap();
        if (c.value - 0.6).abs() <= 1.959964 * c.std_error.unwrap() {
            covered += 1;
        }
    }
    let rate = covered as f64 / reps as f64;
    assert!((0.93..=0.97).contains(&rate), "coverage {rate}");
}

/// CSS and exact ML agree within two standard errors on n = 2000 ARMA(1,1) (they are
/// asymptotically equivalent; Brockwell & Davis §5.2).
#[test]
fn css_and_exact_agree() {
    let x = Simulator::builder()
        .autoregressive(&[0.7])
        .moving_average(&[-0.3])
        .level(55.0)
        .build()
        .unwrap()
        .generate(2000, 31);
    let spec = |e| {
        Blueprint::builder()
            .nonseasonal(1, 0, 1)
            .estimator(e)
            .build()
            .unwrap()
    };
    let css = spec(Estimator::ConditionalSumOfSquares).fit(&x).unwrap();
    let ml = spec(Estimator::ExactLikelihood).fit(&x).unwrap();
    for term in [Term::Ar(1), Term::Ma(1), Term::Mean] {
        let (a, b) = (
            css.coefficient(term).unwrap(),
            ml.coefficient(term).unwrap(),
        );
        assert!(
            (a.value - b.value).abs() < 2.0 * b.std_error.unwrap(),
            "{term}: {} vs {}",
            a.value,
            b.value
        );
    }
}

#[test]
fn conditioning_convention_is_documented_one() {
    // CSS conditions on the first p + P·s differenced readings: residuals there are NaN.
    let x = Simulator::builder()
        .autoregressive(&[0.5])
        .seasonal(&[0.3], &[], 4)
        .build()
        .unwrap()
        .generate(200, 3);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .seasonal(1, 0, 0, 4)
        .estimator(Estimator::ConditionalSumOfSquares)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    assert_eq!(fit.reading_counts().conditioned_on, 5);
    assert!(fit.residuals()[..5].iter().all(|v| v.is_nan()));
    assert!(fit.residuals()[5..].iter().all(|v| v.is_finite()));
    assert_eq!(fit.reading_counts().in_likelihood, 195);
}

#[test]
fn bad_input_gets_typed_errors() {
    let ar1 = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let kind = |r: Result<lagwise::FittedModel, lagwise::Error>| r.unwrap_err().into_kind();
    assert!(matches!(
        kind(ar1.fit(&[4.0; 50])),
        ErrorKind::ConstantSeries { .. }
    ));
    assert!(matches!(
        kind(ar1.fit(&[f64::NAN; 50])),
        ErrorKind::AllMissing { .. }
    ));
    assert!(matches!(kind(ar1.fit(&[])), ErrorKind::EmptySeries { .. }));
    assert!(matches!(
        kind(ar1.fit(&[1.0, f64::INFINITY, 2.0])),
        ErrorKind::NonFiniteReading { index: 1, .. }
    ));
    assert!(matches!(
        kind(ar1.fit(&[1.0, 2.0, 1.5])),
        ErrorKind::TooShort { .. }
    ));
    let big = Blueprint::builder()
        .nonseasonal(3, 1, 2)
        .seasonal(0, 1, 1, 12)
        .build()
        .unwrap();
    let x: Vec<f64> = (0..20).map(|t| (t as f64).sin()).collect();
    let e = kind(big.fit(&x));
    assert!(
        matches!(
            e,
            ErrorKind::TooShort { .. } | ErrorKind::InvalidArgument { .. }
        ),
        "{e:?}"
    );
    // Orders beyond the series length.
    let long = Blueprint::builder().nonseasonal(10, 0, 10).build().unwrap();
    let e = kind(long.fit(&x[..15]));
    assert!(
        matches!(
            e,
            ErrorKind::TooShort { .. } | ErrorKind::InvalidArgument { .. }
        ),
        "{e:?}"
    );
    // Specification errors surface at build time.
    for b in [
        Blueprint::builder().seasonal(1, 0, 0, 1).clone(),
        Blueprint::builder()
            .nonseasonal(1, 0, 0)
            .hold(Term::Ar(1), f64::INFINITY)
            .clone(),
    ] {
        assert!(matches!(
            b.build().unwrap_err().kind(),
            ErrorKind::InvalidSpecification { .. }
        ));
    }
    // A constant series after differencing (a straight line with d = 1).
    let line: Vec<f64> = (0..50).map(|t| 2.0 * t as f64).collect();
    let e = kind(
        Blueprint::builder()
            .nonseasonal(0, 1, 1)
            .build()
            .unwrap()
            .fit(&line),
    );
    assert!(matches!(e, ErrorKind::ConstantSeries { .. }), "{e:?}");
}

#[test]
fn held_coefficients_stay_put() {
    let x = Simulator::builder()
        .autoregressive(&[0.5, 0.2])
        .build()
        .unwrap()
        .generate(800, 5);
    let fit = Blueprint::builder()
        .nonseasonal(2, 0, 0)
        .hold(Term::Ar(2), 0.2)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    let c2 = fit.coefficient(Term::Ar(2)).unwrap();
    assert!(c2.held && c2.value == 0.2 && c2.std_error.is_none());
    assert_eq!(fit.estimated_parameters(), 3); // φ₁, mean, σ²
    assert!((fit.coefficient(Term::Ar(1)).unwrap().value - 0.5).abs() < 0.1);
}

fn arbitrary_series() -> impl Strategy<Value = Vec<f64>> {
    (60usize..160, any::<u64>(), 0usize..4).prop_map(|(n, seed, kind)| {
        let sim = match kind {
            0 => Simulator::builder().autoregressive(&[0.995]).build(),
            1 => Simulator::builder()
                .autoregressive(&[0.7])
                .moving_average(&[-0.69])
                .build(),
            2 => Simulator::builder().moving_average(&[0.98]).build(),
            _ => Simulator::builder().autoregressive(&[-0.5, 0.3]).build(),
        };
        sim.unwrap().generate(n, seed)
    })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]

    /// Fitted AR parts are stationary and MA parts invertible, whatever the data
    /// (near-unit roots and near-cancelling AR/MA pairs included).
    #[test]
    fn fits_are_admissible(x in arbitrary_series(), est in 0usize..3) {
        let e = [Estimator::ConditionalSumOfSquares, Estimator::ExactLikelihood, Estimator::StagedLikelihood][est];
        let fit = Blueprint::builder().nonseasonal(1, 0, 1).estimator(e).build().unwrap().fit(&x).unwrap();
        let phi = fit.coefficient(Term::Ar(1)).unwrap().value;
        let theta = fit.coefficient(Term::Ma(1)).unwrap().value;
        prop_assert!(lagwise::is_stationary(&[phi]));
        prop_assert!(lagwise::is_invertible(&[theta]));
        prop_assert!(fit.stages().iter().all(|s| s.iterations <= 200));
    }

    /// x → c·x: σ² scales by c², coefficients unchanged, log L shifts by −n ln|c|.
    #[test]
    fn scale_equivariance(x in arbitrary_series(), c in prop_oneof![0.001f64..0.1, 10.0f64..1000.0]) {
        let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
        let a = bp.fit(&x).unwrap();
        let y: Vec<f64> = x.iter().map(|v| c * v).collect();
        let b = bp.fit(&y).unwrap();
        let pa = a.coefficient(Term::Ar(1)).unwrap().value;
        let pb = b.coefficient(Term::Ar(1)).unwrap().value;
        prop_assert!((pa - pb).abs() < 1e-4, "{pa} vs {pb}");
        prop_assert!((b.innovation_variance() / (c * c * a.innovation_variance()) - 1.0).abs() < 1e-4);
        let n = x.len() as f64;
        let shift = b.log_likelihood().value() - a.log_likelihood().value();
        prop_assert!((shift + n * c.ln()).abs() < 1e-4 * n, "{shift}");
    }

    /// Adding a constant changes only the mean.
    #[test]
    fn shift_changes_only_the_mean(x in arbitrary_series(), k in -1e4f64..1e4) {
        let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
        let a = bp.fit(&x).unwrap();
        let y: Vec<f64> = x.iter().map(|v| v + k).collect();
        let b = bp.fit(&y).unwrap();
        prop_assert!((a.coefficient(Term::Ar(1)).unwrap().value - b.coefficient(Term::Ar(1)).unwrap().value).abs() < 1e-4);
        let dm = b.coefficient(Term::Mean).unwrap().value - a.coefficient(Term::Mean).unwrap().value;
        prop_assert!((dm - k).abs() < 1e-6 * k.abs().max(1.0) + 1e-4, "{dm} vs {k}");
        prop_assert!((a.innovation_variance() / b.innovation_variance() - 1.0).abs() < 1e-4);
    }

    /// The exact likelihood of a stationary model is invariant to time reversal, and
    /// leading/trailing missing readings change nothing.
    #[test]
    fn reversal_and_edge_gaps(x in arbitrary_series(), phi in -0.9f64..0.9, theta in -0.9f64..0.9, lead in 0usize..5, trail in 0usize..5) {
        let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
        let mut ws = FitWorkspace::new();
        let fwd = bp.likelihood_surface(&x).unwrap().exact_log_likelihood_with(&[phi, theta], &mut ws).unwrap();
        let rev: Vec<f64> = x.iter().rev().copied().collect();
        let bwd = bp.likelihood_surface(&rev).unwrap().exact_log_likelihood_with(&[phi, theta], &mut ws).unwrap();
        prop_assert!((fwd - bwd).abs() < 1e-8 * fwd.abs().max(1.0), "{fwd} vs {bwd}");
        let mut padded = vec![f64::NAN; lead];
        padded.extend(&x);
        padded.extend(std::iter::repeat_n(f64::NAN, trail));
        let pad = bp.likelihood_surface(&padded).unwrap().exact_log_likelihood_with(&[phi, theta], &mut ws).unwrap();
        prop_assert!((fwd - pad).abs() < 1e-8 * fwd.abs().max(1.0), "{fwd} vs {pad}");
    }
}

/// Regression test (found in the Kestrel Bay demo): a model without a mean fitted to
/// readings near 88 °C has one huge first innovation (its filter variance is huge too).
/// The residual check must use standardized innovations, or that one value swamps the
/// autocorrelations and a plainly non-white residual series passes as white.
#[test]
fn residual_check_is_not_fooled_by_a_large_first_innovation() {
    let noise = Simulator::builder()
        .autoregressive(&[0.3])
        .innovation_sd(0.1)
        .build()
        .unwrap()
        .generate(600, 3);
    let x: Vec<f64> = noise
        .iter()
        .enumerate()
        .map(|(t, e)| 88.0 + 0.3 * (t as f64 * std::f64::consts::TAU / 8.0).sin() + e)
        .collect();
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .mean_term(false)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    let check = fit.residual_check(16, 0.05).unwrap();
    assert!(!check.white, "{fit}");
}

/// Regression test: residuals are on the caller's scale and centred. For a white-noise
/// model with a mean they are exactly the readings minus the estimated mean (this caught
/// regression coefficients mixed between internal and caller units).
#[test]
fn residuals_are_readings_minus_fit() {
    for level in [0.0, 88.0, -3.0e5] {
        let x = Simulator::builder()
            .level(level)
            .innovation_sd(0.2)
            .build()
            .unwrap()
            .generate(300, 9);
        let fit = Blueprint::builder()
            .nonseasonal(0, 0, 0)
            .build()
            .unwrap()
            .fit(&x)
            .unwrap();
        let mean = fit.coefficient(Term::Mean).unwrap().value;
        for (r, v) in fit.residuals().iter().zip(&x) {
            assert!(
                (r - (v - mean)).abs() < 1e-9 * level.abs().max(1.0),
                "level {level}: {r} vs {}",
                v - mean
            );
        }
        let arma = Blueprint::builder()
            .nonseasonal(1, 0, 1)
            .build()
            .unwrap()
            .fit(&x)
            .unwrap();
        let m = arma.residuals().iter().sum::<f64>() / 300.0;
        assert!(m.abs() < 0.05, "level {level}: residual mean {m}");
    }
}

/// Wald statistics of the coefficients and the residual verdict read off the report: `z = value / sd`,
/// `p = 2(1 − Φ(|z|))` checked against the handbook approximation of erfc (Abramowitz &
/// Stegun 7.1.26, absolute error below 1.5e-7; formula from memory), and a verdict line
/// whose printed p-value, level and verdict agree with each other.
#[test]
fn coefficient_tests_and_verdict_line_are_checkable() {
    let x = Simulator::builder()
        .autoregressive(&[0.6])
        .level(20.0)
        .build()
        .unwrap()
        .generate(600, 77);
    let mut ws = FitWorkspace::new();
    let fit = fit_ar1(&x, &mut ws);
    let erfc = |x: f64| {
        let t = 1.0 / (1.0 + 0.3275911 * x);
        let poly = t
            * (0.254829592
                + t * (-0.284496736 + t * (1.421413741 + t * (-1.453152027 + t * 1.061405429))));
        poly * (-x * x).exp()
    };
    for c in fit.coefficients() {
        let se = c.std_error.expect("standard error");
        let z = c.z_statistic().unwrap();
        assert_eq!(z, c.value / se);
        let want = erfc(z.abs() / std::f64::consts::SQRT_2);
        assert!((c.p_value().unwrap() - want).abs() < 2e-7, "{:?}", c.term);
    }
    let report = fit.to_string();
    assert!(report.contains(" z ") && report.contains(" p"), "{report}");
    let h = fit.default_check_lags();
    let check = fit.residual_check(h, 0.05).unwrap();
    let line = check.verdict_line();
    let p = check.portmanteau.row(h).unwrap().ljung_box_p_value.unwrap();
    assert!(line.contains(&format!("lag H = {h}")), "{line}");
    assert!(line.contains(&format!("p = {p:.4}")), "{line}");
    let (sign, verdict) = if p >= 0.05 {
        ("≥", "→ white")
    } else {
        ("<", "→ NOT white")
    };
    assert!(
        line.contains(&format!("{sign} α = 0.05 {verdict}")),
        "{line}"
    );
    assert_eq!(check.white, p >= 0.05);
    assert!(report.contains(&line), "{report}");
}

/// The likelihood surface of an AR(`p`) + mean over 200 simulated readings.
fn ar_surface(p: usize) -> lagwise::LikelihoodSurface {
    let x = Simulator::builder()
        .autoregressive(&[0.5])
        .build()
        .unwrap()
        .generate(200, 3);
    Blueprint::builder()
        .nonseasonal(p, 0, 0)
        .build()
        .unwrap()
        .likelihood_surface(&x)
        .unwrap()
}

/// A point of the wrong length is the caller's programming error: a documented panic
/// naming both lengths (STYLE: contract violations apart from bad data), while a point
/// outside the admissible region is an ordinary typed error.
#[test]
#[should_panic(expected = "2 coefficients given, the surface has 1 free coefficients")]
fn wrong_point_length_is_a_contract_violation() {
    let surface = ar_surface(1);
    let mut ws = FitWorkspace::new();
    assert!(surface.exact_log_likelihood_with(&[1.5], &mut ws).is_err());
    let _ = surface.exact_log_likelihood_with(&[0.1, 0.2], &mut ws);
}

/// A ragged batch (not a whole number of points) is a contract violation too.
#[test]
#[should_panic(expected = "3 values given; points need 2 free coefficients each")]
fn ragged_batch_is_a_contract_violation() {
    let surface = ar_surface(2);
    let _ = surface.exact_log_likelihoods_with(
        &[0.1, 0.2, 0.3],
        &mut FitWorkspace::new(),
        &mut Vec::new(),
    );
}
