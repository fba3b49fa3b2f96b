//! The forecast fan: where the readings are heading, and how sure that is.
//!
//! Layout (920 × 400): a headline; one panel with the tail of the history as a navy line,
//! a dotted "now" line, the forecast bands from the widest (lightest) to the narrowest
//! (darker sea green), the mean as a dark green line and its last point as a ringed dot
//! labelled with its value; a key below the headline.

use crate::draw::{self, band, runs, trace};
use crate::frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, Result, drawing, finish,
    finite_extent, padded, short_number,
};
use crate::palette::{FAN_MEAN, FAN_NARROW, FAN_WIDE, PAPER, QUIET, TRACE};
use lagwise::{Forecast, TimeAxis};
use plotters::prelude::*;

const CARD: &str = "forecast fan";
const W: u32 = 920;
const H: u32 = 400;

/// The time axis to label with: the caption's, else one read off the forecast's
/// timestamps (two steps give the cadence).
pub(crate) fn axis_from_steps(
    caption: &Caption,
    points: &[(u64, Option<i64>)],
) -> Option<TimeAxis> {
    if let Some(a) = caption.axis() {
        return Some(a);
    }
    let timed: Vec<(u64, i64)> = points
        .iter()
        .filter_map(|&(i, t)| t.map(|t| (i, t)))
        .collect();
    if timed.len() < 2 {
        return None;
    }
    let (i0, t0) = timed[0];
    let (i1, t1) = timed[timed.len() - 1];
    if i1 <= i0 {
        return None;
    }
    let cadence = (t1 - t0) / (i1 - i0) as i64;
    let origin = t0.checked_sub(cadence.checked_mul(i64::try_from(i0).ok()?)?)?;
    TimeAxis::new(origin, cadence).ok()
}

