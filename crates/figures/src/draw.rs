//! Drawing helpers shared by the cards: the look of a panel (axes, labels, guide lines),
//! bars, filled bands, dashed levels and thinned traces.

use crate::frame::{Result, drawing};
use crate::palette::{BAND, GUIDE, INK, PAPER};
use plotters::coord::Shift;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;

pub(crate) type Chart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;
pub(crate) type Area<'b> = DrawingArea<SVGBackend<'b>, Shift>;

pub(crate) const FONT: &str = "sans-serif";

pub(crate) fn text(size: u32) -> TextStyle<'static> {
    (FONT, size).into_font().color(&INK)
}

pub(crate) fn bold(size: u32) -> TextStyle<'static> {
    (FONT, size).into_font().style(FontStyle::Bold).color(&INK)
}

/// A card's headline (tag, reading, unit) and the line under it.
pub(crate) fn headline(
    head: &Area<'_>,
    caption: &crate::frame::Caption,
    subtitle: String,
    card: &'static str,
) -> Result<()> {
    head.draw(&Text::new(caption.headline(), (14, 8), bold(17)))
        .map_err(drawing(card))?;
    head.draw(&Text::new(subtitle, (14, 30), text(12)))
        .map_err(drawing(card))?;
    Ok(())
}

/// `(lag, value)` points of lag-keyed values from lag 1 on (lag 0 of an autocorrelation
/// function is 1 by definition and not drawn).
pub(crate) fn lag_points(values: &lagwise::LagValues) -> Vec<(f64, f64)> {
    values
        .iter()
        .filter(|(h, _)| *h >= 1)
        .map(|(h, r)| (h as f64, r))
        .collect()
}

/// What a panel shows and how its axes read.
pub(crate) struct PanelSpec<'f> {
    pub title: String,
    pub x: (f64, f64),
    pub y: (f64, f64),
    pub x_desc: String,
    pub y_desc: String,
    pub x_labels: usize,
    pub y_labels: usize,
    pub x_format: &'f dyn Fn(&f64) -> String,
    pub y_format: &'f dyn Fn(&f64) -> String,
    pub y_label_width: u32,
    /// Own tick positions and labels on the horizontal axis (time axes); empty: the
    /// formatter's labels at plotters' positions.
    pub x_ticks: Vec<(f64, String)>,
}

/// Build a panel on `area`: the title top left, guide lines at the value ticks only, thin
/// ink axes.
pub(crate) fn panel<'a, 'b>(
    area: &'a Area<'b>,
    spec: &PanelSpec<'_>,
    card: &'static str,
) -> Result<Chart<'a, 'b>> {
    area.fill(&PAPER).map_err(drawing(card))?;
    area.draw(&Text::new(
        spec.title.clone(),
        (spec.y_label_width as i32 + 4, 2),
        bold(12),
    ))
    .map_err(drawing(card))?;
    let mut chart = ChartBuilder::on(area)
        .margin_top(20)
        .margin_right(14)
        .margin_left(4)
        .margin_bottom(2)
        .x_label_area_size(if spec.x_desc.is_empty() { 20 } else { 34 })
        .y_label_area_size(spec.y_label_width)
        .build_cartesian_2d(spec.x.0..spec.x.1, spec.y.0..spec.y.1)
        .map_err(drawing(card))?;
    chart
        .configure_mesh()
        .disable_x_mesh()
        .max_light_lines(0)
        .bold_line_style(GUIDE.stroke_width(1))
        .axis_style(INK.stroke_width(1))
        .x_labels(if spec.x_ticks.is_empty() {
            spec.x_labels
        } else {
            0
        })
        .y_labels(spec.y_labels)
        .label_style(text(11))
        .axis_desc_style(text(11))
        .x_desc(spec.x_desc.clone())
        .y_desc(spec.y_desc.clone())
        .x_label_formatter(spec.x_format)
        .y_label_formatter(spec.y_format)
        .draw()
        .map_err(drawing(card))?;
    let (bx, by) = area.get_base_pixel();
    for (x, label) in &spec.x_ticks {
        let (px, py) = chart.backend_coord(&(*x, spec.y.0));
        let (px, py) = (px - bx, py - by);
        area.draw(&PathElement::new(
            vec![(px, py), (px, py + 5)],
            INK.stroke_width(1),
        ))
        .map_err(drawing(card))?;
        area.draw(&Text::new(
            label.clone(),
            (px, py + 8),
            text(11).pos(plotters::style::text_anchor::Pos::new(
                plotters::style::text_anchor::HPos::Center,
                plotters::style::text_anchor::VPos::Top,
            )),
        ))
        .map_err(drawing(card))?;
    }
    Ok(chart)
}

