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

/// Two-sided normal tail probability `P(|Z| > |z|) = 2·(1 − Φ(|z|))` (NaN for NaN).
pub(crate) fn normal_two_sided_p(z: f64) -> f64 {
    if z.is_nan() {
        return f64::NAN;
    }
    (2.0 * Normal::standard().sf(z.abs())).clamp(0.0, 1.0)
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

#[cfg(test)]
mod tests {
    use super::*;

    /// Normal tail values from the standard table (from memory: Φ(1.959964) = 0.975,
    /// Φ(2.575829) = 0.995, Φ(1) = 0.841345).
    #[test]
    fn normal_tails_match_the_table() {
        // statrs' erfc is good to about 1e-11 here; the table values carry 15 digits.
        assert!((normal_two_sided_p(1.959963984540054) - 0.05).abs() < 1e-10);
        assert!((normal_two_sided_p(-2.5758293035489) - 0.01).abs() < 1e-10);
        assert!((normal_two_sided_p(1.0) - 0.317310507862914).abs() < 1e-10);
        assert_eq!(normal_two_sided_p(0.0), 1.0);
        assert!(normal_two_sided_p(f64::NAN).is_nan());
        let z = two_sided_quantile(0.95, "test").unwrap();
        assert!((normal_two_sided_p(z) - 0.05).abs() < 1e-10);
    }
}
