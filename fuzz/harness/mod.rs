//! Byte-decoding harnesses shared by the cargo-fuzz targets (fuzz/fuzz_targets) and the
//! stable-toolchain corpus replay test (tests/fuzz_replay.rs). Keeping one decoder means
//! CI exercises exactly the code paths the fuzzer explores.
#![allow(dead_code)]

/// Decode: byte 0 = max lag, byte 1 = fitted coefficients, then 8-byte little-endian f64s
/// (any bit pattern: NaN, ±inf, subnormals, extremes) for the series.
pub(crate) fn correlogram(data: &[u8]) {
    if data.len() < 2 {
        return;
    }
    let max_lag = data[0] as usize;
    let fitted = data[1] as usize % 16;
    let values: Vec<f64> = data[2..]
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]]))
        .collect();
    if let Ok(cg) = lagwise::Correlogram::compute(&values, max_lag) {
        for r in cg.autocorrelations().values() {
            assert!(r.abs() <= 1.0, "autocorrelation outside [-1, 1]: {r}");
        }
        for p in cg.partial_autocorrelations().values() {
            assert!(
                p.abs() <= 1.0,
                "partial autocorrelation outside [-1, 1]: {p}"
            );
        }
        for rule in [
            lagwise::BandRule::WhiteNoise,
            lagwise::BandRule::BartlettCumulative,
        ] {
            let _ = cg.bands(0.95, rule);
        }
    }
    if let Ok(scan) = lagwise::PortmanteauScan::compute(&values, max_lag, fitted) {
        for row in scan.rows() {
            if let Some(p) = row.ljung_box_p_value {
                assert!((0.0..=1.0).contains(&p) || p.is_nan(), "p-value {p}");
            }
        }
    }
    let half = values.len() / 2;
    let _ = lagwise::cross_correlogram(&values[..half], &values[half..2 * half], max_lag);
}

/// A small byte reader: every decode is total (missing bytes read as zero).
struct Bytes<'a> {
    data: &'a [u8],
    pos: usize,
}

impl<'a> Bytes<'a> {
    fn new(data: &'a [u8]) -> Self {
        Bytes { data, pos: 0 }
    }
    fn byte(&mut self) -> u8 {
        let b = self.data.get(self.pos).copied().unwrap_or(0);
        self.pos += 1;
        b
    }
    fn f64(&mut self) -> f64 {
        let mut b = [0u8; 8];
        for x in &mut b {
            *x = self.byte();
        }
        f64::from_le_bytes(b)
    }
    /// Remaining bytes as readings; a few bytes per reading so short inputs still make
    /// series: two-byte readings scaled, with 0xFFFF = NaN and 0xFFFE = +inf.
    fn readings(&mut self, raw: bool) -> Vec<f64> {
        let rest = &self.data[self.pos.min(self.data.len())..];
        if raw {
            return rest
                .chunks_exact(8)
                .map(|c| f64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]]))
                .collect();
        }
        rest.chunks_exact(2)
            .map(|c| match u16::from_le_bytes([c[0], c[1]]) {
                0xFFFF => f64::NAN,
                0xFFFE => f64::INFINITY,
                v => (v as f64 - 32768.0) / 256.0,
            })
            .collect()
    }
}

