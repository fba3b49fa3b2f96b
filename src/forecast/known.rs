//! Models whose coefficients are known rather than estimated: handed over from another
//! system or written down by an engineer, validated on construction, and able to
//! forecast and monitor from any history on the model's time axis.

use crate::base::error::{Error, Result};
use crate::base::grid::TimeAxis;
use crate::filter::forecasting::ForecastModel;
use crate::forecast::{Forecast, Monitor, monitor_after};
use crate::model::blueprint::Blueprint;
use crate::model::coefficients::Term;
use crate::model::coefficients::{Factor, FactorCoefficients};

/// A model with given coefficients and innovation variance, not fitted to data.
///
/// Every term of the blueprint (ARMA coefficients, mean, drift, regressors) must be given
/// exactly once, finite; the AR factors must be stationary, the MA factors invertible and
/// σ² positive. After that the model forecasts and monitors like a fitted one, from a
/// history of readings that positions its filter.
///
/// ```
/// use lagwise::{Blueprint, KnownModel, Term};
/// # fn main() -> Result<(), lagwise::Error> {
/// // Supply temperature: AR(1) around 88 °C, φ = 0.9, σ = 0.2 °C, from the plant's records.
/// let bp = Blueprint::builder().nonseasonal(1, 0, 0).build()?;
/// let model = KnownModel::new(&bp, &[(Term::Ar(1), 0.9), (Term::Mean, 88.0)], 0.04)?;
/// let fc = model.forecast_from_history(&[88.4, 88.6, 88.5], &[], 2, &[0.95], &[])?;
/// assert!((fc.steps[0].mean - (88.0 + 0.9 * 0.5)).abs() < 1e-12);
/// assert!(KnownModel::new(&bp, &[(Term::Ar(1), 1.1), (Term::Mean, 88.0)], 0.04).is_err());
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct KnownModel {
    blueprint: Blueprint,
    coefficients: Vec<(Term, f64)>,
    innovation_variance: f64,
    forecaster: ForecastModel,
    time_axis: Option<TimeAxis>,
}

impl KnownModel {
    /// Validate `coefficients` (one `(term, value)` per term of `blueprint`, in any
    /// order) and `innovation_variance` (σ² > 0), and build the model.
    pub fn new(
        blueprint: &Blueprint,
        coefficients: &[(Term, f64)],
        innovation_variance: f64,
    ) -> Result<Self> {
        const WHAT: &str = "known model";
        if !(innovation_variance > 0.0 && innovation_variance.is_finite()) {
            return Err(Error::invalid(
                WHAT,
                format!("innovation variance {innovation_variance} must be positive and finite"),
            ));
        }
        let terms = blueprint.terms();
        for (i, (term, value)) in coefficients.iter().enumerate() {
            if !terms.contains(term) {
                return Err(Error::invalid(
                    WHAT,
                    format!(
                        "{term} is not a term of {} (its terms: {})",
                        blueprint.shape_label(),
                        list(&terms)
                    ),
                ));
            }
            if coefficients[..i].iter().any(|(t, _)| t == term) {
                return Err(Error::invalid(WHAT, format!("{term} is given twice")));
            }
            if !value.is_finite() {
                return Err(Error::invalid(
                    WHAT,
                    format!("{term} = {value}; coefficients must be finite"),
                ));
            }
        }
        let value_of = |term: Term| coefficients.iter().find(|(t, _)| *t == term).map(|c| c.1);
        let missing: Vec<Term> = terms
            .iter()
            .copied()
            .filter(|t| value_of(*t).is_none())
            .collect();
        if !missing.is_empty() {
            return Err(Error::invalid(
                WHAT,
                format!("no value given for {}", list(&missing)),
            ));
        }
        let mut factors = FactorCoefficients::default();
        let mut regression = Vec::new();
        let mut ordered = Vec::with_capacity(terms.len());
        for term in terms {
            let value = value_of(term).unwrap_or(f64::NAN);
            match Factor::of(term) {
                Some((factor, _)) => factors.of_mut(factor).push(value),
                None => regression.push((term, value)),
            }
            ordered.push((term, value));
        }
        for factor in Factor::ALL {
            if !factor.is_admissible(factors.of(factor)) {
                return Err(Error::invalid(
                    WHAT,
                    format!(
                        "the {} coefficients are not {}",
                        factor.label(),
                        factor.admissible_word()
                    ),
                ));
            }
        }
        let forecaster = ForecastModel::new(blueprint, &factors, innovation_variance, regression);
        Ok(KnownModel {
            blueprint: blueprint.clone(),
            coefficients: ordered,
            innovation_variance,
            forecaster,
            time_axis: None,
        })
    }

    /// The model's specification.
    pub fn blueprint(&self) -> &Blueprint {
        &self.blueprint
    }
    /// The coefficients, in the blueprint's canonical term order.
    pub fn coefficients(&self) -> &[(Term, f64)] {
        &self.coefficients
    }
    /// The innovation variance σ².
    pub fn innovation_variance(&self) -> f64 {
        self.innovation_variance
    }
    /// The same model with its readings on `axis` (index 0 of a history at the axis'
    /// origin): its monitors and forecasts carry timestamps.
    pub fn with_time_axis(mut self, axis: TimeAxis) -> Self {
        self.time_axis = Some(axis);
        self
    }
    /// The forecasting model (crate-internal).
    pub(crate) fn forecaster(&self) -> &ForecastModel {
        &self.forecaster
    }

    /// The time axis of the model's readings, if set.
    pub fn time_axis(&self) -> Option<TimeAxis> {
        self.time_axis
    }

    /// A monitor positioned after `history` (readings from index 0 on the model's time
    /// axis, NaN = missing; `regressors` one column per declared regressor over the
    /// history), flagging readings outside the two-sided interval at `alarm_level`.
    pub fn monitor_from_history(
        &self,
        history: &[f64],
        regressors: &[&[f64]],
        alarm_level: f64,
    ) -> Result<Monitor> {
        monitor_after(
            &self.blueprint,
            &self.forecaster,
            self.time_axis,
            history,
            regressors,
            alarm_level,
            "known model",
        )
    }

    /// Forecast `horizon` readings past the end of `history` at the interval `levels`
    /// (`future` holds the regressors' future values, one column each, at least `horizon`
    /// long; empty without regressors).
    pub fn forecast_from_history(
        &self,
        history: &[f64],
        regressors: &[&[f64]],
        horizon: usize,
        levels: &[f64],
        future: &[&[f64]],
    ) -> Result<Forecast> {
        self.monitor_from_history(history, regressors, 0.99)?
            .forecast_given_regressors(horizon, levels, future)
    }
}

fn list(terms: &[Term]) -> String {
    terms
        .iter()
        .map(|t| t.to_string())
        .collect::<Vec<_>>()
        .join(", ")
}
