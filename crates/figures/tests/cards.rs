//! The cards as a reader sees them: every SVG is parsed and rasterised (resvg, an
//! independent SVG renderer), must not be blank, must carry its accessible title and
//! description, and its marks must sit where the numbers say — on the axis scale read
//! from the card's own tick labels, not only on the scale the card reports.

use lagwise::{
    Blueprint, Correlogram, FittedModel, SearchSettings, Simulator, TimeAxis, model_from_json,
    model_to_json,
};
use lagwise_figures::{
    Caption, Card, CardKind, FigureError, FleetPage, Panel, PanelScale, TagSheet, correlogram_card,
    fan_card, residual_card, search_card, watch_strip,
};
use resvg::tiny_skia::{Pixmap, Transform};

/// 2026-11-25 00:00 UTC, quarter-hour readings.
fn axis() -> TimeAxis {
    TimeAxis::new(1_795_564_800_000, 900_000).unwrap()
}

fn series(n: usize, seed: u64) -> Vec<f64> {
    Simulator::builder()
        .autoregressive(&[0.7])
        .moving_average(&[0.3])
        .innovation_sd(0.5)
        .build()
        .unwrap()
        .generate(n, seed)
        .into_iter()
        .map(|v| v + 20.0)
        .collect()
}

fn fitted(x: &[f64]) -> FittedModel {
    Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .build()
        .unwrap()
        .fit(x)
        .unwrap()
        .with_time_axis(axis())
}

fn caption() -> Caption {
    Caption::new("KB-SS0042-FL")
        .unit("m³/h")
        .reading("flow")
        .time_axis(axis())
}

struct Raster {
    pixmap: Pixmap,
}

impl Raster {
    fn of(card: &Card) -> Raster {
        let tree = resvg::usvg::Tree::from_str(card.svg(), &resvg::usvg::Options::default())
            .unwrap_or_else(|e| panic!("{:?} card does not parse: {e}", card.kind()));
        let size = tree.size();
        assert_eq!(
            (size.width() as u32, size.height() as u32),
            card.size(),
            "declared size"
        );
        let mut pixmap = Pixmap::new(card.size().0, card.size().1).unwrap();
        resvg::render(&tree, Transform::identity(), &mut pixmap.as_mut());
        Raster { pixmap }
    }
    fn rgb(&self, x: f64, y: f64) -> (u8, u8, u8) {
        let p = self
            .pixmap
            .pixel(x.round() as u32, y.round() as u32)
            .unwrap_or_else(|| panic!("pixel ({x}, {y}) off the card"));
        (p.red(), p.green(), p.blue())
    }
    /// Whether the pixel is within `tol` (per channel) of `#rrggbb`.
    fn is(&self, x: f64, y: f64, hex: &str, tol: i32) -> bool {
        let want = rgb_of(hex);
        let got = self.rgb(x, y);
        (i32::from(got.0) - i32::from(want.0)).abs() <= tol
            && (i32::from(got.1) - i32::from(want.1)).abs() <= tol
            && (i32::from(got.2) - i32::from(want.2)).abs() <= tol
    }
    /// Whether a thin mark of colour `hex` crosses the pixel or one of its neighbours
    /// (plotters draws at whole pixels and the renderer smooths edges, so a 1-px line may
    /// cover two rows at part strength: accept the colour blended with paper down to 45%).
    fn has_mark(&self, x: f64, y: f64, hex: &str) -> bool {
        let want = rgb_of(hex);
        for dx in [-1.0, 0.0, 1.0] {
            for dy in [-1.0, 0.0, 1.0] {
                let got = self.rgb(x + dx, y + dy);
                for alpha in [1.0, 0.85, 0.7, 0.55, 0.45] {
                    let mix = |c: u8| alpha * f64::from(c) + (1.0 - alpha) * 255.0;
                    if (f64::from(got.0) - mix(want.0)).abs() <= 18.0
                        && (f64::from(got.1) - mix(want.1)).abs() <= 18.0
                        && (f64::from(got.2) - mix(want.2)).abs() <= 18.0
                    {
                        return true;
                    }
                }
            }
        }
        false
    }
    /// Share of a panel's pixels that are not paper white, and the number of distinct
    /// colours among them (coarsely binned).
    fn ink_in(&self, p: &PanelScale) -> (f64, usize) {
        let (x0, x1) = (
            p.x_pixels.0.min(p.x_pixels.1),
            p.x_pixels.0.max(p.x_pixels.1),
        );
        let (y0, y1) = (
            p.y_pixels.0.min(p.y_pixels.1),
            p.y_pixels.0.max(p.y_pixels.1),
        );
        let mut inked = 0usize;
        let mut all = 0usize;
        let mut colours = std::collections::HashSet::new();
        for y in (y0 as u32)..(y1 as u32) {
            for x in (x0 as u32)..(x1 as u32) {
                let (r, g, b) = self.rgb(f64::from(x), f64::from(y));
                all += 1;
                if (r, g, b) != (255, 255, 255) {
                    inked += 1;
                    colours.insert((r / 32, g / 32, b / 32));
                }
            }
        }
        (inked as f64 / all.max(1) as f64, colours.len())
    }
}

