//! The Kalman-filter likelihood against the dense Toeplitz Gaussian density computed by
//! numpy/scipy (tests/reference/likelihood_fixtures.py): ARMA grid up to (3,3), seasonal
//! cases, and series with missing readings. Required agreement: 1e-9 relative.

use crate::common::{floats, load_json};

#[test]
fn kalman_equals_dense_gaussian_density() {
    let fx = load_json("likelihood.json");
    let cases = fx["cases"].as_array().unwrap();
    assert!(cases.len() >= 30);
    for case in cases {
        let label = case["label"].as_str().unwrap();
        let phi = floats(&case["phi"]);
        let theta = floats(&case["theta"]);
        let s2 = case["sigma2"].as_f64().unwrap();
        let x = floats(&case["series"]);
        let want = case["log_likelihood"].as_f64().unwrap();
        let got = lagwise::exact_log_likelihood(&phi, &theta, s2, &x).unwrap();
        assert!(
            (got - want).abs() <= 1e-9 * want.abs(),
            "{label}: {got} vs {want}"
        );
        // The plain covariance recursion, the public reference route, agrees too.
        let plain = lagwise::reference_log_likelihood(&phi, &theta, s2, &x).unwrap();
        assert!(
            (plain - want).abs() <= 1e-9 * want.abs(),
            "{label}: reference route {plain} vs {want}"
        );
    }
}
