//! Automatic model building: unit-root and stationarity tests, a seasonal-strength
//! measure, and a stepwise order search behind a residual-whiteness gate.

use std::collections::HashMap;

use crate::base::error::{Error, ErrorKind, Result};
use crate::estimate::Prepared;
use crate::fit::fitted::{FitWorkspace, FittedModel, UnfinishedFit};
use crate::model::blueprint::{Blueprint, Estimator, MAX_ORDER, MAX_PERIOD, ModelShape};
use crate::model::cycles::{Cycle, MAX_CYCLES};
use crate::stats::criteria::Criterion;
use crate::stats::unitroot::{TrendTerms, augmented_dickey_fuller, kpss, seasonal_strength};

/// Settings of an automatic order search, built by [`SearchSettings::builder`] (validated
/// at `build`, immutable after).
///
/// ```
/// use lagwise::{Criterion, SearchSettings};
/// # fn main() -> Result<(), lagwise::Error> {
/// let daily = SearchSettings::builder()
///     .period(96)
///     .max_orders(3, 3, 1, 1)
///     .criterion(Criterion::Schwarz)
///     .build()?;
/// assert_eq!(daily.max_orders().seasonal_p, 1);
/// assert!(SearchSettings::builder().alpha(1.5).build().is_err());
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct SearchSettings {
    period: usize,
    max_orders: OrderBounds,
    differencing: Option<(usize, usize)>,
    criterion: Criterion,
    exhaustive: bool,
    alpha: f64,
    estimator: Estimator,
    explore_near_ties: bool,
    screening: bool,
    finalists: usize,
    /// Long cycles described by harmonics, with the most harmonics to try for each.
    cycles: Vec<Cycle>,
}

/// Upper bounds on the orders an order search may try.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub struct OrderBounds {
    /// Non-seasonal AR order p.
    pub p: usize,
    /// Non-seasonal MA order q.
    pub q: usize,
    /// Seasonal AR order P.
    pub seasonal_p: usize,
    /// Seasonal MA order Q.
    pub seasonal_q: usize,
}

impl Default for SearchSettings {
    /// Non-seasonal; p, q ≤ 5 (P, Q ≤ 2 once a period is set); differencing by the tests;
    /// BIC; stepwise, screened by CSS with three finalists; whiteness gate at 5%;
    /// CSS-started ML.
    fn default() -> Self {
        SearchSettings {
            period: 1,
            max_orders: OrderBounds {
                p: 5,
                q: 5,
                seasonal_p: 2,
                seasonal_q: 2,
            },
            differencing: None,
            criterion: Criterion::Schwarz,
            exhaustive: false,
            alpha: 0.05,
            estimator: Estimator::StagedLikelihood,
            explore_near_ties: false,
            screening: true,
            finalists: 3,
            cycles: Vec::new(),
        }
    }
}

impl SearchSettings {
    /// A builder starting from the defaults (see [`SearchSettings::default`]).
    pub fn builder() -> SearchSettingsBuilder {
        SearchSettingsBuilder {
            settings: SearchSettings::default(),
        }
    }
    /// Seasonal period (1 = no seasonal terms).
    pub fn period(&self) -> usize {
        self.period
    }
    /// Bounds on p, q, P, Q.
    pub fn max_orders(&self) -> OrderBounds {
        self.max_orders
    }
    /// Fixed differencing `(d, D)`, or `None` when the tests choose it.
    pub fn fixed_differencing(&self) -> Option<(usize, usize)> {
        self.differencing
    }
    /// Ranking criterion.
    pub fn criterion(&self) -> Criterion {
        self.criterion
    }
    /// Whether every order within the bounds is tried (instead of the stepwise walk).
    pub fn is_exhaustive(&self) -> bool {
        self.exhaustive
    }
    /// Significance level of the whiteness gate.
    pub fn alpha(&self) -> f64 {
        self.alpha
    }
    /// Estimator for every candidate.
    pub fn estimator(&self) -> Estimator {
        self.estimator
    }
    /// Whether the stepwise walk also follows a near-tied runner-up.
    pub fn explores_near_ties(&self) -> bool {
        self.explore_near_ties
    }
    /// Whether the stepwise walk ranks candidates by a conditional-sum-of-squares fit and
    /// refits only the finalists by the estimator.
    pub fn is_screening(&self) -> bool {
        self.screening
    }
    /// How many screened candidates are refitted by the estimator (more when none of them
    /// passes the whiteness gate; see [`SearchSettingsBuilder::finalists`]).
    pub fn finalists(&self) -> usize {
        self.finalists
    }
    /// The long cycles described by harmonics, each with the most harmonics the search
    /// tries (sorted by period).
    pub fn cycles(&self) -> &[Cycle] {
        &self.cycles
    }
}

/// Builder of [`SearchSettings`]: setters chain, [`SearchSettingsBuilder::build`]
/// validates.
#[derive(Debug, Clone)]
pub struct SearchSettingsBuilder {
    settings: SearchSettings,
}

