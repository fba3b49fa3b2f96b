//! From timestamped readings to a regular series: the time axis (origin and cadence, UTC
//! epoch milliseconds), and the placement of irregular, out-of-order, duplicated or
//! jittered readings on it, with a report of what was merged, dropped or missing.
//!
//! No time zones and no daylight-saving arithmetic happen here: timestamps are UTC epoch
//! milliseconds, as Arrow and Parquet store them; a cadence is a fixed number of
//! milliseconds.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, ErrorKind, Result};

/// Largest number of slots a grid may span (10⁸: about 2,850 years of 15-minute readings).
/// A longer span is almost always a unit mistake (seconds read as milliseconds, a zero
/// timestamp among recent ones) and is refused.
pub const MAX_GRID_SLOTS: u64 = 100_000_000;

/// A regular time axis: slot `k` is at `origin + k·cadence` (UTC epoch milliseconds).
///
/// ```
/// use lagwise::TimeAxis;
/// # fn main() -> Result<(), lagwise::Error> {
/// let quarter_hours = TimeAxis::new(1_767_225_600_000, 15 * 60_000)?; // 2026-01-01T00:00Z
/// assert_eq!(quarter_hours.time_of(4), Some(1_767_225_600_000 + 3_600_000));
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct TimeAxis {
    origin_ms: i64,
    cadence_ms: i64,
}

impl TimeAxis {
    /// An axis starting at `origin_ms` with one slot every `cadence_ms` milliseconds.
    /// Errors if the cadence is not positive.
    pub fn new(origin_ms: i64, cadence_ms: i64) -> Result<Self> {
        if cadence_ms <= 0 {
            return Err(Error::invalid(
                "time axis",
                format!("cadence {cadence_ms} ms must be positive"),
            ));
        }
        Ok(TimeAxis {
            origin_ms,
            cadence_ms,
        })
    }
    /// The time of slot 0 (UTC epoch milliseconds).
    pub fn origin_ms(&self) -> i64 {
        self.origin_ms
    }
    /// Milliseconds between slots.
    pub fn cadence_ms(&self) -> i64 {
        self.cadence_ms
    }
    /// The time of slot `index` (`None` beyond the range of `i64`).
    pub fn time_of(&self, index: u64) -> Option<i64> {
        i64::try_from(index)
            .ok()?
            .checked_mul(self.cadence_ms)?
            .checked_add(self.origin_ms)
    }
    /// The slot nearest to `time_ms` and the offset from it (`time − slot time`, in
    /// `(−cadence/2, cadence/2]`), or `None` before the origin's half slot or past `i64`.
    pub fn nearest_slot(&self, time_ms: i64) -> Option<(u64, i64)> {
        // In i64 where nothing can overflow (every real timestamp); the same arithmetic
        // in i128 otherwise. A 128-bit division costs several times a 64-bit one, and
        // this runs once per reading.
        let c = self.cadence_ms;
        if let Some(shifted) = time_ms
            .checked_sub(self.origin_ms)
            .and_then(|from| from.checked_add((c - 1) / 2))
        {
            let k = shifted.div_euclid(c);
            if k < 0 {
                return None;
            }
            let offset = shifted - (c - 1) / 2 - k * c;
            return Some((k as u64, offset));
        }
        self.nearest_slot_wide(time_ms)
    }

    /// [`nearest_slot`](Self::nearest_slot) in 128-bit arithmetic throughout: the
    /// fallback near the ends of the i64 range, and the reference the 64-bit path is
    /// tested against.
    fn nearest_slot_wide(&self, time_ms: i64) -> Option<(u64, i64)> {
        let from = i128::from(time_ms) - i128::from(self.origin_ms);
        let c = i128::from(self.cadence_ms);
        // Round half down: an offset of exactly +c/2 belongs to the earlier slot.
        let k = (from + (c - 1) / 2).div_euclid(c);
        let offset = from - k * c;
        if k < 0 {
            return None;
        }
        Some((u64::try_from(k).ok()?, i64::try_from(offset).ok()?))
    }
}

/// How several readings that fall in one slot become its value.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum SlotRule {
    /// The mean of the readings (the default).
    Mean,
    /// The median (the mean of the two middle readings for an even count).
    Median,
    /// The reading with the latest timestamp (on equal timestamps, the later one in the
    /// input).
    Latest,
    /// The reading with the earliest timestamp (on equal timestamps, the earlier one).
    Earliest,
    /// The smallest reading.
    Smallest,
    /// The largest reading.
    Largest,
}

