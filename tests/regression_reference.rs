//! Regression with ARMA errors: the regression layer's numerics on NIST's Longley data.

use crate::common::test_path;
use lagwise::{Blueprint, Term};

/// NIST StRD linear regression "Longley" (higher difficulty): with white errors the
/// coefficients must match NIST's certified values. Certified values recalled from
/// memory (NIST StRD Longley page): coefficients for intercept, GNP deflator, GNP,
/// unemployed, armed forces, population, year, and their standard errors.
/// NIST's standard errors use s² = SS/(n − 7); lagwise's use the ML σ² = SS/n, so ours
/// are scaled by √(n/(n − 7)) before comparing.
#[test]
fn longley_certified_values() {
    let text = std::fs::read_to_string(test_path("data/longley_nist_scaling.csv")).unwrap();
    let rows: Vec<Vec<f64>> = text
        .lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').map(|v| v.trim().parse().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), 16);
    let col = |j: usize| rows.iter().map(|r| r[j]).collect::<Vec<f64>>();
    // CSV columns: year, gnp_deflator, gnp, unemployed, armed_forces, population, employed
    let y = col(6);
    let x = [col(1), col(2), col(3), col(4), col(5), col(0)];
    let xs: Vec<&[f64]> = x.iter().map(|c| c.as_slice()).collect();
    let fit = Blueprint::builder()
        .nonseasonal(0, 0, 0)
        .exogenous(6)
        .build()
        .unwrap()
        .fit_regression(&y, &xs)
        .unwrap();
    let certified = [
        (Term::Mean, -3482258.63459582, 890420.383607373),
        (Term::Exogenous(1), 15.0618722713733, 84.9149257747669),
        (
            Term::Exogenous(2),
            -0.358191792925910e-01,
            0.334910077722432e-01,
        ),
        (Term::Exogenous(3), -2.02022980381683, 0.488399681651699),
        (Term::Exogenous(4), -1.03322686717359, 0.214274163161675),
        (
            Term::Exogenous(5),
            -0.511041056535807e-01,
            0.226073200069370,
        ),
        (Term::Exogenous(6), 1829.15146461355, 455.478499142212),
    ];
    let scale = (16.0f64 / 9.0).sqrt();
    for (term, value, se) in certified {
        let c = fit.coefficient(term).unwrap();
        assert!(
            (c.value - value).abs() <= 1e-8 * value.abs(),
            "{term}: {} vs {value}",
            c.value
        );
        let got_se = c.std_error.unwrap() * scale;
        assert!(
            (got_se - se).abs() <= 1e-7 * se,
            "{term} se: {got_se} vs {se}"
        );
    }
    // Residual standard deviation 304.854073561965 (certified, from memory), on n − 7 df.
    let sd = (fit.innovation_variance() * 16.0 / 9.0).sqrt();
    assert!((sd - 304.854073561965).abs() < 1e-7 * 304.85, "sd {sd}");
}

/// Regression columns are validated: wrong count, wrong length, non-finite values.
#[test]
fn regressor_shapes_are_checked() {
    let y: Vec<f64> = (0..50)
        .map(|t| (t as f64 * 0.7).sin() + 0.01 * t as f64)
        .collect();
    let x: Vec<f64> = (0..50).map(|t| t as f64).collect();
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .exogenous(1)
        .build()
        .unwrap();
    assert!(bp.fit(&y).is_err());
    assert!(bp.fit_regression(&y, &[&x[..49]]).is_err());
    let mut bad = x.clone();
    bad[3] = f64::NAN;
    assert!(bp.fit_regression(&y, &[&bad]).is_err());
    assert!(bp.fit_regression(&y, &[&x, &x]).is_err());
    assert!(bp.fit_regression(&y, &[&x]).is_ok());
}
