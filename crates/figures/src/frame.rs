//! What every card shares: the caption a caller gives, the finished card with its panel
//! scales, the error type, and the small helpers (UTC clock labels, text escaping, the
//! accessible title and description every SVG carries).

use lagwise::TimeAxis;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;

/// Why a card or page could not be made.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum FigureError {
    /// The input has nothing to draw (e.g. a model restored without its residuals).
    #[error("nothing to draw for the {card}: {reason}")]
    NothingToDraw {
        /// Which card.
        card: &'static str,
        /// What was missing.
        reason: String,
    },
    /// An argument is outside its domain.
    #[error("invalid {what}: {reason}")]
    InvalidArgument {
        /// Which argument.
        what: &'static str,
        /// Why.
        reason: String,
    },
    /// The drawing backend failed (a bug in this crate if it ever happens).
    #[error("drawing the {card} failed: {reason}")]
    Drawing {
        /// Which card.
        card: &'static str,
        /// The backend's message.
        reason: String,
    },
}

pub(crate) type Result<T> = std::result::Result<T, FigureError>;

/// Turn a backend error into a [`FigureError::Drawing`].
pub(crate) fn drawing<E: std::fmt::Debug>(card: &'static str) -> impl Fn(E) -> FigureError {
    move |e| FigureError::Drawing {
        card,
        reason: format!("{e:?}"),
    }
}

/// What a card says about its series: the tag, and optionally the unit, a plain-words
/// name of the reading and the time axis of the readings (which turns reading numbers
/// into UTC clock times on the horizontal axes).
///
/// ```
/// use lagwise_figures::Caption;
/// let c = Caption::new("KB-SS0417-TR").unit("°C").reading("return temperature");
/// assert_eq!(c.tag(), "KB-SS0417-TR");
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Caption {
    tag: String,
    unit: Option<String>,
    reading: Option<String>,
    axis: Option<TimeAxis>,
}

impl Caption {
    /// A caption for the series called `tag`.
    pub fn new(tag: impl Into<String>) -> Self {
        Caption {
            tag: tag.into(),
            unit: None,
            reading: None,
            axis: None,
        }
    }
    /// The unit of the readings (e.g. `"m³/h"`), shown in titles and on value axes.
    pub fn unit(mut self, unit: impl Into<String>) -> Self {
        self.unit = Some(unit.into());
        self
    }
    /// What the readings are, in plain words (e.g. `"flow"`).
    pub fn reading(mut self, reading: impl Into<String>) -> Self {
        self.reading = Some(reading.into());
        self
    }
    /// The readings' time axis: horizontal axes then show UTC times instead of reading
    /// numbers.
    pub fn time_axis(mut self, axis: TimeAxis) -> Self {
        self.axis = Some(axis);
        self
    }
    /// The tag.
    pub fn tag(&self) -> &str {
        &self.tag
    }
    /// The unit, if given.
    pub fn unit_text(&self) -> Option<&str> {
        self.unit.as_deref()
    }
    /// The plain-words reading name, if given.
    pub fn reading_text(&self) -> Option<&str> {
        self.reading.as_deref()
    }
    /// The time axis, if given.
    pub fn axis(&self) -> Option<TimeAxis> {
        self.axis
    }
    /// `KB-SS0417-TR · return temperature [°C]`.
    pub(crate) fn headline(&self) -> String {
        let mut s = self.tag.clone();
        if let Some(r) = &self.reading {
            s.push_str(" · ");
            s.push_str(r);
        }
        if let Some(u) = &self.unit {
            s.push_str(" [");
            s.push_str(u);
            s.push(']');
        }
        s
    }
    /// A value-axis description with the unit: `reading [°C]`.
    pub(crate) fn value_label(&self, what: &str) -> String {
        match &self.unit {
            Some(u) => format!("{what} [{u}]"),
            None => what.to_string(),
        }
    }
}

/// The kinds of card.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum CardKind {
    /// A fitted model's residuals: over time, their correlogram, the whiteness scan and
    /// their distribution.
    Residuals,
    /// Raw readings' autocorrelations with white-noise and Bartlett bands.
    Correlogram,
    /// The tail of the history and a forecast with its bands.
    Fan,
    /// Readings against their one-step intervals, alarms marked.
    Watch,
    /// The candidates of an order search by criterion.
    Search,
}

impl CardKind {
    /// A short lowercase name (`"residuals"`, `"correlogram"`, …), used in element ids.
    pub fn slug(self) -> &'static str {
        match self {
            CardKind::Residuals => "residuals",
            CardKind::Correlogram => "correlogram",
            CardKind::Fan => "fan",
            CardKind::Watch => "watch",
            CardKind::Search => "search",
        }
    }
}

