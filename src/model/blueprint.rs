//! Model specification: the [`Blueprint`] and its builder.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, ErrorKind, Result};
use crate::model::coefficients::{Factor, Term};
use crate::model::cycles::{Cycle, MAX_CYCLE_PERIOD, MAX_CYCLES, MAX_HARMONICS, harmonic_terms};

/// Largest seasonal period accepted (10 days of minute readings).
pub const MAX_PERIOD: usize = 14_400;
/// Largest expanded AR or MA degree (`p + P·s`, `q + Q·s`) accepted.
pub const MAX_EXPANDED_DEGREE: usize = 20_000;
/// Largest order accepted for any one of p, q, P, Q.
pub const MAX_ORDER: usize = 50;

/// How the coefficients are estimated.
///
/// # Objective
/// The optimiser sees only the free ARMA coefficients. Each polynomial factor without
/// held coefficients is parameterised by `u_k = atanh κ_k` (partial autocorrelations), so
/// every trial point is admissible (Jones 1980; Monahan 1984). Regression coefficients
/// (mean, drift) are profiled out by GLS inside the likelihood, and σ² is concentrated
/// out, so the objective is `−log L / n` as a function of the ARMA part alone.
///
/// # Conditional sum of squares (convention)
/// On the differenced series `w`, residuals are `e_t = w_t − Σφ_i w_{t−i} − Σθ_j e_{t−j}`
/// for `t ≥ p + P·s` (the first `p + P·s` differenced readings are conditioned on), with
/// pre-sample residuals set to zero. A missing reading after the conditioning stretch gets
/// residual zero and is replaced by its one-step prediction in later lags; a missing
/// reading inside the conditioning stretch is taken as zero deviation. σ² = SS/m with `m`
/// the number of non-missing residual times. The log-likelihood reported is the
/// conditional one, `−m/2·(ln 2πσ² + 1)`, typed as conditional.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize, Default)]
pub enum Estimator {
    /// Conditional sum of squares: condition on the first `p + P·s` differenced readings
    /// with pre-sample innovations set to zero. Fast; its log-likelihood is partial, so no
    /// information criteria are offered.
    ConditionalSumOfSquares,
    /// Exact Gaussian maximum likelihood (Kalman filter, σ² concentrated out), started
    /// from Hannan–Rissanen estimates.
    ExactLikelihood,
    /// Conditional sum of squares first, then exact maximum likelihood from that solution.
    #[default]
    StagedLikelihood,
}

impl std::fmt::Display for Estimator {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Estimator::ConditionalSumOfSquares => "conditional sum of squares",
            Estimator::ExactLikelihood => "exact likelihood",
            Estimator::StagedLikelihood => {
                "exact likelihood started from conditional sum of squares"
            }
        })
    }
}

/// A validated model specification. `Clone + Send + Sync`, immutable.
///
/// ```
/// use lagwise::{Blueprint, Estimator, Term};
/// # fn main() -> Result<(), lagwise::Error> {
/// // Return temperature: SARIMA(1,0,1)(0,1,1) with a daily period of 96 readings.
/// let bp = Blueprint::builder()
///     .nonseasonal(1, 0, 1)
///     .seasonal(0, 1, 1, 96)
///     .estimator(Estimator::StagedLikelihood)
///     .build()?;
/// assert_eq!(bp.expanded_degrees(), (1, 97));
/// assert!(!bp.has_mean()); // differenced: no mean by default
///
/// // Bad settings fail at build time with a typed error:
/// let err = Blueprint::builder().seasonal(1, 0, 0, 1).build().unwrap_err();
/// assert!(err.to_string().contains("period"));
/// let err = Blueprint::builder().nonseasonal(1, 0, 0).hold(Term::Ma(1), 0.3).build().unwrap_err();
/// assert!(err.to_string().contains("theta.1"));
/// # Ok(()) }
/// ```
///
/// A blueprint says *which* model to fit — orders, differencing, mean/drift, held
/// coefficients, estimator and optimiser settings — and never holds data. `build()`
/// validates everything, so after it only genuine numerical trouble can fail a fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "BlueprintRecord")]
pub struct Blueprint {
    pub(crate) p: usize,
    pub(crate) d: usize,
    pub(crate) q: usize,
    pub(crate) seasonal_p: usize,
    pub(crate) seasonal_d: usize,
    pub(crate) seasonal_q: usize,
    pub(crate) period: usize,
    pub(crate) mean: bool,
    pub(crate) drift: bool,
    pub(crate) exogenous: usize,
    /// Long cycles as harmonic regressors, sorted by period.
    pub(crate) cycles: Vec<Cycle>,
    pub(crate) held: Vec<(Term, f64)>,
    pub(crate) estimator: Estimator,
    pub(crate) tolerance: f64,
    pub(crate) max_iterations: usize,
}

