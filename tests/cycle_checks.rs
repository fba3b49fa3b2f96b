//! Long cycles by harmonic terms, end to end: the order search recovers the simulated
//! daily and weekly harmonics and the ARMA orders, the forecasts and monitors continue the
//! harmonic terms (from the fitted model, a stored copy, a monitor and a model with known
//! coefficients alike), and the new settings are stored and restored.

use lagwise::{
    Blueprint, Cycle, KnownModel, SearchSettings, Simulator, Term, model_from_json, model_to_json,
    search_orders,
};

/// Quarter-hour readings of a return temperature (invented): ARMA(1,1) noise (φ = 0.6,
/// θ = 0.4, as in the recovery study) around
/// 55 °C with a daily shape of three harmonics and a weekly one of two.
fn daily_and_weekly() -> Simulator {
    Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.4])
        .level(55.0)
        .innovation_sd(0.4)
        .wave(96, 1, 3.0, -2.0)
        .wave(96, 2, 1.0, 0.5)
        .wave(96, 3, -0.4, 0.3)
        .wave(672, 1, 1.5, 0.8)
        .wave(672, 2, -0.6, 0.4)
        .build()
        .unwrap()
}

/// Recovery: with harmonics allowed up to 10 per cycle, the search picks the simulated
/// counts (3 daily, 2 weekly) and ARMA(1,1) errors. The study (`examples/order_recovery.rs`,
/// README) finds 96% over 100 replications; this floor is 7 of 8 seeds at four weeks.
#[test]
fn search_recovers_daily_and_weekly_harmonics() {
    let sim = daily_and_weekly();
    let settings = SearchSettings::builder()
        .cycle(96, 10)
        .cycle(672, 10)
        .build()
        .unwrap();
    let mut exact = 0;
    let mut harmonics = 0;
    for seed in 0..8 {
        let x = sim.generate(4 * 672, 100 + seed);
        let out = search_orders(&x, &settings).unwrap();
        let bp = out.model.blueprint();
        if bp.cycles() == [Cycle::new(96, 3), Cycle::new(672, 2)] {
            harmonics += 1;
            if bp.nonseasonal_orders() == (1, 0, 1) {
                exact += 1;
            }
        }
        // The account lists the harmonic scan: candidates with 0..=10 daily harmonics.
        assert!(
            out.candidates
                .iter()
                .any(|c| c.shape.cycle_periods[0] == 672 && c.shape.cycle_harmonics[0] == 2),
            "seed {seed}: no candidate without the daily cycle was tried"
        );
        assert!(
            out.explanation
                .contains("Harmonics per cycle chosen by BIC")
        );
    }
    assert!(harmonics >= 7, "harmonic counts right for {harmonics} of 8");
    assert!(exact >= 7, "harmonics and orders right for {exact} of 8");
}

/// Beside a seasonal difference at period 96, a weekly cycle by harmonics: the search
/// keeps the SARIMA part and finds the two weekly harmonics.
#[test]
fn search_adds_weekly_harmonics_to_a_daily_seasonal_model() {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.3])
        .seasonal(&[], &[-0.6], 96)
        .differencing(0, 1)
        .level(55.0)
        .innovation_sd(0.4)
        .wave(672, 1, 1.5, 0.8)
        .wave(672, 2, -0.6, 0.4)
        .build()
        .unwrap();
    let settings = SearchSettings::builder()
        .period(96)
        .max_orders(3, 3, 1, 1)
        .cycle(672, 8)
        .build()
        .unwrap();
    let mut right = 0;
    for seed in 0..4 {
        let x = sim.generate(4 * 672, 300 + seed);
        let out = search_orders(&x, &settings).unwrap();
        let label = out.model.blueprint().shape_label();
        // Harmonic 7 of the weekly cycle is the daily one the seasonal difference removes.
        assert!(!out.model.blueprint().terms().contains(&Term::CycleCos {
            period: 672,
            harmonic: 7
        }));
        if label == "SARIMA(1,0,1)×(0,1,1)₉₆ + harmonics 672:2" {
            right += 1;
        }
    }
    assert!(right >= 3, "right for {right} of 4");
}

