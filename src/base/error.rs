//! The crate's one error type.

use std::fmt;

/// The error returned by every fallible lagwise routine.
///
/// The struct is deliberately opaque (one boxed [`ErrorKind`]) so that `Result<T, Error>`
/// stays one pointer wide and new kinds can be added without breaking callers.
///
/// ```
/// use lagwise::{Correlogram, ErrorKind};
/// let err = Correlogram::compute(&[1.0, f64::INFINITY, 2.0], 1).unwrap_err();
/// assert!(matches!(err.kind(), ErrorKind::NonFiniteReading { index: 1, .. }));
/// assert!(err.to_string().contains("reading 1"));
/// ```
///
/// [`Error`] is an opaque struct; match on [`Error::kind`] to react to a particular
/// failure. Every message names the entry point that failed (`what`) and the offending
/// value or position, so a log line is enough to find the bad reading.
#[derive(Clone, PartialEq)]
pub struct Error {
    kind: Box<ErrorKind>,
}

impl Error {
    /// What went wrong, as a matchable value.
    pub fn kind(&self) -> &ErrorKind {
        &self.kind
    }

    /// Consume the error and return its kind.
    pub fn into_kind(self) -> ErrorKind {
        *self.kind
    }

    pub(crate) fn new(kind: ErrorKind) -> Self {
        Error {
            kind: Box::new(kind),
        }
    }

    pub(crate) fn invalid(what: &'static str, message: impl Into<String>) -> Self {
        Error::new(ErrorKind::InvalidArgument {
            what,
            message: message.into(),
        })
    }

    pub(crate) fn numerical(what: &'static str, message: impl Into<String>) -> Self {
        Error::new(ErrorKind::NumericalFailure {
            what,
            message: message.into(),
        })
    }
}

impl From<ErrorKind> for Error {
    fn from(kind: ErrorKind) -> Self {
        Error::new(kind)
    }
}

impl fmt::Debug for Error {
    // Readable under `unwrap()`: the message first, the structured kind after.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "lagwise::Error({}) [{:?}]", self.kind, self.kind)
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        fmt::Display::fmt(&self.kind, f)
    }
}

impl std::error::Error for Error {}

/// The kinds of failure. New kinds may be added in minor releases.
///
/// `what` always names the routine (or specification field) that refused the input.
#[non_exhaustive]
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ErrorKind {
    /// The series has no readings at all.
    #[error("{what}: the series is empty")]
    #[non_exhaustive]
    EmptySeries {
        /// Routine that refused the input.
        what: &'static str,
    },
    /// A reading is +inf or −inf. (NaN is accepted and means "missing".)
    #[error(
        "{what}: reading {index} is {value}; readings must be finite, or NaN for a missing reading"
    )]
    #[non_exhaustive]
    NonFiniteReading {
        /// Routine that refused the input.
        what: &'static str,
        /// Zero-based position of the first offending reading.
        index: usize,
        /// The offending value (±inf).
        value: f64,
    },
    /// Every reading is missing (NaN).
    #[error("{what}: all {length} readings are missing (NaN)")]
    #[non_exhaustive]
    AllMissing {
        /// Routine that refused the input.
        what: &'static str,
        /// Length of the series.
        length: usize,
    },
    /// Too few non-missing readings for what was asked.
    #[error("{what}: {present} non-missing readings, but at least {needed} are needed")]
    #[non_exhaustive]
    TooShort {
        /// Routine that refused the input.
        what: &'static str,
        /// Number of non-missing readings supplied.
        present: usize,
        /// Minimum number required.
        needed: usize,
    },
    /// Every non-missing reading has the same value, so the variance is zero.
    #[error(
        "{what}: every non-missing reading equals {value}; a constant series has no autocorrelation or model"
    )]
    #[non_exhaustive]
    ConstantSeries {
        /// Routine that refused the input.
        what: &'static str,
        /// The repeated value.
        value: f64,
    },
    /// Two inputs that must have equal lengths do not.
    #[error("{what}: length mismatch, {left_name} has {left} entries but {right_name} has {right}")]
    #[non_exhaustive]
    LengthMismatch {
        /// Routine that refused the input.
        what: &'static str,
        /// Name of the first input.
        left_name: &'static str,
        /// Its length.
        left: usize,
        /// Name of the second input.
        right_name: &'static str,
        /// Its length.
        right: usize,
    },
    /// An argument (lag, level, order, count…) is out of its allowed range.
    #[error("{what}: {message}")]
    #[non_exhaustive]
    InvalidArgument {
        /// Routine or field that refused the input.
        what: &'static str,
        /// What is wrong and what is allowed.
        message: String,
    },
    /// A model specification is invalid (reported by the builder, never at fit time).
    #[error("model specification, {field}: {message}")]
    #[non_exhaustive]
    InvalidSpecification {
        /// The setting at fault.
        field: &'static str,
        /// What is wrong and what is allowed.
        message: String,
    },
    /// A computation failed for numerical reasons (singular system, overflow, no
    /// admissible estimate). The input itself was acceptable.
    #[error("{what}: numerical failure: {message}")]
    #[non_exhaustive]
    NumericalFailure {
        /// Routine that failed.
        what: &'static str,
        /// What happened.
        message: String,
    },
    /// Two fitted models cannot be compared the way that was asked (different data,
    /// not nested, conditional likelihoods, …).
    #[error("{what}: models not comparable: {message}")]
    #[non_exhaustive]
    NotComparable {
        /// Routine that refused.
        what: &'static str,
        /// Why the models cannot be compared.
        message: String,
    },
    /// A stored model or monitor could not be restored.
    #[error("stored model rejected: {message}")]
    #[non_exhaustive]
    CorruptStore {
        /// What is wrong with the stored document.
        message: String,
    },
    /// A batch job was cancelled before this item was processed.
    #[error("{what}: cancelled before this series was processed")]
    #[non_exhaustive]
    Cancelled {
        /// Routine that was cancelled.
        what: &'static str,
    },
}

/// Shorthand for `Result<T, lagwise::Error>`.
pub type Result<T, E = Error> = std::result::Result<T, E>;
