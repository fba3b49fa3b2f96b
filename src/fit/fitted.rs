//! Fitting a [`Blueprint`] to a series, and the [`FittedModel`] that explains itself.

use std::cell::RefCell;
use std::fmt;

use serde::{Deserialize, Serialize};

use crate::base::dist::normal_two_sided_p;
use crate::base::error::{Error, Result};
use crate::base::grid::{GriddedSeries, TimeAxis};
use crate::base::linalg;
use crate::estimate::{self, EvalWorkspace, Evaluation, Layout, ObjectiveKind, StageRecord};
use crate::filter::forecasting::{FilterState, ForecastModel};
use crate::model::blueprint::{Blueprint, Estimator};
use crate::model::coefficients::Term;
use crate::model::coefficients::{Factor, FactorCoefficients};
use crate::model::lag::{self, Complex};
use crate::stats::correlogram::{BandRule, Correlogram, CorrelogramWorkspace, LagValues};
use crate::stats::criteria::InformationCriteria;
use crate::stats::portmanteau::{LagPValue, PortmanteauScan};
use crate::stats::shape::{NormalityTest, VarianceChangeTest, jarque_bera, mcleod_li};

/// Modulus of an inverse root above which a fit carries a near-unit-root warning
/// (common practice: roots within about 2% of the unit circle).
pub const NEAR_UNIT_MODULUS: f64 = 0.98;

/// A reusable workspace for fitting: create one per worker thread and pass it to
/// [`Blueprint::fit_with`]; it grows to the largest shape and length seen and is then
/// reused without allocating per likelihood evaluation.
#[derive(Debug, Default, Clone)]
pub struct FitWorkspace {
    inner: EvalWorkspace,
}

impl FitWorkspace {
    /// An empty workspace; it sizes itself on first use.
    pub fn new() -> Self {
        Self::default()
    }
    /// Heap bytes the workspace holds now (what one worker keeps between fits; see
    /// [`LikelihoodSurface::workspace`] for a workspace sized in advance).
    pub fn heap_bytes(&self) -> usize {
        self.inner.heap_bytes()
    }
}

/// The kind of log-likelihood a fit reports.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub enum LogLikelihood {
    /// Exact Gaussian log-likelihood of the differenced series (Kalman filter).
    Exact(f64),
    /// Conditional log-likelihood of a conditional-sum-of-squares fit; partial, so not
    /// comparable across models and not used for information criteria.
    Conditional(f64),
}

impl LogLikelihood {
    /// The value, whatever its kind.
    pub fn value(&self) -> f64 {
        match *self {
            LogLikelihood::Exact(v) | LogLikelihood::Conditional(v) => v,
        }
    }
    /// Whether it is the exact likelihood.
    pub fn is_exact(&self) -> bool {
        matches!(self, LogLikelihood::Exact(_))
    }
}

/// One estimated or held coefficient.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct CoefficientEstimate {
    /// Which coefficient.
    pub term: Term,
    /// Its value.
    pub value: f64,
    /// Standard error from the inverse Hessian; `None` if held or unavailable.
    pub std_error: Option<f64>,
    /// Whether the value was held (not estimated).
    pub held: bool,
}

impl CoefficientEstimate {
    /// The Wald statistic `value / std_error` for the hypothesis that the coefficient is
    /// zero (`None` without a standard error).
    pub fn z_statistic(&self) -> Option<f64> {
        self.std_error
            .filter(|se| *se > 0.0)
            .map(|se| self.value / se)
    }
    /// The two-sided p-value of [`CoefficientEstimate::z_statistic`] under the
    /// asymptotic normal distribution of the estimate, `2·(1 − Φ(|z|))`. Trust it only
    /// once the residual check says the residuals are white.
    pub fn p_value(&self) -> Option<f64> {
        self.z_statistic().map(normal_two_sided_p)
    }
}

/// How the readings were used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ReadingCounts {
    /// Length of the series passed to `fit`.
    pub total: usize,
    /// Missing (NaN) readings in it.
    pub missing: usize,
    /// Readings consumed by differencing (`d + D·s`).
    pub lost_to_differencing: usize,
    /// Differenced readings conditioned on (CSS only: `p + P·s`).
    pub conditioned_on: usize,
    /// Readings entering the (log-)likelihood.
    pub in_likelihood: usize,
}

/// Inverse roots of one polynomial factor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct FactorRoots {
    /// The factor (`Term::Ar(0)` = non-seasonal AR, `Term::SeasonalMa(0)` = seasonal MA, …).
    pub factor: Term,
    /// Inverse roots of the factor in its own variable (`B` or `B^s`), largest first.
    pub inverse_roots: Vec<Complex>,
}

impl FactorRoots {
    /// Largest modulus (0 for an empty factor).
    pub fn largest_modulus(&self) -> f64 {
        self.inverse_roots.first().map_or(0.0, |z| z.modulus())
    }
}

/// Something the caller should know about a fit that is not an error.
#[non_exhaustive]
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum FitWarning {
    /// An inverse root lies close to the unit circle: near non-stationarity (AR) or
    /// near non-invertibility (MA); consider differencing or a simpler model.
    NearUnitRoot {
        /// The factor.
        factor: Term,
        /// Modulus of its largest inverse root.
        modulus: f64,
    },
    /// An optimisation stage stopped without meeting its convergence criterion.
    NotConverged {
        /// Why it stopped.
        reason: estimate::StopReason,
    },
    /// The Hessian was not positive definite: standard errors are unavailable.
    NoStandardErrors,
}

impl fmt::Display for FitWarning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FitWarning::NearUnitRoot { factor, modulus } => write!(
                f,
                "{} factor has an inverse root of modulus {modulus:.4}, near the unit circle",
                factor_label(*factor)
            ),
            FitWarning::NotConverged { reason } => {
                write!(f, "optimiser did not converge ({reason})")
            }
            FitWarning::NoStandardErrors => {
                f.write_str("Hessian not positive definite: no standard errors")
            }
        }
    }
}

/// The factor name of an ARMA term (`"regression"` for the others).
fn factor_label(t: Term) -> &'static str {
    Factor::of(t).map_or("regression", |(f, _)| f.label())
}

/// A fitted model: estimates, uncertainty, likelihood, residuals and diagnostics.
///
/// Serialisable with serde; deserialising validates the content (see
/// [`model_to_json`](crate::model_to_json) for the versioned file format).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "FittedRecord")]
pub struct FittedModel {
    pub(crate) blueprint: Blueprint,
    pub(crate) coefficients: Vec<CoefficientEstimate>,
    pub(crate) covariance_terms: Vec<Term>,
    pub(crate) covariance: Option<Vec<f64>>,
    pub(crate) innovation_variance: f64,
    pub(crate) log_likelihood: LogLikelihood,
    pub(crate) counts: ReadingCounts,
    pub(crate) stages: Vec<StageRecord>,
    #[serde(with = "crate::base::nan_as_null")]
    pub(crate) residuals: Vec<f64>,
    #[serde(with = "crate::base::nan_as_null")]
    pub(crate) standardized: Vec<f64>,
    pub(crate) roots: Vec<FactorRoots>,
    pub(crate) warnings: Vec<FitWarning>,
    pub(crate) data_fingerprint: u64,
    pub(crate) forecaster: ForecastModel,
    pub(crate) terminal: FilterState,
    pub(crate) time_axis: Option<TimeAxis>,
}

