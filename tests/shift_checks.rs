//! The monitor's online shift test: re-levelling and spike discounting against a plain
//! monitor fed the corrected readings (they must agree exactly — the replay is the
//! filter with the event known), a small detection study with floors, a stored monitor
//! resuming mid-decision, and bad settings.

use lagwise::{Blueprint, EventKind, ShiftTest, Simulator, monitor_from_json, monitor_to_json};

fn ar_setting(seed: u64) -> (lagwise::FittedModel, Vec<f64>) {
    let x = Simulator::builder()
        .autoregressive(&[0.6])
        .level(85.0)
        .build()
        .unwrap()
        .generate(1_600, seed);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit(&x[..1_000])
        .unwrap();
    (fit, x)
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * (1.0 + b.abs())
}

/// After a level shift is called and has settled, the monitor's forecasts equal a plain
/// monitor's (no test) fed the readings less the reported level from the onset on, plus
/// that level: the replay is exactly the filter with the step known.
#[test]
fn relevelling_equals_the_filter_with_the_step_removed() {
    let (fit, mut x) = ar_setting(21);
    x[1_150..].iter_mut().for_each(|v| *v += 5.0);
    let test = ShiftTest::builder().build().unwrap();
    let mut watch = fit.monitor(0.999).unwrap().with_shift_test(&test);
    let mut calls = Vec::new();
    for v in &x[1_000..] {
        if let Some(f) = watch.observe(*v).unwrap().finding {
            calls.push(f);
        }
    }
    assert_eq!(calls.len(), 1, "{calls:?}");
    let call = calls[0];
    assert_eq!(call.kind, EventKind::LevelShift);
    assert!(call.applied);
    assert!(
        (call.onset as i64 - 1_150).abs() <= 1,
        "onset {}",
        call.onset
    );
    let level = watch.level_offset();
    assert!((level - 5.0).abs() < 0.6, "level {level}");
    // Settled: the onset is more than the look-back (96) behind the last reading.
    let mut plain = fit.monitor(0.999).unwrap();
    for (i, v) in x[1_000..].iter().enumerate() {
        let t = 1_000 + i as u64;
        plain
            .observe(if t >= call.onset { v - level } else { *v })
            .unwrap();
    }
    let (a, b) = (
        watch.forecast(12, &[0.9]).unwrap(),
        plain.forecast(12, &[0.9]).unwrap(),
    );
    for (sa, sb) in a.steps.iter().zip(&b.steps) {
        assert!(
            close(sa.mean, sb.mean + level),
            "{} vs {}",
            sa.mean,
            sb.mean
        );
        assert!(close(sa.sd, sb.sd));
    }
}

/// A called spike leaves no trace: the state equals a plain monitor's that saw the spike
/// reading as missing.
#[test]
fn a_discounted_spike_equals_a_missing_reading() {
    let (fit, mut x) = ar_setting(22);
    x[1_200] += 7.0;
    let test = ShiftTest::builder().build().unwrap();
    let mut watch = fit.monitor(0.999).unwrap().with_shift_test(&test);
    let mut calls = Vec::new();
    for v in &x[1_000..1_300] {
        if let Some(f) = watch.observe(*v).unwrap().finding {
            calls.push(f);
        }
    }
    assert_eq!(calls.len(), 1, "{calls:?}");
    assert_eq!(
        (calls[0].kind, calls[0].onset),
        (EventKind::AdditiveOutlier, 1_200)
    );
    assert!((calls[0].size - 7.0).abs() < 1.5, "{}", calls[0].size);
    let mut plain = fit.monitor(0.999).unwrap();
    for (i, v) in x[1_000..1_300].iter().enumerate() {
        plain.observe(if i == 200 { f64::NAN } else { *v }).unwrap();
    }
    let (a, b) = (
        watch.forecast(5, &[0.9]).unwrap(),
        plain.forecast(5, &[0.9]).unwrap(),
    );
    for (sa, sb) in a.steps.iter().zip(&b.steps) {
        assert!(close(sa.mean, sb.mean) && close(sa.sd, sb.sd));
    }
    // Without discounting, the spike stays in the state of a model with memory
    // (ARMA(1,1): the MA part carries it on).
    let y = Simulator::builder()
        .autoregressive(&[0.5])
        .moving_average(&[0.6])
        .level(85.0)
        .build()
        .unwrap()
        .generate(1_300, 24);
    let arma = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .build()
        .unwrap()
        .fit(&y[..1_000])
        .unwrap();
    let keep = ShiftTest::builder().discount_spikes(false).build().unwrap();
    let mut raw = arma.monitor(0.999).unwrap().with_shift_test(&keep);
    let mut discounted = arma.monitor(0.999).unwrap().with_shift_test(&test);
    let mut kinds = Vec::new();
    for (i, v) in y[1_000..1_208].iter().enumerate() {
        let v = if i == 200 { v + 8.0 } else { *v };
        raw.observe(v).unwrap();
        kinds.extend(discounted.observe(v).unwrap().finding.map(|f| f.kind));
    }
    assert_eq!(kinds, [EventKind::AdditiveOutlier]);
    let gap = raw.forecast(1, &[0.9]).unwrap().steps[0].mean
        - discounted.forecast(1, &[0.9]).unwrap().steps[0].mean;
    assert!(gap.abs() > 1e-3, "{gap}");
}

