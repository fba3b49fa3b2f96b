//! # lagwise
//!
//! ARMA/SARIMA modelling for fleets of sensor series: look at a series' autocorrelation,
//! fit a model, check that its residuals are white before trusting it, compare candidates
//! by information criteria, forecast with intervals, and watch new readings.
//!
//! ## Contents
//! - [Quick start](#quick-start)
//! - [Concepts](#concepts): missing readings, conventions, errors
//! - [Modules](#modules)
//! - [Performance](#performance)
//! - [Numerical guarantees and limits](#numerical-guarantees-and-limits)
//! - [Determinism](#determinism)
//!
//! ## Quick start
//! ```
//! use lagwise::{BandRule, Correlogram, PortmanteauScan, Simulator};
//! # fn main() -> Result<(), lagwise::Error> {
//! // A supply-temperature-like series: AR(1) wander around 88 °C.
//! let sim = Simulator::builder().autoregressive(&[0.9]).level(88.0).innovation_sd(0.2).build()?;
//! let readings = sim.generate(2_000, 417);
//!
//! let cg = Correlogram::compute(&readings, 24)?;
//! let band = cg.bands(0.95, BandRule::WhiteNoise)?;
//! assert!(cg.autocorrelation(1).unwrap() > band.at(1).unwrap()); // strongly autocorrelated
//!
//! // The raw readings are far from white noise:
//! let scan = PortmanteauScan::compute(&readings, 24, 0)?;
//! assert!(scan.row(24).unwrap().ljung_box_p_value.unwrap() < 1e-6);
//! # Ok(()) }
//! ```
//!
//! Fit, check, forecast and watch:
//! ```
//! use lagwise::{Blueprint, Simulator};
//! # fn main() -> Result<(), lagwise::Error> {
//! let x = Simulator::builder().autoregressive(&[0.7]).level(52.0).build()?.generate(800, 3);
//! let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x[..700])?;
//! assert!(fit.residual_check(fit.default_check_lags(), 0.05)?.white);
//! let day = fit.forecast(96, &[0.8, 0.95])?;
//! let mut watch = fit.monitor(0.999)?;
//! let flagged = watch.observe_batch(&x[700..])?.iter().filter(|c| c.outside).count();
//! assert!(flagged <= 2 && day.steps.len() == 96);
//! # Ok(()) }
//! ```
//!
//! ## Concepts
//! **Missing readings are NaN.** Every entry point accepts NaN as "no reading at this
//! time" and handles it (pairwise-complete sums in correlograms; skipped updates in the
//! Kalman filter). `±inf` is refused with [`ErrorKind::NonFiniteReading`], naming the index.
//!
//! **Sign convention.** `φ(B)(x_t − μ) = θ(B)e_t` with `φ(B) = 1 − φ₁B − …` and
//! `θ(B) = 1 + θ₁B + …`: a moving-average coefficient enters with a plus sign.
//!
//! **Errors.** One opaque [`Error`] with a matchable [`ErrorKind`]. Bad input and invalid
//! settings are typed errors, never panics; nothing the caller passes is mutated.
//!
//! **Long cycles.** A weekly cycle of 672 quarter-hour readings is described by a few
//! harmonics ([`BlueprintBuilder::cycle`], [`Cycle`]) estimated inside the likelihood
//! beside (S)ARMA errors; the phase counts readings from the first one of the fitted
//! series, and forecasts and monitors compute future terms themselves. The order search
//! chooses the number of harmonics per cycle ([`SearchSettingsBuilder::cycle`]).
//!
//! **Counting rule for criteria.** See [`InformationCriteria`]: `k` counts every estimated parameter,
//! σ² included.
//!
//! ## Map of the surface
//! Every public item lives at the crate root (`lagwise::Name`); the folders of the source
//! are layers of the implementation, not paths a caller writes. By step of the workflow:
//!
//! | step | items |
//! |---|---|
//! | put readings on a grid | [`place_on_grid`], [`place_evenly`], [`GridSettings`], [`SlotRule`], [`TimeAxis`], [`GriddedSeries`], [`millis_from_seconds`] |
//! | look at a series | [`Correlogram`], [`LagValues`], [`BandRule`], [`CrossCorrelogram`], [`PortmanteauScan`], [`augmented_dickey_fuller`], [`kpss`], [`seasonal_strength`], [`find_stuck_runs`] |
//! | say which model | [`Blueprint`], [`BlueprintBuilder`], [`Term`], [`Estimator`], [`Cycle`] (long cycles by harmonic terms) |
//! | lag polynomials | [`inverse_roots`] (conventions), [`is_stationary`], [`is_invertible`], [`psi_weights`], [`pi_weights`], [`multiply`], [`step_down`] |
//! | simulate | [`Simulator`], [`Innovations`], [`Dropouts`] |
//! | fit and explain | [`Blueprint::fit`], [`Blueprint::fit_gridded`], [`FittedModel`], [`ResidualCheck`] (with [`jarque_bera`], [`mcleod_li`]), [`ParameterCovariance`], [`LikelihoodSurface`], [`exact_log_likelihood`], [`reference_log_likelihood`] |
//! | compare | [`InformationCriteria`] (counting rule), [`rank_by_criterion`], [`nested_likelihood_ratio`] |
//! | forecast and watch | [`Forecast`], [`PredictionInterval`], [`Monitor`], [`ReadingCheck`], [`KnownModel`] |
//! | choose orders | [`search_orders`], [`SearchSettings`], [`SearchOutcome`] |
//! | store | [`model_to_json`] (format), [`model_from_json`], [`monitor_to_json`], [`blueprint_to_json`] |
//! | many series | [`Fleet`], [`FitSummary`], [`FleetReport`] |
//!
//! ## Serialised results
//! Results a dashboard needs serialise with serde under their Rust field names, which are
//! part of the stable surface: [`Correlogram`], [`CrossCorrelogram`], [`PortmanteauScan`]
//! (rows: [`PortmanteauRow`]), [`ResidualCheck`], [`SearchOutcome`] (with every
//! [`Candidate`]), [`Forecast`], [`ReadingCheck`], [`FitSummary`], [`GriddedSeries`].
//! Values keyed by lag are `{"first_lag": k, "values": [...]}` ([`LagValues`]); a missing
//! or undefined value is `null` (JSON has no NaN), and an absent p-value is `null` too.
//! Restoring checks that the parts fit together (a correlogram's lags, a scan's rows).
//! Stored models, monitors and blueprints have their own versioned envelope
//! ([`model_to_json`]).
//!
//! ## Performance
//! Correlograms cost `O(n·H)` multiply-adds over cache-sized blocks and allocate only a
//! block buffer (reusable through [`CorrelogramWorkspace`]): 10⁷ readings to lag 200 in well
//! under a second on one core. Building with `RUSTFLAGS="-C target-cpu=native"` enables
//! wider vector units and FMA; numbers in the README give both builds where it matters.
//!
//! ## Numerical guarantees and limits
//! - Means use a compensated two-pass sum on exactly rescaled values (powers of two), so
//!   readings near `±f64::MAX` neither overflow nor lose the certified digits of the
//!   NIST StRD NumAcc datasets.
//! - Autocorrelations lie in `[−1, 1]` and the sequence is positive semi-definite, so
//!   partial autocorrelations lie in `[−1, 1]` as well.
//!
//! ## Determinism
//! Simulation ([`Simulator`]) is bit-stable for a seed across platforms and versions.
//! Correlograms, portmanteau statistics and filter recursions are deterministic functions
//! of their input (fixed summation order). Fits go through an optimiser: they are
//! reproducible bit for bit on the same build and input, and across builds only to the
//! optimiser's tolerance. Fleet results are bit-identical whatever the thread count.
#![forbid(unsafe_code)]
// The other lints (missing docs denied, …) are set once for the workspace in the root
// Cargo.toml.