fn rgb_of(hex: &str) -> (u8, u8, u8) {
    let v = u32::from_str_radix(hex.trim_start_matches('#'), 16).unwrap();
    ((v >> 16) as u8, (v >> 8) as u8, v as u8)
}

/// The text elements of an SVG: (x, y, content). A small reader for the flat SVG
/// plotters writes (`<text x=".." y=".." …>content</text>`).
fn texts(svg: &str) -> Vec<(f64, f64, String)> {
    let mut out = Vec::new();
    let mut rest = svg;
    while let Some(i) = rest.find("<text ") {
        rest = &rest[i..];
        let end_tag = rest.find('>').unwrap();
        let tag = &rest[..end_tag];
        let close = rest.find("</text>").unwrap();
        let content = rest[end_tag + 1..close].trim().to_string();
        let attr = |name: &str| -> f64 {
            let k = tag.find(&format!(" {name}=\"")).unwrap() + name.len() + 3;
            tag[k..k + tag[k..].find('"').unwrap()].parse().unwrap()
        };
        out.push((attr("x"), attr("y"), content));
        rest = &rest[close..];
    }
    out
}

/// Fit value → pixel row from the numeric labels left of a panel (what a reader does),
/// and check the panel's reported scale agrees within 1.5 px at every label.
fn check_value_axis(card: &Card, panel: Panel) -> usize {
    let p = card.panel(panel).unwrap();
    let left = p.x_pixels.0;
    let (top, bottom) = (
        p.y_pixels.1.min(p.y_pixels.0),
        p.y_pixels.1.max(p.y_pixels.0),
    );
    let labels: Vec<(f64, f64)> = texts(card.svg())
        .into_iter()
        .filter(|(x, y, _)| *x < left && *x > left - 80.0 && *y >= top - 1.0 && *y <= bottom + 1.0)
        .filter_map(|(_, y, t)| t.parse::<f64>().ok().map(|v| (v, y)))
        .collect();
    assert!(
        labels.len() >= 3,
        "{panel:?}: too few value labels: {labels:?}"
    );
    // Every label names a different value (too few decimals once printed "0.1" at both
    // 0.05 and 0.1).
    let mut values: Vec<f64> = labels.iter().map(|l| l.0).collect();
    values.sort_by(f64::total_cmp);
    values.dedup();
    assert_eq!(
        values.len(),
        labels.len(),
        "{panel:?}: repeated value labels: {labels:?}"
    );
    for (v, y) in &labels {
        let (_, py) = p.pixel_of(p.x_values.0, *v);
        assert!(
            (py - y).abs() <= 1.5,
            "{panel:?}: label {v} at row {y}, scale says {py}"
        );
    }
    labels.len()
}

fn accessible(card: &Card) {
    let svg = card.svg();
    let title = svg.find("<title").expect("a <title>");
    let desc = svg.find("<desc").expect("a <desc>");
    let first_mark = svg.find("<rect").unwrap();
    assert!(
        title < desc && desc < first_mark,
        "title and desc come first"
    );
    assert!(svg[..title].contains("role=\"img\""));
    assert!(svg[..title].contains(&format!(
        "aria-labelledby=\"{0}-t {0}-d\"",
        card.element_id()
    )));
    assert!(card.title().contains("KB-SS0042-FL") && card.title().contains("m³/h"));
    assert!(card.description().len() > 40, "{}", card.description());
}

