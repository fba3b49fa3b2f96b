//! The cards, one file each.

pub(crate) mod correlogram;
pub(crate) mod fan;
pub(crate) mod residuals;
pub(crate) mod search;
pub(crate) mod watch;