impl SearchSettingsBuilder {
    /// Seasonal period (default 1 = none; 2..=[`MAX_PERIOD`] adds seasonal candidates).
    pub fn period(&mut self, period: usize) -> &mut Self {
        self.settings.period = period;
        self
    }
    /// Bounds on p, q, P, Q (default 5, 5, 2, 2; at most [`MAX_ORDER`] each).
    pub fn max_orders(
        &mut self,
        p: usize,
        q: usize,
        seasonal_p: usize,
        seasonal_q: usize,
    ) -> &mut Self {
        self.settings.max_orders = OrderBounds {
            p,
            q,
            seasonal_p,
            seasonal_q,
        };
        self
    }
    /// Fix the differencing `(d, D)` instead of testing for it.
    pub fn differencing(&mut self, d: usize, seasonal_d: usize) -> &mut Self {
        self.settings.differencing = Some((d, seasonal_d));
        self
    }
    /// Ranking criterion (default BIC: in the order-recovery study it found the simulated
    /// orders far more often than AICc, which keeps a fixed chance of preferring a larger
    /// model whatever the length; see the README).
    pub fn criterion(&mut self, criterion: Criterion) -> &mut Self {
        self.settings.criterion = criterion;
        self
    }
    /// Try every order within the bounds (default `false`: the stepwise walk).
    pub fn exhaustive(&mut self, yes: bool) -> &mut Self {
        self.settings.exhaustive = yes;
        self
    }
    /// Significance level of the whiteness gate (default 0.05; in (0, 1)).
    pub fn alpha(&mut self, alpha: f64) -> &mut Self {
        self.settings.alpha = alpha;
        self
    }
    /// Estimator for every candidate (default CSS-started ML).
    pub fn estimator(&mut self, estimator: Estimator) -> &mut Self {
        self.settings.estimator = estimator;
        self
    }
    /// Stepwise only: also expand the runner-up while it is within 2 criterion units of
    /// the leader (default `false`). Under the former defaults (AICc, no proposed starts,
    /// no traded orders) it lifted AR(2) recovery in the order-recovery study from 41% to
    /// 52.5% at about 1.4× the candidates' cost; the proposed starts and traded orders now
    /// reach the criterion's ceiling without it.
    pub fn explore_near_ties(&mut self, yes: bool) -> &mut Self {
        self.settings.explore_near_ties = yes;
        self
    }
    /// Stepwise only: screen every candidate the walk visits by a conditional-sum-of-squares
    /// fit, ranked by the criterion computed from its innovation variance, and refit only
    /// the finalists by the estimator (default `true`). With `false` every candidate is
    /// fitted by the estimator. An exhaustive search never screens.
    pub fn screening(&mut self, yes: bool) -> &mut Self {
        self.settings.screening = yes;
        self
    }
    /// How many of the best screened candidates (those whose CSS residuals pass the
    /// whiteness gate first) are refitted by the estimator (default 3, in 1..=20). When
    /// none of them passes the gate after the refit, up to as many again are refitted.
    pub fn finalists(&mut self, count: usize) -> &mut Self {
        self.settings.finalists = count;
        self
    }
    /// Describe a long cycle of `period` readings by harmonic terms, their number chosen
    /// by the criterion between 0 (no cycle) and `max_harmonics` (`≤ period/2`; at most
    /// three cycles). For 15-minute readings: `.cycle(672, 10)` for the weekly cycle beside
    /// a seasonal period of 96, or `.cycle(96, 10).cycle(672, 10)` with non-seasonal ARMA
    /// errors — regression on harmonic terms with ARMA errors, the published practice for
    /// long periods. Giving the same period again keeps the last bound.
    pub fn cycle(&mut self, period: usize, max_harmonics: usize) -> &mut Self {
        self.settings.cycles.retain(|c| c.period != period);
        self.settings.cycles.push(Cycle::new(period, max_harmonics));
        self.settings.cycles.sort();
        self
    }
    /// Validate and return the settings: `alpha` in (0, 1), a period of at most
    /// [`MAX_PERIOD`], bounds of at most [`MAX_ORDER`], fixed differencing of at most 2
    /// (d) and 1 (D).
    pub fn build(&self) -> Result<SearchSettings> {
        const WHAT: &str = "search settings";
        let s = &self.settings;
        if !(s.alpha > 0.0 && s.alpha < 1.0) {
            return Err(Error::invalid(
                WHAT,
                format!("alpha {} must be in (0, 1)", s.alpha),
            ));
        }
        if s.period == 0 || s.period > MAX_PERIOD {
            return Err(Error::invalid(
                WHAT,
                format!("period {} must be in 1..={MAX_PERIOD}", s.period),
            ));
        }
        let b = s.max_orders;
        if [b.p, b.q, b.seasonal_p, b.seasonal_q]
            .iter()
            .any(|&o| o > MAX_ORDER)
        {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "order bounds ({}, {}, {}, {}) exceed {MAX_ORDER}",
                    b.p, b.q, b.seasonal_p, b.seasonal_q
                ),
            ));
        }
        if s.finalists == 0 || s.finalists > 20 {
            return Err(Error::invalid(
                WHAT,
                format!("finalists {} must be in 1..=20", s.finalists),
            ));
        }
        if let Some((d, sd)) = s.differencing
            && (d > 2 || sd > 1)
        {
            return Err(Error::invalid(
                WHAT,
                format!("fixed differencing d = {d}, D = {sd}: at most d = 2 and D = 1"),
            ));
        }
        if !s.cycles.is_empty() {
            // The cycles' own limits, as a blueprint checks them (before differencing is
            // chosen: harmonics a seasonal difference removes are dropped later).
            let mut b = Blueprint::builder();
            if s.period > 1 {
                b.seasonal(0, 0, 1, s.period);
            }
            for c in &s.cycles {
                b.cycle(c.period, c.harmonics);
            }
            b.build().map_err(|e| {
                Error::invalid(
                    WHAT,
                    match e.kind() {
                        ErrorKind::InvalidSpecification { message, .. } => message.clone(),
                        _ => e.to_string(),
                    },
                )
            })?;
        }
        Ok(s.clone())
    }
}

/// The differencing an order search settled on, with the evidence.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct DifferencingChoice {
    /// Non-seasonal differencing d.
    pub d: usize,
    /// Seasonal differencing D.
    pub seasonal_d: usize,
    /// The tests read and what they said (or that the caller fixed it).
    pub evidence: String,
}

/// One candidate of a search, as recorded in the account.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct Candidate {
    /// Orders, differencing and constant (mean or drift) of the candidate; its `Display`
    /// is the candidate's label.
    pub shape: ModelShape,
    /// Criterion value (`None` if the fit failed or the criterion is undefined).
    pub criterion: Option<f64>,
    /// Maximised log-likelihood of the fit (`None` if it failed).
    pub log_likelihood: Option<f64>,
    /// Ljung–Box p-value of the whiteness gate.
    pub whiteness_p: Option<f64>,
    /// Whether the residuals passed the gate.
    pub adequate: bool,
    /// Why the fit failed, if it did.
    pub failure: Option<String>,
    /// The criterion computed from a conditional-sum-of-squares fit (its innovation
    /// variance over all present differenced readings), by which a screening search
    /// ranked the candidate; `None` when it was not screened.
    #[serde(default)]
    pub screening_value: Option<f64>,
    /// Whether the candidate was fitted by the search's estimator: every candidate of a
    /// search without screening, the finalists of one with it. A candidate only screened
    /// has no `criterion` or `log_likelihood`, and its whiteness verdict is that of its
    /// CSS residuals.
    #[serde(default = "refitted_by_default")]
    pub refitted: bool,
}

fn refitted_by_default() -> bool {
    true
}

impl Candidate {
    fn label(&self) -> String {
        self.shape.to_string()
    }
}

/// The result of an order search: the chosen model and an account of every candidate.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct SearchOutcome {
    /// The chosen model.
    pub model: FittedModel,
    /// Whether the chosen model passed the whiteness gate. `false` means no candidate
    /// did: the best inadequate one is returned, flagged.
    pub adequate: bool,
    /// Differencing chosen, with the evidence.
    pub differencing: DifferencingChoice,
    /// Every candidate tried, in order.
    pub candidates: Vec<Candidate>,
    /// A short explanation of the choice.
    pub explanation: String,
}

fn difference_plain(x: &[f64], d: usize, sd: usize, s: usize) -> Vec<f64> {
    crate::estimate::difference(x, d, sd, s)
}

/// Whether a fit has a non-seasonal AR inverse root within 0.1 of an MA inverse root: the
/// pair nearly cancels, the model is over-parameterised and its likelihood ridge makes
/// criteria unreliable (common practice: such candidates are discarded).
fn cancelling(m: &FittedModel) -> bool {
    let roots = m.roots();
    let get = |t: crate::model::coefficients::Term| {
        roots
            .iter()
            .find(|r| r.factor == t)
            .map(|r| r.inverse_roots.clone())
            .unwrap_or_default()
    };
    let ar = get(crate::model::coefficients::Term::Ar(0));
    let ma = get(crate::model::coefficients::Term::Ma(0));
    ar.iter()
        .any(|a| ma.iter().any(|b| (a.re - b.re).hypot(a.im - b.im) < 0.1))
}

/// Choose the differencing `d` and `D` by seasonal strength and repeated KPSS tests
/// confirmed by ADF (see [`search_orders`]).
pub fn choose_differencing(series: &[f64], period: usize) -> Result<DifferencingChoice> {
    let mut notes = Vec::new();
    let mut sd = 0;
    if period > 1 && series.iter().filter(|v| !v.is_nan()).count() >= 3 * period {
        let fs = seasonal_strength(series, period)?;
        notes.push(format!("seasonal strength {fs:.2} (threshold 0.64)"));
        if fs > 0.64 {
            sd = 1;
        }
    }
    let mut d = 0;
    let mut x = difference_plain(series, 0, sd, period.max(1));
    while d < 2 {
        match kpss(&x, TrendTerms::Level) {
            Ok(t) if t.p_value < 0.05 => {
                // Confirmatory check (common practice): KPSS over-rejects for persistent
                // stationary series, so difference only if ADF does not reject a unit
                // root at 5% either.
                let adf = augmented_dickey_fuller(&x, TrendTerms::Level)
                    .map(|a| a.p_value)
                    .unwrap_or(1.0);
                if adf <= 0.01 {
                    notes.push(format!(
                        "KPSS at d = {d}: {:.3} rejects stationarity but ADF rejects a unit root (p <= 0.01) → stop",
                        t.statistic
                    ));
                    break;
                }
                notes.push(format!("KPSS at d = {d}: {:.3}, p < 0.05, and ADF does not reject a unit root → difference", t.statistic));
                d += 1;
                x = difference_plain(&x, 1, 0, 1);
            }
            Ok(t) => {
                notes.push(format!(
                    "KPSS at d = {d}: {:.3}, p ≥ 0.05 → stop",
                    t.statistic
                ));
                break;
            }
            Err(e) => {
                notes.push(format!("KPSS at d = {d} not possible ({e}) → stop"));
                break;
            }
        }
    }
    Ok(DifferencingChoice {
        d,
        seasonal_d: sd,
        evidence: notes.join("; "),
    })
}

