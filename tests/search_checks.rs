//! Unit-root tests and the automatic order search.

use crate::common::{load_column, load_json};
use lagwise::{ErrorKind, Simulator};
use lagwise::{
    SearchSettings, TrendTerms, augmented_dickey_fuller, choose_differencing, kpss, search_orders,
    seasonal_strength,
};
use rayon::prelude::*;

fn dataset(case: &serde_json::Value) -> Vec<f64> {
    let raw = load_column(case["data"].as_str().unwrap());
    match case["transform"].as_str().unwrap() {
        "ln" => raw.iter().map(|v| v.ln()).collect(),
        "log10" => raw.iter().map(|v| v.log10()).collect(),
        _ => raw,
    }
}

/// KPSS and ADF statistics on open datasets against numpy regressions
/// (tests/reference/unitroot_fixtures.py).
#[test]
fn statistics_match_numpy_regressions() {
    let fx = load_json("unitroot.json");
    for case in fx["cases"].as_array().unwrap() {
        let y = dataset(case);
        let terms = if case["trend"].as_bool().unwrap() {
            TrendTerms::LevelAndTrend
        } else {
            TrendTerms::Level
        };
        let k = kpss(&y, terms).unwrap();
        let want = case["kpss"].as_f64().unwrap();
        assert!(
            (k.statistic - want).abs() < 1e-10 * want.abs().max(1.0),
            "{case}: kpss {}",
            k.statistic
        );
        assert_eq!(k.lags as u64, case["kpss_lags"].as_u64().unwrap());
        let a = augmented_dickey_fuller(&y, terms).unwrap();
        assert_eq!(a.lags as u64, case["adf_lags"].as_u64().unwrap(), "{case}");
        let want = case["adf"].as_f64().unwrap();
        assert!(
            (a.statistic - want).abs() < 1e-8 * want.abs().max(1.0),
            "{case}: adf {}",
            a.statistic
        );
    }
}

/// MacKinnon's response surfaces against Fuller (1976), Table 8.5.2, from memory: for
/// n = 100, τ_μ 1% −3.51, 5% −2.89, 10% −2.58; τ_τ 1% −4.04, 5% −3.45, 10% −3.15
/// (two decimals; agreement within 0.02 expected from the different methods).
#[test]
fn adf_critical_values_match_fuller_table() {
    let x: Vec<f64> = Simulator::builder()
        .autoregressive(&[0.3])
        .build()
        .unwrap()
        .generate(102, 1);
    let lvl = augmented_dickey_fuller(&x, TrendTerms::Level).unwrap();
    let tr = augmented_dickey_fuller(&x, TrendTerms::LevelAndTrend).unwrap();
    // Compare at the regression's own sample size, close to 100.
    assert!(
        (85..=101).contains(&lvl.observations),
        "{}",
        lvl.observations
    );
    for (c, want) in lvl.critical_values.iter().zip([-2.58, -2.89, -3.51]) {
        let (level, got) = (c.level, c.value);
        assert!((got - want).abs() < 0.02, "τμ {level}: {got} vs {want}");
    }
    for (c, want) in tr.critical_values.iter().zip([-3.15, -3.45, -4.04]) {
        let (level, got) = (c.level, c.value);
        assert!((got - want).abs() < 0.02, "ττ {level}: {got} vs {want}");
    }
}

/// KPSS critical values (KPSS 1992, Table 1) against the simulated null distribution:
/// the 95% quantile of the level statistic for white noise, n = 400, 3000 replications,
/// should be near 0.463 (asymptotic; finite-n and Monte Carlo error allow ±0.04).
#[test]
fn kpss_level_critical_value_by_simulation() {
    let sim = Simulator::builder().build().unwrap();
    let mut stats: Vec<f64> = (0..3000u64)
        .into_par_iter()
        .map(|s| {
            kpss(&sim.generate(400, 60_000 + s), TrendTerms::Level)
                .unwrap()
                .statistic
        })
        .collect();
    stats.sort_by(|a, b| a.total_cmp(b));
    let q95 = stats[(0.95 * stats.len() as f64) as usize];
    assert!((q95 - 0.463).abs() < 0.04, "q95 {q95}");
}