/// Settings for placing readings on a grid, built by [`GridSettings::builder`].
#[derive(Debug, Clone, PartialEq)]
pub struct GridSettings {
    cadence_ms: i64,
    origin_ms: Option<i64>,
    tolerance_ms: Option<i64>,
    rule: SlotRule,
}

/// Builder of [`GridSettings`]: setters chain, `build` validates.
#[derive(Debug, Clone)]
pub struct GridSettingsBuilder {
    settings: GridSettings,
}

impl GridSettings {
    /// Settings for a grid with one slot every `cadence_ms` milliseconds; by default the
    /// origin is the first reading's time rounded down to a whole cadence since the epoch,
    /// every reading goes to its nearest slot (tolerance half a cadence) and a slot's
    /// readings are averaged.
    pub fn builder(cadence_ms: i64) -> GridSettingsBuilder {
        GridSettingsBuilder {
            settings: GridSettings {
                cadence_ms,
                origin_ms: None,
                tolerance_ms: None,
                rule: SlotRule::Mean,
            },
        }
    }
}

impl GridSettingsBuilder {
    /// Put slot 0 at `origin_ms` (readings before its half slot are dropped and counted).
    pub fn origin_ms(&mut self, origin_ms: i64) -> &mut Self {
        self.settings.origin_ms = Some(origin_ms);
        self
    }
    /// Accept a reading only within `tolerance_ms` of its nearest slot (0 = exactly on
    /// the grid; at most half a cadence); others are dropped and counted as off-grid.
    pub fn tolerance_ms(&mut self, tolerance_ms: i64) -> &mut Self {
        self.settings.tolerance_ms = Some(tolerance_ms);
        self
    }
    /// How several readings in one slot are combined (default [`SlotRule::Mean`]).
    pub fn slot_rule(&mut self, rule: SlotRule) -> &mut Self {
        self.settings.rule = rule;
        self
    }
    /// Validate: a positive cadence, a tolerance within `0..=cadence/2`.
    pub fn build(&self) -> Result<GridSettings> {
        const WHAT: &str = "grid settings";
        let s = &self.settings;
        if s.cadence_ms <= 0 {
            return Err(Error::invalid(
                WHAT,
                format!("cadence {} ms must be positive", s.cadence_ms),
            ));
        }
        if let Some(t) = s.tolerance_ms
            && !(0..=s.cadence_ms / 2).contains(&t)
        {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "tolerance {t} ms must be between 0 and half the cadence ({} ms)",
                    s.cadence_ms / 2
                ),
            ));
        }
        Ok(s.clone())
    }
}

/// What happened to the readings on their way to the grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[non_exhaustive]
pub struct GridReport {
    /// Readings given (NaN readings included).
    pub readings: usize,
    /// Readings that were NaN (no value): they occupy nothing.
    pub empty_readings: usize,
    /// Readings that arrived earlier in time than the reading before them (they are
    /// placed by their timestamps all the same).
    pub out_of_order: usize,
    /// Readings combined with others in the same slot (a slot with three readings
    /// counts two).
    pub merged: usize,
    /// Readings farther than the tolerance from every slot, dropped.
    pub off_grid: usize,
    /// Readings before the origin's half slot, dropped.
    pub before_origin: usize,
    /// Slots of the grid with no reading (NaN in the series).
    pub missing_slots: usize,
}

/// A regular series made from timestamped readings: its axis, its values (NaN where a
/// slot got no reading) and the report.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[non_exhaustive]
pub struct GriddedSeries {
    /// The time axis: slot `k` of `values` is at `axis.time_of(k)`.
    pub axis: TimeAxis,
    /// One value per slot, from the first to the last occupied slot; NaN = no reading.
    #[serde(with = "crate::base::nan_as_null")]
    pub values: Vec<f64>,
    /// What was merged, dropped and missing.
    pub report: GridReport,
}

