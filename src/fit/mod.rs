//! Layer 6, the fit: a blueprint fitted to a series, its checks and report, and the
//! comparison of fitted models.

pub(crate) mod compare;
pub(crate) mod fitted;
