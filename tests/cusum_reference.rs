//! CUSUM run lengths against tests/reference/cusum_fixtures.py (numpy/scipy): the
//! one-sided chart by the integral equation on 128 Gauss–Legendre points (a method
//! independent of the library's Markov chain), the two-sided scheme by direct simulation
//! (20,000 runs per case), and thresholds for wanted run lengths. Published values
//! (from memory, the usual table for k = ½): h = 4 → 168, h = 5 → 465 readings between
//! false signals; h = 5 → 10.4 readings to catch a one-sigma shift.

use crate::common::load_json;
use lagwise::{cusum_run_length, cusum_threshold};

#[test]
fn two_sided_run_lengths_match_the_integral_equation() {
    let fx = load_json("cusum.json");
    let rows = fx["one_sided"].as_array().unwrap();
    let one = |k: f64, h: f64, mu: f64| -> f64 {
        rows.iter()
            .find(|r| r["k"] == k && r["h"] == h && r["mu"] == mu)
            .map(|r| r["run_length"].as_f64().unwrap())
            .unwrap()
    };
    let mut checked = 0;
    for r in rows {
        let (k, h, mu) = (
            r["k"].as_f64().unwrap(),
            r["h"].as_f64().unwrap(),
            r["mu"].as_f64().unwrap(),
        );
        if mu < 0.0 {
            continue;
        }
        let want = 1.0 / (1.0 / one(k, h, mu) + 1.0 / one(k, h, -mu));
        let got = cusum_run_length(k, h, mu).unwrap();
        assert!(
            (got / want - 1.0).abs() < 1e-5,
            "k {k} h {h} mu {mu}: {got} vs {want}"
        );
        checked += 1;
    }
    assert_eq!(checked, 48);
}

#[test]
fn two_sided_run_lengths_match_simulation() {
    let fx = load_json("cusum.json");
    for r in fx["two_sided_simulated"].as_array().unwrap() {
        let f = |key: &str| r[key].as_f64().unwrap();
        let got = cusum_run_length(f("k"), f("h"), f("mu")).unwrap();
        // Four standard errors of the simulated mean, plus 1% for the two-chart
        // combination (it ignores the rare case where both charts are above 0).
        let allowed = 4.0 * f("se") + 0.01 * f("mean");
        assert!(
            (got - f("mean")).abs() <= allowed,
            "k {} h {} mu {}: {got} vs simulated {} ± {}",
            f("k"),
            f("h"),
            f("mu"),
            f("mean"),
            f("se")
        );
    }
}

#[test]
fn thresholds_match_the_reference() {
    let fx = load_json("cusum.json");
    for r in fx["thresholds"].as_array().unwrap() {
        let f = |key: &str| r[key].as_f64().unwrap();
        let h = cusum_threshold(f("k"), f("run_length")).unwrap();
        assert!((h - f("h")).abs() < 1e-4, "{h} vs {}", f("h"));
        let back = cusum_run_length(f("k"), h, 0.0).unwrap();
        assert!((back / f("run_length") - 1.0).abs() < 1e-5);
    }
    // The usual table (from memory): k = ½, h = 4 → 168; h = 5 → 465.
    assert!((cusum_run_length(0.5, 4.0, 0.0).unwrap() - 168.0).abs() < 0.5);
    assert!((cusum_run_length(0.5, 5.0, 0.0).unwrap() - 465.0).abs() < 0.5);
}