/// Place timestamped readings (`times_ms[i]`, UTC epoch milliseconds, with
/// `readings[i]`; NaN = no value) on the regular grid of `settings`.
///
/// Order does not matter (out-of-order readings are placed by their timestamps and
/// counted); several readings in one slot are combined by the slot rule; a reading
/// farther than the tolerance from its nearest slot is dropped and counted; slots
/// without a reading are NaN. The series runs from the origin (or the first occupied
/// slot when the origin is the default) to the last occupied slot. Nothing the caller
/// passed is changed.
///
/// Errors: empty input, lengths that differ, a ±inf reading (naming its index), no
/// reading left on the grid, or a span of more than [`MAX_GRID_SLOTS`] slots (a unit
/// mistake, most likely).
///
/// ```
/// use lagwise::{GridSettings, SlotRule, place_on_grid};
/// # fn main() -> Result<(), lagwise::Error> {
/// let q = 15 * 60_000; // 15 minutes in milliseconds
/// let t0 = 1_767_225_600_000;
/// // Jittered, out of order, a duplicate in slot 1, slot 3 missing.
/// let times = [t0 + 2_000, t0 + 2 * q - 1_000, t0 + q, t0 + q + 500, t0 + 4 * q];
/// let values = [50.0, 52.0, 51.0, 51.5, 53.0];
/// let settings = GridSettings::builder(q).tolerance_ms(60_000).build()?;
/// let grid = place_on_grid(&times, &values, &settings)?;
/// assert_eq!(grid.values.len(), 5);
/// assert_eq!(grid.values[1], 51.25); // the mean of the two readings in slot 1
/// assert!(grid.values[3].is_nan());
/// assert_eq!((grid.report.merged, grid.report.out_of_order, grid.report.missing_slots), (1, 1, 1));
/// # Ok(()) }
/// ```
pub fn place_on_grid(
    times_ms: &[i64],
    readings: &[f64],
    settings: &GridSettings,
) -> Result<GriddedSeries> {
    if times_ms.len() != readings.len() {
        return Err(Error::new(ErrorKind::LengthMismatch {
            what: GRID,
            left_name: "timestamps",
            left: times_ms.len(),
            right_name: "readings",
            right: readings.len(),
        }));
    }
    place(Stamps::Listed(times_ms), readings, settings)
}

/// [`place_on_grid`] for readings taken every `step_ms` milliseconds from `first_ms`
/// (reading `i` at `first_ms + i·step_ms`), without a timestamp per reading: what a
/// store that keeps an evenly stepped run as its first time, step and count hands over.
/// Equal, bit for bit, to [`place_on_grid`] with those timestamps (tested), and as fast
/// as copying the readings when the step is the cadence.
///
/// Errors: those of [`place_on_grid`], and timestamps that would run past the range of
/// `i64`.
///
/// ```
/// use lagwise::{GridSettings, place_evenly, place_on_grid};
/// # fn main() -> Result<(), lagwise::Error> {
/// let q = 15 * 60_000;
/// let t0 = 1_767_225_600_000;
/// let values = [50.0, f64::NAN, 51.0, 52.5];
/// let settings = GridSettings::builder(q).build()?;
/// let grid = place_evenly(t0, q, &values, &settings)?;
/// let times: Vec<i64> = (0..4).map(|i| t0 + i * q).collect();
/// let listed = place_on_grid(&times, &values, &settings)?;
/// assert_eq!((grid.axis, grid.report), (listed.axis, listed.report));
/// let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
/// assert_eq!(bits(&grid.values), bits(&listed.values));
/// assert_eq!(grid.report.missing_slots, 1);
/// # Ok(()) }
/// ```
pub fn place_evenly(
    first_ms: i64,
    step_ms: i64,
    readings: &[f64],
    settings: &GridSettings,
) -> Result<GriddedSeries> {
    let last = i64::try_from(readings.len().saturating_sub(1))
        .ok()
        .and_then(|k| step_ms.checked_mul(k))
        .and_then(|d| first_ms.checked_add(d));
    if last.is_none() {
        return Err(Error::invalid(
            GRID,
            format!(
                "{} readings every {step_ms} ms from {first_ms} run past the range of \
                 epoch milliseconds",
                readings.len()
            ),
        ));
    }
    place(
        Stamps::Stepped {
            first: first_ms,
            step: step_ms,
        },
        readings,
        settings,
    )
}

const GRID: &str = "grid";

/// The readings' timestamps: one per reading, or an even run (`first + i·step`, every
/// one of them within `i64`: the caller checks).
#[derive(Debug, Clone, Copy)]
enum Stamps<'a> {
    Listed(&'a [i64]),
    Stepped { first: i64, step: i64 },
}