/// The stored form of a blueprint; restoring re-runs the builder's validation.
#[derive(Deserialize)]
struct BlueprintRecord {
    p: usize,
    d: usize,
    q: usize,
    seasonal_p: usize,
    seasonal_d: usize,
    seasonal_q: usize,
    period: usize,
    mean: bool,
    drift: bool,
    exogenous: usize,
    #[serde(default)]
    cycles: Vec<Cycle>,
    held: Vec<(Term, f64)>,
    estimator: Estimator,
    tolerance: f64,
    max_iterations: usize,
}

impl TryFrom<BlueprintRecord> for Blueprint {
    type Error = String;
    fn try_from(r: BlueprintRecord) -> std::result::Result<Self, String> {
        let mut b = Blueprint::builder();
        b.nonseasonal(r.p, r.d, r.q)
            .seasonal(r.seasonal_p, r.seasonal_d, r.seasonal_q, r.period)
            .mean_term(r.mean)
            .drift_term(r.drift)
            .exogenous(r.exogenous)
            .estimator(r.estimator)
            .tolerance(r.tolerance)
            .max_iterations(r.max_iterations);
        for c in r.cycles {
            b.cycle(c.period, c.harmonics);
        }
        for (t, v) in r.held {
            b.hold(t, v);
        }
        b.build().map_err(|e| e.to_string())
    }
}

/// Builder for [`Blueprint`]; setters chain on `&mut self`, `build()` validates.
#[derive(Debug, Clone, Default)]
pub struct BlueprintBuilder {
    orders: (usize, usize, usize),
    seasonal: (usize, usize, usize, usize),
    mean: Option<bool>,
    drift: Option<bool>,
    exogenous: usize,
    cycles: Vec<Cycle>,
    held: Vec<(Term, f64)>,
    estimator: Estimator,
    tolerance: Option<f64>,
    max_iterations: Option<usize>,
}