/// Search orders for one series (NaN = missing) and return the chosen model with the
/// account of every candidate.
///
/// ```no_run
/// use lagwise::{search_orders, SearchSettings};
/// # fn main() -> Result<(), lagwise::Error> {
/// # let readings: Vec<f64> = vec![];
/// let outcome = search_orders(&readings, &SearchSettings::default())?;
/// println!("{}", outcome.explanation);
/// # Ok(()) }
/// ```
///
/// # Tests
/// - **KPSS** (Kwiatkowski, Phillips, Schmidt & Shin 1992): level or trend stationarity.
///   Statistic `η = n⁻² Σ S_t² / σ̂²_LR` with `S_t` the partial sums of the residuals from
///   the mean (or a linear trend) and the long-run variance from a Bartlett window of
///   `l = ⌊4 (n/100)^{1/4}⌋` lags (the paper's "l4" rule). Critical values from the
///   paper's Table 1; p-values interpolated linearly between the tabulated levels and
///   reported as bounds outside them.
/// - **Augmented Dickey–Fuller** (Dickey & Fuller 1979): `Δy_t = α [+ βt] + γ y_{t−1} +
///   Σ_{j≤k} δ_j Δy_{t−j} + e_t`, the t-ratio of γ; `k` chosen by AIC from
///   `k_max = ⌊12 (n/100)^{1/4}⌋` (Schwert's rule, common practice) on a common sample.
///   Critical values from MacKinnon's response surfaces (MacKinnon 2010, Table 2, values
///   from memory); p-values interpolated between the 1%, 5% and 10% points.
/// - **Seasonal strength** (Wang, Smith & Hyndman 2006): `F_s = max(0, 1 − Var(R)/Var(S+R))`
///   from a moving-average decomposition (centred moving-average trend, a seasonal
///   component averaged over ±2 cycles so it may evolve as in STL, remainder). Seasonal differencing when `F_s > 0.64` (common practice).
///
/// # Search
/// Differencing first: `D = 1` if the seasonal strength exceeds 0.64, then `d` increased
/// while KPSS (level) rejects stationarity at 5% and ADF does not reject a unit root at 1%
/// (confirmatory use of the two tests, common practice; at most d = 2). Then a stepwise
/// walk after Hyndman & Khandakar (2008, Journal of Statistical Software 27(3)): their four
/// starting models plus the orders the correlogram of the differenced series proposes
/// (cut-offs of the ACF and PACF at ordinary and seasonal lags), then neighbours (each of
/// p, q, P, Q by ±1, p and q together or traded, the same for P and Q, the constant
/// toggled) while the ranking improves.
///
/// By default the walk **screens**: each candidate is fitted by CSS and ranked by the
/// criterion from the exact likelihood at its CSS estimates (one filter pass instead of
/// an exact optimisation); the finalists ([`SearchSettingsBuilder::finalists`]) that could
/// still win are refitted by the estimator, and the choice is made among the refits.
/// Every candidate's residuals get a Ljung–Box test at the lag of
/// [`FittedModel::default_check_lags`] (`min(2s, n/5)` for seasonal models, `min(10, n/5)`
/// otherwise, common practice); candidates that fail are kept in the account as
/// inadequate and never chosen over an adequate one. The default criterion is BIC, chosen
/// by the order-recovery study (README).
pub fn search_orders(series: &[f64], settings: &SearchSettings) -> Result<SearchOutcome> {
    search_orders_with(series, settings, &mut FitWorkspace::new())
}

/// [`search_orders`] on a caller-held workspace.
pub fn search_orders_with(
    series: &[f64],
    settings: &SearchSettings,
    ws: &mut FitWorkspace,
) -> Result<SearchOutcome> {
    let s = settings.period.max(1);
    crate::base::screen::screen(series, WHAT, 8, crate::base::screen::ConstantPolicy::Refuse)?;
    crate::estimate::check_full_cycles(s, series.len(), WHAT)?;
    for c in &settings.cycles {
        crate::estimate::check_full_harmonic_cycles(c.period, series.len(), WHAT)?;
    }
    // With long cycles, the differencing tests and the correlogram read the series less
    // its harmonic shape (least squares at the most harmonics allowed).
    let decycled = decycled(series, &settings.cycles);
    let differencing = match settings.differencing {
        Some((d, sd)) => DifferencingChoice {
            d,
            seasonal_d: if s > 1 { sd } else { 0 },
            evidence: "differencing fixed by the caller".to_string(),
        },
        None => choose_differencing(decycled.as_deref().unwrap_or(series), s)?,
    };
    let mut bench = CandidateBench::new(series, decycled, settings, &differencing);
    if !bench.cycles.is_empty() {
        choose_harmonics(&mut bench, ws);
    }
    if settings.exhaustive {
        walk_exhaustive(&mut bench, ws);
    } else {
        walk_stepwise(&mut bench, ws);
    }
    if !bench.cycles.is_empty() {
        refine_harmonics(&mut bench, ws);
    }
    bench.refit_finalists(ws);
    let CandidateBench {
        tried, mut fits, ..
    } = bench;
    let (idx, adequate) = select(&tried)?;
    let explanation = explain(settings, &differencing, &tried, idx, adequate);
    let model = fits[idx]
        .take()
        .ok_or_else(|| Error::numerical(WHAT, "chosen candidate has no fit"))?
        .finish(series, &[], ws)?;
    Ok(SearchOutcome {
        model,
        adequate,
        differencing,
        candidates: tried,
        explanation,
    })
}

const WHAT: &str = "order search";

/// The orders of one candidate (the differencing and period are the search's).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
struct Orders {
    p: usize,
    q: usize,
    seasonal_p: usize,
    seasonal_q: usize,
    constant: bool,
    /// Harmonics of each of the bench's cycles (0 = the cycle left out).
    harmonics: [usize; MAX_CYCLES],
}

/// Candidate evaluation: fits the candidates of one search on one series, records each in
/// the account (criterion, whiteness gate, failure) with its unfinished fit, and answers
/// a candidate met again from the record. A screening bench fits the walk's candidates by
/// CSS and refits the finalists by the estimator afterwards ([`CandidateBench::refit_finalists`]).
struct CandidateBench<'a> {
    series: &'a [f64],
    settings: &'a SearchSettings,
    d: usize,
    seasonal_d: usize,
    period: usize,
    bounds: OrderBounds,
    /// Whether the walk's candidates are fitted by CSS and ranked by their screening value.
    screen: bool,
    tried: Vec<Candidate>,
    orders: Vec<Orders>,
    fits: Vec<Option<UnfinishedFit>>,
    seen: HashMap<Orders, usize>,
    /// Prepared data by constant (with or without a mean/drift column) and harmonics.
    prepared: HashMap<(bool, [usize; MAX_CYCLES]), Prepared>,
    /// The search's long cycles (those the differencing leaves a harmonic of), with the
    /// most harmonics to try.
    cycles: Vec<Cycle>,
    /// The harmonics the walk uses for its candidates.
    harmonics: [usize; MAX_CYCLES],
    /// The series less its harmonic shape at the most harmonics (`None` without cycles).
    decycled: Option<Vec<f64>>,
}

