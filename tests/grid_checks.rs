//! Timestamped readings onto a regular grid: the documented policy case by case, against a
//! brute-force placement written independently here (every slot scans every reading), and
//! the invariances a historian export needs (input order does not matter; readings on the
//! grid come back unchanged).

use lagwise::{ErrorKind, GridSettings, SlotRule, TimeAxis, place_evenly, place_on_grid};
use proptest::prelude::*;

const Q: i64 = 15 * 60_000; // a quarter-hour in milliseconds
const T0: i64 = 1_767_225_600_000; // 2026-01-01T00:00:00Z

/// Brute force: for each slot of `axis` over `len` slots, the readings within `tol` of it
/// (ties at exactly half a cadence go to the earlier slot), combined by `rule`.
fn brute(
    times: &[i64],
    values: &[f64],
    axis: TimeAxis,
    len: usize,
    tol: i64,
    rule: SlotRule,
) -> Vec<f64> {
    let c = axis.cadence_ms();
    (0..len)
        .map(|k| {
            let at = axis.origin_ms() + k as i64 * c;
            let mut mine: Vec<(i64, usize, f64)> = times
                .iter()
                .zip(values)
                .enumerate()
                .filter(|(_, (t, v))| {
                    let d = **t - at;
                    !v.is_nan() && d.abs() <= tol && d > -(c + 1) / 2 && d <= c / 2
                })
                .map(|(i, (t, v))| (*t, i, *v))
                .collect();
            if mine.is_empty() {
                return f64::NAN;
            }
            mine.sort_by_key(|m| (m.0, m.1));
            let vals: Vec<f64> = mine.iter().map(|m| m.2).collect();
            match rule {
                SlotRule::Mean => vals.iter().sum::<f64>() / vals.len() as f64,
                SlotRule::Latest => *vals.last().unwrap(),
                SlotRule::Earliest => vals[0],
                SlotRule::Smallest => vals.iter().cloned().fold(f64::INFINITY, f64::min),
                SlotRule::Largest => vals.iter().cloned().fold(f64::NEG_INFINITY, f64::max),
                SlotRule::Median => {
                    let mut s = vals.clone();
                    s.sort_by(f64::total_cmp);
                    let m = s.len();
                    if m % 2 == 1 {
                        s[m / 2]
                    } else {
                        (s[m / 2 - 1] + s[m / 2]) / 2.0
                    }
                }
                _ => unreachable!(),
            }
        })
        .collect()
}

fn same(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()))
}

#[test]
fn the_policy_case_by_case() {
    // Slot 0: one reading 2 s late. Slot 1: three readings (one out of order). Slot 2:
    // only a reading 7 min late (off the grid at a 5-minute tolerance). Slot 3: a NaN
    // reading. Slot 5: a reading exactly half a cadence early belongs to slot 4.
    let times = [
        T0 + 2_000,
        T0 + Q + 30_000,
        T0 + Q - 10_000,
        T0 + Q,
        T0 + 2 * Q + 7 * 60_000,
        T0 + 3 * Q,
        T0 + 5 * Q - Q / 2,
        T0 + 6 * Q,
    ];
    let values = [50.0, 51.0, 52.0, 57.0, 99.0, f64::NAN, 54.0, 55.0];
    for rule in [
        SlotRule::Mean,
        SlotRule::Median,
        SlotRule::Latest,
        SlotRule::Earliest,
        SlotRule::Smallest,
        SlotRule::Largest,
    ] {
        let s = GridSettings::builder(Q)
            .tolerance_ms(Q / 2)
            .slot_rule(rule)
            .build()
            .unwrap();
        let g = place_on_grid(&times, &values, &s).unwrap();
        assert_eq!(g.axis.origin_ms(), T0, "{rule:?}");
        let want = brute(&times, &values, g.axis, 7, Q / 2, rule);
        assert!(
            same(&g.values, &want),
            "{rule:?}: {:?} vs {want:?}",
            g.values
        );
    }
    let s = GridSettings::builder(Q)
        .tolerance_ms(5 * 60_000)
        .build()
        .unwrap();
    let g = place_on_grid(&times, &values, &s).unwrap();
    // Hand-worked at a 5-minute tolerance: slot 1 is the mean of 51, 52 and 57; the
    // readings 7 and 7.5 minutes from their slots (2 and 4) are off the grid.
    assert_eq!(g.values[1], (51.0 + 52.0 + 57.0) / 3.0);
    assert!((2..=5).all(|k| g.values[k].is_nan()));
    assert_eq!((g.values[0], g.values[6]), (50.0, 55.0));
    let r = g.report;
    assert_eq!(r.readings, 8);
    assert_eq!(r.empty_readings, 1);
    assert_eq!(r.out_of_order, 1); // T0 + Q + 30 s, then T0 + Q − 10 s
    assert_eq!(r.merged, 2);
    assert_eq!(r.off_grid, 2);
    assert_eq!(r.missing_slots, 4);
    assert_eq!(g.axis.time_of(6), Some(T0 + 6 * Q));
}

