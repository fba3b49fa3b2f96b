//! Average run lengths of the tabular CUSUM (Page 1954) on independent N(μ, 1) values,
//! and the decision threshold that gives a wanted in-control run length.
//!
//! The upper chart is `S⁺_t = max(0, S⁺_{t−1} + x_t − k)`, the lower one
//! `S⁻_t = max(0, S⁻_{t−1} − x_t − k)`, both from 0; the scheme signals when either
//! exceeds `h`. The run length of one chart is computed by the Markov-chain method of
//! Brook & Evans (1972, Biometrika 59): `[0, h]` is cut into N cells, the chart's value is
//! carried as its cell, and the average run length from 0 is the first element of
//! `(I − R)⁻¹·1`. The cell error falls as 1/N², so the values at N = 100 and N = 200 are
//! combined by Richardson extrapolation (relative error below 1e-5 against a 128-point
//! Gauss–Legendre solution of the integral equation, `tests/reference/cusum_fixtures.py`).
//! The two-sided run length combines the two charts as 1/L = 1/L⁺ + 1/L⁻, the usual
//! approximation for charts that do not interact (checked by simulation of the two-sided
//! scheme in the tests).

use statrs::distribution::{ContinuousCDF, Normal};

use crate::base::error::{Error, Result};
use crate::base::linalg::lu_solve;

const WHAT: &str = "CUSUM run length";

/// Largest in-control run length [`cusum_threshold`] solves for (10⁹ readings, ≈ 28,500
/// years of 15-minute readings).
const MAX_RUN_LENGTH: f64 = 1e9;

/// Average run length of one upper chart with reference `k`, threshold `h`, for values
/// with mean `mu` (Brook–Evans with `cells` cells).
fn upper_run_length_cells(k: f64, h: f64, mu: f64, cells: usize) -> Option<f64> {
    let normal = Normal::standard();
    let n = cells;
    let w = 2.0 * h / (2 * n - 1) as f64;
    // (I − R), row-major; R[i][j] the probability of moving from cell i to cell j.
    let mut a = vec![0.0; n * n];
    let mut b = vec![1.0; n];
    // cdf at the cell edges relative to a starting midpoint i·w: cell j ≥ 1 covers
    // ((j − ½)w, (j + ½)w]; cell 0 is everything at or below ½w (the chart's floor at 0).
    for i in 0..n {
        let from = i as f64 * w;
        let mut below = normal.cdf(0.5 * w - from + k - mu);
        a[i * n] = -below;
        for j in 1..n {
            let upper = normal.cdf((j as f64 + 0.5) * w - from + k - mu);
            a[i * n + j] = -(upper - below);
            below = upper;
        }
        a[i * n + i] += 1.0;
    }
    (lu_solve(&mut a, &mut b, n) && b[0].is_finite() && b[0] >= 1.0).then_some(b[0])
}

/// Average run length of one upper chart, extrapolated from 100 and 200 cells.
fn upper_run_length(k: f64, h: f64, mu: f64) -> Option<f64> {
    let coarse = upper_run_length_cells(k, h, mu, 100)?;
    let fine = upper_run_length_cells(k, h, mu, 200)?;
    Some(((4.0 * fine - coarse) / 3.0).max(1.0))
}

fn check_design(reference: f64, threshold: f64) -> Result<()> {
    if !(reference.is_finite() && (0.0..=5.0).contains(&reference)) {
        return Err(Error::invalid(
            WHAT,
            format!(
                "reference value {reference} must be in [0, 5] (innovation standard deviations; \
                 half the shift to catch, e.g. 0.5 for a shift of one)"
            ),
        ));
    }
    if !(threshold.is_finite() && threshold > 0.0 && threshold <= 50.0) {
        return Err(Error::invalid(
            WHAT,
            format!("threshold {threshold} must be in (0, 50]"),
        ));
    }
    Ok(())
}