impl<'a> CandidateBench<'a> {
    fn new(
        series: &'a [f64],
        decycled: Option<Vec<f64>>,
        settings: &'a SearchSettings,
        differencing: &DifferencingChoice,
    ) -> Self {
        let period = settings.period.max(1);
        let mut bounds = settings.max_orders;
        if period == 1 {
            bounds.seasonal_p = 0;
            bounds.seasonal_q = 0;
        }
        let cycles: Vec<Cycle> = settings
            .cycles
            .iter()
            .copied()
            .filter(|c| {
                !crate::model::cycles::harmonic_terms(
                    std::slice::from_ref(c),
                    differencing.seasonal_d,
                    period,
                )
                .is_empty()
            })
            .collect();
        let mut harmonics = [0; MAX_CYCLES];
        for (h, c) in harmonics.iter_mut().zip(&cycles) {
            *h = c.harmonics;
        }
        CandidateBench {
            cycles,
            harmonics,
            decycled,
            series,
            settings,
            d: differencing.d,
            seasonal_d: differencing.seasonal_d,
            period,
            bounds,
            screen: (settings.screening && !settings.exhaustive)
                || settings.estimator == Estimator::ConditionalSumOfSquares,
            tried: Vec::new(),
            orders: Vec::new(),
            fits: Vec::new(),
            seen: HashMap::new(),
            prepared: HashMap::new(),
        }
    }

    /// Whether a mean (d + D = 0) or drift (d + D = 1) can be estimated.
    fn constant_allowed(&self) -> bool {
        self.d + self.seasonal_d <= 1
    }

    /// The ranking value of `o` (fitting it unless met before): its screening value on a
    /// screening bench, else its criterion; `None` outside the bounds, for a failed fit,
    /// or where the value is undefined.
    fn evaluate(&mut self, o: Orders, ws: &mut FitWorkspace) -> Option<f64> {
        let b = self.bounds;
        if o.p > b.p
            || o.q > b.q
            || o.seasonal_p > b.seasonal_p
            || o.seasonal_q > b.seasonal_q
            || (o.constant && !self.constant_allowed())
        {
            return None;
        }
        if let Some(&i) = self.seen.get(&o) {
            return self.ranking_value(i);
        }
        let estimator = if self.screen {
            Estimator::ConditionalSumOfSquares
        } else {
            self.settings.estimator
        };
        let (cand, kept) = self.fit_candidate(o, estimator, None, ws);
        self.seen.insert(o, self.tried.len());
        self.tried.push(cand);
        self.orders.push(o);
        self.fits.push(kept);
        self.ranking_value(self.tried.len() - 1)
    }

    fn ranking_value(&self, i: usize) -> Option<f64> {
        if self.screen {
            self.tried[i].screening_value
        } else {
            self.tried[i].criterion
        }
    }

    /// The blueprint of `o` under the search's differencing and period.
    fn blueprint_of(&self, o: Orders, estimator: Estimator) -> Result<Blueprint> {
        let (d, sd, s) = (self.d, self.seasonal_d, self.period);
        let mut builder = Blueprint::builder();
        builder.nonseasonal(o.p, d, o.q).estimator(estimator);
        for c in self.cycles_of(o) {
            builder.cycle(c.period, c.harmonics);
        }
        if s > 1 {
            builder.seasonal(o.seasonal_p, sd, o.seasonal_q, s);
        }
        if d + sd == 0 {
            builder.mean_term(o.constant);
        } else if d + sd == 1 {
            builder.drift_term(o.constant);
        }
        builder.build()
    }

    /// The cycles of candidate `o` with its harmonics (cycles with none left out).
    fn cycles_of(&self, o: Orders) -> Vec<Cycle> {
        self.cycles
            .iter()
            .zip(o.harmonics)
            .filter(|(_, k)| *k > 0)
            .map(|(c, k)| Cycle::new(c.period, k))
            .collect()
    }

    /// Orders for the walk: the ARMA orders and constant given, the bench's harmonics.
    fn orders(
        &self,
        p: usize,
        q: usize,
        seasonal_p: usize,
        seasonal_q: usize,
        constant: bool,
    ) -> Orders {
        Orders {
            p,
            q,
            seasonal_p,
            seasonal_q,
            constant,
            harmonics: self.harmonics,
        }
    }

    /// Fit `o` by `estimator` (from `start` if given) and make its record (see
    /// [`CandidateBench::record`]).
    fn fit_candidate(
        &mut self,
        o: Orders,
        estimator: Estimator,
        start: Option<&crate::model::coefficients::FactorCoefficients>,
        ws: &mut FitWorkspace,
    ) -> (Candidate, Option<UnfinishedFit>) {
        let (d, sd, s) = (self.d, self.seasonal_d, self.period);
        // The period in force, as the blueprint has it: 1 without seasonal terms.
        let in_force = if o.seasonal_p + sd + o.seasonal_q == 0 {
            1
        } else {
            s
        };
        let mut shape = ModelShape::of_orders(
            [o.p, d, o.q],
            [o.seasonal_p, sd, o.seasonal_q],
            in_force,
            o.constant && d + sd == 0,
            o.constant && d + sd == 1,
        );
        shape.set_cycles(&self.cycles_of(o));
        // Standard errors and the forecasting state only for the chosen candidate (the
        // Hessian is 2k² + 1 evaluations; the state is a filter pass over the series).
        // Candidates with the same constant share their prepared data (same
        // differencing and regression columns): screened and differenced once.
        let fit = self.blueprint_of(o, estimator).and_then(|bp| {
            let prep = match self.prepared.get(&(o.constant, o.harmonics)) {
                Some(p) => p.reuse_for(&bp)?,
                None => crate::estimate::prepare(&bp, self.series, &[])?,
            };
            let fit = bp.fit_prepared_from(self.series, prep, start, ws)?;
            Ok(self.no_worse_than_nested(&bp, o, fit, ws))
        });
        if let Ok(u) = &fit {
            self.prepared
                .entry((o.constant, o.harmonics))
                .or_insert_with(|| u.prepared().clone());
        }
        self.record(fit, shape, estimator == self.settings.estimator, ws)
    }

    /// The record of a fit: the whiteness gate on its residuals, its log-likelihood and
    /// criterion (exact fits, or CSS fits when CSS is the search's estimator), its
    /// screening value (CSS fits), or why it failed. Fits with near-cancelling roots are
    /// recorded as failed and not kept.
    fn record(
        &self,
        fit: Result<UnfinishedFit>,
        shape: ModelShape,
        refitted: bool,
        ws: &mut FitWorkspace,
    ) -> (Candidate, Option<UnfinishedFit>) {
        let mut cand = Candidate {
            shape,
            criterion: None,
            log_likelihood: None,
            whiteness_p: None,
            adequate: false,
            failure: None,
            screening_value: None,
            refitted,
        };
        let kept = match fit {
            Ok(u) if cancelling(u.model()) => {
                // Discarded, and not a stepping stone either: navigating through such
                // fits (the (2,2) start is often one) led the search into large orders
                // at several times the cost without better recovery.
                cand.failure =
                    Some("near-cancelling AR and MA roots (redundant parameters)".into());
                None
            }
            Ok(u) => {
                let m = u.model();
                let h = m.default_check_lags();
                match m.residual_check(h, self.settings.alpha) {
                    Ok(check) => {
                        cand.whiteness_p =
                            check.portmanteau.row(h).and_then(|r| r.ljung_box_p_value);
                        cand.adequate = check.white;
                    }
                    Err(e) => cand.failure = Some(format!("residual check: {e}")),
                }
                let criterion = self.settings.criterion;
                if m.log_likelihood().is_exact() {
                    cand.log_likelihood = Some(m.log_likelihood().value());
                    cand.criterion = m.criteria().ok().and_then(|ic| ic.value(criterion));
                } else {
                    cand.screening_value = screening_value(&u, criterion, ws);
                    if refitted {
                        // The search's own estimator is CSS: rank by the screening value.
                        cand.log_likelihood = Some(m.log_likelihood().value());
                        cand.criterion = cand.screening_value;
                    }
                }
                let ranked = if self.screen && !refitted {
                    cand.screening_value
                } else {
                    cand.criterion
                };
                if ranked.is_none() && cand.failure.is_none() {
                    cand.failure = Some(format!("{criterion} undefined"));
                }
                Some(u)
            }
            Err(e) => {
                cand.failure = Some(e.to_string());
                None
            }
        };
        (cand, kept)
    }