impl BlueprintBuilder {
    /// Non-seasonal orders: AR order `p`, differencing `d`, MA order `q`.
    pub fn nonseasonal(&mut self, p: usize, d: usize, q: usize) -> &mut Self {
        self.orders = (p, d, q);
        self
    }
    /// Seasonal orders `P`, `D`, `Q` at period `s` readings (`s ≥ 2` when any is non-zero).
    pub fn seasonal(&mut self, p: usize, d: usize, q: usize, period: usize) -> &mut Self {
        self.seasonal = (p, d, q, period);
        self
    }
    /// Include an estimated mean (default: yes when `d + D = 0`; not allowed otherwise).
    pub fn mean_term(&mut self, yes: bool) -> &mut Self {
        self.mean = Some(yes);
        self
    }
    /// Include an estimated drift (default: no; allowed only when `d + D = 1`).
    pub fn drift_term(&mut self, yes: bool) -> &mut Self {
        self.drift = Some(yes);
        self
    }
    /// Number of exogenous regressor columns (default 0). Regression with ARMA errors:
    /// the columns are passed to [`Blueprint::fit_regression`], differenced like the
    /// series, and their coefficients estimated by GLS inside the likelihood.
    pub fn exogenous(&mut self, columns: usize) -> &mut Self {
        self.exogenous = columns;
        self
    }
    /// Describe a long cycle of `period` readings by `harmonics` sine–cosine pairs
    /// (regression on harmonic terms with ARMA errors; see [`Cycle`]). The usual way to
    /// model a weekly cycle of 672 quarter-hour readings, which a seasonal lag polynomial
    /// of that period handles slowly and with few cycles of data. At most three cycles;
    /// `1 ≤ harmonics ≤ period/2`. Giving the same period again keeps the last count.
    /// Forecasts and monitors compute the future harmonic terms themselves.
    pub fn cycle(&mut self, period: usize, harmonics: usize) -> &mut Self {
        self.cycles.retain(|c| c.period != period);
        self.cycles.push(Cycle::new(period, harmonics));
        self
    }
    /// Hold a coefficient at a fixed value instead of estimating it. Holding the same
    /// term twice keeps the last value.
    pub fn hold(&mut self, term: Term, value: f64) -> &mut Self {
        self.held.retain(|(t, _)| *t != term);
        self.held.push((term, value));
        self
    }
    /// The estimator (default [`Estimator::StagedLikelihood`]).
    pub fn estimator(&mut self, estimator: Estimator) -> &mut Self {
        self.estimator = estimator;
        self
    }
    /// Convergence tolerance on the gradient norm of the objective per reading
    /// (default 1e-7).
    pub fn tolerance(&mut self, tolerance: f64) -> &mut Self {
        self.tolerance = Some(tolerance);
        self
    }
    /// Iteration cap for each optimisation stage (default 200).
    pub fn max_iterations(&mut self, iterations: usize) -> &mut Self {
        self.max_iterations = Some(iterations);
        self
    }

    /// Validate the settings and return the blueprint.
    pub fn build(&self) -> Result<Blueprint> {
        let (p, d, q) = self.orders;
        let (sp, sd, sq, _) = self.seasonal;
        let period = self.checked_orders()?;
        let (mean, drift) = self.checked_constant()?;
        let (tolerance, max_iterations) = self.checked_optimiser()?;
        if self.exogenous > 64 {
            return Err(spec_error(
                "exogenous",
                format!(
                    "{} regressor columns; at most 64 are supported",
                    self.exogenous
                ),
            ));
        }
        let cycles = self.checked_cycles(period)?;
        let mut held = self.held.clone();
        held.sort_by_key(|h| h.0);
        let bp = Blueprint {
            p,
            d,
            q,
            seasonal_p: sp,
            seasonal_d: sd,
            seasonal_q: sq,
            period,
            mean,
            drift,
            exogenous: self.exogenous,
            cycles,
            held,
            estimator: self.estimator,
            tolerance,
            max_iterations,
        };
        bp.check_held()?;
        Ok(bp)
    }

    /// Orders, differencing and period within their limits; the period in force (1 for
    /// a model without seasonal terms).
    fn checked_orders(&self) -> Result<usize> {
        let (p, d, q) = self.orders;
        let (sp, sd, sq, period) = self.seasonal;
        for (name, v) in [("p", p), ("q", q), ("P", sp), ("Q", sq)] {
            if v > MAX_ORDER {
                return Err(spec_error(
                    "orders",
                    format!("order {name} = {v} exceeds the limit {MAX_ORDER}"),
                ));
            }
        }
        if d > 3 || sd > 2 {
            return Err(spec_error(
                "differencing",
                format!("d = {d}, D = {sd}; at most d = 3 and D = 2 are supported"),
            ));
        }
        let seasonal = sp + sd + sq > 0;
        let period = if seasonal { period } else { 1 };
        if seasonal && period < 2 {
            return Err(spec_error(
                "period",
                format!("seasonal orders need a period s >= 2 readings, got s = {period}"),
            ));
        }
        if period > MAX_PERIOD {
            return Err(spec_error(
                "period",
                format!("period {period} exceeds the limit {MAX_PERIOD}"),
            ));
        }
        if p + sp * period > MAX_EXPANDED_DEGREE || q + sq * period > MAX_EXPANDED_DEGREE {
            return Err(spec_error(
                "orders",
                format!(
                    "expanded degree above {MAX_EXPANDED_DEGREE}: p + P*s = {}, q + Q*s = {}",
                    p + sp * period,
                    q + sq * period
                ),
            ));
        }
        Ok(period)
    }

