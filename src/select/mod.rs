//! Layer 8, selection: choosing the differencing and the orders of a model automatically.

pub(crate) mod search;
