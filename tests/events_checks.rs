//! The event search (Chen & Liu 1993) on simulated series with known events: the right
//! reading, kind and size; missing readings and differencing; no events on clean
//! series; regressors of the caller kept; bad input refused.

use lagwise::{Blueprint, EventKind, EventSettings, Simulator, Term, TimeAxis};

fn ar_series(n: usize, seed: u64) -> Vec<f64> {
    Simulator::builder()
        .autoregressive(&[0.5])
        .level(20.0)
        .build()
        .unwrap()
        .generate(n, seed)
}

fn ar_model() -> Blueprint {
    Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap()
}

#[test]
fn an_additive_outlier_is_found_and_sized() {
    let mut x = ar_series(400, 1);
    x[200] += 6.0;
    let m = ar_model().fit(&x).unwrap();
    let found = m.find_events(&x, &EventSettings::default()).unwrap();
    assert_eq!(found.events.len(), 1, "{:?}", found.events);
    let e = found.events[0];
    assert_eq!((e.kind, e.index), (EventKind::AdditiveOutlier, 200));
    let se = e.std_error.unwrap();
    assert!((e.size - 6.0).abs() < 3.0 * se, "size {} ± {se}", e.size);
    assert!(e.statistic > found.critical_value);
    // The refitted model holds the event as its first regressor; the adjusted series
    // no longer has the spike.
    assert!(found.model.coefficient(Term::Exogenous(1)).is_some());
    assert!((found.adjusted[200] - (x[200] - e.size)).abs() < 1e-12);
}

#[test]
fn clean_series_have_no_events() {
    let mut total = 0;
    for seed in 0..20 {
        let x = ar_series(500, 100 + seed);
        let m = ar_model().fit(&x).unwrap();
        let found = m.find_events(&x, &EventSettings::default()).unwrap();
        total += found.events.len();
        if found.events.is_empty() {
            // Without events the model is the one searched.
            assert_eq!(found.model.coefficients(), m.coefficients());
        }
    }
    // The critical value holds the chance of any false event near 5% per series.
    assert!(total <= 3, "{total} events in 20 clean series");
}

/// A level shift in a seasonally differenced model with drop-outs, on a time axis.
#[test]
fn a_level_shift_through_seasonal_differencing_and_gaps() {
    let mut x = Simulator::builder()
        .autoregressive(&[0.5])
        .seasonal(&[], &[-0.5], 24)
        .differencing(0, 1)
        .build()
        .unwrap()
        .generate(24 * 20, 7);
    for v in &mut x[300..] {
        *v += 5.0;
    }
    for t in [120, 121, 122, 301, 410] {
        x[t] = f64::NAN;
    }
    let axis = TimeAxis::new(1_795_564_800_000, 3_600_000).unwrap();
    let m = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .seasonal(0, 1, 1, 24)
        .build()
        .unwrap()
        .fit(&x)
        .unwrap()
        .with_time_axis(axis);
    let found = m.find_events(&x, &EventSettings::default()).unwrap();
    let ls = found
        .events
        .iter()
        .find(|e| e.kind == EventKind::LevelShift)
        .unwrap_or_else(|| panic!("no level shift: {:?}", found.events));
    assert_eq!(ls.index, 300);
    assert_eq!(ls.time_ms, Some(1_795_564_800_000 + 300 * 3_600_000));
    assert!((ls.size - 5.0).abs() < 3.0 * ls.std_error.unwrap());
    assert!(
        found.adjusted[301].is_nan(),
        "missing readings stay missing"
    );
    // Ahead of the series a level shift's column stays 1.
    let ahead = found.columns_ahead(x.len(), 3);
    let j = found
        .events
        .iter()
        .position(|e| e.kind == EventKind::LevelShift)
        .unwrap();
    assert_eq!(ahead[j], vec![1.0; 3]);
}

#[test]
fn the_callers_regressors_come_first() {
    let n = 400;
    let load: Vec<f64> = (0..n).map(|t| ((t as f64) / 17.0).sin()).collect();
    let mut x = ar_series(n, 3);
    for (v, l) in x.iter_mut().zip(&load) {
        *v += 3.0 * l;
    }
    x[250] -= 7.0;
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .exogenous(1)
        .build()
        .unwrap();
    let m = bp.fit_regression(&x, &[&load]).unwrap();
    let found = m
        .find_events_given_regressors(&x, &[&load], &EventSettings::default())
        .unwrap();
    assert!(
        found
            .events
            .iter()
            .any(|e| e.index == 250 && e.kind == EventKind::AdditiveOutlier)
    );
    let beta = found.model.coefficient(Term::Exogenous(1)).unwrap();
    assert!(
        (beta.value - 3.0).abs() < 0.5,
        "the caller's regressor keeps its place: {}",
        beta.value
    );
    assert!(
        found.model.coefficient(Term::Exogenous(2)).is_some(),
        "the event follows it"
    );
}

#[test]
fn only_the_kinds_asked_for() {
    let mut x = ar_series(400, 4);
    x[150] += 6.0;
    for v in &mut x[300..] {
        *v += 4.0;
    }
    let m = ar_model().fit(&x).unwrap();
    let s = EventSettings::builder()
        .kinds(&[EventKind::LevelShift])
        .build()
        .unwrap();
    let found = m.find_events(&x, &s).unwrap();
    assert!(found.events.iter().all(|e| e.kind == EventKind::LevelShift));
    assert!(found.events.iter().any(|e| e.index == 300));
}

#[test]
fn bad_input_is_refused() {
    let x = ar_series(200, 5);
    let m = ar_model().fit(&x).unwrap();
    let s = EventSettings::default();
    assert!(
        m.find_events(&x[..150], &s).is_err(),
        "not the fitted series"
    );
    let mut y = x.clone();
    y[3] = f64::INFINITY;
    assert!(m.find_events(&y, &s).is_err(), "infinite reading");
    assert!(
        m.find_events_given_regressors(&x, &[&x], &s).is_err(),
        "undeclared regressor"
    );
    assert!(m.find_events(&[], &s).is_err());
}

/// White noise around a mean with a level shift (the demo's pressure tag of substation
/// 1009): a shift "at the first reading" would be the mean itself; it is not a candidate,
/// and the real shift is found. (This series made the search fail before.)
#[test]
fn a_shift_beside_the_mean_of_white_noise() {
    let e = Simulator::builder()
        .innovation_sd(0.02)
        .build()
        .unwrap()
        .generate(704, 10093);
    let mut dp: Vec<f64> = e.iter().map(|v| 1.10 + v).collect();
    for v in &mut dp[384..] {
        *v += 0.08;
    }
    let h = &dp[..672];
    let m = Blueprint::builder()
        .nonseasonal(0, 0, 0)
        .build()
        .unwrap()
        .fit(h)
        .unwrap();
    let found = m.find_events(h, &EventSettings::default()).unwrap();
    assert_eq!(found.events.len(), 1, "{:?}", found.events);
    assert_eq!(
        (found.events[0].kind, found.events[0].index),
        (EventKind::LevelShift, 384)
    );
}