fn not_blank(card: &Card) {
    let r = Raster::of(card);
    for p in card.panels() {
        let (share, colours) = r.ink_in(p);
        assert!(
            share > 0.01,
            "{:?}/{:?}: {share:.4} inked",
            card.kind(),
            p.panel
        );
        assert!(
            colours >= 2,
            "{:?}/{:?}: {colours} colours",
            card.kind(),
            p.panel
        );
    }
}

#[test]
fn residual_card_draws_its_bands_where_the_numbers_say() {
    let x = series(600, 11);
    let model = fitted(&x);
    let check = model.residual_check(24, 0.05).unwrap();
    let card = residual_card(&caption(), &model, &check).unwrap();
    assert_eq!(card.kind(), CardKind::Residuals);
    accessible(&card);
    not_blank(&card);
    assert_eq!(card.panels().len(), 5);
    let r = Raster::of(&card);
    // ±1.96 lines (the 97.5% normal quantile, from the table) across the residual strip.
    let trace = card.panel(Panel::ResidualTrace).unwrap();
    check_value_axis(&card, Panel::ResidualTrace);
    for z in [1.959_963_984_540_054, -1.959_963_984_540_054] {
        let (_, row) = trace.pixel_of(0.0, z);
        let hits = (0..200)
            .map(|k| {
                trace.x_pixels.0
                    + 2.0
                    + k as f64 * (trace.x_pixels.1 - trace.x_pixels.0 - 4.0) / 200.0
            })
            .filter(|&col| r.has_mark(col, row, "#568fb0"))
            .count();
        assert!(hits > 100, "dashed line at z = {z}: {hits} of 200 columns");
    }
    // The ACF band at ±1.96/√m, m = residuals in the correlogram (Bartlett's large-sample
    // white-noise band, computed here from m, not read from the check).
    let acf = card.panel(Panel::ResidualAcf).unwrap();
    check_value_axis(&card, Panel::ResidualAcf);
    let m = check.correlogram.readings_present() as f64;
    let band = 1.959_963_984_540_054 / m.sqrt();
    // Column half-way between lags 0 and 1: only the band is drawn there.
    let (col, _) = acf.pixel_of(0.5, 0.0);
    let rows: Vec<f64> = (acf.y_pixels.1 as i32..acf.y_pixels.0 as i32)
        .map(f64::from)
        .filter(|&y| r.is(col, y, "#cde7f4", 12))
        .collect();
    let (_, top) = acf.pixel_of(0.5, band);
    let (_, bottom) = acf.pixel_of(0.5, -band);
    assert!(
        (rows[0] - top).abs() <= 1.5,
        "band top at {} expected {top}",
        rows[0]
    );
    assert!(
        (rows[rows.len() - 1] - bottom).abs() <= 1.5,
        "band bottom at {} expected {bottom}",
        rows[rows.len() - 1]
    );
    // The whiteness scan's level line at α.
    let scan = card.panel(Panel::WhitenessScan).unwrap();
    check_value_axis(&card, Panel::WhitenessScan);
    let (_, row) = scan.pixel_of(0.0, 0.05);
    let hits = (0..100)
        .map(|k| {
            scan.x_pixels.0 + 2.0 + k as f64 * (scan.x_pixels.1 - scan.x_pixels.0 - 4.0) / 100.0
        })
        .filter(|&col| r.has_mark(col, row, "#c97a00"))
        .count();
    assert!(hits > 50, "level line: {hits}");
    // The lags without degrees of freedom (lag ≤ 2 for ARMA(1,1)) are greyed.
    let (col, row) = scan.pixel_of(1.0, 0.5);
    assert!(
        r.is(col, row, "#e4e8ec", 6),
        "lag 1 column: {:?}",
        r.rgb(col, row)
    );
}

/// Two weeks of quarter-hour residuals: the correlation panels reach only ±0.1, where
/// the axis labels step by 0.05 and need two decimals.
#[test]
fn residual_card_labels_small_correlations_apart() {
    let x = series(1_344, 13);
    let model = fitted(&x);
    let check = model.residual_check(192, 0.05).unwrap();
    let card = residual_card(&caption(), &model, &check).unwrap();
    check_value_axis(&card, Panel::ResidualAcf);
    check_value_axis(&card, Panel::ResidualPacf);
}

