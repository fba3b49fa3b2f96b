//! Input screening shared by every entry point.
//!
//! A series is a slice of `f64`. NaN means a missing reading and is handled by each
//! routine; ±inf is refused. Screening never copies or mutates the caller's data.

use crate::base::error::{Error, ErrorKind, Result};

/// Facts about a screened series, computed in two passes without overflow.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Screened {
    /// Number of non-missing readings.
    pub present: usize,
    /// Mean of the non-missing readings (compensated two-pass).
    pub mean: f64,
    /// A power of two `s` with `max |x - mean| / s <= 1` (exactly representable scaling).
    pub scale: f64,
}

/// Whether a constant series is acceptable to the caller.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum ConstantPolicy {
    Refuse,
    Allow,
}

/// The smallest power of two at least `v` (for v > 0 finite), or 1 for v == 0.
pub(crate) fn power_of_two_at_least(v: f64) -> f64 {
    if v <= 0.0 || !v.is_finite() {
        return 1.0;
    }
    let e = v.log2().ceil() as i32;
    let mut s = 2f64.powi(e.clamp(-1020, 1020));
    // Guard against log2 rounding.
    while s < v && s < f64::MAX / 2.0 {
        s *= 2.0;
    }
    s
}

/// Check a series: refuses empty, ±inf, all-missing, fewer than `min_present` readings and
/// (under [`ConstantPolicy::Refuse`]) constant series. Returns the mean and a safe scale.
pub(crate) fn screen(
    values: &[f64],
    what: &'static str,
    min_present: usize,
    constant: ConstantPolicy,
) -> Result<Screened> {
    if values.is_empty() {
        return Err(Error::new(ErrorKind::EmptySeries { what }));
    }
    // Pass 0 (branch-free, in eight independent lanes so that it vectorises): count,
    // extremes, and whether any ±inf exists. A comparison with NaN is false, so the
    // `if v < lo` forms skip missing readings.
    let mut count = [0u64; 8];
    let mut lo8 = [f64::INFINITY; 8];
    let mut hi8 = [f64::NEG_INFINITY; 8];
    let mut big8 = [0.0f64; 8];
    let mut take = |k: usize, v: f64| {
        count[k] += u64::from(!v.is_nan());
        lo8[k] = if v < lo8[k] { v } else { lo8[k] };
        hi8[k] = if v > hi8[k] { v } else { hi8[k] };
        let a = v.abs();
        big8[k] = if a > big8[k] { a } else { big8[k] };
    };
    let chunks = values.chunks_exact(8);
    let rest = chunks.remainder();
    for c in chunks {
        for k in 0..8 {
            take(k, c[k]);
        }
    }
    for (k, &v) in rest.iter().enumerate() {
        take(k, v);
    }
    let present = count.iter().sum::<u64>() as usize;
    let lo = lo8.iter().fold(f64::INFINITY, |m, &v| m.min(v));
    let hi = hi8.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v));
    let max_abs = big8.iter().fold(0.0f64, |m, &v| m.max(v));
    let any_inf = max_abs == f64::INFINITY;
    if any_inf && let Some(index) = values.iter().position(|v| v.is_infinite()) {
        let value = values[index];
        return Err(Error::new(ErrorKind::NonFiniteReading {
            what,
            index,
            value,
        }));
    }
    if present == 0 {
        return Err(Error::new(ErrorKind::AllMissing {
            what,
            length: values.len(),
        }));
    }
    if present < min_present {
        return Err(Error::new(ErrorKind::TooShort {
            what,
            present,
            needed: min_present,
        }));
    }
    if constant == ConstantPolicy::Refuse && lo == hi && present >= 2 {
        return Err(Error::new(ErrorKind::ConstantSeries { what, value: lo }));
    }
    // Pass 1 on exactly-scaled values (no overflow even near f64::MAX), eight lanes.
    let s1 = power_of_two_at_least(max_abs);
    let inv = 1.0 / s1;
    let m = present as f64;
    let mean_scaled = lane_sum(values, |v| v * inv) / m;
    // Pass 2: the correction term of the corrected two-pass algorithm. The first mean may
    // be off by rounding of a long sum; the mean deviation from it is small and summed
    // accurately, which restores the certified digits of the NIST StRD NumAcc data.
    let corr = lane_sum(values, |v| v * inv - mean_scaled);
    let mean = (mean_scaled + corr / m) * s1;
    let mut dev8 = [0.0f64; 8];
    let mut spread = |k: usize, v: f64| {
        let d = (v - mean).abs();
        dev8[k] = if d > dev8[k] { d } else { dev8[k] };
    };
    let chunks = values.chunks_exact(8);
    let rest = chunks.remainder();
    for c in chunks {
        for k in 0..8 {
            spread(k, c[k]);
        }
    }
    for (k, &v) in rest.iter().enumerate() {
        spread(k, v);
    }
    let dev_max = dev8.iter().fold(0.0f64, |m, &v| m.max(v));
    let scale = power_of_two_at_least(dev_max);
    Ok(Screened {
        present,
        mean,
        scale,
    })
}

