//! Kestrel Bay Heat — the morning check of an invented district-heating network.
//!
//! Everything here is invented: the network, the tags and the readings, which come from
//! lagwise's own seeded simulator. The demo prints the morning check and writes it as one
//! self-contained HTML page (cards drawn by `lagwise-figures`).
//!
//! Run: `cargo run --release -p kestrel-bay` (three substations, printed and written as a
//! page), or `cargo run --release -p kestrel-bay -- --substations 1800` (the whole
//! network: the page for every tag, timings printed; `--all-cards` draws the cards of every
//! tag that needs a look instead of the most urgent hundred). `--out FILE` sets the page's
//! path.

use lagwise::search_orders_with;
use lagwise::{
    BandRule, Blueprint, Correlogram, Dropouts, EventKind, EventSettings, FitWorkspace,
    FittedModel, Forecast, Innovations, LagValues, PortmanteauScan, ReadingCheck, ResidualCheck,
    SearchOutcome, SearchSettings, SensorEvent, ShiftFinding, ShiftTest, Simulator, TimeAxis,
};
use lagwise_figures::{
    Caption, Card, FleetPage, TagSheet, correlogram_card, fan_card, residual_card, search_card,
    watch_strip,
};
use rayon::prelude::*;
use std::path::PathBuf;
use std::time::Instant;

/// 2026-11-18 00:00 UTC (a Wednesday): the first reading of the two weeks of history.
const ORIGIN_MS: i64 = 1_794_960_000_000;
/// One reading every 15 minutes.
const CADENCE_MS: i64 = 15 * 60_000;
/// Alarm level of the overnight watch.
const ALARM_LEVEL: f64 = 0.999;
/// Readings per day (one every 15 minutes).
const PER_DAY: usize = 96;
/// Days of history per tag: two weeks, the least a weekly cycle can be estimated from.
const DAYS: usize = 14;
/// Readings per week.
const PER_WEEK: usize = 7 * PER_DAY;
/// Readings that arrived overnight (8 hours), after the models were fitted.
const NIGHT: usize = 32;

/// One simulated tag of one substation.
struct Tag {
    name: String,
    unit: &'static str,
    reading: &'static str,
    readings: Vec<f64>,
    story: &'static str,
}

fn daily_profile(t: usize, amplitude: f64) -> f64 {
    let phase = 2.0 * std::f64::consts::PI * (t % PER_DAY) as f64 / PER_DAY as f64;
    amplitude * (phase - 1.2).sin() + 0.3 * amplitude * (2.0 * phase).cos()
}

/// The weekly rhythm of the return temperature: highest on Wednesdays, lowest at the
/// weekend (less demand, cooler returns).
fn weekly_profile(t: usize, amplitude: f64) -> f64 {
    let phase = 2.0 * std::f64::consts::PI * (t % PER_WEEK) as f64 / PER_WEEK as f64;
    amplitude * phase.cos() + 0.25 * amplitude * (2.0 * phase).sin()
}

