//! Pictures of lagwise's diagnostics for plant engineers: SVG *cards* drawn from the
//! core's serialisable results, and a self-contained HTML *fleet page* that lists every
//! tag and shows the cards of those that need a look.
//!
//! | card | made from | shows |
//! |---|---|---|
//! | [`residual_card`] | a [`FittedModel`](lagwise::FittedModel) and its [`ResidualCheck`](lagwise::ResidualCheck) | standardized residuals over time, their ACF and PACF with bands, Ljung–Box p-values by lag, their spread against N(0,1) |
//! | [`correlogram_card`] | a [`Correlogram`](lagwise::Correlogram) of raw readings | ACF with white-noise and Bartlett bands, PACF, seasonal lags marked |
//! | [`fan_card`] | the history and a [`Forecast`](lagwise::Forecast) | the history's tail, the mean and the bands |
//! | [`watch_strip`] | the monitor's [`ReadingCheck`](lagwise::ReadingCheck)s | readings against their one-step intervals, alarms ringed |
//! | [`search_card`] | a [`SearchOutcome`](lagwise::SearchOutcome) | candidates by criterion, white and not-white apart |
//!
//! Every card is one SVG document with a `<title>` and `<desc>` for screen readers, the
//! tag and unit in its headline, colours that stay apart in grey and for red–green colour
//! blindness, and the scales of its panels ([`Card::panels`]) so that a value's pixel can
//! be found. Cards are drawn with `plotters`' SVG backend: pure Rust, no fonts or system
//! libraries; text stays text.
//!
//! ```
//! use lagwise::{Blueprint, Simulator};
//! use lagwise_figures::{residual_card, Caption, FleetPage, TagSheet};
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! let x = Simulator::builder().autoregressive(&[0.6]).build()?.generate(300, 7);
//! let model = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
//! let check = model.residual_check(20, 0.05)?;
//! let card = residual_card(&Caption::new("KB-SS0001-TS").unit("°C"), &model, &check)?;
//! assert!(card.svg().contains("<title"));
//! let mut page = FleetPage::new("Morning check");
//! page.add(TagSheet::new("KB-SS0001-TS").residuals(check.white, None).card(card));
//! let html = page.render()?.into_html();
//! assert!(html.contains("<svg"));
//! # Ok(()) }
//! ```
#![forbid(unsafe_code)]

mod cards;
mod draw;
mod frame;
mod page;
mod palette;

pub use cards::correlogram::correlogram_card;
pub use cards::fan::fan_card;
pub use cards::residuals::residual_card;
pub use cards::search::search_card;
pub use cards::watch::watch_strip;
pub use frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, escape_text, utc_minutes,
};
pub use page::{DEFAULT_CARD_LIMIT, FleetPage, RenderedPage, TagSheet};