/// Draw a forecast fan. `history` holds the readings that immediately precede the first
/// forecast step (the last `shown` of them are drawn; NaN readings leave gaps).
pub fn fan_card(
    caption: &Caption,
    history: &[f64],
    forecast: &Forecast,
    shown: usize,
) -> Result<Card> {
    let steps = &forecast.steps;
    let Some(first) = steps.first() else {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "the forecast has no steps".into(),
        });
    };
    let last = &steps[steps.len() - 1];
    let tail = &history[history.len().saturating_sub(shown)..];
    let start = first.index as f64 - tail.len() as f64;
    let axis = axis_from_steps(
        caption,
        &steps
            .iter()
            .map(|s| (s.index, s.time_ms))
            .collect::<Vec<_>>(),
    );
    // Levels from the widest to the narrowest.
    let mut order: Vec<usize> = (0..forecast.levels.len()).collect();
    order.sort_by(|&a, &b| forecast.levels[b].total_cmp(&forecast.levels[a]));
    let shades = |k: usize, n: usize| -> RGBColor {
        if n <= 1 {
            return FAN_WIDE;
        }
        let t = k as f64 / (n - 1) as f64;
        let mix = |a: u8, b: u8| (f64::from(a) + t * (f64::from(b) - f64::from(a))).round() as u8;
        RGBColor(
            mix(FAN_WIDE.0, FAN_NARROW.0),
            mix(FAN_WIDE.1, FAN_NARROW.1),
            mix(FAN_WIDE.2, FAN_NARROW.2),
        )
    };
    let (lo, hi) = finite_extent(
        tail.iter()
            .copied()
            .chain(steps.iter().map(|s| s.mean))
            .chain(
                steps
                    .iter()
                    .flat_map(|s| s.intervals.iter().flat_map(|i| [i.lower, i.upper])),
            ),
    )
    .ok_or(FigureError::NothingToDraw {
        card: CARD,
        reason: "no finite value in the history tail or the forecast".into(),
    })?;
    let (y0, y1) = padded(lo, hi);
    let x1 = last.index as f64 + 0.02 * (last.index as f64 - start).max(1.0);
    let mut panels = Vec::with_capacity(1);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        root.fill(&PAPER).map_err(drawing(CARD))?;
        let (head, body) = root.split_vertically(64);
        let when = match axis.and_then(|a| a.time_of(first.index)) {
            Some(ms) => format!("from {} UTC", crate::frame::utc_minutes(ms)),
            None => format!("from reading {}", first.index),
        };
        draw::headline(
            &head,
            caption,
            format!("Forecast {} steps ahead {when}", steps.len()),
            CARD,
        )?;
        // The key.
        let mut x = 14;
        let key_y = 46;
        head.draw(&PathElement::new(
            vec![(x, key_y + 6), (x + 22, key_y + 6)],
            TRACE.stroke_width(2),
        ))
        .map_err(drawing(CARD))?;
        head.draw(&Text::new("history", (x + 26, key_y), draw::text(11)))
            .map_err(drawing(CARD))?;
        x += 90;
        head.draw(&PathElement::new(
            vec![(x, key_y + 6), (x + 22, key_y + 6)],
            FAN_MEAN.stroke_width(3),
        ))
        .map_err(drawing(CARD))?;
        head.draw(&Text::new("mean", (x + 26, key_y), draw::text(11)))
            .map_err(drawing(CARD))?;
        x += 76;
        for (k, &i) in order.iter().enumerate() {
            head.draw(&Rectangle::new(
                [(x, key_y), (x + 22, key_y + 12)],
                shades(k, order.len()).filled(),
            ))
            .map_err(drawing(CARD))?;
            head.draw(&Text::new(
                format!("{:.0}% interval", 100.0 * forecast.levels[i]),
                (x + 26, key_y),
                draw::text(11),
            ))
            .map_err(drawing(CARD))?;
            x += 118;
        }
        let mut chart = draw::reading_panel(&body, caption, axis, (start, x1), (y0, y1), CARD)?;
        for (k, &i) in order.iter().enumerate() {
            let pts: Vec<(f64, f64, f64)> = steps
                .iter()
                .filter_map(|s| {
                    s.intervals
                        .get(i)
                        .map(|iv| (s.index as f64, iv.lower, iv.upper))
                })
                .collect();
            band(&mut chart, &pts, shades(k, order.len()), CARD)?;
        }
        let hist: Vec<(f64, f64)> = tail
            .iter()
            .enumerate()
            .map(|(i, &v)| (start + i as f64, v))
            .collect();
        trace(&mut chart, &runs(&hist, 900), TRACE.stroke_width(2), CARD)?;
        let now = first.index as f64 - 0.5;
        chart
            .draw_series(DashedLineSeries::new(
                [(now, y0), (now, y1)],
                2,
                3,
                QUIET.stroke_width(1),
            ))
            .map_err(drawing(CARD))?;
        let mean: Vec<(f64, f64)> = steps.iter().map(|s| (s.index as f64, s.mean)).collect();
        trace(
            &mut chart,
            &runs(&mean, 900),
            FAN_MEAN.stroke_width(3),
            CARD,
        )?;
        let end = (last.index as f64, last.mean);
        if last.mean.is_finite() {
            chart
                .draw_series([
                    Circle::new(end, 6, PAPER.filled()),
                    Circle::new(end, 6, FAN_MEAN.stroke_width(2)),
                    Circle::new(end, 3, FAN_MEAN.filled()),
                ])
                .map_err(drawing(CARD))?;
        }
        panels.push(PanelScale::of(Panel::Fan, &chart));
        root.present().map_err(drawing(CARD))?;
    }
    let title = format!("Forecast fan — {}", caption.headline());
    let widest = order
        .first()
        .and_then(|&i| last.intervals.get(i).map(|iv| (forecast.levels[i], iv)));
    let description = format!(
        "History of {} readings then a forecast of {} steps. Last step: mean {}{}.",
        tail.len(),
        steps.len(),
        short_number(last.mean),
        widest.map_or(String::new(), |(l, iv)| format!(
            ", {:.0}% interval {} to {}",
            100.0 * l,
            short_number(iv.lower),
            short_number(iv.upper)
        ))
    );
    Ok(finish(
        CardKind::Fan,
        caption,
        title,
        description,
        svg,
        (W, H),
        panels,
    ))
}