/// The panels the cards draw, by what they show.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Panel {
    /// Standardized residuals over time.
    ResidualTrace,
    /// Autocorrelations of the residuals.
    ResidualAcf,
    /// Partial autocorrelations of the residuals.
    ResidualPacf,
    /// Ljung–Box p-values by lag.
    WhitenessScan,
    /// Histogram of the standardized residuals against the standard normal density.
    ResidualSpread,
    /// Autocorrelations of the readings.
    ReadingAcf,
    /// Partial autocorrelations of the readings.
    ReadingPacf,
    /// History tail and forecast bands.
    Fan,
    /// Readings against their one-step intervals.
    Watch,
    /// Search candidates by criterion.
    Candidates,
}

/// Where one panel's plotting area sits in the card and which values its edges stand for:
/// enough to find any value's pixel (the tests use it to check that marks sit where the
/// numbers say; a page could use it for tooltips).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PanelScale {
    /// The panel.
    pub panel: Panel,
    /// Values at the left and right edges of the plotting area.
    pub x_values: (f64, f64),
    /// Values at the bottom and top edges.
    pub y_values: (f64, f64),
    /// Pixel columns of the left and right edges (SVG user units).
    pub x_pixels: (f64, f64),
    /// Pixel rows of the bottom and top edges (rows grow downwards).
    pub y_pixels: (f64, f64),
}

impl PanelScale {
    /// The pixel position `(column, row)` of the value pair `(x, y)`.
    pub fn pixel_of(&self, x: f64, y: f64) -> (f64, f64) {
        let fx = (x - self.x_values.0) / (self.x_values.1 - self.x_values.0);
        let fy = (y - self.y_values.0) / (self.y_values.1 - self.y_values.0);
        (
            self.x_pixels.0 + fx * (self.x_pixels.1 - self.x_pixels.0),
            self.y_pixels.0 + fy * (self.y_pixels.1 - self.y_pixels.0),
        )
    }
    /// Read the scale off a plotters chart.
    pub(crate) fn of<DB: DrawingBackend>(
        panel: Panel,
        chart: &ChartContext<'_, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>,
    ) -> PanelScale {
        let xr = chart.x_range();
        let yr = chart.y_range();
        let (x0, y0) = chart.backend_coord(&(xr.start, yr.start));
        let (x1, y1) = chart.backend_coord(&(xr.end, yr.end));
        PanelScale {
            panel,
            x_values: (xr.start, xr.end),
            y_values: (yr.start, yr.end),
            x_pixels: (f64::from(x0), f64::from(x1)),
            y_pixels: (f64::from(y0), f64::from(y1)),
        }
    }
}

/// A finished card: one self-contained SVG document with an accessible title and
/// description, and the scales of its panels.
#[derive(Debug, Clone, PartialEq)]
pub struct Card {
    kind: CardKind,
    tag: String,
    title: String,
    description: String,
    svg: String,
    size: (u32, u32),
    panels: Vec<PanelScale>,
}

impl Card {
    /// Which kind of card.
    pub fn kind(&self) -> CardKind {
        self.kind
    }
    /// The tag of the series drawn.
    pub fn tag(&self) -> &str {
        &self.tag
    }
    /// The SVG's `<title>` text.
    pub fn title(&self) -> &str {
        &self.title
    }
    /// The SVG's `<desc>` text: what the card shows, in words, for screen readers.
    pub fn description(&self) -> &str {
        &self.description
    }
    /// The SVG document.
    pub fn svg(&self) -> &str {
        &self.svg
    }
    /// Take the SVG document.
    pub fn into_svg(self) -> String {
        self.svg
    }
    /// Width and height in SVG user units (pixels at 100%).
    pub fn size(&self) -> (u32, u32) {
        self.size
    }
    /// The panels' scales.
    pub fn panels(&self) -> &[PanelScale] {
        &self.panels
    }
    /// The scale of one panel.
    pub fn panel(&self, panel: Panel) -> Option<&PanelScale> {
        self.panels.iter().find(|p| p.panel == panel)
    }
    /// The id of the SVG's root element: `lw-<kind>-<tag>`; when the tag has characters
    /// outside `[A-Za-z0-9_-]` they become `_` and a hash of the tag is appended.
    pub fn element_id(&self) -> String {
        element_id(self.kind, &self.tag)
    }
}

pub(crate) fn element_id(kind: CardKind, tag: &str) -> String {
    let safe = slug(tag);
    if safe == tag {
        format!("lw-{}-{safe}", kind.slug())
    } else {
        // Replaced characters could make two tags meet: a hash of the tag keeps them apart.
        let h = tag.bytes().fold(0xcbf2_9ce4_8422_2325u64, |h, b| {
            (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3)
        });
        format!("lw-{}-{safe}-{:08x}", kind.slug(), h as u32)
    }
}

