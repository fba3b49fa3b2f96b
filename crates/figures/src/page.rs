//! The fleet page: one self-contained HTML file (inline CSS and SVG, no script, nothing
//! fetched) with a roster of every tag and a sheet of cards for the tags that need a look.

use crate::frame::{Card, FigureError, Result, escape_text};
use crate::palette::{ALERT, BAND, GUIDE, INK, PAPER, QUIET, SEASON, TRACE, hex};
use std::collections::HashSet;
use std::fmt::Write as _;

/// What the page says about one tag: its model and verdict, the alarms and events worth a
/// look, a failure if the fit failed, and the cards to show.
///
/// ```
/// use lagwise_figures::TagSheet;
/// let s = TagSheet::new("KB-SS0418-FL").unit("m³/h").model("ARMA(1,1) + mean")
///     .residuals(true, Some(0.41)).alarm("02:30 read 43.1, expected 19.2");
/// assert!(s.needs_a_look());
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct TagSheet {
    tag: String,
    unit: Option<String>,
    reading: Option<String>,
    model: Option<String>,
    white: Option<bool>,
    whiteness_p: Option<f64>,
    alarms: Vec<String>,
    events: Vec<String>,
    notes: Vec<String>,
    failure: Option<String>,
    cards: Vec<Card>,
}

impl TagSheet {
    /// A sheet for `tag`.
    pub fn new(tag: impl Into<String>) -> Self {
        TagSheet {
            tag: tag.into(),
            unit: None,
            reading: None,
            model: None,
            white: None,
            whiteness_p: None,
            alarms: Vec::new(),
            events: Vec::new(),
            notes: Vec::new(),
            failure: None,
            cards: Vec::new(),
        }
    }
    /// Unit of the readings.
    pub fn unit(mut self, unit: impl Into<String>) -> Self {
        self.unit = Some(unit.into());
        self
    }
    /// What the readings are, in plain words.
    pub fn reading(mut self, reading: impl Into<String>) -> Self {
        self.reading = Some(reading.into());
        self
    }
    /// The fitted model's label.
    pub fn model(mut self, label: impl Into<String>) -> Self {
        self.model = Some(label.into());
        self
    }
    /// The whiteness verdict and the Ljung–Box p-value it read.
    pub fn residuals(mut self, white: bool, p_value: Option<f64>) -> Self {
        self.white = Some(white);
        self.whiteness_p = p_value;
        self
    }
    /// One alarm, in words (e.g. the time, the reading and what was expected).
    pub fn alarm(mut self, text: impl Into<String>) -> Self {
        self.alarms.push(text.into());
        self
    }
    /// One sensor event in the history (a stuck run, a level shift, …), in words.
    pub fn event(mut self, text: impl Into<String>) -> Self {
        self.events.push(text.into());
        self
    }
    /// A note that needs no look (e.g. how many gaps were filled): shown with the events,
    /// greyed, without making the tag urgent.
    pub fn note(mut self, text: impl Into<String>) -> Self {
        self.notes.push(text.into());
        self
    }
    /// The fit failed: the error text.
    pub fn failed(mut self, error: impl Into<String>) -> Self {
        self.failure = Some(error.into());
        self
    }
    /// A card to show on the tag's sheet.
    pub fn card(mut self, card: Card) -> Self {
        self.cards.push(card);
        self
    }
    /// The tag.
    pub fn tag(&self) -> &str {
        &self.tag
    }
    /// The cards held.
    pub fn cards(&self) -> &[Card] {
        &self.cards
    }
    /// Whether the tag needs a look: its fit failed, its residuals are not white, or it
    /// has alarms or events.
    pub fn needs_a_look(&self) -> bool {
        self.priority() < 4
    }
    /// The roster's order, most urgent first: 0 the fit failed, 1 alarms, 2 residuals
    /// not white, 3 events only, 4 nothing to look at.
    pub fn priority(&self) -> u8 {
        if self.failure.is_some() {
            0
        } else if !self.alarms.is_empty() {
            1
        } else if self.white == Some(false) {
            2
        } else if !self.events.is_empty() {
            3
        } else {
            4
        }
    }
}

