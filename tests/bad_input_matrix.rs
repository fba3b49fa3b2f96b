//! The bad-input matrix: each class of bad input against each entry point, with the exact
//! typed error (variant) expected, or "ok" where the input is handled by design (NaN =
//! missing reading; extreme but finite values; stuck-sensor steps). Nothing here may
//! panic; every row runs.

use lagwise::{
    Blueprint, Correlogram, InformationCriteria, PortmanteauScan, SearchSettings, Simulator,
    cross_correlogram, exact_log_likelihood,
};
use lagwise::{TrendTerms, augmented_dickey_fuller, kpss, search_orders};

fn variant<T>(r: lagwise::Result<T>) -> String {
    match r {
        Ok(_) => "ok".into(),
        Err(e) => {
            let s = format!("{:?}", e.kind());
            s.split([' ', '{', '(']).next().unwrap_or("").to_string()
        }
    }
}

fn quarter_hours() -> lagwise::GridSettings {
    lagwise::GridSettings::builder(900_000).build().unwrap()
}

fn ar1() -> Blueprint {
    Blueprint::builder().nonseasonal(1, 0, 0).build().unwrap()
}

#[test]
fn matrix() {
    let good: Vec<f64> = Simulator::builder()
        .autoregressive(&[0.5])
        .build()
        .unwrap()
        .generate(200, 1);
    let mut with_nan = good.clone();
    with_nan[10] = f64::NAN;
    with_nan[11] = f64::NAN;
    let mut with_inf = good.clone();
    with_inf[5] = f64::NEG_INFINITY;
    let huge: Vec<f64> = good.iter().map(|v| v * 1e300).collect();
    let tiny: Vec<f64> = good.iter().map(|v| v * 1e-300).collect();
    let stuck: Vec<f64> = (0..200).map(|t| (t / 25) as f64).collect(); // integer-like steps
    let constant = vec![4.2; 200];
    let all_nan = vec![f64::NAN; 50];
    let fit = ar1().fit(&good).unwrap();

    type Row = (&'static str, &'static str, String, &'static str);
    let rows: Vec<Row> = vec![
        // NaN: handled everywhere.
        (
            "nan",
            "correlogram",
            variant(Correlogram::compute(&with_nan, 10)),
            "ok",
        ),
        (
            "nan",
            "portmanteau",
            variant(PortmanteauScan::compute(&with_nan, 10, 1)),
            "ok",
        ),
        ("nan", "fit", variant(ar1().fit(&with_nan)), "ok"),
        (
            "nan",
            "exact likelihood",
            variant(exact_log_likelihood(&[0.5], &[], 1.0, &with_nan)),
            "ok",
        ),
        (
            "nan",
            "kpss",
            variant(kpss(&with_nan, TrendTerms::Level)),
            "ok",
        ),
        (
            "nan",
            "monitor",
            variant(fit.monitor(0.99).unwrap().observe(f64::NAN)),
            "ok",
        ),
        // ±inf
        (
            "inf",
            "correlogram",
            variant(Correlogram::compute(&with_inf, 10)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "cross-correlogram",
            variant(cross_correlogram(&good, &with_inf, 5)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "portmanteau",
            variant(PortmanteauScan::compute(&with_inf, 10, 0)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "fit",
            variant(ar1().fit(&with_inf)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "exact likelihood",
            variant(exact_log_likelihood(&[0.5], &[], 1.0, &with_inf)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "kpss",
            variant(kpss(&with_inf, TrendTerms::Level)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "adf",
            variant(augmented_dickey_fuller(&with_inf, TrendTerms::Level)),
            "NonFiniteReading",
        ),
        (
            "inf",
            "search",
            variant(search_orders(&with_inf, &SearchSettings::default())),
            "NonFiniteReading",
        ),
        (
            "inf",
            "monitor",
            variant(fit.monitor(0.99).unwrap().observe(f64::INFINITY)),
            "NonFiniteReading",
        ),
        // empty
        (
            "empty",
            "correlogram",
            variant(Correlogram::compute(&[], 0)),
            "EmptySeries",
        ),
        (
            "empty",
            "portmanteau",
            variant(PortmanteauScan::compute(&[], 1, 0)),
            "EmptySeries",
        ),
        ("empty", "fit", variant(ar1().fit(&[])), "EmptySeries"),
        (
            "empty",
            "exact likelihood",
            variant(exact_log_likelihood(&[], &[], 1.0, &[])),
            "EmptySeries",
        ),
        (
            "empty",
            "kpss",
            variant(kpss(&[], TrendTerms::Level)),
            "EmptySeries",
        ),
        (
            "empty",
            "search",
            variant(search_orders(&[], &SearchSettings::default())),
            "EmptySeries",
        ),
        // one reading
        (
            "one reading",
            "correlogram",
            variant(Correlogram::compute(&[1.0], 0)),
            "TooShort",
        ),
        ("one reading", "fit", variant(ar1().fit(&[1.0])), "TooShort"),
        (
            "one reading",
            "kpss",
            variant(kpss(&[1.0], TrendTerms::Level)),
            "TooShort",
        ),
        // shorter than the model needs
        (
            "too short",
            "fit",
            variant(
                Blueprint::builder()
                    .nonseasonal(3, 1, 3)
                    .build()
                    .unwrap()
                    .fit(&good[..6]),
            ),
            "TooShort",
        ),
        (
            "too short",
            "seasonal fit",
            variant(
                Blueprint::builder()
                    .seasonal(0, 1, 1, 12)
                    .build()
                    .unwrap()
                    .fit(&good[..12]),
            ),
            "TooShort",
        ),
        (
            "too short",
            "adf",
            variant(augmented_dickey_fuller(&good[..10], TrendTerms::Level)),
            "TooShort",
        ),
        // constant
        (
            "constant",
            "correlogram",
            variant(Correlogram::compute(&constant, 5)),
            "ConstantSeries",
        ),
        (
            "constant",
            "fit",
            variant(ar1().fit(&constant)),
            "ConstantSeries",
        ),
        (
            "constant",
            "kpss",
            variant(kpss(&constant, TrendTerms::Level)),
            "ConstantSeries",
        ),
        (
            "constant",
            "search",
            variant(search_orders(&constant, &SearchSettings::default())),
            "ConstantSeries",
        ),
        // all missing
        (
            "all missing",
            "correlogram",
            variant(Correlogram::compute(&all_nan, 5)),
            "AllMissing",
        ),
        (
            "all missing",
            "fit",
            variant(ar1().fit(&all_nan)),
            "AllMissing",
        ),
        (
            "all missing",
            "exact likelihood",
            variant(exact_log_likelihood(&[0.5], &[], 1.0, &all_nan)),
            "AllMissing",
        ),
        // extreme but finite values: handled
        (
            "1e300",
            "correlogram",
            variant(Correlogram::compute(&huge, 10)),
            "ok",
        ),
        (
            "1e-300",
            "correlogram",
            variant(Correlogram::compute(&tiny, 10)),
            "ok",
        ),
        (
            "1e300",
            "fit",
            variant(ar1().fit(&huge)),
            "NumericalFailure",
        ),
        // σ² of readings of order 1e±300 is of order 1e±600: not representable in f64,
        // so the fit says so; the correlogram works on rescaled values and is fine.
        (
            "1e-300",
            "fit",
            variant(ar1().fit(&tiny)),
            "NumericalFailure",
        ),
        (
            "1e150",
            "fit",
            variant(ar1().fit(&good.iter().map(|v| v * 1e150).collect::<Vec<_>>())),
            "ok",
        ),
        (
            "1e-150",
            "fit",
            variant(ar1().fit(&good.iter().map(|v| v * 1e-150).collect::<Vec<_>>())),
            "ok",
        ),
        // stuck sensor: integer-like steps are a valid (if poorly modelled) series
        (
            "stuck steps",
            "correlogram",
            variant(Correlogram::compute(&stuck, 10)),
            "ok",
        ),
        ("stuck steps", "fit", variant(ar1().fit(&stuck)), "ok"),
        // absurd orders and periods: refused when the blueprint is built
        (
            "absurd orders",
            "blueprint",
            variant(Blueprint::builder().nonseasonal(500, 0, 0).build()),
            "InvalidSpecification",
        ),
        (
            "absurd orders",
            "blueprint",
            variant(Blueprint::builder().seasonal(1, 0, 0, 1_000_000).build()),
            "InvalidSpecification",
        ),
        (
            "period 0",
            "blueprint",
            variant(Blueprint::builder().seasonal(1, 0, 0, 0).build()),
            "InvalidSpecification",
        ),
        (
            "period 1",
            "blueprint",
            variant(Blueprint::builder().seasonal(0, 1, 1, 1).build()),
            "InvalidSpecification",
        ),
        (
            "period 1",
            "seasonal strength",
            variant(lagwise::seasonal_strength(&good, 1)),
            "InvalidArgument",
        ),
        (
            "lag too large",
            "correlogram",
            variant(Correlogram::compute(&good, 200)),
            "InvalidArgument",
        ),
        // regressor shapes
        (
            "regressor count",
            "fit",
            variant(
                Blueprint::builder()
                    .exogenous(1)
                    .build()
                    .unwrap()
                    .fit(&good),
            ),
            "InvalidArgument",
        ),
        (
            "regressor length",
            "fit",
            variant(
                Blueprint::builder()
                    .exogenous(1)
                    .build()
                    .unwrap()
                    .fit_regression(&good, &[&good[..50]]),
            ),
            "LengthMismatch",
        ),
        (
            "regressor length",
            "cross-correlogram",
            variant(cross_correlogram(&good, &good[..50], 5)),
            "LengthMismatch",
        ),
        (
            "future regressors",
            "forecast",
            variant(
                Blueprint::builder()
                    .exogenous(1)
                    .build()
                    .unwrap()
                    .fit_regression(&good, &[&stuck])
                    .unwrap()
                    .forecast(3, &[0.9]),
            ),
            "InvalidArgument",
        ),
        // corrupted JSON
        (
            "corrupt json",
            "model",
            variant(lagwise::model_from_json("{\"schema\":")),
            "CorruptStore",
        ),
        (
            "corrupt json",
            "monitor",
            variant(lagwise::monitor_from_json("[1,2,3]")),
            "CorruptStore",
        ),
        (
            "corrupt json",
            "blueprint",
            variant(lagwise::blueprint_from_json(
                "{\"schema\":\"lagwise.blueprint\",\"version\":1,\"body\":{}}",
            )),
            "CorruptStore",
        ),
        // invalid levels and counts
        (
            "level 1.0",
            "bands",
            variant(
                Correlogram::compute(&good, 5)
                    .unwrap()
                    .bands(1.0, lagwise::BandRule::WhiteNoise),
            ),
            "InvalidArgument",
        ),
        (
            "level NaN",
            "forecast",
            variant(fit.forecast(3, &[f64::NAN])),
            "InvalidArgument",
        ),
        (
            "alarm 0",
            "monitor",
            variant(fit.monitor(0.0)),
            "InvalidArgument",
        ),
        (
            "nan in batch",
            "likelihood batch",
            variant(ar1().likelihood_surface(&with_nan).and_then(|s| {
                let mut out = Vec::new();
                s.exact_log_likelihoods_with(
                    &[0.1, 1.5, f64::NAN, 0.3],
                    &mut lagwise::FitWorkspace::new(),
                    &mut out,
                )?;
                // Inadmissible and NaN points give NaN values, the rest are finite.
                assert!(
                    out.len() == 4 && out[1].is_nan() && out[2].is_nan() && out[0].is_finite(),
                    "wrong values {out:?}"
                );
                Ok(())
            })),
            "ok",
        ),
        (
            "nan log L",
            "criteria",
            variant(InformationCriteria::from_log_likelihood(f64::NAN, 2, 10)),
            "InvalidArgument",
        ),
        // Seasonal terms on too short a series: two full cycles are needed.
        (
            "period over half the series",
            "fit",
            variant(
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .seasonal(1, 0, 0, 120)
                    .build()
                    .unwrap()
                    .fit(&good),
            ),
            "InvalidArgument",
        ),
        (
            "under two cycles, D = 1",
            "fit",
            variant(
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .seasonal(0, 1, 0, 101)
                    .build()
                    .unwrap()
                    .fit(&good),
            ),
            "InvalidArgument",
        ),
        (
            "period over half the series",
            "order search",
            variant(search_orders(
                &good,
                &SearchSettings::builder().period(150).build().unwrap(),
            )),
            "InvalidArgument",
        ),
        (
            "no finalists",
            "search settings",
            variant(SearchSettings::builder().finalists(0).build()),
            "InvalidArgument",
        ),
        (
            "21 finalists",
            "search settings",
            variant(SearchSettings::builder().finalists(21).build()),
            "InvalidArgument",
        ),
        // Long cycles by harmonic terms.
        (
            "harmonics beyond period/2",
            "blueprint",
            variant(Blueprint::builder().cycle(96, 49).build()),
            "InvalidSpecification",
        ),
        (
            "no harmonics",
            "blueprint",
            variant(Blueprint::builder().cycle(96, 0).build()),
            "InvalidSpecification",
        ),
        (
            "cycle period 1",
            "blueprint",
            variant(Blueprint::builder().cycle(1, 1).build()),
            "InvalidSpecification",
        ),
        (
            "absurd cycle period",
            "blueprint",
            variant(Blueprint::builder().cycle(2_000_000, 1).build()),
            "InvalidSpecification",
        ),
        (
            "four cycles",
            "blueprint",
            variant(
                Blueprint::builder()
                    .cycle(24, 1)
                    .cycle(96, 1)
                    .cycle(672, 1)
                    .cycle(1344, 1)
                    .build(),
            ),
            "InvalidSpecification",
        ),
        (
            "cycle = seasonal period, differenced",
            "blueprint",
            variant(
                Blueprint::builder()
                    .seasonal(0, 1, 1, 96)
                    .cycle(96, 2)
                    .build(),
            ),
            "InvalidSpecification",
        ),
        (
            "cycle = seasonal period, not differenced",
            "blueprint",
            variant(
                Blueprint::builder()
                    .seasonal(0, 0, 1, 96)
                    .cycle(96, 2)
                    .build(),
            ),
            "ok",
        ),
        (
            "cycle removed by seasonal difference",
            "blueprint",
            variant(
                Blueprint::builder()
                    .seasonal(0, 1, 1, 96)
                    .cycle(48, 2)
                    .build(),
            ),
            "InvalidSpecification",
        ),
        (
            "cycle over half the series",
            "fit",
            variant(
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .cycle(120, 2)
                    .build()
                    .unwrap()
                    .fit(&good),
            ),
            "InvalidArgument",
        ),
        (
            "cycle over half the series",
            "order search",
            variant(search_orders(
                &good,
                &SearchSettings::builder().cycle(150, 3).build().unwrap(),
            )),
            "InvalidArgument",
        ),
        (
            "harmonics beyond period/2",
            "search settings",
            variant(SearchSettings::builder().cycle(10, 6).build()),
            "InvalidArgument",
        ),
        (
            "no harmonics",
            "search settings",
            variant(SearchSettings::builder().period(24).cycle(168, 0).build()),
            "InvalidArgument",
        ),
        (
            "wave beyond period/2",
            "simulator",
            variant(Simulator::builder().wave(10, 6, 1.0, 0.0).build()),
            "InvalidArgument",
        ),
        (
            "non-finite wave",
            "simulator",
            variant(Simulator::builder().wave(10, 1, f64::NAN, 0.0).build()),
            "InvalidArgument",
        ),
        // Timestamped readings onto a grid.
        (
            "empty",
            "grid",
            variant(lagwise::place_on_grid(&[], &[], &quarter_hours())),
            "EmptySeries",
        ),
        (
            "length mismatch",
            "grid",
            variant(lagwise::place_on_grid(&[0, 1], &[1.0], &quarter_hours())),
            "LengthMismatch",
        ),
        (
            "inf",
            "grid",
            variant(lagwise::place_on_grid(
                &[0, 900_000],
                &[1.0, f64::INFINITY],
                &quarter_hours(),
            )),
            "NonFiniteReading",
        ),
        (
            "all missing",
            "grid",
            variant(lagwise::place_on_grid(
                &[0, 900_000],
                &[f64::NAN; 2],
                &quarter_hours(),
            )),
            "AllMissing",
        ),
        (
            "absurd span",
            "grid",
            variant(lagwise::place_on_grid(
                &[0, i64::MAX / 2],
                &[1.0, 2.0],
                &quarter_hours(),
            )),
            "InvalidArgument",
        ),
        (
            "extreme timestamps",
            "grid",
            variant(lagwise::place_on_grid(
                &[i64::MIN, i64::MAX],
                &[1.0, 2.0],
                &quarter_hours(),
            )),
            "InvalidArgument",
        ),
        (
            "zero cadence",
            "grid settings",
            variant(lagwise::GridSettings::builder(0).build()),
            "InvalidArgument",
        ),
        (
            "nan timestamp",
            "timestamps",
            variant(lagwise::millis_from_seconds(&[0.0, f64::NAN])),
            "InvalidArgument",
        ),
        (
            "inf timestamp",
            "timestamps",
            variant(lagwise::millis_from_seconds(&[f64::INFINITY])),
            "InvalidArgument",
        ),
        // Sensor events and gap filling.
        (
            "nan",
            "event search",
            variant(
                ar1()
                    .fit(&with_nan)
                    .unwrap()
                    .find_events(&with_nan, &Default::default()),
            ),
            "ok",
        ),
        (
            "inf",
            "event search",
            variant(fit.find_events(&with_inf, &Default::default())),
            "NonFiniteReading",
        ),
        (
            "other length",
            "event search",
            variant(fit.find_events(&good[..150], &Default::default())),
            "InvalidArgument",
        ),
        (
            "empty",
            "event search",
            variant(fit.find_events(&[], &Default::default())),
            "EmptySeries",
        ),
        (
            "no kinds",
            "event settings",
            variant(lagwise::EventSettings::builder().kinds(&[]).build()),
            "InvalidArgument",
        ),
        (
            "decay 1",
            "event settings",
            variant(lagwise::EventSettings::builder().decay(1.0).build()),
            "InvalidArgument",
        ),
        (
            "nan",
            "gap filling",
            variant(fit.fill_gaps(&with_nan, &[0.95])),
            "ok",
        ),
        (
            "inf",
            "gap filling",
            variant(fit.fill_gaps(&with_inf, &[0.95])),
            "NonFiniteReading",
        ),
        (
            "all missing",
            "gap filling",
            variant(fit.fill_gaps(&all_nan, &[0.95])),
            "AllMissing",
        ),
        (
            "level 1",
            "gap filling",
            variant(fit.fill_gaps(&with_nan, &[1.0])),
            "InvalidArgument",
        ),
        (
            "stuck",
            "gap filling",
            variant(fit.fill_gaps(&stuck, &[0.95])),
            "ok",
        ),
    ];
    let mut wrong = Vec::new();
    for (class, entry, got, want) in &rows {
        if got != want {
            wrong.push(format!("{class} → {entry}: got {got}, expected {want}"));
        }
    }
    assert!(
        wrong.is_empty(),
        "{} of {} rows wrong:\n{}",
        wrong.len(),
        rows.len(),
        wrong.join("\n")
    );
    assert!(rows.len() >= 95, "rows were removed: {}", rows.len());
}
