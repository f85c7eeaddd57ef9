#!/usr/bin/env bash
# The workspace's timings quoted in the README (workspace section), one run: `grove label` to
# the first prediction on demo images, the brush on a 4000 × 3000 image, and a training of 20
# demo images from the page against `grove train` on the same folder. Needs node, Debian's
# chromium and tests/browser/node_modules (installed here if missing). The figures are
# printed by the ignored test `measure_workspace` (tests/workspace_browser.rs), which drives
# tests/browser/measure.mjs; screenshots go to target/browser-measure/.
#
# usage: benches/workspace.sh
set -euo pipefail
cd "$(dirname "$0")/.."
[ -d tests/browser/node_modules/playwright-core ] || (cd tests/browser && npm ci --no-audit --no-fund)
cargo test --release --test workspace_browser -- --ignored --nocapture measure_workspace
