//! The residual card: is the fitted model still describing the series?
//!
//! Layout (920 × 660): a headline with the model and a verdict badge; a full-width strip
//! of standardized one-step residuals over time with the ±1.96 lines and the readings
//! outside them marked; a row with the residuals' ACF and PACF side by side, each with its
//! band; and a row with the Ljung–Box p-values by lag (the test level as a dashed line,
//! lags without degrees of freedom as grey columns) beside the residuals' histogram under
//! the standard normal density.

use crate::draw::{self, PanelSpec, correlation_bars, flat_band, level, panel, runs, trace};
use crate::frame::{
    Caption, Card, CardKind, FigureError, Panel, PanelScale, Result, drawing, finish, index_label,
    time_ticks,
};
use crate::palette::{ALERT, BAND_EDGE, GUIDE, INK, PAPER, QUIET, SECOND, TRACE};
use lagwise::{FittedModel, ResidualCheck};
use plotters::prelude::*;

const CARD: &str = "residual card";
const W: u32 = 920;
const H: u32 = 660;
/// The interval lines of the residual strip: ±z at 95% (z from the normal quantile table).
const Z95: f64 = 1.959_963_984_540_054;

/// Draw the residual card of a fitted model from its residual check.
///
/// `check` is what [`FittedModel::residual_check`] returned for `model`. Errors with
/// [`FigureError::NothingToDraw`] when the model holds no residuals (restored without
/// them) or none is finite.
pub fn residual_card(
    caption: &Caption,
    model: &FittedModel,
    check: &ResidualCheck,
) -> Result<Card> {
    let z = model.standardized_residuals();
    if !model.has_residuals() || z.is_empty() {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "the model holds no residuals (restored without them?)".into(),
        });
    }
    let finite: Vec<f64> = z.iter().copied().filter(|v| v.is_finite()).collect();
    if finite.is_empty() {
        return Err(FigureError::NothingToDraw {
            card: CARD,
            reason: "no residual is finite".into(),
        });
    }
    let axis = caption.axis().or(model.time_axis());
    let label = model.blueprint().shape_label();
    let outside = finite.iter().filter(|v| v.abs() > Z95).count();
    let mut panels = Vec::with_capacity(5);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        root.fill(&PAPER).map_err(drawing(CARD))?;
        let (head, body) = root.split_vertically(62);
        header(&head, caption, &label, model, check)?;
        let (strip, rest) = body.split_vertically(200);
        let (row1, row2) = rest.split_vertically(200);

        // Residuals over time.
        let n = z.len();
        let top = finite.iter().fold(3.5f64, |m, v| m.max(v.abs())).min(8.0) * 1.05;
        let xfmt = |x: &f64| index_label(axis, *x);
        let yfmt = |y: &f64| format!("{y:.0}");
        let mut chart = panel(
            &strip,
            &PanelSpec {
                title: format!(
                    "Standardized one-step residuals — {outside} of {} outside ±1.96 ({:.1}%, about 5% expected)",
                    finite.len(),
                    100.0 * outside as f64 / finite.len() as f64
                ),
                x: (0.0, n.saturating_sub(1).max(1) as f64),
                y: (-top, top),
                x_desc: String::new(),
                y_desc: "residual / σ".into(),
                x_labels: 7,
                y_labels: 7,
                x_format: &xfmt,
                y_format: &yfmt,
                y_label_width: 52,
                x_ticks: axis.map_or(Vec::new(), |a| {
                    time_ticks(a, 0.0, n.saturating_sub(1).max(1) as f64, 8)
                }),
            },
            CARD,
        )?;
        let pts: Vec<(f64, f64)> = z
            .iter()
            .enumerate()
            .map(|(i, &v)| (i as f64, v.clamp(-top, top)))
            .collect();
        let lines = runs(&pts, 900);
        trace(&mut chart, &lines, TRACE.stroke_width(1), CARD)?;
        level(&mut chart, Z95, BAND_EDGE, CARD)?;
        level(&mut chart, -Z95, BAND_EDGE, CARD)?;
        chart
            .draw_series(
                pts.iter()
                    .filter(|(_, v)| v.abs() > Z95)
                    .take(400)
                    .map(|&p| Circle::new(p, 2, ALERT.filled())),
            )
            .map_err(drawing(CARD))?;
        panels.push(PanelScale::of(Panel::ResidualTrace, &chart));

        // ACF and PACF of the residuals.
        let (acf_area, pacf_area) = row1.split_horizontally(W / 2);
        let cg = &check.correlogram;
        let lags = cg.max_lag();
        let acf: Vec<(f64, f64)> = draw::lag_points(cg.autocorrelations());
        let pacf: Vec<(f64, f64)> = draw::lag_points(cg.partial_autocorrelations());
        let band = check.band.iter().map(|(_, b)| b).fold(0.0f64, f64::max);
        let pband = cg.partial_band(1.0 - check.alpha).unwrap_or(band);
        let reach = |v: &[(f64, f64)], b: f64| {
            let m = v.iter().fold(
                b,
                |m, (_, r)| if r.is_finite() { m.max(r.abs()) } else { m },
            );
            ((m * 1.15 * 10.0).ceil() / 10.0).min(1.0)
        };
        let lagfmt = |x: &f64| format!("{x:.0}");
        for (area, values, b, which, name, color) in [
            (&acf_area, &acf, band, Panel::ResidualAcf, "ACF", TRACE),
            (
                &pacf_area,
                &pacf,
                pband,
                Panel::ResidualPacf,
                "PACF",
                SECOND,
            ),
        ] {
            let reach = reach(values, b);
            let rfmt = crate::cards::correlogram::correlation_format(reach);
            let mut chart = panel(
                area,
                &PanelSpec {
                    title: format!(
                        "{name} of the residuals — band ±{b:.3} ({:.0}%)",
                        100.0 * (1.0 - check.alpha)
                    ),
                    x: (0.0, lags as f64 + 1.0),
                    y: (-reach, reach),
                    x_desc: "lag".into(),
                    y_desc: String::new(),
                    x_labels: 8,
                    y_labels: 5,
                    x_format: &lagfmt,
                    y_format: &rfmt,
                    y_label_width: 40,
                    x_ticks: Vec::new(),
                },
                CARD,
            )?;
            flat_band(&mut chart, b, CARD)?;
            correlation_bars(&mut chart, values, lags, color, |_, r| r.abs() > b, CARD)?;
            panels.push(PanelScale::of(which, &chart));
        }

        // Ljung–Box p-values by lag.
        let (scan_area, spread_area) = row2.split_horizontally(W * 58 / 100);
        let rows = check.portmanteau.rows();
        let last = rows.last().map_or(1, |r| r.lag);
        let pfmt = |y: &f64| format!("{y:.1}");
        let mut chart = panel(
            &scan_area,
            &PanelSpec {
                title: format!(
                    "Ljung–Box p-value by lag — dashed: level {}; grey: no degrees of freedom",
                    check.alpha
                ),
                x: (0.0, last as f64 + 1.0),
                y: (0.0, 1.0),
                x_desc: "lag".into(),
                y_desc: String::new(),
                x_labels: 8,
                y_labels: 6,
                x_format: &lagfmt,
                y_format: &pfmt,
                y_label_width: 40,
                x_ticks: Vec::new(),
            },
            CARD,
        )?;
        chart
            .draw_series(
                rows.iter()
                    .filter(|r| r.ljung_box_p_value.is_none())
                    .map(|r| {
                        let x = r.lag as f64;
                        Rectangle::new([(x - 0.5, 0.0), (x + 0.5, 1.0)], GUIDE.filled())
                    }),
            )
            .map_err(drawing(CARD))?;
        chart
            .draw_series(
                rows.iter()
                    .filter(|r| r.ljung_box_p_value.is_none())
                    .map(|r| Cross::new((r.lag as f64, 0.04), 3, QUIET.stroke_width(1))),
            )
            .map_err(drawing(CARD))?;
        level(&mut chart, check.alpha, ALERT, CARD)?;
        let tested: Vec<(f64, f64)> = rows
            .iter()
            .filter_map(|r| r.ljung_box_p_value.map(|p| (r.lag as f64, p)))
            .collect();
        chart
            .draw_series(std::iter::once(PathElement::new(
                tested.clone(),
                QUIET.stroke_width(1),
            )))
            .map_err(drawing(CARD))?;
        chart
            .draw_series(tested.iter().map(|&(x, p)| {
                if p < check.alpha {
                    Circle::new((x, p), 3, ALERT.filled())
                } else {
                    Circle::new((x, p), 2, TRACE.filled())
                }
            }))
            .map_err(drawing(CARD))?;
        panels.push(PanelScale::of(Panel::WhitenessScan, &chart));

        // The spread: histogram of standardized residuals against N(0, 1).
        let width = 0.5;
        let edges: Vec<f64> = (0..=18).map(|k| -4.5 + width * k as f64).collect();
        let mut counts = vec![0usize; edges.len() - 1];
        for v in &finite {
            let k = (((v.clamp(-4.4999, 4.4999)) + 4.5) / width).floor() as usize;
            let last = counts.len() - 1;
            counts[k.min(last)] += 1;
        }
        let m = finite.len() as f64;
        let dens: Vec<f64> = counts.iter().map(|&c| c as f64 / (m * width)).collect();
        let top = dens.iter().fold(0.42f64, |a, &b| a.max(b)) * 1.1;
        let xf = |x: &f64| format!("{x:.0}");
        let yf = |y: &f64| format!("{y:.1}");
        let normality = check.normality.as_ref().map_or(String::new(), |t| {
            format!(" — Jarque–Bera p = {:.3}", t.p_value)
        });
        let mut chart = panel(
            &spread_area,
            &PanelSpec {
                title: format!("Spread against N(0,1){normality}"),
                x: (-4.5, 4.5),
                y: (0.0, top),
                x_desc: "residual / σ (ends hold the tails)".into(),
                y_desc: String::new(),
                x_labels: 9,
                y_labels: 4,
                x_format: &xf,
                y_format: &yf,
                y_label_width: 36,
                x_ticks: Vec::new(),
            },
            CARD,
        )?;
        chart
            .draw_series(counts.iter().enumerate().map(|(k, _)| {
                Rectangle::new(
                    [(edges[k] + 0.03, 0.0), (edges[k + 1] - 0.03, dens[k])],
                    TRACE.mix(0.75).filled(),
                )
            }))
            .map_err(drawing(CARD))?;
        let curve: Vec<(f64, f64)> = (0..=180)
            .map(|i| {
                let x = -4.5 + 0.05 * i as f64;
                (
                    x,
                    (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt(),
                )
            })
            .collect();
        chart
            .draw_series(std::iter::once(PathElement::new(
                curve,
                ALERT.stroke_width(2),
            )))
            .map_err(drawing(CARD))?;
        panels.push(PanelScale::of(Panel::ResidualSpread, &chart));
        root.present().map_err(drawing(CARD))?;
    }
    let title = format!("Residual card — {}", caption.headline());
    let description = format!(
        "Residuals of {label} fitted to {} readings ({} usable residuals; {outside} outside ±1.96). {} {}",
        z.len(),
        finite.len(),
        check.verdict_line(),
        check.health_line()
    );
    Ok(finish(
        CardKind::Residuals,
        caption,
        title,
        description,
        svg,
        (W, H),
        panels,
    ))
}