/// A random walk gets d = 1 in ≥ 95% of replications; white noise d = 0 in ≥ 95%
/// (targets from the issue). Measured: 296/300 and 300/300.
#[test]
fn differencing_decisions() {
    let rw = Simulator::builder().differencing(1, 0).build().unwrap();
    let wn = Simulator::builder().build().unwrap();
    let reps = 300u64;
    let rw_ok = (0..reps)
        .into_par_iter()
        .filter(|s| {
            choose_differencing(&rw.generate(500, 70_000 + s), 1)
                .unwrap()
                .d
                == 1
        })
        .count();
    let wn_ok = (0..reps)
        .into_par_iter()
        .filter(|s| {
            choose_differencing(&wn.generate(500, 80_000 + s), 1)
                .unwrap()
                .d
                == 0
        })
        .count();
    eprintln!("random walk d = 1: {rw_ok}/{reps}; white noise d = 0: {wn_ok}/{reps}");
    assert!(
        rw_ok as f64 >= 0.95 * reps as f64,
        "random walk {rw_ok}/{reps}"
    );
    assert!(
        wn_ok as f64 >= 0.95 * reps as f64,
        "white noise {wn_ok}/{reps}"
    );
}

/// Order recovery at n = 500 with the default settings (200 replications each for the
/// non-seasonal models, 40 for the seasonal one; `examples/order_recovery.rs` runs the
/// full study, README table). Rates are printed; the floors asserted are the study's
/// rates (87.5%, 89%, 95%, 88%) less about three binomial standard errors — a search
/// that fell back to the former defaults (AICc, no correlogram starts, no traded orders:
/// 71.5%, 41.5%, 75%, 39%) fails every floor.
#[test]
fn order_recovery_rates() {
    struct Case {
        name: &'static str,
        sim: Simulator,
        period: usize,
        want: &'static str,
        reps: u64,
        floor: f64,
    }
    let cases = [
        Case {
            name: "(1,0,1)",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.4])
                .build()
                .unwrap(),
            period: 1,
            want: "ARMA(1,1)",
            reps: 200,
            floor: 0.8,
        },
        Case {
            name: "(2,0,0)",
            sim: Simulator::builder()
                .autoregressive(&[0.5, 0.3])
                .build()
                .unwrap(),
            period: 1,
            want: "ARMA(2,0)",
            reps: 200,
            floor: 0.82,
        },
        Case {
            name: "(0,1,1)",
            sim: Simulator::builder()
                .moving_average(&[0.5])
                .differencing(1, 0)
                .build()
                .unwrap(),
            period: 1,
            want: "ARIMA(0,1,1)",
            reps: 200,
            floor: 0.9,
        },
        Case {
            name: "(1,0,0)(0,1,1)12",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .seasonal(&[], &[-0.6], 12)
                .differencing(0, 1)
                .build()
                .unwrap(),
            period: 12,
            want: "SARIMA(1,0,0)×(0,1,1)₁₂",
            reps: 40,
            floor: 0.72,
        },
    ];
    for case in cases {
        let settings = SearchSettings::builder()
            .period(case.period)
            .build()
            .unwrap();
        let hits = (0..case.reps)
            .into_par_iter()
            .filter(|s| {
                let x = case.sim.generate(500, 90_000 + s);
                let label = search_orders(&x, &settings)
                    .unwrap()
                    .model
                    .blueprint()
                    .shape_label();
                // A mean/drift that is not significant is not counted against the orders.
                label
                    .trim_end_matches(" + mean")
                    .trim_end_matches(" + drift")
                    == case.want
            })
            .count();
        let rate = hits as f64 / case.reps as f64;
        eprintln!(
            "order recovery {}: {hits}/{} = {:.0}%",
            case.name,
            case.reps,
            100.0 * rate
        );
        assert!(rate >= case.floor, "{}: {rate}", case.name);
    }
}

/// On log airline passengers the chosen model's residuals pass the gate.
#[test]
fn airline_search_passes_the_gate() {
    let y: Vec<f64> = load_column("airline_passengers_1949_1960.csv")
        .iter()
        .map(|v| v.ln())
        .collect();
    let out = search_orders(&y, &SearchSettings::builder().period(12).build().unwrap()).unwrap();
    assert!(out.adequate, "{out}");
    assert_eq!(out.differencing.seasonal_d, 1, "{out}");
    assert!(out.candidates.len() >= 5);
    assert!(out.explanation.contains("chose"));
    // The search computes standard errors for the chosen candidate only; they are those
    // of a plain fit of the same blueprint, bit for bit.
    let plain = out.model.blueprint().fit(&y).unwrap();
    let bits = |m: &lagwise::FittedModel| -> Vec<u64> {
        m.coefficients()
            .iter()
            .flat_map(|c| [c.value.to_bits(), c.std_error.map_or(0, f64::to_bits)])
            .chain(m.covariance().unwrap_or(&[]).iter().map(|v| v.to_bits()))
            .collect()
    };
    assert!(out.model.covariance().is_some());
    assert_eq!(bits(&out.model), bits(&plain));
    assert_eq!(out.model.warnings(), plain.warnings());
    // So is the forecasting state, built for the chosen candidate only.
    let ahead = |m: &lagwise::FittedModel| -> Vec<u64> {
        m.forecast(24, &[0.9])
            .unwrap()
            .steps
            .iter()
            .flat_map(|s| [s.mean.to_bits(), s.sd.to_bits()])
            .collect()
    };
    assert_eq!(ahead(&out.model), ahead(&plain));
}

