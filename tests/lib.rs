//! The one integration-test binary (see DEVELOPERS.md): every file under tests/ that
//! holds tests is a module here, so the suite links once.

#![allow(clippy::needless_range_loop)]

mod bad_input_matrix;
mod common;
mod concurrency;
mod correlogram_reference;
mod covariance_reference;
mod cusum_reference;
mod cycle_checks;
mod estimation_checks;
mod events_checks;
mod fit_corpus;
mod fleet_checks;
mod forecast_checks;
mod forecast_reference;
mod fuzz_replay;
mod grid_checks;
mod harmonic_reference;
mod layers;
mod likelihood_reference;
mod persistence;
mod properties;
mod regression_reference;
mod robustness;
mod search_checks;
mod serialise_checks;
mod shape_reference;
mod shift_checks;
mod simulation_facts;
mod smoother_reference;
mod stuck_checks;