/// The stored form of a fitted model; restoring checks it (see `TryFrom`).
#[derive(Deserialize)]
struct FittedRecord {
    blueprint: Blueprint,
    coefficients: Vec<CoefficientEstimate>,
    covariance_terms: Vec<Term>,
    covariance: Option<Vec<f64>>,
    innovation_variance: f64,
    log_likelihood: LogLikelihood,
    counts: ReadingCounts,
    stages: Vec<StageRecord>,
    #[serde(with = "crate::base::nan_as_null")]
    residuals: Vec<f64>,
    #[serde(with = "crate::base::nan_as_null")]
    standardized: Vec<f64>,
    roots: Vec<FactorRoots>,
    warnings: Vec<FitWarning>,
    data_fingerprint: u64,
    forecaster: ForecastModel,
    terminal: FilterState,
    /// Absent in files written before time axes existed.
    #[serde(default)]
    time_axis: Option<TimeAxis>,
}

impl TryFrom<FittedRecord> for FittedModel {
    type Error = String;
    fn try_from(r: FittedRecord) -> std::result::Result<Self, String> {
        let terms = r.blueprint.terms();
        let got: Vec<Term> = r.coefficients.iter().map(|c| c.term).collect();
        if got != terms {
            return Err(format!(
                "coefficients {:?} do not match the blueprint's terms {:?}",
                got.iter().map(|t| t.to_string()).collect::<Vec<_>>(),
                terms.iter().map(|t| t.to_string()).collect::<Vec<_>>()
            ));
        }
        if let Some(c) = r.coefficients.iter().find(|c| !c.value.is_finite()) {
            return Err(format!("coefficient {} is not finite", c.term));
        }
        if !(r.innovation_variance > 0.0 && r.innovation_variance.is_finite()) {
            return Err(format!(
                "innovation variance {} is not positive",
                r.innovation_variance
            ));
        }
        let k = r.covariance_terms.len();
        if let Some(cov) = &r.covariance
            && cov.len() != k * k
        {
            return Err(format!(
                "covariance has {} entries, {} terms need {}",
                cov.len(),
                k,
                k * k
            ));
        }
        let kept = r.residuals.len() == r.counts.total && r.standardized.len() == r.counts.total;
        let left_out = r.residuals.is_empty() && r.standardized.is_empty();
        if !(kept || left_out) {
            return Err(format!(
                "residuals have {} and {} entries, the reading count is {} (or none when not stored)",
                r.residuals.len(),
                r.standardized.len(),
                r.counts.total
            ));
        }
        let model = FittedModel {
            blueprint: r.blueprint,
            coefficients: r.coefficients,
            covariance_terms: r.covariance_terms,
            covariance: r.covariance,
            innovation_variance: r.innovation_variance,
            log_likelihood: r.log_likelihood,
            counts: r.counts,
            stages: r.stages,
            residuals: r.residuals,
            standardized: r.standardized,
            roots: r.roots,
            warnings: r.warnings,
            data_fingerprint: r.data_fingerprint,
            forecaster: r.forecaster,
            terminal: r.terminal,
            time_axis: r.time_axis,
        };
        // The coefficients must be admissible and the stored forecaster must be the one
        // they imply (same expanded polynomials, σ² and regression).
        let coefs = model.factor_coefficients();
        for factor in Factor::ALL {
            if !factor.is_admissible(coefs.of(factor)) {
                return Err(format!(
                    "the {} coefficients are not {}",
                    factor.label(),
                    factor.admissible_word()
                ));
            }
        }
        let regression: Vec<(Term, f64)> = model
            .coefficients
            .iter()
            .filter(|c| !c.term.is_arma())
            .map(|c| (c.term, c.value))
            .collect();
        let expected = ForecastModel::new(
            &model.blueprint,
            &coefs,
            model.innovation_variance,
            regression,
        );
        if expected != model.forecaster {
            return Err("the stored forecasting state does not match the coefficients".into());
        }
        model.terminal.validate_for(&model.forecaster)?;
        Ok(model)
    }
}

impl Blueprint {
    /// Fit this model to `series` (NaN = missing reading).
    ///
    /// ```
    /// use lagwise::{Blueprint, Simulator, Term};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let x = Simulator::builder().autoregressive(&[0.6]).moving_average(&[0.3])
    ///     .level(88.0).build()?.generate(2000, 7);
    /// let fit = Blueprint::builder().nonseasonal(1, 0, 1).build()?.fit(&x)?;
    /// let phi = fit.coefficient(Term::Ar(1)).unwrap();
    /// assert!((phi.value - 0.6).abs() < 4.0 * phi.std_error.unwrap());
    /// assert!(fit.criteria().is_ok()); // exact likelihood: criteria offered
    /// # Ok(()) }
    /// ```
    pub fn fit(&self, series: &[f64]) -> Result<FittedModel> {
        self.fit_with(series, &mut FitWorkspace::new())
    }

    /// Fit this model to readings placed on a grid
    /// ([`place_on_grid`](crate::place_on_grid)); the model keeps the grid's time axis, so
    /// its forecast steps and monitor checks carry timestamps.
    ///
    /// ```
    /// use lagwise::{Blueprint, GridSettings, Simulator, place_on_grid};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let q = 15 * 60_000;
    /// let t0 = 1_767_225_600_000; // 2026-01-01T00:00Z
    /// let x = Simulator::builder().autoregressive(&[0.7]).level(52.0).build()?.generate(400, 9);
    /// let times: Vec<i64> = (0..400).map(|k| t0 + k * q + 1_500).collect(); // 1.5 s late
    /// let grid = place_on_grid(&times, &x, &GridSettings::builder(q).build()?)?;
    /// let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit_gridded(&grid)?;
    /// let next = &fit.forecast(1, &[0.95])?.steps[0];
    /// assert_eq!(next.time_ms, Some(t0 + 400 * q));
    /// # Ok(()) }
    /// ```
    pub fn fit_gridded(&self, series: &GriddedSeries) -> Result<FittedModel> {
        Ok(self.fit(&series.values)?.with_time_axis(series.axis))
    }

    /// [`Blueprint::fit`] on a caller-held workspace (no allocation per likelihood
    /// evaluation once the workspace has grown).
    pub fn fit_with(&self, series: &[f64], workspace: &mut FitWorkspace) -> Result<FittedModel> {
        self.fit_regression_with(series, &[], workspace)
    }

    /// Fit a regression with ARMA errors: `regressors` holds one column per exogenous
    /// term declared with [`BlueprintBuilder::exogenous`](crate::BlueprintBuilder::exogenous),
    /// each as long as `series` and finite.
    ///
    /// ```
    /// use lagwise::{Blueprint, Simulator, Term};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// // Return temperature driven by outdoor temperature, with AR(1) errors.
    /// let outdoor: Vec<f64> = (0..600).map(|t| 5.0 + 4.0 * (t as f64 / 40.0).sin()).collect();
    /// let noise = Simulator::builder().autoregressive(&[0.6]).innovation_sd(0.3).build()?.generate(600, 4);
    /// let ret: Vec<f64> = outdoor.iter().zip(&noise).map(|(o, e)| 50.0 - 0.8 * o + e).collect();
    /// let fit = Blueprint::builder().nonseasonal(1, 0, 0).exogenous(1).build()?
    ///     .fit_regression(&ret, &[&outdoor])?;
    /// let b = fit.coefficient(Term::Exogenous(1)).unwrap();
    /// assert!((b.value + 0.8).abs() < 4.0 * b.std_error.unwrap());
    /// # Ok(()) }
    /// ```
    pub fn fit_regression(&self, series: &[f64], regressors: &[&[f64]]) -> Result<FittedModel> {
        self.fit_regression_with(series, regressors, &mut FitWorkspace::new())
    }

    /// [`Blueprint::fit_regression`] on a caller-held workspace.
    pub fn fit_regression_with(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
        workspace: &mut FitWorkspace,
    ) -> Result<FittedModel> {
        self.fit_unfinished(series, regressors, workspace)?
            .finish(series, regressors, workspace)
    }