#[test]
fn strength_and_bad_input() {
    let seasonal: Vec<f64> = (0..240)
        .map(|t| {
            10.0 * ((t % 12) as f64 / 12.0 * std::f64::consts::TAU).sin()
                + ((t * 7919) % 17) as f64 * 0.1
        })
        .collect();
    assert!(seasonal_strength(&seasonal, 12).unwrap() > 0.9);
    let flat: Vec<f64> = (0..240).map(|t| ((t * 7919) % 17) as f64).collect();
    assert!(seasonal_strength(&flat, 12).unwrap() < 0.64);
    assert!(seasonal_strength(&flat, 1).is_err());
    let short = [1.0, 2.0, 1.5];
    assert!(matches!(
        kpss(&short, TrendTerms::Level).unwrap_err().kind(),
        ErrorKind::TooShort { .. }
    ));
    assert!(matches!(
        augmented_dickey_fuller(&short, TrendTerms::Level)
            .unwrap_err()
            .kind(),
        ErrorKind::TooShort { .. }
    ));
    assert!(search_orders(&short, &SearchSettings::default()).is_err());
    assert!(search_orders(&[5.0; 100], &SearchSettings::default()).is_err());
}

/// No false convergence in the account (daily-cycle issue): a candidate's maximised
/// log-likelihood is never below that of a candidate nested in it (orders no larger, a
/// constant only if it has one), since the larger model contains the smaller. Exhaustive
/// (3, 3) grids over ARMA(2,1) + level series of 200 readings: before nested candidates
/// warm-started larger ones, seed 700 alone had ARIMA(1,1,3) at log L −281.96 below the
/// nested ARIMA(1,1,1) at −281.43 (and the scan of these 12 seeds found violations in
/// several). Nested fits with a degenerate likelihood (log L > 1000, a unit-root boundary
/// effect noted in DEVELOPERS.md) are left out.
#[test]
fn no_candidate_is_worse_than_one_nested_in_it() {
    let settings = SearchSettings::builder()
        .exhaustive(true)
        .max_orders(3, 3, 0, 0)
        .build()
        .unwrap();
    let sim = Simulator::builder()
        .autoregressive(&[0.5, 0.3])
        .moving_average(&[0.4])
        .level(10.0)
        .build()
        .unwrap();
    let (mut pairs, mut bad) = (0, Vec::new());
    for seed in 700..712u64 {
        let out = search_orders(&sim.generate(200, seed), &settings).unwrap();
        for c in &out.candidates {
            for n in &out.candidates {
                let (Some(lc), Some(ln)) = (c.log_likelihood, n.log_likelihood) else {
                    continue;
                };
                let (a, b) = (c.shape, n.shape);
                let nested = a != b
                    && b.p <= a.p
                    && b.q <= a.q
                    && (!(b.mean || b.drift) || (a.mean || a.drift));
                if nested && ln < 1000.0 {
                    pairs += 1;
                    if lc < ln - 1e-6 {
                        bad.push(format!("seed {seed}: {a} {lc:.4} below nested {b} {ln:.4}"));
                    }
                }
            }
        }
    }
    assert!(pairs > 1000, "{pairs} nested pairs");
    assert!(bad.is_empty(), "{}", bad.join("\n"));
}