impl Stamps<'_> {
    fn at(&self, i: usize) -> i64 {
        match *self {
            Stamps::Listed(t) => t[i],
            Stamps::Stepped { first, step } => first + step * i as i64,
        }
    }

    /// Readings earlier in time than the one before them.
    fn out_of_order(&self, n: usize) -> usize {
        match *self {
            Stamps::Listed(t) => t.windows(2).filter(|w| w[1] < w[0]).count(),
            Stamps::Stepped { step, .. } if step < 0 => n.saturating_sub(1),
            Stamps::Stepped { .. } => 0,
        }
    }

    /// Whether each time is the one before plus `cadence`.
    fn one_cadence_apart(&self, cadence: i64) -> bool {
        match *self {
            Stamps::Listed(t) => t
                .windows(2)
                .all(|w| w[0].checked_add(cadence) == Some(w[1])),
            Stamps::Stepped { step, .. } => step == cadence,
        }
    }

    /// The earliest time of a reading with a value (`None` when all are NaN).
    fn first_with_value(&self, readings: &[f64]) -> Option<i64> {
        let with_value = |v: &f64| !v.is_nan();
        match *self {
            Stamps::Listed(t) => t
                .iter()
                .zip(readings)
                .filter(|(_, v)| with_value(v))
                .map(|(t, _)| *t)
                .min(),
            Stamps::Stepped { step, .. } if step < 0 => {
                readings.iter().rposition(with_value).map(|i| self.at(i))
            }
            Stamps::Stepped { .. } => readings.iter().position(with_value).map(|i| self.at(i)),
        }
    }
}

/// [`place_on_grid`] and [`place_evenly`] after their own checks.
fn place(stamps: Stamps<'_>, readings: &[f64], settings: &GridSettings) -> Result<GriddedSeries> {
    if readings.is_empty() {
        return Err(Error::new(ErrorKind::EmptySeries { what: GRID }));
    }
    if let Some(index) = readings.iter().position(|v| v.is_infinite()) {
        return Err(Error::new(ErrorKind::NonFiniteReading {
            what: GRID,
            index,
            value: readings[index],
        }));
    }
    let cadence = settings.cadence_ms;
    // Listed times one cadence apart are an even run: checked once here, every later
    // question about them is answered without another pass.
    let stamps = match stamps {
        Stamps::Listed(t) if t.len() > 1 && stamps.one_cadence_apart(cadence) => Stamps::Stepped {
            first: t[0],
            step: cadence,
        },
        other => other,
    };
    let tolerance = settings.tolerance_ms.unwrap_or(cadence / 2);
    let mut report = GridReport {
        readings: readings.len(),
        ..GridReport::default()
    };
    report.out_of_order = stamps.out_of_order(readings.len());
    // Slots are taken relative to an axis at the epoch-aligned origin first, so that the
    // default origin (the first occupied slot) needs no second pass.
    let origin = match settings.origin_ms {
        Some(o) => o,
        None => {
            let first = stamps.first_with_value(readings).ok_or_else(|| {
                Error::new(ErrorKind::AllMissing {
                    what: GRID,
                    length: readings.len(),
                })
            })?;
            // The slot nearest to the first reading, on the epoch-aligned grid.
            let aligned = TimeAxis::new(0, cadence)?;
            match aligned.nearest_slot(first) {
                Some((k, _)) => aligned.time_of(k).unwrap_or(first),
                // Before 1970: align on the reading itself.
                None => first,
            }
        }
    };
    let axis = TimeAxis::new(origin, cadence)?;
    // (Listed times reach here only when they are not one cadence apart.)
    if let Stamps::Stepped { .. } = stamps
        && let Some(regular) = place_regular(stamps, readings, settings, axis, tolerance, report)
    {
        return Ok(regular);
    }
    match stamps {
        Stamps::Listed(times) => place_general(times, readings, settings, axis, tolerance, report),
        Stamps::Stepped { .. } => {
            let times: Vec<i64> = (0..readings.len()).map(|i| stamps.at(i)).collect();
            place_general(&times, readings, settings, axis, tolerance, report)
        }
    }
}