#[test]
fn residual_card_time_axis_reads_utc() {
    let x = series(672, 12);
    let model = fitted(&x);
    let check = model.residual_check(24, 0.05).unwrap();
    let card = residual_card(&caption(), &model, &check).unwrap();
    let t = texts(card.svg());
    // Seven days from 2026-11-25 00:00 UTC: midnights labelled by date.
    for day in ["11-25", "11-26", "12-01"] {
        assert!(t.iter().any(|(_, _, s)| s == day), "no tick {day}");
    }
    // The tick for 11-26 sits at reading 96.
    let p = card.panel(Panel::ResidualTrace).unwrap();
    let (col, _) = p.pixel_of(96.0, 0.0);
    let (x, _, _) = t.iter().find(|(_, _, s)| s == "11-26").unwrap();
    assert!((x - col).abs() <= 1.0, "{x} vs {col}");
}

#[test]
fn correlogram_card_band_and_seasonal_stripes() {
    // A daily cycle at period 24 readings over 20 days.
    let x: Vec<f64> = series(480, 13)
        .iter()
        .enumerate()
        .map(|(t, v)| v + 3.0 * (2.0 * std::f64::consts::PI * t as f64 / 24.0).sin())
        .collect();
    let cg = Correlogram::compute(&x, 60).unwrap();
    let cap = Caption::new("KB-SS0042-FL")
        .unit("m³/h")
        .time_axis(TimeAxis::new(0, 3_600_000).unwrap());
    let card = correlogram_card(&cap, &cg, Some(24), 0.95).unwrap();
    accessible(&card);
    not_blank(&card);
    check_value_axis(&card, Panel::ReadingAcf);
    check_value_axis(&card, Panel::ReadingPacf);
    let r = Raster::of(&card);
    let p = card.panel(Panel::ReadingAcf).unwrap();
    let band = 1.959_963_984_540_054 / 480f64.sqrt();
    let (col, _) = p.pixel_of(0.5, 0.0);
    let rows: Vec<f64> = (p.y_pixels.1 as i32..p.y_pixels.0 as i32)
        .map(f64::from)
        .filter(|&y| r.is(col, y, "#cde7f4", 12))
        .collect();
    let (_, top) = p.pixel_of(0.5, band);
    assert!(
        (rows[0] - top).abs() <= 1.5,
        "band top {} vs {top}",
        rows[0]
    );
    // Stripes at lags 24 and 48 labelled 1 d and 2 d (24 hourly readings = one day).
    let t = texts(card.svg());
    assert!(t.iter().any(|(_, _, s)| s == "1 d") && t.iter().any(|(_, _, s)| s == "2 d"));
    assert!(card.description().contains("r(24) ="));
}

#[test]
fn fan_ends_at_the_last_forecast_mean() {
    let x = series(500, 14);
    let model = fitted(&x);
    let fc = model.forecast(48, &[0.8, 0.95]).unwrap();
    let card = fan_card(&caption(), &x, &fc, 96).unwrap();
    accessible(&card);
    not_blank(&card);
    check_value_axis(&card, Panel::Fan);
    let r = Raster::of(&card);
    let p = card.panel(Panel::Fan).unwrap();
    let last = fc.steps.last().unwrap();
    assert_eq!(
        last.index, 547,
        "500 readings then 48 steps: the last is reading 547"
    );
    let (cx, cy) = p.pixel_of(547.0, last.mean);
    assert!(r.is(cx, cy, "#005e4c", 30), "centre {:?}", r.rgb(cx, cy));
    // The ring's paper fill between the dot (r = 3) and the ring (r = 6).
    assert!(r.is(cx + 4.5, cy, "#ffffff", 30) || r.is(cx - 4.5, cy, "#ffffff", 30));
    // The 95% band at the last step: inside its limits (away from the mean line) is band.
    let wide = last.interval(0.95).unwrap();
    let (_, y_hi) = p.pixel_of(547.0, wide.upper);
    assert!(
        r.is(cx - 2.0, y_hi + 2.0, "#d3eee7", 20),
        "{:?}",
        r.rgb(cx - 2.0, y_hi + 2.0)
    );
    // The "now" line sits between the last reading and the first step, and the time axis
    // reads UTC (500 readings after 11-25 00:00 = 11-30 05:00).
    assert!(card.description().contains("48 steps"));
    let t = texts(card.svg());
    assert!(
        t.iter().any(|(_, _, s)| s == "11-30"),
        "{:?}",
        t.iter().map(|t| &t.2).collect::<Vec<_>>()
    );
}

