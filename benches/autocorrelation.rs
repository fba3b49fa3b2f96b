//! Correlogram cost: ACF + PACF at n = 10³, 10⁵, 10⁷ readings, lags 40 and 200.
//!
//! Run: `cargo bench --bench autocorrelation`. Criterion reports time per call and
//! throughput in readings per second; ns per reading = 1e9 / throughput. A second group
//! times the PACF alone (Durbin–Levinson from the autocorrelations, O(H²)).

use std::hint::black_box;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use lagwise::{Correlogram, CorrelogramWorkspace, Simulator};

fn correlogram(c: &mut Criterion) {
    let sim = Simulator::builder()
        .autoregressive(&[0.8])
        .seasonal(&[], &[-0.4], 96)
        .level(60.0)
        .build()
        .expect("valid simulator");
    let longest = sim.generate(10_000_000, 7);
    let mut group = c.benchmark_group("correlogram");
    for &n in &[1_000usize, 100_000, 10_000_000] {
        if n >= 10_000_000 {
            group.sample_size(10);
        } else {
            group.sample_size(30);
        }
        group.throughput(Throughput::Elements(n as u64));
        for &lag in &[40usize, 200] {
            let x = &longest[..n];
            let mut scratch = CorrelogramWorkspace::new();
            group.bench_with_input(BenchmarkId::new(format!("lag{lag}"), n), &n, |b, _| {
                b.iter(|| Correlogram::compute_with(black_box(x), lag, &mut scratch).expect("ok"))
            });
        }
    }
    group.finish();

    let mut pacf = c.benchmark_group("pacf_only");
    let cg = Correlogram::compute(&longest[..100_000], 200).expect("ok");
    for &lag in &[40usize, 200] {
        let r = &cg.autocorrelations().values()[..=lag];
        pacf.bench_function(BenchmarkId::new("durbin_levinson", lag), |b| {
            b.iter(|| lagwise::partial_from_autocorrelations(black_box(r)).expect("ok"))
        });
    }
    pacf.finish();
}

criterion_group!(benches, correlogram);
criterion_main!(benches);
