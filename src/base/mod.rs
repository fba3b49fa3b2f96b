//! Layer 1, the base: errors, screening of input series, small dense linear algebra and
//! the probability helpers every layer above uses.

pub(crate) mod dist;
pub(crate) mod error;
pub(crate) mod grid;
pub(crate) mod linalg;
pub(crate) mod nan_as_null;
pub(crate) mod screen;

/// Heap bytes a vector holds (its capacity, not its length): for workspace footprints.
pub(crate) fn vec_bytes<T>(v: &Vec<T>) -> usize {
    v.capacity() * std::mem::size_of::<T>()
}
