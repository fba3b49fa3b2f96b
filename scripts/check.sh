#!/usr/bin/env bash
# The project's one test command (README "Quick start"; .ci/run calls exactly this).
# Formatting, lints, every test (unit, integration, doc), and a build of every example,
# benchmark and the fuzz-corpus replay. Needs only a Rust toolchain and crates.io.
set -euo pipefail
cd "$(dirname "$0")/.."
echo "== rustfmt"
cargo fmt --all -- --check
echo "== clippy"
cargo clippy --locked --all-targets -- -D warnings
echo "== tests (unit, integration, examples)"
cargo test --locked --lib --tests --examples
echo "== doc tests"
cargo test --locked --doc
echo "== docs (warnings are errors)"
RUSTDOCFLAGS="-D warnings" cargo doc --locked --no-deps
echo "== benches build"
cargo bench --locked --no-run
echo "== all checks passed"
