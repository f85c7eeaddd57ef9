#!/usr/bin/env bash
# The workspace's timings quoted in the README (workspace section), one run:
# 1. through the page in headless Chromium (the ignored test `measure_workspace` in
#    tests/workspace_browser.rs, driving tests/browser/measure.mjs; screenshots in
#    target/browser-measure/): `grove label` to the first prediction on demo images, the brush
#    on a 4000 × 3000 image, and a training of 20 demo images from the page alternating with
#    `grove train` on the same folder;
# 2. the same training through the server's HTTP API without a browser (curl), alternating with
#    `grove train`, so the browser's own CPU use is out of the comparison.
# Needs node, Debian's chromium, curl and tests/browser/node_modules (installed here if
# missing).
#
# usage: benches/workspace.sh [WORKDIR]
set -euo pipefail
cd "$(dirname "$0")/.."
WORK=${1:-target/workspace-bench}
[ -d tests/browser/node_modules/playwright-core ] || (cd tests/browser && npm ci --no-audit --no-fund)
cargo test --release --test workspace_browser -- --ignored --nocapture measure_workspace

cargo build --release --quiet
G=$PWD/target/release/grove
rm -rf "$WORK" && mkdir -p "$WORK"
"$G" demo --out "$WORK/demo" --images 30 --quiet >/dev/null   # train/: 20 labelled images
DATA=$WORK/demo/train
now() { date +%s.%N; }
cli() {
  local s; s=$(now)
  "$G" train "$DATA" --model "$WORK/cli.grove" --quiet --force >/dev/null 2>&1
  echo "grove train            $(echo "$(now) - $s" | bc) s"
}
api() {
  "$G" label "$DATA" --model "$WORK/page.grove" >"$WORK/url.txt" 2>/dev/null &
  local pid=$! s url token base
  until grep -qs token= "$WORK/url.txt"; do sleep 0.1; done
  url=$(grep -o 'http://[^ ]*' "$WORK/url.txt"); token=${url##*token=}; base=${url%%/?token*}
  s=$(now)
  curl -sf -X POST -H "x-grove-token: $token" "$base/api/train" >/dev/null
  until curl -sf -H "x-grove-token: $token" "$base/api/train" | grep -q '"state":"done"'; do sleep 0.2; done
  echo "server API (no browser) $(echo "$(now) - $s" | bc) s"
  kill "$pid"; wait "$pid" 2>/dev/null || true
}
cli; api; cli; api; cli
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg)"