    /// The fit without the two parts only a kept model needs (a search fits many
    /// candidates and keeps one): the Hessian of the standard errors and the forecasting
    /// state. [`UnfinishedFit::finish`] adds them, bit for bit as [`Blueprint::fit_with`].
    pub(crate) fn fit_unfinished(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
        workspace: &mut FitWorkspace,
    ) -> Result<UnfinishedFit> {
        let prep = estimate::prepare(self, series, regressors)?;
        self.fit_prepared(series, prep, workspace)
    }

    /// [`Blueprint::fit_unfinished`] on data prepared already (for this blueprint, or
    /// reused from another with the same differencing and regression terms).
    pub(crate) fn fit_prepared(
        &self,
        series: &[f64],
        prep: estimate::Prepared,
        workspace: &mut FitWorkspace,
    ) -> Result<UnfinishedFit> {
        self.fit_prepared_from(series, prep, None, workspace)
    }

    /// [`Blueprint::fit_prepared`] from given starting coefficients (for instance a
    /// nested model's estimates padded with zeros) instead of the Hannan–Rissanen ones.
    pub(crate) fn fit_prepared_from(
        &self,
        series: &[f64],
        prep: estimate::Prepared,
        start: Option<&FactorCoefficients>,
        workspace: &mut FitWorkspace,
    ) -> Result<UnfinishedFit> {
        let layout = Layout::new(self);
        let cell = RefCell::new(std::mem::take(&mut workspace.inner));
        let result =
            optimise(self, &prep, &layout, &cell, start).and_then(|(coefs, kind, stages)| {
                let mut fin = final_evaluation(self, &prep, &mut cell.borrow_mut(), &coefs, kind)?;
                let beta_cov = fin.beta_cov.take();
                let model = assemble(self, series, &prep, &coefs, kind, stages, fin)?;
                Ok(UnfinishedFit {
                    model,
                    prep,
                    layout,
                    coefs,
                    kind,
                    beta_cov,
                })
            });
        workspace.inner = cell.into_inner();
        result
    }
}

/// A fitted model before its covariance and forecasting state (see
/// [`Blueprint::fit_unfinished`]); it keeps the prepared data so that finishing does not
/// prepare the series again.
#[derive(Debug)]
pub(crate) struct UnfinishedFit {
    model: FittedModel,
    prep: estimate::Prepared,
    layout: Layout,
    coefs: FactorCoefficients,
    kind: ObjectiveKind,
    beta_cov: Option<Vec<f64>>,
}

impl UnfinishedFit {
    /// The model so far: estimates, likelihood, criteria, residuals and their check; no
    /// standard errors, and no forecasting state.
    pub(crate) fn model(&self) -> &FittedModel {
        &self.model
    }

    /// The model so far, taken (see [`UnfinishedFit::model`]).
    pub(crate) fn into_model(self) -> FittedModel {
        self.model
    }

    /// The natural coefficients of the fit's four factors.
    pub(crate) fn coefficients(&self) -> &FactorCoefficients {
        &self.coefs
    }

    /// The exact Gaussian log-likelihood (regression terms profiled by GLS) at the fit's
    /// estimates, in the caller's units, with the number of readings in it: for a CSS
    /// fit, one exact evaluation tells how good its estimates are without an exact
    /// optimisation. `None` where the evaluation fails.
    pub(crate) fn exact_log_likelihood_at_estimates(
        &self,
        workspace: &mut FitWorkspace,
    ) -> Option<(f64, usize)> {
        let mut ev = estimate::Evaluation::default();
        workspace
            .inner
            .evaluate(
                &self.prep,
                &self.model.blueprint,
                &self.coefs,
                ObjectiveKind::Exact,
                None,
                &mut ev,
            )
            .ok()?;
        let nll = ev.neg_log_likelihood + ev.used as f64 * self.prep.data_scale.ln();
        nll.is_finite().then_some((-nll, ev.used))
    }

    /// The prepared data of the fit (to reuse for a blueprint with the same
    /// differencing and regression terms).
    pub(crate) fn prepared(&self) -> &estimate::Prepared {
        &self.prep
    }

    /// Add the covariance (Hessian of −log L; standard errors into the coefficients) and
    /// the forecasting state at the end of `series`, the one the fit was made on.
    pub(crate) fn finish(
        self,
        series: &[f64],
        regressors: &[&[f64]],
        workspace: &mut FitWorkspace,
    ) -> Result<FittedModel> {
        let UnfinishedFit {
            mut model,
            prep,
            layout,
            coefs,
            kind,
            beta_cov,
        } = self;
        let hess = estimate::hessian(
            &prep,
            &model.blueprint,
            &layout,
            kind,
            &mut workspace.inner,
            &coefs,
        );
        attach_covariance(&mut model, &layout, &prep, hess, beta_cov);
        model.terminal =
            crate::filter::forecasting::terminal_state(&model.forecaster, series, regressors)?;
        Ok(model)
    }
}

/// Covariance from the Hessian of −log L over free ARMA terms and the GLS covariance of
/// the profiled regression terms (asymptotically independent blocks); standard errors
/// into the coefficients, and a warning when unavailable.
fn attach_covariance(
    model: &mut FittedModel,
    layout: &Layout,
    prep: &estimate::Prepared,
    hess: Option<Vec<f64>>,
    beta_cov: Option<Vec<f64>>,
) {
    let arma_terms = layout.free_terms();
    let na = arma_terms.len();
    let arma_cov = if na == 0 {
        Some(Vec::new())
    } else {
        hess.and_then(|h| linalg::invert_spd(&h, na))
    };
    let mut covariance_terms = arma_terms;
    covariance_terms.extend(prep.profiled.iter().copied());
    let kk = covariance_terms.len();
    let nb = kk - na;
    let covariance = match (arma_cov, nb) {
        (Some(a), 0) => Some(a),
        (Some(a), _) => beta_cov.map(|b| {
            let mut full = vec![0.0; kk * kk];
            for i in 0..na {
                full[i * kk..i * kk + na].copy_from_slice(&a[i * na..(i + 1) * na]);
            }
            for i in 0..nb {
                full[(na + i) * kk + na..(na + i) * kk + kk]
                    .copy_from_slice(&b[i * nb..(i + 1) * nb]);
            }
            full
        }),
        (None, _) => None,
    };
    if covariance.is_none() && kk > 0 {
        model.warnings.insert(0, FitWarning::NoStandardErrors);
    }
    let se_of = |term: Term| -> Option<f64> {
        let i = covariance_terms.iter().position(|t| *t == term)?;
        let v = covariance.as_ref()?[i * kk + i];
        (v > 0.0).then(|| v.sqrt())
    };
    for c in model.coefficients.iter_mut() {
        c.std_error = if c.held { None } else { se_of(c.term) };
    }
    model.covariance_terms = covariance_terms;
    model.covariance = covariance;
}