fn substation(id: u32, seed: u64) -> Result<Vec<Tag>, lagwise::Error> {
    let n = PER_DAY * DAYS + NIGHT;
    // Supply temperature: slow AR wander around the set point, small daily cycle.
    let ts_noise = Simulator::builder()
        .autoregressive(&[0.96])
        .innovation_sd(0.15)
        .build()?
        .generate(n, seed);
    let supply: Vec<f64> = ts_noise
        .iter()
        .enumerate()
        .map(|(t, e)| 88.0 + daily_profile(t, 0.6) + e)
        .collect();
    // Return temperature: strong daily cycle, a weekly rhythm, seasonal-MA noise at lag 96.
    let tr_noise = Simulator::builder()
        .autoregressive(&[0.7])
        .seasonal(&[], &[-0.5], PER_DAY)
        .innovation_sd(0.25)
        .build()?
        .generate(n, seed + 1);
    let mut ret: Vec<f64> = tr_noise
        .iter()
        .enumerate()
        .map(|(t, e)| 52.0 + daily_profile(t, 4.0) + weekly_profile(t, 1.2) + e)
        .collect();
    // Flow: daily cycle, heavy-tailed noise, drop-outs.
    let fl_noise = Simulator::builder()
        .autoregressive(&[0.5])
        .moving_average(&[0.3])
        .innovation_sd(1.5)
        .innovations(Innovations::StudentT {
            degrees_of_freedom: 4.0,
        })
        .dropouts(Dropouts::new(0.004, 12.0))
        .build()?
        .generate(n, seed + 2);
    let mut flow: Vec<f64> = fl_noise
        .iter()
        .enumerate()
        .map(|(t, e)| 18.0 + daily_profile(t, 6.0) + e)
        .collect();
    if id == 418 {
        // A spike overnight: a single reading 25 m³/h too high.
        flow[PER_DAY * DAYS + 10] += 25.0;
    }
    let mut supply = supply;
    if id == 418 {
        // A spike in the history: one supply reading 1.2 °C too high on day 10 at 10:00.
        supply[9 * PER_DAY + 40] += 1.2;
    }
    // Differential pressure: near-white, with a level shift after valve work on day 11.
    let dp_noise = Simulator::builder()
        .innovation_sd(0.02)
        .build()?
        .generate(n, seed + 3);
    let mut dp: Vec<f64> = dp_noise.iter().map(|e| 1.10 + e).collect();
    if id == 418 {
        // Valve work overnight: the differential pressure drops by 0.1 bar at 03:00.
        for v in &mut dp[PER_DAY * DAYS + 12..] {
            *v -= 0.10;
        }
    }
    let story_dp = if id % 2 == 1 {
        for v in &mut dp[11 * PER_DAY..] {
            *v += 0.08;
        }
        "near-white, level shift after valve work on day 11"
    } else {
        "near-white"
    };
    // Substation 0417's return sensor sticks for a day (the same value repeated).
    let story_tr = if id == 417 {
        let stuck = ret[12 * PER_DAY];
        for v in &mut ret[12 * PER_DAY..13 * PER_DAY] {
            *v = stuck;
        }
        "daily and weekly cycle; sensor stuck for day 13"
    } else {
        "daily and weekly cycle"
    };
    let tag = |suffix: &str| format!("KB-SS{id:04}-{suffix}");
    Ok(vec![
        Tag {
            name: tag("TS"),
            reading: "supply temperature",
            unit: "°C",
            readings: supply,
            story: "slow wander around the set point",
        },
        Tag {
            name: tag("TR"),
            reading: "return temperature",
            unit: "°C",
            readings: ret,
            story: story_tr,
        },
        Tag {
            name: tag("FL"),
            reading: "flow",
            unit: "m³/h",
            readings: flow,
            story: "daily cycle, heavy tails, drop-outs",
        },
        Tag {
            name: tag("DP"),
            reading: "differential pressure",
            unit: "bar",
            readings: dp,
            story: story_dp,
        },
    ])
}

fn axis() -> TimeAxis {
    TimeAxis::new(ORIGIN_MS, CADENCE_MS).expect("a positive cadence")
}

/// A one-line picture of the first `lags` autocorrelations: `#` outside the band,
/// `+`/`-` inside it.
fn sparkline(cg: &Correlogram, band: &LagValues, lags: usize) -> String {
    (1..=lags)
        .map(|h| {
            let r = cg.autocorrelation(h).unwrap_or(0.0);
            if r.abs() > band.at(h).unwrap_or(f64::INFINITY) {
                '#'
            } else if r >= 0.0 {
                '+'
            } else {
                '-'
            }
        })
        .collect()
}