/// A tag with characters outside `[A-Za-z0-9_-]` replaced by `_` (for element ids).
pub(crate) fn slug(tag: &str) -> String {
    tag.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// Finish a card: give the SVG root an id, `role="img"`, and a `<title>` and `<desc>`
/// that screen readers announce (WAI-ARIA graphics practice: `aria-labelledby` names
/// both).
pub(crate) fn finish(
    kind: CardKind,
    caption: &Caption,
    title: String,
    description: String,
    raw_svg: String,
    size: (u32, u32),
    panels: Vec<PanelScale>,
) -> Card {
    let id = element_id(kind, caption.tag());
    // Attributes that only restate SVG defaults (a fifth of a card's bytes).
    let raw_svg = raw_svg
        .replace(" opacity=\"1\"", "")
        .replace(" stroke=\"none\"", "");
    let open_end = raw_svg.find('>').map_or(0, |i| i + 1);
    let (open, rest) = raw_svg.split_at(open_end);
    let open = open.trim_end_matches('>');
    let mut svg = String::with_capacity(raw_svg.len() + title.len() + description.len() + 200);
    svg.push_str(open);
    svg.push_str(&format!(
        r#" id="{id}" role="img" aria-labelledby="{id}-t {id}-d"><title id="{id}-t">{}</title><desc id="{id}-d">{}</desc>"#,
        escape_text(&title),
        escape_text(&description)
    ));
    svg.push_str(rest);
    Card {
        kind,
        tag: caption.tag().to_string(),
        title,
        description,
        svg,
        size,
        panels,
    }
}

/// Escape text for XML/HTML content and attribute values.
pub fn escape_text(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// `2026-12-02 06:15` for UTC epoch milliseconds (civil date from days since 1970 by the
/// proleptic-Gregorian algorithm of H. Hinnant, "chrono-compatible low-level date
/// algorithms"; no time zones, no leap seconds).
pub fn utc_minutes(ms: i64) -> String {
    let (y, m, d, hh, mm) = civil(ms);
    format!("{y:04}-{m:02}-{d:02} {hh:02}:{mm:02}")
}

/// `12-02 06:15`: the short form used on time axes.
pub(crate) fn utc_short(ms: i64) -> String {
    let (_, m, d, hh, mm) = civil(ms);
    format!("{m:02}-{d:02} {hh:02}:{mm:02}")
}

fn civil(ms: i64) -> (i64, u32, u32, u32, u32) {
    let secs = ms.div_euclid(1000);
    let days = secs.div_euclid(86_400);
    let sod = secs.rem_euclid(86_400);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d, (sod / 3600) as u32, ((sod % 3600) / 60) as u32)
}

/// Horizontal axis labels: a reading number, or its UTC time when an axis is known.
pub(crate) fn index_label(axis: Option<TimeAxis>, index: f64) -> String {
    match axis.and_then(|a| {
        if index.is_finite() && index >= 0.0 {
            a.time_of(index.round() as u64)
        } else {
            None
        }
    }) {
        Some(ms) => utc_short(ms),
        None => format!("{index:.0}"),
    }
}

/// Tick positions (as reading numbers) and labels for a time axis over the readings
/// `x0..=x1`: steps from one minute to thirty days, the smallest giving at most `want`
/// ticks, aligned to whole multiples of the step since the epoch (days at UTC midnight).
/// Labels read `MM-DD` at midnight and for day steps, `HH:MM` otherwise.
pub(crate) fn time_ticks(axis: TimeAxis, x0: f64, x1: f64, want: usize) -> Vec<(f64, String)> {
    const MINUTE: i64 = 60_000;
    const STEPS: [i64; 15] = [
        MINUTE,
        5 * MINUTE,
        15 * MINUTE,
        30 * MINUTE,
        60 * MINUTE,
        120 * MINUTE,
        180 * MINUTE,
        360 * MINUTE,
        720 * MINUTE,
        1_440 * MINUTE,
        2_880 * MINUTE,
        4_320 * MINUTE,
        10_080 * MINUTE,
        20_160 * MINUTE,
        43_200 * MINUTE,
    ];
    if !(x0.is_finite() && x1.is_finite()) || x1 <= x0 || want == 0 {
        return Vec::new();
    }
    let cad = axis.cadence_ms() as f64;
    let t0 = axis.origin_ms() as f64 + x0 * cad;
    let t1 = axis.origin_ms() as f64 + x1 * cad;
    let Some(&step) = STEPS.iter().find(|&&s| (t1 - t0) / s as f64 <= want as f64) else {
        return Vec::new();
    };
    let mut t = (t0 / step as f64).ceil() as i64 * step;
    let mut out = Vec::new();
    while (t as f64) <= t1 && out.len() <= want {
        let x = (t - axis.origin_ms()) as f64 / cad;
        let (_, m, d, hh, mm) = civil(t);
        let label = if step >= 1_440 * MINUTE || (hh == 0 && mm == 0) {
            format!("{m:02}-{d:02}")
        } else {
            format!("{hh:02}:{mm:02}")
        };
        out.push((x, label));
        t += step;
    }
    out
}

/// A rounded range containing `lo..hi` with a little air, never empty.
pub(crate) fn padded(lo: f64, hi: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (-1.0, 1.0);
    }
    let span = hi - lo;
    if span <= f64::EPSILON * hi.abs().max(1.0) {
        let w = (hi.abs() * 0.05).max(0.5);
        return (lo - w, hi + w);
    }
    (lo - 0.06 * span, hi + 0.06 * span)
}