/// Stage 1 of a fit: minimise the blueprint's objective (CSS, exact, or CSS then exact)
/// from the Hannan–Rissanen starting values; the natural coefficients at the optimum.
fn optimise(
    bp: &Blueprint,
    prep: &estimate::Prepared,
    layout: &Layout,
    cell: &RefCell<EvalWorkspace>,
    given_start: Option<&FactorCoefficients>,
) -> Result<(FactorCoefficients, ObjectiveKind, Vec<StageRecord>)> {
    let start = match given_start {
        Some(s) => s.clone(),
        None => estimate::starting_values(prep, bp),
    };
    let x0 = estimate::coordinates(layout, &start).unwrap_or_else(|| vec![0.0; layout.free_len]);
    let mut stages = Vec::new();
    // A given start (a nested model's optimum) is already what the CSS stage of the staged
    // estimator is for: the exact stage starts from it directly.
    let estimator = match (bp.estimator, given_start) {
        (Estimator::StagedLikelihood, Some(_)) => Estimator::ExactLikelihood,
        (e, _) => e,
    };
    let (x, kind) = match estimator {
        Estimator::ConditionalSumOfSquares => {
            let kind = ObjectiveKind::Conditional;
            let (x, rec, _) = estimate::minimise(prep, bp, layout, kind, cell, x0, None)?;
            stages.push(rec);
            (x, kind)
        }
        Estimator::ExactLikelihood => {
            let kind = ObjectiveKind::Exact;
            let (x, rec, _) = estimate::minimise(prep, bp, layout, kind, cell, x0, None)?;
            stages.push(rec);
            (x, kind)
        }
        Estimator::StagedLikelihood => {
            let css = ObjectiveKind::Conditional;
            let (x1, rec1, inv_h) =
                estimate::minimise(prep, bp, layout, css, cell, x0.clone(), None)?;
            stages.push(rec1);
            // The CSS curvature is a good first guess of the exact one: hand the
            // quasi-Newton inverse Hessian over. If the CSS solution is not usable for
            // the exact objective, restart from the Hannan–Rissanen values.
            let kind = ObjectiveKind::Exact;
            let (x, rec, _) = match estimate::minimise(prep, bp, layout, kind, cell, x1, inv_h) {
                Ok(v) => v,
                Err(_) => estimate::minimise(prep, bp, layout, kind, cell, x0, None)?,
            };
            stages.push(rec);
            (x, kind)
        }
    };
    let coefs = estimate::natural(layout, &x, &mut cell.borrow_mut()).ok_or_else(|| {
        Error::numerical("fit", "the optimiser ended outside the admissible region")
    })?;
    Ok((coefs, kind, stages))
}

/// What the final evaluation at the optimum gives, in the caller's units.
struct FinalEvaluation {
    beta: Vec<f64>,
    beta_cov: Option<Vec<f64>>,
    innovation_variance: f64,
    neg_log_likelihood: f64,
    used: usize,
    conditioned_on: usize,
    residuals: Vec<f64>,
    standardized: Vec<f64>,
}

/// Stage 2: evaluate the objective at the optimum once more, solve the regression by QR,
/// and read σ², log L and the residuals on the original time axis.
fn final_evaluation(
    bp: &Blueprint,
    prep: &estimate::Prepared,
    ws: &mut EvalWorkspace,
    coefs: &FactorCoefficients,
    kind: ObjectiveKind,
) -> Result<FinalEvaluation> {
    let mut ev = Evaluation::default();
    ws.evaluate(prep, bp, coefs, kind, None, &mut ev)?;
    let n = prep.n;
    let k = prep.ncols;
    let cond = match kind {
        ObjectiveKind::Conditional => bp.expanded_degrees().0.min(n),
        ObjectiveKind::Exact => 0,
    };
    // Regression coefficients: the final GLS solve by Householder QR on the filtered
    // columns (weighted by 1/√F), which stays accurate on ill-conditioned designs where
    // the normal equations used inside the optimiser lose digits. Their covariance is
    // σ²(X̃ᵀΩ⁻¹X̃)⁻¹; the ARMA block comes from the Hessian of the profile likelihood
    // (the two blocks are asymptotically independent).
    let mut beta = ev.beta.clone();
    let mut beta_cov: Option<Vec<f64>> = None;
    if k > 1 {
        let (innov, fvar) = ws.innovations(kind);
        let rows = || (cond..n).filter(|&t| !prep.data[t].is_nan());
        let wgt = |t: usize| fvar.map_or(1.0, |f| 1.0 / f[t].sqrt());
        let weighted = |c: usize| {
            rows()
                .map(|t| innov[c * n + t] * wgt(t))
                .collect::<Vec<_>>()
        };
        let (cols, y): (Vec<Vec<f64>>, Vec<f64>) = ((1..k).map(weighted).collect(), weighted(0));
        let used = y.len();
        if let Some((delta, factor)) = linalg::least_squares_owned(cols, y) {
            // The factorisation overwrote its inputs: the residuals are read again.
            let resid_ss: f64 = rows()
                .map(|t| {
                    let w = wgt(t);
                    let fit: f64 = (0..k - 1)
                        .map(|c| delta[c] * (innov[(c + 1) * n + t] * w))
                        .sum();
                    (innov[t] * w - fit).powi(2)
                })
                .sum();
            let s2 = resid_ss / used.max(1) as f64;
            for (b, (d, o)) in beta.iter_mut().zip(delta.iter().zip(&prep.beta_offset)) {
                *b = o + d;
            }
            ev.innovation_variance = s2;
            beta_cov = Some(factor.iter().map(|v| v * s2).collect());
        }
    }
    // Back to the caller's units: regression coefficients and their covariance, σ², and
    // the log-likelihood (x = scale·x̃ shifts log L by −m·ln scale).
    let scale = prep.data_scale;
    for b in beta.iter_mut() {
        *b *= scale;
    }
    if let Some(cov) = beta_cov.as_mut() {
        cov.iter_mut().for_each(|v| *v *= scale * scale);
    }
    ev.innovation_variance *= scale * scale;
    ev.neg_log_likelihood += ev.used as f64 * scale.ln();
    let representable = ev.innovation_variance > 0.0
        && ev.innovation_variance.is_finite()
        && ev.neg_log_likelihood.is_finite();
    if !representable {
        return Err(Error::numerical(
            "fit",
            format!(
                "the innovation variance is not representable in f64 at this scale (readings of order {scale:e}); rescale the readings"
            ),
        ));
    }
    let loss = bp.differencing_loss();
    // Residuals on the original time axis.
    let mut residuals = vec![f64::NAN; prep.original_len];
    let mut standardized = vec![f64::NAN; prep.original_len];
    let sd = ev.innovation_variance.sqrt();
    let (innov, fvar) = ws.innovations(kind);
    for t in cond..n {
        if prep.data[t].is_nan() {
            continue;
        }
        let mut v = innov[t];
        for c in 1..k {
            v -= (beta[c - 1] / scale - prep.beta_offset[c - 1]) * innov[c * n + t];
        }
        let f = fvar.map_or(1.0, |fv| fv[t]);
        residuals[t + loss] = v * scale;
        standardized[t + loss] = v * scale / (sd * f.sqrt());
    }
    Ok(FinalEvaluation {
        beta,
        beta_cov,
        innovation_variance: ev.innovation_variance,
        neg_log_likelihood: ev.neg_log_likelihood,
        used: ev.used,
        conditioned_on: cond,
        residuals,
        standardized,
    })
}