/// Readings exactly one cadence apart, in time order (what a historian export of a
/// healthy sensor holds): reading i falls in slot k + (i − i₀), where k is the slot of
/// the first reading i₀ with a value, at that reading's offset (slots are
/// shift-invariant), so the readings are copied straight into the grid — no
/// placement list, no sort. `None` when the readings are not like that, or start off the
/// grid or before the origin, or span too many slots: [`place_general`] then places
/// them and reports what it finds. Equal, bit for bit, to [`place_general`] (tested).
fn place_regular(
    stamps: Stamps<'_>,
    readings: &[f64],
    settings: &GridSettings,
    axis: TimeAxis,
    tolerance: i64,
    mut report: GridReport,
) -> Option<GriddedSeries> {
    let cadence = settings.cadence_ms;
    if !stamps.one_cadence_apart(cadence) {
        return None;
    }
    // Empty readings are never placed: slots count from the first reading with a value.
    let i0 = readings.iter().position(|v| !v.is_nan())?;
    let (first, offset) = axis.nearest_slot(stamps.at(i0))?;
    if offset.abs() > tolerance {
        return None;
    }
    let last_index = readings.iter().rposition(|v| !v.is_nan())?;
    let last = first.checked_add((last_index - i0) as u64)?;
    let start = if settings.origin_ms.is_some() {
        0
    } else {
        first
    };
    let span = last - start + 1;
    if span > MAX_GRID_SLOTS {
        return None;
    }
    let axis = TimeAxis::new(axis.time_of(start)?, cadence).ok()?;
    // One reading per slot, and every slot rule gives a lone reading back unchanged (the
    // mean of one reading is the reading, signed zeros included): the values are copied
    // as they are, empty ones as the grid's own NaN (the test below holds this against
    // the rules themselves).
    let inside = &readings[i0..=last_index];
    let lead = (first - start) as usize;
    let mut values = Vec::with_capacity(span as usize);
    values.resize(lead, f64::NAN);
    values.extend(
        inside
            .iter()
            .map(|&v| if v.is_nan() { f64::NAN } else { v }),
    );
    let empty_inside = inside.iter().filter(|v| v.is_nan()).count();
    report.empty_readings = readings.len() - (inside.len() - empty_inside);
    report.missing_slots = lead + empty_inside;
    Some(GriddedSeries {
        axis,
        values,
        report,
    })
}

/// Any readings: each placed in its nearest slot (or dropped and counted), then sorted by
/// slot and time and merged slot by slot.
fn place_general(
    times_ms: &[i64],
    readings: &[f64],
    settings: &GridSettings,
    axis: TimeAxis,
    tolerance: i64,
    mut report: GridReport,
) -> Result<GriddedSeries> {
    const WHAT: &str = GRID;
    let cadence = settings.cadence_ms;
    // (slot, time, input position, value) of every kept reading, sorted by slot and time.
    let mut placed: Vec<(u64, i64, usize, f64)> = Vec::with_capacity(readings.len());
    for (i, (&t, &v)) in times_ms.iter().zip(readings).enumerate() {
        if v.is_nan() {
            report.empty_readings += 1;
            continue;
        }
        match axis.nearest_slot(t) {
            None => report.before_origin += 1,
            Some((_, offset)) if offset.abs() > tolerance => report.off_grid += 1,
            Some((k, _)) => placed.push((k, t, i, v)),
        }
    }
    let (Some(first), Some(last)) = (
        placed.iter().map(|p| p.0).min(),
        placed.iter().map(|p| p.0).max(),
    ) else {
        return Err(Error::invalid(
            WHAT,
            format!(
                "no reading is left on the grid ({} empty, {} off the grid, {} before the origin)",
                report.empty_readings, report.off_grid, report.before_origin
            ),
        ));
    };
    let start = if settings.origin_ms.is_some() {
        0
    } else {
        first
    };
    let span = last - start + 1;
    if span > MAX_GRID_SLOTS {
        return Err(Error::invalid(
            WHAT,
            format!(
                "the readings span {span} slots of {cadence} ms, more than {MAX_GRID_SLOTS}; \
                 check the timestamp unit (milliseconds since 1970-01-01 UTC)"
            ),
        ));
    }
    let axis = match axis.time_of(start) {
        Some(o) => TimeAxis::new(o, cadence)?,
        None => return Err(Error::invalid(WHAT, "the grid's origin is out of range")),
    };
    placed.sort_by_key(|p| (p.0, p.1, p.2));
    let mut values = vec![f64::NAN; span as usize];
    let mut bucket: Vec<f64> = Vec::new();
    let mut i = 0;
    while i < placed.len() {
        let slot = placed[i].0;
        let mut j = i;
        while j < placed.len() && placed[j].0 == slot {
            j += 1;
        }
        let group = &placed[i..j];
        report.merged += group.len() - 1;
        values[(slot - start) as usize] = combine(group, settings.rule, &mut bucket);
        i = j;
    }
    report.missing_slots = values.iter().filter(|v| v.is_nan()).count();
    Ok(GriddedSeries {
        axis,
        values,
        report,
    })
}