/// Fit a model to one tag. Return temperature and flow, with their strong 96-reading
/// daily period, get a hand-chosen seasonal shape (the demo shows a blueprint in use);
/// the return temperature's daily and weekly shapes are described by two harmonics each
/// (a seasonal lag polynomial of 672 readings would need many more weeks), with AR and
/// seasonal MA errors.
/// Supply temperature and differential pressure get an automatic order search at the
/// daily period (seasonal differencing by seasonal strength, d by KPSS/ADF, stepwise
/// orders by BIC with P, Q ≤ 1 behind the whiteness gate: the supply temperature's small
/// daily cycle is found, the pressure's absence of one too) on the history with its level
/// shifts removed: a step
/// after valve work would otherwise read as a unit root and get the series differenced.
/// The shifts are first screened on an AR(1) fit, then the chosen model looks for every
/// kind of event itself (in `assess`).
fn fit_tag(
    tag: &str,
    history: &[f64],
    ws: &mut FitWorkspace,
) -> Result<(FittedModel, Option<SearchOutcome>), lagwise::Error> {
    if tag.ends_with("-TR") || tag.ends_with("-FL") {
        let mut bp = Blueprint::builder();
        if tag.ends_with("-TR") {
            // Daily and weekly shapes by harmonics, the day-to-day correlation by a
            // seasonal MA term, the short-term one by an AR term.
            bp.nonseasonal(1, 0, 0)
                .seasonal(0, 0, 1, PER_DAY)
                .cycle(PER_DAY, 2)
                .cycle(PER_WEEK, 2);
        } else {
            bp.nonseasonal(1, 0, 1).seasonal(0, 1, 1, PER_DAY);
        }
        let bp = bp.build()?;
        return Ok((bp.fit_with(history, ws)?.with_time_axis(axis()), None));
    }
    let screen = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()?
        .fit_with(history, ws)?;
    let shifts = screen.find_events(
        history,
        &EventSettings::builder()
            .kinds(&[EventKind::LevelShift])
            .build()?,
    )?;
    let outcome = search_orders_with(
        &shifts.adjusted,
        &SearchSettings::builder()
            .period(PER_DAY)
            .max_orders(3, 3, 1, 1)
            .build()?,
        ws,
    )?;
    // The chosen shape, fitted to the readings themselves (events are found next).
    let model = outcome.model.blueprint().fit_with(history, ws)?;
    Ok((model.with_time_axis(axis()), Some(outcome)))
}

/// `+0.08 bar level shift at 11-29 00:00 UTC (t = 14.2)`.
fn event_text(e: &SensorEvent, unit: &str) -> String {
    format!(
        "{} of {:+.2} {unit} at {} (t = {:.1})",
        e.kind,
        e.size,
        stamp(e.index),
        e.statistic
    )
}

/// The overnight watch's shift test (default settings: 20,000 readings between false
/// shift signals, an 8-reading decision window), solved once.
fn shift_test() -> &'static ShiftTest {
    static TEST: std::sync::OnceLock<ShiftTest> = std::sync::OnceLock::new();
    TEST.get_or_init(|| ShiftTest::builder().build().expect("default shift test"))
}

/// `overnight: level shift of −0.10 bar from 11-30 03:00 UTC (called at 05:00, t = −9.8;
/// re-levelled)`.
fn finding_text(f: &ShiftFinding, called_at: u64, unit: &str) -> String {
    let (what, act) = match f.kind {
        EventKind::LevelShift => ("level shift", "re-levelled"),
        _ => ("spike", "discounted"),
    };
    format!(
        "overnight: {what} of {:+.2} {unit} at {} (called at {}, t = {:.1}{})",
        f.size,
        stamp(f.onset),
        clock(called_at),
        f.statistic,
        if f.applied {
            format!("; {act}")
        } else {
            String::new()
        }
    )
}

/// `06:15` for a reading number.
fn clock(index: u64) -> String {
    let minutes = (index as usize % PER_DAY) * 15;
    format!("{:02}:{:02}", minutes / 60, minutes % 60)
}

/// `11-30 06:15 UTC` for a reading number.
fn stamp(index: u64) -> String {
    let ms = ORIGIN_MS + index as i64 * CADENCE_MS;
    lagwise_figures::utc_minutes(ms)[5..].to_string() + " UTC"
}

/// Everything the morning check knows about one tag.
struct Assessed {
    tag: Tag,
    model: FittedModel,
    search: Option<SearchOutcome>,
    check: ResidualCheck,
    /// (lag H, Ljung–Box p at H).
    verdict_p: Option<(usize, f64)>,
    night: Vec<ReadingCheck>,
    forecast: Option<Forecast>,
    events: Vec<String>,
    /// What needs no look (gaps filled).
    notes: Vec<String>,
}