    /// After a screening walk: refit the finalists by the search's estimator. Finalists are the screened candidates whose CSS residuals pass
    /// the whiteness gate, by screening value, then the others; of the first
    /// [`SearchSettings::finalists`] (as many again when none passes the gate after its
    /// refit) those that could still win are refitted. Last, every refit is checked
    /// against the refitted candidates nested in it, smallest first (item of
    /// [`CandidateBench::no_worse_than_nested`]), since they were refitted in the order of
    /// promise rather than size.
    fn refit_finalists(&mut self, ws: &mut FitWorkspace) {
        if !self.screen || self.settings.estimator == Estimator::ConditionalSumOfSquares {
            return;
        }
        let mut order: Vec<usize> = (0..self.tried.len())
            .filter(|&i| self.fits[i].is_some() && self.tried[i].screening_value.is_some())
            .collect();
        order.sort_by(|&i, &j| {
            let (a, b) = (&self.tried[i], &self.tried[j]);
            b.adequate.cmp(&a.adequate).then(
                a.screening_value
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.screening_value.unwrap_or(f64::INFINITY)),
            )
        });
        let k = self.settings.finalists;
        // A refit can only lower a candidate's criterion below its screening value (the
        // exact maximum is at least the likelihood at the CSS estimates) by about as much
        // as it lowered the others': a candidate is refitted only while its screening value,
        // less twice the largest improvement seen so far and one unit, is below the best
        // adequate refitted criterion — it could still win. The first is always refitted.
        // The best criterion among the adequate refits: only they can be chosen over
        // another adequate candidate, so a candidate is skipped only when it could not
        // beat them (never while no refit has passed the gate).
        let mut best = f64::INFINITY;
        let mut gain: f64 = 0.0;
        for round in order.chunks(k).take(2) {
            for &i in round {
                let screened = self.tried[i].screening_value.unwrap_or(f64::INFINITY);
                if screened - 2.0 * gain - 1.0 >= best {
                    continue;
                }
                // Refitted from scratch (its CSS stage repeats the screening fit, which is
                // cheap), so that the chosen model is bit for bit a plain fit of its
                // blueprint, and the exact stage gets the CSS curvature handed over.
                let (mut cand, kept) =
                    self.fit_candidate(self.orders[i], self.settings.estimator, None, ws);
                cand.screening_value = self.tried[i].screening_value;
                cand.refitted = true;
                if let Some(c) = cand.criterion {
                    gain = gain.max(screened - c);
                    if cand.adequate {
                        best = best.min(c);
                    }
                }
                self.tried[i] = cand;
                self.fits[i] = kept;
            }
            if self
                .tried
                .iter()
                .any(|c| c.refitted && c.adequate && c.criterion.is_some())
            {
                break;
            }
        }
        let mut refitted: Vec<usize> = (0..self.tried.len())
            .filter(|&i| self.tried[i].refitted && self.fits[i].is_some())
            .collect();
        refitted.sort_by_key(|&i| {
            let o = self.orders[i];
            (
                o.p + o.q + o.seasonal_p + o.seasonal_q + o.harmonics.iter().sum::<usize>(),
                o.constant,
            )
        });
        for i in refitted {
            let Some(fit) = self.fits[i].take() else {
                continue;
            };
            let before = fit.model().log_likelihood().value();
            let Ok(bp) = self.blueprint_of(self.orders[i], self.settings.estimator) else {
                self.fits[i] = Some(fit);
                continue;
            };
            let checked = self.no_worse_than_nested(&bp, self.orders[i], fit, ws);
            if checked.model().log_likelihood().value() > before {
                let (mut cand, kept) = self.record(Ok(checked), self.tried[i].shape, true, ws);
                cand.screening_value = self.tried[i].screening_value;
                self.tried[i] = cand;
                self.fits[i] = kept;
            } else {
                self.fits[i] = Some(checked);
            }
        }
    }
}

/// The screening value of a CSS fit: the criterion from the exact log-likelihood at the
/// CSS estimates (one filter pass; a lower bound on the exact maximum, close to it when
/// the CSS estimates are good). Screening by the CSS objective itself, as in the
/// approximation of Hyndman & Khandakar (2008, §3), ranks candidates on different
/// readings — each conditions on its own `p + P·s` — and with a seasonal MA term the
/// first cycle's residuals carry the zeroed pre-sample innovations, so that every model
/// with a seasonal AR term (which skips that cycle) looked better than the true one.
fn screening_value(
    fit: &UnfinishedFit,
    criterion: Criterion,
    ws: &mut FitWorkspace,
) -> Option<f64> {
    let (ll, present) = fit.exact_log_likelihood_at_estimates(ws)?;
    crate::stats::criteria::InformationCriteria::from_log_likelihood(
        ll,
        fit.model().estimated_parameters(),
        present,
    )
    .ok()
    .and_then(|ic| ic.value(criterion))
}

impl CandidateBench<'_> {
    /// A candidate's optimum is never worse than that of a candidate nested in it
    /// (smaller or equal orders, a constant only if the candidate has one): the larger
    /// model contains the smaller, so its maximum is at least as high. If a nested,
    /// already fitted candidate has a higher log-likelihood, the candidate is fitted again
    /// from the nested estimates (padded with zeros) and the better of the two fits kept.
    fn no_worse_than_nested(
        &self,
        bp: &Blueprint,
        o: Orders,
        fit: UnfinishedFit,
        ws: &mut FitWorkspace,
    ) -> UnfinishedFit {
        let ll = |u: &UnfinishedFit| u.model().log_likelihood().value();
        let nested = self
            .seen
            .iter()
            .filter(|(n, _)| {
                **n != o
                    && n.p <= o.p
                    && n.q <= o.q
                    && n.seasonal_p <= o.seasonal_p
                    && n.seasonal_q <= o.seasonal_q
                    && (!n.constant || o.constant)
                    && n.harmonics.iter().zip(&o.harmonics).all(|(a, b)| a <= b)
            })
            .filter_map(|(_, &i)| self.fits[i].as_ref())
            .filter(|n| {
                n.model().log_likelihood().is_exact() == fit.model().log_likelihood().is_exact()
            })
            .max_by(|a, b| ll(a).total_cmp(&ll(b)));
        let Some(best_nested) = nested else {
            return fit;
        };
        if !fit.model().log_likelihood().is_exact() {
            // CSS fits condition on p + P·s readings: a larger model's conditional
            // likelihood covers fewer readings, so nesting says nothing about it.
            return fit;
        }
        if ll(best_nested) <= ll(&fit) + 1e-6 {
            return fit;
        }
        let mut start = best_nested.coefficients().clone();
        let lens = [o.p, o.q, o.seasonal_p, o.seasonal_q];
        for (factor, len) in crate::model::coefficients::Factor::ALL
            .into_iter()
            .zip(lens)
        {
            start.of_mut(factor).resize(len, 0.0);
        }
        let prep = fit.prepared().clone();
        match bp.fit_prepared_from(self.series, prep, Some(&start), ws) {
            Ok(again) if ll(&again) > ll(&fit) => again,
            _ => fit,
        }
    }
}

/// The series less its harmonic shape: least squares of the present readings on a
/// constant and every harmonic term of `cycles` at their most harmonics, the fit
/// subtracted (missing readings stay missing). `None` without cycles or when the least
/// squares cannot be solved.
fn decycled(series: &[f64], cycles: &[Cycle]) -> Option<Vec<f64>> {
    use crate::model::coefficients::Term;
    if cycles.is_empty() {
        return None;
    }
    // The columns on the whole axis, as a fit builds them (the constant first).
    let n = series.len();
    let columns: Vec<Vec<f64>> = std::iter::once(Term::Mean)
        .chain(crate::model::cycles::harmonic_terms(cycles, 0, 1))
        .map(|term| crate::estimate::regression_column(term, n, &[]))
        .collect();
    let present: Vec<usize> = (0..n).filter(|&t| !series[t].is_nan()).collect();
    let rows = |v: &[f64]| present.iter().map(|&t| v[t]).collect::<Vec<f64>>();
    let (b, _) = crate::base::linalg::least_squares_owned(
        columns.iter().map(|c| rows(c)).collect(),
        rows(series),
    )?;
    let mut out = series.to_vec();
    for (column, bk) in columns.iter().zip(&b) {
        for (o, x) in out.iter_mut().zip(column) {
            *o -= bk * x;
        }
    }
    Some(out)
}

