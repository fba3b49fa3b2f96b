//! Kestrel Bay Heat — the morning check on a few district-heating substations.
//!
//! Everything here is invented: the network, the tags and the readings, which come from
//! lagwise's own seeded simulator (see `shared` scenario notes in DEVELOPERS.md).
//!
//! Run: `cargo run --release --example kestrel_bay`

use lagwise::{
    BandRule, Blueprint, Correlogram, Dropouts, FitWorkspace, Innovations, PortmanteauScan,
    Simulator,
};

/// Readings per day (one every 15 minutes).
const PER_DAY: usize = 96;
/// Days of history per tag.
const DAYS: usize = 7;

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
    let n = PER_DAY * DAYS;
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
    let flow: Vec<f64> = fl_noise
        .iter()
        .enumerate()
        .map(|(t, e)| 18.0 + daily_profile(t, 6.0) + e)
        .collect();
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
fn sparkline(cg: &Correlogram, band: &[f64], lags: usize) -> String {
    (1..=lags)
        .map(|h| {
            let r = cg.autocorrelations()[h];
            if r.abs() > band[h - 1] {
                '#'
            } else if r >= 0.0 {
                '+'
            } else {
                '-'
            }
        })
        .collect()
}

/// The model each kind of tag gets (chosen by hand here; automatic order search comes
/// with a later release of the demo).
fn blueprint_for(tag: &str) -> Result<Blueprint, lagwise::Error> {
    let mut b = Blueprint::builder();
    if tag.ends_with("-TS") {
        b.nonseasonal(1, 0, 1);
    } else if tag.ends_with("-TR") || tag.ends_with("-FL") {
        b.nonseasonal(1, 0, 1).periodic(0, 1, 1, PER_DAY);
    } else {
        b.nonseasonal(0, 0, 0);
    }
    b.build()
}

fn fit_and_check() -> Result<(), lagwise::Error> {
    println!("\nModels for substation 0417 (exact likelihood started from CSS), residual check:");
    println!(
        "{:<14} {:<34} {:>9} {:>12}  residuals",
        "tag", "model", "σ", "smallest p"
    );
    let mut ws = FitWorkspace::new();
    let mut report = None;
    for tag in substation(417, 4170)? {
        let fit = blueprint_for(&tag.name)?.fit_with(&tag.readings, &mut ws)?;
        let check = fit.residual_check(fit.default_check_lags(), 0.05)?;
        let p = check.portmanteau.smallest_ljung_box_p_value();
        println!(
            "{:<14} {:<34} {:>9.4} {:>12} {}",
            tag.name,
            fit.blueprint().shape_label(),
            fit.innovation_variance().sqrt(),
            p.map_or("—".to_string(), |(lag, p)| format!("{p:.3}@{lag}")),
            if check.white {
                "white: model adequate"
            } else {
                "NOT white: do not trust its significance"
            },
        );
        if tag.name.ends_with("-TR") {
            report = Some(fit);
        }
    }
    if let Some(fit) = report {
        println!("\nFull report for KB-SS0417-TR:\n{fit}");
    }
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
            let cg = Correlogram::compute(&tag.readings, PER_DAY)?;
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
                cg.autocorrelations()[1],
                cg.autocorrelations()[PER_DAY],
                cg.partial_autocorrelations()[1],
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
                cg.autocorrelations()[h],
                cg.partial_autocorrelations()[h - 1],
                white[h - 1],
                bart[h - 1]
            );
        }
        println!(
            "\nRaw readings are expected to be structured; the question lagwise answers next is \
             whether a fitted model's residuals are white."
        );
    }
    fit_and_check()?;
    println!(
        "\nlagwise informs operators; it does not replace protection systems, statutory alarms or site procedures."
    );
    Ok(())
}
