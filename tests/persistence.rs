//! Storage: round trips are bit-exact, and every kind of corrupt document is refused
//! with an error that says what is wrong.

use crate::common::test_path;
use lagwise::{Blueprint, ErrorKind, FittedModel, Simulator};
use proptest::prelude::*;

fn sample_fit(kind: usize, seed: u64) -> FittedModel {
    match kind {
        0 => {
            let x = Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.2])
                .level(70.0)
                .build()
                .unwrap()
                .generate(300, seed);
            Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .build()
                .unwrap()
                .fit(&x)
                .unwrap()
        }
        1 => {
            let mut x = Simulator::builder()
                .moving_average(&[-0.4])
                .differencing(1, 0)
                .build()
                .unwrap()
                .generate(300, seed);
            x[298] = f64::NAN;
            Blueprint::builder()
                .nonseasonal(0, 1, 1)
                .drift_term(true)
                .build()
                .unwrap()
                .fit(&x)
                .unwrap()
        }
        _ => {
            let x = Simulator::builder()
                .autoregressive(&[0.5])
                .seasonal(&[], &[-0.5], 8)
                .differencing(0, 1)
                .build()
                .unwrap()
                .generate(300, seed);
            Blueprint::builder()
                .nonseasonal(1, 0, 0)
                .seasonal(0, 1, 1, 8)
                .build()
                .unwrap()
                .fit(&x)
                .unwrap()
        }
    }
}

fn bits(f: &lagwise::Forecast) -> Vec<u64> {
    f.steps
        .iter()
        .flat_map(|s| [s.mean.to_bits(), s.sd.to_bits()])
        .collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(12))]

    #[test]
    fn model_round_trip_is_bit_exact(kind in 0usize..3, seed in any::<u64>()) {
        let fit = sample_fit(kind, seed);
        let text = lagwise::model_to_json(&fit).unwrap();
        let back = lagwise::model_from_json(&text).unwrap();
        prop_assert_eq!(bits(&back.forecast(20, &[0.9]).unwrap()), bits(&fit.forecast(20, &[0.9]).unwrap()));
        prop_assert_eq!(back.coefficients(), fit.coefficients());
        // Monitors resume exactly where they were saved.
        let mut live = fit.monitor(0.99).unwrap();
        live.observe_batch(&[1.0, f64::NAN, 2.0]).unwrap();
        let saved = lagwise::monitor_to_json(&live).unwrap();
        let mut resumed = lagwise::monitor_from_json(&saved).unwrap();
        let a = live.observe(3.0).unwrap();
        let b = resumed.observe(3.0).unwrap();
        prop_assert_eq!(a.predicted.to_bits(), b.predicted.to_bits());
        prop_assert_eq!(a.sd.to_bits(), b.sd.to_bits());
    }
}

/// Stored without residuals (the default) a model is small and forecasts bit-exactly but
/// cannot re-run its residual check, and says so; kept, the check is the original's.
#[test]
fn residuals_are_stored_only_when_asked() {
    let fit = sample_fit(0, 9);
    let light = lagwise::model_to_json(&fit).unwrap();
    let full = lagwise::model_to_json_keeping_residuals(&fit).unwrap();
    assert!(
        light.len() * 4 < full.len(),
        "{} vs {} bytes",
        light.len(),
        full.len()
    );
    let back = lagwise::model_from_json(&light).unwrap();
    assert!(!back.has_residuals() && back.residuals().is_empty());
    let e = back.residual_check(10, 0.05).unwrap_err();
    assert!(
        e.to_string().contains("model_to_json_keeping_residuals"),
        "{e}"
    );
    assert!(back.to_string().contains("residuals: not stored"));
    assert_eq!(
        back.forecast(10, &[0.9]).unwrap(),
        fit.forecast(10, &[0.9]).unwrap()
    );
    let kept = lagwise::model_from_json(&full).unwrap();
    assert!(kept.has_residuals());
    assert_eq!(
        kept.residual_check(10, 0.05).unwrap(),
        fit.residual_check(10, 0.05).unwrap()
    );
}

fn refused(text: &str) -> String {
    match lagwise::model_from_json(text).unwrap_err().into_kind() {
        ErrorKind::CorruptStore { message, .. } => message,
        other => panic!("expected CorruptStore, got {other:?}"),
    }
}

#[test]
fn corrupt_documents_are_refused_with_reasons() {
    let fit = sample_fit(0, 5);
    let text = lagwise::model_to_json_keeping_residuals(&fit).unwrap();
    let mut doc: serde_json::Value = serde_json::from_str(&text).unwrap();

    assert!(
        refused(&text.replace("\"version\":1", "\"version\":2"))
            .contains("unknown format version 2")
    );
    assert!(
        refused(&text.replace("lagwise.fitted-model", "lagwise.monitor"))
            .contains("expected a lagwise.fitted-model")
    );
    assert!(refused("{not json").contains("not a lagwise document"));

    let mut missing = doc.clone();
    missing["body"]
        .as_object_mut()
        .unwrap()
        .remove("innovation_variance");
    assert!(refused(&missing.to_string()).contains("innovation_variance"));

    let mut short = doc.clone();
    short["body"]["residuals"].as_array_mut().unwrap().pop();
    assert!(refused(&short.to_string()).contains("residuals"));

    let mut explosive = doc.clone();
    explosive["body"]["coefficients"][0]["value"] = serde_json::json!(1.5);
    assert!(refused(&explosive.to_string()).contains("not stationary"));

    let mut tampered = doc.clone();
    tampered["body"]["forecaster"]["sigma2"] = serde_json::json!(123.0);
    assert!(refused(&tampered.to_string()).contains("does not match"));

    doc["body"]["blueprint"]["period"] = serde_json::json!(0);
    doc["body"]["blueprint"]["seasonal_d"] = serde_json::json!(1);
    assert!(refused(&doc.to_string()).contains("period"));

    // Monitors too.
    let m = fit.monitor(0.99).unwrap();
    let mut md: serde_json::Value =
        serde_json::from_str(&lagwise::monitor_to_json(&m).unwrap()).unwrap();
    md["body"]["state"]["s"]
        .as_array_mut()
        .unwrap()
        .push(serde_json::json!(0.0));
    assert!(lagwise::monitor_from_json(&md.to_string()).is_err());
}

/// Golden file written by version 1 of the format (tests/data/golden_model_v1.json,
/// made once with `cargo run --example write_golden`): it must stay loadable and give the
/// forecasts recorded beside it.
#[test]
fn golden_v1_model_still_loads() {
    let text = std::fs::read_to_string(test_path("data/golden_model_v1.json")).unwrap();
    let fit = lagwise::model_from_json(&text).unwrap();
    let recorded: Vec<f64> = std::fs::read_to_string(test_path("data/golden_model_v1.forecast"))
        .unwrap()
        .split_whitespace()
        .map(|v| v.parse().unwrap())
        .collect();
    let fc = fit.forecast(recorded.len() / 2, &[0.95]).unwrap();
    for (step, pair) in fc.steps.iter().zip(recorded.chunks(2)) {
        assert_eq!(step.mean, pair[0]);
        assert_eq!(step.sd, pair[1]);
    }
}
