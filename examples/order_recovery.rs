//! Order-recovery study: how often the search finds the simulated orders, under the default
//! settings and under the alternatives the defaults were chosen against.
//!
//! Run: `cargo run --release --example order_recovery -- [replications]` (default 200;
//! the period-12 case uses half, the 21-day period-96 case a quarter). Each case is
//! simulated at n = 500 (the period-96 case at 21 days of 15-minute readings, 2,016) and
//! searched with:
//! - the defaults (stepwise, screened by CSS with three finalists, BIC, whiteness gate);
//! - the same by AICc;
//! - BIC without screening (every candidate fitted by CSS-started ML);
//! - an exhaustive grid, from which the share of replications where each criterion puts
//!   the true orders first among all fitted candidates is read (the ceiling of any search
//!   ranked by that criterion; not for the period-96 case, where the grid's exact fits
//!   would take hours).
//!
//! Two cases add long cycles by harmonic terms (28 days of 15-minute readings, harmonics
//! allowed up to 10 per cycle): ARMA(1,1) errors around a daily shape of three harmonics
//! and a weekly one of two, and SARIMA(1,0,1)×(0,1,1)₉₆ with a weekly shape of two
//! harmonics. A hit there needs the orders and every cycle's harmonic count right.
//!
//! It also prints the orders the default search chose instead most often, and how often a
//! default choice sits at a bound of the search.

use std::collections::BTreeMap;
use std::time::Instant;

use lagwise::{Criterion, Cycle, SearchOutcome, SearchSettings, Simulator, search_orders};

/// `(p, d, q)(P, D, Q)` of a search outcome's chosen model.
type Orders = ((usize, usize, usize), (usize, usize, usize));

struct Case {
    name: &'static str,
    sim: Simulator,
    length: usize,
    period: usize,
    truth: Orders,
    grid: Option<(usize, usize, usize, usize)>,
    reps_divisor: u64,
    /// Long cycles: the harmonics simulated, and the search's bound for each.
    cycles: Vec<(Cycle, usize)>,
}

impl Case {
    /// Whether a search chose the simulated orders and harmonics.
    fn hit(&self, out: &SearchOutcome) -> bool {
        orders_of(out) == self.truth && self.harmonics_hit(out)
    }
    /// Whether a search chose the simulated harmonics (whatever the orders).
    fn harmonics_hit(&self, out: &SearchOutcome) -> bool {
        let truth: Vec<Cycle> = self.cycles.iter().map(|c| c.0).collect();
        out.model.blueprint().cycles() == truth.as_slice()
    }
}