/// Decode a blueprint from bytes: orders, differencing, period, mean/drift, estimator,
/// an optional held coefficient, a small iteration cap. Build errors are fine.
fn blueprint(b: &mut Bytes<'_>) -> Option<lagwise::Blueprint> {
    let p = (b.byte() % 4) as usize;
    let d = (b.byte() % 3) as usize;
    let q = (b.byte() % 4) as usize;
    let sp = (b.byte() % 2) as usize;
    let sd = (b.byte() % 2) as usize;
    let sq = (b.byte() % 2) as usize;
    let period = (b.byte() % 14) as usize;
    let flags = b.byte();
    let mut builder = lagwise::Blueprint::builder();
    builder
        .nonseasonal(p, d, q)
        .seasonal(sp, sd, sq, period)
        .estimator(match flags % 3 {
            0 => lagwise::Estimator::ConditionalSumOfSquares,
            1 => lagwise::Estimator::ExactLikelihood,
            _ => lagwise::Estimator::StagedLikelihood,
        })
        .max_iterations(20);
    if flags & 4 != 0 {
        builder.mean_term(flags & 8 != 0);
    }
    if flags & 16 != 0 {
        builder.drift_term(true);
    }
    if flags & 32 != 0 {
        let v = b.f64();
        builder.hold(lagwise::Term::Ar(1), v);
    }
    if flags & 64 != 0 {
        // A long cycle by harmonics (zero harmonics, more than period/2, the seasonal
        // period itself or one the seasonal difference removes are build errors).
        let cycle = 2 + (b.byte() % 60) as usize;
        let harmonics = (b.byte() % 5) as usize;
        builder.cycle(cycle, harmonics);
    }
    builder.build().ok()
}

/// Fitting: bytes → specification + series; then the residual check, criteria and a
/// forecast, whatever the outcome of the fit. Checks invariants of successful fits. With
/// bit 1 of the first byte set, an order search over the same readings first.
pub(crate) fn fit(data: &[u8]) {
    let mut b = Bytes::new(data);
    let first = b.byte();
    let raw = first & 1 == 1;
    let Some(bp) = blueprint(&mut b) else { return };
    let x = b.readings(raw);
    if x.len() > 400 {
        return;
    }
    if first & 2 != 0 {
        search(&bp, &x, first);
    }
    let Ok(fit) = bp.fit(&x) else { return };
    assert!(fit.innovation_variance() > 0.0 && fit.innovation_variance().is_finite());
    for c in fit.coefficients() {
        assert!(c.value.is_finite(), "{c:?}");
    }
    assert!(fit.stages().iter().all(|s| s.iterations <= 20 * 4));
    let _ = fit.residual_check(fit.default_check_lags(), 0.05);
    let _ = fit.criteria();
    let _ = format!("{fit}");
    if let Ok(fc) = fit.forecast(5, &[0.8, 0.95]) {
        for s in &fc.steps {
            assert!(s.sd >= 0.0 || s.sd.is_nan());
        }
    }
}

/// An order search at the blueprint's period (and its cycles, harmonics up to the
/// blueprint's count) over the same readings (settings from the first byte's bits:
/// screening on or off, one or three finalists); a successful search's account must hold
/// its chosen model, refitted, with a finite criterion.
fn search(bp: &lagwise::Blueprint, x: &[f64], bits: u8) {
    let mut settings = lagwise::SearchSettings::builder();
    settings
        .period(bp.shape().period.max(1) as usize)
        .max_orders(2, 2, 1, 1)
        .screening(bits & 4 == 0)
        .finalists(if bits & 8 == 0 { 3 } else { 1 });
    for c in bp.cycles() {
        settings.cycle(c.period, c.harmonics);
    }
    let Ok(settings) = settings.build() else {
        return;
    };
    let Ok(out) = lagwise::search_orders(x, &settings) else {
        return;
    };
    let chosen = out.model.blueprint().shape();
    let entry = out.candidates.iter().find(|c| c.shape == chosen);
    let entry = entry.unwrap_or_else(|| panic!("chosen {chosen} not in the account\n{out}"));
    assert!(
        entry.refitted && entry.criterion.is_some_and(f64::is_finite),
        "{out}"
    );
    assert!(
        out.model.coefficients().iter().all(|c| c.value.is_finite()),
        "{out}"
    );
    let _ = out.to_string();
}