/// Stage 3: the model from the estimates: coefficients in the blueprint's order, inverse
/// roots with their warnings, non-convergence warnings and the forecasting model (its
/// state and the covariance come with [`UnfinishedFit::finish`]).
fn assemble(
    bp: &Blueprint,
    series: &[f64],
    prep: &estimate::Prepared,
    coefs: &FactorCoefficients,
    kind: ObjectiveKind,
    stages: Vec<StageRecord>,
    fin: FinalEvaluation,
) -> Result<FittedModel> {
    let beta = &fin.beta;
    let mut warnings = Vec::new();
    let mut coefficients = Vec::new();
    for term in bp.terms() {
        let held = bp.held_value(term);
        let value = match term {
            Term::Ar(_) | Term::Ma(_) | Term::SeasonalAr(_) | Term::SeasonalMa(_) => {
                coefs.value(term).unwrap_or(f64::NAN)
            }
            Term::Mean
            | Term::Drift
            | Term::Exogenous(_)
            | Term::CycleCos { .. }
            | Term::CycleSin { .. } => match held {
                Some(v) => v,
                None => prep
                    .profiled
                    .iter()
                    .position(|t| *t == term)
                    .map_or(f64::NAN, |i| beta[i]),
            },
        };
        coefficients.push(CoefficientEstimate {
            term,
            value,
            std_error: None,
            held: held.is_some(),
        });
    }
    // Roots per factor.
    let mut roots = Vec::new();
    for factor in Factor::ALL {
        let c = coefs.of(factor);
        if c.is_empty() {
            continue;
        }
        // inverse_roots reads `1 + Σc_iB^i`: AR factors enter with their signs flipped.
        let sign = -factor.step_down_sign();
        let poly: Vec<f64> = c.iter().map(|v| sign * v).collect();
        let inverse_roots = lag::inverse_roots(&poly)?;
        let fr = FactorRoots {
            factor: factor.term(0),
            inverse_roots,
        };
        let m = fr.largest_modulus();
        if m > NEAR_UNIT_MODULUS {
            warnings.push(FitWarning::NearUnitRoot {
                factor: factor.term(0),
                modulus: m,
            });
        }
        roots.push(fr);
    }
    for st in &stages {
        if !st.converged() {
            warnings.push(FitWarning::NotConverged { reason: st.reason });
        }
    }
    let regression: Vec<(Term, f64)> = coefficients
        .iter()
        .filter(|c| !c.term.is_arma())
        .map(|c| (c.term, c.value))
        .collect();
    let forecaster = ForecastModel::new(bp, coefs, fin.innovation_variance, regression);
    let log_likelihood = match kind {
        ObjectiveKind::Exact => LogLikelihood::Exact(-fin.neg_log_likelihood),
        ObjectiveKind::Conditional => LogLikelihood::Conditional(-fin.neg_log_likelihood),
    };
    let loss = bp.differencing_loss();
    Ok(FittedModel {
        blueprint: bp.clone(),
        coefficients,
        covariance_terms: Vec::new(),
        covariance: None,
        innovation_variance: fin.innovation_variance,
        log_likelihood,
        counts: ReadingCounts {
            total: prep.original_len,
            missing: prep.missing_original,
            lost_to_differencing: loss.min(prep.original_len),
            conditioned_on: fin.conditioned_on,
            in_likelihood: fin.used,
        },
        stages,
        residuals: fin.residuals,
        standardized: fin.standardized,
        roots,
        warnings,
        data_fingerprint: fingerprint(series),
        forecaster,
        terminal: FilterState::pending(),
        time_axis: None,
    })
}

/// FNV-1a over the bit patterns of the readings (NaN canonicalised).
pub(crate) fn fingerprint(series: &[f64]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for v in series {
        let bits = if v.is_nan() {
            f64::NAN.to_bits()
        } else {
            v.to_bits()
        };
        for b in bits.to_le_bytes() {
            h ^= b as u64;
            h = h.wrapping_mul(0x0100_0000_01b3);
        }
    }
    h ^ (series.len() as u64)
}

/// The residual check bundle: correlogram of the residuals with bands, and Ljung–Box /
/// Box–Pierce scans with degrees of freedom reduced by the estimated ARMA coefficients.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct ResidualCheck {
    /// Correlogram (ACF and PACF) of the standardized residuals.
    pub correlogram: Correlogram,
    /// White-noise band half-width per lag at level `1 − alpha`, keyed by lag (from 1).
    pub band: LagValues,
    /// Portmanteau statistics for lags 1..=H.
    pub portmanteau: PortmanteauScan,
    /// Significance level used for `white`.
    pub alpha: f64,
    /// The verdict: whether the Ljung–Box test at the last scanned lag `H` does not reject
    /// at `alpha`. (One test at a stated lag keeps the false-alarm rate at `alpha`; the
    /// per-lag p-values of the scan are for inspection — requiring every one of them to
    /// pass would reject about three times as many adequate models at H = 10.)
    pub white: bool,
    /// Jarque–Bera test of the standardized residuals' normality (`None` when there are
    /// too few of them). Intervals assume Gaussian innovations.
    pub normality: Option<NormalityTest>,
    /// McLeod–Li test for changing variance over the same lags (`None` when there are
    /// too few residuals).
    pub variance_change: Option<VarianceChangeTest>,
}

/// The covariance of every estimated parameter, σ² included, from the full Hessian of
/// the exact log-likelihood (see [`FittedModel::full_covariance`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParameterCovariance {
    terms: Vec<Term>,
    matrix: Vec<f64>,
}

impl ParameterCovariance {
    /// The estimated coefficients indexing the matrix, in order; σ² follows them.
    pub fn terms(&self) -> &[Term] {
        &self.terms
    }
    /// The covariance matrix, row-major, of dimension `terms().len() + 1`: the
    /// coefficients of [`ParameterCovariance::terms`], then σ².
    pub fn matrix(&self) -> &[f64] {
        &self.matrix
    }
    /// The covariance of two estimated coefficients (`None` if either is not estimated).
    pub fn covariance(&self, a: Term, b: Term) -> Option<f64> {
        let k = self.terms.len() + 1;
        let i = self.terms.iter().position(|t| *t == a)?;
        let j = self.terms.iter().position(|t| *t == b)?;
        Some(self.matrix[i * k + j])
    }
    /// The standard error of an estimated coefficient.
    pub fn std_error(&self, term: Term) -> Option<f64> {
        self.covariance(term, term).map(f64::sqrt)
    }
    /// The standard error of the innovation variance σ².
    pub fn innovation_variance_std_error(&self) -> f64 {
        let k = self.terms.len() + 1;
        self.matrix[k * k - 1].sqrt()
    }
}

impl ResidualCheck {
    /// Residual health beyond whiteness in one line: the Jarque–Bera test (skewness,
    /// excess kurtosis) and the McLeod–Li test, each p-value against `alpha`.
    pub fn health_line(&self) -> String {
        let judge = |p: f64| if p >= self.alpha { "≥" } else { "<" };
        let shape = match self.normality {
            Some(n) => format!(
                "Jarque–Bera JB = {:.2} (skewness {:+.2}, excess kurtosis {:+.2}), p = {:.4} {} α → {}",
                n.statistic,
                n.skewness,
                n.excess_kurtosis,
                n.p_value,
                judge(n.p_value),
                if n.p_value >= self.alpha {
                    "normal"
                } else {
                    "NOT normal"
                }
            ),
            None => "Jarque–Bera: too few residuals".into(),
        };
        let variance = match self.variance_change {
            Some(v) => format!(
                "McLeod–Li Q² = {:.2} on {} df, p = {:.4} {} α → {}",
                v.statistic,
                v.lags,
                v.p_value,
                judge(v.p_value),
                if v.p_value >= self.alpha {
                    "steady variance"
                } else {
                    "variance CHANGES"
                }
            ),
            None => "McLeod–Li: too few residuals".into(),
        };
        format!("residual shape: {shape}; {variance}")
    }

    /// The check in one line a reader can verify: the Ljung–Box statistic at the check
    /// lag `H`, its degrees of freedom and p-value against `alpha`, the verdict that
    /// follows, and, for inspection only, the smallest p-value over lags `1..=H`. The
    /// rule: **white when the p-value at lag `H` is at least `alpha`** (see
    /// [`ResidualCheck::white`]).
    pub fn verdict_line(&self) -> String {
        let h = self.portmanteau.rows().len();
        let at_h = self.portmanteau.row(h);
        let head = match at_h.and_then(|r| r.ljung_box_p_value.map(|p| (r, p))) {
            Some((r, p)) => format!(
                "residuals: Ljung–Box at lag H = {h}: Q = {:.2} on {} df, p = {p:.4} {} α = {} → {}",
                r.ljung_box,
                r.degrees_of_freedom.unwrap_or(0),
                if p >= self.alpha { "≥" } else { "<" },
                self.alpha,
                if self.white { "white" } else { "NOT white" }
            ),
            None => format!(
                "residuals: no degrees of freedom left at lag H = {h} → no verdict (treated as white)"
            ),
        };
        match self.portmanteau.smallest_ljung_box_p_value() {
            Some(LagPValue {
                lag, p_value: p, ..
            }) => {
                format!("{head} (smallest p over lags 1..{h}: {p:.4} at lag {lag}, for inspection)")
            }
            None => head,
        }
    }
}

