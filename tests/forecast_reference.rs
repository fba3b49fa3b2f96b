//! Forecasts and intervals against the exact best linear predictor computed from the
//! dense covariance by numpy/scipy (tests/reference/forecast_fixtures.py): ARMA,
//! integrated and seasonally differenced models, interior and trailing missing readings.
//! Required agreement: 1e-8 relative on means and interval half-widths.

use crate::common::{floats, load_json};
use lagwise::{Blueprint, Estimator, Term};

#[test]
fn forecasts_equal_dense_best_linear_predictor() {
    let fx = load_json("forecasts.json");
    for case in fx["cases"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let (ar, ma) = (floats(&case["ar"]), floats(&case["ma"]));
        let (sar, sma) = (floats(&case["seasonal_ar"]), floats(&case["seasonal_ma"]));
        let u = |k: &str| case[k].as_u64().unwrap() as usize;
        let mut b = Blueprint::builder();
        b.nonseasonal(ar.len(), u("d"), ma.len())
            .seasonal(sar.len(), u("D"), sma.len(), u("s"))
            .mean_term(false)
            .estimator(Estimator::ExactLikelihood);
        for (i, v) in ar.iter().enumerate() {
            b.hold(Term::Ar(i + 1), *v);
        }
        for (i, v) in ma.iter().enumerate() {
            b.hold(Term::Ma(i + 1), *v);
        }
        for (i, v) in sar.iter().enumerate() {
            b.hold(Term::SeasonalAr(i + 1), *v);
        }
        for (i, v) in sma.iter().enumerate() {
            b.hold(Term::SeasonalMa(i + 1), *v);
        }
        let y = floats(&case["series"]);
        let fit = b.build().unwrap().fit(&y).unwrap();
        let h = u("horizon");
        let fc = fit.forecast(h, &[0.95]).unwrap();
        let sigma = fit.innovation_variance().sqrt();
        let (means, sds) = (floats(&case["mean"]), floats(&case["sd_over_sigma"]));
        for (j, step) in fc.steps.iter().enumerate() {
            let tol = 1e-8 * means[j].abs().max(1.0);
            assert!(
                (step.mean - means[j]).abs() < tol,
                "{name} h={}: mean {} vs {}",
                j + 1,
                step.mean,
                means[j]
            );
            let got = step.sd / sigma;
            assert!(
                (got - sds[j]).abs() < 1e-8 * sds[j],
                "{name} h={}: sd {got} vs {}",
                j + 1,
                sds[j]
            );
            let band = step.intervals[0];
            let half = 0.5 * (band.upper - band.lower);
            assert!((half - 1.959963984540054 * step.sd).abs() < 1e-9 * half);
        }
    }
}