#[test]
fn watch_strip_rings_every_alarm() {
    let x = series(400, 15);
    let model = fitted(&x[..350]);
    let mut monitor = model.monitor(0.999).unwrap();
    let mut night = x[350..].to_vec();
    night[20] += 12.0;
    night[30] = f64::NAN;
    let checks = monitor.observe_batch(&night).unwrap();
    let card = watch_strip(&caption(), &checks, 0.999).unwrap();
    accessible(&card);
    not_blank(&card);
    check_value_axis(&card, Panel::Watch);
    let r = Raster::of(&card);
    let p = card.panel(Panel::Watch).unwrap();
    let alarms: Vec<_> = checks.iter().filter(|c| c.outside).collect();
    assert!(!alarms.is_empty());
    for c in alarms {
        let (cx, cy) = p.pixel_of(c.index as f64, c.reading);
        let ring = (0..16).filter(|k| {
            let a = *k as f64 * std::f64::consts::PI / 8.0;
            r.has_mark(cx + 7.0 * a.cos(), cy + 7.0 * a.sin(), "#c97a00")
        });
        assert!(
            ring.count() >= 12,
            "alarm at reading {} not ringed",
            c.index
        );
    }
    assert!(card.description().contains("alarm"));
}

#[test]
fn search_card_sets_white_and_not_white_apart() {
    let x = series(400, 16);
    let outcome = lagwise::search_orders(
        &x,
        &SearchSettings::builder()
            .max_orders(2, 2, 0, 0)
            .build()
            .unwrap(),
    )
    .unwrap();
    let card = search_card(&caption(), &outcome).unwrap();
    accessible(&card);
    not_blank(&card);
    let t = texts(card.svg());
    let chosen = outcome.model.blueprint().shape_label();
    assert!(
        t.iter().any(|(_, _, s)| s == &chosen),
        "chosen label {chosen} drawn"
    );
    assert!(t.iter().any(|(_, _, s)| s == "chosen"));
    let drawn = outcome
        .candidates
        .iter()
        .filter(|c| c.criterion.is_some())
        .filter(|c| t.iter().any(|(_, _, s)| *s == c.shape.to_string()))
        .count();
    assert_eq!(
        drawn,
        outcome
            .candidates
            .iter()
            .filter(|c| c.criterion.is_some())
            .count()
    );
    // A screening search refits only its finalists: the others are counted as screened
    // out, not as failed fits.
    let screened = outcome
        .candidates
        .iter()
        .filter(|c| !c.refitted && c.failure.is_none())
        .count();
    assert!(screened > 0, "{outcome}");
    let foot = format!("{screened} more screened out by quick (CSS) fits, not refitted");
    assert!(
        t.iter().any(|(_, _, s)| s.contains(&foot)),
        "{foot} not in {t:?}"
    );
    assert!(card.description().contains("screened out by quick fits"));
}

#[test]
fn bad_input_is_a_typed_error() {
    let x = series(300, 17);
    let model = fitted(&x);
    let check = model.residual_check(20, 0.05).unwrap();
    // Restored without residuals: nothing to draw, said so.
    let restored = model_from_json(&model_to_json(&model).unwrap()).unwrap();
    assert!(matches!(
        residual_card(&caption(), &restored, &check),
        Err(FigureError::NothingToDraw { .. })
    ));
    let mut fc = model.forecast(5, &[0.9]).unwrap();
    fc.steps.clear();
    assert!(matches!(
        fan_card(&caption(), &x, &fc, 10),
        Err(FigureError::NothingToDraw { .. })
    ));
    assert!(matches!(
        watch_strip(&caption(), &[], 0.99),
        Err(FigureError::NothingToDraw { .. })
    ));
    let cg = Correlogram::compute(&x, 10).unwrap();
    assert!(matches!(
        correlogram_card(&caption(), &cg, None, 1.5),
        Err(FigureError::InvalidArgument { .. })
    ));
    // A forecast whose values are all NaN has nothing to draw either.
    let mut fc = model.forecast(5, &[0.9]).unwrap();
    for s in &mut fc.steps {
        s.mean = f64::NAN;
        for i in &mut s.intervals {
            i.lower = f64::NAN;
            i.upper = f64::NAN;
        }
    }
    assert!(fan_card(&caption(), &[], &fc, 10).is_err());
}