impl Assessed {
    fn alarms(&self) -> impl Iterator<Item = &ReadingCheck> {
        self.night.iter().filter(|c| c.outside)
    }
    fn alarm_text(&self, c: &ReadingCheck) -> String {
        format!(
            "{} read {:.2} {} expected {:.2} (z = {:+.1})",
            stamp(c.index),
            c.reading,
            self.tag.unit,
            c.predicted,
            c.standardized.unwrap_or(f64::NAN)
        )
    }
}

/// Look for stuck runs (treated as missing), fit, find events, check, watch overnight,
/// forecast a day ahead.
fn assess(tag: Tag, ws: &mut FitWorkspace) -> Result<Assessed, (Tag, lagwise::Error)> {
    let history_len = PER_DAY * DAYS;
    let run = |tag: &Tag, ws: &mut FitWorkspace| -> Result<_, lagwise::Error> {
        let (raw_history, night) = tag.readings.split_at(history_len);
        let mut events = Vec::new();
        let stuck = lagwise::find_stuck_runs(raw_history, lagwise::DEFAULT_STUCK_RUN, 0.0)?;
        for run in &stuck {
            events.push(format!(
                "stuck at {:.2} {} from {} for {} readings ({:.1} h), treated as missing",
                run.value,
                tag.unit,
                stamp(run.start as u64),
                run.readings,
                run.readings as f64 / 4.0
            ));
        }
        let history = lagwise::mask_runs(raw_history, &stuck);
        let (first, search) = fit_tag(&tag.name, &history, ws)?;
        // Flow noise is heavy-tailed: on a Gaussian model its big shocks read as
        // innovational outliers and temporary changes several times a week, which tells
        // an operator nothing. Flows are searched for wrong readings and steps only.
        let settings = if tag.name.ends_with("-FL") {
            EventSettings::builder()
                .kinds(&[EventKind::AdditiveOutlier, EventKind::LevelShift])
                .build()?
        } else {
            EventSettings::default()
        };
        let found = first.find_events(&history, &settings)?;
        events.extend(found.events.iter().map(|e| event_text(e, tag.unit)));
        let model = found.model.clone();
        let check = model.residual_check(model.default_check_lags(), 0.05)?;
        // The verdict reads the Ljung–Box p-value at the check lag H (white when ≥ 0.05).
        let h = check.portmanteau.rows().len();
        let verdict_p = check
            .portmanteau
            .row(h)
            .and_then(|r| r.ljung_box_p_value)
            .map(|p| (h, p));
        // The events' regressors continue past the history (a level shift stays).
        let ahead = found.columns_ahead(history_len, NIGHT + PER_DAY);
        // The overnight watch tells a spike from a shift that stays (and re-levels).
        let mut monitor = model.monitor(ALARM_LEVEL)?.with_shift_test(shift_test());
        let mut checks = Vec::with_capacity(NIGHT);
        let mut row = vec![0.0; ahead.len()];
        for (i, &reading) in night.iter().enumerate() {
            for (v, col) in row.iter_mut().zip(&ahead) {
                *v = col[i];
            }
            checks.push(monitor.observe_given_regressors(reading, &row)?);
        }
        events.extend(
            checks
                .iter()
                .filter_map(|c| c.finding.map(|f| finding_text(&f, c.index, tag.unit))),
        );
        let forecast = if tag.name.ends_with("-FL") || tag.name.ends_with("-TR") {
            let future: Vec<&[f64]> = ahead.iter().map(|c| &c[NIGHT..]).collect();
            Some(monitor.forecast_given_regressors(PER_DAY, &[0.8, 0.95], &future)?)
        } else {
            None
        };
        let filled = model
            .fill_gaps_given_regressors(
                &history,
                &found
                    .columns_ahead(0, history_len)
                    .iter()
                    .map(Vec::as_slice)
                    .collect::<Vec<_>>(),
                &[0.95],
            )
            .map(|f| f.readings.len())
            .unwrap_or(0);
        let notes = if filled > 0 {
            vec![format!("{filled} missing readings filled by the smoother")]
        } else {
            Vec::new()
        };
        Ok((
            model, search, check, verdict_p, checks, forecast, events, notes,
        ))
    };
    match run(&tag, ws) {
        Ok((model, search, check, verdict_p, night, forecast, events, notes)) => Ok(Assessed {
            tag,
            model,
            search,
            check,
            verdict_p,
            night,
            forecast,
            events,
            notes,
        }),
        Err(e) => Err((tag, e)),
    }
}

