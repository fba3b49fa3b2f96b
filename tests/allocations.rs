//! Proof that a likelihood evaluation, and a monitor step, allocate nothing once their
//! buffers have grown.
//! A separate test binary because it installs a counting global allocator. Only the test's
//! own thread is counted: the harness's main thread prints test names concurrently, and on
//! a loaded machine that printing can fall inside the counting window (seen once in CI: 4
//! allocations that were not ours).
// The counting global allocator needs `unsafe` (the workspace denies it elsewhere).
#![allow(unsafe_code)]

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use lagwise::{Blueprint, FitWorkspace, Simulator};

struct Counting;

thread_local! {
    /// Whether allocations on this thread are counted (const-initialised: reading it
    /// does not allocate).
    static COUNTED: Cell<bool> = const { Cell::new(false) };
    /// This thread's count (tests run side by side on their own threads).
    static ALLOCATIONS: Cell<usize> = const { Cell::new(0) };
}

fn note_allocation() {
    if COUNTED.try_with(|c| c.get()).unwrap_or(false) {
        let _ = ALLOCATIONS.try_with(|n| n.set(n.get() + 1));
    }
}

fn allocations() -> usize {
    ALLOCATIONS.with(|n| n.get())
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        note_allocation();
        // SAFETY: forwarded unchanged to the system allocator.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: forwarded unchanged to the system allocator.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        note_allocation();
        // SAFETY: forwarded unchanged to the system allocator.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

#[test]
fn likelihood_evaluations_do_not_allocate() {
    COUNTED.with(|c| c.set(true));
    let cases: Vec<(Blueprint, Vec<f64>, Vec<f64>)> = vec![
        (
            Blueprint::builder().nonseasonal(2, 0, 1).build().unwrap(),
            Simulator::builder()
                .autoregressive(&[0.5, 0.2])
                .moving_average(&[0.4])
                .level(5.0)
                .build()
                .unwrap()
                .generate(1000, 1),
            vec![0.5, 0.2, 0.4],
        ),
        (
            Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .seasonal(0, 1, 1, 24)
                .build()
                .unwrap(),
            {
                let mut x = Simulator::builder()
                    .autoregressive(&[0.6])
                    .seasonal(&[], &[-0.5], 24)
                    .differencing(0, 1)
                    .build()
                    .unwrap()
                    .generate(2000, 2);
                x[700] = f64::NAN; // forces a return to the full-covariance phase
                x
            },
            vec![0.6, 0.1, -0.5],
        ),
        (
            // Drop-out runs on a period-96 state (98 entries): the factored gap step and
            // its fall-back recursion.
            Blueprint::builder()
                .nonseasonal(1, 0, 1)
                .seasonal(0, 1, 1, 96)
                .build()
                .unwrap(),
            {
                let mut x = Simulator::builder()
                    .autoregressive(&[0.6])
                    .moving_average(&[0.3])
                    .seasonal(&[], &[-0.6], 96)
                    .differencing(0, 1)
                    .dropouts(lagwise::Dropouts::new(0.0025, 8.0))
                    .build()
                    .unwrap()
                    .generate(3000, 5);
                x[0] = 1.0;
                x
            },
            vec![0.6, 0.3, -0.6],
        ),
        (
            Blueprint::builder()
                .nonseasonal(0, 1, 1)
                .drift_term(true)
                .build()
                .unwrap(),
            Simulator::builder()
                .moving_average(&[-0.4])
                .differencing(1, 0)
                .build()
                .unwrap()
                .generate(500, 3),
            vec![-0.4],
        ),
    ];
    let mut ws = FitWorkspace::new();
    for (bp, x, coefs) in &cases {
        let surface = bp.likelihood_surface(x).unwrap();
        // A workspace sized in advance by the surface allocates nothing from the first
        // evaluation on, and reports what it holds.
        let mut sized = surface.workspace();
        assert!(sized.heap_bytes() >= 8 * x.len(), "{}", sized.heap_bytes());
        let before_first = allocations();
        surface
            .exact_log_likelihood_with(coefs, &mut sized)
            .unwrap();
        surface
            .conditional_log_likelihood_with(coefs, &mut sized)
            .unwrap();
        // The gap step's factors are not sized in advance (their rank depends on the
        // drop-outs met): that case allocates on its first evaluation only.
        let gappy = x.iter().filter(|v| v.is_nan()).count() > 1;
        assert!(
            gappy || allocations() == before_first,
            "{}: first evaluations on a sized workspace allocated",
            bp.shape_label()
        );
        // Warm-up: the workspace grows to this shape and length.
        surface.exact_log_likelihood_with(coefs, &mut ws).unwrap();
        surface
            .conditional_log_likelihood_with(coefs, &mut ws)
            .unwrap();
        let before = allocations();
        let mut total = 0.0;
        for k in 0..50 {
            let c: Vec<f64> = coefs.iter().map(|v| v * (1.0 - 0.001 * k as f64)).collect();
            let after_vec = allocations();
            total += surface.exact_log_likelihood_with(&c, &mut ws).unwrap();
            total += surface
                .conditional_log_likelihood_with(&c, &mut ws)
                .unwrap();
            let now = allocations();
            assert_eq!(
                now,
                after_vec,
                "{}: evaluation {k} allocated {} times",
                bp.shape_label(),
                now - after_vec
            );
        }
        // Only the 50 coefficient vectors built by this test itself allocated.
        assert_eq!(allocations() - before, 50);
        assert!(total.is_finite());

        // Batches of points (lanes where the shape allows): warm up, then none allocate,
        // and each value is bitwise the single-point value.
        let grid: Vec<f64> = (0..11)
            .flat_map(|k| coefs.iter().map(move |v| v * (1.0 - 0.01 * k as f64)))
            .collect();
        let (mut exact, mut css) = (Vec::new(), Vec::new());
        surface
            .exact_log_likelihoods_with(&grid, &mut ws, &mut exact)
            .unwrap();
        surface
            .conditional_log_likelihoods_with(&grid, &mut ws, &mut css)
            .unwrap();
        let before = allocations();
        for _ in 0..20 {
            surface
                .exact_log_likelihoods_with(&grid, &mut ws, &mut exact)
                .unwrap();
            surface
                .conditional_log_likelihoods_with(&grid, &mut ws, &mut css)
                .unwrap();
        }
        assert_eq!(
            allocations(),
            before,
            "{}: batch evaluations allocated",
            bp.shape_label()
        );
        for (i, point) in grid.chunks(coefs.len()).enumerate() {
            let one = surface.exact_log_likelihood_with(point, &mut ws).unwrap();
            assert_eq!(one.to_bits(), exact[i].to_bits(), "exact point {i}");
            let one = surface
                .conditional_log_likelihood_with(point, &mut ws)
                .unwrap();
            assert_eq!(one.to_bits(), css[i].to_bits(), "conditional point {i}");
        }
    }
}

/// A monitor running the shift test takes in-control readings without allocating once
/// its buffers have grown (decisions, which replay, are rare and may allocate).
#[test]
fn monitoring_with_the_shift_test_does_not_allocate() {
    let sim = Simulator::builder()
        .autoregressive(&[0.6])
        .level(40.0)
        .build()
        .unwrap();
    let x = sim.generate(3_000, 9);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .build()
        .unwrap()
        .fit(&x[..1_000])
        .unwrap();
    let test = lagwise::ShiftTest::builder().build().unwrap();
    let mut watch = fit.monitor(0.999).unwrap().with_shift_test(&test);
    // Warm-up: the kept inputs grow to their working size (two look-backs of 96).
    for v in &x[1_000..1_400] {
        watch.observe(v.clamp(39.0, 41.0)).unwrap();
    }
    COUNTED.with(|c| c.set(true));
    let before = allocations();
    let mut decided = 0;
    for v in &x[1_400..] {
        // Readings clamped to ±1 innovation sd of the level keep the test quiet.
        let check = watch.observe(v.clamp(39.0, 41.0)).unwrap();
        decided += usize::from(check.finding.is_some());
    }
    let allocated = allocations() - before;
    COUNTED.with(|c| c.set(false));
    assert_eq!(decided, 0);
    assert_eq!(
        allocated, 0,
        "1,600 quiet readings allocated {allocated} times"
    );
}

/// The forecasting filter through missing readings on a large state (period 96 with a
/// seasonal difference: 195 state entries, the covariance carried in full) allocates
/// nothing per reading once its buffers have grown — before, each step allocated its
/// half-transformed covariance (300 KB) and two small vectors.
#[test]
fn monitoring_through_gaps_on_a_seasonal_model_does_not_allocate() {
    let sim = Simulator::builder()
        .autoregressive(&[0.5])
        .seasonal(&[], &[-0.5], 96)
        .differencing(0, 1)
        .level(60.0)
        .build()
        .unwrap();
    let x = sim.generate(1_400, 4);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .seasonal(0, 1, 1, 96)
        .build()
        .unwrap()
        .fit(&x[..1_000])
        .unwrap();
    let mut watch = fit.monitor(0.999).unwrap();
    // Warm-up, with a missing reading so that the covariance is carried in full.
    watch.observe(f64::NAN).unwrap();
    for v in &x[1_001..1_050] {
        watch.observe(*v).unwrap();
    }
    assert!(
        !watch.is_steady(),
        "the covariance should be carried in full here"
    );
    COUNTED.with(|c| c.set(true));
    let before = allocations();
    for (i, v) in x[1_050..].iter().enumerate() {
        // A drop-out run of four readings every fifty.
        let reading = if i % 50 < 4 { f64::NAN } else { *v };
        watch.observe(reading).unwrap();
    }
    let allocated = allocations() - before;
    COUNTED.with(|c| c.set(false));
    assert_eq!(
        allocated, 0,
        "350 readings with drop-outs allocated {allocated} times"
    );
}
