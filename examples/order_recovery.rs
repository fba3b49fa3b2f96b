//! Order-recovery study: how often the search finds the simulated orders at n = 500, and
//! how often the criterion itself prefers them when every candidate in a grid is fitted.
//!
//! Run: `cargo run --release --example order_recovery -- [replications]` (default 200;
//! the seasonal case uses half). For each case it prints the stepwise rate (default
//! settings), the stepwise rate following near-tied runners-up, the exhaustive rate
//! over a smaller grid, the rate at which the true orders
//! have the smallest AICc of all fitted candidates in that grid (the ceiling for any
//! search ranked by AICc), the stepwise rate with BIC as the criterion, and the orders
//! the default search chose instead most often.

use std::collections::BTreeMap;
use std::time::Instant;

use lagwise::{SearchSettings, Simulator, search_orders};

struct Case {
    name: &'static str,
    sim: Simulator,
    period: usize,
    truth: ((usize, usize, usize), (usize, usize, usize)),
    grid: (usize, usize, usize, usize),
    reps_divisor: u64,
}

/// `(p, d, q)(P, D, Q)` of a search outcome's chosen model.
fn orders_of(out: &lagwise::SearchOutcome) -> ((usize, usize, usize), (usize, usize, usize)) {
    let s = out.model.blueprint().shape();
    (
        (s.p as usize, s.d as usize, s.q as usize),
        (
            s.seasonal_p as usize,
            s.seasonal_d as usize,
            s.seasonal_q as usize,
        ),
    )
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let reps: u64 = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(200);
    let cases = vec![
        Case {
            name: "ARMA(1,1) φ=0.6 θ=0.4",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.4])
                .build()?,
            period: 1,
            truth: ((1, 0, 1), (0, 0, 0)),
            grid: (3, 3, 0, 0),
            reps_divisor: 1,
        },
        Case {
            name: "AR(2) φ=(0.5,0.3)",
            sim: Simulator::builder().autoregressive(&[0.5, 0.3]).build()?,
            period: 1,
            truth: ((2, 0, 0), (0, 0, 0)),
            grid: (3, 3, 0, 0),
            reps_divisor: 1,
        },
        Case {
            name: "ARIMA(0,1,1) θ=0.5",
            sim: Simulator::builder()
                .moving_average(&[0.5])
                .differencing(1, 0)
                .build()?,
            period: 1,
            truth: ((0, 1, 1), (0, 0, 0)),
            grid: (3, 3, 0, 0),
            reps_divisor: 1,
        },
        Case {
            name: "SARIMA(1,0,0)×(0,1,1)₁₂ φ=0.6 Θ=−0.6",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .seasonal(&[], &[-0.6], 12)
                .differencing(0, 1)
                .build()?,
            period: 12,
            truth: ((1, 0, 0), (0, 1, 1)),
            grid: (2, 2, 1, 1),
            reps_divisor: 2,
        },
    ];
    println!("order recovery at n = 500");
    for case in &cases {
        let t = Instant::now();
        let n_reps = (reps / case.reps_divisor).max(1);
        let stepwise = SearchSettings::builder()
            .period(case.period)
            .build()
            .unwrap();
        let ties = SearchSettings::builder()
            .period(case.period)
            .explore_near_ties(true)
            .build()
            .unwrap();
        let schwarz = SearchSettings::builder()
            .period(case.period)
            .criterion(lagwise::Criterion::Schwarz)
            .build()
            .unwrap();
        let (gp, gq, gsp, gsq) = case.grid;
        let exhaustive = SearchSettings::builder()
            .period(case.period)
            .exhaustive(true)
            .max_orders(gp, gq, gsp, gsq)
            .build()
            .unwrap();
        // Two workers over the replications.
        let results: Vec<(bool, bool, bool, String, bool, bool)> = std::thread::scope(|scope| {
            let handles: Vec<_> = (0..2u64)
                .map(|w| {
                    let (stepwise, exhaustive, schwarz, ties) =
                        (&stepwise, &exhaustive, &schwarz, &ties);
                    scope.spawn(move || {
                        (0..n_reps)
                            .filter(|r| r % 2 == w)
                            .filter_map(|r| {
                                let x = case.sim.generate(500, 90_000 + r);
                                let a = search_orders(&x, stepwise).ok()?;
                                let b = search_orders(&x, exhaustive).ok()?;
                                let c = search_orders(&x, schwarz).ok()?;
                                let e = search_orders(&x, ties).ok()?;
                                let step_hit = orders_of(&a) == case.truth;
                                let full_hit = orders_of(&b) == case.truth;
                                // Does the criterion itself put the true orders first?
                                let best = b
                                    .candidates
                                    .iter()
                                    .filter(|c| c.criterion.is_some())
                                    .min_by(|u, v| {
                                        u.criterion
                                            .unwrap_or(f64::INFINITY)
                                            .total_cmp(&v.criterion.unwrap_or(f64::INFINITY))
                                    })?;
                                let sh = best.shape;
                                let ceiling = (sh.p as usize, sh.d as usize, sh.q as usize)
                                    == case.truth.0
                                    && (
                                        sh.seasonal_p as usize,
                                        sh.seasonal_d as usize,
                                        sh.seasonal_q as usize,
                                    ) == case.truth.1;
                                Some((
                                    step_hit,
                                    full_hit,
                                    ceiling,
                                    a.model.blueprint().shape_label(),
                                    orders_of(&c) == case.truth,
                                    orders_of(&e) == case.truth,
                                ))
                            })
                            .collect::<Vec<_>>()
                    })
                })
                .collect();
            handles
                .into_iter()
                .flat_map(|h| h.join().unwrap_or_default())
                .collect()
        });
        let m = results.len().max(1) as f64;
        let pct = |k: usize| 100.0 * k as f64 / m;
        let mut instead: BTreeMap<String, usize> = BTreeMap::new();
        for r in results.iter().filter(|r| !r.0) {
            *instead.entry(r.3.clone()).or_default() += 1;
        }
        let mut instead: Vec<_> = instead.into_iter().collect();
        instead.sort_by_key(|e| std::cmp::Reverse(e.1));
        let others: Vec<String> = instead
            .iter()
            .take(3)
            .map(|(k, v)| format!("{k} ×{v}"))
            .collect();
        println!(
            "{:40} reps {:3}: stepwise {:5.1}%  with near ties {:5.1}%  exhaustive {:5.1}%  AICc ranks truth first {:5.1}%  stepwise by BIC {:5.1}%  ({:.0} s)",
            case.name,
            results.len(),
            pct(results.iter().filter(|r| r.0).count()),
            pct(results.iter().filter(|r| r.5).count()),
            pct(results.iter().filter(|r| r.1).count()),
            pct(results.iter().filter(|r| r.2).count()),
            pct(results.iter().filter(|r| r.4).count()),
            t.elapsed().as_secs_f64()
        );
        println!("    stepwise chose instead: {}", others.join(", "));
    }
    Ok(())
}
