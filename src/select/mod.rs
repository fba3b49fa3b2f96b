//! Layer 8, selection: choosing the differencing and the orders of a model automatically.

pub(crate) mod events;
pub(crate) mod search;