#[test]
fn an_explicit_origin_drops_earlier_readings_and_keeps_leading_gaps() {
    let times = [T0 - Q, T0 + 2 * Q, T0 + 3 * Q];
    let s = GridSettings::builder(Q).origin_ms(T0).build().unwrap();
    let g = place_on_grid(&times, &[1.0, 2.0, 3.0], &s).unwrap();
    assert_eq!(g.report.before_origin, 1);
    assert_eq!(g.axis.origin_ms(), T0);
    assert!(g.values[0].is_nan() && g.values[1].is_nan());
    assert_eq!(&g.values[2..], &[2.0, 3.0]);
    assert_eq!(g.report.missing_slots, 2);
}

#[test]
fn bad_input_gets_typed_errors() {
    let s = GridSettings::builder(Q).build().unwrap();
    let kind = |r: lagwise::Result<lagwise::GriddedSeries>| format!("{:?}", r.unwrap_err().kind());
    assert!(kind(place_on_grid(&[], &[], &s)).starts_with("EmptySeries"));
    assert!(kind(place_on_grid(&[T0], &[1.0, 2.0], &s)).starts_with("LengthMismatch"));
    assert!(kind(place_on_grid(&[T0, T0 + Q], &[1.0, f64::INFINITY], &s)).contains("index: 1"));
    assert!(
        kind(place_on_grid(&[T0, T0 + Q], &[f64::NAN, f64::NAN], &s)).starts_with("AllMissing")
    );
    // Seconds mixed with milliseconds: a span of ~1.7e12 ms is 1.9e6 quarter-hours... at
    // one-second cadence it is far beyond the limit and refused with a hint.
    let secs = GridSettings::builder(1_000).build().unwrap();
    let e = place_on_grid(&[1_767_225_600, T0], &[1.0, 2.0], &secs).unwrap_err();
    assert!(e.to_string().contains("check the timestamp unit"), "{e}");
    assert!(GridSettings::builder(0).build().is_err());
    assert!(GridSettings::builder(Q).tolerance_ms(Q).build().is_err());
    assert!(GridSettings::builder(Q).tolerance_ms(-1).build().is_err());
    assert!(TimeAxis::new(T0, 0).is_err());
    let tight = GridSettings::builder(Q).tolerance_ms(0).build().unwrap();
    let e = place_on_grid(&[T0 + 1], &[1.0], &tight).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::InvalidArgument { .. }), "{e}");
    assert!(e.to_string().contains("1 off the grid"), "{e}");
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Shuffled input gives the same grid (values bit for bit, report but for the
    /// out-of-order count), and agrees with the brute force.
    #[test]
    fn order_does_not_matter(
        raw in proptest::collection::vec((0i64..40 * Q, -5.0f64..5.0, any::<bool>()), 1..80),
        seed in any::<u64>(),
        rule_ix in 0usize..6,
    ) {
        let rule = [SlotRule::Mean, SlotRule::Median, SlotRule::Latest, SlotRule::Earliest,
                    SlotRule::Smallest, SlotRule::Largest][rule_ix];
        // Distinct timestamps (Latest/Earliest on equal times depend on input order).
        let mut raw = raw;
        raw.sort_by_key(|r| r.0);
        raw.dedup_by_key(|r| r.0);
        let times: Vec<i64> = raw.iter().map(|r| T0 + r.0).collect();
        let values: Vec<f64> = raw.iter().map(|r| if r.2 { f64::NAN } else { r.1 }).collect();
        let s = GridSettings::builder(Q).tolerance_ms(4 * 60_000).slot_rule(rule).build().unwrap();
        let sorted = place_on_grid(&times, &values, &s);
        let mut order: Vec<usize> = (0..times.len()).collect();
        let mut x = seed | 1;
        for i in (1..order.len()).rev() {
            x ^= x << 13; x ^= x >> 7; x ^= x << 17;
            order.swap(i, (x % (i as u64 + 1)) as usize);
        }
        let st: Vec<i64> = order.iter().map(|&i| times[i]).collect();
        let sv: Vec<f64> = order.iter().map(|&i| values[i]).collect();
        let shuffled = place_on_grid(&st, &sv, &s);
        match (sorted, shuffled) {
            (Ok(a), Ok(b)) => {
                prop_assert!(same(&a.values, &b.values));
                prop_assert_eq!(a.axis, b.axis);
                prop_assert_eq!(a.report.merged, b.report.merged);
                prop_assert_eq!(a.report.off_grid, b.report.off_grid);
                prop_assert_eq!(a.report.missing_slots, b.report.missing_slots);
                let want = brute(&times, &values, a.axis, a.values.len(), 4 * 60_000, rule);
                prop_assert!(same(&a.values, &want));
                // Every reading is accounted for.
                let r = a.report;
                let occupied = a.values.iter().filter(|v| !v.is_nan()).count();
                prop_assert_eq!(r.readings, r.empty_readings + r.off_grid + r.before_origin + r.merged + occupied);
            }
            (Err(a), Err(b)) => prop_assert_eq!(a.to_string(), b.to_string()),
            (a, b) => prop_assert!(false, "{:?} vs {:?}", a.is_ok(), b.is_ok()),
        }
    }

    /// An even run given as first time, step and count places exactly as its listed
    /// timestamps do (values bit for bit, axis, report, error text), whatever the step
    /// (the cadence, off by a millisecond, half, double, zero, backwards), the offset from
    /// the slots, the origin, the tolerance, the slot rule, empty readings and signed zeros.
    #[test]
    fn an_even_run_places_as_its_listed_times(
        raw in proptest::collection::vec((-5.0f64..5.0, 0u8..10), 1..120),
        step_ix in 0usize..7,
        shift in -Q..Q,
        origin_ix in 0usize..3,
        tight in any::<bool>(),
        rule_ix in 0usize..6,
    ) {
        let rule = [SlotRule::Mean, SlotRule::Median, SlotRule::Latest, SlotRule::Earliest,
                    SlotRule::Smallest, SlotRule::Largest][rule_ix];
        let step = [Q, Q, Q + 1, Q / 2, 2 * Q, 0, -Q][step_ix];
        let values: Vec<f64> = raw
            .iter()
            .map(|&(v, k)| match k {
                0 => f64::NAN,
                1 => -0.0,
                _ => v,
            })
            .collect();
        let first = T0 + shift;
        let times: Vec<i64> = (0..values.len() as i64).map(|i| first + i * step).collect();
        let mut b = GridSettings::builder(Q);
        b.slot_rule(rule);
        if tight {
            b.tolerance_ms(60_000);
        }
        match origin_ix {
            1 => { b.origin_ms(T0 - 3 * Q); }
            2 => { b.origin_ms(T0 + 5 * Q); }
            _ => {}
        }
        let s = b.build().unwrap();
        let listed = place_on_grid(&times, &values, &s);
        let even = place_evenly(first, step, &values, &s);
        match (listed, even) {
            (Ok(a), Ok(b)) => {
                let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                prop_assert_eq!(bits(&a.values), bits(&b.values));
                prop_assert_eq!(a.axis, b.axis);
                prop_assert_eq!(a.report, b.report);
            }
            (Err(a), Err(b)) => prop_assert_eq!(a.to_string(), b.to_string()),
            (a, b) => prop_assert!(false, "{:?} vs {:?}", a, b),
        }
    }

    /// Readings exactly on the grid come back unchanged.
    #[test]
    fn readings_on_the_grid_are_kept(values in proptest::collection::vec(-1e6f64..1e6, 1..200)) {
        let times: Vec<i64> = (0..values.len() as i64).map(|k| T0 + k * Q).collect();
        let g = place_on_grid(&times, &values, &GridSettings::builder(Q).build().unwrap()).unwrap();
        prop_assert!(same(&g.values, &values));
        prop_assert_eq!(g.axis.origin_ms(), T0);
        prop_assert_eq!(g.report.merged + g.report.off_grid + g.report.missing_slots, 0);
    }
}

