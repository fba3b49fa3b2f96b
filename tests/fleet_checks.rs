//! Batch fitting: per-series isolation, determinism across thread counts, cancellation.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use lagwise::{Blueprint, ErrorKind, FitSummary, Fleet, Simulator};

fn fleet_data(count: usize) -> Vec<Vec<f64>> {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.3])
        .level(88.0)
        .build()
        .unwrap();
    (0..count)
        .map(|i| sim.generate(400, 900 + i as u64))
        .collect()
}

fn bits(s: &FitSummary) -> Vec<u64> {
    let mut v: Vec<u64> = s
        .coefficients
        .iter()
        .flat_map(|c| [c.value.to_bits(), c.std_error.unwrap_or(f64::NAN).to_bits()])
        .collect();
    v.push(s.innovation_variance.to_bits());
    v.push(s.log_likelihood.value().to_bits());
    v.push(s.whiteness.p_value_at_last_lag.unwrap_or(-1.0).to_bits());
    v.push(
        s.whiteness
            .weakest_lag
            .map_or(-1.0, |w| w.p_value)
            .to_bits(),
    );
    v
}

#[test]
fn batch_equals_single_fits_bitwise_for_any_thread_count() {
    let data = fleet_data(24);
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
    let one = Fleet::builder()
        .threads(1)
        .build()
        .unwrap()
        .fit_slices(&bp, &refs);
    let two = Fleet::builder()
        .threads(2)
        .build()
        .unwrap()
        .fit_slices(&bp, &refs);
    let four = Fleet::builder()
        .threads(4)
        .build()
        .unwrap()
        .fit_slices(&bp, &refs);
    for i in 0..refs.len() {
        let single = bp.fit(refs[i]).unwrap();
        let a = one.outcomes()[i].result.as_ref().unwrap();
        assert_eq!(one.outcomes()[i].id, i);
        assert_eq!(
            bits(a),
            bits(two.outcomes()[i].result.as_ref().unwrap()),
            "series {i}: 1 vs 2 threads"
        );
        assert_eq!(
            bits(a),
            bits(four.outcomes()[i].result.as_ref().unwrap()),
            "series {i}: 1 vs 4 threads"
        );
        assert_eq!(
            a.coefficients,
            single.coefficients(),
            "series {i}: batch vs single fit"
        );
        assert_eq!(a.log_likelihood, single.log_likelihood());
    }
}

#[test]
fn poisoned_series_are_reported_and_the_rest_fit() {
    let mut data = fleet_data(100);
    data[3] = vec![f64::NAN; 400]; // all missing
    data[40] = vec![7.5; 400]; // constant (stuck sensor)
    data[41][17] = f64::INFINITY; // inf
    data[77].truncate(2); // too short
    let ids: Vec<String> = (0..100)
        .map(|i| format!("KB-SS{:04}-FL", 1000 + i))
        .collect();
    let items: Vec<(String, &[f64])> = ids
        .iter()
        .cloned()
        .zip(data.iter().map(|s| s.as_slice()))
        .collect();
    let report = Fleet::builder().build().unwrap().fit_ragged(
        &Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap(),
        &items,
    );
    assert_eq!(report.fitted(), 96);
    let failures: Vec<(String, ErrorKind)> = report
        .failures()
        .map(|(id, e)| (id.clone(), e.kind().clone()))
        .collect();
    assert_eq!(failures.len(), 4);
    assert!(matches!(failures[0], (ref id, ErrorKind::AllMissing { .. }) if id == "KB-SS1003-FL"));
    assert!(
        matches!(failures[1], (ref id, ErrorKind::ConstantSeries { .. }) if id == "KB-SS1040-FL")
    );
    assert!(
        matches!(failures[2], (ref id, ErrorKind::NonFiniteReading { index: 17, .. }) if id == "KB-SS1041-FL")
    );
    assert!(matches!(failures[3], (ref id, ErrorKind::TooShort { .. }) if id == "KB-SS1077-FL"));
}

#[test]
fn cancellation_stops_promptly_and_reports_what_finished() {
    let data = fleet_data(400);
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let flag = Arc::new(AtomicBool::new(false));
    let seen = Arc::new(AtomicUsize::new(0));
    let (f2, s2) = (flag.clone(), seen.clone());
    let report = Fleet::builder()
        .threads(2)
        .cancel_flag(flag.clone())
        .progress(move |p| {
            s2.store(p.done, Ordering::SeqCst);
            assert_eq!(p.total, 400);
            if p.done >= 10 {
                f2.store(true, Ordering::SeqCst);
            }
        })
        .build()
        .unwrap()
        .fit_slices(
            &Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap(),
            &refs,
        );
    assert!(report.cancelled());
    let fitted = report.fitted();
    // At most the series already in flight on the two workers finish after the flag.
    assert!((10..=14).contains(&fitted), "fitted {fitted}");
    let cancelled = report
        .failures()
        .filter(|(_, e)| matches!(e.kind(), ErrorKind::Cancelled { .. }))
        .count();
    assert_eq!(fitted + cancelled, 400);
    assert_eq!(seen.load(Ordering::SeqCst), 400);
}