/// Forecasting and online updating: fit a fixed small model to the first half, then feed
/// the second half (any values) to the monitor and forecast from it.
pub(crate) fn monitor(data: &[u8]) {
    let mut b = Bytes::new(data);
    let alarm = (b.byte() as f64 + 1.0) / 257.0;
    let horizon = b.byte() as usize;
    let x = b.readings(false);
    let half = x.len() / 2;
    let Ok(bp) = lagwise::Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .max_iterations(20)
        .build()
    else {
        return;
    };
    let Ok(fit) = bp.fit(&x[..half]) else { return };
    let Ok(mut m) = fit.monitor(alarm) else {
        return;
    };
    // The same watch with the online shift test, its settings from the input.
    let window = 1 + (b.byte() as usize % 16);
    let run = 50.0 * 1.06f64.powi(b.byte() as i32);
    let test = lagwise::ShiftTest::builder()
        .decision_window(window)
        .look_back(window + b.byte() as usize % 64)
        .in_control_run(run)
        .catch_shift(0.2 + b.byte() as f64 / 50.0)
        .build();
    let mut armed = test.ok().map(|t| m.clone().with_shift_test(&t));
    for &r in &x[half..] {
        let _ = m.observe(r);
        if let Some(a) = armed.as_mut()
            && let Ok(check) = a.observe(r)
            && let Some(f) = check.finding
        {
            assert!(f.se > 0.0 && f.onset <= check.index, "{f:?}");
        }
    }
    let _ = m.forecast(horizon, &[alarm]);
    let _ = fit.forecast(horizon, &[0.5, alarm]);
    if let Some(a) = armed {
        let _ = a.forecast(horizon, &[alarm]);
        let text = lagwise::monitor_to_json(&a).expect("a monitor serialises");
        let back = lagwise::monitor_from_json(&text).expect("a stored monitor restores");
        // Compared as text: missing readings (NaN) are never equal to themselves.
        assert_eq!(lagwise::monitor_to_json(&back).unwrap(), text);
    }
}

/// Deserialising stored models and monitors: arbitrary text must be refused cleanly.
pub(crate) fn restore(data: &[u8]) {
    let text = String::from_utf8_lossy(data);
    if let Ok(m) = lagwise::model_from_json(&text) {
        let _ = m.forecast(3, &[0.9]);
        let _ = m.monitor(0.99).map(|mut mon| mon.observe(1.0));
    }
    if let Ok(mut mon) = lagwise::monitor_from_json(&text) {
        let _ = mon.observe(1.0);
        let _ = mon.forecast(3, &[0.9]);
    }
    let _ = lagwise::blueprint_from_json(&text);
    // Serialised diagnostics (no envelope): whatever restores must be usable.
    if let Ok(cg) = serde_json::from_str::<lagwise::Correlogram>(&text) {
        let _ = cg.bands(0.95, lagwise::BandRule::BartlettCumulative);
        let _ = (cg.max_lag(), cg.partial_band(0.95), cg.autocorrelation(1));
    }
    if let Ok(scan) = serde_json::from_str::<lagwise::PortmanteauScan>(&text) {
        let _ = (scan.row(0), scan.row(1), scan.smallest_ljung_box_p_value());
    }
    if let Ok(check) = serde_json::from_str::<lagwise::ResidualCheck>(&text) {
        let _ = (check.verdict_line(), check.health_line());
    }
    if let Ok(cc) = serde_json::from_str::<lagwise::CrossCorrelogram>(&text) {
        let _ = (cc.at(-1), cc.at(0), cc.band(0.95));
    }
}