/// Choose the harmonics of each cycle before the walk: with a working error model
/// (ARMA(1,1), with a seasonal MA term at a seasonal period, within the bounds), each
/// cycle's count is scanned from 0 to its bound while the others are held, keeping the
/// best ranking value; two sweeps at most. The walk then searches the ARMA orders at
/// these harmonics, and [`refine_harmonics`] revisits them with the walk's orders.
fn choose_harmonics(bench: &mut CandidateBench<'_>, ws: &mut FitWorkspace) {
    let b = bench.bounds;
    let seasonal_q = if bench.period > 1 {
        1.min(b.seasonal_q)
    } else {
        0
    };
    let constant = bench.constant_allowed();
    let mut o = bench.orders(1.min(b.p), 1.min(b.q), 0, seasonal_q, constant);
    for _sweep in 0..2 {
        let mut changed = false;
        for i in 0..bench.cycles.len() {
            let mut best = (
                bench.evaluate(o, ws).unwrap_or(f64::INFINITY),
                o.harmonics[i],
            );
            for k in 0..=bench.cycles[i].harmonics {
                let mut next = o;
                next.harmonics[i] = k;
                if let Some(v) = bench.evaluate(next, ws)
                    && v < best.0
                {
                    best = (v, k);
                }
            }
            if best.1 != o.harmonics[i] {
                o.harmonics[i] = best.1;
                changed = true;
            }
        }
        if !changed {
            break;
        }
    }
    bench.harmonics = o.harmonics;
}

/// After the walk: from the best candidate (adequate ones first), step each cycle's
/// harmonics by ±1 with its ARMA orders while the ranking value improves without losing
/// the whiteness gate.
fn refine_harmonics(bench: &mut CandidateBench<'_>, ws: &mut FitWorkspace) {
    let key = |bench: &CandidateBench<'_>, i: usize| {
        (
            !bench.tried[i].adequate,
            bench.ranking_value(i).unwrap_or(f64::INFINITY),
        )
    };
    let Some(start) = (0..bench.tried.len())
        .filter(|&i| bench.ranking_value(i).is_some())
        .min_by(|&i, &j| {
            let (a, b) = (key(bench, i), key(bench, j));
            a.0.cmp(&b.0).then(a.1.total_cmp(&b.1))
        })
    else {
        return;
    };
    let mut o = bench.orders[start];
    let mut at = key(bench, start);
    for _ in 0..2 * crate::model::cycles::MAX_HARMONICS {
        let mut moved = false;
        for i in 0..bench.cycles.len() {
            for k in [o.harmonics[i].wrapping_sub(1), o.harmonics[i] + 1] {
                if k > bench.cycles[i].harmonics {
                    continue;
                }
                let mut next = o;
                next.harmonics[i] = k;
                if bench.evaluate(next, ws).is_none() {
                    continue;
                }
                let Some(&j) = bench.seen.get(&next) else {
                    continue;
                };
                let there = key(bench, j);
                if there.0 <= at.0 && there.1 < at.1 {
                    o = next;
                    at = there;
                    moved = true;
                }
            }
        }
        if !moved {
            break;
        }
    }
}

/// The exhaustive walk: every order within the bounds, with and without a constant.
fn walk_exhaustive(bench: &mut CandidateBench<'_>, ws: &mut FitWorkspace) {
    let b = bench.bounds;
    let constants: &[bool] = if bench.constant_allowed() {
        &[false, true]
    } else {
        &[false]
    };
    for p in 0..=b.p {
        for q in 0..=b.q {
            for seasonal_p in 0..=b.seasonal_p {
                for seasonal_q in 0..=b.seasonal_q {
                    for &constant in constants {
                        let o = bench.orders(p, q, seasonal_p, seasonal_q, constant);
                        bench.evaluate(o, ws);
                    }
                }
            }
        }
    }
}

/// The stepwise walk (after Hyndman & Khandakar 2008): their four starting models and
/// the orders the correlogram proposes ([`proposed_orders`]), then best-first over the
/// neighbourhood graph — each of p, q, P, Q by ±1, p and q (P and Q) together by ±1,
/// one traded for the other (p−1 with q+1 and the reverse: without these the walk stopped
/// at AR(2) for a quarter of the ARMA(1,1) series in the recovery study), and the constant
/// toggled. Each round expands the best-scored candidate
/// not expanded yet among the best `beam`, skipping any more than `NEAR_TIE` criterion
/// units behind the leader; the walk ends when none is left. A beam of one is the plain
/// stepwise rule. A beam of two (on request) also follows a near-tied runner-up: the
/// plain rule stops in the first local minimum, e.g. ARMA(1,2) for AR(2) data, whose
/// runner-up ARMA(2,1) leads on to AR(2). (An unbounded beam of two that also stepped
/// through discarded near-cancelling fits wandered into large orders at 14× the cost.)
fn walk_stepwise(bench: &mut CandidateBench<'_>, ws: &mut FitWorkspace) {
    const NEAR_TIE: f64 = 2.0;
    let seasonal = bench.period > 1;
    let b = bench.bounds;
    let c0 = bench.constant_allowed();
    let starts: [(usize, usize, usize, usize); 4] = if seasonal {
        [(2, 2, 1, 1), (0, 0, 0, 0), (1, 0, 1, 0), (0, 1, 0, 1)]
    } else {
        [(2, 2, 0, 0), (0, 0, 0, 0), (1, 0, 0, 0), (0, 1, 0, 0)]
    };
    let beam = if bench.settings.explore_near_ties {
        2
    } else {
        1
    };
    let mut scored: Vec<(Orders, f64)> = Vec::new();
    let note = |o: Orders, v: Option<f64>, scored: &mut Vec<(Orders, f64)>| {
        if let Some(v) = v
            && !scored.iter().any(|e| e.0 == o)
        {
            scored.push((o, v));
        }
    };
    let proposed = proposed_orders(bench);
    for (p, q, sp, sq) in starts.into_iter().chain(proposed) {
        let o = bench.orders(
            p.min(b.p),
            q.min(b.q),
            sp.min(b.seasonal_p),
            sq.min(b.seasonal_q),
            c0,
        );
        let v = bench.evaluate(o, ws);
        note(o, v, &mut scored);
    }
    let mut expanded: Vec<Orders> = Vec::new();
    for _round in 0..100 {
        scored.sort_by(|x, y| x.1.total_cmp(&y.1));
        let lead = scored.first().map_or(f64::INFINITY, |e| e.1);
        let Some(&(o, _)) = scored
            .iter()
            .take(beam)
            .filter(|e| e.1 <= lead + NEAR_TIE)
            .find(|e| !expanded.contains(&e.0))
        else {
            break;
        };
        expanded.push(o);
        let c = o.constant;
        let mut moves: Vec<(isize, isize, isize, isize, bool)> = vec![
            (-1, 0, 0, 0, c),
            (1, 0, 0, 0, c),
            (0, -1, 0, 0, c),
            (0, 1, 0, 0, c),
            (-1, -1, 0, 0, c),
            (1, 1, 0, 0, c),
            (-1, 1, 0, 0, c),
            (1, -1, 0, 0, c),
            (0, 0, 0, 0, !c),
        ];
        if seasonal {
            moves.extend([
                (0, 0, -1, 0, c),
                (0, 0, 1, 0, c),
                (0, 0, 0, -1, c),
                (0, 0, 0, 1, c),
                (0, 0, -1, -1, c),
                (0, 0, 1, 1, c),
                (0, 0, -1, 1, c),
                (0, 0, 1, -1, c),
            ]);
        }
        for (dp, dq, dsp, dsq, constant) in moves {
            let step = |v: usize, dv: isize| v.checked_add_signed(dv);
            let (Some(p), Some(q), Some(seasonal_p), Some(seasonal_q)) = (
                step(o.p, dp),
                step(o.q, dq),
                step(o.seasonal_p, dsp),
                step(o.seasonal_q, dsq),
            ) else {
                continue;
            };
            let next = Orders {
                p,
                q,
                seasonal_p,
                seasonal_q,
                constant,
                harmonics: o.harmonics,
            };
            let v = bench.evaluate(next, ws);
            note(next, v, &mut scored);
        }
    }
}