/// Floors from `examples/shift_study.rs` (README table, 200 replications) on a smaller
/// run: AR(1) φ = 0.6, 5σ events in 500 watched readings after a fit on 1,000.
#[test]
fn spikes_and_shifts_are_told_apart() {
    let test = ShiftTest::builder().build().unwrap();
    let reps = 60;
    let (mut spike_ok, mut shift_ok, mut false_shifts, mut clean_readings) = (0, 0, 0, 0);
    for r in 0..reps {
        for (kind, size) in [
            (None, 0.0),
            (Some(EventKind::AdditiveOutlier), 5.0),
            (Some(EventKind::LevelShift), 5.0),
        ] {
            let (fit, mut x) = ar_setting(500 + r);
            let at = 1_100 + (r as usize * 37) % 250;
            match kind {
                Some(EventKind::AdditiveOutlier) => x[at] += size,
                Some(_) => x[at..].iter_mut().for_each(|v| *v += size),
                None => {}
            }
            let mut watch = fit.monitor(0.999).unwrap().with_shift_test(&test);
            let mut right = false;
            for v in &x[1_000..1_500] {
                let Some(f) = watch.observe(*v).unwrap().finding else {
                    continue;
                };
                if Some(f.kind) == kind && (f.onset as i64 - at as i64).abs() <= 3 {
                    right = true;
                } else if kind.is_none() && f.kind == EventKind::LevelShift {
                    false_shifts += 1;
                }
            }
            match kind {
                None => clean_readings += 500,
                Some(EventKind::AdditiveOutlier) => spike_ok += usize::from(right),
                Some(_) => shift_ok += usize::from(right),
            }
        }
    }
    let share = |n: usize| n as f64 / reps as f64;
    assert!(
        share(spike_ok) >= 0.88,
        "5σ spikes typed {}",
        share(spike_ok)
    );
    assert!(
        share(shift_ok) >= 0.9,
        "5σ shifts typed {}",
        share(shift_ok)
    );
    let per_10k = false_shifts as f64 * 1e4 / clean_readings as f64;
    assert!(per_10k <= 4.0, "{per_10k} false shifts per 10,000 readings");
}

/// A monitor stored in the middle of a decision (and of a settling shift) resumes with
/// the same checks as the one that was not stored; tampered state is refused.
#[test]
fn a_stored_monitor_resumes_mid_decision() {
    let (fit, mut x) = ar_setting(23);
    x[1_100..].iter_mut().for_each(|v| *v += 4.0);
    let test = ShiftTest::builder().build().unwrap();
    let mut watch = fit.monitor(0.999).unwrap().with_shift_test(&test);
    for stop in [1_102usize, 1_130] {
        let mut a = watch.clone();
        for v in &x[1_000..stop] {
            a.observe(*v).unwrap();
        }
        let text = monitor_to_json(&a).unwrap();
        // Stored with a decision open (the step's first readings), then with the shift
        // called and its size still being refined.
        let open = if stop == 1_102 {
            "\"pending\":{"
        } else {
            "\"settling\":{"
        };
        assert!(
            text.contains(open),
            "{stop}: {open} not in the stored monitor"
        );
        let mut b = monitor_from_json(&text).unwrap();
        assert_eq!(a, b);
        for v in &x[stop..1_400] {
            let (ca, cb) = (a.observe(*v).unwrap(), b.observe(*v).unwrap());
            assert_eq!(ca, cb);
        }
        // Tampered state: the older block start no longer matches its snapshot.
        let mut value: serde_json::Value = serde_json::from_str(&text).unwrap();
        let starts = find_key(&mut value, "starts").expect("the stored shift state");
        starts[0] = serde_json::json!(starts[0].as_u64().unwrap() + 1);
        let broken = serde_json::to_string(&value).unwrap();
        let err = monitor_from_json(&broken).unwrap_err().to_string();
        assert!(err.contains("shift test state"), "{err}");
    }
    for v in &x[1_000..1_050] {
        watch.observe(*v).unwrap();
    }
    assert_eq!(watch.shift_test(), Some(&test));
}

#[test]
fn bad_settings_are_refused() {
    let b = || ShiftTest::builder();
    assert!(b().in_control_run(10.0).build().is_err());
    assert!(b().in_control_run(f64::NAN).build().is_err());
    assert!(b().catch_shift(0.0).build().is_err());
    assert!(b().catch_shift(f64::INFINITY).build().is_err());
    assert!(b().decision_window(0).build().is_err());
    assert!(b().decision_window(200).build().is_err());
    assert!(b().decision_window(12).look_back(8).build().is_err());
    let t = b().in_control_run(465.44).build().unwrap();
    assert!((t.threshold() - 5.0).abs() < 1e-3, "{}", t.threshold());
    assert!((t.run_length_at(1.0).unwrap() - 10.38).abs() < 0.05);
}

fn find_key<'a>(v: &'a mut serde_json::Value, key: &str) -> Option<&'a mut serde_json::Value> {
    match v {
        serde_json::Value::Object(map) => {
            if map.contains_key(key) {
                return map.get_mut(key);
            }
            map.values_mut().find_map(|x| find_key(x, key))
        }
        serde_json::Value::Array(items) => items.iter_mut().find_map(|x| find_key(x, key)),
        _ => None,
    }
}