fn header(
    area: &draw::Area<'_>,
    caption: &Caption,
    label: &str,
    model: &FittedModel,
    check: &ResidualCheck,
) -> Result<()> {
    area.draw(&Text::new(caption.headline(), (14, 8), draw::bold(17)))
        .map_err(drawing(CARD))?;
    let sigma = model.innovation_variance().sqrt();
    let sigma = match caption.unit_text() {
        Some(u) => format!("{} {u}", crate::frame::short_number(sigma)),
        None => crate::frame::short_number(sigma),
    };
    // The model and σ, then the verdict on a line of its own (labels with harmonic terms
    // and the verdict's lag details do not fit one line of the card).
    area.draw(&Text::new(
        format!("{label} · σ = {sigma}"),
        (14, 29),
        draw::text(12),
    ))
    .map_err(drawing(CARD))?;
    area.draw(&Text::new(check.verdict_line(), (14, 45), draw::text(12)))
        .map_err(drawing(CARD))?;
    // White on navy, ink on amber: both above WCAG's 4.5:1 for text.
    let (fill, ink, word) = if check.white {
        (TRACE, PAPER, "WHITE")
    } else {
        (ALERT, INK, "NOT WHITE")
    };
    let x0 = W as i32 - 128;
    area.draw(&Rectangle::new([(x0, 8), (x0 + 114, 32)], fill.filled()))
        .map_err(drawing(CARD))?;
    area.draw(&Text::new(
        word,
        (x0 + 57, 14),
        (draw::FONT, 13)
            .into_font()
            .style(FontStyle::Bold)
            .color(&ink)
            .pos(plotters::style::text_anchor::Pos::new(
                plotters::style::text_anchor::HPos::Center,
                plotters::style::text_anchor::VPos::Top,
            )),
    ))
    .map_err(drawing(CARD))?;
    Ok(())
}