/// The printed morning report of one substation.
fn print_substation(id: u32, tags: &[Assessed]) {
    println!("\n=== Substation {id:04} — morning report ===");
    // The model column is as wide as the longest label (harmonic terms make them long).
    let width = tags
        .iter()
        .map(|a| a.model.blueprint().shape_label().chars().count())
        .max()
        .unwrap_or(0)
        .max(40);
    println!(
        "{:<14} {:<width$} {:>8} {:>13}  {:<9} overnight alarms (99.9%)",
        "tag", "model", "σ", "LB p at H", "residuals"
    );
    for a in tags {
        let alarms: Vec<String> = a
            .alarms()
            .map(|c| {
                format!(
                    "{} read {:.2} expected {:.2} (z = {:+.1})",
                    clock(c.index),
                    c.reading,
                    c.predicted,
                    c.standardized.unwrap_or(f64::NAN)
                )
            })
            .collect();
        println!(
            "{:<14} {:<width$} {:>8.4} {:>13}  {:<9} {}",
            a.tag.name,
            a.model.blueprint().shape_label(),
            a.model.innovation_variance().sqrt(),
            a.verdict_p
                .map_or("—".to_string(), |(h, p)| format!("{p:.3} @ {h}")),
            if a.check.white { "white" } else { "NOT white" },
            if alarms.is_empty() {
                "none".to_string()
            } else {
                alarms.join("; ")
            },
        );
    }
    let events: Vec<String> = tags
        .iter()
        .flat_map(|a| {
            a.events
                .iter()
                .chain(&a.notes)
                .map(move |e| format!("{}: {e}", a.tag.name))
        })
        .collect();
    if !events.is_empty() {
        println!("Sensor events (history and overnight):");
        for e in &events {
            println!("  {e}");
        }
    }
    if id == 417 {
        if let Some(a) = tags.iter().find(|a| a.tag.name.ends_with("-TS"))
            && let Some(s) = &a.search
        {
            println!("\nHow the model for {} was chosen:\n{s}", a.tag.name);
        }
        for a in tags {
            let Some(fc) = &a.forecast else { continue };
            println!(
                "\nDay-ahead forecast {} [{}], hourly: mean (80% interval) [95% interval]",
                a.tag.name, a.tag.unit
            );
            for st in fc.steps.iter().step_by(4) {
                println!(
                    "  {}  {:>7.2}  ({:>6.2} – {:>6.2})  [{:>6.2} – {:>6.2}]",
                    clock(st.index),
                    st.mean,
                    st.intervals[0].lower,
                    st.intervals[0].upper,
                    st.intervals[1].lower,
                    st.intervals[1].upper
                );
            }
        }
    }
}

fn caption(tag: &Tag) -> Caption {
    Caption::new(tag.name.clone())
        .unit(tag.unit)
        .reading(tag.reading)
        .time_axis(axis())
}

/// The page's line for a tag, without cards.
fn sheet(outcome: &Result<Assessed, (Tag, lagwise::Error)>) -> TagSheet {
    match outcome {
        Ok(a) => {
            let mut s = TagSheet::new(a.tag.name.clone())
                .unit(a.tag.unit)
                .reading(a.tag.reading)
                .model(a.model.blueprint().shape_label())
                .residuals(a.check.white, a.verdict_p.map(|(_, p)| p));
            for c in a.alarms() {
                s = s.alarm(a.alarm_text(c));
            }
            for e in &a.events {
                s = s.event(e.clone());
            }
            for n in &a.notes {
                s = s.note(n.clone());
            }
            s
        }
        Err((tag, e)) => TagSheet::new(tag.name.clone())
            .unit(tag.unit)
            .reading(tag.reading)
            .failed(e.to_string()),
    }
}

