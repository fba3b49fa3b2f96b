#!/usr/bin/env bash
# The project's one test command (README "Quick start"; .ci/run calls exactly this).
# Formatting, lints, every test of every workspace crate (unit, integration, doc), a build
# of every example and benchmark and the fuzz-corpus replay, a Ballista cluster started
# and stopped on loopback, and the demo's HTML page in a headless browser. Needs a Rust toolchain, crates.io, Python 3, and Chromium (installed
# from the distribution's packages when absent).
set -euo pipefail
cd "$(dirname "$0")/.."
echo "== rustfmt"
cargo fmt --all -- --check
echo "== clippy"
cargo clippy --locked --workspace --all-targets -- -D warnings
echo "== tests (unit, integration, examples)"
cargo test --locked --workspace --lib --tests --examples --bins
echo "== a Ballista cluster on loopback (scheduler and two executors as processes)"
cargo build --locked --workspace --profile test --example historian_sql --bin lagwise-node
bash scripts/cluster_check.sh
if pgrep -f target/debug/lagwise-node > /dev/null; then
    echo "lagwise-node processes left running after the tests:" >&2
    pgrep -af target/debug/lagwise-node >&2
    exit 1
fi
echo "== doc tests"
cargo test --locked --workspace --doc
echo "== docs (warnings are errors)"
RUSTDOCFLAGS="-D warnings" cargo doc --locked --workspace --no-deps
echo "== benches build"
cargo bench --locked --no-run
echo "== the demo's page in a browser"
bash scripts/browser_check.sh
echo "== all checks passed"
