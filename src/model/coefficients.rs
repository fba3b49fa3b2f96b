//! The coefficients of a model: their names ([`Term`]), the four lag-polynomial factors
//! ([`Factor`]) and the factors' natural coefficients with their expansion into the full
//! AR and MA polynomials.

use serde::{Deserialize, Serialize};

use crate::model::lag::{self, expand_into};

/// A coefficient of the model, used to hold (fix) a value and to label estimates.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Term {
    /// Non-seasonal autoregressive coefficient `φ_i` (1-based lag).
    Ar(usize),
    /// Non-seasonal moving-average coefficient `θ_j` (1-based lag).
    Ma(usize),
    /// Seasonal autoregressive coefficient `Φ_i` (lag `i·s`).
    SeasonalAr(usize),
    /// Seasonal moving-average coefficient `Θ_j` (lag `j·s`).
    SeasonalMa(usize),
    /// Mean of an undifferenced series.
    Mean,
    /// Drift: mean change per reading of a once-differenced series.
    Drift,
    /// Coefficient of the `i`-th exogenous regressor column (1-based), e.g. outdoor
    /// temperature driving return temperature.
    Exogenous(usize),
    /// Coefficient of the cosine of harmonic `harmonic` of a long cycle of `period`
    /// readings, `cos(2π·harmonic·t/period)` (see [`Cycle`](crate::Cycle)).
    CycleCos {
        /// Period of the cycle in readings.
        period: usize,
        /// Harmonic number (1-based).
        harmonic: usize,
    },
    /// Coefficient of the sine of harmonic `harmonic` of a long cycle of `period`
    /// readings, `sin(2π·harmonic·t/period)`.
    CycleSin {
        /// Period of the cycle in readings.
        period: usize,
        /// Harmonic number (1-based).
        harmonic: usize,
    },
}

impl Term {
    /// Whether this is an ARMA coefficient (φ, θ, Φ, Θ) rather than a regression one.
    pub fn is_arma(&self) -> bool {
        matches!(
            self,
            Term::Ar(_) | Term::Ma(_) | Term::SeasonalAr(_) | Term::SeasonalMa(_)
        )
    }
}

impl std::fmt::Display for Term {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Term::Ar(i) => write!(f, "phi.{i}"),
            Term::Ma(i) => write!(f, "theta.{i}"),
            Term::SeasonalAr(i) => write!(f, "seasonal_phi.{i}"),
            Term::SeasonalMa(i) => write!(f, "seasonal_theta.{i}"),
            Term::Mean => f.write_str("mean"),
            Term::Drift => f.write_str("drift"),
            Term::Exogenous(i) => write!(f, "regressor.{i}"),
            Term::CycleCos { period, harmonic } => write!(f, "cycle{period}.cos.{harmonic}"),
            Term::CycleSin { period, harmonic } => write!(f, "cycle{period}.sin.{harmonic}"),
        }
    }
}

/// One of the four lag-polynomial factors of a seasonal ARMA model
/// `φ(B)Φ(B^s)(x_t − μ) = θ(B)Θ(B^s)e_t`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Factor {
    /// φ(B), non-seasonal autoregressive.
    Ar,
    /// θ(B), non-seasonal moving average.
    Ma,
    /// Φ(B^s), seasonal autoregressive.
    SeasonalAr,
    /// Θ(B^s), seasonal moving average.
    SeasonalMa,
}

impl Factor {
    /// The factors in canonical order (the order of the optimiser's coordinates).
    pub(crate) const ALL: [Factor; 4] = [
        Factor::Ar,
        Factor::Ma,
        Factor::SeasonalAr,
        Factor::SeasonalMa,
    ];

    /// Whether the factor is a moving-average one (`1 + Σθ_jB^j`, plus signs).
    pub(crate) fn is_moving_average(self) -> bool {
        matches!(self, Factor::Ma | Factor::SeasonalMa)
    }

    /// The sign that puts the factor's coefficients into the `1 − Σa_iB^i` form the
    /// step-down recursion reads: +1 for AR factors, −1 for MA factors.
    pub(crate) fn step_down_sign(self) -> f64 {
        if self.is_moving_average() { -1.0 } else { 1.0 }
    }

