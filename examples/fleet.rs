//! The fleet benchmark: simulate N Kestrel Bay supply-temperature series and fit
//! ARMA(1,1) + mean to each (CSS-started exact ML, standard errors, residual check),
//! then print throughput, cost per reading per evaluation next to a floor kernel
//! measured in the same run, parallel efficiency, peak memory, and the bytes the results
//! keep per series with and without a ready monitor.
//!
//! Run: `cargo run --release --example fleet -- [series] [readings]`
//! (defaults: 20000 series × 1000 readings; the target size is 100000 × 1000),
//! or `cargo run --release --example fleet -- --search [series]` for the order-search
//! benchmark (default 500 series × 1000 readings, projected to 10,000),
//! `cargo run --release --example fleet -- --seasonal [series]` for its seasonal mode
//! (21-day period-96 series, gap-free and with 2% drop-outs; default 200 series),
//! `cargo run --release --example fleet -- --weekly [series]` for the same with a weekly
//! cycle by harmonics (28 days, the search also choosing up to 10 weekly harmonics), or
//! `cargo run --release --example fleet -- --gaps [readings]` for the exact likelihood
//! through drop-outs (one long period-96 series, gap-free and with 2% missing in runs:
//! single evaluations and whole fits, alternated in the same run; default 10,000), or
//! `cargo run --release --example fleet -- --events [series]` for the event-search
//! benchmark (default 10,000 series × 1000 readings, 5% of them with one injected event:
//! the plain fleet fit and the fit with `find_events`, alternated in the same run).
// The counting global allocator needs `unsafe` (the workspace denies it elsewhere).
#![allow(unsafe_code)]

use std::alloc::{GlobalAlloc, Layout, System};
use std::hint::black_box;
use std::sync::atomic::{AtomicIsize, Ordering};
use std::time::Instant;

use lagwise::{Blueprint, Fleet, Simulator};

/// Live heap bytes, to measure what a batch's results keep.
struct Live;
static LIVE: AtomicIsize = AtomicIsize::new(0);

// SAFETY: forwards to the system allocator unchanged; only counts bytes.
unsafe impl GlobalAlloc for Live {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        LIVE.fetch_add(layout.size() as isize, Ordering::Relaxed);
        // SAFETY: same layout contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        LIVE.fetch_sub(layout.size() as isize, Ordering::Relaxed);
        // SAFETY: `ptr` was allocated by `System` with this layout.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        LIVE.fetch_add(
            new_size as isize - layout.size() as isize,
            Ordering::Relaxed,
        );
        // SAFETY: forwarded unchanged.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Live = Live;

/// Heap bytes kept per series by a batch's report (summaries, ids, the outcome vector;
/// allocator bookkeeping not included), measured on `series`.
fn retained_per_series(fleet: &Fleet, bp: &Blueprint, series: &[&[f64]]) -> f64 {
    let before = LIVE.load(Ordering::Relaxed);
    let report = fleet.fit_slices(bp, series);
    let kept = LIVE.load(Ordering::Relaxed) - before;
    drop(report);
    kept as f64 / series.len() as f64
}

fn peak_memory_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

/// The bare ARMA(1,1) recursion over one series, the floor for one objective evaluation.
fn floor_kernel(w: &[f64], phi: f64, theta: f64) -> f64 {
    let mut prev = 0.0;
    let mut ss = 0.0;
    for t in 1..w.len() {
        let e = (w[t] - phi * w[t - 1]) - theta * prev;
        prev = e;
        ss += e * e;
    }
    ss
}