/// Orders proposed by the correlogram of the differenced series, as an analyst reads it:
/// a partial autocorrelation that cuts off after lag p proposes AR(p), an
/// autocorrelation that cuts off after lag q proposes MA(q), and when neither cuts off
/// within two lags, ARMA(1,1); the same at the seasonal lags s, 2s, 3s for P and Q. A
/// sequence "cuts off after k" when the next three lags (two at seasonal lags) lie inside
/// its 95% band: `±1.96/√N` for the PACF, Bartlett's band given the shorter lags for the
/// ACF. Every pairing of a non-seasonal with a seasonal
/// proposal within the bounds is returned (empty when the correlogram cannot be computed).
fn proposed_orders(bench: &CandidateBench<'_>) -> Vec<(usize, usize, usize, usize)> {
    let s = bench.period;
    let source = bench.decycled.as_deref().unwrap_or(bench.series);
    let w = crate::estimate::difference(source, bench.d, bench.seasonal_d, s);
    let n = w.iter().filter(|v| !v.is_nan()).count();
    let short = 12.min(if s > 1 { s - 1 } else { 12 }).min(n / 4);
    let max_lag = if s > 1 { (3 * s).min(n / 2) } else { short };
    if short == 0 {
        return Vec::new();
    }
    let Ok(cg) = crate::stats::correlogram::Correlogram::compute(&w, max_lag) else {
        return Vec::new();
    };
    // The PACF beyond an AR order has the white-noise band (Quenouille); the ACF beyond an
    // MA order has Bartlett's band given all shorter lags, wider where the series is
    // correlated at short lags — at the seasonal lags the white-noise band would see a
    // cut-off in sampling noise.
    let (Ok(partial_band), Ok(acf_band)) = (
        cg.partial_band(0.95),
        cg.bands(
            0.95,
            crate::stats::correlogram::BandRule::BartlettCumulative,
        ),
    ) else {
        return Vec::new();
    };
    // Number of leading lags before the cut-off (`lags.len()` when there is none).
    let cut = |value: &dyn Fn(usize) -> Option<(f64, f64)>, lags: &[usize], window: usize| {
        let inside = |lag: usize| value(lag).is_some_and(|(v, band)| v.abs() <= band);
        (0..=lags.len())
            .find(|&k| lags[k..].iter().take(window).all(|&lag| inside(lag)))
            .unwrap_or(lags.len())
    };
    let acf = |lag: usize| Some((cg.autocorrelation(lag)?, acf_band.at(lag)?));
    let pacf = |lag: usize| Some((cg.partial_autocorrelation(lag)?, partial_band));
    let b = bench.bounds;
    let propose = |lags: &[usize], window: usize, max_p: usize, max_q: usize| {
        let p = cut(&pacf, lags, window);
        let q = cut(&acf, lags, window);
        let mut out: Vec<(usize, usize)> = Vec::new();
        if p <= max_p {
            out.push((p, 0));
        }
        if q <= max_q && !out.contains(&(0, q)) {
            out.push((0, q));
        }
        if p > 2 && q > 2 {
            out.push((1.min(max_p), 1.min(max_q)));
        }
        out
    };
    let ordinary: Vec<usize> = (1..=short).collect();
    let plain = propose(&ordinary, 3, b.p, b.q);
    let seasonal = if s > 1 {
        let lags: Vec<usize> = (1..=3).map(|k| k * s).filter(|&l| l <= max_lag).collect();
        if lags.is_empty() {
            vec![(0, 0)]
        } else {
            propose(&lags, 2, b.seasonal_p, b.seasonal_q)
        }
    } else {
        vec![(0, 0)]
    };
    let mut out = Vec::new();
    for &(p, q) in &plain {
        for &(sp, sq) in &seasonal {
            if !out.contains(&(p, q, sp, sq)) {
                out.push((p, q, sp, sq));
            }
        }
    }
    out
}

/// Selection behind the gate: the candidate with the lowest criterion among the adequate
/// ones, else among all (flagged `false`); an error when no candidate could be fitted.
fn select(tried: &[Candidate]) -> Result<(usize, bool)> {
    if let Some(i) = best_of(tried, true) {
        return Ok((i, true));
    }
    if let Some(i) = best_of(tried, false) {
        return Ok((i, false));
    }
    let reasons: Vec<String> = tried
        .iter()
        .filter_map(|c| c.failure.clone())
        .take(3)
        .collect();
    Err(Error::new(ErrorKind::NumericalFailure {
        what: WHAT,
        message: format!(
            "no candidate could be fitted ({} tried): {}",
            tried.len(),
            reasons.join("; ")
        ),
    }))
}

/// The candidate with the lowest criterion value (adequate ones only if asked).
fn best_of(tried: &[Candidate], adequate_only: bool) -> Option<usize> {
    tried
        .iter()
        .enumerate()
        .filter(|(_, c)| c.criterion.is_some() && (!adequate_only || c.adequate))
        .min_by(|a, b| {
            a.1.criterion
                .unwrap_or(f64::INFINITY)
                .total_cmp(&b.1.criterion.unwrap_or(f64::INFINITY))
        })
        .map(|(i, _)| i)
}

/// The explanation of the choice, in prose: the differencing evidence, the walk, the
/// chosen candidate and why a candidate with a lower criterion was passed over.
fn explain(
    settings: &SearchSettings,
    differencing: &DifferencingChoice,
    tried: &[Candidate],
    idx: usize,
    adequate: bool,
) -> String {
    let chosen = &tried[idx];
    let refitted = tried.iter().filter(|c| c.refitted).count();
    let walk = if settings.exhaustive {
        "exhaustive".to_string()
    } else if tried.iter().any(|c| c.screening_value.is_some())
        && settings.estimator != Estimator::ConditionalSumOfSquares
    {
        format!(
            "stepwise, screened by CSS fits ranked on the exact likelihood at their estimates; {refitted} refitted by {}",
            settings.estimator
        )
    } else {
        "stepwise".to_string()
    };
    let mut explanation = format!(
        "{}. Tried {} candidates ({walk}); chose {} with {} = {:.3}",
        differencing.evidence,
        tried.len(),
        chosen.label(),
        settings.criterion,
        chosen.criterion.unwrap_or(f64::NAN)
    );
    if adequate {
        explanation.push_str(&format!(
            ", residuals white (Ljung–Box p = {:.3})",
            chosen.whiteness_p.unwrap_or(f64::NAN)
        ));
        if let Some(b) = best_of(tried, false).map(|i| &tried[i])
            && b.label() != chosen.label()
        {
            explanation.push_str(&format!(
                "; {} had a lower {} ({:.3}) but failed the whiteness gate",
                b.label(),
                settings.criterion,
                b.criterion.unwrap_or(f64::NAN)
            ));
        }
    } else {
        explanation.push_str("; NO candidate passed the whiteness gate: this is the best inadequate one, do not trust its significance");
    }
    explanation.push('.');
    if !settings.cycles.is_empty() {
        let bounds: Vec<String> = settings
            .cycles
            .iter()
            .map(|c| format!("{} at period {}", c.harmonics, c.period))
            .collect();
        explanation.push_str(&format!(
            " Harmonics per cycle chosen by {} (at most {}).",
            settings.criterion,
            bounds.join(", ")
        ));
    }
    explanation
}

