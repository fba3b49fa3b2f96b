//! Residual health beyond whiteness: Jarque–Bera and McLeod–Li against numpy/scipy
//! computations of the published definitions on open datasets
//! (tests/reference/shape_fixtures.py; Jarque–Bera cross-checked there against
//! scipy.stats.jarque_bera). Statistics to 1e-9 relative, p-values to 1e-9.

use crate::common::{load_column, load_json};
use lagwise::{Blueprint, jarque_bera, mcleod_li};

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1.0)
}

#[test]
fn jarque_bera_and_mcleod_li_match_their_definitions() {
    let fx = load_json("shape.json");
    for case in fx["cases"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let raw = load_column(case["data"].as_str().unwrap());
        let x: Vec<f64> = match case["transform"].as_str().unwrap() {
            "identity" => raw,
            "log10" => raw.iter().map(|v| v.log10()).collect(),
            "diff" => raw.windows(2).map(|w| w[1] - w[0]).collect(),
            "logdiff" => raw.windows(2).map(|w| w[1].ln() - w[0].ln()).collect(),
            other => panic!("unknown transform {other}"),
        };
        let jb = jarque_bera(&x).unwrap();
        let want = &case["jarque_bera"];
        let f = |k: &str| want[k].as_f64().unwrap();
        assert!(
            close(jb.statistic, f("statistic"), 1e-9),
            "{name}: JB {} vs {}",
            jb.statistic,
            f("statistic")
        );
        assert!((jb.p_value - f("p_value")).abs() < 1e-9, "{name}: JB p");
        assert!(close(jb.skewness, f("skewness"), 1e-9), "{name}: skewness");
        assert!(
            close(jb.excess_kurtosis, f("excess_kurtosis"), 1e-9),
            "{name}: kurtosis"
        );
        for row in case["mcleod_li"].as_array().unwrap() {
            let h = row["lags"].as_u64().unwrap() as usize;
            let ml = mcleod_li(&x, h).unwrap();
            let (q, p) = (
                row["statistic"].as_f64().unwrap(),
                row["p_value"].as_f64().unwrap(),
            );
            assert!(
                close(ml.statistic, q, 1e-9),
                "{name} H={h}: Q {} vs {q}",
                ml.statistic
            );
            assert!(
                (ml.p_value - p).abs() < 1e-9,
                "{name} H={h}: p {} vs {p}",
                ml.p_value
            );
            assert_eq!(ml.lags, h);
        }
    }
}

/// The residual check carries both tests on the standardized residuals, and the report
/// prints them; bad input is refused with typed errors.
#[test]
fn residual_check_carries_the_health_tests() {
    let x = load_column("lake_huron_level_1875_1972.csv");
    let fit = Blueprint::builder()
        .nonseasonal(2, 0, 0)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    let check = fit.residual_check(10, 0.05).unwrap();
    let present: Vec<f64> = fit.standardized_residuals().to_vec();
    assert_eq!(check.normality, Some(jarque_bera(&present).unwrap()));
    assert_eq!(
        check.variance_change,
        Some(mcleod_li(&present, 10).unwrap())
    );
    let line = check.health_line();
    assert!(
        line.contains("Jarque–Bera") && line.contains("McLeod–Li Q²"),
        "{line}"
    );
    assert!(fit.to_string().contains(&line));
    assert!(jarque_bera(&[1.0; 20]).is_err());
    assert!(jarque_bera(&[1.0, 2.0, f64::INFINITY, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]).is_err());
    assert!(mcleod_li(&x, 0).is_err());
    assert!(mcleod_li(&x[..12], 11).is_err());
    // ±1 alternating: the squares are constant, nothing to test.
    let alternating: Vec<f64> = (0..40)
        .map(|t| if t % 2 == 0 { 1.0 } else { -1.0 })
        .collect();
    assert!(mcleod_li(&alternating, 5).is_err());
}
