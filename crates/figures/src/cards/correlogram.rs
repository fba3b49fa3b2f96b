//! The correlogram card for raw readings: before any model, what does the series remember?
//!
//! Layout (920 × 480): a headline; the ACF across the full width with the white-noise band
//! filled and Bartlett's cumulative band as dashed edges; the PACF below it with its band.
//! Seasonal lags (multiples of the period) stand on tinted stripes labelled with the
//! cycle count, or with the span in hours or days when the caption has a time axis.

use crate::draw::{self, PanelSpec, correlation_bars, flat_band, panel};
use crate::frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, Result, drawing, finish,
};
use crate::palette::{BAND_EDGE, PAPER, SEASON, SECOND, TRACE};
use lagwise::{BandRule, Correlogram};
use plotters::prelude::*;

const CARD: &str = "correlogram card";
const W: u32 = 920;
const H: u32 = 480;

/// Draw the correlogram card of raw readings. `period` marks seasonal lags (`None` or 1:
/// none); `level` is the bands' confidence level (e.g. 0.95).
pub fn correlogram_card(
    caption: &Caption,
    correlogram: &Correlogram,
    period: Option<usize>,
    level: f64,
) -> Result<Card> {
    let lags = correlogram.max_lag();
    if lags == 0 {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "the correlogram has no lags".into(),
        });
    }
    let white = correlogram
        .bands(level, BandRule::WhiteNoise)
        .map_err(|e| FigureError::InvalidArgument {
            what: "level",
            reason: e.to_string(),
        })?;
    let bartlett = correlogram
        .bands(level, BandRule::BartlettCumulative)
        .map_err(|e| FigureError::InvalidArgument {
            what: "level",
            reason: e.to_string(),
        })?;
    let pband = correlogram
        .partial_band(level)
        .map_err(|e| FigureError::InvalidArgument {
            what: "level",
            reason: e.to_string(),
        })?;
    let band = white.at(1).unwrap_or(0.0);
    let period = period.filter(|&p| p > 1 && p <= lags);
    let seasonal: Vec<usize> = period.map_or(Vec::new(), |p| (p..=lags).step_by(p).collect());
    let cycle_name = |k: usize| -> String {
        match (caption.axis(), period) {
            (Some(a), Some(p)) => {
                let hours = (k * p) as f64 * a.cadence_ms() as f64 / 3.6e6;
                if hours >= 24.0 && (hours / 24.0).fract().abs() < 1e-9 {
                    format!("{:.0} d", hours / 24.0)
                } else {
                    let h = format!("{hours:.2}");
                    format!("{} h", h.trim_end_matches('0').trim_end_matches('.'))
                }
            }
            _ => format!("×{k}"),
        }
    };
    let acf: Vec<(f64, f64)> = draw::lag_points(correlogram.autocorrelations());
    let pacf: Vec<(f64, f64)> = draw::lag_points(correlogram.partial_autocorrelations());
    let outside = acf.iter().filter(|(_, r)| r.abs() > band).count();
    let mut panels = Vec::with_capacity(2);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        root.fill(&PAPER).map_err(drawing(CARD))?;
        let (head, body) = root.split_vertically(48);
        draw::headline(
            &head,
            caption,
            format!(
                "Readings before any model: {} of {} present, {outside} of {lags} lags outside the white-noise band",
                correlogram.readings_present(),
                correlogram.readings_total()
            ),
            CARD,
        )?;
        let (top_area, bottom_area) = body.split_vertically((H - 48) / 2);
        let lagfmt = |x: &f64| format!("{x:.0}");
        for (area, values, which, name, b) in [
            (&top_area, &acf, Panel::ReadingAcf, "ACF", band),
            (&bottom_area, &pacf, Panel::ReadingPacf, "PACF", pband),
        ] {
            let reach = values.iter().fold(
                b,
                |m, (_, r)| if r.is_finite() { m.max(r.abs()) } else { m },
            );
            let reach = ((reach * 1.12 * 10.0).ceil() / 10.0).min(1.0);
            let rfmt = correlation_format(reach);
            let title = if which == Panel::ReadingAcf {
                format!(
                    "ACF — filled: white-noise band ±{band:.3}; dashed: Bartlett's band given the shorter lags ({:.0}%)",
                    100.0 * level
                )
            } else {
                format!("PACF — filled: band ±{pband:.3} ({:.0}%)", 100.0 * level)
            };
            let mut chart = panel(
                area,
                &PanelSpec {
                    title,
                    x: (0.0, lags as f64 + 1.0),
                    y: (-reach, reach),
                    x_desc: if which == Panel::ReadingPacf {
                        "lag".into()
                    } else {
                        String::new()
                    },
                    y_desc: name.into(),
                    x_labels: 12,
                    y_labels: 5,
                    x_format: &lagfmt,
                    y_format: &rfmt,
                    y_label_width: 48,
                    x_ticks: Vec::new(),
                },
                CARD,
            )?;
            let stripe = (lags as f64 / 200.0).max(0.6);
            chart
                .draw_series(seasonal.iter().map(|&s| {
                    Rectangle::new(
                        [(s as f64 - stripe, -reach), (s as f64 + stripe, reach)],
                        SEASON.filled(),
                    )
                }))
                .map_err(drawing(CARD))?;
            if which == Panel::ReadingAcf {
                chart
                    .draw_series(seasonal.iter().enumerate().map(|(k, &s)| {
                        Text::new(
                            cycle_name(k + 1),
                            (s as f64 + stripe, reach * 0.92),
                            draw::text(10),
                        )
                    }))
                    .map_err(drawing(CARD))?;
            }
            flat_band(&mut chart, b, CARD)?;
            if which == Panel::ReadingAcf {
                let upper: Vec<(f64, f64)> = bartlett
                    .iter()
                    .map(|(h, v)| (h as f64, v.min(reach)))
                    .collect();
                let lower: Vec<(f64, f64)> = bartlett
                    .iter()
                    .map(|(h, v)| (h as f64, (-v).max(-reach)))
                    .collect();
                for edge in [upper, lower] {
                    chart
                        .draw_series(DashedLineSeries::new(edge, 5, 3, BAND_EDGE.stroke_width(1)))
                        .map_err(drawing(CARD))?;
                }
            }
            let color = if which == Panel::ReadingAcf {
                TRACE
            } else {
                SECOND
            };
            correlation_bars(
                &mut chart,
                values,
                lags,
                color,
                |h, r| r.abs() > b && seasonal.contains(&(h as usize)),
                CARD,
            )?;
            panels.push(PanelScale::of(which, &chart));
        }
        root.present().map_err(drawing(CARD))?;
    }
    let title = format!("Correlogram card — {}", caption.headline());
    let mut description = format!(
        "Autocorrelations and partial autocorrelations of the readings at lags 1 to {lags}; {outside} autocorrelations outside the {:.0}% white-noise band ±{band:.3}.",
        100.0 * level
    );
    if let Some(p) = period {
        let at: Vec<String> = seasonal
            .iter()
            .map(|&s| {
                format!(
                    "r({s}) = {:.2}",
                    correlogram.autocorrelation(s).unwrap_or(f64::NAN)
                )
            })
            .collect();
        description.push_str(&format!(
            " Seasonal lags (period {p}, amber when outside the band): {}.",
            at.join(", ")
        ));
    }
    Ok(finish(
        CardKind::Correlogram,
        caption,
        title,
        description,
        svg,
        (W, H),
        panels,
    ))
}

/// Labels for a correlation axis reaching `±reach`: two decimals when the axis's labels
/// fall on steps finer than 0.1 (a reach of 0.2 or less gives steps of 0.05), one
/// otherwise — one decimal at steps of 0.05 printed "0.1" twice.
pub(crate) fn correlation_format(reach: f64) -> impl Fn(&f64) -> String {
    let places = if reach <= 0.2 { 2 } else { 1 };
    move |y: &f64| format!("{y:.places$}")
}