/// Forecasts continue the harmonic terms the same way from every starting point: the
/// fitted model, its stored copy, a monitor that has seen the next day, the fitted
/// coefficients as a known model over the whole history, and a monitor positioned from
/// history.
#[test]
fn forecasts_continue_the_harmonic_terms_from_every_starting_point() {
    let x = daily_and_weekly().generate(4 * 672 + 96, 9);
    let (history, next_day) = x.split_at(4 * 672);
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .cycle(96, 3)
        .cycle(672, 2)
        .build()
        .unwrap();
    let fit = bp.fit(history).unwrap();
    let fc = fit.forecast(192, &[0.95]).unwrap();
    // Far out the forecast is the mean plus the harmonic shape at that reading.
    let t = (history.len() + 191) as f64;
    let mut shape = fit.coefficient(Term::Mean).unwrap().value;
    for c in fit.coefficients() {
        let angle = |p: usize, k: usize| std::f64::consts::TAU * (k as f64) * t / (p as f64);
        shape += c.value
            * match c.term {
                Term::CycleCos { period, harmonic } => angle(period, harmonic).cos(),
                Term::CycleSin { period, harmonic } => angle(period, harmonic).sin(),
                _ => 0.0,
            };
    }
    assert!(
        (fc.steps[191].mean - shape).abs() < 1e-6,
        "{} vs {shape}",
        fc.steps[191].mean
    );
    // A stored copy forecasts bit for bit the same.
    let restored = model_from_json(&model_to_json(&fit).unwrap()).unwrap();
    assert_eq!(restored.forecast(192, &[0.95]).unwrap(), fc);
    assert_eq!(restored.blueprint().cycles(), fit.blueprint().cycles());
    // A monitor that sees the next day forecasts the day after as the model would from
    // the longer history (same coefficients).
    let mut watch = fit.monitor(0.999).unwrap();
    let first = watch.observe(next_day[0]).unwrap();
    assert!((first.predicted - fc.steps[0].mean).abs() < 1e-9);
    for &v in &next_day[1..] {
        watch.observe(v).unwrap();
    }
    let after = watch.forecast(96, &[0.95]).unwrap();
    let again = fit.monitor_from_history(&x, &[], 0.999).unwrap();
    let from_history = again.forecast(96, &[0.95]).unwrap();
    let coefficients: Vec<(Term, f64)> = fit
        .coefficients()
        .iter()
        .map(|c| (c.term, c.value))
        .collect();
    let known = KnownModel::new(&bp, &coefficients, fit.innovation_variance()).unwrap();
    let from_known = known
        .forecast_from_history(&x, &[], 96, &[0.95], &[])
        .unwrap();
    for j in 0..96 {
        for other in [&from_history, &from_known] {
            assert!(
                (after.steps[j].mean - other.steps[j].mean).abs() < 1e-8,
                "step {j}: {} vs {}",
                after.steps[j].mean,
                other.steps[j].mean
            );
            assert_eq!(after.steps[j].index, other.steps[j].index);
        }
    }
    // A known model must be given every harmonic coefficient.
    let missing: Vec<(Term, f64)> = coefficients
        .iter()
        .copied()
        .filter(|(t, _)| {
            !matches!(
                t,
                Term::CycleSin {
                    period: 672,
                    harmonic: 2
                }
            )
        })
        .collect();
    assert!(KnownModel::new(&bp, &missing, 0.16).is_err());
}

/// Blueprints with cycles are stored and restored with them; stored blueprints from before
/// cycles existed still read (no cycles).
#[test]
fn blueprints_with_cycles_round_trip() {
    let bp = Blueprint::builder()
        .nonseasonal(2, 0, 0)
        .seasonal(0, 1, 1, 96)
        .cycle(672, 4)
        .build()
        .unwrap();
    let text = lagwise::blueprint_to_json(&bp).unwrap();
    let back = lagwise::blueprint_from_json(&text).unwrap();
    assert_eq!(back, bp);
    assert_eq!(back.cycles(), [Cycle::new(672, 4)]);
    let old = Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap();
    let mut value: serde_json::Value =
        serde_json::from_str(&lagwise::blueprint_to_json(&old).unwrap()).unwrap();
    // Remove the field wherever the stored form keeps it.
    fn strip(v: &mut serde_json::Value) {
        if let Some(map) = v.as_object_mut() {
            map.remove("cycles");
            for (_, inner) in map.iter_mut() {
                strip(inner);
            }
        }
    }
    strip(&mut value);
    let back = lagwise::blueprint_from_json(&value.to_string()).unwrap();
    assert_eq!(back, old);
}