impl FittedModel {
    /// The blueprint that was fitted.
    pub fn blueprint(&self) -> &Blueprint {
        &self.blueprint
    }
    /// Every coefficient (estimated and held), canonical order.
    pub fn coefficients(&self) -> &[CoefficientEstimate] {
        &self.coefficients
    }
    /// One coefficient by term.
    pub fn coefficient(&self, term: Term) -> Option<&CoefficientEstimate> {
        self.coefficients.iter().find(|c| c.term == term)
    }
    /// Covariance matrix (row-major) of the estimated coefficients, in the order of
    /// [`FittedModel::covariance_terms`]; `None` if the Hessian was not positive definite.
    /// Block-diagonal: the ARMA block from the Hessian of the profile likelihood, the
    /// mean/drift/regression block from the GLS fit (asymptotically independent); the
    /// standard errors in [`FittedModel::coefficients`] come from it. For σ² and the
    /// cross terms see [`FittedModel::full_covariance`].
    pub fn covariance(&self) -> Option<&[f64]> {
        self.covariance.as_deref()
    }
    /// Terms indexing [`FittedModel::covariance`].
    pub fn covariance_terms(&self) -> &[Term] {
        &self.covariance_terms
    }
    /// The covariance of every estimated parameter — ARMA coefficients, mean, drift and
    /// regression coefficients, and σ² — from the inverse Hessian of the full exact
    /// log-likelihood at the estimates, cross terms included. `series` (and `regressors`)
    /// must be the readings the model was fitted to.
    ///
    /// [`FittedModel::covariance`] (and the standard errors in
    /// [`FittedModel::coefficients`]) is block-diagonal instead: the ARMA block from the
    /// Hessian of the profile likelihood, the regression block from the GLS fit, taken
    /// as asymptotically independent. The two agree to first order; on short series the
    /// regression standard errors differ by a fraction of a percent (0.35% seen at
    /// n = 100). This one costs about `2k²` likelihood evaluations for `k` parameters.
    ///
    /// Errors: a conditional (CSS) fit, which has no full likelihood; other readings than
    /// the fitted ones; a Hessian that is not positive definite.
    pub fn full_covariance(
        &self,
        series: &[f64],
        regressors: &[&[f64]],
    ) -> Result<ParameterCovariance> {
        const WHAT: &str = "full covariance";
        if !self.log_likelihood.is_exact() {
            return Err(Error::invalid(
                WHAT,
                "a conditional (CSS) fit has no full likelihood to differentiate",
            ));
        }
        if fingerprint(series) != self.data_fingerprint {
            return Err(Error::invalid(
                WHAT,
                "these are not the readings the model was fitted to",
            ));
        }
        let bp = &self.blueprint;
        let prep = estimate::prepare(bp, series, regressors)?;
        let layout = Layout::new(bp);
        let coefs = self.factor_coefficients();
        let scale = prep.data_scale;
        let beta: Vec<f64> = prep
            .profiled
            .iter()
            .map(|t| self.coefficient(*t).map_or(f64::NAN, |c| c.value / scale))
            .collect();
        let sigma2 = self.innovation_variance / (scale * scale);
        let mut ws = EvalWorkspace::default();
        let hess = estimate::full_hessian(&prep, bp, &layout, &mut ws, &coefs, &beta, sigma2);
        let k = layout.free_len + beta.len() + 1;
        let mut matrix = hess
            .and_then(|h| linalg::invert_spd(&h, k))
            .ok_or_else(|| Error::numerical(WHAT, "the Hessian is not positive definite"))?;
        // Back to the caller's units: β = scale·β̃, σ² = scale²·σ̃².
        let unit = |i: usize| {
            if i < layout.free_len {
                1.0
            } else if i + 1 < k {
                scale
            } else {
                scale * scale
            }
        };
        for i in 0..k {
            for j in 0..k {
                matrix[i * k + j] *= unit(i) * unit(j);
            }
        }
        let mut terms = layout.free_terms();
        terms.extend(prep.profiled.iter().copied());
        Ok(ParameterCovariance { terms, matrix })
    }
    /// Estimated innovation variance σ² (ML: sum of squares / readings in likelihood).
    pub fn innovation_variance(&self) -> f64 {
        self.innovation_variance
    }
    /// The log-likelihood, typed as exact or conditional.
    pub fn log_likelihood(&self) -> LogLikelihood {
        self.log_likelihood
    }
    /// Number of estimated parameters `k` for criteria (σ² included; held excluded).
    pub fn estimated_parameters(&self) -> usize {
        self.coefficients.iter().filter(|c| !c.held).count() + 1
    }
    /// AIC, AICc, BIC, HQIC — only for exact-likelihood fits; a CSS fit returns an error
    /// that says why.
    pub fn criteria(&self) -> Result<InformationCriteria> {
        match self.log_likelihood {
            LogLikelihood::Exact(ll) => InformationCriteria::from_log_likelihood(
                ll,
                self.estimated_parameters(),
                self.counts.in_likelihood,
            ),
            LogLikelihood::Conditional(_) => Err(Error::invalid(
                "information criteria",
                "a conditional-sum-of-squares fit has only a partial (conditional) likelihood; \
                 refit with the exact or staged estimator to compare models by criteria",
            )),
        }
    }
    /// How the readings were used.
    pub fn reading_counts(&self) -> ReadingCounts {
        self.counts
    }
    /// Optimisation stages (CSS, exact, or both), in order.
    pub fn stages(&self) -> &[StageRecord] {
        &self.stages
    }
    /// Whether every optimisation stage converged.
    pub fn converged(&self) -> bool {
        self.stages.iter().all(|s| s.converged())
    }
    /// One-step innovations on the original time axis (NaN where missing, lost to
    /// differencing, or conditioned on). Empty for a model restored without its
    /// residuals (see [`FittedModel::has_residuals`]).
    pub fn residuals(&self) -> &[f64] {
        &self.residuals
    }
    /// Residuals divided by their standard deviation `σ·√F_t` (empty like
    /// [`FittedModel::residuals`]).
    pub fn standardized_residuals(&self) -> &[f64] {
        &self.standardized
    }
    /// Whether the model holds its residuals: always after a fit; after restoring, only
    /// when stored with [`model_to_json_keeping_residuals`](crate::model_to_json_keeping_residuals).
    pub fn has_residuals(&self) -> bool {
        self.counts.total == 0 || !self.residuals.is_empty()
    }
    /// The same model without its residual vectors (what [`model_to_json`](crate::model_to_json) stores).
    pub(crate) fn without_residuals(&self) -> FittedModel {
        FittedModel {
            blueprint: self.blueprint.clone(),
            coefficients: self.coefficients.clone(),
            covariance_terms: self.covariance_terms.clone(),
            covariance: self.covariance.clone(),
            innovation_variance: self.innovation_variance,
            log_likelihood: self.log_likelihood,
            counts: self.counts,
            stages: self.stages.clone(),
            residuals: Vec::new(),
            standardized: Vec::new(),
            roots: self.roots.clone(),
            warnings: self.warnings.clone(),
            data_fingerprint: self.data_fingerprint,
            forecaster: self.forecaster.clone(),
            terminal: self.terminal.clone(),
            time_axis: self.time_axis,
        }
    }
    /// Inverse roots per polynomial factor.
    pub fn roots(&self) -> &[FactorRoots] {
        &self.roots
    }
    /// Warnings (near unit roots, non-convergence, missing standard errors).
    pub fn warnings(&self) -> &[FitWarning] {
        &self.warnings
    }