/// Builds the fleet page.
///
/// ```
/// use lagwise_figures::{FleetPage, TagSheet};
/// # fn main() -> Result<(), lagwise_figures::FigureError> {
/// let mut page = FleetPage::new("Morning check");
/// page.add(TagSheet::new("KB-SS0001-TS").model("ARMA(1,0) + mean").residuals(true, Some(0.6)));
/// let out = page.render()?;
/// assert!(out.html().starts_with("<!DOCTYPE html>"));
/// assert_eq!(out.tags(), 1);
/// # Ok(()) }
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct FleetPage {
    title: String,
    intro: Vec<String>,
    footnotes: Vec<String>,
    generated_ms: Option<i64>,
    card_limit: usize,
    sheets: Vec<TagSheet>,
}

/// The rendered page and what went into it.
#[derive(Debug, Clone, PartialEq)]
pub struct RenderedPage {
    html: String,
    tags: usize,
    needing_a_look: usize,
    sheets_with_cards: usize,
    cards: usize,
    sheets_without_room: usize,
}

impl RenderedPage {
    /// The HTML document.
    pub fn html(&self) -> &str {
        &self.html
    }
    /// Take the HTML document.
    pub fn into_html(self) -> String {
        self.html
    }
    /// Tags in the roster.
    pub fn tags(&self) -> usize {
        self.tags
    }
    /// Tags that need a look (see [`TagSheet::needs_a_look`]).
    pub fn needing_a_look(&self) -> usize {
        self.needing_a_look
    }
    /// Tags whose cards are on the page.
    pub fn sheets_with_cards(&self) -> usize {
        self.sheets_with_cards
    }
    /// Cards on the page.
    pub fn cards(&self) -> usize {
        self.cards
    }
    /// Tags with cards that were left off because of the card limit (least urgent
    /// first).
    pub fn sheets_without_room(&self) -> usize {
        self.sheets_without_room
    }
}

/// Sheets with cards on one page unless [`FleetPage::card_limit`] says otherwise. A card is
/// 15–55 kB of SVG and a sheet holds a few, so the default keeps a page that browsers open
/// quickly (≈ 12 MB with three cards per sheet) whatever the fleet's size; the roster
/// always lists every tag.
pub const DEFAULT_CARD_LIMIT: usize = 100;

impl FleetPage {
    /// An empty page with a title.
    pub fn new(title: impl Into<String>) -> Self {
        FleetPage {
            title: title.into(),
            intro: Vec::new(),
            footnotes: Vec::new(),
            generated_ms: None,
            card_limit: DEFAULT_CARD_LIMIT,
            sheets: Vec::new(),
        }
    }
    /// A paragraph under the title.
    pub fn intro(&mut self, text: impl Into<String>) -> &mut Self {
        self.intro.push(text.into());
        self
    }
    /// A paragraph at the foot of the page (e.g. the safety note).
    pub fn footnote(&mut self, text: impl Into<String>) -> &mut Self {
        self.footnotes.push(text.into());
        self
    }
    /// When the page was made (UTC epoch milliseconds), shown under the title.
    pub fn generated_at(&mut self, ms: i64) -> &mut Self {
        self.generated_ms = Some(ms);
        self
    }
    /// At most this many tags get their cards on the page (the most urgent first: failed
    /// fits, alarms, residuals not white, events); the roster always lists every tag.
    pub fn card_limit(&mut self, sheets: usize) -> &mut Self {
        self.card_limit = sheets;
        self
    }
    /// Add a tag.
    pub fn add(&mut self, sheet: TagSheet) -> &mut Self {
        self.sheets.push(sheet);
        self
    }
    /// Tags added so far.
    pub fn len(&self) -> usize {
        self.sheets.len()
    }
    /// Whether no tag was added.
    pub fn is_empty(&self) -> bool {
        self.sheets.is_empty()
    }