    /// The cycles, sorted by period, after checking each: period within limits, harmonics
    /// between 1 and `period/2`, at most [`MAX_CYCLES`], and each keeping at least one
    /// harmonic under the seasonal differencing. A cycle at the seasonal period itself is
    /// allowed without a seasonal difference: a deterministic daily shape by harmonics
    /// beside seasonal ARMA terms for the day-to-day correlation.
    fn checked_cycles(&self, period: usize) -> Result<Vec<Cycle>> {
        let mut cycles = self.cycles.clone();
        cycles.sort();
        if cycles.len() > MAX_CYCLES {
            return Err(spec_error(
                "cycle",
                format!(
                    "{} cycles; at most {MAX_CYCLES} are supported",
                    cycles.len()
                ),
            ));
        }
        let seasonal_d = self.seasonal.1;
        for c in &cycles {
            if c.period < 2 || c.period > MAX_CYCLE_PERIOD {
                return Err(spec_error(
                    "cycle",
                    format!(
                        "cycle period {} must be between 2 and {MAX_CYCLE_PERIOD} readings",
                        c.period
                    ),
                ));
            }
            if c.harmonics == 0 || 2 * c.harmonics > c.period || c.harmonics > MAX_HARMONICS {
                return Err(spec_error(
                    "cycle",
                    format!(
                        "{} harmonics for the cycle of period {}: between 1 and period/2 = {} (at most {MAX_HARMONICS}); higher harmonics alias onto lower ones",
                        c.harmonics,
                        c.period,
                        (c.period / 2).min(MAX_HARMONICS)
                    ),
                ));
            }
            if harmonic_terms(std::slice::from_ref(c), seasonal_d, period).is_empty() {
                return Err(spec_error(
                    "cycle",
                    format!(
                        "the seasonal difference at period {period} removes every harmonic of the cycle of period {}",
                        c.period
                    ),
                ));
            }
        }
        Ok(cycles)
    }

    /// Whether a mean and a drift are estimated: a mean by default for an undifferenced
    /// model, and each only where it is identifiable.
    fn checked_constant(&self) -> Result<(bool, bool)> {
        let integrated = self.orders.1 + self.seasonal.1;
        let mean = self.mean.unwrap_or(integrated == 0);
        if mean && integrated > 0 {
            return Err(spec_error(
                "mean",
                "a mean is only identifiable for an undifferenced model (d + D = 0); use a drift for d + D = 1".into(),
            ));
        }
        let drift = self.drift.unwrap_or(false);
        if drift && integrated != 1 {
            return Err(spec_error(
                "drift",
                format!(
                    "a drift needs exactly one difference (d + D = 1), got d + D = {integrated}"
                ),
            ));
        }
        Ok((mean, drift))
    }

    /// The optimiser's tolerance and iteration cap.
    fn checked_optimiser(&self) -> Result<(f64, usize)> {
        let tolerance = self.tolerance.unwrap_or(1e-7);
        if !(tolerance > 0.0 && tolerance.is_finite()) {
            return Err(spec_error(
                "tolerance",
                format!("tolerance {tolerance} must be positive"),
            ));
        }
        let max_iterations = self.max_iterations.unwrap_or(200);
        if max_iterations == 0 {
            return Err(spec_error(
                "max_iterations",
                "the iteration cap must be at least 1".into(),
            ));
        }
        Ok((tolerance, max_iterations))
    }
}