/// Σ f(v) over non-missing `v` (NaN contributes 0), in eight independent lanes, each
/// compensated by Knuth's branch-free TwoSum, so the result is as accurate as a
/// Neumaier sum while the loop still vectorises.
#[inline]
fn lane_sum(values: &[f64], f: impl Fn(f64) -> f64) -> f64 {
    let mut acc = [0.0f64; 8];
    let mut comp = [0.0f64; 8];
    let chunks = values.chunks_exact(8);
    let rest = chunks.remainder();
    for c in chunks {
        for k in 0..8 {
            let v = c[k];
            let y = if v.is_nan() { 0.0 } else { f(v) };
            let t = acc[k] + y;
            let bp = t - acc[k];
            comp[k] += (acc[k] - (t - bp)) + (y - bp);
            acc[k] = t;
        }
    }
    let mut sum = 0.0f64;
    let mut c_total = 0.0f64;
    let mut add = |y: f64| {
        let t = sum + y;
        let bp = t - sum;
        c_total += (sum - (t - bp)) + (y - bp);
        sum = t;
    };
    for k in 0..8 {
        add(acc[k]);
        add(comp[k]);
    }
    for &v in rest {
        if !v.is_nan() {
            add(f(v));
        }
    }
    sum + c_total
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refusals_are_typed() {
        let e = screen(&[], "t", 1, ConstantPolicy::Refuse).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::EmptySeries { .. }));
        let e = screen(&[f64::NAN, f64::NAN], "t", 1, ConstantPolicy::Refuse).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::AllMissing { length: 2, .. }));
        let e = screen(&[1.0, f64::NEG_INFINITY], "t", 1, ConstantPolicy::Refuse).unwrap_err();
        assert!(matches!(
            e.kind(),
            ErrorKind::NonFiniteReading { index: 1, .. }
        ));
        let e = screen(&[3.0, f64::NAN, 3.0], "t", 1, ConstantPolicy::Refuse).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::ConstantSeries { value, .. } if *value == 3.0));
        let e = screen(&[1.0, 2.0], "t", 3, ConstantPolicy::Refuse).unwrap_err();
        assert!(matches!(
            e.kind(),
            ErrorKind::TooShort {
                present: 2,
                needed: 3,
                ..
            }
        ));
        assert!(screen(&[3.0, 3.0], "t", 1, ConstantPolicy::Allow).is_ok());
    }

    #[test]
    fn mean_survives_huge_values() {
        let s = screen(&[1e308, -1e308, 1.7e308], "t", 1, ConstantPolicy::Refuse).unwrap();
        assert!((s.mean - 1.7e308 / 3.0).abs() <= 1e293);
        assert!(s.scale.is_finite());
    }

    #[test]
    fn power_of_two_bounds() {
        for v in [1e-300, 0.3, 1.0, 3.0, 1024.0, 1e300] {
            let s = power_of_two_at_least(v);
            assert!(s >= v && s / 2.0 < v, "{v} -> {s}");
        }
    }
}
