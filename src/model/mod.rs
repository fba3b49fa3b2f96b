//! Layer 3, the model: its specification and builder, lag polynomials, the coefficients
//! of its factors, and seeded simulation.

pub(crate) mod blueprint;
pub(crate) mod coefficients;
pub(crate) mod cycles;
pub(crate) mod event;
pub(crate) mod lag;
pub(crate) mod simulate;