/// Average run length of the two-sided CUSUM with reference value `reference` (k) and
/// decision threshold `threshold` (h), both in standard deviations, when the values'
/// mean is `shift` standard deviations away from zero (0 for the in-control run length,
/// the mean number of readings between false signals).
///
/// ```
/// // k = ½, h = 5: about 465 readings between false signals and about 10.4 readings to
/// // catch a shift of one standard deviation (the usual table, from memory).
/// let quiet = lagwise::cusum_run_length(0.5, 5.0, 0.0)?;
/// let shifted = lagwise::cusum_run_length(0.5, 5.0, 1.0)?;
/// assert!((quiet - 465.4).abs() < 0.5 && (shifted - 10.38).abs() < 0.05);
/// # Ok::<(), lagwise::Error>(())
/// ```
pub fn cusum_run_length(reference: f64, threshold: f64, shift: f64) -> Result<f64> {
    check_design(reference, threshold)?;
    if !(shift.is_finite() && shift.abs() <= 20.0) {
        return Err(Error::invalid(
            WHAT,
            format!("shift {shift} must be finite and at most 20 standard deviations"),
        ));
    }
    // A chart whose run length is beyond working precision (I − R singular: it
    // practically never signals, e.g. the upper chart under a large downward shift)
    // adds nothing to the signal rate.
    let rate = |l: Option<f64>| l.map_or(0.0, |l| 1.0 / l);
    let up = rate(upper_run_length(reference, threshold, shift));
    let down = rate(upper_run_length(reference, threshold, -shift));
    match up + down {
        r if r > 0.0 => Ok(1.0 / r),
        _ => Err(Error::invalid(
            WHAT,
            format!(
                "the run length for k = {reference}, h = {threshold} is beyond what can be \
                 computed (the chart practically never signals)"
            ),
        )),
    }
}

/// The decision threshold h that gives the two-sided CUSUM with reference value
/// `reference` an in-control average run length of `run_length` readings (at least 2,
/// at most 10⁹), to a relative 1e-6 of the run length.
///
/// ```
/// let h = lagwise::cusum_threshold(0.5, 465.44)?;
/// assert!((h - 5.0).abs() < 1e-3);
/// # Ok::<(), lagwise::Error>(())
/// ```
pub fn cusum_threshold(reference: f64, run_length: f64) -> Result<f64> {
    check_design(reference, 1.0)?;
    if !(run_length.is_finite() && (2.0..=MAX_RUN_LENGTH).contains(&run_length)) {
        return Err(Error::invalid(
            WHAT,
            format!("in-control run length {run_length} must be in [2, 1e9] readings"),
        ));
    }
    let target = run_length.ln();
    let gap = |h: f64| -> Result<f64> { Ok(cusum_run_length(reference, h, 0.0)?.ln() - target) };
    // Bracket: the run length grows with h (from about 1/P(|x| > k) near 0).
    let (mut lo, mut hi) = (1e-3, 1.0);
    let mut f_lo = gap(lo)?;
    if f_lo >= 0.0 {
        return Err(Error::invalid(
            WHAT,
            format!(
                "an in-control run length of {run_length} is shorter than the chart gives \
                 at any threshold for k = {reference}"
            ),
        ));
    }
    let mut f_hi = gap(hi)?;
    while f_hi < 0.0 {
        lo = hi;
        f_lo = f_hi;
        hi *= 2.0;
        if hi > 50.0 {
            return Err(Error::invalid(
                WHAT,
                format!("no threshold up to 50 reaches a run length of {run_length}"),
            ));
        }
        f_hi = gap(hi)?;
    }
    // Illinois regula falsi on ln(run length), which is nearly linear in h.
    let mut side = 0i8;
    for _ in 0..100 {
        let h = (lo * f_hi - hi * f_lo) / (f_hi - f_lo);
        let f = gap(h)?;
        if f.abs() < 1e-6 || (hi - lo) < 1e-12 {
            return Ok(h);
        }
        if (f < 0.0) == (f_lo < 0.0) {
            lo = h;
            f_lo = f;
            if side == -1 {
                f_hi /= 2.0;
            }
            side = -1;
        } else {
            hi = h;
            f_hi = f;
            if side == 1 {
                f_lo /= 2.0;
            }
            side = 1;
        }
    }
    Ok(0.5 * (lo + hi))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// One chart against the Gauss–Legendre integral-equation values of
    /// `tests/reference/cusum_fixtures.py` (independent method): k = ½, h = 4 and 5.
    #[test]
    fn one_chart_matches_the_integral_equation() {
        let h5 = upper_run_length(0.5, 5.0, 0.0).unwrap();
        let h4 = upper_run_length(0.5, 4.0, 0.0).unwrap();
        assert!((h5 / 930.8870120637453 - 1.0).abs() < 1e-5, "{h5}");
        assert!((h4 / 335.36757762720157 - 1.0).abs() < 1e-5, "{h4}");
    }

    #[test]
    fn designs_are_checked() {
        assert!(cusum_run_length(-0.1, 5.0, 0.0).is_err());
        assert!(cusum_run_length(0.5, 0.0, 0.0).is_err());
        assert!(cusum_run_length(0.5, f64::NAN, 0.0).is_err());
        assert!(cusum_run_length(0.5, 5.0, f64::INFINITY).is_err());
        assert!(cusum_threshold(0.5, 1.0).is_err());
        assert!(cusum_threshold(0.5, 1e12).is_err());
        assert!(cusum_threshold(f64::NAN, 100.0).is_err());
    }
}
