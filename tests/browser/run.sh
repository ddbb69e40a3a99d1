#!/usr/bin/env bash
# The real-browser check of the two HTML pages: runs the quick scenario and traces one of its
# cells with the given gripsweep binary into a temporary folder, then loads report.html and the
# replay in headless Chromium (Debian's package, $CHROMIUM or /usr/bin/chromium) through
# playwright-core (pinned in package-lock.json; it downloads no browser). Screenshots go to
# $SHOTS (default: target/browser-shots).
# Usage: tests/browser/run.sh path/to/gripsweep
set -euo pipefail
BIN="$(realpath "${1:?usage: tests/browser/run.sh path/to/gripsweep}")"
ROOT="$(cd "$(dirname "$0")/../.." && pwd)"
SHOTS="${SHOTS:-$ROOT/target/browser-shots}"
WORK="$(mktemp -d)"
trap 'rm -rf "$WORK"' EXIT

"$BIN" run "$ROOT/scenarios/quick.toml" --out "$WORK/quick" --quiet
"$BIN" trace "$ROOT/scenarios/quick.toml" --pick slope_deg=10 --pick mu=0.3 \
    --pick controller=force-cost-id-load --out "$WORK/replay.csv"

cd "$ROOT/tests/browser"
PLAYWRIGHT_SKIP_BROWSER_DOWNLOAD=1 npm ci --no-audit --no-fund --silent
node check.mjs "$WORK/quick/report.html" "$WORK/replay.html" "$SHOTS"
