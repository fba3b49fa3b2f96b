//! Likelihood evaluation and whole fits.
//!
//! Run: `cargo bench --bench estimation`. Each likelihood group reports ns per reading
//! (criterion throughput) for the exact likelihood (steady-state switch on), the same
//! filter with the switch disabled ("full"), the CSS objective, and a floor kernel: the
//! bare innovations recursion with the same dependency chain, measured in the same run.
//! The `*_batch8` lines evaluate eight points in one call (lanes for small shapes); their
//! throughput counts readings × points, so the ratio to the single-point line is the
//! lanes gain.

use std::hint::black_box;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use lagwise::{Blueprint, Estimator, FitWorkspace, Simulator};

struct Case {
    name: &'static str,
    ar: Vec<f64>,
    ma: Vec<f64>,
    sma: Vec<f64>,
    period: usize,
    seasonal_d: usize,
    n: usize,
}

fn cases() -> Vec<Case> {
    vec![
        Case {
            name: "arma11",
            ar: vec![0.6],
            ma: vec![0.3],
            sma: vec![],
            period: 1,
            seasonal_d: 0,
            n: 1000,
        },
        Case {
            name: "arma21",
            ar: vec![0.5, 0.2],
            ma: vec![0.4],
            sma: vec![],
            period: 1,
            seasonal_d: 0,
            n: 1000,
        },
        Case {
            name: "arma32",
            ar: vec![0.4, 0.2, -0.1],
            ma: vec![0.3, 0.2],
            sma: vec![],
            period: 1,
            seasonal_d: 0,
            n: 1000,
        },
        Case {
            name: "sarima101_011_96",
            ar: vec![0.6],
            ma: vec![0.2],
            sma: vec![-0.5],
            period: 96,
            seasonal_d: 1,
            n: 10_000,
        },
    ]
}

/// The floor: `v_t = w_t − Σφ_i w_{t−i} − Σθ_j v_{t−j}` over non-zero terms, with the
/// MA(1) term kept in a register (only θ₁v_{t−1} on the loop-carried path).
fn floor_kernel(w: &[f64], v: &mut [f64], ar: &[(usize, f64)], ma: &[(usize, f64)]) -> f64 {
    let start = ar.iter().chain(ma).map(|e| e.0).max().unwrap_or(0);
    let (first, rest) = ma
        .split_first()
        .map_or(((1, 0.0), &[][..]), |(f, r)| (*f, r));
    let mut prev = 0.0;
    let mut ss = 0.0;
    for t in start..w.len() {
        let mut x = w[t];
        for &(i, c) in ar {
            x -= c * w[t - i];
        }
        for &(j, c) in rest {
            x -= c * v[t - j];
        }
        let e = x - first.1 * prev;
        v[t] = e;
        prev = e;
        ss += e * e;
    }
    ss
}

