//! Diagnostics serialise for dashboards: correlograms, cross-correlograms, portmanteau
//! scans, residual checks, the search account, forecasts and monitor checks go to JSON
//! and back unchanged (compared as JSON text, since NaN ≠ NaN), missing values are
//! `null`, and a document whose parts do not fit together is refused, not trusted.

use lagwise::{
    Blueprint, Correlogram, CrossCorrelogram, Forecast, PortmanteauScan, ReadingCheck,
    ResidualCheck, SearchOutcome, SearchSettings, Simulator, cross_correlogram, search_orders,
};
use serde::{Serialize, de::DeserializeOwned};

fn round_trip<T: Serialize + DeserializeOwned>(x: &T) -> String {
    let text = serde_json::to_string(x).unwrap();
    let back: T = serde_json::from_str(&text).unwrap();
    assert_eq!(serde_json::to_string(&back).unwrap(), text);
    text
}

#[test]
fn diagnostics_round_trip() {
    let mut x = Simulator::builder()
        .autoregressive(&[0.6])
        .level(80.0)
        .build()
        .unwrap()
        .generate(400, 21);
    x[17] = f64::NAN;
    let cg = Correlogram::compute(&x, 12).unwrap();
    let text = round_trip(&cg);
    assert!(
        text.contains("\"autocorrelation\":{\"first_lag\":0,\"values\":[1.0"),
        "{text}"
    );
    assert!(text.contains("\"partial\":{\"first_lag\":1"), "{text}");
    round_trip::<CrossCorrelogram>(&cross_correlogram(&x, &x, 5).unwrap());
    round_trip::<PortmanteauScan>(&PortmanteauScan::compute(&x, 10, 1).unwrap());
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit(&x[..350])
        .unwrap();
    let check: ResidualCheck = fit.residual_check(10, 0.05).unwrap();
    let text = round_trip(&check);
    for field in [
        "\"white\"",
        "\"band\"",
        "\"portmanteau\"",
        "\"normality\"",
        "\"variance_change\"",
    ] {
        assert!(text.contains(field), "{field} missing from {text}");
    }
    round_trip::<Forecast>(&fit.forecast(8, &[0.8, 0.95]).unwrap());
    let mut watch = fit.monitor(0.99).unwrap();
    let checks: Vec<ReadingCheck> = watch.observe_batch(&[x[350], f64::NAN, x[352]]).unwrap();
    let text = round_trip(&checks);
    assert!(text.contains("\"reading\":null"), "{text}");
    let outcome: SearchOutcome = search_orders(&x, &SearchSettings::default()).unwrap();
    let text = serde_json::to_string(&outcome).unwrap();
    let back: SearchOutcome = serde_json::from_str(&text).unwrap();
    assert_eq!(back.candidates, outcome.candidates);
    assert_eq!(back.explanation, outcome.explanation);
    assert_eq!(
        back.model.forecast(4, &[0.9]).unwrap(),
        outcome.model.forecast(4, &[0.9]).unwrap()
    );
}

#[test]
fn documents_that_do_not_fit_together_are_refused() {
    let x: Vec<f64> = (0..100).map(|t| ((t * 37) % 11) as f64).collect();
    let cg: serde_json::Value = serde_json::to_value(Correlogram::compute(&x, 5).unwrap()).unwrap();
    let mut empty = cg.clone();
    empty["autocorrelation"]["values"] = serde_json::json!([]);
    assert!(serde_json::from_value::<Correlogram>(empty).is_err());
    let mut shifted = cg.clone();
    shifted["partial"]["first_lag"] = serde_json::json!(0);
    assert!(serde_json::from_value::<Correlogram>(shifted).is_err());
    let scan: serde_json::Value =
        serde_json::to_value(PortmanteauScan::compute(&x, 6, 0).unwrap()).unwrap();
    let mut gap = scan.clone();
    gap["rows"].as_array_mut().unwrap().remove(2);
    assert!(serde_json::from_value::<PortmanteauScan>(gap).is_err());
    let cc: serde_json::Value =
        serde_json::to_value(cross_correlogram(&x, &x, 3).unwrap()).unwrap();
    let mut short = cc.clone();
    short["correlation"].as_array_mut().unwrap().pop();
    assert!(serde_json::from_value::<CrossCorrelogram>(short).is_err());
}