/// Epoch milliseconds from epoch seconds given as floating-point numbers (as exported by
/// many tools), rounded to the nearest millisecond. Errors name the first timestamp that
/// is NaN, infinite, or beyond ±2⁶³ milliseconds.
///
/// ```
/// let ms = lagwise::millis_from_seconds(&[1_767_225_600.0, 1_767_226_500.25])?;
/// assert_eq!(ms, vec![1_767_225_600_000, 1_767_226_500_250]);
/// assert!(lagwise::millis_from_seconds(&[0.0, f64::NAN]).is_err());
/// # Ok::<(), lagwise::Error>(())
/// ```
pub fn millis_from_seconds(seconds: &[f64]) -> Result<Vec<i64>> {
    seconds
        .iter()
        .enumerate()
        .map(|(i, &s)| {
            let ms = (s * 1000.0).round();
            // i64::MAX as f64 rounds up to 2⁶³, which is already out of range.
            if ms.is_finite() && ms >= i64::MIN as f64 && ms < i64::MAX as f64 {
                Ok(ms as i64)
            } else {
                Err(Error::invalid(
                    "timestamps",
                    format!("timestamp {i} is {s} s; timestamps must be finite epoch seconds"),
                ))
            }
        })
        .collect()
}

/// One slot's value from its readings (sorted by time, then input position).
fn combine(group: &[(u64, i64, usize, f64)], rule: SlotRule, bucket: &mut Vec<f64>) -> f64 {
    match rule {
        SlotRule::Mean => mean_of(group),
        SlotRule::Latest => group[group.len() - 1].3,
        SlotRule::Earliest => group[0].3,
        SlotRule::Smallest => group.iter().map(|g| g.3).fold(f64::INFINITY, f64::min),
        SlotRule::Largest => group.iter().map(|g| g.3).fold(f64::NEG_INFINITY, f64::max),
        SlotRule::Median => {
            bucket.clear();
            bucket.extend(group.iter().map(|g| g.3));
            bucket.sort_by(f64::total_cmp);
            let m = bucket.len();
            if m % 2 == 1 {
                bucket[m / 2]
            } else {
                // Halves first: the sum of two readings near ±f64::MAX overflows.
                0.5 * bucket[m / 2 - 1] + 0.5 * bucket[m / 2]
            }
        }
    }
}