/// The cards of one tag: residuals always; the overnight watch; the day-ahead fan for
/// flow and return temperature; with `full`, also the search when there was one and the
/// raw readings' correlogram.
fn cards(a: &Assessed, full: bool) -> Result<Vec<Card>, lagwise_figures::FigureError> {
    let cap = caption(&a.tag);
    let history_len = PER_DAY * DAYS;
    let mut out = vec![residual_card(&cap, &a.model, &a.check)?];
    out.push(watch_strip(&cap, &a.night, ALARM_LEVEL)?);
    if let Some(fc) = &a.forecast {
        out.push(fan_card(&cap, &a.tag.readings, fc, 2 * PER_DAY)?);
    }
    if !full {
        return Ok(out);
    }
    if let Some(s) = &a.search {
        out.push(search_card(&cap, s)?);
    }
    if let Ok(cg) = Correlogram::compute(&a.tag.readings[..history_len], 2 * PER_DAY) {
        out.push(correlogram_card(&cap, &cg, Some(PER_DAY), 0.95)?);
    }
    Ok(out)
}

/// The folder the demo writes into: `<workspace>/target/kestrel-bay`.
fn out_dir() -> PathBuf {
    let target = std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| {
            let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..");
            root.canonicalize().unwrap_or(root).join("target")
        });
    target.join("kestrel-bay")
}

fn page_intro(page: &mut FleetPage, substations: usize) {
    page.generated_at(ORIGIN_MS + ((PER_DAY * DAYS + NIGHT) as i64) * CADENCE_MS)
        .intro(format!(
            "Simulated readings of {substations} substations × 4 tags, {DAYS} days of history at 15-minute \
             cadence and 8 hours overnight. Each tag's model was fitted to the history; the overnight readings \
             were checked against their 99.9% one-step intervals."
        ))
        .intro(
            "'Not white' means the model no longer describes the series: its intervals and significance \
             should not be trusted until the cause is found or the model refitted.",
        )
        .footnote(
            "lagwise informs operators; it does not replace protection systems, statutory alarms or site \
             procedures, and it defers to local codes and licensed engineering practice. All data on this \
             page are invented.",
        );
}

fn write_page(
    path: &PathBuf,
    page: &FleetPage,
) -> Result<(usize, usize, usize), Box<dyn std::error::Error>> {
    let out = page.render()?;
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir)?;
    }
    std::fs::write(path, out.html())?;
    Ok((out.html().len(), out.sheets_with_cards(), out.cards()))
}