    /// Render the page. Errors if a tag appears twice.
    pub fn render(&self) -> Result<RenderedPage> {
        let mut seen = HashSet::with_capacity(self.sheets.len());
        for s in &self.sheets {
            if !seen.insert(s.tag.as_str()) {
                return Err(FigureError::InvalidArgument {
                    what: "fleet page",
                    reason: format!("tag {} added twice", s.tag),
                });
            }
        }
        // Roster order: most urgent first, then by tag.
        let mut order: Vec<usize> = (0..self.sheets.len()).collect();
        order.sort_by(|&a, &b| {
            let (x, y) = (&self.sheets[a], &self.sheets[b]);
            x.priority()
                .cmp(&y.priority())
                .then_with(|| x.tag.cmp(&y.tag))
        });
        let mut with_cards = Vec::new();
        let mut without_room = 0;
        for &i in &order {
            if !self.sheets[i].cards.is_empty() {
                if with_cards.len() < self.card_limit {
                    with_cards.push(i);
                } else {
                    without_room += 1;
                }
            }
        }
        let shown: HashSet<usize> = with_cards.iter().copied().collect();
        // Anchors carry the position so that tags differing only in characters outside
        // [A-Za-z0-9_-] stay apart.
        let anchors: Vec<String> = (0..self.sheets.len())
            .map(|i| format!("sheet-{i}-{}", crate::frame::slug(&self.sheets[i].tag)))
            .collect();
        let needing = self.sheets.iter().filter(|s| s.needs_a_look()).count();
        let not_white = self
            .sheets
            .iter()
            .filter(|s| s.white == Some(false))
            .count();
        let alarmed = self.sheets.iter().filter(|s| !s.alarms.is_empty()).count();
        let failed = self.sheets.iter().filter(|s| s.failure.is_some()).count();
        let card_count: usize = with_cards.iter().map(|&i| self.sheets[i].cards.len()).sum();
        let card_bytes: usize = with_cards
            .iter()
            .flat_map(|&i| self.sheets[i].cards.iter().map(|c| c.svg().len() + 300))
            .sum();
        let mut h = String::with_capacity(4096 + 420 * self.sheets.len() + card_bytes);
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
             <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
             <title>{}</title>\n<style>{}</style>\n</head>\n<body data-cards=\"{card_count}\" data-tags=\"{}\">\n",
            escape_text(&self.title),
            css(),
            self.sheets.len()
        );
        let _ = write!(h, "<header>\n<h1>{}</h1>\n", escape_text(&self.title));
        if let Some(ms) = self.generated_ms {
            let _ = writeln!(
                h,
                "<p class=\"stamp\">Made {} UTC</p>",
                crate::frame::utc_minutes(ms)
            );
        }
        for p in &self.intro {
            let _ = writeln!(h, "<p>{}</p>", escape_text(p));
        }
        let _ = writeln!(h, "</header>\n<ul class=\"tally\" aria-label=\"Counts\">");
        for (n, what, hot) in [
            (self.sheets.len(), "tags", false),
            (needing, "need a look", needing > 0),
            (alarmed, "with alarms", alarmed > 0),
            (not_white, "residuals not white", not_white > 0),
            (failed, "fits failed", failed > 0),
        ] {
            let _ = writeln!(
                h,
                "<li{}><b>{n}</b> {what}</li>",
                if hot { " class=\"hot\"" } else { "" }
            );
        }
        let _ = writeln!(h, "</ul>");
        if without_room > 0 {
            let _ = writeln!(
                h,
                "<p class=\"note\">Cards are shown for the {} most urgent tags; {without_room} more tags with cards are listed below without them.</p>",
                with_cards.len()
            );
        }
        let _ = writeln!(
            h,
            "<table id=\"roster\">\n<caption>Every tag, most urgent first</caption>\n<thead><tr>\
             <th scope=\"col\">Tag</th><th scope=\"col\">Reading</th><th scope=\"col\">Model</th>\
             <th scope=\"col\">Residuals</th><th scope=\"col\">Ljung–Box p</th>\
             <th scope=\"col\">Alarms</th><th scope=\"col\">Events</th></tr></thead>\n<tbody>"
        );
        for &i in &order {
            let s = &self.sheets[i];
            let class = match s.priority() {
                0 => " class=\"failed\"",
                1 => " class=\"alarm\"",
                2 => " class=\"grey\"",
                3 => " class=\"event\"",
                _ => "",
            };
            let tag = if shown.contains(&i) {
                format!("<a href=\"#{}\">{}</a>", anchors[i], escape_text(&s.tag))
            } else {
                escape_text(&s.tag)
            };
            let reading = match (&s.reading, &s.unit) {
                (Some(r), Some(u)) => format!("{} [{}]", escape_text(r), escape_text(u)),
                (Some(r), None) => escape_text(r),
                (None, Some(u)) => format!("[{}]", escape_text(u)),
                (None, None) => String::new(),
            };
            let verdict = match (&s.failure, s.white) {
                (Some(e), _) => format!(
                    "<span class=\"badge bad\">fit failed</span> {}",
                    escape_text(e)
                ),
                (None, Some(true)) => "<span class=\"badge ok\">white</span>".to_string(),
                (None, Some(false)) => "<span class=\"badge bad\">not white</span>".to_string(),
                (None, None) => "—".to_string(),
            };
            let p = s.whiteness_p.map_or("—".to_string(), |p| format!("{p:.3}"));
            let alarms = if s.alarms.is_empty() {
                "—".to_string()
            } else {
                format!("<b>{}</b> {}", s.alarms.len(), escape_text(&s.alarms[0]))
                    + if s.alarms.len() > 1 { " …" } else { "" }
            };
            let mut lines: Vec<String> = s.events.iter().map(|e| escape_text(e)).collect();
            lines.extend(
                s.notes
                    .iter()
                    .map(|n| format!("<span class=\"quiet\">{}</span>", escape_text(n))),
            );
            let events = if lines.is_empty() {
                "—".to_string()
            } else {
                lines.join("<br>")
            };
            let _ = writeln!(
                h,
                "<tr{class}><th scope=\"row\">{tag}</th><td>{reading}</td><td>{}</td><td>{verdict}</td><td class=\"num\">{p}</td><td>{alarms}</td><td>{events}</td></tr>",
                s.model.as_deref().map_or(String::new(), escape_text)
            );
        }
        let _ = writeln!(h, "</tbody>\n</table>\n<main>");
        for &i in &with_cards {
            let s = &self.sheets[i];
            let _ = writeln!(
                h,
                "<section class=\"sheet\" id=\"{}\" aria-labelledby=\"{}-h\">\n<h2 id=\"{}-h\">{}</h2>",
                anchors[i],
                anchors[i],
                anchors[i],
                escape_text(&s.tag)
            );
            let mut said = Vec::new();
            if let Some(m) = &s.model {
                said.push(escape_text(m));
            }
            if let Some(e) = &s.failure {
                said.push(format!("fit failed: {}", escape_text(e)));
            }
            let _ = writeln!(h, "<p>{}</p>", said.join(" · "));
            if !s.alarms.is_empty() || !s.events.is_empty() {
                let _ = writeln!(h, "<ul class=\"said\">");
                for a in &s.alarms {
                    let _ = writeln!(h, "<li class=\"a\">alarm: {}</li>", escape_text(a));
                }
                for e in &s.events {
                    let _ = writeln!(h, "<li>event: {}</li>", escape_text(e));
                }
                let _ = writeln!(h, "</ul>");
            }
            let _ = writeln!(h, "<div class=\"cards\">");
            for c in &s.cards {
                let _ = writeln!(
                    h,
                    "<figure class=\"card\" data-kind=\"{}\">\n{}\n<figcaption>{}</figcaption>\n</figure>",
                    c.kind().slug(),
                    c.svg(),
                    escape_text(c.title())
                );
            }
            let _ = writeln!(
                h,
                "</div>\n<p class=\"back\"><a href=\"#roster\">Back to the roster</a></p>\n</section>"
            );
        }
        let _ = writeln!(h, "</main>\n<footer>");
        for p in &self.footnotes {
            let _ = writeln!(h, "<p>{}</p>", escape_text(p));
        }
        let _ = writeln!(h, "</footer>\n</body>\n</html>");
        Ok(RenderedPage {
            html: h,
            tags: self.sheets.len(),
            needing_a_look: needing,
            sheets_with_cards: with_cards.len(),
            cards: card_count,
            sheets_without_room: without_room,
        })
    }
}

