//! Byte-decoding harnesses shared by the cargo-fuzz targets (fuzz/fuzz_targets) and the
//! stable-toolchain corpus replay test (tests/fuzz_replay.rs). Keeping one decoder means
//! CI exercises exactly the code paths the fuzzer explores.
#![allow(dead_code)]

/// Decode: byte 0 = max lag, byte 1 = fitted coefficients, then 8-byte little-endian f64s
/// (any bit pattern: NaN, ±inf, subnormals, extremes) for the series.
pub fn correlogram(data: &[u8]) {
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
        for r in cg.autocorrelations() {
            assert!(r.abs() <= 1.0, "autocorrelation outside [-1, 1]: {r}");
        }
        for p in cg.partial_autocorrelations() {
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