/// The demo's small morning: three substations, printed, with every tag's cards on the page.
fn small_morning(out: PathBuf) -> Result<(), Box<dyn std::error::Error>> {
    println!("Kestrel Bay Heat — morning correlogram check (simulated data)");
    println!(
        "{DAYS} days × {PER_DAY} readings per tag; lag 96 = one day. \
         '#' = autocorrelation outside the 95% white-noise band.\n"
    );
    println!(
        "{:<14} {:>7} {:>8} {:>8} {:>8}  {:<24} {:>10}  note",
        "tag", "present", "r(1)", "r(96)", "pacf(2)", "lags 1..24", "whiteness"
    );
    let stations = [(417u32, 4170u64), (418, 4180), (1203, 12030)];
    let mut worst: Option<(String, Correlogram)> = None;
    for &(id, seed) in &stations {
        for tag in substation(id, seed)? {
            let history = &tag.readings[..PER_DAY * DAYS];
            let cg = Correlogram::compute(history, PER_DAY)?;
            let band = cg.bands(0.95, BandRule::WhiteNoise)?;
            // Degrees of freedom are not reduced: these are raw readings, no model yet.
            let scan = PortmanteauScan::from_correlogram(&cg, 24, 0)?;
            let p = scan
                .row(24)
                .and_then(|r| r.ljung_box_p_value)
                .unwrap_or(f64::NAN);
            let verdict = if p < 0.01 { "structured" } else { "white" };
            println!(
                "{:<14} {:>7} {:>8.3} {:>8.3} {:>8.3}  {:<24} {:>10}  {} [{}]",
                tag.name,
                format!("{}/{}", cg.readings_present(), cg.readings_total()),
                cg.autocorrelation(1).unwrap_or(f64::NAN),
                cg.autocorrelation(PER_DAY).unwrap_or(f64::NAN),
                cg.partial_autocorrelation(2).unwrap_or(f64::NAN),
                sparkline(&cg, &band, 24),
                verdict,
                tag.story,
                tag.unit,
            );
            if tag.name.ends_with("0417-TR") {
                worst = Some((tag.name.clone(), cg));
            }
        }
    }
    if let Some((name, cg)) = worst {
        println!("\nCorrelogram of {name} (first 12 lags and the daily lag), with bands:");
        let white = cg.bands(0.95, BandRule::WhiteNoise)?;
        let bart = cg.bands(0.95, BandRule::BartlettCumulative)?;
        println!(
            "{:>5} {:>8} {:>8} {:>9} {:>9}",
            "lag", "acf", "pacf", "±white", "±Bartlett"
        );
        for h in (1..=12).chain([PER_DAY]) {
            println!(
                "{:>5} {:>8.3} {:>8.3} {:>9.3} {:>9.3}",
                h,
                cg.autocorrelation(h).unwrap_or(f64::NAN),
                cg.partial_autocorrelation(h).unwrap_or(f64::NAN),
                white.at(h).unwrap_or(f64::NAN),
                bart.at(h).unwrap_or(f64::NAN)
            );
        }
        println!(
            "\nRaw readings are expected to be structured; the question lagwise answers next is \
             whether a fitted model's residuals are white."
        );
    }
    let mut ws = FitWorkspace::new();
    let mut page = FleetPage::new("Kestrel Bay Heat — morning check");
    page_intro(&mut page, stations.len());
    let card_dir = out.parent().map(|d| d.join("cards")).unwrap_or_default();
    std::fs::create_dir_all(&card_dir)?;
    for &(id, seed) in &stations {
        let mut done = Vec::new();
        for tag in substation(id, seed)? {
            let outcome = assess(tag, &mut ws);
            let mut s = sheet(&outcome);
            match outcome {
                Ok(a) => {
                    for card in cards(&a, true)? {
                        let file = card_dir.join(format!("{}.svg", card.element_id()));
                        std::fs::write(file, card.svg())?;
                        s = s.card(card);
                    }
                    done.push(a);
                }
                Err((tag, e)) => println!("{}: fit failed: {e}", tag.name),
            }
            page.add(s);
        }
        if id != 1203 {
            print_substation(id, &done);
        }
    }
    println!(
        "\n'NOT white' means the model no longer describes the series (here: the supply \
         temperatures' daily cycle, which their non-seasonal models leave in the residuals): \
         its intervals and significance should not be trusted until the cause is found or \
         the model refitted. The stuck day is treated as missing and the level shift after \
         valve work is a regressor of a stationary model, so those tags read white."
    );
    let (bytes, sheets, cards) = write_page(&out, &page)?;
    println!(
        "\nMorning page: {} ({} tags, {cards} cards for {sheets} tags, {:.1} MB)",
        out.display(),
        page.len(),
        bytes as f64 / 1e6
    );
    println!("Cards as separate SVG files: {}", card_dir.display());
    Ok(())
}