/// The daily-cycle case of the quick seasonal search (default settings): 21 days of
/// 15-minute readings of SARIMA(1,0,1)×(0,1,1)₉₆, gap-free and with drop-out runs. The
/// search finds the simulated orders (the order-recovery study in the README gives the
/// rate over 100 replications), never stops at a bound, and its account keeps the
/// screening's promise: a refit's exact maximum is at least the likelihood at its CSS
/// estimates, so its criterion is never above its screening value.
#[test]
fn daily_cycle_search_screens_then_refits() {
    let build = |dropouts: bool| {
        let mut b = Simulator::builder();
        b.autoregressive(&[0.6])
            .moving_average(&[0.3])
            .seasonal(&[], &[-0.6], 96)
            .differencing(0, 1)
            .level(61.0)
            .innovation_sd(0.3);
        if dropouts {
            b.dropouts(lagwise::Dropouts::new(0.0025, 8.0));
        }
        b.build().unwrap()
    };
    let settings = SearchSettings::builder().period(96).build().unwrap();
    let bounds = settings.max_orders();
    let mut hits = 0;
    let runs: Vec<(bool, u64)> = [false, true]
        .into_iter()
        .flat_map(|d| (0..3u64).map(move |s| (d, 77_000 + s)))
        .collect();
    for &(dropouts, seed) in &runs {
        let x = build(dropouts).generate(2016, seed);
        assert_eq!(x.iter().any(|v| v.is_nan()), dropouts);
        let out = search_orders(&x, &settings).unwrap();
        let shape = out.model.blueprint().shape();
        if shape.to_string() == "SARIMA(1,0,1)×(0,1,1)₉₆" {
            hits += 1;
        }
        assert!(
            shape.p < bounds.p as u8
                && shape.q < bounds.q as u8
                && shape.seasonal_p < bounds.seasonal_p as u8
                && shape.seasonal_q < bounds.seasonal_q as u8,
            "a choice at a bound: {out}"
        );
        assert!(out.adequate, "{out}");
        let refitted: Vec<_> = out.candidates.iter().filter(|c| c.refitted).collect();
        assert!(
            !refitted.is_empty() && refitted.len() <= 2 * settings.finalists(),
            "{out}"
        );
        assert!(out.candidates.len() > refitted.len(), "{out}");
        for c in &out.candidates {
            assert!(c.screening_value.is_some() || c.failure.is_some(), "{out}");
            if c.refitted {
                let (Some(crit), Some(screen)) = (c.criterion, c.screening_value) else {
                    continue;
                };
                assert!(
                    crit <= screen + 1e-6,
                    "{}: {crit} above {screen}\n{out}",
                    c.shape
                );
            } else {
                assert!(c.criterion.is_none() && c.log_likelihood.is_none(), "{out}");
            }
        }
        assert!(out.explanation.contains("refitted by"), "{out}");
    }
    assert!(
        hits >= 5,
        "{hits} of {} found the simulated orders",
        runs.len()
    );
}

/// A search whose estimator is CSS ranks candidates by their screening value (the
/// criterion from the exact likelihood at the CSS estimates) and returns a CSS fit.
#[test]
fn css_search_ranks_by_screening_values() {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.4])
        .build()
        .unwrap();
    let x = sim.generate(500, 90_003);
    let settings = SearchSettings::builder()
        .estimator(lagwise::Estimator::ConditionalSumOfSquares)
        .build()
        .unwrap();
    let out = search_orders(&x, &settings).unwrap();
    assert!(!out.model.log_likelihood().is_exact(), "{out}");
    assert!(out.candidates.iter().all(|c| c.refitted), "{out}");
    for c in out.candidates.iter().filter(|c| c.failure.is_none()) {
        assert_eq!(c.criterion, c.screening_value, "{out}");
    }
    assert_eq!(
        out.model.blueprint().shape().to_string(),
        "ARMA(1,1)",
        "{out}"
    );
}

/// A seasonal search's candidates without seasonal terms carry the label their model
/// has (`ARMA(0,0) + mean`, not a seasonal form with zero orders), so the account marks
/// the chosen one.
#[test]
fn non_seasonal_candidates_of_a_seasonal_search_are_labelled_as_fitted() {
    let x = Simulator::builder()
        .level(1.1)
        .innovation_sd(0.02)
        .build()
        .unwrap()
        .generate(700, 9);
    let out = search_orders(&x, &SearchSettings::builder().period(96).build().unwrap()).unwrap();
    assert_eq!(out.differencing.seasonal_d, 0, "{out}");
    let chosen = out.model.blueprint().shape();
    assert!(out.candidates.iter().any(|c| c.shape == chosen), "{out}");
    assert!(out.to_string().contains("◀ chosen"), "{out}");
    for c in &out.candidates {
        let seasonal = c.shape.seasonal_p + c.shape.seasonal_d + c.shape.seasonal_q > 0;
        assert_eq!(c.shape.period > 1, seasonal, "{}", c.shape);
    }
}