    /// The default number of lags for the residual check (common practice): `2s` for a
    /// seasonal model, otherwise 10; never more than a fifth of the residuals and at
    /// least one more than the estimated ARMA coefficients.
    pub fn default_check_lags(&self) -> usize {
        let n = self.counts.in_likelihood;
        let s = self.blueprint.period;
        let base = if s > 1 { 2 * s } else { 10 };
        let k = self.blueprint.estimated_arma_coefficients();
        base.min(n / 5).max(k + 1).min(n.saturating_sub(1)).max(1)
    }

    /// The residual check bundle over lags `1..=max_lag` at level `alpha` (e.g. 0.05).
    pub fn residual_check(&self, max_lag: usize, alpha: f64) -> Result<ResidualCheck> {
        if !self.has_residuals() {
            return Err(Error::invalid(
                "residual check",
                "this model was restored without its residuals; store it with \
                 model_to_json_keeping_residuals to check them later",
            ));
        }
        if !(alpha > 0.0 && alpha < 1.0) {
            return Err(Error::invalid(
                "residual check",
                format!("alpha {alpha} must be in (0, 1)"),
            ));
        }
        let mut scratch = CorrelogramWorkspace::new();
        // Standardized innovations: each divided by its own filter standard deviation, so
        // early innovations (large variance before the filter settles) do not swamp the
        // autocorrelations.
        let cg = Correlogram::compute_with(&self.standardized, max_lag, &mut scratch)?;
        let band = cg.bands(1.0 - alpha, BandRule::WhiteNoise)?;
        let portmanteau = PortmanteauScan::from_correlogram(
            &cg,
            max_lag,
            self.blueprint.estimated_arma_coefficients(),
        )?;
        let white = portmanteau
            .row(max_lag)
            .and_then(|r| r.ljung_box_p_value)
            .is_none_or(|p| p >= alpha);
        Ok(ResidualCheck {
            correlogram: cg,
            band,
            portmanteau,
            alpha,
            white,
            normality: jarque_bera(&self.standardized).ok(),
            variance_change: mcleod_li(&self.standardized, max_lag).ok(),
        })
    }

    /// The time axis of the fitted readings (index 0 at its origin), if the model has one:
    /// its forecasts and monitors then carry timestamps.
    pub fn time_axis(&self) -> Option<TimeAxis> {
        self.time_axis
    }

    /// The same model with its readings on `axis` (index 0 of the fitted series at the
    /// axis' origin). [`Blueprint::fit_gridded`] sets it from the grid.
    pub fn with_time_axis(mut self, axis: TimeAxis) -> Self {
        self.time_axis = Some(axis);
        self
    }

    /// Fingerprint of the data the model was fitted to (used to refuse comparisons of
    /// models fitted to different data).
    pub fn data_fingerprint(&self) -> u64 {
        self.data_fingerprint
    }

    /// Natural coefficients by factor (crate-internal).
    pub(crate) fn factor_coefficients(&self) -> FactorCoefficients {
        let mut c = FactorCoefficients::default();
        for e in &self.coefficients {
            if let Some((factor, _)) = Factor::of(e.term) {
                c.of_mut(factor).push(e.value);
            }
        }
        c
    }
}

impl fmt::Display for FittedModel {
    /// A report in lagwise's own layout.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let bp = &self.blueprint;
        writeln!(f, "== {} · {}", bp.shape_label(), bp.estimator())?;
        let c = self.counts;
        writeln!(
            f,
            "   readings {} · missing {} · lost to differencing {} · conditioned on {} · in likelihood {}",
            c.total, c.missing, c.lost_to_differencing, c.conditioned_on, c.in_likelihood
        )?;
        writeln!(
            f,
            "   {:<20} {:>12} {:>11} {:>8} {:>8}",
            "term", "value", "± 1 sd", "z", "p"
        )?;
        for e in &self.coefficients {
            let (sd, z, p) = match (e.held, e.std_error, e.z_statistic(), e.p_value()) {
                (true, ..) => ("held".to_string(), String::new(), String::new()),
                (false, Some(se), Some(z), Some(p)) => {
                    (format!("{se:.6}"), format!("{z:.2}"), format!("{p:.4}"))
                }
                _ => ("n/a".to_string(), String::new(), String::new()),
            };
            writeln!(
                f,
                "   {:<20} {:>12.6} {sd:>11} {z:>8} {p:>8}",
                e.term.to_string(),
                e.value,
            )?;
        }
        writeln!(
            f,
            "   innovation variance {:.6} (sd {:.6})",
            self.innovation_variance,
            self.innovation_variance.sqrt()
        )?;
        match self.log_likelihood {
            LogLikelihood::Exact(ll) => {
                write!(f, "   log-likelihood (exact) {ll:.4}")?;
                if let Ok(ic) = self.criteria() {
                    write!(
                        f,
                        " · k = {} · AIC {:.3} · BIC {:.3}",
                        ic.parameters, ic.akaike, ic.schwarz
                    )?;
                    if let Some(a) = ic.akaike_corrected {
                        write!(f, " · AICc {a:.3}")?;
                    }
                }
                writeln!(f)?;
            }
            LogLikelihood::Conditional(ll) => writeln!(
                f,
                "   log-likelihood (conditional) {ll:.4} · no information criteria for a conditional fit"
            )?,
        }
        for st in &self.stages {
            writeln!(
                f,
                "   {} stage: {} after {} iterations, {} evaluations, gradient norm {:.2e}",
                if st.exact { "exact" } else { "CSS" },
                st.reason,
                st.iterations,
                st.evaluations,
                st.gradient_norm
            )?;
        }
        for r in &self.roots {
            let mods: Vec<String> = r
                .inverse_roots
                .iter()
                .map(|z| format!("{:.3}", z.modulus()))
                .collect();
            writeln!(
                f,
                "   inverse roots, {}: |z| = {}",
                factor_label(r.factor),
                mods.join(", ")
            )?;
        }
        if !self.has_residuals() {
            writeln!(f, "   residuals: not stored with this model")?;
        } else if let Ok(check) = self.residual_check(self.default_check_lags(), 0.05) {
            writeln!(f, "   {}", check.verdict_line())?;
            writeln!(f, "   {}", check.health_line())?;
        }
        for w in &self.warnings {
            writeln!(f, "   ! {w}")?;
        }
        Ok(())
    }
}

/// The likelihood of one blueprint over one series, as a function of the ARMA
/// coefficients: the expert layer under [`Blueprint::fit`], for profile-likelihood scans,
/// custom optimisers and benchmarks.
///
/// Regression terms (mean, drift) are profiled out by GLS and σ² is concentrated out, as
/// in the estimators. Evaluations with a [`FitWorkspace`] allocate nothing once the
/// workspace has grown to the model's shape.
///
/// ```
/// use lagwise::{Blueprint, FitWorkspace, Simulator};
/// # fn main() -> Result<(), lagwise::Error> {
/// let x = Simulator::builder().autoregressive(&[0.5]).build()?.generate(300, 2);
/// let bp = Blueprint::builder().nonseasonal(1, 0, 0).build()?;
/// let surface = bp.likelihood_surface(&x)?;
/// let mut ws = FitWorkspace::new();
/// let at_half = surface.exact_log_likelihood_with(&[0.5], &mut ws)?;
/// let at_zero = surface.exact_log_likelihood_with(&[0.0], &mut ws)?;
/// assert!(at_half > at_zero);
/// # Ok(()) }
/// ```
#[derive(Debug, Clone)]
pub struct LikelihoodSurface {
    blueprint: Blueprint,
    prep: estimate::Prepared,
    layout: Layout,
}

impl Blueprint {
    /// Prepare the likelihood surface of this blueprint over `series` (differencing and
    /// screening done once).
    pub fn likelihood_surface(&self, series: &[f64]) -> Result<LikelihoodSurface> {
        Ok(LikelihoodSurface {
            blueprint: self.clone(),
            prep: estimate::prepare(self, series, &[])?,
            layout: Layout::new(self),
        })
    }
}