fn likelihood(c: &mut Criterion) {
    let mut group = c.benchmark_group("loglik");
    group.sample_size(30);
    for case in cases() {
        let sim = Simulator::builder()
            .autoregressive(&case.ar)
            .moving_average(&case.ma)
            .seasonal(&[], &case.sma, case.period)
            .differencing(0, case.seasonal_d)
            .build()
            .expect("simulator");
        let x = sim.generate(case.n, 5);
        let bp = Blueprint::builder()
            .nonseasonal(case.ar.len(), 0, case.ma.len())
            .seasonal(0, case.seasonal_d, case.sma.len(), case.period)
            .mean_term(case.seasonal_d == 0)
            .build()
            .expect("blueprint");
        let surface = bp.likelihood_surface(&x).expect("surface");
        let mut coefs = case.ar.clone();
        coefs.extend(&case.ma);
        coefs.extend(&case.sma);
        let mut ws = FitWorkspace::new();
        let n_eff = surface.readings();
        group.throughput(Throughput::Elements(n_eff as u64));
        group.bench_function(BenchmarkId::new("exact", case.name), |b| {
            b.iter(|| {
                surface
                    .exact_log_likelihood_with(black_box(&coefs), &mut ws)
                    .expect("ok")
            })
        });
        group.bench_function(BenchmarkId::new("css", case.name), |b| {
            b.iter(|| {
                surface
                    .conditional_log_likelihood_with(black_box(&coefs), &mut ws)
                    .expect("ok")
            })
        });
        // Eight nearby points in one batch (lanes where the shape allows); throughput
        // counts readings × points, so this line is directly comparable with "exact".
        let grid: Vec<f64> = (0..8)
            .flat_map(|k| coefs.iter().map(move |v| v * (1.0 - 0.002 * k as f64)))
            .collect();
        let mut out = Vec::new();
        group.throughput(Throughput::Elements(8 * n_eff as u64));
        group.bench_function(BenchmarkId::new("exact_batch8", case.name), |b| {
            b.iter(|| {
                surface
                    .exact_log_likelihoods_with(black_box(&grid), &mut ws, &mut out)
                    .expect("ok")
            })
        });
        group.bench_function(BenchmarkId::new("css_batch8", case.name), |b| {
            b.iter(|| {
                surface
                    .conditional_log_likelihoods_with(black_box(&grid), &mut ws, &mut out)
                    .expect("ok")
            })
        });
        group.throughput(Throughput::Elements(n_eff as u64));
        // Full filter (no steady-state switch) on the differenced, demeaned series.
        let w = lagwise_difference(&x, case.seasonal_d, case.period);
        let phi = lagwise::expand_autoregressive(&case.ar, &[], case.period);
        let theta = lagwise::expand_moving_average(&case.ma, &case.sma, case.period);
        group.bench_function(BenchmarkId::new("full", case.name), |b| {
            b.iter(|| {
                lagwise::reference_log_likelihood(black_box(&phi), &theta, 1.0, &w).expect("ok")
            })
        });
        let ar_nz: Vec<(usize, f64)> = phi
            .iter()
            .enumerate()
            .filter(|e| *e.1 != 0.0)
            .map(|(i, v)| (i + 1, *v))
            .collect();
        let ma_nz: Vec<(usize, f64)> = theta
            .iter()
            .enumerate()
            .filter(|e| *e.1 != 0.0)
            .map(|(i, v)| (i + 1, *v))
            .collect();
        let mut v = vec![0.0; w.len()];
        group.bench_function(BenchmarkId::new("floor", case.name), |b| {
            b.iter(|| floor_kernel(black_box(&w), &mut v, &ar_nz, &ma_nz))
        });
    }
    group.finish();
}

fn lagwise_difference(x: &[f64], seasonal_d: usize, period: usize) -> Vec<f64> {
    let mut w = x.to_vec();
    for _ in 0..seasonal_d {
        w = (period..w.len()).map(|t| w[t] - w[t - period]).collect();
    }
    let m = w.iter().sum::<f64>() / w.len() as f64;
    w.iter().map(|v| v - m).collect()
}

fn fits(c: &mut Criterion) {
    let mut group = c.benchmark_group("fit");
    group.sample_size(20);
    let x = Simulator::builder()
        .autoregressive(&[0.5, 0.2])
        .moving_average(&[0.4])
        .level(60.0)
        .build()
        .expect("simulator")
        .generate(1000, 9);
    for est in [
        Estimator::ConditionalSumOfSquares,
        Estimator::ExactLikelihood,
        Estimator::StagedLikelihood,
    ] {
        let bp = Blueprint::builder()
            .nonseasonal(2, 0, 1)
            .estimator(est)
            .build()
            .expect("blueprint");
        let mut ws = FitWorkspace::new();
        group.bench_function(
            BenchmarkId::new("arma21_mean_n1000", format!("{est:?}")),
            |b| b.iter(|| bp.fit_with(black_box(&x), &mut ws).expect("fit")),
        );
    }
    group.sample_size(10);
    let y = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.2])
        .seasonal(&[], &[-0.5], 96)
        .differencing(0, 1)
        .build()
        .expect("simulator")
        .generate(10_000, 11);
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .seasonal(0, 1, 1, 96)
        .build()
        .expect("blueprint");
    let mut ws = FitWorkspace::new();
    group.bench_function("sarima101_011_96_n10000_staged", |b| {
        b.iter(|| bp.fit_with(black_box(&y), &mut ws).expect("fit"))
    });
    group.finish();
}

