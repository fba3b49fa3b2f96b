//! Replays every committed fuzz corpus file through the same harness the fuzz targets
//! use, on the stable toolchain, so CI exercises the corpus on every run.

#[path = "../fuzz/harness/mod.rs"]
mod harness;

use crate::common::test_path;

fn replay(target: &str, run: fn(&[u8])) -> usize {
    let dir = test_path(&format!("../fuzz/corpus/{target}"));
    let mut count = 0;
    let mut entries: Vec<_> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("corpus folder {dir:?}: {e}"))
        .map(|e| e.expect("corpus entry").path())
        .collect();
    entries.sort();
    for path in entries {
        let bytes = std::fs::read(&path).expect("corpus file");
        run(&bytes);
        count += 1;
    }
    count
}

#[test]
fn correlogram_corpus() {
    assert!(replay("correlogram", harness::correlogram) >= 8);
}

#[test]
fn fit_corpus() {
    assert!(replay("fit", harness::fit) >= 10);
}

#[test]
fn monitor_corpus() {
    assert!(replay("monitor", harness::monitor) >= 5);
}

#[test]
fn restore_corpus() {
    assert!(replay("restore", harness::restore) >= 8);
}

#[test]
fn grid_corpus() {
    assert!(replay("grid", harness::grid) >= 6);
}

#[test]
fn events_corpus() {
    assert!(replay("events", harness::events) >= 6);
}
