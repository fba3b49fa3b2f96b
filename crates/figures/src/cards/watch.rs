//! The watch strip: how the newest readings compared with what the model expected.
//!
//! Layout (920 × 320): a headline with the alarm count; one panel with each reading's
//! one-step interval as a light band, the one-step prediction as a thin blue line, the
//! readings as navy dots, missing readings as grey ticks on the floor, and alarms as amber
//! rings with their standardized value.

use crate::draw::{self, band};
use crate::frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, Result, drawing, finish,
    finite_extent, padded, short_number,
};
use crate::palette::{ALERT, BAND, INK, PAPER, QUIET, SECOND, TRACE};
use lagwise::ReadingCheck;
use plotters::prelude::*;

const CARD: &str = "watch strip";
const W: u32 = 920;
const H: u32 = 320;

/// Draw the watch strip of a run of monitor checks (in the order they were made).
pub fn watch_strip(caption: &Caption, checks: &[ReadingCheck], alarm_level: f64) -> Result<Card> {
    if checks.is_empty() {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "no readings were checked".into(),
        });
    }
    let axis = crate::cards::fan::axis_from_steps(
        caption,
        &checks
            .iter()
            .map(|c| (c.index, c.time_ms))
            .collect::<Vec<_>>(),
    );
    let alarms: Vec<&ReadingCheck> = checks.iter().filter(|c| c.outside).collect();
    let missing = checks.iter().filter(|c| !c.reading.is_finite()).count();
    let (lo, hi) = finite_extent(
        checks
            .iter()
            .flat_map(|c| [c.reading, c.lower, c.upper, c.predicted]),
    )
    .ok_or(FigureError::NothingToDraw {
        card: CARD,
        reason: "no finite reading or interval".into(),
    })?;
    let (y0, y1) = padded(lo, hi);
    let x0 = checks[0].index as f64 - 0.5;
    let x1 = checks[checks.len() - 1].index as f64 + 0.5;
    let mut panels = Vec::with_capacity(1);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        root.fill(&PAPER).map_err(drawing(CARD))?;
        let (head, body) = root.split_vertically(48);
        draw::headline(
            &head,
            caption,
            format!(
                "{} readings checked against their {:.1}% one-step intervals: {} alarm{}, {missing} missing",
                checks.len(),
                100.0 * alarm_level,
                alarms.len(),
                if alarms.len() == 1 { "" } else { "s" }
            ),
            CARD,
        )?;
        let mut chart = draw::reading_panel(&body, caption, axis, (x0, x1), (y0, y1), CARD)?;
        // Each interval holds for its own reading: a step-shaped band.
        let pts: Vec<(f64, f64, f64)> = checks
            .iter()
            .flat_map(|c| {
                let x = c.index as f64;
                [(x - 0.5, c.lower, c.upper), (x + 0.5, c.lower, c.upper)]
            })
            .collect();
        band(&mut chart, &pts, BAND, CARD)?;
        let predicted: Vec<(f64, f64)> = checks
            .iter()
            .map(|c| (c.index as f64, c.predicted))
            .collect();
        draw::trace(
            &mut chart,
            &draw::runs(&predicted, 900),
            SECOND.stroke_width(1),
            CARD,
        )?;
        chart
            .draw_series(
                checks
                    .iter()
                    .filter(|c| c.reading.is_finite())
                    .map(|c| Circle::new((c.index as f64, c.reading), 2, TRACE.filled())),
            )
            .map_err(drawing(CARD))?;
        let floor = y0 + 0.03 * (y1 - y0);
        chart
            .draw_series(
                checks
                    .iter()
                    .filter(|c| !c.reading.is_finite())
                    .map(|c| Cross::new((c.index as f64, floor), 3, QUIET.stroke_width(1))),
            )
            .map_err(drawing(CARD))?;
        for c in &alarms {
            let p = (c.index as f64, c.reading);
            chart
                .draw_series([Circle::new(p, 7, ALERT.stroke_width(2))])
                .map_err(drawing(CARD))?;
            let z = c
                .standardized
                .map_or(String::new(), |z| format!("z = {z:+.1}"));
            let above = c.reading < 0.5 * (y0 + y1);
            let ty = if above {
                c.reading + 0.08 * (y1 - y0)
            } else {
                c.reading - 0.04 * (y1 - y0)
            };
            chart
                .draw_series([Text::new(
                    z,
                    (c.index as f64 + 0.8, ty),
                    (draw::FONT, 11).into_font().color(&INK),
                )])
                .map_err(drawing(CARD))?;
        }
        panels.push(PanelScale::of(Panel::Watch, &chart));
        root.present().map_err(drawing(CARD))?;
    }
    let title = format!("Watch strip — {}", caption.headline());
    let listed: Vec<String> = alarms
        .iter()
        .take(5)
        .map(|c| {
            let when = c.time_ms.map_or(format!("reading {}", c.index), |t| {
                format!("{} UTC", crate::frame::utc_minutes(t))
            });
            format!(
                "{when}: read {} against expected {}",
                short_number(c.reading),
                short_number(c.predicted)
            )
        })
        .collect();
    let description = format!(
        "{} readings checked against their one-step intervals; {} alarms{}{}",
        checks.len(),
        alarms.len(),
        if listed.is_empty() { "." } else { ": " },
        listed.join("; ")
    );
    Ok(finish(
        CardKind::Watch,
        caption,
        title,
        description,
        svg,
        (W, H),
        panels,
    ))
}
