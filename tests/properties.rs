//! Property tests (proptest) for the correlogram and portmanteau layer.

use lagwise::{Correlogram, PortmanteauScan, cross_correlogram};
use proptest::prelude::*;

/// Finite readings with a sprinkling of NaN (missing).
fn readings() -> impl Strategy<Value = Vec<f64>> {
    prop::collection::vec(prop_oneof![9 => -1e6f64..1e6, 1 => Just(f64::NAN)], 3..200)
}

fn non_constant(x: &[f64]) -> bool {
    let p: Vec<f64> = x.iter().copied().filter(|v| !v.is_nan()).collect();
    p.len() >= 2 && p.iter().any(|v| *v != p[0])
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn acf_basic_identities(x in readings()) {
        prop_assume!(non_constant(&x));
        let h = (x.len() - 1).min(20);
        let cg = Correlogram::compute(&x, h).unwrap();
        prop_assert_eq!(cg.autocorrelations().values()[0], 1.0);
        for r in cg.autocorrelations().values() { prop_assert!(r.abs() <= 1.0); }
        for p in cg.partial_autocorrelations().values() { prop_assert!(p.abs() <= 1.0); }
        if h >= 1 && !cg.partial_autocorrelations().is_empty() {
            prop_assert!((cg.partial_autocorrelations().values()[0] - cg.autocorrelations().values()[1]).abs() < 1e-12);
        }
    }

    #[test]
    fn acf_affine_invariance(x in readings(), a in -1e3f64..1e3, b in 0.01f64..100.0) {
        prop_assume!(non_constant(&x));
        let h = (x.len() - 1).min(10);
        let base = Correlogram::compute(&x, h).unwrap();
        let up: Vec<f64> = x.iter().map(|v| a + b * v).collect();
        let down: Vec<f64> = x.iter().map(|v| a - b * v).collect();
        prop_assume!(non_constant(&up) && non_constant(&down));
        let cu = Correlogram::compute(&up, h).unwrap();
        let cd = Correlogram::compute(&down, h).unwrap();
        for k in 0..=h {
            prop_assert!((cu.autocorrelations().values()[k] - base.autocorrelations().values()[k]).abs() < 1e-8);
            prop_assert!((cd.autocorrelations().values()[k] - base.autocorrelations().values()[k]).abs() < 1e-8);
        }
        // Sign flip of one series flips the cross-correlation.
        let cc = cross_correlogram(&x, &up, h.min(5)).unwrap();
        let cf = cross_correlogram(&x, &down, h.min(5)).unwrap();
        for (p, q) in cc.correlations().iter().zip(cf.correlations()) {
            prop_assert!((p + q).abs() < 1e-8);
        }
    }

    #[test]
    fn portmanteau_orderings(x in readings(), fitted in 0usize..4) {
        prop_assume!(non_constant(&x));
        let m = x.iter().filter(|v| !v.is_nan()).count();
        prop_assume!(m >= 3);
        let h = (m - 1).min(x.len() - 1).min(15);
        let scan = PortmanteauScan::compute(&x, h, fitted).unwrap();
        for row in scan.rows() {
            prop_assert!(row.ljung_box >= row.box_pierce - 1e-9 * row.box_pierce.abs());
            for p in [row.ljung_box_p_value, row.box_pierce_p_value].into_iter().flatten() {
                prop_assert!((0.0..=1.0).contains(&p));
            }
            prop_assert_eq!(row.ljung_box_p_value.is_some(), row.lag > fitted);
        }
    }

    #[test]
    fn never_panics_on_any_input(
        x in prop::collection::vec(prop_oneof![
            Just(f64::NAN), Just(f64::INFINITY), Just(0.0), Just(1e308), Just(-1e308),
            Just(1e-308), -10.0f64..10.0], 0..40),
        h in 0usize..50, fitted in 0usize..60)
    {
        let _ = Correlogram::compute(&x, h);
        let _ = PortmanteauScan::compute(&x, h, fitted);
        let _ = cross_correlogram(&x, &x, h);
    }
}
