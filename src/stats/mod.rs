//! Layer 2, statistics of a series without a model: correlograms and their bands,
//! portmanteau tests, information criteria, unit-root and stationarity tests.

pub(crate) mod correlogram;
pub(crate) mod criteria;
pub(crate) mod cusum;
pub(crate) mod portmanteau;
pub(crate) mod shape;
pub(crate) mod stuck;
pub(crate) mod unitroot;
