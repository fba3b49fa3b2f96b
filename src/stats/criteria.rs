//! Information criteria for comparing fitted models, nested or not.

use crate::base::error::{Error, Result};

/// Which information criterion to rank by.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Criterion {
    /// Akaike's criterion.
    Akaike,
    /// Akaike's criterion with the small-sample correction of Hurvich & Tsai.
    AkaikeCorrected,
    /// Schwarz's Bayesian criterion.
    Schwarz,
    /// Hannan–Quinn criterion.
    HannanQuinn,
}

impl std::fmt::Display for Criterion {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Criterion::Akaike => "AIC",
            Criterion::AkaikeCorrected => "AICc",
            Criterion::Schwarz => "BIC",
            Criterion::HannanQuinn => "HQIC",
        })
    }
}

/// AIC, AICc, BIC and HQIC of one fit, with the counts they were computed from.
///
/// ```
/// use lagwise::{Criterion, InformationCriteria};
/// # fn main() -> Result<(), lagwise::Error> {
/// // log L = −100, three estimated parameters (φ, θ and σ²), 50 observations.
/// let ic = InformationCriteria::from_log_likelihood(-100.0, 3, 50)?;
/// assert_eq!(ic.akaike, 206.0);
/// assert!((ic.akaike_corrected.unwrap() - (206.0 + 24.0 / 46.0)).abs() < 1e-12);
/// assert_eq!(ic.value(Criterion::Schwarz), Some(200.0 + 3.0 * 50f64.ln()));
/// # Ok(()) }
/// ```
///
/// # Counting rule (the one place it is written down)
/// `k` counts **every estimated parameter**: ARMA coefficients, seasonal coefficients,
/// the mean or drift, regression coefficients, **and the innovation variance σ²**.
/// Fixed (not estimated) coefficients do not count. `n` is the number of observations
/// that enter the likelihood (after differencing, excluding missing readings).
///
/// ```text
/// Akaike (1974), AIC:                 2k − 2 log L
/// Hurvich & Tsai (1989), AICc:        AIC + 2k(k+1)/(n−k−1)      (needs n > k+1)
/// Schwarz (1978), BIC:                k ln n − 2 log L
/// Hannan & Quinn (1979), HQIC:        2k ln ln n − 2 log L       (needs n ≥ 3)
/// ```
///
/// Criteria are only meaningful for full (exact) likelihoods of models fitted to the same
/// data; conditional-sum-of-squares fits do not offer them.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct InformationCriteria {
    /// The log-likelihood the criteria penalise.
    pub log_likelihood: f64,
    /// `k`: estimated parameters, σ² included.
    pub parameters: usize,
    /// `n`: observations in the likelihood.
    pub observations: usize,
    /// Akaike's criterion.
    pub akaike: f64,
    /// Corrected AIC; `None` when `n ≤ k + 1`.
    pub akaike_corrected: Option<f64>,
    /// Schwarz's criterion.
    pub schwarz: f64,
    /// Hannan–Quinn criterion.
    pub hannan_quinn: f64,
}

impl InformationCriteria {
    /// Compute all four criteria. Errors if the log-likelihood is not finite, `k = 0`, or
    /// `n < 3`.
    pub fn from_log_likelihood(
        log_likelihood: f64,
        parameters: usize,
        observations: usize,
    ) -> Result<Self> {
        const WHAT: &str = "information criteria";
        if !log_likelihood.is_finite() {
            return Err(Error::invalid(
                WHAT,
                format!("log-likelihood {log_likelihood} is not finite"),
            ));
        }
        if parameters == 0 {
            return Err(Error::invalid(
                WHAT,
                "parameter count must include at least sigma^2",
            ));
        }
        if observations < 3 {
            return Err(Error::invalid(
                WHAT,
                format!("{observations} observations; at least 3 needed"),
            ));
        }
        let k = parameters as f64;
        let n = observations as f64;
        let deviance = -2.0 * log_likelihood;
        let akaike = deviance + 2.0 * k;
        let akaike_corrected =
            (n - k - 1.0 > 0.0).then(|| akaike + 2.0 * k * (k + 1.0) / (n - k - 1.0));
        Ok(InformationCriteria {
            log_likelihood,
            parameters,
            observations,
            akaike,
            akaike_corrected,
            schwarz: deviance + k * n.ln(),
            hannan_quinn: deviance + 2.0 * k * n.ln().ln(),
        })
    }

    /// The value of one criterion (`None` only for AICc when undefined).
    pub fn value(&self, criterion: Criterion) -> Option<f64> {
        match criterion {
            Criterion::Akaike => Some(self.akaike),
            Criterion::AkaikeCorrected => self.akaike_corrected,
            Criterion::Schwarz => Some(self.schwarz),
            Criterion::HannanQuinn => Some(self.hannan_quinn),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refusals() {
        assert!(InformationCriteria::from_log_likelihood(f64::NAN, 2, 10).is_err());
        assert!(InformationCriteria::from_log_likelihood(1.0, 0, 10).is_err());
        assert!(InformationCriteria::from_log_likelihood(1.0, 2, 2).is_err());
        let ic = InformationCriteria::from_log_likelihood(1.0, 4, 5).unwrap();
        assert!(ic.akaike_corrected.is_none() && ic.value(Criterion::AkaikeCorrected).is_none());
    }
}