/// `--search N`: order search over N simulated series of 1,000 readings on 2 threads.
fn search_bench(count: usize) -> Result<(), Box<dyn std::error::Error>> {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.3])
        .level(88.0)
        .innovation_sd(0.2)
        .build()?;
    let data: Vec<Vec<f64>> = (0..count)
        .map(|i| sim.generate(1000, 5_000 + i as u64))
        .collect();
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let report = Fleet::builder()
        .threads(2)
        .build()?
        .search_slices(&lagwise::SearchSettings::default(), &refs);
    let secs = report.elapsed().as_secs_f64();
    let summaries: Vec<_> = report
        .outcomes()
        .iter()
        .filter_map(|o| o.result.as_ref().ok())
        .collect();
    let candidates: f64 = summaries
        .iter()
        .filter_map(|s| s.search_note.as_ref())
        .filter_map(|n| {
            n.split("Tried ")
                .nth(1)?
                .split(' ')
                .next()?
                .parse::<f64>()
                .ok()
        })
        .sum::<f64>()
        / summaries.len().max(1) as f64;
    println!(
        "order search: {count} series × 1000 readings in {secs:.1} s on 2 threads ({:.1} ms per series), {candidates:.1} candidates fitted per series; projected 10000 series: {:.0} s",
        1e3 * secs / count as f64,
        secs * 10_000.0 / count as f64
    );
    Ok(())
}

/// Kestrel Bay return temperatures: SARIMA(1,0,1)×(0,1,1)₉₆, φ = 0.6, θ = 0.3, Θ = −0.6,
/// level 61 °C, innovation sd 0.3 (the seasonal and gap benchmarks).
fn return_temperatures() -> lagwise::SimulatorBuilder {
    let mut b = Simulator::builder();
    b.autoregressive(&[0.6])
        .moving_average(&[0.3])
        .seasonal(&[], &[-0.6], 96)
        .differencing(0, 1)
        .level(61.0)
        .innovation_sd(0.3);
    b
}

/// `--seasonal N`: the seasonal mode of the search benchmark. Kestrel Bay return
/// temperatures: SARIMA(1,0,1)×(0,1,1)₉₆ (φ = 0.6, θ = 0.3, Θ = −0.6), 21 days of
/// 15-minute readings (2,016), gap-free and with 2% of readings missing in drop-out runs
/// (mean run 8 readings = 2 hours). Prints the default search's time per series on one
/// thread (median of up to 5 series), the fleet time on 2 threads projected to 10,000
/// series, and the orders chosen. With `weekly`: 28 days (2,688 readings) with a weekly
/// shape of two harmonics added, searched with up to 10 weekly harmonics.
fn seasonal_bench(count: usize, weekly: bool) -> Result<(), Box<dyn std::error::Error>> {
    use std::collections::BTreeMap;
    let mut settings = lagwise::SearchSettings::builder();
    settings.period(96);
    if weekly {
        settings.cycle(672, 10);
    }
    let settings = settings.build()?;
    let length = if weekly { 2688 } else { 2016 };
    let mode = if weekly {
        "seasonal search with weekly harmonics"
    } else {
        "seasonal search"
    };
    for (label, dropouts) in [
        ("gap-free", None),
        ("2% drop-outs", Some(lagwise::Dropouts::new(0.0025, 8.0))),
    ] {
        let mut b = return_temperatures();
        if let Some(d) = dropouts {
            b.dropouts(d);
        }
        if weekly {
            b.wave(672, 1, 1.2, 0.6).wave(672, 2, -0.5, 0.3);
        }
        let sim = b.build()?;
        let data: Vec<Vec<f64>> = (0..count)
            .map(|i| sim.generate(length, 77_000 + i as u64))
            .collect();
        let missing =
            data.iter().flatten().filter(|v| v.is_nan()).count() as f64 / (count * length) as f64;
        let mut one: Vec<f64> = data
            .iter()
            .take(count.min(5))
            .map(|x| {
                let t = Instant::now();
                let _ = black_box(lagwise::search_orders(x, &settings));
                t.elapsed().as_secs_f64()
            })
            .collect();
        one.sort_by(f64::total_cmp);
        let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
        let report = Fleet::builder()
            .threads(2)
            .build()?
            .search_slices(&settings, &refs);
        let secs = report.elapsed().as_secs_f64();
        let mut chosen: BTreeMap<String, usize> = BTreeMap::new();
        for o in report.outcomes() {
            let key = match &o.result {
                Ok(s) => s.shape.to_string(),
                Err(e) => format!("error: {e}"),
            };
            *chosen.entry(key).or_default() += 1;
        }
        let mut chosen: Vec<_> = chosen.into_iter().collect();
        chosen.sort_by_key(|e| std::cmp::Reverse(e.1));
        println!(
            "{mode}, {label} ({:.1}% missing): one series on one thread {:.3} s (median of {}); {count} series on 2 threads {secs:.1} s → 10,000 series {:.0} min",
            100.0 * missing,
            one[one.len() / 2],
            one.len(),
            secs * 10_000.0 / count as f64 / 60.0
        );
        for (label, n) in chosen.iter().take(6) {
            println!("  {n:>5}  {label}");
        }
    }
    Ok(())
}

