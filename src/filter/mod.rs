//! Layer 4, filters: the exact Kalman filter of the ARMA state-space form (stationary
//! start, Chandrasekhar and gap steps, steady state), the ring-indexed dense covariance
//! step both filters share, side-by-side innovations recursions
//! (lanes), and the forecasting filter on the original scale.

pub(crate) mod forecasting;
pub(crate) mod innovations;
pub(crate) mod kalman;
pub(crate) mod lanes;
pub(crate) mod patterns;
pub(crate) mod ring;
pub(crate) mod smoothing;
