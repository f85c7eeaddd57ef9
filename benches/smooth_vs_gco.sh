#!/usr/bin/env bash
# grove's alpha-expansion and gco's (PyPI gco-wrapper) on the same integer Potts energy of a
# demo-like map (default smoothing settings, 1024² demo scene, 5 classes); prints both times
# and energies and their ratios. Needs Python with numpy and gco-wrapper.
# Usage: benches/smooth_vs_gco.sh [RUNS=3] [SIZE=1024]   (PYTHON=... to pick the interpreter)
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS=${1:-3}
SIZE=${2:-1024}
PYTHON=${PYTHON:-python3}
cargo build --release --quiet --example smooth_vs_gco
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
target/release/examples/smooth_vs_gco "$tmp/energy.bin" "$SIZE" "$RUNS" | tee "$tmp/grove.txt"
"$PYTHON" benches/smooth_vs_gco.py "$tmp/energy.bin" "$RUNS" | tee "$tmp/gco.txt"
"$PYTHON" - "$tmp/grove.txt" "$tmp/gco.txt" <<'PY'
import re, sys
g = open(sys.argv[1]).read().splitlines()[0]
c = open(sys.argv[2]).read()
num = lambda pat, s: float(re.search(pat, s).group(1))
gw, gc, ge = num(r"wall ([\d.]+)", g), num(r"cpu ([\d.]+)", g), num(r"energy ([\d.]+)", g)
cw, cc, ce = num(r"wall ([\d.]+)", c), num(r"cpu ([\d.]+)", c), num(r"energy ([\d.]+)", c)
print(f"gco / grove: wall {cw / gw:.2f}x, cpu {cc / gc:.2f}x; energy grove / gco = {ge / ce:.5f}")
PY