/// The grid's axis travels with the fitted model into forecasts and monitors, through
/// storage (model and monitor), and with a known model; without an axis times are absent.
#[test]
fn the_time_axis_travels_with_models_forecasts_and_monitors() {
    use lagwise::{Blueprint, KnownModel, Simulator, Term};
    let x = Simulator::builder()
        .autoregressive(&[0.6])
        .level(70.0)
        .build()
        .unwrap()
        .generate(300, 4);
    // Readings 40 s late, one slot lost.
    let times: Vec<i64> = (0..300).map(|k| T0 + k * Q + 40_000).collect();
    let mut vals = x.clone();
    vals[100] = f64::NAN;
    let grid = place_on_grid(
        &times[..250],
        &vals[..250],
        &GridSettings::builder(Q).build().unwrap(),
    )
    .unwrap();
    assert_eq!(grid.axis.origin_ms(), T0);
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let fit = bp.fit_gridded(&grid).unwrap();
    assert_eq!(fit.time_axis(), Some(grid.axis));
    let fc = fit.forecast(4, &[0.9]).unwrap();
    for (h, st) in fc.steps.iter().enumerate() {
        assert_eq!(st.time_ms, Some(T0 + (250 + h as i64) * Q));
    }
    let mut watch = fit.monitor(0.99).unwrap();
    assert_eq!(watch.next_time_ms(), Some(T0 + 250 * Q));
    let checks = watch.observe_batch(&x[250..253]).unwrap();
    assert_eq!(checks[2].time_ms, Some(T0 + 252 * Q));
    // Storage keeps the axis.
    let back = lagwise::model_from_json(&lagwise::model_to_json(&fit).unwrap()).unwrap();
    assert_eq!(back.time_axis(), Some(grid.axis));
    let resumed = lagwise::monitor_from_json(&lagwise::monitor_to_json(&watch).unwrap()).unwrap();
    assert_eq!(resumed.next_time_ms(), Some(T0 + 253 * Q));
    // A plain fit has no axis and no times.
    let plain = bp.fit(&grid.values).unwrap();
    assert_eq!(plain.forecast(1, &[0.9]).unwrap().steps[0].time_ms, None);
    assert_eq!(
        plain.forecast(1, &[0.9]).unwrap().steps[0].mean,
        fc.steps[0].mean
    );
    // A known model on the same axis.
    let coefs: Vec<(Term, f64)> = fit
        .coefficients()
        .iter()
        .map(|c| (c.term, c.value))
        .collect();
    let known = KnownModel::new(&bp, &coefs, fit.innovation_variance())
        .unwrap()
        .with_time_axis(grid.axis);
    let kf = known
        .forecast_from_history(&grid.values, &[], 2, &[0.9], &[])
        .unwrap();
    assert_eq!(kf.steps[1].time_ms, Some(T0 + 251 * Q));
}

