//! Shared helpers for the integration tests.
#![allow(dead_code)]

use std::path::PathBuf;

/// Path of a file under tests/.
pub(crate) fn test_path(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join(rel)
}

/// Values column (second column) of one of the CSV files in tests/data.
pub(crate) fn load_column(file: &str) -> Vec<f64> {
    let text = std::fs::read_to_string(test_path(&format!("data/{file}"))).expect("test data file");
    text.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            l.split(',')
                .nth(1)
                .expect("two columns")
                .trim()
                .parse()
                .expect("number")
        })
        .collect()
}

/// A JSON fixture under tests/reference.
pub(crate) fn load_json(file: &str) -> serde_json::Value {
    let text = std::fs::read_to_string(test_path(&format!("reference/{file}"))).expect("fixture");
    serde_json::from_str(&text).expect("fixture JSON")
}

/// f64 array from JSON, with null meaning NaN (a missing reading).
pub(crate) fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().unwrap_or(f64::NAN))
        .collect()
}

/// Relative-or-absolute closeness: |a − b| ≤ tol·max(1, |b|).
pub(crate) fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs().max(1.0)
}