fn monitoring(c: &mut Criterion) {
    let mut group = c.benchmark_group("monitor");
    let small = Simulator::builder()
        .autoregressive(&[0.5, 0.2])
        .moving_average(&[0.4])
        .level(60.0)
        .build()
        .expect("simulator")
        .generate(3000, 13);
    let fit_small = Blueprint::builder()
        .nonseasonal(2, 0, 1)
        .build()
        .expect("bp")
        .fit(&small[..1000])
        .expect("fit");
    let seasonal = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.2])
        .seasonal(&[], &[-0.5], 96)
        .differencing(0, 1)
        .build()
        .expect("simulator")
        .generate(6000, 14);
    let fit_seasonal = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .seasonal(0, 1, 1, 96)
        .build()
        .expect("bp")
        .fit(&seasonal[..4000])
        .expect("fit");
    for (name, fit, data) in [
        ("arma21", &fit_small, &small[1000..]),
        ("sarima101_011_96", &fit_seasonal, &seasonal[4000..]),
    ] {
        let mut m = fit.monitor(0.999).expect("monitor");
        let mut i = 0;
        group.throughput(Throughput::Elements(1));
        group.bench_function(BenchmarkId::new("observe", name), |b| {
            b.iter(|| {
                i = (i + 1) % data.len();
                m.observe(black_box(data[i])).expect("ok")
            })
        });
        group.bench_function(BenchmarkId::new("forecast96", name), |b| {
            b.iter(|| m.forecast(96, black_box(&[0.8, 0.95])).expect("ok"))
        });
    }
    group.finish();
}

/// Gap filling: the fixed-interval smoother over a series with 2% of readings missing in
/// drop-out runs (ns per reading: divide by the series length).
fn smoothing(c: &mut Criterion) {
    let mut group = c.benchmark_group("smoother");
    group.sample_size(10);
    for (name, bp, sim, n) in [
        (
            "arma21_n10000",
            Blueprint::builder()
                .nonseasonal(2, 0, 1)
                .build()
                .expect("bp"),
            Simulator::builder()
                .autoregressive(&[0.5, 0.2])
                .moving_average(&[0.4])
                .build()
                .expect("simulator"),
            10_000usize,
        ),
        (
            "sarima101_011_96_n2016",
            Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .seasonal(0, 1, 1, 96)
                .build()
                .expect("bp"),
            Simulator::builder()
                .autoregressive(&[0.6])
                .moving_average(&[0.3])
                .seasonal(&[], &[-0.6], 96)
                .differencing(0, 1)
                .build()
                .expect("simulator"),
            2016,
        ),
    ] {
        let mut x = sim.generate(n, 21);
        let fit = bp.fit(&x).expect("fit");
        // 2% missing: runs of 8 readings spread through the series.
        let runs = n / 400;
        for k in 0..runs {
            let at = 200 + k * (n - 400) / runs.max(1);
            for v in &mut x[at..at + 8] {
                *v = f64::NAN;
            }
        }
        group.throughput(Throughput::Elements(n as u64));
        group.bench_function(name, |b| {
            b.iter(|| fit.fill_gaps(black_box(&x), &[0.95]).expect("fill"))
        });
    }
    group.finish();
}

/// Timestamped readings onto the grid, 1,000 readings a quarter-hour apart (one dropped
/// every 97): listed timestamps taking the direct route, the same run given as first
/// time and step, and jittered timestamps (±2 minutes) taking the general route.
fn placement(c: &mut Criterion) {
    let mut group = c.benchmark_group("placement");
    let q = 900_000i64;
    let t0 = 1_795_564_800_000i64;
    let n = 1000usize;
    let values: Vec<f64> = (0..n)
        .map(|i| {
            if i % 97 == 50 {
                f64::NAN
            } else {
                (i as f64 * 0.1).sin()
            }
        })
        .collect();
    let times: Vec<i64> = (0..n as i64).map(|i| t0 + i * q).collect();
    let jittered: Vec<i64> = times
        .iter()
        .enumerate()
        .map(|(i, t)| t + ((i * 7919) % 240_001) as i64 - 120_000)
        .collect();
    let settings = lagwise::GridSettings::builder(q).build().expect("settings");
    group.throughput(Throughput::Elements(n as u64));
    group.bench_function("listed_regular", |b| {
        b.iter(|| lagwise::place_on_grid(black_box(&times), black_box(&values), &settings))
    });
    group.bench_function("evenly", |b| {
        b.iter(|| lagwise::place_evenly(black_box(t0), q, black_box(&values), &settings))
    });
    group.bench_function("listed_jittered", |b| {
        b.iter(|| lagwise::place_on_grid(black_box(&jittered), black_box(&values), &settings))
    });
    group.finish();
}

criterion_group!(benches, likelihood, fits, monitoring, smoothing, placement);
criterion_main!(benches);