/// `--events N`: ARMA(1,1) + mean fits of N series of 1,000 readings on 2 threads, with
/// and without the event search; every 20th series carries a 5σ level shift or spike.
fn events_bench(count: usize) -> Result<(), Box<dyn std::error::Error>> {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .moving_average(&[0.3])
        .level(88.0)
        .innovation_sd(0.2)
        .build()?;
    let data: Vec<Vec<f64>> = (0..count)
        .map(|i| {
            let mut x = sim.generate(1000, 9_000 + i as u64);
            match i % 40 {
                0 => x[600..].iter_mut().for_each(|v| *v += 1.0),
                20 => x[500] += 1.0,
                _ => {}
            }
            x
        })
        .collect();
    let refs: Vec<&[f64]> = data.iter().map(|s| s.as_slice()).collect();
    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build()?;
    let plain = Fleet::builder().threads(2).build()?;
    let with_events = Fleet::builder()
        .threads(2)
        .find_events(&lagwise::EventSettings::default())
        .build()?;
    let mut best = (f64::INFINITY, f64::INFINITY);
    let mut events = 0;
    for _ in 0..3 {
        let a = plain.fit_slices(&bp, &refs);
        best.0 = best.0.min(a.elapsed().as_secs_f64());
        let b = with_events.fit_slices(&bp, &refs);
        best.1 = best.1.min(b.elapsed().as_secs_f64());
        events = b
            .outcomes()
            .iter()
            .filter_map(|o| o.result.as_ref().ok())
            .map(|s| s.events.len())
            .sum();
    }
    let per = |secs: f64| secs * 10_000.0 / count as f64;
    println!(
        "events: {count} series × 1000 readings on 2 threads (best of 3, alternated): fit {:.1} s, fit + event search {:.1} s per 10,000 series ({:.2}× the fit); {events} events found ({} injected)",
        per(best.0),
        per(best.1),
        best.1 / best.0,
        count.div_ceil(20)
    );
    Ok(())
}

