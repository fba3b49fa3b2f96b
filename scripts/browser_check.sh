#!/usr/bin/env bash
# The demo's HTML page checked in a real headless browser (called by scripts/check.sh).
# Installs Debian's Chromium when absent, runs the demo (test profile: its build is the
# one the tests already made), opens the page over the DevTools pipe and fails on console
# errors, requests that leave the page, missing or empty figures and dangling links. The
# screenshot is left at target/kestrel-bay/morning-check.png for a human to look at.
# Starts no server and leaves no process running.
set -euo pipefail
cd "$(dirname "$0")/.."

chrome=""
for c in chromium chromium-browser; do
  if command -v "$c" >/dev/null 2>&1; then chrome="$(command -v "$c")"; break; fi
done
if [ -z "$chrome" ]; then
  echo "== installing Chromium from the distribution's packages"
  if [ "$(id -u)" -ne 0 ]; then sudo=sudo; else sudo=""; fi
  $sudo apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq chromium >/dev/null
  chrome="$(command -v chromium)"
fi
echo "== browser: $("$chrome" --version 2>/dev/null || echo "$chrome")"

out=target/kestrel-bay
mkdir -p "$out"
cargo run --locked --profile test -q -p kestrel-bay -- --out "$out/morning-check.html" >"$out/demo-output.txt"
tail -n 4 "$out/demo-output.txt"
python3 scripts/browser_check.py "$chrome" "$out/morning-check.html" "$out/morning-check.png"

# The README shows a card the demo draws: it must still be the one the demo draws.
if ! cmp -s "$out/cards/lw-residuals-KB-SS0417-TR.svg" crates/figures/gallery/residual-card-KB-SS0417-TR.svg; then
  echo "the README's card differs from the demo's: copy $out/cards/lw-residuals-KB-SS0417-TR.svg to crates/figures/gallery/residual-card-KB-SS0417-TR.svg" >&2
  exit 1
fi

# The check must be able to fail: its self-test page holds one of each fault.
if python3 scripts/browser_check.py "$chrome" scripts/browser_check_selftest.html "$out/selftest.png" >"$out/selftest.txt" 2>&1; then
  echo "browser check self-test: the faulty page passed" >&2
  exit 1
fi
for fault in "console error" "uncaught exception" "the page fetched file:///nonexistent" \
             "link to a missing target: #no-such-sheet" "figure without size" "1 figures shown, 2 declared"; do
  if ! grep -q "$fault" "$out/selftest.txt"; then
    echo "browser check self-test: '$fault' not reported" >&2
    cat "$out/selftest.txt" >&2
    exit 1
  fi
done
echo "browser check self-test: all six faults reported"