// The layers, bottom to top (DEVELOPERS.md has the map; `tests/layers.rs` holds the rule
// that a file uses only its own layer and the ones below).
mod base;
mod estimate;
mod filter;
mod fit;
mod fleet;
mod forecast;
mod model;
mod select;
mod stats;
mod store;

// The public surface: every public item is reachable at exactly one path, the crate root.
// ndarray is re-exported so that callers of `Fleet::fit_rows` use the version this crate
// was built with.
pub use base::error::{Error, ErrorKind, Result};
pub use base::grid::{
    GridReport, GridSettings, GridSettingsBuilder, GriddedSeries, MAX_GRID_SLOTS, SlotRule,
    TimeAxis, millis_from_seconds, place_evenly, place_on_grid,
};
pub use estimate::{StageRecord, StopReason};
pub use filter::kalman::{exact_log_likelihood, reference_log_likelihood};
pub use fit::compare::{NestedTest, RankedModel, nested_likelihood_ratio, rank_by_criterion};
pub use fit::fitted::{
    CoefficientEstimate, FactorRoots, FitWarning, FitWorkspace, FittedModel, LikelihoodSurface,
    LogLikelihood, NEAR_UNIT_MODULUS, ParameterCovariance, ReadingCounts, ResidualCheck,
};
pub use fleet::{
    FitSummary, Fleet, FleetBuilder, FleetReport, OptimisationDigest, Progress, SeriesOutcome,
    WhitenessDigest,
};
pub use forecast::{
    FilledReading, Forecast, ForecastStep, GapFill, KnownModel, Monitor, PredictionInterval,
    ReadingCheck, ShiftFinding, ShiftTest, ShiftTestBuilder,
};
pub use model::blueprint::{
    Blueprint, BlueprintBuilder, Estimator, MAX_EXPANDED_DEGREE, MAX_ORDER, MAX_PERIOD, ModelShape,
};
pub use model::coefficients::Term;
pub use model::cycles::{Cycle, MAX_CYCLE_PERIOD, MAX_CYCLES, MAX_HARMONICS};
pub use model::event::EventKind;
pub use model::lag::{
    Complex, expand_autoregressive, expand_moving_average, inverse_roots, is_invertible,
    is_stationary, multiply, pi_weights, psi_weights, step_down,
};
pub use model::simulate::{Dropouts, Innovations, Simulator, SimulatorBuilder};
pub use ndarray;
pub use select::events::{
    EventSearch, EventSettings, EventSettingsBuilder, SensorEvent, event_critical_value,
};
pub use select::search::{
    Candidate, DifferencingChoice, OrderBounds, SearchOutcome, SearchSettings,
    SearchSettingsBuilder, choose_differencing, search_orders, search_orders_with,
};
pub use stats::correlogram::{
    BandRule, Correlogram, CorrelogramWorkspace, CrossCorrelogram, LagValues, cross_correlogram,
    cross_correlogram_with, partial_from_autocorrelations,
};
pub use stats::criteria::{Criterion, InformationCriteria};
pub use stats::cusum::{cusum_run_length, cusum_threshold};
pub use stats::portmanteau::{LagPValue, PortmanteauRow, PortmanteauScan};
pub use stats::shape::{NormalityTest, VarianceChangeTest, jarque_bera, mcleod_li};
pub use stats::stuck::{DEFAULT_STUCK_RUN, StuckRun, find_stuck_runs, mask_runs};
pub use stats::unitroot::{
    CriticalValue, RootTest, TrendTerms, augmented_dickey_fuller, kpss, seasonal_strength,
};
pub use store::persist::{
    FORMAT_VERSION, blueprint_from_json, blueprint_to_json, model_from_json, model_to_json,
    model_to_json_keeping_residuals, monitor_from_json, monitor_to_json,
};

// The README's Rust examples are compiled and run as doc tests, so they cannot go stale.
#[doc = include_str!("../README.md")]
#[cfg(doctest)]
pub struct ReadmeDoctests;