impl LikelihoodSurface {
    /// The workspace this surface's evaluations need, grown in advance by evaluations at
    /// an admissible point with every free coefficient non-zero: single and batch
    /// evaluations (up to the lanes' width of points per batch) then allocate nothing
    /// from the first call on (tested with and without missing readings; a gap pattern
    /// whose factored step needs a higher rank at another point can grow it once more).
    /// Its size is [`FitWorkspace::heap_bytes`].
    pub fn workspace(&self) -> FitWorkspace {
        let mut ws = FitWorkspace::new();
        // A point with every free coefficient non-zero (so every sparse list reaches its
        // full length) and admissible (absolute sums below 0.4 in each factor).
        let k = self.layout.free_len;
        let point: Vec<f64> = (0..k).map(|j| 0.2 * 0.5f64.powi(j as i32)).collect();
        let _ = self.eval(&point, &mut ws, ObjectiveKind::Exact);
        let _ = self.eval(&point, &mut ws, ObjectiveKind::Conditional);
        if k > 0 {
            let batch = point.repeat(crate::filter::lanes::MAX_LANES);
            let mut out = Vec::new();
            let _ = self.eval_many(&batch, &mut ws, &mut out, ObjectiveKind::Exact);
            let _ = self.eval_many(&batch, &mut ws, &mut out, ObjectiveKind::Conditional);
        }
        ws
    }

    /// Number of free ARMA coefficients expected by the evaluation methods (canonical
    /// order φ, θ, Φ, Θ, skipping held ones).
    pub fn free_coefficients(&self) -> usize {
        self.layout.free_len
    }

    /// Readings entering the exact likelihood.
    pub fn readings(&self) -> usize {
        self.prep.data[..self.prep.n]
            .iter()
            .filter(|v| !v.is_nan())
            .count()
    }

    #[track_caller]
    fn eval(&self, arma: &[f64], ws: &mut FitWorkspace, kind: ObjectiveKind) -> Result<f64> {
        // A wrong point length is the caller's programming error, not bad data.
        assert_eq!(
            arma.len(),
            self.layout.free_len,
            "likelihood surface: {} coefficients given, the surface has {} free coefficients",
            arma.len(),
            self.layout.free_len
        );
        let inner = &mut ws.inner;
        let mut coefs = std::mem::take(&mut inner.scratch_coefs);
        let ok = self.layout.natural_raw(arma, &mut coefs, inner);
        let result = if ok {
            let mut ev = std::mem::take(&mut inner.scratch_eval);
            let r = inner.evaluate(&self.prep, &self.blueprint, &coefs, kind, None, &mut ev);
            let ll = -ev.neg_log_likelihood - ev.used as f64 * self.prep.data_scale.ln();
            inner.scratch_eval = ev;
            r.map(|()| ll)
        } else {
            Err(Error::invalid(
                "likelihood surface",
                "the coefficients are not stationary/invertible",
            ))
        };
        inner.scratch_coefs = coefs;
        result
    }

    #[track_caller]
    fn eval_many(
        &self,
        points: &[f64],
        ws: &mut FitWorkspace,
        out: &mut Vec<f64>,
        kind: ObjectiveKind,
    ) -> Result<()> {
        let k = self.layout.free_len;
        // A ragged batch is the caller's programming error, not bad data.
        assert!(
            k > 0 && points.len().is_multiple_of(k),
            "likelihood surface: {} values given; points need {k} free coefficients each \
             (with none free, evaluate the single point instead)",
            points.len()
        );
        let count = points.len() / k;
        let inner = &mut ws.inner;
        let mut coefs = std::mem::take(&mut inner.batch_coefs);
        let mut slots = std::mem::take(&mut inner.batch_slots);
        let mut vals = std::mem::take(&mut inner.batch_values);
        if coefs.len() < count {
            coefs.resize(count, FactorCoefficients::default());
        }
        slots.clear();
        let mut m = 0;
        for z in points.chunks_exact(k) {
            if self.layout.natural_raw(z, &mut coefs[m], inner) {
                slots.push(Some(m));
                m += 1;
            } else {
                slots.push(None);
            }
        }
        inner.evaluate_batch(&self.prep, &self.blueprint, &coefs[..m], kind, &mut vals);
        out.clear();
        let shift = self.prep.data_scale.ln();
        out.extend(slots.iter().map(|slot| {
            slot.and_then(|j| vals[j])
                .map_or(f64::NAN, |(nll, used)| -nll - used as f64 * shift)
        }));
        inner.batch_coefs = coefs;
        inner.batch_slots = slots;
        inner.batch_values = vals;
        Ok(())
    }

    /// Exact log-likelihoods at many points at once: `points` holds
    /// [`Self::free_coefficients`] values per point, back to back; `out` receives one
    /// value per point, NaN where the point is not stationary/invertible or the
    /// evaluation fails. For small shapes (AR and MA lengths ≤ 3 after expansion, at most
    /// a mean or drift column, no missing readings) up to eight points share one pass over
    /// the data at about the cost of one; every value is bitwise the one
    /// [`Self::exact_log_likelihood_with`] returns. Allocation-free once `ws` and `out`
    /// have grown.
    ///
    /// # Panics
    /// If `points.len()` is not a multiple of [`Self::free_coefficients`] (or no
    /// coefficient is free): a programming error of the caller, not a property of data.
    ///
    /// ```
    /// use lagwise::{Blueprint, FitWorkspace, Simulator};
    /// # fn main() -> Result<(), lagwise::Error> {
    /// let x = Simulator::builder().autoregressive(&[0.5]).build()?.generate(400, 3);
    /// let surface = Blueprint::builder().nonseasonal(1, 0, 0).build()?.likelihood_surface(&x)?;
    /// let grid: Vec<f64> = (0..9).map(|i| -0.8 + 0.2 * i as f64).collect();
    /// let mut ws = FitWorkspace::new();
    /// let mut ll = Vec::new();
    /// surface.exact_log_likelihoods_with(&grid, &mut ws, &mut ll)?;
    /// assert_eq!(ll[6], surface.exact_log_likelihood_with(&[0.4], &mut ws)?);
    /// # Ok(()) }
    /// ```
    #[track_caller]
    pub fn exact_log_likelihoods_with(
        &self,
        points: &[f64],
        ws: &mut FitWorkspace,
        out: &mut Vec<f64>,
    ) -> Result<()> {
        self.eval_many(points, ws, out, ObjectiveKind::Exact)
    }

    /// The conditional (CSS) counterpart of [`Self::exact_log_likelihoods_with`].
    ///
    /// # Panics
    /// As [`Self::exact_log_likelihoods_with`].
    #[track_caller]
    pub fn conditional_log_likelihoods_with(
        &self,
        points: &[f64],
        ws: &mut FitWorkspace,
        out: &mut Vec<f64>,
    ) -> Result<()> {
        self.eval_many(points, ws, out, ObjectiveKind::Conditional)
    }

    /// Exact log-likelihood (σ² concentrated, regression profiled) at the free ARMA
    /// coefficients `arma`; an error if they are not stationary/invertible.
    ///
    /// # Panics
    /// If `arma.len()` differs from [`Self::free_coefficients`] (a programming error).
    #[track_caller]
    pub fn exact_log_likelihood_with(&self, arma: &[f64], ws: &mut FitWorkspace) -> Result<f64> {
        self.eval(arma, ws, ObjectiveKind::Exact)
    }

    /// Conditional (CSS) log-likelihood at the free ARMA coefficients `arma`.
    ///
    /// # Panics
    /// As [`Self::exact_log_likelihood_with`].
    #[track_caller]
    pub fn conditional_log_likelihood_with(
        &self,
        arma: &[f64],
        ws: &mut FitWorkspace,
    ) -> Result<f64> {
        self.eval(arma, ws, ObjectiveKind::Conditional)
    }
}
