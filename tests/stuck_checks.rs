//! Stuck sensors: runs found against a brute force written independently here (every
//! start tried), the documented edges (NaN inside a run, quantisation, the ends of the
//! series), masking, and bad input.

use lagwise::{StuckRun, find_stuck_runs, mask_runs};
use proptest::prelude::*;

/// Brute force: maximal runs, greedily from the left, of present readings within `res`
/// of the run's first reading, kept when at least `min` long.
fn brute(x: &[f64], min: usize, res: f64) -> Vec<(usize, usize, usize)> {
    let present: Vec<usize> = (0..x.len()).filter(|&t| !x[t].is_nan()).collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < present.len() {
        let first = x[present[i]];
        let mut j = i + 1;
        while j < present.len() && (x[present[j]] - first).abs() <= res {
            j += 1;
        }
        if j - i >= min {
            out.push((present[i], j - i, present[j - 1] + 1));
        }
        i = j;
    }
    out
}

fn triples(runs: &[StuckRun]) -> Vec<(usize, usize, usize)> {
    runs.iter().map(|r| (r.start, r.readings, r.end)).collect()
}

#[test]
fn edges_of_the_rule() {
    let mut x: Vec<f64> = (0..60).map(|t| (t as f64 * 0.7).sin()).collect();
    for v in &mut x[0..5] {
        *v = 3.0; // at the start, 5 long
    }
    for v in &mut x[20..32] {
        *v = 1.25; // 12 long, with a gap inside
    }
    x[25] = f64::NAN;
    for v in &mut x[55..60] {
        *v = -2.0; // at the end
    }
    let runs = find_stuck_runs(&x, 5, 0.0).unwrap();
    assert_eq!(triples(&runs), vec![(0, 5, 5), (20, 11, 32), (55, 5, 60)]);
    assert_eq!(runs[1].value, 1.25);
    assert_eq!(
        triples(&find_stuck_runs(&x, 6, 0.0).unwrap()),
        vec![(20, 11, 32)]
    );
    // A quantised signal stepping by 0.1 around a frozen value.
    let q: Vec<f64> = (0..30).map(|t| 7.0 + 0.1 * ((t % 2) as f64)).collect();
    assert!(find_stuck_runs(&q, 10, 0.0).unwrap().is_empty());
    assert_eq!(
        triples(&find_stuck_runs(&q, 10, 0.1 + 1e-12).unwrap()),
        vec![(0, 30, 30)]
    );
    // Masking: a copy with the runs missing, the input untouched.
    let masked = mask_runs(&x, &runs);
    assert!(masked[20..32].iter().all(|v| v.is_nan()) && !x[20].is_nan());
    assert_eq!(masked[19].to_bits(), x[19].to_bits());
    // Bad input.
    assert!(find_stuck_runs(&x, 1, 0.0).is_err());
    assert!(find_stuck_runs(&x, 5, -1.0).is_err());
    assert!(find_stuck_runs(&x, 5, f64::NAN).is_err());
    assert!(find_stuck_runs(&[1.0, f64::INFINITY], 2, 0.0).is_err());
    assert!(find_stuck_runs(&[], 2, 0.0).unwrap().is_empty());
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(128))]
    #[test]
    fn matches_the_brute_force(
        raw in proptest::collection::vec(0u8..6, 0..200),
        min in 2usize..8,
        res_ix in 0usize..3,
    ) {
        // Few distinct levels so that runs are common; level 5 is a missing reading.
        let x: Vec<f64> = raw.iter().map(|&v| if v == 5 { f64::NAN } else { f64::from(v) * 0.5 }).collect();
        let res = [0.0, 0.5, 1.0][res_ix];
        let got = find_stuck_runs(&x, min, res).unwrap();
        prop_assert_eq!(triples(&got), brute(&x, min, res));
    }
}