/// Correlations by lag as bars (`color`), those that `highlight` picks drawn again in the
/// alert colour, and the zero line across `0..=lags + 1`.
pub(crate) fn correlation_bars(
    chart: &mut Chart<'_, '_>,
    values: &[(f64, f64)],
    lags: usize,
    color: RGBColor,
    highlight: impl Fn(f64, f64) -> bool,
    card: &'static str,
) -> Result<()> {
    let half = (0.3f64).min(0.35 * 60.0 / lags.max(1) as f64).max(0.15);
    bars(chart, values.iter().copied(), half, color, card)?;
    bars(
        chart,
        values.iter().copied().filter(|&(h, r)| highlight(h, r)),
        half,
        crate::palette::ALERT,
        card,
    )?;
    chart
        .draw_series(std::iter::once(PathElement::new(
            vec![(0.0, 0.0), (lags as f64 + 1.0, 0.0)],
            INK.stroke_width(1),
        )))
        .map_err(drawing(card))?;
    Ok(())
}

/// The panel of readings over time (fan and watch cards): reading numbers or UTC times
/// across, values with the caption's unit up.
pub(crate) fn reading_panel<'a, 'b>(
    area: &'a Area<'b>,
    caption: &crate::frame::Caption,
    axis: Option<lagwise::TimeAxis>,
    x: (f64, f64),
    y: (f64, f64),
    card: &'static str,
) -> Result<Chart<'a, 'b>> {
    let xfmt = |v: &f64| crate::frame::index_label(axis, *v);
    let yfmt = |v: &f64| crate::frame::short_number(*v);
    panel(
        area,
        &PanelSpec {
            title: String::new(),
            x,
            y,
            x_desc: if axis.is_some() {
                "UTC".into()
            } else {
                "reading".into()
            },
            y_desc: caption.value_label(caption.reading_text().unwrap_or("reading")),
            x_labels: 8,
            y_labels: 6,
            x_format: &xfmt,
            y_format: &yfmt,
            y_label_width: 62,
            x_ticks: axis.map_or(Vec::new(), |a| crate::frame::time_ticks(a, x.0, x.1, 8)),
        },
        card,
    )
}

/// Vertical bars from zero at each `(x, value)`, `half` wide on each side.
pub(crate) fn bars(
    chart: &mut Chart<'_, '_>,
    values: impl Iterator<Item = (f64, f64)>,
    half: f64,
    color: RGBColor,
    card: &'static str,
) -> Result<()> {
    chart
        .draw_series(
            values
                .filter(|(_, v)| v.is_finite())
                .map(|(x, v)| Rectangle::new([(x - half, 0.0), (x + half, v)], color.filled())),
        )
        .map_err(drawing(card))?;
    Ok(())
}

/// A filled band between `lower` and `upper` drawn as one polygon over the points
/// `(x, lower, upper)` (in order of x).
pub(crate) fn band(
    chart: &mut Chart<'_, '_>,
    points: &[(f64, f64, f64)],
    color: RGBColor,
    card: &'static str,
) -> Result<()> {
    let pts: Vec<&(f64, f64, f64)> = points
        .iter()
        .filter(|(x, l, u)| x.is_finite() && l.is_finite() && u.is_finite())
        .collect();
    if pts.len() < 2 {
        return Ok(());
    }
    let mut poly: Vec<(f64, f64)> = pts.iter().map(|(x, _, u)| (*x, *u)).collect();
    poly.extend(pts.iter().rev().map(|(x, l, _)| (*x, *l)));
    chart
        .draw_series(std::iter::once(Polygon::new(poly, color.filled())))
        .map_err(drawing(card))?;
    Ok(())
}

