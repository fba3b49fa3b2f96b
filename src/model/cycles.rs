//! Long cycles as harmonic regression terms: a daily cycle of 96 readings or a weekly one
//! of 672 described by a few sine–cosine pairs instead of a seasonal lag polynomial.
//!
//! A cycle of period `P` readings with `K` harmonics contributes the regressors
//! `cos(2πkt/P)` and `sin(2πkt/P)` for `k = 1..K`, with `t` the reading's index on the
//! series' time axis (index 0 is the first reading of the fitted series; forecasts and
//! monitors continue the count). The sine of `k = P/2` is identically zero and is left
//! out. Harmonics that the model's seasonal differencing removes (`(1 − B^s)` annihilates
//! `k/P` when `s·k/P` is a whole number) and harmonics at a frequency an earlier (shorter)
//! cycle already has (the 7th harmonic of a weekly cycle is the 1st of the daily one) are
//! left out too, so the regression columns stay linearly independent.

use serde::{Deserialize, Serialize};

use crate::model::coefficients::Term;

/// Most harmonics one cycle may have.
pub const MAX_HARMONICS: usize = 100;
/// Most cycles one model may have.
pub const MAX_CYCLES: usize = 3;
/// Longest cycle accepted, in readings (about two years of minute readings).
pub const MAX_CYCLE_PERIOD: usize = 1_000_000;

/// One long cycle of a model: its period in readings and how many harmonics describe it.
///
/// ```
/// use lagwise::{Blueprint, Term};
/// # fn main() -> Result<(), lagwise::Error> {
/// // Return temperature at 15-minute readings: AR(1) errors around a daily shape of
/// // three harmonics and a weekly one of two.
/// let bp = Blueprint::builder().nonseasonal(1, 0, 0).cycle(96, 3).cycle(672, 2).build()?;
/// assert_eq!(bp.cycles().len(), 2);
/// assert!(bp.terms().contains(&Term::CycleSin { period: 672, harmonic: 2 }));
/// assert_eq!(bp.shape_label(), "ARMA(1,0) + mean + harmonics 96:3, 672:2");
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[non_exhaustive]
pub struct Cycle {
    /// Period in readings.
    pub period: usize,
    /// Number of harmonics `K` (`1 ≤ K ≤ period/2`).
    pub harmonics: usize,
}

impl Cycle {
    /// A cycle of `period` readings described by `harmonics` sine–cosine pairs (checked
    /// when a blueprint is built).
    pub fn new(period: usize, harmonics: usize) -> Self {
        Cycle { period, harmonics }
    }
}

/// The value of a harmonic regressor at reading `t`: `cos(2πkt/P)` or `sin(2πkt/P)`.
/// The phase is reduced exactly (`k·t mod P` in integers) before the trigonometry, so the
/// columns are exactly periodic however long the series or far the forecast.
#[inline]
pub(crate) fn wave(period: usize, harmonic: usize, t: u64, sine: bool) -> f64 {
    let p = period.max(1) as u128;
    let phase = (harmonic as u128 * t as u128) % p;
    let angle = std::f64::consts::TAU * (phase as f64 / p as f64);
    if sine { angle.sin() } else { angle.cos() }
}

/// The value of a regression term at reading `t` if it is a harmonic term.
#[inline]
pub(crate) fn term_wave(term: Term, t: u64) -> Option<f64> {
    match term {
        Term::CycleCos { period, harmonic } => Some(wave(period, harmonic, t, false)),
        Term::CycleSin { period, harmonic } => Some(wave(period, harmonic, t, true)),
        _ => None,
    }
}

/// Whether `(1 − B^s)` removes the harmonic `k/P` (`s·k/P` a whole number).
pub(crate) fn removed_by_difference(
    seasonal_period: usize,
    period: usize,
    harmonic: usize,
) -> bool {
    (seasonal_period as u128 * harmonic as u128).is_multiple_of(period as u128)
}

/// The harmonic terms of `cycles` (sorted by period) under seasonal differencing `(1 −
/// B^s)^D`: per cycle and harmonic the cosine then the sine, leaving out the sine at
/// `k = P/2`, harmonics the differencing removes and frequencies an earlier cycle has.
pub(crate) fn harmonic_terms(cycles: &[Cycle], seasonal_d: usize, period: usize) -> Vec<Term> {
    let mut kept: Vec<(usize, usize)> = Vec::new();
    let mut out = Vec::new();
    for c in cycles {
        for k in 1..=c.harmonics {
            if seasonal_d > 0 && period > 1 && removed_by_difference(period, c.period, k) {
                continue;
            }
            // Same frequency k/P = j/P' as a kept harmonic of an earlier cycle.
            if kept
                .iter()
                .any(|&(pp, j)| (k as u128) * (pp as u128) == (j as u128) * (c.period as u128))
            {
                continue;
            }
            kept.push((c.period, k));
            out.push(Term::CycleCos {
                period: c.period,
                harmonic: k,
            });
            if 2 * k != c.period {
                out.push(Term::CycleSin {
                    period: c.period,
                    harmonic: k,
                });
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn waves_are_exactly_periodic_and_match_the_plain_formula() {
        for &(p, k) in &[(96usize, 1usize), (96, 5), (672, 3), (7, 2)] {
            for t in [0u64, 1, 17, 95, 1000] {
                let plain = std::f64::consts::TAU * (k as f64) * (t as f64) / (p as f64);
                assert!((wave(p, k, t, false) - plain.cos()).abs() < 1e-12);
                assert!((wave(p, k, t, true) - plain.sin()).abs() < 1e-12);
                let far = t + 1_000_000_000 * p as u64;
                assert_eq!(wave(p, k, t, true), wave(p, k, far, true));
            }
        }
    }

    #[test]
    fn terms_leave_out_removed_duplicate_and_zero_columns() {
        // Weekly harmonics 7 and 14 are the daily harmonics 1 and 2.
        let terms = harmonic_terms(&[Cycle::new(96, 2), Cycle::new(672, 14)], 0, 1);
        assert_eq!(terms.len(), 2 * 2 + 2 * 12);
        assert!(!terms.contains(&Term::CycleCos {
            period: 672,
            harmonic: 7
        }));
        // Under (1 − B^96) every daily harmonic and weekly 7, 14 vanish.
        let terms = harmonic_terms(&[Cycle::new(672, 8)], 1, 96);
        assert_eq!(terms.len(), 2 * 7);
        assert!(harmonic_terms(&[Cycle::new(96, 3)], 1, 96).is_empty());
        // k = P/2 keeps its cosine only.
        let terms = harmonic_terms(&[Cycle::new(4, 2)], 0, 1);
        assert_eq!(terms.len(), 3);
    }
}
