//! Kestrel Bay Heat — the morning check on a few district-heating substations.
//!
//! Everything here is invented: the network, the tags and the readings, which come from
//! lagwise's own seeded simulator (see `shared` scenario notes in DEVELOPERS.md).
//!
//! Run: `cargo run --release --example kestrel_bay`

use lagwise::search_orders_with;
use lagwise::{
    BandRule, Blueprint, Correlogram, Dropouts, FitWorkspace, FittedModel, Innovations, LagValues,
    PortmanteauScan, SearchOutcome, SearchSettings, Simulator,
};

/// Readings per day (one every 15 minutes).
const PER_DAY: usize = 96;
/// Days of history per tag.
const DAYS: usize = 7;
/// Readings that arrived overnight (8 hours), after the models were fitted.
const NIGHT: usize = 32;

/// One simulated tag of one substation.
struct Tag {
    name: String,
    unit: &'static str,
    readings: Vec<f64>,
    story: &'static str,
}

fn daily_profile(t: usize, amplitude: f64) -> f64 {
    let phase = 2.0 * std::f64::consts::PI * (t % PER_DAY) as f64 / PER_DAY as f64;
    amplitude * (phase - 1.2).sin() + 0.3 * amplitude * (2.0 * phase).cos()
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
    // Return temperature: strong daily cycle plus seasonal-MA noise at lag 96.
    let tr_noise = Simulator::builder()
        .autoregressive(&[0.7])
        .seasonal(&[], &[-0.5], PER_DAY)
        .innovation_sd(0.25)
        .build()?
        .generate(n, seed + 1);
    let mut ret: Vec<f64> = tr_noise
        .iter()
        .enumerate()
        .map(|(t, e)| 52.0 + daily_profile(t, 4.0) + e)
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
    // Differential pressure: near-white, with a level shift after valve work on day 4.
    let dp_noise = Simulator::builder()
        .innovation_sd(0.02)
        .build()?
        .generate(n, seed + 3);
    let mut dp: Vec<f64> = dp_noise.iter().map(|e| 1.10 + e).collect();
    let story_dp = if id % 2 == 1 {
        for v in &mut dp[4 * PER_DAY..] {
            *v += 0.08;
        }
        "near-white, level shift after valve work on day 4"
    } else {
        "near-white"
    };
    // Substation 0417's return sensor sticks for a day (the same value repeated).
    let story_tr = if id == 417 {
        let stuck = ret[5 * PER_DAY];
        for v in &mut ret[5 * PER_DAY..6 * PER_DAY] {
            *v = stuck;
        }
        "daily cycle; sensor stuck for day 6"
    } else {
        "daily cycle"
    };
    let tag = |suffix: &str| format!("KB-SS{id:04}-{suffix}");
    Ok(vec![
        Tag {
            name: tag("TS"),
            unit: "°C",
            readings: supply,
            story: "slow wander around the set point",
        },
        Tag {
            name: tag("TR"),
            unit: "°C",
            readings: ret,
            story: story_tr,
        },
        Tag {
            name: tag("FL"),
            unit: "m³/h",
            readings: flow,
            story: "daily cycle, heavy tails, drop-outs",
        },
        Tag {
            name: tag("DP"),
            unit: "bar",
            readings: dp,
            story: story_dp,
        },
    ])
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

/// Fit a model to one tag. Supply temperature and differential pressure get an automatic
/// order search (differencing by KPSS/ADF, stepwise orders by AICc behind the whiteness
/// gate); return temperature and flow, with their 96-reading daily period, get a
/// hand-chosen seasonal shape because a seasonal search at s = 96 takes seconds per tag
/// (see the README's figures).
fn fit_tag(
    tag: &str,
    history: &[f64],
    ws: &mut FitWorkspace,
) -> Result<(FittedModel, Option<SearchOutcome>), lagwise::Error> {
    if tag.ends_with("-TR") || tag.ends_with("-FL") {
        let bp = Blueprint::builder()
            .nonseasonal(1, 0, 1)
            .seasonal(0, 1, 1, PER_DAY)
            .build()?;
        return Ok((bp.fit_with(history, ws)?, None));
    }
    let outcome = search_orders_with(
        history,
        &SearchSettings::builder().max_orders(3, 3, 0, 0).build()?,
        ws,
    )?;
    Ok((outcome.model.clone(), Some(outcome)))
}

fn clock(index: u64) -> String {
    let minutes = (index as usize % PER_DAY) * 15;
    format!("{:02}:{:02}", minutes / 60, minutes % 60)
}

/// The morning report: model and residual verdict per tag, overnight readings that
/// broke their 99.9% intervals, and a day-ahead forecast for flow and return temperature.
fn morning_report() -> Result<(), lagwise::Error> {
    let history_len = PER_DAY * DAYS;
    let mut ws = FitWorkspace::new();
    for (id, seed) in [(417u32, 4170u64), (418, 4180)] {
        println!("\n=== Substation {id:04} — morning report ===");
        println!(
            "{:<14} {:<30} {:>8} {:>13}  {:<9} overnight alarms (99.9%)",
            "tag", "model", "σ", "LB p at H", "residuals"
        );
        let mut day_ahead = Vec::new();
        let mut account = None;
        let mut sensor_events = Vec::new();
        for tag in substation(id, seed)? {
            let (history, night) = tag.readings.split_at(history_len);
            for run in lagwise::find_stuck_runs(history, lagwise::DEFAULT_STUCK_RUN, 0.0)? {
                sensor_events.push(format!(
                    "{}: stuck at {:.2} {} from day {} {} for {} readings ({:.1} h)",
                    tag.name,
                    run.value,
                    tag.unit,
                    run.start / PER_DAY + 1,
                    clock(run.start as u64),
                    run.readings,
                    run.readings as f64 / 4.0
                ));
            }
            let (fit, search) = fit_tag(&tag.name, history, &mut ws)?;
            if id == 417
                && tag.name.ends_with("-TS")
                && let Some(s) = search
            {
                account = Some((tag.name.clone(), s));
            }
            let check = fit.residual_check(fit.default_check_lags(), 0.05)?;
            // The verdict reads the Ljung–Box p-value at the check lag H (white when ≥ 0.05).
            let h = check.portmanteau.rows().len();
            let p = check
                .portmanteau
                .row(h)
                .and_then(|r| r.ljung_box_p_value)
                .map(|p| (h, p));
            let mut monitor = fit.monitor(0.999)?;
            let alarms: Vec<String> = monitor
                .observe_batch(night)?
                .into_iter()
                .filter(|c| c.outside)
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
                "{:<14} {:<30} {:>8.4} {:>13}  {:<9} {}",
                tag.name,
                fit.blueprint().shape_label(),
                fit.innovation_variance().sqrt(),
                p.map_or("—".to_string(), |(h, p)| format!("{p:.3} @ {h}")),
                if check.white { "white" } else { "NOT white" },
                if alarms.is_empty() {
                    "none".to_string()
                } else {
                    alarms.join("; ")
                },
            );
            if tag.name.ends_with("-FL") || tag.name.ends_with("-TR") {
                day_ahead.push((
                    tag.name.clone(),
                    tag.unit,
                    monitor.forecast(PER_DAY, &[0.8, 0.95])?,
                ));
            }
        }
        if !sensor_events.is_empty() {
            println!("Sensor events in the history:");
            for e in &sensor_events {
                println!("  {e}");
            }
        }
        if let Some((name, outcome)) = account {
            println!("\nHow the model for {name} was chosen:\n{outcome}");
        }
        if id == 417 {
            for (name, unit, fc) in &day_ahead {
                println!(
                    "\nDay-ahead forecast {name} [{unit}], hourly: mean (80% interval) [95% interval]"
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
    println!(
        "\n'NOT white' means the model no longer describes the series (here: the stuck return \
         sensor on day 6, the level shift after valve work): its intervals and significance \
         should not be trusted until the cause is found or the model refitted."
    );
    Ok(())
}

fn main() -> Result<(), lagwise::Error> {
    println!("Kestrel Bay Heat — morning correlogram check (simulated data)");
    println!(
        "{DAYS} days × {PER_DAY} readings per tag; lag 96 = one day. \
         '#' = autocorrelation outside the 95% white-noise band.\n"
    );
    println!(
        "{:<14} {:>7} {:>8} {:>8} {:>8}  {:<24} {:>10}  note",
        "tag", "present", "r(1)", "r(96)", "pacf(2)", "lags 1..24", "whiteness"
    );
    let mut worst: Option<(String, Correlogram)> = None;
    for (id, seed) in [(417u32, 4170u64), (418, 4180), (1203, 12030)] {
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
    morning_report()?;
    println!(
        "\nlagwise informs operators; it does not replace protection systems, statutory alarms or site procedures."
    );
    Ok(())
}