impl Blueprint {
    /// Start a blueprint (default: white noise with a mean, staged likelihood).
    pub fn builder() -> BlueprintBuilder {
        BlueprintBuilder::default()
    }
    /// `(p, d, q)`.
    pub fn nonseasonal_orders(&self) -> (usize, usize, usize) {
        (self.p, self.d, self.q)
    }
    /// `(P, D, Q, s)`; `s = 1` when there are no seasonal terms.
    pub fn seasonal_orders(&self) -> (usize, usize, usize, usize) {
        (
            self.seasonal_p,
            self.seasonal_d,
            self.seasonal_q,
            self.period,
        )
    }
    /// Degrees of the expanded AR and MA polynomials: `(p + P·s, q + Q·s)`.
    pub fn expanded_degrees(&self) -> (usize, usize) {
        (
            self.p + self.seasonal_p * self.period,
            self.q + self.seasonal_q * self.period,
        )
    }
    /// Readings lost to differencing: `d + D·s`.
    pub fn differencing_loss(&self) -> usize {
        self.d + self.seasonal_d * self.period
    }
    /// Whether a mean is part of the model.
    pub fn has_mean(&self) -> bool {
        self.mean
    }
    /// Whether a drift is part of the model.
    pub fn has_drift(&self) -> bool {
        self.drift
    }
    /// The estimator.
    pub fn estimator(&self) -> Estimator {
        self.estimator
    }
    /// Gradient tolerance.
    pub fn tolerance(&self) -> f64 {
        self.tolerance
    }
    /// Iteration cap per optimisation stage.
    pub fn max_iterations(&self) -> usize {
        self.max_iterations
    }
    /// Held coefficients and their values.
    pub fn held(&self) -> &[(Term, f64)] {
        &self.held
    }
    /// The held value of `term`, if held.
    pub fn held_value(&self, term: Term) -> Option<f64> {
        self.held.iter().find(|(t, _)| *t == term).map(|(_, v)| *v)
    }
    /// Every coefficient of the model in canonical order: φ, θ, Φ, Θ, mean, drift.
    pub fn terms(&self) -> Vec<Term> {
        let mut out = Vec::new();
        out.extend((1..=self.p).map(Term::Ar));
        out.extend((1..=self.q).map(Term::Ma));
        out.extend((1..=self.seasonal_p).map(Term::SeasonalAr));
        out.extend((1..=self.seasonal_q).map(Term::SeasonalMa));
        if self.mean {
            out.push(Term::Mean);
        }
        if self.drift {
            out.push(Term::Drift);
        }
        out.extend((1..=self.exogenous).map(Term::Exogenous));
        out.extend(harmonic_terms(&self.cycles, self.seasonal_d, self.period));
        out
    }
    /// The long cycles described by harmonic terms, sorted by period.
    pub fn cycles(&self) -> &[Cycle] {
        &self.cycles
    }
    /// Number of exogenous regressor columns.
    pub fn exogenous_columns(&self) -> usize {
        self.exogenous
    }
    /// Number of ARMA coefficients (φ, θ, Φ, Θ) that are estimated, not held: the
    /// reduction of portmanteau degrees of freedom.
    pub fn estimated_arma_coefficients(&self) -> usize {
        self.terms()
            .iter()
            .filter(|t| t.is_arma() && self.held_value(**t).is_none())
            .count()
    }
    /// A short name of the model shape, e.g. `SARIMA(1,0,1)×(0,1,1)₉₆ + mean` (see
    /// [`ModelShape`]).
    pub fn shape_label(&self) -> String {
        self.shape().to_string()
    }
    /// The model shape as a small copyable value (its `Display` is [`Self::shape_label`]).
    pub fn shape(&self) -> ModelShape {
        let mut shape = ModelShape::of_orders(
            [self.p, self.d, self.q],
            [self.seasonal_p, self.seasonal_d, self.seasonal_q],
            self.period,
            self.mean,
            self.drift,
        );
        shape.exogenous = u32::try_from(self.exogenous).unwrap_or(u32::MAX);
        shape.set_cycles(&self.cycles);
        shape
    }
    /// Held values: finite, each a coefficient of this model, and a factor whose
    /// coefficients are all held admissible.
    fn check_held(&self) -> Result<()> {
        for &(term, value) in &self.held {
            if !value.is_finite() {
                return Err(spec_error(
                    "hold",
                    format!("held value for {term} is {value}; it must be finite"),
                ));
            }
            if !self.terms().contains(&term) {
                return Err(spec_error(
                    "hold",
                    format!("{term} is not a coefficient of this model"),
                ));
            }
        }
        let lens = [self.p, self.q, self.seasonal_p, self.seasonal_q];
        for (factor, len) in Factor::ALL.into_iter().zip(lens) {
            if len > 0 && self.factor_fully_held(factor, len) {
                let coefs: Vec<f64> = (1..=len)
                    .map(|i| self.held_value(factor.term(i)).unwrap_or(0.0))
                    .collect();
                if !factor.is_admissible(&coefs) {
                    return Err(spec_error(
                        "hold",
                        format!(
                            "the held {} coefficients are not {}",
                            factor.label(),
                            factor.admissible_word()
                        ),
                    ));
                }
            }
        }
        Ok(())
    }
    pub(crate) fn factor_fully_held(&self, factor: Factor, len: usize) -> bool {
        (1..=len).all(|i| self.held_value(factor.term(i)).is_some())
    }
}

