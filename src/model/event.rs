//! The kinds of sensor event and their shapes on the series: what a unit event of each
//! kind adds to the readings (used by the event search on fitted series and by the
//! monitor's online test).

use serde::{Deserialize, Serialize};

/// The kinds of event (Chen & Liu 1993).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[non_exhaustive]
pub enum EventKind {
    /// One wrong reading; the series itself is not disturbed.
    AdditiveOutlier,
    /// A shock entering the process: it propagates through the model's dynamics (for an
    /// integrated model, it stays).
    InnovationalOutlier,
    /// A step that stays.
    LevelShift,
    /// A step that decays geometrically (factor the event settings' decay per reading).
    TemporaryChange,
}

impl EventKind {
    /// All four kinds.
    pub const ALL: [EventKind; 4] = [
        EventKind::AdditiveOutlier,
        EventKind::InnovationalOutlier,
        EventKind::LevelShift,
        EventKind::TemporaryChange,
    ];
    /// Short code for tables: `AO`, `IO`, `LS`, `TC`.
    pub fn code(self) -> &'static str {
        match self {
            EventKind::AdditiveOutlier => "AO",
            EventKind::InnovationalOutlier => "IO",
            EventKind::LevelShift => "LS",
            EventKind::TemporaryChange => "TC",
        }
    }
}

impl std::fmt::Display for EventKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            EventKind::AdditiveOutlier => "additive outlier",
            EventKind::InnovationalOutlier => "innovational outlier",
            EventKind::LevelShift => "level shift",
            EventKind::TemporaryChange => "temporary change",
        })
    }
}

/// Effect of a unit event of `kind` at `at` on the series at time `t`.
pub(crate) fn effect_at(kind: EventKind, at: usize, t: usize, decay: f64, psi: &[f64]) -> f64 {
    if t < at {
        return 0.0;
    }
    let k = t - at;
    match kind {
        EventKind::AdditiveOutlier => f64::from(k == 0),
        EventKind::InnovationalOutlier => psi.get(k).copied().unwrap_or(0.0),
        EventKind::LevelShift => 1.0,
        EventKind::TemporaryChange => decay.powi(k.min(i32::MAX as usize) as i32),
    }
}
