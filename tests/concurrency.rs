//! Compile-time guarantees: the public types a service shares between threads are
//! `Send + Sync` (a change that breaks this fails to compile this file).

fn shareable<T: Send + Sync>() {}

#[test]
fn public_types_are_send_and_sync() {
    shareable::<lagwise::Blueprint>();
    shareable::<lagwise::FittedModel>();
    shareable::<lagwise::Monitor>();
    shareable::<lagwise::Forecast>();
    shareable::<lagwise::Correlogram>();
    shareable::<lagwise::CrossCorrelogram>();
    shareable::<lagwise::PortmanteauScan>();
    shareable::<lagwise::InformationCriteria>();
    shareable::<lagwise::Simulator>();
    shareable::<lagwise::Fleet>();
    shareable::<lagwise::FitSummary>();
    shareable::<lagwise::WhitenessDigest>();
    shareable::<lagwise::OptimisationDigest>();
    shareable::<lagwise::ModelShape>();
    shareable::<lagwise::FleetReport<String>>();
    shareable::<lagwise::LikelihoodSurface>();
    shareable::<lagwise::FitWorkspace>();
    shareable::<lagwise::CorrelogramWorkspace>();
    shareable::<lagwise::SearchOutcome>();
    shareable::<lagwise::Error>();
}