/// The whole network: every tag fitted and watched, the page for all, timings printed.
fn whole_network(
    substations: u32,
    out: PathBuf,
    all_cards: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    println!(
        "Kestrel Bay Heat — {substations} substations × 4 tags, {} threads",
        rayon::current_num_threads()
    );
    let t0 = Instant::now();
    let tags: Vec<Tag> = (1..=substations)
        .into_par_iter()
        .map(|id| substation(id, u64::from(id) * 10))
        .collect::<Result<Vec<_>, _>>()?
        .into_iter()
        .flatten()
        .collect();
    let t_sim = t0.elapsed();
    let t1 = Instant::now();
    let outcomes: Vec<Result<Assessed, (Tag, lagwise::Error)>> = tags
        .into_par_iter()
        .map_init(FitWorkspace::new, |ws, tag| assess(tag, ws))
        .collect();
    let t_fit = t1.elapsed();
    // The report: sheets for all, cards for the most urgent tags (drawn in parallel).
    let t2 = Instant::now();
    let mut sheets: Vec<TagSheet> = outcomes.iter().map(sheet).collect();
    let mut urgent: Vec<usize> = (0..sheets.len())
        .filter(|&i| sheets[i].needs_a_look() && outcomes[i].is_ok())
        .collect();
    urgent.sort_by_key(|&i| (sheets[i].priority(), sheets[i].tag().to_string()));
    let limit = if all_cards {
        urgent.len()
    } else {
        lagwise_figures::DEFAULT_CARD_LIMIT
    };
    urgent.truncate(limit);
    let drawn: Vec<(usize, Vec<Card>)> = urgent
        .par_iter()
        .map(|&i| match &outcomes[i] {
            Ok(a) => cards(a, false).map(|c| (i, c)),
            Err(_) => Ok((i, Vec::new())),
        })
        .collect::<Result<_, _>>()?;
    for (i, cs) in drawn {
        for c in cs {
            sheets[i] = std::mem::replace(&mut sheets[i], TagSheet::new("")).card(c);
        }
    }
    let mut page = FleetPage::new(format!(
        "Kestrel Bay Heat — morning check, {substations} substations"
    ));
    page_intro(&mut page, substations as usize);
    page.card_limit(limit);
    for s in sheets {
        page.add(s);
    }
    let t_cards = t2.elapsed();
    let t3 = Instant::now();
    let (bytes, with_cards, cards) = write_page(&out, &page)?;
    let t_page = t3.elapsed();
    let failed = outcomes.iter().filter(|o| o.is_err()).count();
    for (tag, e) in outcomes.iter().filter_map(|o| o.as_ref().err()).take(5) {
        println!("failed: {}: {e}", tag.name);
    }
    let needing = page_needing(&outcomes);
    println!(
        "simulate {:.1} s · fit, check, watch and forecast {} tags {:.1} s ({failed} failed) · \
         cards for {with_cards} tags ({cards} cards) {:.1} s · page {:.1} s",
        t_sim.as_secs_f64(),
        outcomes.len(),
        t_fit.as_secs_f64(),
        t_cards.as_secs_f64(),
        t_page.as_secs_f64()
    );
    println!(
        "report (cards + page) {:.1} s; {needing} tags need a look; page {} ({:.1} MB)",
        (t_cards + t_page).as_secs_f64(),
        out.display(),
        bytes as f64 / 1e6
    );
    Ok(())
}

fn page_needing(outcomes: &[Result<Assessed, (Tag, lagwise::Error)>]) -> usize {
    outcomes.iter().filter(|o| sheet(o).needs_a_look()).count()
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let mut substations: Option<u32> = None;
    let mut out: Option<PathBuf> = None;
    let mut all_cards = false;
    while let Some(a) = args.next() {
        match a.as_str() {
            "--substations" => {
                let v = args.next().ok_or("--substations needs a number")?;
                let n: u32 = v
                    .parse()
                    .map_err(|_| format!("--substations: not a number: {v}"))?;
                if n == 0 || n > 9_999 {
                    return Err("--substations must be between 1 and 9999".into());
                }
                substations = Some(n);
            }
            "--all-cards" => all_cards = true,
            "--out" => out = Some(PathBuf::from(args.next().ok_or("--out needs a path")?)),
            other => {
                return Err(format!(
                    "unknown argument {other} (use --substations N, --all-cards, --out FILE)"
                )
                .into());
            }
        }
    }
    match substations {
        None => small_morning(out.unwrap_or_else(|| out_dir().join("morning-check.html")))?,
        Some(n) => whole_network(
            n,
            out.unwrap_or_else(|| out_dir().join("network-check.html")),
            all_cards,
        )?,
    }
    println!(
        "\nlagwise informs operators; it does not replace protection systems, statutory alarms or site procedures."
    );
    Ok(())
}
