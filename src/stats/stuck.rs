//! Stuck sensors: runs of identical (or, for quantised signals, nearly identical)
//! readings that last longer than a live process plausibly stays still.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, Result};

/// Default shortest run flagged: 16 readings, four hours of 15-minute readings (common
/// practice for slow process signals; a live temperature, pressure or flow moves within
/// that time, while a frozen transmitter or a historian repeating its last value does
/// not). Choose it per signal: a setpoint-held valve position may legitimately stay still
/// far longer.
pub const DEFAULT_STUCK_RUN: usize = 16;

/// A run of readings that did not move.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct StuckRun {
    /// Index of the first reading of the run.
    pub start: usize,
    /// Number of readings in the run (missing readings inside it are not counted and do
    /// not break it).
    pub readings: usize,
    /// Index one past the last reading of the run.
    pub end: usize,
    /// The value the run started at.
    pub value: f64,
}

/// Runs of at least `min_run` present readings that stay within `resolution` of the
/// run's first reading (`resolution = 0`: exactly equal; for a quantised signal, its
/// quantisation step). Missing readings (NaN) neither count nor break a run.
///
/// ```
/// use lagwise::find_stuck_runs;
/// # fn main() -> Result<(), lagwise::Error> {
/// let mut x: Vec<f64> = (0..100).map(|t| 50.0 + (t as f64 / 5.0).sin()).collect();
/// for v in &mut x[40..70] { *v = 50.7; } // the transmitter froze
/// let runs = find_stuck_runs(&x, 16, 0.0)?;
/// assert_eq!((runs.len(), runs[0].start, runs[0].end), (1, 40, 70));
/// # Ok(()) }
/// ```
///
/// Errors: `min_run` below 2, a negative or non-finite `resolution`, a ±inf reading.
pub fn find_stuck_runs(values: &[f64], min_run: usize, resolution: f64) -> Result<Vec<StuckRun>> {
    const WHAT: &str = "stuck-sensor check";
    if min_run < 2 {
        return Err(Error::invalid(
            WHAT,
            format!("a run needs at least 2 readings, got {min_run}"),
        ));
    }
    if !(resolution >= 0.0 && resolution.is_finite()) {
        return Err(Error::invalid(
            WHAT,
            format!("resolution {resolution} must be finite and not negative"),
        ));
    }
    if let Some(index) = values.iter().position(|v| v.is_infinite()) {
        return Err(Error::new(
            crate::base::error::ErrorKind::NonFiniteReading {
                what: WHAT,
                index,
                value: values[index],
            },
        ));
    }
    let mut runs = Vec::new();
    // The open run: (start, count, last index, value).
    let mut open: Option<(usize, usize, usize, f64)> = None;
    let close = |run: Option<(usize, usize, usize, f64)>, runs: &mut Vec<StuckRun>| {
        if let Some((start, count, last, value)) = run
            && count >= min_run
        {
            runs.push(StuckRun {
                start,
                readings: count,
                end: last + 1,
                value,
            });
        }
    };
    for (t, &v) in values.iter().enumerate() {
        if v.is_nan() {
            continue;
        }
        open = match open {
            Some((start, count, _, value)) if (v - value).abs() <= resolution => {
                Some((start, count + 1, t, value))
            }
            other => {
                close(other, &mut runs);
                Some((t, 1, t, v))
            }
        };
    }
    close(open, &mut runs);
    Ok(runs)
}

/// A copy of `values` with the readings of `runs` set to missing (NaN), so that a fit
/// treats a stuck stretch as an outage; the caller's slice is not changed.
pub fn mask_runs(values: &[f64], runs: &[StuckRun]) -> Vec<f64> {
    let mut out = values.to_vec();
    for r in runs {
        for v in out.iter_mut().take(r.end.min(values.len())).skip(r.start) {
            *v = f64::NAN;
        }
    }
    out
}