#[test]
fn markup_in_tags_is_escaped() {
    let x = series(300, 18);
    let model = fitted(&x);
    let check = model.residual_check(20, 0.05).unwrap();
    let cap = Caption::new("A<B & \"C\"").unit("<u>");
    let card = residual_card(&cap, &model, &check).unwrap();
    Raster::of(&card);
    assert!(!card.svg().contains("A<B"));
    let mut page = FleetPage::new("T <script>");
    page.add(TagSheet::new("A<B & \"C\"").card(card));
    let html = page.render().unwrap().into_html();
    assert!(!html.contains("<script"));
    assert!(html.contains("A&lt;B &amp; &quot;C&quot;"));
}

#[test]
fn page_is_self_contained_and_its_links_resolve() {
    let mut page = FleetPage::new("Morning check");
    page.footnote("Informs operators only.");
    for k in 0..6 {
        let x = series(300, 100 + k);
        let model = fitted(&x);
        let check = model.residual_check(20, 0.05).unwrap();
        let tag = format!("KB-SS{k:04}-TS");
        let mut sheet = TagSheet::new(tag.clone()).model(model.blueprint().shape_label());
        sheet = sheet.residuals(check.white, None);
        if k % 2 == 0 {
            sheet = sheet
                .alarm("read 99 expected 20")
                .card(residual_card(&Caption::new(tag), &model, &check).unwrap());
        }
        page.add(sheet);
    }
    page.add(TagSheet::new("KB-SS9999-TS").failed("too short"));
    page.card_limit(2);
    let out = page.render().unwrap();
    let html = out.html();
    assert_eq!(out.tags(), 7);
    assert_eq!(out.sheets_with_cards(), 2);
    assert_eq!(out.sheets_without_room(), 1);
    assert_eq!(html.matches("<figure").count(), out.cards());
    assert!(html.contains(&format!("data-cards=\"{}\"", out.cards())));
    // (The SVG namespace URI is a name, not a fetch: only attributes that load count.)
    for banned in [
        "src=",
        "href=\"http",
        "<script",
        "<link",
        "<img",
        "@import",
        "url(",
        "<iframe",
        "<object",
    ] {
        assert!(!html.contains(banned), "page contains {banned}");
    }
    // Every in-page link has its target.
    for part in html.split("href=\"#").skip(1) {
        let id = &part[..part.find('"').unwrap()];
        assert!(
            html.contains(&format!("id=\"{id}\"")),
            "link to #{id} has no target"
        );
    }
    // Ids are unique.
    let ids: Vec<&str> = html
        .split(" id=\"")
        .skip(1)
        .map(|p| &p[..p.find('"').unwrap()])
        .collect();
    let unique: std::collections::HashSet<_> = ids.iter().collect();
    assert_eq!(unique.len(), ids.len());
    // The failed fit is listed first, and a tag added twice is refused.
    let first_row = html.find("<tbody>").unwrap();
    assert!(
        html[first_row..].find("KB-SS9999-TS").unwrap()
            < html[first_row..].find("KB-SS0000-TS").unwrap()
    );
    page.add(TagSheet::new("KB-SS0001-TS"));
    assert!(matches!(
        page.render(),
        Err(FigureError::InvalidArgument { .. })
    ));
}

/// The README shows `examples/own_fleet.rs` (which CI builds): the two must not drift.
#[test]
fn readme_example_is_the_built_one() {
    let readme = include_str!("../../../README.md");
    let example = include_str!("../examples/own_fleet.rs");
    let at = readme.find("own_fleet.rs").unwrap();
    let start = readme[at..].find("```rust,ignore\n").unwrap() + at + "```rust,ignore\n".len();
    let end = readme[start..].find("```\n").unwrap() + start;
    let code_start = example.find("use ").unwrap();
    assert_eq!(&readme[start..end], &example[code_start..]);
}

/// A note (e.g. gaps filled) is shown but does not make a tag urgent.
#[test]
fn notes_do_not_need_a_look() {
    let quiet = TagSheet::new("KB-SS0001-FL")
        .residuals(true, Some(0.5))
        .note("22 missing readings filled by the smoother");
    assert!(!quiet.needs_a_look());
    let mut page = FleetPage::new("p");
    page.add(quiet);
    let out = page.render().unwrap();
    assert_eq!(out.needing_a_look(), 0);
    assert!(
        out.html()
            .contains("22 missing readings filled by the smoother")
    );
}
