//! Gap filling: every missing reading's conditional mean and standard deviation given all
//! present readings, on the original scale, with intervals (the fixed-interval smoother
//! of the filter layer).

use serde::{Deserialize, Serialize};

use crate::base::error::Result;
use crate::base::grid::TimeAxis;
use crate::base::screen::{ConstantPolicy, screen};
use crate::estimate;
use crate::filter::forecasting::ForecastModel;
use crate::filter::smoothing::smooth_gaps;
use crate::fit::fitted::FittedModel;
use crate::forecast::{KnownModel, PredictionInterval};
use crate::model::blueprint::Blueprint;

/// One missing reading, filled.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct FilledReading {
    /// Index of the reading in the series.
    pub index: u64,
    /// Its time (UTC epoch ms) when the model has a time axis.
    pub time_ms: Option<i64>,
    /// Conditional mean given every present reading.
    pub mean: f64,
    /// Conditional standard deviation (the model's parameters taken as known).
    pub sd: f64,
    /// Intervals `mean ± z·sd` at the requested levels, in their order.
    pub intervals: Vec<PredictionInterval>,
}

/// The result of [`FittedModel::fill_gaps`]: the filled readings, the series with its
/// gaps filled by their conditional means, and what could not be filled.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct GapFill {
    /// Interval levels, as requested.
    pub levels: Vec<f64>,
    /// Every filled reading, in time order.
    pub readings: Vec<FilledReading>,
    /// The series with each filled reading replaced by its conditional mean (readings in
    /// `unfilled` stay NaN).
    #[serde(with = "crate::base::nan_as_null")]
    pub series: Vec<f64>,
    /// Missing readings that could not be filled exactly: for an integrated model, gaps
    /// both within the first and the last δ readings (δ = d + D·s) leave the readings
    /// before the first run of δ present readings to a diffuse start that neither
    /// direction of the smoother reaches.
    pub unfilled: Vec<u64>,
    /// Present readings that the smoother could not condition on (0 in the exact cases;
    /// otherwise the readings before the first run of δ present readings, and the filled
    /// values condition only on the readings after them).
    pub unused_readings: usize,
}

pub(crate) fn fill(
    blueprint: &Blueprint,
    forecaster: &ForecastModel,
    axis: Option<TimeAxis>,
    series: &[f64],
    regressors: &[&[f64]],
    levels: &[f64],
    what: &'static str,
) -> Result<GapFill> {
    screen(series, what, 1, ConstantPolicy::Allow)?;
    estimate::check_regressors(blueprint, series.len(), regressors, what)?;
    let zq = super::quantiles(levels)?;
    let mut exog = vec![0.0; regressors.len()];
    let regression = |t: usize, exog: &mut Vec<f64>| {
        for (j, col) in regressors.iter().enumerate() {
            exog[j] = col[t];
        }
        forecaster.regression_at(t as u64, exog)
    };
    let z: Vec<f64> = (0..series.len())
        .map(|t| {
            if series[t].is_nan() {
                f64::NAN
            } else {
                series[t] - regression(t, &mut exog)
            }
        })
        .collect();
    let smoothing = smooth_gaps(forecaster, &z)?;
    let mut filled = series.to_vec();
    let mut readings = Vec::with_capacity(smoothing.gaps.len());
    for g in &smoothing.gaps {
        let mean = g.mean + regression(g.index, &mut exog);
        let sd = (g.variance * forecaster.sigma2).sqrt();
        filled[g.index] = mean;
        readings.push(FilledReading {
            index: g.index as u64,
            time_ms: axis.and_then(|a| a.time_of(g.index as u64)),
            mean,
            sd,
            intervals: levels
                .iter()
                .zip(&zq)
                .map(|(&level, &q)| PredictionInterval {
                    level,
                    lower: mean - q * sd,
                    upper: mean + q * sd,
                })
                .collect(),
        });
    }
    Ok(GapFill {
        levels: levels.to_vec(),
        readings,
        series: filled,
        unfilled: smoothing.unfilled.iter().map(|&t| t as u64).collect(),
        unused_readings: smoothing.unused_present,
    })
}

impl FittedModel {
    /// Fill the gaps of `series` (the readings this model was fitted to, or any series on
    /// the same time axis from index 0; NaN = missing): each missing reading's conditional
    /// mean and standard deviation given every present reading, with intervals at
    /// `levels`, through the model's differencing (a fixed-interval smoother; the model's
    /// coefficients and σ² are taken as known).
    ///
    /// ```
    /// use lagwise::{Blueprint, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let mut x = Simulator::builder().autoregressive(&[0.8]).level(50.0).build()?.generate(400, 3);
    /// for v in &mut x[200..204] { *v = f64::NAN; }
    /// let model = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
    /// let filled = model.fill_gaps(&x, &[0.95])?;
    /// assert_eq!(filled.readings.len(), 4);
    /// assert!(filled.series.iter().all(|v| v.is_finite()));
    /// // The middle of a gap is the least certain.
    /// assert!(filled.readings[1].sd > filled.readings[0].sd);
    /// # Ok(()) }
    /// ```
    pub fn fill_gaps(&self, series: &[f64], levels: &[f64]) -> Result<GapFill> {
        self.fill_gaps_given_regressors(series, &[], levels)
    }

    /// [`FittedModel::fill_gaps`] for a model with regressors: `regressors` holds one
    /// finite column per declared regressor over the series.
    pub fn fill_gaps_given_regressors(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
        levels: &[f64],
    ) -> Result<GapFill> {
        fill(
            self.blueprint(),
            &self.forecaster,
            self.time_axis(),
            series,
            regressors,
            levels,
            "gap filling",
        )
    }
}

impl KnownModel {
    /// Fill the gaps of `series` under this model (see [`FittedModel::fill_gaps`];
    /// `regressors` one finite column per declared regressor, empty without).
    pub fn fill_gaps(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
        levels: &[f64],
    ) -> Result<GapFill> {
        fill(
            self.blueprint(),
            self.forecaster(),
            self.time_axis(),
            series,
            regressors,
            levels,
            "gap filling",
        )
    }
}