/// A model's orders and regression terms as a small copyable value (orders are at most
/// [`MAX_ORDER`], periods at most 14,400). `Display` gives the one label the crate uses
/// everywhere (reports, search accounts, fleet tables), in the textbook notation with the
/// period as a subscript: `ARMA(2,0)`, `ARIMA(0,1,1) + drift`,
/// `SARIMA(1,0,1)×(0,1,1)₉₆ + mean`.
///
/// ```
/// use lagwise::Blueprint;
/// # fn main() -> Result<(), lagwise::Error> {
/// let bp = Blueprint::builder().nonseasonal(1, 0, 1).seasonal(0, 1, 1, 96).build()?;
/// assert_eq!(bp.shape().to_string(), "SARIMA(1,0,1)×(0,1,1)₉₆");
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ModelShape {
    /// Non-seasonal AR order.
    pub p: u8,
    /// Non-seasonal differencing.
    pub d: u8,
    /// Non-seasonal MA order.
    pub q: u8,
    /// Seasonal AR order.
    pub seasonal_p: u8,
    /// Seasonal differencing.
    pub seasonal_d: u8,
    /// Seasonal MA order.
    pub seasonal_q: u8,
    /// Season length (1 = none).
    pub period: u16,
    /// Whether a mean is estimated.
    pub mean: bool,
    /// Whether a drift is estimated.
    pub drift: bool,
    /// Number of external regressors.
    pub exogenous: u32,
    /// Periods of the long cycles described by harmonics (0 = unused slot).
    #[serde(default)]
    pub cycle_periods: [u32; MAX_CYCLES],
    /// Number of harmonics of each cycle.
    #[serde(default)]
    pub cycle_harmonics: [u8; MAX_CYCLES],
}

impl ModelShape {
    /// The shape of `(p, d, q)×(P, D, Q)ₛ` with an optional mean or drift and no
    /// regressors (orders saturate at 255, periods at 65,535: blueprints never get there).
    pub(crate) fn of_orders(
        [p, d, q]: [usize; 3],
        [seasonal_p, seasonal_d, seasonal_q]: [usize; 3],
        period: usize,
        mean: bool,
        drift: bool,
    ) -> Self {
        let small = |v: usize| u8::try_from(v).unwrap_or(u8::MAX);
        ModelShape {
            p: small(p),
            d: small(d),
            q: small(q),
            seasonal_p: small(seasonal_p),
            seasonal_d: small(seasonal_d),
            seasonal_q: small(seasonal_q),
            period: u16::try_from(period).unwrap_or(u16::MAX),
            mean,
            drift,
            exogenous: 0,
            cycle_periods: [0; MAX_CYCLES],
            cycle_harmonics: [0; MAX_CYCLES],
        }
    }

