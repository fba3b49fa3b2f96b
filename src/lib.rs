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
//! assert!(cg.autocorrelations()[1] > band[0]); // strongly autocorrelated
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
//! **Counting rule for criteria.** See [`criteria`]: `k` counts every estimated parameter,
//! σ² included.
//!
//! ## Modules
//! | module | what |
//! |---|---|
//! | [`correlogram`] | autocovariance, ACF, PACF, cross-correlation, bands |
//! | [`whiteness`] | Ljung–Box and Box–Pierce over lags `1..=H` |
//! | [`criteria`] | AIC, AICc, BIC, HQIC |
//! | [`lag`] | lag polynomials, roots, admissibility |
//! | [`synth`] | seeded SARIMA simulation |
//! | [`spec`] | [`Blueprint`]: the model specification and its builder |
//! | [`kalman`] | state-space form and exact likelihood |
//! | [`fitted`] | [`Blueprint::fit`], [`FittedModel`], residual checks, [`LikelihoodSurface`] |
//! | [`compare`] | ranking by criteria, nested likelihood-ratio test |
//! | [`forecast`] | [`Forecast`] with intervals, online [`Monitor`] |
//! | [`persist`] | versioned JSON storage |
//! | [`fleet`] | [`Fleet`]: many series in parallel |
//! | [`search`] | unit-root tests, automatic order search |
//!
//! ## Performance
//! Correlograms cost `O(n·H)` multiply-adds over cache-sized blocks and allocate only a
//! block buffer (reusable through [`CorrelogramScratch`]): 10⁷ readings to lag 200 in well
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
#![deny(missing_docs)]
#![warn(missing_debug_implementations, unreachable_pub)]
// `!(x > 0.0)` is used on purpose: it is true for NaN, which `x <= 0.0` is not.
#![allow(clippy::neg_cmp_op_on_partial_ord)]
// Numeric kernels index several arrays with one counter; iterator chains hide that.
#![allow(clippy::needless_range_loop)]

pub mod compare;
pub mod correlogram;
pub mod criteria;
mod error;
mod estimate;
pub mod fitted;
pub mod fleet;
pub mod forecast;
pub mod kalman;
pub mod lag;
mod lanes;
mod linalg;
pub mod persist;
pub mod search;
mod series;
pub mod spec;
pub mod synth;
pub mod whiteness;

pub use compare::{NestedTest, RankedModel, nested_likelihood_ratio, rank_by_criterion};
pub use correlogram::{
    BandRule, Correlogram, CorrelogramScratch, CrossCorrelogram, cross_correlogram,
    cross_correlogram_with,
};
pub use criteria::{Criterion, InformationCriteria};
pub use error::{Error, ErrorKind, Result};
pub use estimate::{StageRecord, StopReason};
pub use fitted::{
    CoefficientEstimate, FactorRoots, FitWarning, FitWorkspace, FittedModel, LikelihoodSurface,
    LogLikelihood, ReadingCounts, ResidualCheck,
};
pub use fleet::{
    FitSummary, Fleet, FleetBuilder, FleetReport, OptimisationDigest, Progress, WhitenessDigest,
};
pub use forecast::{Forecast, ForecastStep, Monitor, ReadingCheck};
pub use search::{SearchOutcome, SearchSettings, search_orders};
pub use spec::{Blueprint, BlueprintBuilder, Estimator, ModelShape, Term};
pub use synth::{Dropouts, Innovations, Simulator, SimulatorBuilder};
pub use whiteness::{PortmanteauRow, PortmanteauScan};

// The README's Rust examples are compiled and run as doc tests, so they cannot go stale.
#[doc = include_str!("../README.md")]
#[cfg(doctest)]
pub struct ReadmeDoctests;
