//! Probability helpers shared by the layers above: normal quantiles for bands and
//! intervals, chi-square tails for portmanteau and likelihood-ratio tests (through `statrs`).

use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};

use crate::base::error::{Error, Result};

/// Standard normal quantile `z` with `P(|Z| ≤ z) = level`, for `0 < level < 1`.
pub(crate) fn two_sided_quantile(level: f64, what: &'static str) -> Result<f64> {
    if !(level > 0.0 && level < 1.0) {
        return Err(Error::invalid(
            what,
            format!("level {level} is outside (0, 1); write 95% as 0.95"),
        ));
    }
    let normal = Normal::standard();
    Ok(normal.inverse_cdf(0.5 + level / 2.0))
}

/// Upper-tail probability `P(χ²_df > x)`.
pub(crate) fn chi_square_upper(x: f64, df: usize) -> f64 {
    match ChiSquared::new(df as f64) {
        Ok(d) if x.is_finite() => d.sf(x.max(0.0)).clamp(0.0, 1.0),
        Ok(_) if x == f64::INFINITY => 0.0,
        _ => f64::NAN,
    }
}

/// Chi-square quantile: the `x` with `P(χ²_df ≤ x) = probability`.
#[cfg(test)]
pub(crate) fn chi_square_quantile(probability: f64, df: usize) -> f64 {
    match ChiSquared::new(df as f64) {
        Ok(d) => d.inverse_cdf(probability),
        Err(_) => f64::NAN,
    }
}