fn css() -> String {
    format!(
        "
:root {{ --ink: {ink}; --paper: {paper}; --guide: {guide}; --alert: {alert}; --trace: {trace}; --quiet: {quiet}; --band: {band}; --season: {season}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0 auto; max-width: 1200px; padding: 1.2rem 1.5rem 3rem; font: 15px/1.45 system-ui, sans-serif; color: var(--ink); background: var(--paper); }}
h1 {{ font-size: 1.6rem; margin: 0 0 .2rem; }}
h2 {{ font-size: 1.2rem; margin: 2.2rem 0 .3rem; border-top: 3px solid var(--ink); padding-top: .5rem; }}
.stamp {{ color: var(--quiet); margin: 0 0 .6rem; }}
.tally {{ display: flex; flex-wrap: wrap; gap: .6rem; list-style: none; padding: 0; margin: 1rem 0; }}
.tally li {{ border: 1px solid var(--guide); border-left: 6px solid var(--trace); padding: .35rem .8rem; border-radius: 3px; }}
.tally li.hot {{ border-left-color: var(--alert); }}
.tally b {{ font-size: 1.25rem; margin-right: .25rem; }}
.note {{ background: var(--season); padding: .4rem .7rem; }}
table {{ border-collapse: collapse; width: 100%; font-size: .88rem; }}
caption {{ text-align: left; font-weight: 600; padding: .3rem 0; }}
thead th {{ position: sticky; top: 0; background: var(--paper); border-bottom: 2px solid var(--ink); text-align: left; padding: .3rem .5rem; }}
tbody th, tbody td {{ border-bottom: 1px solid var(--guide); padding: .25rem .5rem; vertical-align: top; text-align: left; }}
tbody th {{ font-weight: 600; white-space: nowrap; }}
tr.failed th, tr.alarm th, tr.grey th {{ box-shadow: inset 5px 0 0 var(--alert); }}
tr.event th {{ box-shadow: inset 5px 0 0 var(--quiet); }}
td.num {{ font-variant-numeric: tabular-nums; }}
.badge {{ display: inline-block; white-space: nowrap; padding: 0 .45rem; border-radius: 2px; font-weight: 700; font-size: .8rem; }}
.badge.ok {{ background: var(--trace); color: var(--paper); }}
.badge.bad {{ background: var(--alert); color: var(--ink); }}
a {{ color: var(--trace); }}
.said li.a {{ font-weight: 600; }}
.cards {{ display: flex; flex-direction: column; gap: 1rem; }}
figure.card {{ margin: 0; border: 1px solid var(--guide); padding: .4rem; max-width: 940px; }}
figure.card svg {{ display: block; width: 100%; height: auto; }}
figcaption {{ color: var(--quiet); font-size: .8rem; }}
.quiet {{ color: var(--quiet); }}
footer {{ margin-top: 3rem; border-top: 1px solid var(--guide); color: var(--ink); font-size: .9rem; }}
@media print {{ thead th {{ position: static; }} .sheet {{ break-before: page; }} }}
",
        ink = hex(INK),
        paper = hex(PAPER),
        guide = hex(GUIDE),
        alert = hex(ALERT),
        trace = hex(TRACE),
        quiet = hex(QUIET),
        band = hex(BAND),
        season = hex(SEASON),
    )
}