/// `--gaps N`: SARIMA(1,0,1)×(0,1,1)₉₆ (φ = 0.6, θ = 0.3, Θ = −0.6) at N readings, the
/// same series gap-free and with 2% of readings missing in drop-out runs — runs of mean
/// 8 readings (2 hours) and twice as many runs of mean 4. Times one exact
/// log-likelihood at the simulated coefficients (on the seasonal differences,
/// `exact_log_likelihood`) and one default fit, each the median of three rounds in which
/// the series alternate; prints the ratios to the gap-free series.
fn gaps_bench(n: usize) -> Result<(), Box<dyn std::error::Error>> {
    let mut b = return_temperatures();
    let full = b.build()?.generate(n, 4_100);
    let mut series = vec![("gap-free".to_string(), full)];
    for (start, run) in [(0.0025, 8.0), (0.005, 4.0)] {
        let x = b
            .dropouts(lagwise::Dropouts::new(start, run))
            .build()?
            .generate(n, 4_100);
        let missing = x.iter().filter(|v| v.is_nan()).count();
        let runs = (0..n)
            .filter(|&t| x[t].is_nan() && (t == 0 || !x[t - 1].is_nan()))
            .count();
        let label = format!(
            "{:.1}% missing in {runs} runs (mean {run})",
            100.0 * missing as f64 / n as f64
        );
        series.push((label, x));
    }
    let diff = |x: &[f64]| -> Vec<f64> { (96..x.len()).map(|t| x[t] - x[t - 96]).collect() };
    let phi = lagwise::expand_autoregressive(&[0.6], &[], 96);
    let theta = lagwise::expand_moving_average(&[0.3], &[-0.6], 96);
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 1)
        .seasonal(0, 1, 1, 96)
        .build()?;
    let mut ws = lagwise::FitWorkspace::new();
    let mut eval = vec![Vec::new(); series.len()];
    let mut fit = vec![Vec::new(); series.len()];
    for _ in 0..3 {
        for (k, (_, x)) in series.iter().enumerate() {
            let w = diff(x);
            let reps = if k == 0 { 100 } else { 5 };
            let t = Instant::now();
            for _ in 0..reps {
                black_box(lagwise::exact_log_likelihood(&phi, &theta, 0.09, &w)?);
            }
            eval[k].push(t.elapsed().as_secs_f64() / reps as f64);
            let t = Instant::now();
            black_box(bp.fit_with(x, &mut ws)?);
            fit[k].push(t.elapsed().as_secs_f64());
        }
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    println!(
        "exact likelihood through gaps, SARIMA(1,0,1)×(0,1,1)₉₆, n = {n} (median of 3, alternated):"
    );
    let (e0, f0) = (median(&mut eval[0]), median(&mut fit[0]));
    for (k, (label, _)) in series.iter().enumerate() {
        let (e, f) = (median(&mut eval[k]), median(&mut fit[k]));
        println!(
            "  {label}: one exact log L {:.2} ms ({:.0}×), one default fit {:.0} ms ({:.0}×)",
            1e3 * e,
            e / e0,
            1e3 * f,
            f / f0
        );
    }
    Ok(())
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let raw: Vec<String> = std::env::args().skip(1).collect();
    if raw.first().map(|s| s.as_str()) == Some("--gaps") {
        let n = raw.get(1).and_then(|s| s.parse().ok()).unwrap_or(10_000);
        return gaps_bench(n);
    }
    if raw.first().map(|s| s.as_str()) == Some("--events") {
        let count = raw.get(1).and_then(|s| s.parse().ok()).unwrap_or(10_000);
        return events_bench(count);
    }
    if raw.first().map(|s| s.as_str()) == Some("--seasonal") {
        let count = raw.get(1).and_then(|s| s.parse().ok()).unwrap_or(200);
        return seasonal_bench(count, false);
    }
    if raw.first().map(|s| s.as_str()) == Some("--weekly") {
        let count = raw.get(1).and_then(|s| s.parse().ok()).unwrap_or(200);
        return seasonal_bench(count, true);
    }
    if raw.first().map(|s| s.as_str()) == Some("--search") {
        let count = raw.get(1).and_then(|s| s.parse().ok()).unwrap_or(500);
        return search_bench(count);
    }
    let args: Vec<usize> = raw.iter().filter_map(|a| a.parse().ok()).collect();
    let count = args.first().copied().unwrap_or(20_000);
    let len = args.get(1).copied().unwrap_or(1000);
    println!(
        "lagwise fleet benchmark: {count} series × {len} readings, ARMA(1,1) + mean, CSS-started exact ML"
    );

    let t = Instant::now();
    let sim = Simulator::builder()
        .autoregressive(&[0.9])
        .moving_average(&[0.3])
        .level(88.0)
        .innovation_sd(0.2)
        .build()?;
    let mut flat = vec![0.0; count * len];
    for (i, chunk) in flat.chunks_mut(len).enumerate() {
        sim.generate_into(chunk, 417_000 + i as u64);
    }
    let series: Vec<&[f64]> = flat.chunks(len).collect();
    let input_mib = (count * len * 8) as f64 / (1024.0 * 1024.0);
    println!(
        "simulated in {:.1} s; input {:.0} MiB",
        t.elapsed().as_secs_f64(),
        input_mib
    );

    let bp = Blueprint::builder().nonseasonal(1, 0, 1).build()?;

    // Floor kernel, same run.
    let w: Vec<f64> = series[0].iter().map(|v| v - 88.0).collect();
    let reps = 20_000_000 / len.max(1);
    let t = Instant::now();
    let mut acc = 0.0;
    for _ in 0..reps.max(1) {
        acc += floor_kernel(black_box(&w), 0.9, 0.3);
    }
    let floor_ns = t.elapsed().as_nanos() as f64 / (reps.max(1) * len) as f64;
    black_box(acc);

    // Parallel efficiency on a subset: 1 vs 2 threads.
    // Alternating runs, best of three each: the machines are shared and noisy.
    let subset = &series[..count.min(4000)];
    let (mut t1, mut t2) = (f64::INFINITY, f64::INFINITY);
    for _ in 0..3 {
        let one = Fleet::builder().threads(1).build()?.fit_slices(&bp, subset);
        t1 = t1.min(one.elapsed().as_secs_f64());
        drop(one);
        let two = Fleet::builder().threads(2).build()?.fit_slices(&bp, subset);
        t2 = t2.min(two.elapsed().as_secs_f64());
    }
    let efficiency = t1 / (2.0 * t2);

    // What the results keep per series, with and without ready monitors.
    let sample = &series[..count.min(2000)];
    let lean = Fleet::builder().threads(2).ready_monitors(false).build()?;
    let full = Fleet::builder().threads(2).build()?;
    let lean_bytes = retained_per_series(&lean, &bp, sample);
    let full_bytes = retained_per_series(&full, &bp, sample);

    // The whole fleet on 2 threads: the configuration (staged ML, standard
    // errors, residual check), summaries without monitors.
    let report = lean.fit_slices(&bp, &series);
    let secs = report.elapsed().as_secs_f64();
    let fitted: Vec<_> = report
        .outcomes()
        .iter()
        .filter_map(|o| o.result.as_ref().ok())
        .collect();
    let evals =
        fitted.iter().map(|s| s.evaluations() as f64).sum::<f64>() / fitted.len().max(1) as f64;
    let converged = fitted.iter().filter(|s| s.converged()).count();
    let white = fitted.iter().filter(|s| s.whiteness.white).count();
    let per_eval_ns = secs * 2.0 * 1e9 / (count as f64 * len as f64 * evals);
    println!(
        "fitted {} of {count} in {secs:.2} s on 2 threads: {:.0} series/s",
        report.fitted(),
        count as f64 / secs
    );
    println!(
        "evaluations per fit (CSS + exact stages): {evals:.1}; converged {converged}; residuals white {white}"
    );
    println!(
        "cost per reading per evaluation (all work incl. Hessian and checks, per core): {per_eval_ns:.2} ns; floor kernel {floor_ns:.2} ns (ratio {:.1})",
        per_eval_ns / floor_ns
    );
    println!(
        "parallel efficiency (1 vs 2 threads, {} series, best of 3 alternating runs): {:.0}%",
        subset.len(),
        100.0 * efficiency
    );
    if let Some(peak) = peak_memory_mib() {
        println!(
            "peak memory {peak:.0} MiB = input {input_mib:.0} MiB + {:.0} MiB (summaries without monitors)",
            peak - input_mib
        );
    }
    println!(
        "kept per series: {lean_bytes:.0} bytes without monitors, {full_bytes:.0} bytes with a ready monitor ({:.0} MiB more for {count} series)",
        (full_bytes - lean_bytes) * count as f64 / (1024.0 * 1024.0)
    );
    println!(
        "projected 100000 × {len} on 2 threads: {:.1} s",
        secs * 100_000.0 / count as f64
    );

    // Cost against series length (one series per length, best of three).
    let mut points = Vec::new();
    for &n in &[1_000usize, 10_000, 100_000, 1_000_000] {
        let x = sim.generate(n, 99);
        let mut best = f64::INFINITY;
        let mut evals = 0;
        for _ in 0..3 {
            let t = Instant::now();
            let fit = bp.fit(&x)?;
            best = best.min(t.elapsed().as_secs_f64());
            evals = fit.stages().iter().map(|s| s.evaluations).sum();
        }
        println!(
            "n = {n:>8}: fit {:.4} s, {evals} evaluations, {:.2} ns per reading per evaluation",
            best,
            best * 1e9 / (n * evals) as f64
        );
        points.push(((n as f64).ln(), (best / evals as f64).ln()));
    }
    let m = points.len() as f64;
    let (sx, sy) = points
        .iter()
        .fold((0.0, 0.0), |a, p| (a.0 + p.0, a.1 + p.1));
    let (mx, my) = (sx / m, sy / m);
    let slope = points.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum::<f64>()
        / points.iter().map(|p| (p.0 - mx).powi(2)).sum::<f64>();
    println!("cost per evaluation ∝ n^{slope:.3} over n = 10^3..10^6");
    Ok(())
}
