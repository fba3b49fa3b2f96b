//! The full parameter covariance (`FittedModel::full_covariance`) against the inverse
//! numerical Hessian of the full dense Gaussian negative log-likelihood at the scipy MLE
//! (tests/reference/covariance_fixtures.py): AR(2) + mean and ARMA(1,1) + mean on open
//! datasets, and IMA(1,1) + drift. Standard errors within 1% (the two MLEs and the two
//! finite-difference Hessians differ slightly), correlations within 0.01.

use crate::common::{load_column, load_json};
use lagwise::{Blueprint, Term};

#[test]
fn full_covariance_matches_dense_hessian() {
    let fx = load_json("covariance.json");
    for case in fx["cases"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let spec = &case["spec"];
        let u = |k: &str| spec[k].as_u64().unwrap() as usize;
        let x = load_column(case["data"].as_str().unwrap());
        let fit = Blueprint::builder()
            .nonseasonal(u("p"), u("d"), u("q"))
            .mean_term(spec["mean"].as_bool().unwrap())
            .drift_term(spec["drift"].as_bool().unwrap())
            .build()
            .unwrap()
            .fit(&x)
            .unwrap();
        let full = fit.full_covariance(&x, &[]).unwrap();
        let names: Vec<String> = case["names"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        // Our order: terms, then σ²; the fixture's: its names (same canonical order).
        let ours: Vec<String> = full
            .terms()
            .iter()
            .map(Term::to_string)
            .chain(["sigma2".to_string()])
            .collect();
        assert_eq!(ours, names, "{name}");
        let k = names.len();
        let want: Vec<Vec<f64>> = case["covariance"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| {
                r.as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect()
            })
            .collect();
        let got = full.matrix();
        for i in 0..k {
            let (a, b) = (got[i * k + i].sqrt(), want[i][i].sqrt());
            assert!(
                (a - b).abs() <= 0.01 * b,
                "{name}: standard error of {} {a} vs {b}",
                names[i]
            );
            for j in 0..i {
                let corr = |m: &dyn Fn(usize, usize) -> f64| m(i, j) / (m(i, i) * m(j, j)).sqrt();
                let (ca, cb) = (corr(&|r, c| got[r * k + c]), corr(&|r, c| want[r][c]));
                assert!(
                    (ca - cb).abs() <= 0.01,
                    "{name}: correlation of {} and {}: {ca} vs {cb}",
                    names[i],
                    names[j]
                );
            }
        }
        // The block-diagonal standard errors reported with the coefficients agree with
        // the full ones to first order (well within 2% on these series).
        for t in full.terms() {
            let block = fit.coefficient(*t).unwrap().std_error.unwrap();
            let f = full.std_error(*t).unwrap();
            assert!((block - f).abs() <= 0.02 * f, "{name}: {t}: {block} vs {f}");
        }
    }
}

/// Asked of a conditional fit, or with other readings, the full covariance is refused.
#[test]
fn full_covariance_refuses_what_it_cannot_do() {
    let x = load_column("nile_flow_1871_1970.csv");
    let css = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .estimator(lagwise::Estimator::ConditionalSumOfSquares)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    assert!(css.full_covariance(&x, &[]).is_err());
    let exact = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap();
    let mut other = x.clone();
    other[3] += 1.0;
    let e = exact.full_covariance(&other, &[]).unwrap_err();
    assert!(e.to_string().contains("not the readings"), "{e}");
}