#[test]
fn rows_of_an_ndarray() {
    let data = fleet_data(6);
    let flat: Vec<f64> = data.iter().flatten().copied().collect();
    let arr = ndarray::Array2::from_shape_vec((6, 400), flat).unwrap();
    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
    let report = Fleet::builder().build().unwrap().fit_rows(&bp, arr.view());
    assert_eq!(report.fitted(), 6);
    // Column-major views work too (copied per row).
    let t = arr.t().to_owned();
    let report_t = Fleet::builder().build().unwrap().fit_rows(&bp, t.t());
    for (a, b) in report.outcomes().iter().zip(report_t.outcomes()) {
        assert_eq!(
            a.result.as_ref().unwrap().coefficients,
            b.result.as_ref().unwrap().coefficients
        );
    }
    assert!(Fleet::builder().threads(0).build().is_err());
}

#[test]
fn order_search_per_series() {
    let sim = Simulator::builder().autoregressive(&[0.7]).build().unwrap();
    let data: Vec<Vec<f64>> = (0..6).map(|i| sim.generate(300, 40 + i)).collect();
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let fleet = Fleet::builder().threads(2).build().unwrap();
    let settings = lagwise::SearchSettings::default();
    let report = fleet.search_slices(&settings, &refs);
    assert_eq!(report.fitted(), 6);
    for o in report.outcomes() {
        let r = &o.result;
        let s = r.as_ref().unwrap();
        assert!(s.search_note.as_ref().unwrap().contains("chose"));
        assert!(s.shape.to_string().starts_with("AR"));
    }
    // Rows of a 2-D array and a ragged collection with ids give the same summaries.
    let flat: Vec<f64> = data.iter().flatten().copied().collect();
    let rows = lagwise::ndarray::ArrayView2::from_shape((6, 300), &flat).unwrap();
    let by_rows = fleet.search_rows(&settings, rows);
    let tagged: Vec<(String, &[f64])> = refs
        .iter()
        .enumerate()
        .map(|(i, x)| (format!("T{i}"), *x))
        .collect();
    let by_ids = fleet.search_ragged(&settings, &tagged);
    for i in 0..6 {
        let want = report.outcomes()[i].result.as_ref().unwrap();
        assert_eq!(by_rows.outcomes()[i].result.as_ref().unwrap(), want);
        assert_eq!(by_ids.outcomes()[i].id, format!("T{i}"));
        assert_eq!(by_ids.outcomes()[i].result.as_ref().unwrap(), want);
    }
}

/// The digest agrees with the full residual check of the single fit, and monitors are
/// there by default (positioned like the single fit's) and absent on request.
#[test]
fn whiteness_digest_and_monitors_match_single_fits() {
    let data = fleet_data(12);
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
    let with = Fleet::builder().build().unwrap().fit_slices(&bp, &refs);
    let without = Fleet::builder()
        .ready_monitors(false)
        .build()
        .unwrap()
        .fit_slices(&bp, &refs);
    for (i, x) in refs.iter().enumerate() {
        let single = bp.fit(x).unwrap();
        let check = single
            .residual_check(single.default_check_lags(), 0.05)
            .unwrap();
        let s = with.outcomes()[i].result.as_ref().unwrap();
        let rows = check.portmanteau.rows();
        assert_eq!(s.whiteness.lags_checked, rows.len());
        assert_eq!(s.whiteness.white, check.white);
        assert_eq!(
            s.whiteness.p_value_at_last_lag,
            rows.last().unwrap().ljung_box_p_value
        );
        let weakest = s.whiteness.weakest_lag.unwrap();
        let (lag, p) = (weakest.lag, weakest.p_value);
        assert!(
            rows.iter()
                .all(|r| r.ljung_box_p_value.is_none_or(|q| q >= p))
        );
        assert_eq!(rows[lag - 1].ljung_box_p_value, Some(p));
        // Same next-reading forecast from the fleet's monitor and the single fit's.
        let mut a = s.monitor().unwrap().clone();
        let mut b = single.monitor(0.999).unwrap();
        let (fa, fb) = (
            a.forecast(1, &[0.9]).unwrap(),
            b.forecast(1, &[0.9]).unwrap(),
        );
        assert_eq!(fa.steps[0].mean.to_bits(), fb.steps[0].mean.to_bits());
        assert_eq!(a.observe(90.0).unwrap(), b.observe(90.0).unwrap());
        assert!(
            without.outcomes()[i]
                .result
                .as_ref()
                .unwrap()
                .monitor()
                .is_none()
        );
    }
}

/// A fleet built with a shift test hands out monitors that run it, and they call a
/// step in new readings just as a monitor armed by hand does.
#[test]
fn fleet_monitors_carry_the_shift_test() {
    let data = fleet_data(4);
    let refs: Vec<&[f64]> = data.iter().map(|v| &v[..]).collect();
    let bp = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let test = lagwise::ShiftTest::builder()
        .in_control_run(5_000.0)
        .build()
        .unwrap();
    let report = Fleet::builder()
        .shift_test(&test)
        .build()
        .unwrap()
        .fit_slices(&bp, &refs);
    for (i, outcome) in report.outcomes().iter().enumerate() {
        let summary = outcome.result.as_ref().unwrap();
        let mut fleet_watch = summary.monitor().unwrap().clone();
        assert_eq!(fleet_watch.shift_test(), Some(&test));
        let mut own = bp
            .fit(&data[i])
            .unwrap()
            .monitor(0.999)
            .unwrap()
            .with_shift_test(&test);
        let last = *data[i].last().unwrap();
        let mut called = 0;
        for t in 0..60 {
            let v = last + if t >= 10 { 8.0 } else { 0.0 };
            let check = fleet_watch.observe(v).unwrap();
            called += usize::from(check.finding.is_some());
            assert_eq!(check, own.observe(v).unwrap());
        }
        assert!(called >= 1, "series {i}: the step was not called");
    }
}
