//! Gap filling against the dense Gaussian conditional distribution computed by
//! numpy/scipy (tests/reference/smoother_fixtures.py): E[x_miss | x_obs] and
//! Var(x_miss | x_obs) with diffuse initial values, for ARMA, ARIMA (with drift),
//! seasonally differenced and seasonal-AR models, with gaps at the start, inside, at the
//! end and in the first seasonal cycle. Required agreement: 1e-8 (relative to the
//! value's size, at least 1).

use crate::common::{floats, load_json};
use lagwise::{Blueprint, KnownModel, Term};

fn known(case: &serde_json::Value) -> KnownModel {
    let (ar, ma) = (floats(&case["ar"]), floats(&case["ma"]));
    let (sar, sma) = (floats(&case["seasonal_ar"]), floats(&case["seasonal_ma"]));
    let u = |k: &str| case[k].as_u64().unwrap() as usize;
    let (mean, drift) = (
        case["mean"].as_f64().unwrap(),
        case["drift"].as_f64().unwrap(),
    );
    let mut b = Blueprint::builder();
    b.nonseasonal(ar.len(), u("d"), ma.len())
        .mean_term(mean != 0.0)
        .drift_term(drift != 0.0);
    if u("period") > 1 {
        b.seasonal(sar.len(), u("seasonal_d"), sma.len(), u("period"));
    }
    let bp = b.build().unwrap();
    let mut coefs: Vec<(Term, f64)> = Vec::new();
    coefs.extend(ar.iter().enumerate().map(|(i, v)| (Term::Ar(i + 1), *v)));
    coefs.extend(ma.iter().enumerate().map(|(i, v)| (Term::Ma(i + 1), *v)));
    coefs.extend(
        sar.iter()
            .enumerate()
            .map(|(i, v)| (Term::SeasonalAr(i + 1), *v)),
    );
    coefs.extend(
        sma.iter()
            .enumerate()
            .map(|(i, v)| (Term::SeasonalMa(i + 1), *v)),
    );
    if mean != 0.0 {
        coefs.push((Term::Mean, mean));
    }
    if drift != 0.0 {
        coefs.push((Term::Drift, drift));
    }
    KnownModel::new(&bp, &coefs, case["sigma2"].as_f64().unwrap()).unwrap()
}

#[test]
fn filled_readings_equal_the_dense_conditional_distribution() {
    let fx = load_json("smoother.json");
    let mut checked = 0;
    for case in fx["cases"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let x = floats(&case["series"]);
        let model = known(case);
        let fill = model.fill_gaps(&x, &[], &[0.95]).unwrap();
        let want = case["missing"].as_array().unwrap();
        assert!(
            fill.unfilled.is_empty(),
            "{name}: unfilled {:?}",
            fill.unfilled
        );
        assert_eq!(fill.unused_readings, 0, "{name}");
        assert_eq!(fill.readings.len(), want.len(), "{name}");
        for (got, w) in fill.readings.iter().zip(want) {
            let (index, mean, sd) = (
                w["index"].as_u64().unwrap(),
                w["mean"].as_f64().unwrap(),
                w["sd"].as_f64().unwrap(),
            );
            assert_eq!(got.index, index, "{name}");
            let tol = 1e-8 * mean.abs().max(1.0);
            assert!(
                (got.mean - mean).abs() < tol,
                "{name} reading {index}: mean {} vs {mean}",
                got.mean
            );
            assert!(
                (got.sd - sd).abs() < 1e-8 * sd.max(1.0),
                "{name} reading {index}: sd {} vs {sd}",
                got.sd
            );
            let iv = &got.intervals[0];
            assert!(
                (iv.upper - iv.lower - 2.0 * 1.959_963_984_540_054 * got.sd).abs()
                    < 1e-9 * sd.max(1.0)
            );
            assert_eq!(fill.series[index as usize], got.mean);
            checked += 1;
        }
        // Present readings are left as they were.
        for (t, v) in x.iter().enumerate() {
            if !v.is_nan() {
                assert_eq!(fill.series[t], *v, "{name}: reading {t} changed");
            }
        }
    }
    assert!(checked >= 90, "{checked} readings checked");
}

/// Gaps both in the first and the last δ readings: neither direction of the smoother
/// sees every reading; what it cannot fill exactly is reported, not guessed.
#[test]
fn gaps_at_both_ends_of_an_integrated_series_are_reported() {
    let fx = load_json("smoother.json");
    let case = &fx["cases"].as_array().unwrap()[4]; // SARIMA(1,0,0)x(0,1,1)12, gap in cycle 1
    let mut x = floats(&case["series"]);
    let n = x.len();
    x[n - 3] = f64::NAN; // now a gap in the last 12 readings too
    let fill = known(case).fill_gaps(&x, &[], &[0.9]).unwrap();
    assert_eq!(
        fill.unfilled,
        vec![3, 4],
        "the readings before the first full cycle"
    );
    assert!(fill.unused_readings > 0);
    assert!(fill.series[3].is_nan() && fill.series[4].is_nan());
    assert!(fill.readings.iter().any(|r| r.index == (n - 3) as u64));
}

#[test]
fn bad_input_is_refused() {
    let fx = load_json("smoother.json");
    let case = &fx["cases"].as_array().unwrap()[0];
    let model = known(case);
    let mut x = floats(&case["series"]);
    assert!(
        model.fill_gaps(&x, &[], &[1.5]).is_err(),
        "level outside (0, 1)"
    );
    assert!(
        model.fill_gaps(&x, &[&[1.0][..]], &[0.9]).is_err(),
        "a regressor the model lacks"
    );
    x[7] = f64::INFINITY;
    assert!(
        model.fill_gaps(&x, &[], &[0.9]).is_err(),
        "infinite reading"
    );
    assert!(model.fill_gaps(&[], &[], &[0.9]).is_err(), "empty series");
    assert!(
        model.fill_gaps(&[f64::NAN; 5], &[], &[0.9]).is_err(),
        "all missing"
    );
}