    /// Record `cycles` (at most [`MAX_CYCLES`], as a blueprint has them).
    pub(crate) fn set_cycles(&mut self, cycles: &[Cycle]) {
        self.cycle_periods = [0; MAX_CYCLES];
        self.cycle_harmonics = [0; MAX_CYCLES];
        for (i, c) in cycles.iter().take(MAX_CYCLES).enumerate() {
            self.cycle_periods[i] = u32::try_from(c.period).unwrap_or(u32::MAX);
            self.cycle_harmonics[i] = u8::try_from(c.harmonics).unwrap_or(u8::MAX);
        }
    }
}

impl std::fmt::Display for ModelShape {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if self.period > 1 {
            const SUBSCRIPTS: [char; 10] = ['₀', '₁', '₂', '₃', '₄', '₅', '₆', '₇', '₈', '₉'];
            let period: String = self
                .period
                .to_string()
                .chars()
                .map(|c| c.to_digit(10).map_or(c, |d| SUBSCRIPTS[d as usize]))
                .collect();
            write!(
                f,
                "SARIMA({},{},{})×({},{},{}){period}",
                self.p, self.d, self.q, self.seasonal_p, self.seasonal_d, self.seasonal_q,
            )?;
        } else if self.d > 0 {
            write!(f, "ARIMA({},{},{})", self.p, self.d, self.q)?;
        } else {
            write!(f, "ARMA({},{})", self.p, self.q)?;
        }
        if self.mean {
            f.write_str(" + mean")?;
        }
        if self.drift {
            f.write_str(" + drift")?;
        }
        match self.exogenous {
            0 => {}
            1 => f.write_str(" + 1 regressor")?,
            k => write!(f, " + {k} regressors")?,
        }
        let mut first = true;
        for (p, k) in self.cycle_periods.iter().zip(&self.cycle_harmonics) {
            if *p == 0 {
                continue;
            }
            f.write_str(if first { " + harmonics " } else { ", " })?;
            write!(f, "{p}:{k}")?;
            first = false;
        }
        Ok(())
    }
}

/// An invalid-specification error for `field`.
fn spec_error(field: &'static str, message: String) -> Error {
    Error::new(ErrorKind::InvalidSpecification { field, message })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_and_labels() {
        let bp = Blueprint::builder().nonseasonal(2, 0, 1).build().unwrap();
        assert!(bp.has_mean() && !bp.has_drift());
        assert_eq!(bp.shape_label(), "ARMA(2,1) + mean");
        assert_eq!(bp.estimated_arma_coefficients(), 3);
        let bp = Blueprint::builder()
            .nonseasonal(0, 1, 1)
            .drift_term(true)
            .build()
            .unwrap();
        assert_eq!(bp.shape_label(), "ARIMA(0,1,1) + drift");
        assert_eq!(bp.terms(), vec![Term::Ma(1), Term::Drift]);
    }

    #[test]
    fn refusals_name_the_field() {
        let cases: Vec<(BlueprintBuilder, &str)> = vec![
            (Blueprint::builder().seasonal(0, 1, 1, 0).clone(), "period"),
            (
                Blueprint::builder()
                    .nonseasonal(0, 1, 0)
                    .mean_term(true)
                    .clone(),
                "mean",
            ),
            (
                Blueprint::builder()
                    .nonseasonal(0, 2, 0)
                    .drift_term(true)
                    .clone(),
                "drift",
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .hold(Term::Ar(1), f64::NAN)
                    .clone(),
                "hold",
            ),
            (
                Blueprint::builder()
                    .nonseasonal(1, 0, 0)
                    .hold(Term::Ar(1), 1.5)
                    .clone(),
                "hold",
            ),
            (Blueprint::builder().nonseasonal(99, 0, 0).clone(), "orders"),
            (Blueprint::builder().tolerance(0.0).clone(), "tolerance"),
            (
                Blueprint::builder().max_iterations(0).clone(),
                "max_iterations",
            ),
            (
                Blueprint::builder().nonseasonal(0, 4, 0).clone(),
                "differencing",
            ),
        ];
        for (b, field) in cases {
            let e = b.build().unwrap_err();
            match e.kind() {
                ErrorKind::InvalidSpecification { field: f, .. } => assert_eq!(*f, field, "{e}"),
                other => panic!("{other:?}"),
            }
        }
    }
}