    /// The term of coefficient `i` (1-based) of this factor.
    pub(crate) fn term(self, i: usize) -> Term {
        match self {
            Factor::Ar => Term::Ar(i),
            Factor::Ma => Term::Ma(i),
            Factor::SeasonalAr => Term::SeasonalAr(i),
            Factor::SeasonalMa => Term::SeasonalMa(i),
        }
    }

    /// The factor and 1-based position of an ARMA term (`None` for regression terms).
    pub(crate) fn of(term: Term) -> Option<(Factor, usize)> {
        match term {
            Term::Ar(i) => Some((Factor::Ar, i)),
            Term::Ma(i) => Some((Factor::Ma, i)),
            Term::SeasonalAr(i) => Some((Factor::SeasonalAr, i)),
            Term::SeasonalMa(i) => Some((Factor::SeasonalMa, i)),
            Term::Mean
            | Term::Drift
            | Term::Exogenous(_)
            | Term::CycleCos { .. }
            | Term::CycleSin { .. } => None,
        }
    }

    /// The factor's name in messages and reports.
    pub(crate) fn label(self) -> &'static str {
        match self {
            Factor::Ar => "AR",
            Factor::Ma => "MA",
            Factor::SeasonalAr => "seasonal AR",
            Factor::SeasonalMa => "seasonal MA",
        }
    }

    /// What admissibility means for the factor: "stationary" or "invertible".
    pub(crate) fn admissible_word(self) -> &'static str {
        if self.is_moving_average() {
            "invertible"
        } else {
            "stationary"
        }
    }

    /// Whether `coefs` make this factor admissible (stationary or invertible).
    pub(crate) fn is_admissible(self, coefs: &[f64]) -> bool {
        if self.is_moving_average() {
            lag::is_invertible(coefs)
        } else {
            lag::is_stationary(coefs)
        }
    }
}

/// Natural coefficients of the four factors, in the sign convention of the crate
/// (`φ(B) = 1 − Σφ_iB^i`, `θ(B) = 1 + Σθ_jB^j`).
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct FactorCoefficients {
    pub(crate) ar: Vec<f64>,
    pub(crate) ma: Vec<f64>,
    pub(crate) seasonal_ar: Vec<f64>,
    pub(crate) seasonal_ma: Vec<f64>,
}

impl FactorCoefficients {
    /// Zero coefficients of the given lengths `[p, q, P, Q]`.
    pub(crate) fn zeros(p: usize, q: usize, seasonal_p: usize, seasonal_q: usize) -> Self {
        FactorCoefficients {
            ar: vec![0.0; p],
            ma: vec![0.0; q],
            seasonal_ar: vec![0.0; seasonal_p],
            seasonal_ma: vec![0.0; seasonal_q],
        }
    }

    /// The coefficients of one factor.
    pub(crate) fn of(&self, factor: Factor) -> &Vec<f64> {
        match factor {
            Factor::Ar => &self.ar,
            Factor::Ma => &self.ma,
            Factor::SeasonalAr => &self.seasonal_ar,
            Factor::SeasonalMa => &self.seasonal_ma,
        }
    }

    /// The coefficients of one factor, to change.
    pub(crate) fn of_mut(&mut self, factor: Factor) -> &mut Vec<f64> {
        match factor {
            Factor::Ar => &mut self.ar,
            Factor::Ma => &mut self.ma,
            Factor::SeasonalAr => &mut self.seasonal_ar,
            Factor::SeasonalMa => &mut self.seasonal_ma,
        }
    }

    /// The value of an ARMA term (`None` for regression terms or a position beyond the
    /// factor's length).
    pub(crate) fn value(&self, term: Term) -> Option<f64> {
        let (factor, i) = Factor::of(term)?;
        self.of(factor).get(i.checked_sub(1)?).copied()
    }

    /// The expanded AR and MA polynomials `(φ, θ)` into caller buffers (allocation-free
    /// once they have grown).
    pub(crate) fn expand_into(&self, period: usize, phi: &mut Vec<f64>, theta: &mut Vec<f64>) {
        expand_into(&self.ar, &self.seasonal_ar, period, false, phi);
        expand_into(&self.ma, &self.seasonal_ma, period, true, theta);
    }

    /// The expanded AR and MA polynomials `(φ, θ)`.
    pub(crate) fn expanded(&self, period: usize) -> (Vec<f64>, Vec<f64>) {
        let (mut phi, mut theta) = (Vec::new(), Vec::new());
        self.expand_into(period, &mut phi, &mut theta);
        (phi, theta)
    }
}