/// Finite minimum and maximum of values (None when none is finite).
pub(crate) fn finite_extent(values: impl IntoIterator<Item = f64>) -> Option<(f64, f64)> {
    values
        .into_iter()
        .filter(|v| v.is_finite())
        .fold(None, |acc, v| match acc {
            None => Some((v, v)),
            Some((lo, hi)) => Some((lo.min(v), hi.max(v))),
        })
}

/// Format a number compactly for labels.
pub(crate) fn short_number(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if !(1e-3..1e4).contains(&a) {
        format!("{v:.2e}")
    } else if a >= 100.0 {
        format!("{v:.0}")
    } else if a >= 10.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Dates checked against Python's `datetime` (UTC): the proleptic Gregorian calendar: the Unix epoch, a leap
    /// day, the end of a century year that is not a leap year, and a time before 1970
    /// (values from the calendar, not from this code).
    #[test]
    fn civil_dates_match_the_calendar() {
        assert_eq!(utc_minutes(0), "1970-01-01 00:00");
        assert_eq!(utc_minutes(951_782_400_000), "2000-02-29 00:00");
        assert_eq!(utc_minutes(4_107_542_400_000 - 60_000), "2100-02-28 23:59");
        assert_eq!(utc_minutes(4_107_542_400_000), "2100-03-01 00:00");
        assert_eq!(utc_minutes(-60_000), "1969-12-31 23:59");
        assert_eq!(
            utc_minutes(1_767_225_600_000 + 3_600_000 * 6 + 15 * 60_000),
            "2026-01-01 06:15"
        );
    }

    #[test]
    fn time_ticks_fall_on_whole_hours_and_days() {
        // A week of quarter-hour readings from 2026-11-25 00:00 UTC: ticks at midnights.
        let axis = TimeAxis::new(1_795_564_800_000, 900_000).unwrap();
        let t = time_ticks(axis, 0.0, 671.0, 8);
        assert_eq!(
            t.first().map(|(x, l)| (*x, l.as_str())),
            Some((0.0, "11-25"))
        );
        assert_eq!(t.len(), 7);
        assert_eq!(t[1], (96.0, "11-26".to_string()));
        // Two hours from 06:07: ticks every 15 minutes at 06:15, 06:30, …
        let axis = TimeAxis::new(1_795_564_800_000 + 6 * 3_600_000 + 7 * 60_000, 60_000).unwrap();
        let t = time_ticks(axis, 0.0, 120.0, 8);
        assert_eq!(t[0], (8.0, "06:15".to_string()));
        assert!(t.iter().all(|(x, _)| (x - 8.0) % 15.0 == 0.0));
        assert!(time_ticks(axis, 5.0, 5.0, 8).is_empty());
    }

    #[test]
    fn escaping_covers_markup() {
        assert_eq!(
            escape_text(r#"a<b & "c">'"#),
            "a&lt;b &amp; &quot;c&quot;&gt;&#39;"
        );
        assert_eq!(
            element_id(CardKind::Fan, "KB-SS0001_x"),
            "lw-fan-KB-SS0001_x"
        );
        let (a, b) = (
            element_id(CardKind::Fan, "A<B"),
            element_id(CardKind::Fan, "A>B"),
        );
        assert!(a.starts_with("lw-fan-A_B-") && b.starts_with("lw-fan-A_B-") && a != b);
    }

    #[test]
    fn padded_ranges_are_never_empty() {
        assert_eq!(padded(f64::NAN, 1.0), (-1.0, 1.0));
        let (a, b) = padded(3.0, 3.0);
        assert!(a < 3.0 && b > 3.0);
        let (a, b) = padded(0.0, 10.0);
        assert!(a < 0.0 && b > 10.0);
    }
}
