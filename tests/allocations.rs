//! Proof that a likelihood evaluation allocates nothing once the workspace has grown.
//! A separate test binary because it installs a counting global allocator. Only the test's
//! own thread is counted: the harness's main thread prints test names concurrently, and on
//! a loaded machine that printing can fall inside the counting window (seen once in CI: 4
//! allocations that were not ours).
// The counting global allocator needs `unsafe` (the workspace denies it elsewhere).
#![allow(unsafe_code)]

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::sync::atomic::{AtomicUsize, Ordering};

use lagwise::{Blueprint, FitWorkspace, Simulator};

struct Counting;

static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

thread_local! {
    /// Whether allocations on this thread are counted (const-initialised: reading it
    /// does not allocate).
    static COUNTED: Cell<bool> = const { Cell::new(false) };
}

fn note_allocation() {
    if COUNTED.try_with(|c| c.get()).unwrap_or(false) {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
    }
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
        let before_first = ALLOCATIONS.load(Ordering::SeqCst);
        surface
            .exact_log_likelihood_with(coefs, &mut sized)
            .unwrap();
        surface
            .conditional_log_likelihood_with(coefs, &mut sized)
            .unwrap();
        assert_eq!(
            ALLOCATIONS.load(Ordering::SeqCst),
            before_first,
            "{}: first evaluations on a sized workspace allocated",
            bp.shape_label()
        );
        // Warm-up: the workspace grows to this shape and length.
        surface.exact_log_likelihood_with(coefs, &mut ws).unwrap();
        surface
            .conditional_log_likelihood_with(coefs, &mut ws)
            .unwrap();
        let before = ALLOCATIONS.load(Ordering::SeqCst);
        let mut total = 0.0;
        for k in 0..50 {
            let c: Vec<f64> = coefs.iter().map(|v| v * (1.0 - 0.001 * k as f64)).collect();
            let after_vec = ALLOCATIONS.load(Ordering::SeqCst);
            total += surface.exact_log_likelihood_with(&c, &mut ws).unwrap();
            total += surface
                .conditional_log_likelihood_with(&c, &mut ws)
                .unwrap();
            let now = ALLOCATIONS.load(Ordering::SeqCst);
            assert_eq!(
                now,
                after_vec,
                "{}: evaluation {k} allocated {} times",
                bp.shape_label(),
                now - after_vec
            );
        }
        // Only the 50 coefficient vectors built by this test itself allocated.
        assert_eq!(ALLOCATIONS.load(Ordering::SeqCst) - before, 50);
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
        let before = ALLOCATIONS.load(Ordering::SeqCst);
        for _ in 0..20 {
            surface
                .exact_log_likelihoods_with(&grid, &mut ws, &mut exact)
                .unwrap();
            surface
                .conditional_log_likelihoods_with(&grid, &mut ws, &mut css)
                .unwrap();
        }
        assert_eq!(
            ALLOCATIONS.load(Ordering::SeqCst),
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
