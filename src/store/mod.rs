//! Layer 9, storage: versioned JSON for blueprints, fitted models and monitors.

pub(crate) mod persist;
