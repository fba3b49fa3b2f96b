//! Property tests (proptest) for the correlogram and portmanteau layer, and for the
//! harmonic terms of long cycles.

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

/// Long cycles: whatever cycles and seasonal differencing are asked for, the blueprint
/// either refuses them with a typed specification error or keeps harmonic terms whose
/// columns, after the seasonal difference, are linearly independent (the left-out
/// harmonics are exactly the removed and duplicated ones). Columns computed here from
/// the textbook formula, the Gram matrix checked by a Cholesky factorisation.
mod cycles {
    use lagwise::{Blueprint, ErrorKind, Term};
    use proptest::prelude::*;

    fn column(term: Term, n: usize) -> Vec<f64> {
        let (period, harmonic, sine) = match term {
            Term::CycleCos { period, harmonic } => (period, harmonic, false),
            Term::CycleSin { period, harmonic } => (period, harmonic, true),
            other => panic!("not a harmonic term: {other}"),
        };
        (0..n)
            .map(|t| {
                let a = std::f64::consts::TAU * (harmonic * t) as f64 / period as f64;
                if sine { a.sin() } else { a.cos() }
            })
            .collect()
    }

    /// Smallest pivot of the Cholesky factorisation of the normalised Gram matrix
    /// (≤ 0 when the columns are dependent).
    fn smallest_pivot(cols: &[Vec<f64>]) -> f64 {
        let k = cols.len();
        let norms: Vec<f64> = cols
            .iter()
            .map(|c| c.iter().map(|v| v * v).sum::<f64>().sqrt())
            .collect();
        let mut g = vec![0.0; k * k];
        for i in 0..k {
            for j in 0..k {
                let dot: f64 = cols[i].iter().zip(&cols[j]).map(|(a, b)| a * b).sum();
                g[i * k + j] = dot / (norms[i] * norms[j]);
            }
        }
        let mut smallest = f64::INFINITY;
        for j in 0..k {
            let mut d = g[j * k + j];
            for m in 0..j {
                d -= g[j * k + m] * g[j * k + m];
            }
            smallest = smallest.min(d);
            if d <= 0.0 {
                return d;
            }
            let d = d.sqrt();
            g[j * k + j] = d;
            for i in j + 1..k {
                let mut v = g[i * k + j];
                for m in 0..j {
                    v -= g[i * k + m] * g[j * k + m];
                }
                g[i * k + j] = v / d;
            }
        }
        smallest
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(128))]

        #[test]
        fn kept_harmonics_are_independent_after_differencing(
            cycles in prop::collection::vec((2usize..60, 0usize..8), 1..4),
            seasonal_d in 0usize..2,
            period in prop_oneof![Just(1usize), 2usize..30],
        ) {
            let mut b = Blueprint::builder();
            b.nonseasonal(1, 0, 0);
            if period > 1 {
                b.seasonal(0, seasonal_d, 1, period);
            }
            for &(p, k) in &cycles {
                b.cycle(p, k);
            }
            let bp = match b.build() {
                Ok(bp) => bp,
                Err(e) => {
                    prop_assert!(matches!(e.kind(), ErrorKind::InvalidSpecification { .. }), "{e}");
                    return Ok(());
                }
            };
            let terms: Vec<Term> = bp
                .terms()
                .into_iter()
                .filter(|t| matches!(t, Term::CycleCos { .. } | Term::CycleSin { .. }))
                .collect();
            prop_assert!(!terms.is_empty());
            let longest = bp.cycles().iter().map(|c| c.period).max().unwrap();
            let n = 2 * longest + 2 * period + 4 * terms.len();
            let lag = if period > 1 && seasonal_d > 0 { period } else { 0 };
            let cols: Vec<Vec<f64>> = terms
                .iter()
                .map(|&t| {
                    let c = column(t, n);
                    if lag > 0 { (lag..n).map(|i| c[i] - c[i - lag]).collect() } else { c }
                })
                .collect();
            let pivot = smallest_pivot(&cols);
            prop_assert!(pivot > 1e-8, "dependent columns: pivot {pivot} for {}", bp.shape_label());
        }
    }
}