/// The mean of a slot's readings. Readings near ±f64::MAX would overflow the plain sum: it
/// is then taken on values scaled by an exact power of two no smaller than the count, and
/// the result kept within the readings' range (where the mean lies; found by fuzzing).
fn mean_of(group: &[(u64, i64, usize, f64)]) -> f64 {
    let n = group.len() as f64;
    let plain = group.iter().map(|g| g.3).sum::<f64>() / n;
    if plain.is_finite() {
        return plain;
    }
    let scale = (group.len() as f64).log2().ceil().exp2();
    let scaled = group.iter().map(|g| g.3 / scale).sum::<f64>() / n * scale;
    let lo = group.iter().map(|g| g.3).fold(f64::INFINITY, f64::min);
    let hi = group.iter().map(|g| g.3).fold(f64::NEG_INFINITY, f64::max);
    scaled.clamp(lo, hi)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Regular readings take the direct route; it must give exactly what the general
    /// placement gives (values bit for bit, axis, report), whatever the slot rule, origin,
    /// offset within the tolerance, missing readings and signed zeros.
    #[test]
    fn regular_readings_place_exactly_as_the_general_route() {
        let q = 900_000;
        let t0 = 1_767_225_600_000;
        let rules = [
            SlotRule::Mean,
            SlotRule::Median,
            SlotRule::Latest,
            SlotRule::Earliest,
            SlotRule::Smallest,
            SlotRule::Largest,
        ];
        let mut taken = 0;
        for (case, (shift, origin, pattern)) in [
            (0, None, 0),
            (1_000, None, 1),
            (-q / 2 + 1, None, 2),
            (q / 2, Some(t0 - 5 * q), 3),
            (7, Some(t0), 1),
            (0, Some(t0 - 20 * q), 2),
        ]
        .into_iter()
        .enumerate()
        {
            let n = 40 + case;
            let times: Vec<i64> = (0..n as i64).map(|i| t0 + shift + i * q).collect();
            let values: Vec<f64> = (0..n)
                .map(|i| match (pattern, i % 7) {
                    (1, 0) | (2, 3) if i > 0 => f64::NAN,
                    (2, _) if i < 3 || i + 2 > n => f64::NAN,
                    (3, 5) => -0.0,
                    (_, 6) => 0.0,
                    _ => 50.0 + (i as f64 * 0.37).sin(),
                })
                .collect();
            for rule in rules {
                let mut b = GridSettings::builder(q);
                b.slot_rule(rule).tolerance_ms(q / 2);
                if let Some(o) = origin {
                    b.origin_ms(o);
                }
                let settings = b.build().unwrap();
                let direct = place_on_grid(&times, &values, &settings).unwrap();
                let report = GridReport {
                    readings: n,
                    ..GridReport::default()
                };
                let first = values.iter().position(|v| !v.is_nan()).unwrap();
                let origin_ms = origin.unwrap_or_else(|| {
                    let aligned = TimeAxis::new(0, q).unwrap();
                    let (k, _) = aligned.nearest_slot(times[first]).unwrap();
                    aligned.time_of(k).unwrap()
                });
                let axis = TimeAxis::new(origin_ms, q).unwrap();
                let tolerance = q / 2;
                assert!(
                    place_regular(
                        Stamps::Listed(&times),
                        &values,
                        &settings,
                        axis,
                        tolerance,
                        report
                    )
                    .is_some(),
                    "case {case}: the direct route was not taken"
                );
                taken += 1;
                let general =
                    place_general(&times, &values, &settings, axis, tolerance, report).unwrap();
                assert_eq!(direct.axis, general.axis, "case {case} {rule:?}");
                assert_eq!(direct.report, general.report, "case {case} {rule:?}");
                let bits =
                    |g: &GriddedSeries| g.values.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
                assert_eq!(bits(&direct), bits(&general), "case {case} {rule:?}");
            }
        }
        assert_eq!(taken, 36);
        // Not regular (one reading late by a millisecond, or out of order): the general
        // route, which also reports what it found.
        let settings = GridSettings::builder(q).build().unwrap();
        let axis = TimeAxis::new(t0, q).unwrap();
        let mut times: Vec<i64> = (0..10).map(|i| t0 + i * q).collect();
        times[4] += 1;
        let values = vec![1.0; 10];
        let report = GridReport::default();
        let direct = |times: &[i64]| {
            place_regular(
                Stamps::Listed(times),
                &values,
                &settings,
                axis,
                q / 2,
                report,
            )
        };
        assert!(direct(&times).is_none());
        times[4] = t0 + 5 * q;
        times[5] = t0 + 4 * q;
        assert!(direct(&times).is_none());
        assert_eq!(
            place_on_grid(&times, &values, &settings)
                .unwrap()
                .report
                .out_of_order,
            1
        );
    }

    /// The 64-bit path equals the 128-bit arithmetic everywhere, including half slots,
    /// times before the origin and both ends of the i64 range (where it falls back).
    #[test]
    fn nearest_slot_equals_wide_arithmetic() {
        let origins = [0, 1_795_564_800_000, -86_400_000, i64::MIN, i64::MAX];
        let cadences = [1, 2, 3, 900_000, 3_600_000, i64::MAX];
        let mut times = vec![0, 1, -1, i64::MIN, i64::MAX, i64::MIN + 1, i64::MAX - 1];
        let mut state = 0x9e37_79b9_7f4a_7c15_u64;
        for _ in 0..2_000 {
            state = state
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1);
            times.push(state as i64);
            times.push(1_795_564_800_000 + (state % 10_000_000_000) as i64 - 5_000_000_000);
        }
        for &o in &origins {
            for &c in &cadences {
                let axis = TimeAxis::new(o, c).unwrap();
                for &t in &times {
                    for t in [t, t.saturating_add(c / 2), t.saturating_sub(c / 2)] {
                        assert_eq!(
                            axis.nearest_slot(t),
                            axis.nearest_slot_wide(t),
                            "origin {o}, cadence {c}, t {t}"
                        );
                    }
                }
            }
        }
    }
}