/// Decode: bytes 0–1 = cadence in seconds (0 allowed, refused), byte 2 = tolerance in
/// percent of the cadence, byte 3 = slot rule, byte 4 bit 0 = explicit origin; then
/// 16-byte records of an i64 timestamp (ms) and an f64 reading, any bit patterns.
/// Checks the report's accounting and that the grid is no longer than its limit.
pub(crate) fn grid(data: &[u8]) {
    if data.len() < 5 {
        return;
    }
    let cadence = i64::from(u16::from_le_bytes([data[0], data[1]])) * 1000;
    let rule = [
        lagwise::SlotRule::Mean,
        lagwise::SlotRule::Median,
        lagwise::SlotRule::Latest,
        lagwise::SlotRule::Earliest,
        lagwise::SlotRule::Smallest,
        lagwise::SlotRule::Largest,
    ][data[3] as usize % 6];
    let mut times = Vec::new();
    let mut values = Vec::new();
    for c in data[5..].chunks_exact(16) {
        times.push(i64::from_le_bytes([
            c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7],
        ]));
        values.push(f64::from_le_bytes([
            c[8], c[9], c[10], c[11], c[12], c[13], c[14], c[15],
        ]));
    }
    let mut builder = lagwise::GridSettings::builder(cadence);
    builder
        .tolerance_ms(cadence / 2 * i64::from(data[2] % 101) / 100)
        .slot_rule(rule);
    if data[4] & 1 == 1
        && let Some(&t) = times.first()
    {
        builder.origin_ms(t.saturating_sub(cadence));
    }
    let Ok(settings) = builder.build() else {
        return;
    };
    if let Ok(g) = lagwise::place_on_grid(&times, &values, &settings) {
        let r = g.report;
        let occupied = g.values.iter().filter(|v| !v.is_nan()).count();
        assert_eq!(
            r.readings,
            r.empty_readings + r.off_grid + r.before_origin + r.merged + occupied,
            "every reading accounted for"
        );
        assert!(g.values.len() as u64 <= lagwise::MAX_GRID_SLOTS);
        assert!(g.values.iter().all(|v| !v.is_infinite()));
    }
}

/// Sensor events and gap filling: bytes → specification, settings and series; fit, then
/// the event search and the smoother, whatever the data. Checks the invariants of what
/// they return.
pub(crate) fn events(data: &[u8]) {
    let mut b = Bytes::new(data);
    let raw = b.byte() & 1 == 1;
    let Some(bp) = blueprint(&mut b) else { return };
    let kinds_bits = b.byte();
    let critical = b.byte();
    let decay = b.byte();
    let x = b.readings(raw);
    if x.len() > 300 {
        return;
    }
    let kinds: Vec<lagwise::EventKind> = lagwise::EventKind::ALL
        .iter()
        .enumerate()
        .filter(|(i, _)| kinds_bits & (1 << i) != 0)
        .map(|(_, k)| *k)
        .collect();
    let mut sb = lagwise::EventSettings::builder();
    sb.kinds(&kinds)
        .max_rounds(1 + (kinds_bits >> 4) as usize % 3);
    if critical & 1 == 1 {
        sb.critical_value(f64::from(critical) / 32.0);
    }
    if decay & 1 == 1 {
        sb.decay(f64::from(decay) / 256.0);
    }
    let Ok(fit) = bp.fit(&x) else { return };
    if let Ok(settings) = sb.build()
        && let Ok(found) = fit.find_events(&x, &settings)
    {
        assert_eq!(found.adjusted.len(), x.len());
        for e in &found.events {
            assert!((e.index as usize) < x.len() && !x[e.index as usize].is_nan());
            assert!(e.size.is_finite(), "{e:?}");
            assert!(kinds.contains(&e.kind));
        }
        for (a, v) in found.adjusted.iter().zip(&x) {
            assert_eq!(a.is_nan(), v.is_nan());
        }
        let _ = found.columns_ahead(x.len(), 4);
    }
    if let Ok(filled) = fit.fill_gaps(&x, &[0.9]) {
        assert_eq!(filled.series.len(), x.len());
        for r in &filled.readings {
            assert!(
                x[r.index as usize].is_nan(),
                "only missing readings are filled"
            );
            assert!(
                r.sd >= 0.0 && r.sd.is_finite() && r.mean.is_finite(),
                "{r:?}"
            );
        }
        for (t, v) in x.iter().enumerate() {
            if !v.is_nan() {
                assert_eq!(
                    filled.series[t].to_bits(),
                    v.to_bits(),
                    "present reading {t} changed"
                );
            }
        }
    }
}
