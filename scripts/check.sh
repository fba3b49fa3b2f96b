#!/usr/bin/env bash
# The project's one test command (README "Quick start"; .ci/run calls exactly this).
# Formatting, lints, every test of every workspace crate (unit, integration, doc), a build
# of every example and benchmark and the fuzz-corpus replay, and the demo's HTML page in a
# headless browser. Needs a Rust toolchain, crates.io, Python 3, and Chromium (installed
# from the distribution's packages when absent).
set -euo pipefail
cd "$(dirname "$0")/.."
echo "== rustfmt"
cargo fmt --all -- --check
echo "== clippy"
cargo clippy --locked --workspace --all-targets -- -D warnings
echo "== tests (unit, integration, examples)"
cargo test --locked --workspace --lib --tests --examples --bins
echo "== doc tests"
cargo test --locked --workspace --doc
echo "== docs (warnings are errors)"
RUSTDOCFLAGS="-D warnings" cargo doc --locked --workspace --no-deps
echo "== benches build"
cargo bench --locked --no-run
echo "== the demo's page in a browser"
bash scripts/browser_check.sh
echo "== all checks passed"
