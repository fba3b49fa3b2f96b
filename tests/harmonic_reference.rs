//! Regression on harmonic terms with ARMA errors against the dense GLS and best linear
//! predictor computed by numpy/scipy (tests/reference/harmonic_fixtures.py): a daily and a
//! weekly cycle with ARMA(1,1) errors and interior gaps, a daily cycle with AR(1) errors
//! and trailing missing readings, and a weekly cycle beside a seasonal difference at
//! period 96. The ARMA coefficients are held at the fixture's values, so the GLS
//! coefficients, σ², the exact log-likelihood and the day-ahead forecasts (whose harmonic
//! terms the library generates itself) are closed-form. Required agreement: 1e-8
//! relative on coefficients, σ², forecast means and standard deviations, 1e-9 on log L.

use crate::common::{floats, load_json};
use lagwise::{Blueprint, Estimator, Term};

fn term_of(label: &str) -> Term {
    if label == "mean" {
        return Term::Mean;
    }
    // "cycle96.cos.1"
    let rest = label.strip_prefix("cycle").unwrap();
    let parts: Vec<&str> = rest.split('.').collect();
    let (period, harmonic) = (parts[0].parse().unwrap(), parts[2].parse().unwrap());
    match parts[1] {
        "cos" => Term::CycleCos { period, harmonic },
        _ => Term::CycleSin { period, harmonic },
    }
}

#[test]
fn harmonic_regression_equals_dense_gls_and_best_linear_predictor() {
    let fx = load_json("harmonics.json");
    let cases = fx["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 3);
    for case in cases {
        let name = case["name"].as_str().unwrap();
        let (ar, ma) = (floats(&case["ar"]), floats(&case["ma"]));
        let (sar, sma) = (floats(&case["seasonal_ar"]), floats(&case["seasonal_ma"]));
        let u = |k: &str| case[k].as_u64().unwrap() as usize;
        let mut b = Blueprint::builder();
        b.nonseasonal(ar.len(), 0, ma.len())
            .seasonal(sar.len(), u("D"), sma.len(), u("s"))
            .mean_term(case["mean"].as_bool().unwrap())
            .estimator(Estimator::ExactLikelihood);
        for c in case["cycles"].as_array().unwrap() {
            let c = floats(c);
            b.cycle(c[0] as usize, c[1] as usize);
        }
        for (i, v) in ar.iter().enumerate() {
            b.hold(Term::Ar(i + 1), *v);
        }
        for (i, v) in ma.iter().enumerate() {
            b.hold(Term::Ma(i + 1), *v);
        }
        for (i, v) in sma.iter().enumerate() {
            b.hold(Term::SeasonalMa(i + 1), *v);
        }
        let bp = b.build().unwrap();
        let y = floats(&case["series"]);
        let fit = bp.fit(&y).unwrap();
        // The regression terms, in the fixture's (and the blueprint's) order.
        let labels: Vec<String> = case["terms"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        let regression: Vec<Term> = bp.terms().into_iter().filter(|t| !t.is_arma()).collect();
        assert_eq!(
            regression.iter().map(|t| t.to_string()).collect::<Vec<_>>(),
            labels,
            "{name}"
        );
        for (label, want) in labels.iter().zip(floats(&case["beta"])) {
            let got = fit.coefficient(term_of(label)).unwrap().value;
            assert!(
                (got - want).abs() <= 1e-8 * want.abs().max(1.0),
                "{name} {label}: {got} vs {want}"
            );
        }
        let s2 = case["innovation_variance"].as_f64().unwrap();
        assert!(
            (fit.innovation_variance() - s2).abs() <= 1e-8 * s2,
            "{name} sigma2 {} vs {s2}",
            fit.innovation_variance()
        );
        let ll = case["log_likelihood"].as_f64().unwrap();
        let got = fit.log_likelihood().value();
        assert!(
            (got - ll).abs() <= 1e-9 * ll.abs(),
            "{name} log L {got} vs {ll}"
        );
        let h = u("horizon");
        let fc = fit.forecast(h, &[0.9]).unwrap();
        let sigma = fit.innovation_variance().sqrt();
        let (means, sds) = (
            floats(&case["forecast_mean"]),
            floats(&case["forecast_sd_over_sigma"]),
        );
        for (j, step) in fc.steps.iter().enumerate() {
            assert!(
                (step.mean - means[j]).abs() <= 1e-8 * means[j].abs().max(1.0),
                "{name} h={}: mean {} vs {}",
                j + 1,
                step.mean,
                means[j]
            );
            let got = step.sd / sigma;
            assert!(
                (got - sds[j]).abs() <= 1e-8 * sds[j],
                "{name} h={}: sd {got} vs {}",
                j + 1,
                sds[j]
            );
        }
    }
}