/// Regression (found by the grid fuzz target): readings near ±f64::MAX in one slot
/// overflowed the mean (and would the median of two) to ±inf; the value must stay a
/// finite number within the slot's readings.
/// An even run whose later timestamps would pass the range of i64 is refused with a
/// typed error that says so (a listed run cannot even be written down).
#[test]
fn an_even_run_past_the_time_range_is_refused() {
    let s = GridSettings::builder(Q).build().unwrap();
    let e = place_evenly(i64::MAX - 2 * Q, Q, &[1.0; 4], &s).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::InvalidArgument { .. }), "{e}");
    assert!(e.to_string().contains("past the range"), "{e}");
    let e = place_evenly(T0, Q, &[], &s).unwrap_err();
    assert!(matches!(e.kind(), ErrorKind::EmptySeries { .. }), "{e}");
    // The last time exactly at the end of the range is fine.
    let g = place_evenly(i64::MAX - 3 * Q, Q, &[1.0; 4], &s).unwrap();
    assert_eq!(g.values, vec![1.0; 4]);
}

#[test]
fn huge_readings_in_one_slot_stay_finite() {
    let big = f64::MAX;
    for rule in [SlotRule::Mean, SlotRule::Median] {
        let s = GridSettings::builder(Q).slot_rule(rule).build().unwrap();
        for vals in [[big, big * 0.9, big], [-big, -big, -big * 0.5]] {
            let g = place_on_grid(&[T0, T0 + 1, T0 + 2], &vals, &s).unwrap();
            let v = g.values[0];
            let (lo, hi) = vals
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                    (a.min(x), b.max(x))
                });
            assert!(v.is_finite() && v >= lo && v <= hi, "{rule:?}: {v}");
        }
    }
}
