//! The search card: which models were tried, how they ranked, and which ones left white
//! residuals.
//!
//! Layout (920 wide, 150 + 20 px per row): a headline with the differencing evidence;
//! one panel with a row per candidate (label on the left), the criterion's distance from
//! the best candidate as a dot: navy discs for candidates whose residuals passed the
//! whiteness gate (upper block), hollow amber squares below a divider for those that did
//! not; the chosen model ringed. Candidates without a criterion — screened out by a quick
//! fit (not refitted) or failed — are counted under the panel.

use crate::draw::{self, PanelSpec, panel};
use crate::frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, Result, drawing, finish, short_number,
};
use crate::palette::{ALERT, INK, PAPER, QUIET, TRACE};
use lagwise::{Candidate, SearchOutcome};
use plotters::prelude::*;

const CARD: &str = "search card";
const W: u32 = 920;
/// At most this many candidates are drawn (the best by criterion in each block); the rest
/// are counted under the panel.
const MAX_ROWS: usize = 36;

/// Draw the search card of an order search.
pub fn search_card(caption: &Caption, outcome: &SearchOutcome) -> Result<Card> {
    let ranked = |adequate: bool| -> Vec<&Candidate> {
        let mut v: Vec<&Candidate> = outcome
            .candidates
            .iter()
            .filter(|c| c.adequate == adequate && c.criterion.is_some_and(f64::is_finite))
            .collect();
        v.sort_by(|a, b| {
            a.criterion
                .unwrap_or(f64::NAN)
                .total_cmp(&b.criterion.unwrap_or(f64::NAN))
        });
        v
    };
    let good = ranked(true);
    let bad = ranked(false);
    let unranked: Vec<&Candidate> = outcome
        .candidates
        .iter()
        .filter(|c| !c.criterion.is_some_and(f64::is_finite))
        .collect();
    // Without a criterion: screened out by a quick fit (a screening search refits only
    // its finalists), or failed.
    let (screened, failed): (Vec<&Candidate>, Vec<&Candidate>) = unranked
        .iter()
        .partition(|c| c.failure.is_none() && !c.refitted && c.screening_value.is_some());
    if good.is_empty() && bad.is_empty() {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "no candidate has a criterion value".into(),
        });
    }
    let keep_good = good
        .len()
        .min(MAX_ROWS.div_ceil(2).max(MAX_ROWS.saturating_sub(bad.len())));
    let keep_bad = bad.len().min(MAX_ROWS - keep_good);
    let hidden = good.len() - keep_good + bad.len() - keep_bad;
    let best = good
        .iter()
        .chain(bad.iter())
        .filter_map(|c| c.criterion)
        .fold(f64::INFINITY, f64::min);
    // Rows from the top: adequate candidates, a divider row, inadequate ones.
    let mut rows: Vec<(String, Option<&Candidate>)> = Vec::new();
    for c in &good[..keep_good] {
        rows.push((c.shape.to_string(), Some(c)));
    }
    if keep_bad > 0 {
        rows.push(("— residuals not white —".into(), None));
        for c in &bad[..keep_bad] {
            rows.push((c.shape.to_string(), Some(c)));
        }
    }
    let chosen = outcome.model.blueprint().shape();
    // The scale: far-off candidates would squash the close ones, so the axis ends at
    // three times the 75th percentile of the distances (at least 10) and candidates
    // beyond it sit on the edge with their distance written beside them.
    let mut deltas: Vec<f64> = rows
        .iter()
        .filter_map(|(_, c)| c.and_then(|c| c.criterion))
        .map(|v| v - best)
        .collect();
    deltas.sort_by(f64::total_cmp);
    let far = deltas.last().copied().unwrap_or(0.0);
    let q75 = deltas.get((deltas.len() * 3) / 4).copied().unwrap_or(0.0);
    let span = far.min((3.0 * q75).max(10.0)).max(1.0);
    let n = rows.len();
    let h = (150 + 20 * n) as u32;
    let labels: Vec<String> = rows.iter().map(|(l, _)| l.clone()).collect();
    let mut panels = Vec::with_capacity(1);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, h)).into_drawing_area();
        root.fill(&PAPER).map_err(drawing(CARD))?;
        let (head, rest) = root.split_vertically(52);
        let (body, foot) = rest.split_vertically(h - 52 - 28);
        draw::headline(
            &head,
            caption,
            format!(
                "Order search: {} candidates; chose {chosen}{} · differencing d = {}, D = {}",
                outcome.candidates.len(),
                if outcome.adequate {
                    ""
                } else {
                    " (no candidate left white residuals)"
                },
                outcome.differencing.d,
                outcome.differencing.seasonal_d
            ),
            CARD,
        )?;
        // Row k is drawn at y = n − k so the best sits on top.
        let yfmt = |y: &f64| {
            let k = n as f64 - y;
            if (k - k.round()).abs() < 1e-9 && k >= 0.0 && (k as usize) < n {
                labels[k as usize].clone()
            } else {
                String::new()
            }
        };
        let xfmt = |x: &f64| short_number(*x);
        let mut chart = panel(
            &body,
            &PanelSpec {
                title: String::new(),
                x: (-0.04 * span, span * 1.08),
                y: (0.4, n as f64 + 0.6),
                x_desc: "criterion above the best candidate (lower is better; → beyond the axis)"
                    .into(),
                y_desc: String::new(),
                x_labels: 8,
                y_labels: n + 1,
                x_format: &xfmt,
                y_format: &yfmt,
                y_label_width: 250,
                x_ticks: Vec::new(),
            },
            CARD,
        )?;
        for (k, (_, c)) in rows.iter().enumerate() {
            let y = (n - k) as f64;
            let Some(c) = c else {
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(-0.04 * span, y), (span * 1.08, y)],
                        QUIET.stroke_width(1),
                    )))
                    .map_err(drawing(CARD))?;
                continue;
            };
            let delta = c.criterion.unwrap_or(best) - best;
            let x = delta.min(span);
            if delta > span {
                chart
                    .draw_series([EmptyElement::at((x, y))
                        + Text::new(
                            format!("→ +{}", short_number(delta)),
                            (10, -6),
                            (draw::FONT, 11).into_font().color(&INK),
                        )])
                    .map_err(drawing(CARD))?;
            }
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(0.0, y), (x, y)],
                    QUIET.stroke_width(1),
                )))
                .map_err(drawing(CARD))?;
            if c.adequate {
                chart
                    .draw_series([Circle::new((x, y), 5, TRACE.filled())])
                    .map_err(drawing(CARD))?;
            } else {
                chart
                    .draw_series([EmptyElement::at((x, y))
                        + Rectangle::new([(-5, -5), (5, 5)], ALERT.stroke_width(2))])
                    .map_err(drawing(CARD))?;
            }
            if c.shape == chosen {
                chart
                    .draw_series([EmptyElement::at((x, y))
                        + Circle::new((0, 0), 9, INK.stroke_width(2))
                        + Text::new("chosen", (13, -6), (draw::FONT, 11).into_font().color(&INK))])
                    .map_err(drawing(CARD))?;
            }
            let p = c
                .whiteness_p
                .map_or(String::new(), |p| format!("p = {p:.2}"));
            chart
                .draw_series([EmptyElement::at((span * 1.08, y))
                    + Text::new(p, (-52, -6), (draw::FONT, 10).into_font().color(&QUIET))])
                .map_err(drawing(CARD))?;
        }
        panels.push(PanelScale::of(Panel::Candidates, &chart));
        let mut note = Vec::new();
        if hidden > 0 {
            note.push(format!("{hidden} more candidates not drawn"));
        }
        if !screened.is_empty() {
            note.push(format!(
                "{} more screened out by quick (CSS) fits, not refitted",
                screened.len()
            ));
        }
        if !failed.is_empty() {
            let names: Vec<String> = failed.iter().take(4).map(|c| c.shape.to_string()).collect();
            note.push(format!(
                "{} without a criterion (fit failed): {}{}",
                failed.len(),
                names.join(", "),
                if failed.len() > 4 { ", …" } else { "" }
            ));
        }
        note.push("right: Ljung–Box p of the whiteness gate".into());
        foot.draw(&Text::new(note.join(" · "), (14, 6), draw::text(11)))
            .map_err(drawing(CARD))?;
        root.present().map_err(drawing(CARD))?;
    }
    let title = format!("Search card — {}", caption.headline());
    let description = format!(
        "{} candidates: {} refitted with white residuals, {} refitted without, {} screened out by quick fits, {} failed. Chosen: {chosen}. {}",
        outcome.candidates.len(),
        good.len(),
        bad.len(),
        screened.len(),
        failed.len(),
        outcome.explanation
    );
    Ok(finish(
        CardKind::Search,
        caption,
        title,
        description,
        svg,
        (W, h),
        panels,
    ))
}
