#!/usr/bin/env bash
# Peak memory and time of `grove apply` by image size (the README's memory table; issue 7:
# peak RSS ≤ 2 GiB at any size, cost per megapixel flat). Not part of the test run: the
# largest image takes many minutes on 2 cores.
#
#   scripts/memory.sh [MEGAPIXELS...]      default: 0.25 4 16 64 256
#
# Each image is a square mosaic of the demo's farm scenes, written row by row by
# `examples/big_scene.rs` (never held whole), segmented with the demo's default model
# (`grove demo`, which also picks the model's smoothing strength) at the default tile size,
# once with the model's smoothing and once with `--smooth none`. Peak RSS and wall time come
# from /usr/bin/time -v; cpu_s/Mpx is user + system CPU time, steadier than wall time on a
# shared machine. Environment: TILE (pass --tile TILE instead of the default),
# WORK (scratch folder, default a new one under /tmp; images are deleted after use),
# MODEL (a model file instead of training the demo's), MODES ("model none" by default:
# "model" = the model's smoothing, "none" = off; one of them runs only that), NO_BUILD=1 (use the binaries in
# target/release as they are).
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
sizes=("$@")
[ ${#sizes[@]} -gt 0 ] || sizes=(0.25 4 16 64 256)
work=${WORK:-$(mktemp -d /tmp/grove-memory.XXXXXX)}
mkdir -p "$work"

[ -n "${NO_BUILD:-}" ] ||
    cargo build --release --quiet --manifest-path "$root/Cargo.toml" --bin grove --example big_scene
# Copies, so a rebuild during the (long) run does not change the program measured.
mkdir -p "$work/bin"
cp "$root/target/release/grove" "$root/target/release/examples/big_scene" "$work/bin/"
grove=$work/bin/grove
big=$work/bin/big_scene

model=${MODEL:-}
if [ -z "$model" ]; then
    "$grove" demo --out "$work/demo" --quiet >/dev/null
    model=$work/demo/model.grove
fi
tile_args=()
tile_note="default tile"
if [ -n "${TILE:-}" ]; then
    tile_args=(--tile "$TILE")
    tile_note="--tile $TILE"
fi

echo "# grove apply, $tile_note, model $(basename "$model") ($("$grove" info "$model" | grep -o 'smoothing default: [^(]*'))"
echo "# $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(date -u +%Y-%m-%dT%H:%MZ)"
printf '%-10s %-11s %-10s %9s %9s %9s %11s\n' megapixels size smoothing seconds "s/Mpx" "cpu_s/Mpx" "peak_MiB"
for mp in "${sizes[@]}"; do
    side=$(awk -v mp="$mp" 'BEGIN { printf "%d", sqrt(mp * 1e6) + 0.5 }')
    img=$work/big_${side}.png
    "$big" "$img" "$side" "$side"
    for smooth in ${MODES:-model none}; do
        out=$work/out
        rm -rf "$out"
        args=(apply "$model" "$img" --out "$out" --quiet --force "${tile_args[@]}")
        [ "$smooth" = none ] && args+=(--smooth none)
        /usr/bin/time -v "$grove" "${args[@]}" 2>"$work/time.log" >/dev/null || {
            cat "$work/time.log" >&2
            exit 1
        }
        rss=$(awk -F': ' '/Maximum resident set size/ {print $2}' "$work/time.log")
        wall=$(awk -F': ' '/Elapsed \(wall clock\)/ {print $2}' "$work/time.log")
        secs=$(echo "$wall" | awk -F: '{ s = 0; for (i = 1; i <= NF; i++) s = s * 60 + $i; print s }')
        cpu=$(awk -F': ' '/User time|System time/ { s += $2 } END { print s }' "$work/time.log")
        label=$smooth
        [ "$smooth" = model ] && label=on
        awk -v mp="$mp" -v side="$side" -v sm="$label" -v s="$secs" -v cpu="$cpu" -v rss="$rss" 'BEGIN {
            px = side * side / 1e6
            printf "%-10s %-11s %-10s %9.1f %9.2f %9.2f %11.0f\n", mp, side "x" side, sm, s, s / px, cpu / px, rss / 1024
        }'
        rm -rf "$out"
    done
    rm -f "$img"
done
[ -n "${WORK:-}" ] || rm -rf "$work"