impl std::fmt::Display for SearchOutcome {
    /// The explanation, then the candidates ranked by criterion value (adequate ones
    /// first), each with the order it was tried in, its whiteness p-value and verdict.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(f, "{}", self.explanation)?;
        let chosen = self.model.blueprint().shape();
        let mut order: Vec<usize> = (0..self.candidates.len()).collect();
        order.sort_by(|&i, &j| {
            let (a, b) = (&self.candidates[i], &self.candidates[j]);
            let key = |c: &Candidate| {
                if c.refitted {
                    c.criterion
                } else {
                    c.screening_value
                }
                .unwrap_or(f64::INFINITY)
            };
            b.refitted
                .cmp(&a.refitted)
                .then(b.adequate.cmp(&a.adequate))
                .then(key(a).total_cmp(&key(b)))
        });
        let screened = self.candidates.iter().any(|c| c.screening_value.is_some());
        // The model column is as wide as the longest label (labels with harmonics run long).
        let width = self
            .candidates
            .iter()
            .map(|c| c.label().chars().count())
            .max()
            .unwrap_or(0)
            .max(32);
        writeln!(
            f,
            "   {:>4}  {:<width$} {:>12} {:>11}{}  verdict",
            "try",
            "model",
            "criterion",
            "whiteness p",
            if screened {
                format!(" {:>12}", "screened at")
            } else {
                String::new()
            }
        )?;
        for i in order {
            let c = &self.candidates[i];
            let crit = c.criterion.map_or("—".into(), |v| format!("{v:.3}"));
            let p = c.whiteness_p.map_or("—".into(), |v| format!("{v:.3}"));
            let screen = if screened {
                format!(
                    " {:>12}",
                    c.screening_value.map_or("—".into(), |v| format!("{v:.3}"))
                )
            } else {
                String::new()
            };
            let verdict = match (&c.failure, c.adequate, c.refitted) {
                (Some(e), _, _) => format!("failed: {e}"),
                (None, true, true) => "adequate".into(),
                (None, false, true) => "inadequate: residuals not white".into(),
                (None, true, false) => "screened out (CSS residuals white)".into(),
                (None, false, false) => "screened out (CSS residuals not white)".into(),
            };
            let mark = if c.shape == chosen {
                "  ◀ chosen"
            } else {
                ""
            };
            writeln!(
                f,
                "   {:>4}  {:<width$} {:>12} {:>11}{screen}  {verdict}{mark}",
                i + 1,
                c.label(),
                crit,
                p,
            )?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::simulate::Simulator;

    /// The daily-cycle issue's false convergence, simulated with a fixed seed:
    /// SARIMA(1,0,1)×(0,1,1)₉₆ (φ 0.6, θ 0.3, Θ −0.6, level 60, 2,016 readings, seed 1).
    /// A plain fit of (2,0,2)×(2,1,2)₉₆ with drift stops at a local optimum (log L
    /// −2730.718, its gradient test holding) below the same model without drift
    /// (−2729.838), which it contains. In a search neither may be ranked on a value below
    /// the nested optimum: refused with a reason, or refitted from the nested estimates
    /// and reported at least as high.
    #[test]
    fn a_candidate_is_never_below_the_fitted_candidate_nested_in_it() {
        let sim = Simulator::builder()
            .autoregressive(&[0.6])
            .moving_average(&[0.3])
            .seasonal(&[], &[-0.6], 96)
            .differencing(0, 1)
            .level(60.0)
            .build()
            .unwrap();
        let x = sim.generate(2016, 1);
        let plain = |drift: bool| {
            Blueprint::builder()
                .nonseasonal(2, 0, 2)
                .seasonal(2, 1, 2, 96)
                .drift_term(drift)
                .build()
                .unwrap()
                .fit(&x)
                .unwrap()
                .log_likelihood()
                .value()
        };
        let (without, with) = (plain(false), plain(true));
        // The case still reproduces outside a search (if a plain fit ever reaches the
        // higher optimum, this test no longer exercises the repair: find another case).
        assert!(
            with < without - 0.5,
            "plain fits: {with} with drift, {without} without"
        );
        let settings = SearchSettings::builder()
            .period(96)
            .differencing(0, 1)
            .max_orders(2, 2, 2, 2)
            .screening(false)
            .build()
            .unwrap();
        let choice = DifferencingChoice {
            d: 0,
            seasonal_d: 1,
            evidence: String::new(),
        };
        let mut bench = CandidateBench::new(&x, None, &settings, &choice);
        let mut ws = FitWorkspace::new();
        for constant in [false, true] {
            let o = bench.orders(2, 2, 2, 2, constant);
            bench.evaluate(o, &mut ws);
        }
        // Neither candidate is ranked on a value below the nested optimum: a candidate is
        // either refused (here both are, for near-cancelling roots — which is how the
        // search now avoids ranking this pair) or reported at least as high.
        assert_eq!(bench.tried.len(), 2);
        for c in &bench.tried {
            if let Some(l) = c.log_likelihood {
                assert!(
                    l >= without - 1e-6,
                    "{c:?} below the nested optimum {without}"
                );
            } else {
                assert!(c.failure.is_some(), "{c:?}");
            }
        }
    }

    fn proposals(
        x: &[f64],
        period: usize,
        d: usize,
        sd: usize,
    ) -> Vec<(usize, usize, usize, usize)> {
        let settings = SearchSettings::builder().period(period).build().unwrap();
        let choice = DifferencingChoice {
            d,
            seasonal_d: sd,
            evidence: String::new(),
        };
        proposed_orders(&CandidateBench::new(x, None, &settings, &choice))
    }

    /// The correlogram proposes what an analyst would read off it (textbook signatures,
    /// from memory: an AR(p) PACF cuts off after p, an MA(q) ACF after q, a seasonal MA
    /// leaves one spike at lag s in the ACF). Rates over 40 seeds at n = 500, since any
    /// one sample may cross the 95% band by chance.
    #[test]
    fn correlogram_proposes_the_textbook_orders() {
        let ar2 = Simulator::builder()
            .autoregressive(&[0.5, 0.3])
            .build()
            .unwrap();
        let ma1 = Simulator::builder().moving_average(&[0.6]).build().unwrap();
        let seasonal = Simulator::builder()
            .autoregressive(&[0.6])
            .seasonal(&[], &[-0.6], 12)
            .differencing(0, 1)
            .build()
            .unwrap();
        let rate = |f: &dyn Fn(u64) -> bool| (0..40u64).filter(|&s| f(s)).count();
        let ar =
            rate(&|s| proposals(&ar2.generate(500, 4_000 + s), 1, 0, 0).contains(&(2, 0, 0, 0)));
        let ma =
            rate(&|s| proposals(&ma1.generate(500, 4_100 + s), 1, 0, 0).contains(&(0, 1, 0, 0)));
        let sea = rate(&|s| {
            proposals(&seasonal.generate(500, 4_200 + s), 12, 0, 1).contains(&(1, 0, 0, 1))
        });
        assert!(ar >= 28, "AR(2) proposed in {ar} of 40");
        assert!(ma >= 28, "MA(1) proposed in {ma} of 40");
        eprintln!("proposed in 40: AR(2) {ar}, MA(1) {ma}, (1,0,0)(0,1,1) {sea}");
        assert!(sea >= 24, "(1,0,0)(0,1,1) proposed in {sea} of 40");
        // White noise proposes the empty model; a series too short for a correlogram
        // proposes nothing and the walk keeps its fixed starts.
        let wn = Simulator::builder().build().unwrap();
        let empty =
            rate(&|s| proposals(&wn.generate(500, 4_300 + s), 1, 0, 0).contains(&(0, 0, 0, 0)));
        eprintln!("white noise: (0,0) in {empty}");
        assert!(empty >= 24, "white noise: (0,0) proposed in {empty} of 40");
        assert!(proposals(&[1.0, 2.0, 1.5], 1, 0, 0).is_empty());
    }
}