/// A constant band `±half` across the whole panel.
pub(crate) fn flat_band(chart: &mut Chart<'_, '_>, half: f64, card: &'static str) -> Result<()> {
    let xr = chart.x_range();
    band(
        chart,
        &[(xr.start, -half, half), (xr.end, -half, half)],
        BAND,
        card,
    )
}

/// A dashed horizontal line at `y`.
pub(crate) fn level(
    chart: &mut Chart<'_, '_>,
    y: f64,
    color: RGBColor,
    card: &'static str,
) -> Result<()> {
    let xr = chart.x_range();
    chart
        .draw_series(DashedLineSeries::new(
            [(xr.start, y), (xr.end, y)],
            6,
            4,
            color.stroke_width(1),
        ))
        .map_err(drawing(card))?;
    Ok(())
}

/// Split `(x, y)` points into runs of finite values (a gap breaks the line) and thin each
/// run to at most `2 × buckets` points per run by keeping the minimum and maximum of each
/// bucket of x, so that long series stay small in SVG and still show every excursion.
pub(crate) fn runs(points: &[(f64, f64)], buckets: usize) -> Vec<Vec<(f64, f64)>> {
    let mut out: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut cur: Vec<(f64, f64)> = Vec::new();
    for &(x, y) in points {
        if y.is_finite() && x.is_finite() {
            cur.push((x, y));
        } else if !cur.is_empty() {
            out.push(std::mem::take(&mut cur));
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    let total: usize = out.iter().map(Vec::len).sum();
    if total <= 2 * buckets.max(1) {
        return out;
    }
    let (x0, x1) = (points[0].0, points[points.len() - 1].0);
    let width = ((x1 - x0) / buckets as f64).max(f64::MIN_POSITIVE);
    out.into_iter()
        .map(|run| {
            let mut thin = Vec::new();
            let mut i = 0;
            while i < run.len() {
                let b = ((run[i].0 - x0) / width).floor();
                let mut j = i;
                let (mut lo, mut hi) = (i, i);
                while j < run.len() && ((run[j].0 - x0) / width).floor() == b {
                    if run[j].1 < run[lo].1 {
                        lo = j;
                    }
                    if run[j].1 > run[hi].1 {
                        hi = j;
                    }
                    j += 1;
                }
                let (a, c) = if lo <= hi { (lo, hi) } else { (hi, lo) };
                thin.push(run[a]);
                if c != a {
                    thin.push(run[c]);
                }
                i = j;
            }
            thin
        })
        .collect()
}

/// Draw a line through each run.
pub(crate) fn trace(
    chart: &mut Chart<'_, '_>,
    runs: &[Vec<(f64, f64)>],
    style: ShapeStyle,
    card: &'static str,
) -> Result<()> {
    for run in runs {
        if run.len() == 1 {
            chart
                .draw_series(std::iter::once(Circle::new(run[0], 1, style.filled())))
                .map_err(drawing(card))?;
        } else {
            chart
                .draw_series(std::iter::once(PathElement::new(run.clone(), style)))
                .map_err(drawing(card))?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn runs_break_at_gaps_and_keep_extremes() {
        let pts: Vec<(f64, f64)> = (0..10)
            .map(|i| (i as f64, if i == 4 { f64::NAN } else { i as f64 }))
            .collect();
        let r = runs(&pts, 100);
        assert_eq!(r.len(), 2);
        assert_eq!(r[0].len(), 4);
        assert_eq!(r[1].len(), 5);
        // Thinning 10,000 points to 50 buckets keeps the one spike.
        let mut long: Vec<(f64, f64)> = (0..10_000).map(|i| (i as f64, 0.0)).collect();
        long[7_777].1 = 9.0;
        let t = runs(&long, 50);
        let n: usize = t.iter().map(Vec::len).sum();
        assert!(n <= 100, "{n}");
        assert!(t.iter().flatten().any(|&(x, y)| x == 7_777.0 && y == 9.0));
    }
}
