//! Online shift-test study: a monitor with the default [`ShiftTest`] watches new readings
//! after a fit on the history; one spike (additive outlier) or one level shift of 3 to 6
//! innovation standard deviations is injected into the new readings. Reported per kind
//! and size: how often the test calls an event at the right onset (within 3 readings),
//! how often with the right kind, the median readings from onset to the call, the
//! median relative size error; and on clean new readings, false calls per 10,000
//! readings (spikes and shifts separately).
//!
//! Run: `cargo run --release --example shift_study -- [replications]` (default 200 per
//! kind and size; a quarter of that for the daily-cycle series).

use lagwise::{Blueprint, EventKind, ShiftTest, Simulator};
use rayon::prelude::*;

struct Setting {
    name: &'static str,
    sim: Simulator,
    blueprint: Blueprint,
    history: usize,
    watched: usize,
    reps_divisor: usize,
}

#[derive(Default, Clone)]
struct Tally {
    series: usize,
    readings: usize,
    found: usize,
    typed: usize,
    delays: Vec<f64>,
    size_errors: Vec<f64>,
    false_spikes: usize,
    false_shifts: usize,
    failed: usize,
}

fn merge(mut a: Tally, b: Tally) -> Tally {
    a.series += b.series;
    a.readings += b.readings;
    a.found += b.found;
    a.typed += b.typed;
    a.delays.extend(b.delays);
    a.size_errors.extend(b.size_errors);
    a.false_spikes += b.false_spikes;
    a.false_shifts += b.false_shifts;
    a.failed += b.failed;
    a
}

fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn run(s: &Setting, test: &ShiftTest, kind: Option<EventKind>, size: f64, reps: usize) -> Tally {
    (0..reps)
        .into_par_iter()
        .map(|r| {
            let seed = 7_000_003 * (r as u64 + 1)
                + (size * 10.0) as u64
                + kind.map_or(0, |k| 1 + k as u64 * 104_729);
            let mut x = s.sim.generate(s.history + s.watched, seed);
            let at = s.history + s.watched / 5 + (seed as usize % (s.watched / 2));
            match kind {
                Some(EventKind::AdditiveOutlier) => x[at] += size,
                Some(_) => x[at..].iter_mut().for_each(|v| *v += size),
                None => {}
            }
            let mut t = Tally {
                series: 1,
                readings: s.watched,
                ..Tally::default()
            };
            let Ok(fit) = s.blueprint.fit(&x[..s.history]) else {
                t.failed = 1;
                return t;
            };
            let Ok(watch) = fit.monitor(0.999) else {
                t.failed = 1;
                return t;
            };
            let mut watch = watch.with_shift_test(test);
            for v in &x[s.history..] {
                let Ok(check) = watch.observe(*v) else {
                    t.failed = 1;
                    return t;
                };
                let Some(f) = check.finding else { continue };
                let near = kind.is_some() && (f.onset as i64 - at as i64).abs() <= 3;
                if near && t.found == 0 {
                    t.found = 1;
                    t.delays.push((check.index - f.onset) as f64);
                    if Some(f.kind) == kind {
                        t.typed = 1;
                        t.size_errors.push((f.size - size).abs() / size);
                    }
                } else if f.kind == EventKind::LevelShift {
                    t.false_shifts += 1;
                } else {
                    t.false_spikes += 1;
                }
            }
            t
        })
        .reduce(Tally::default, merge)
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let reps: usize = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(200);
    let test = ShiftTest::builder().build()?;
    println!(
        "shift test: k = {:.2}, h = {:.3} (in-control run {:.0} readings; {:.1} readings to \
         catch a 1σ innovation shift), decision window {}",
        test.reference(),
        test.threshold(),
        test.in_control_run(),
        test.run_length_at(1.0)?,
        test.decision_window()
    );
    let settings = vec![
        Setting {
            name: "AR(1) φ=0.6",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .level(85.0)
                .build()?,
            blueprint: Blueprint::builder().nonseasonal(1, 0, 0).build()?,
            history: 1_000,
            watched: 500,
            reps_divisor: 1,
        },
        Setting {
            name: "ARIMA(0,1,1) θ=−0.5",
            sim: Simulator::builder()
                .moving_average(&[-0.5])
                .differencing(1, 0)
                .level(85.0)
                .build()?,
            blueprint: Blueprint::builder().nonseasonal(0, 1, 1).build()?,
            history: 1_000,
            watched: 500,
            reps_divisor: 1,
        },
        Setting {
            name: "SARIMA(1,0,1)×(0,1,1)₉₆, 21 days",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.3])
                .seasonal(&[], &[-0.6], 96)
                .differencing(0, 1)
                .level(85.0)
                .build()?,
            blueprint: Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .seasonal(0, 1, 1, 96)
                .build()?,
            history: 21 * 96,
            watched: 4 * 96,
            reps_divisor: 4,
        },
    ];
    println!(
        "| series | event | size (σ) | called at onset | right kind | median delay (readings) \
         | median size error | false spikes / 10⁴ readings | false shifts / 10⁴ readings |"
    );
    println!("|---|---|---|---|---|---|---|---|---|");
    for s in &settings {
        let r = (reps / s.reps_divisor).max(4);
        let clean = run(s, &test, None, 0.0, 4 * r);
        let per = 1e4 / clean.readings as f64;
        println!(
            "| {} | none (clean) | — | — | — | — | — | {:.2} | {:.2} |",
            s.name,
            clean.false_spikes as f64 * per,
            clean.false_shifts as f64 * per
        );
        for kind in [EventKind::AdditiveOutlier, EventKind::LevelShift] {
            for size in [3.0, 4.0, 5.0, 6.0] {
                let mut t = run(s, &test, Some(kind), size, r);
                let n = (t.series - t.failed).max(1) as f64;
                println!(
                    "| {} | {} | {size} | {:.0}% | {:.0}% | {:.0} | {:.0}% | {:.2} | {:.2} |",
                    s.name,
                    if kind == EventKind::LevelShift {
                        "level shift"
                    } else {
                        "spike"
                    },
                    100.0 * t.found as f64 / n,
                    100.0 * t.typed as f64 / n,
                    median(&mut t.delays),
                    100.0 * median(&mut t.size_errors),
                    t.false_spikes as f64 * 1e4 / t.readings as f64,
                    t.false_shifts as f64 * 1e4 / t.readings as f64,
                );
            }
        }
    }
    Ok(())
}
