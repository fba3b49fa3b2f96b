//! Residual health beyond whiteness: the Jarque–Bera test of normality (skewness and
//! kurtosis) and the McLeod–Li test for changing variance (autocorrelation of squares).

use serde::{Deserialize, Serialize};

use crate::base::dist::chi_square_upper;
use crate::base::error::{Error, ErrorKind, Result};
use crate::base::screen::{ConstantPolicy, screen};
use crate::stats::correlogram::Correlogram;

/// The Jarque–Bera test of normality (Jarque & Bera 1980): with the sample skewness `S`
/// and kurtosis `K` of the `m` present values (moments with divisor `m`),
/// `JB = m/6 · (S² + (K − 3)²/4)`, asymptotically chi-square with 2 degrees of freedom
/// under normality.
///
/// ```
/// use lagwise::jarque_bera;
/// # fn main() -> Result<(), lagwise::Error> {
/// let skewed: Vec<f64> = (0..500).map(|t| ((t * 7919 % 1000) as f64 / 1000.0).powi(4)).collect();
/// assert!(jarque_bera(&skewed)?.p_value < 1e-6);
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct NormalityTest {
    /// The statistic `JB`.
    pub statistic: f64,
    /// Upper-tail chi-square(2) probability of `JB`.
    pub p_value: f64,
    /// Sample skewness `S`.
    pub skewness: f64,
    /// Sample excess kurtosis `K − 3`.
    pub excess_kurtosis: f64,
    /// Values used (NaN = missing ones left out).
    pub readings: usize,
}

/// The Jarque–Bera test of `values` (NaN = missing). Errors: fewer than 8 present values,
/// ±inf, a constant series.
pub fn jarque_bera(values: &[f64]) -> Result<NormalityTest> {
    const WHAT: &str = "Jarque–Bera test";
    let s = screen(values, WHAT, 8, ConstantPolicy::Refuse)?;
    let m = s.present as f64;
    // Central moments on exactly rescaled values (no overflow near ±f64::MAX).
    let (mut m2, mut m3, mut m4) = (0.0, 0.0, 0.0);
    for v in values.iter().filter(|v| !v.is_nan()) {
        let d = (v - s.mean) / s.scale;
        let d2 = d * d;
        m2 += d2;
        m3 += d2 * d;
        m4 += d2 * d2;
    }
    let (m2, m3, m4) = (m2 / m, m3 / m, m4 / m);
    if !(m2 > 0.0) {
        return Err(Error::new(ErrorKind::ConstantSeries {
            what: WHAT,
            value: s.mean,
        }));
    }
    let skewness = m3 / m2.powf(1.5);
    let excess_kurtosis = m4 / (m2 * m2) - 3.0;
    let statistic = m / 6.0 * (skewness * skewness + excess_kurtosis * excess_kurtosis / 4.0);
    Ok(NormalityTest {
        statistic,
        p_value: chi_square_upper(statistic, 2),
        skewness,
        excess_kurtosis,
        readings: s.present,
    })
}

/// The McLeod–Li test for changing variance (McLeod & Li 1983): the Ljung–Box statistic
/// of the squared, mean-corrected values at lags `1..=H`,
/// `Q² = m(m+2) Σ_{k=1}^{H} r²(k)/(m−k)` with `r(k)` the autocorrelations of the squares,
/// asymptotically chi-square with `H` degrees of freedom when the variance does not
/// change (no reduction for fitted ARMA coefficients: their estimation does not affect
/// the squares' autocorrelations to first order — the paper's result).
///
/// ```
/// use lagwise::mcleod_li;
/// # fn main() -> Result<(), lagwise::Error> {
/// // Quiet and loud stretches alternate: the squares are autocorrelated.
/// let bursty: Vec<f64> = (0..600)
///     .map(|t| ((t * 7919 % 101) as f64 / 50.0 - 1.0) * if (t / 50) % 2 == 0 { 1.0 } else { 6.0 })
///     .collect();
/// assert!(mcleod_li(&bursty, 10)?.p_value < 1e-6);
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct VarianceChangeTest {
    /// The statistic `Q²`.
    pub statistic: f64,
    /// Lags summed (`H`), also the degrees of freedom.
    pub lags: usize,
    /// Upper-tail chi-square(H) probability of `Q²`.
    pub p_value: f64,
    /// Values used (NaN = missing ones left out of the sums).
    pub readings: usize,
}

/// The McLeod–Li test of `values` (NaN = missing) at lags `1..=lags`. Errors: `lags` of 0
/// or not below the series length, fewer than 8 present values, ±inf, a constant series
/// or constant squares.
pub fn mcleod_li(values: &[f64], lags: usize) -> Result<VarianceChangeTest> {
    const WHAT: &str = "McLeod–Li test";
    if lags == 0 {
        return Err(Error::invalid(WHAT, "at least one lag is needed"));
    }
    let s = screen(values, WHAT, 8, ConstantPolicy::Refuse)?;
    // Squares of the mean-corrected values, on the rescaled axis (exact power of two).
    let squares: Vec<f64> = values
        .iter()
        .map(|v| {
            let d = (v - s.mean) / s.scale;
            d * d
        })
        .collect();
    let cg = Correlogram::compute(&squares, lags).map_err(|e| match e.kind() {
        ErrorKind::ConstantSeries { .. } => Error::invalid(
            WHAT,
            "the squared values are constant; there is no variance change to test",
        ),
        _ => e,
    })?;
    let m = cg.readings_present() as f64;
    if lags as f64 >= m - 1.0 {
        return Err(Error::new(ErrorKind::TooShort {
            what: WHAT,
            present: cg.readings_present(),
            needed: lags + 2,
        }));
    }
    let statistic = m
        * (m + 2.0)
        * (1..=lags)
            .map(|k| {
                let r = cg.autocorrelation(k).unwrap_or(0.0);
                r * r / (m - k as f64)
            })
            .sum::<f64>();
    Ok(VarianceChangeTest {
        statistic,
        lags,
        p_value: chi_square_upper(statistic, lags),
        readings: cg.readings_present(),
    })
}