fn orders_of(out: &SearchOutcome) -> Orders {
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

/// One replication's verdicts.
#[derive(Default, Clone)]
struct Verdicts {
    default_hit: bool,
    harmonics_hit: bool,
    aicc_hit: bool,
    unscreened_hit: bool,
    grid_aicc_first: Option<bool>,
    grid_bic_first: Option<bool>,
    at_bound: bool,
    chosen: String,
    seconds: f64,
}

/// Whether the true orders have the lowest value of `criterion` among the grid's fitted
/// candidates (criteria recomputed from each candidate's log-likelihood).
fn truth_first(out: &SearchOutcome, truth: Orders, criterion: Criterion, n: usize) -> bool {
    let value = |c: &lagwise::Candidate| -> Option<f64> {
        let sh = c.shape;
        let k = sh.p as usize
            + sh.q as usize
            + sh.seasonal_p as usize
            + sh.seasonal_q as usize
            + usize::from(sh.mean || sh.drift)
            + 1;
        lagwise::InformationCriteria::from_log_likelihood(c.log_likelihood?, k, n)
            .ok()?
            .value(criterion)
    };
    let best = out
        .candidates
        .iter()
        .filter_map(|c| value(c).map(|v| (c, v)))
        .min_by(|a, b| a.1.total_cmp(&b.1));
    best.is_some_and(|(c, _)| {
        let sh = c.shape;
        ((sh.p as usize, sh.d as usize, sh.q as usize) == truth.0)
            && ((
                sh.seasonal_p as usize,
                sh.seasonal_d as usize,
                sh.seasonal_q as usize,
            ) == truth.1)
    })
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let reps: u64 = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(200);
    let only: Option<String> = std::env::args().nth(2);
    let cases = vec![
        Case {
            name: "ARMA(1,1) φ=0.6 θ=0.4",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.4])
                .build()?,
            length: 500,
            period: 1,
            truth: ((1, 0, 1), (0, 0, 0)),
            grid: Some((3, 3, 0, 0)),
            reps_divisor: 1,
            cycles: Vec::new(),
        },
        Case {
            name: "AR(2) φ=(0.5,0.3)",
            sim: Simulator::builder().autoregressive(&[0.5, 0.3]).build()?,
            length: 500,
            period: 1,
            truth: ((2, 0, 0), (0, 0, 0)),
            grid: Some((3, 3, 0, 0)),
            reps_divisor: 1,
            cycles: Vec::new(),
        },
        Case {
            name: "ARIMA(0,1,1) θ=0.5",
            sim: Simulator::builder()
                .moving_average(&[0.5])
                .differencing(1, 0)
                .build()?,
            length: 500,
            period: 1,
            truth: ((0, 1, 1), (0, 0, 0)),
            grid: Some((3, 3, 0, 0)),
            reps_divisor: 1,
            cycles: Vec::new(),
        },
        Case {
            name: "SARIMA(1,0,0)×(0,1,1)₁₂ φ=0.6 Θ=−0.6",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .seasonal(&[], &[-0.6], 12)
                .differencing(0, 1)
                .build()?,
            length: 500,
            period: 12,
            truth: ((1, 0, 0), (0, 1, 1)),
            grid: Some((2, 2, 1, 1)),
            reps_divisor: 2,
            cycles: Vec::new(),
        },
        Case {
            name: "SARIMA(1,0,1)×(0,1,1)₉₆ 21 days",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.3])
                .seasonal(&[], &[-0.6], 96)
                .differencing(0, 1)
                .level(61.0)
                .innovation_sd(0.3)
                .build()?,
            length: 2016,
            period: 96,
            truth: ((1, 0, 1), (0, 1, 1)),
            grid: None,
            reps_divisor: 2,
            cycles: Vec::new(),
        },
        Case {
            name: "ARMA(1,1) + harmonics 96:3, 672:2 28 days",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.4])
                .level(55.0)
                .innovation_sd(0.4)
                .wave(96, 1, 3.0, -2.0)
                .wave(96, 2, 1.0, 0.5)
                .wave(96, 3, -0.4, 0.3)
                .wave(672, 1, 1.5, 0.8)
                .wave(672, 2, -0.6, 0.4)
                .build()?,
            length: 2688,
            period: 1,
            truth: ((1, 0, 1), (0, 0, 0)),
            grid: None,
            reps_divisor: 2,
            cycles: vec![(Cycle::new(96, 3), 10), (Cycle::new(672, 2), 10)],
        },
        Case {
            name: "SARIMA(1,0,1)×(0,1,1)₉₆ + harmonics 672:2 28 days",
            sim: Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.3])
                .seasonal(&[], &[-0.6], 96)
                .differencing(0, 1)
                .level(61.0)
                .innovation_sd(0.3)
                .wave(672, 1, 1.2, 0.6)
                .wave(672, 2, -0.5, 0.3)
                .build()?,
            length: 2688,
            period: 96,
            truth: ((1, 0, 1), (0, 1, 1)),
            grid: None,
            reps_divisor: 2,
            cycles: vec![(Cycle::new(672, 2), 10)],
        },
    ];
    println!("order recovery (default settings: stepwise, CSS screening, BIC, whiteness gate)");
    for case in &cases {
        if only.as_deref().is_some_and(|o| !case.name.contains(o)) {
            continue;
        }
        let t = Instant::now();
        let n_reps = (reps / case.reps_divisor).max(1);
        let build = |criterion: Criterion, screening: bool| {
            let mut b = SearchSettings::builder();
            b.period(case.period)
                .criterion(criterion)
                .screening(screening);
            for (c, bound) in &case.cycles {
                b.cycle(c.period, *bound);
            }
            b.build()
        };
        let default = build(Criterion::Schwarz, true)?;
        let aicc = build(Criterion::AkaikeCorrected, true)?;
        let unscreened = build(Criterion::Schwarz, false)?;
        let exhaustive = case
            .grid
            .map(|(gp, gq, gsp, gsq)| {
                SearchSettings::builder()
                    .period(case.period)
                    .exhaustive(true)
                    .max_orders(gp, gq, gsp, gsq)
                    .build()
            })
            .transpose()?;
        let bounds = default.max_orders();
        // Two workers over the replications.
        let results: Vec<Verdicts> = std::thread::scope(|scope| {
            let handles: Vec<_> = (0..2u64)
                .map(|w| {
                    let (default, aicc, unscreened, exhaustive) =
                        (&default, &aicc, &unscreened, &exhaustive);
                    scope.spawn(move || {
                        (0..n_reps)
                            .filter(|r| r % 2 == w)
                            .filter_map(|r| {
                                let x = case.sim.generate(case.length, 90_000 + r);
                                let clock = Instant::now();
                                let a = search_orders(&x, default).ok()?;
                                let seconds = clock.elapsed().as_secs_f64();
                                let b = search_orders(&x, aicc).ok()?;
                                let c = search_orders(&x, unscreened).ok()?;
                                let mut v = Verdicts {
                                    default_hit: case.hit(&a),
                                    harmonics_hit: case.harmonics_hit(&a),
                                    aicc_hit: case.hit(&b),
                                    unscreened_hit: case.hit(&c),
                                    chosen: a.model.blueprint().shape_label(),
                                    seconds,
                                    ..Verdicts::default()
                                };
                                let ((p, _, q), (sp, _, sq)) = orders_of(&a);
                                let chosen = a.model.blueprint().cycles();
                                v.at_bound = p == bounds.p
                                    || q == bounds.q
                                    || (case.period > 1
                                        && (sp == bounds.seasonal_p || sq == bounds.seasonal_q))
                                    || case.cycles.iter().any(|(c, bound)| {
                                        chosen
                                            .iter()
                                            .any(|k| k.period == c.period && k.harmonics == *bound)
                                    });
                                if let Some(ex) = exhaustive {
                                    let g = search_orders(&x, ex).ok()?;
                                    let (d, sd) = (g.differencing.d, g.differencing.seasonal_d);
                                    let n = case.length - d - sd * case.period;
                                    v.grid_aicc_first = Some(truth_first(
                                        &g,
                                        case.truth,
                                        Criterion::AkaikeCorrected,
                                        n,
                                    ));
                                    v.grid_bic_first =
                                        Some(truth_first(&g, case.truth, Criterion::Schwarz, n));
                                }
                                Some(v)
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
        let pct = |f: &dyn Fn(&Verdicts) -> bool| {
            format!(
                "{:5.1}%",
                100.0 * results.iter().filter(|r| f(r)).count() as f64 / m
            )
        };
        let grid = |f: &dyn Fn(&Verdicts) -> Option<bool>| {
            if results.iter().all(|r| f(r).is_none()) {
                "    —".to_string()
            } else {
                pct(&|r| f(r) == Some(true))
            }
        };
        let mut instead: BTreeMap<String, usize> = BTreeMap::new();
        for r in results.iter().filter(|r| !r.default_hit) {
            *instead.entry(r.chosen.clone()).or_default() += 1;
        }
        let mut instead: Vec<_> = instead.into_iter().collect();
        instead.sort_by_key(|e| std::cmp::Reverse(e.1));
        let others: Vec<String> = instead
            .iter()
            .take(3)
            .map(|(k, v)| format!("{k} ×{v}"))
            .collect();
        let mut secs: Vec<f64> = results.iter().map(|r| r.seconds).collect();
        secs.sort_by(f64::total_cmp);
        println!(
            "{:40} reps {:3}: default {}  by AICc {}  unscreened {}  grid: BIC ranks truth first {}  AICc {}  default at a bound {}  (median default search {:.3} s; {:.0} s)",
            case.name,
            results.len(),
            pct(&|r| r.default_hit),
            pct(&|r| r.aicc_hit),
            pct(&|r| r.unscreened_hit),
            grid(&|r| r.grid_bic_first),
            grid(&|r| r.grid_aicc_first),
            pct(&|r| r.at_bound),
            secs.get(secs.len() / 2).copied().unwrap_or(f64::NAN),
            t.elapsed().as_secs_f64()
        );
        println!("    default chose instead: {}", others.join(", "));
        if !case.cycles.is_empty() {
            println!(
                "    default chose the simulated harmonics (any orders): {}",
                pct(&|r| r.harmonics_hit)
            );
        }
    }
    Ok(())
}
