#!/usr/bin/env bash
# Side-by-side: grove vs the numpy/scipy/scikit-learn reference pipeline
# (../shared/baseline/reference_pipeline.py) on the same train/test folders with the same
# settings (32 trees, 5000 samples per image, 32 textons). For each data set it alternates
# the two programs RUNS times (default 3) and prints median train+eval wall time, mean IoU,
# and the speed ratio. Needs: python3 with numpy scipy scikit-learn pillow.
#
# usage: benches/compare.sh [RUNS] [WORKDIR]
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS=${1:-3}
WORK=${2:-target/compare}
BASE=${BASELINE:-../shared/baseline}
mkdir -p "$WORK"
cargo build --release --quiet
GROVE=target/release/grove

texture_table() {
  cat <<'T'
[[class]]
id = 0
name = "smooth"
color = "#e8590c"
[[class]]
id = 1
name = "fine"
color = "#1c7ed6"
[[class]]
id = 2
name = "stripes"
color = "#2f9e44"
[[class]]
id = 3
name = "blobs"
color = "#f08c00"
T
}

# split SRC N_TRAIN DST: first N_TRAIN images (name order) to DST/train, the rest to DST/test.
split() {
  local src=$1 n=$2 dst=$3
  rm -rf "$dst"; mkdir -p "$dst"/{train,test}/{images,labels}
  local i=0
  for f in $(ls "$src/images" | sort); do
    local part=test; [ $i -lt "$n" ] && part=train
    cp "$src/images/$f" "$dst/$part/images/"; cp "$src/labels/$f" "$dst/$part/labels/"
    i=$((i + 1))
  done
  cp "$src/classes.toml" "$dst/train/"; cp "$src/classes.toml" "$dst/test/"
}

prepare() {
  if [ ! -d "$WORK/texture/train" ]; then
    python3 "$BASE/make_texture_set.py" "$WORK/texture-all" >/dev/null
    texture_table > "$WORK/texture-all/classes.toml"
    split "$WORK/texture-all" 8 "$WORK/texture"
  fi
  if [ ! -d "$WORK/texture512/train" ]; then
    python3 "$BASE/make_texture_set.py" "$WORK/texture512-all" --n 24 --size 512 --seed 1 >/dev/null
    texture_table > "$WORK/texture512-all/classes.toml"
    split "$WORK/texture512-all" 16 "$WORK/texture512"
  fi
  if [ ! -d "$WORK/mni152/train" ]; then
    split tests/data/mni152-tissue 10 "$WORK/mni152"
  fi
}

now() { date +%s.%N; }
median() { sort -g | awk '{a[NR]=$1} END {print (NR%2 ? a[(NR+1)/2] : (a[NR/2]+a[NR/2+1])/2)}'; }

run_grove() {  # DIR -> prints "seconds miou"
  # --position: the reference pipeline always has position features; compare like with like.
  local d=$1 t0 t1
  t0=$(now)
  $GROVE train "$d/train" --model "$d/grove.model" --trees 32 --samples-per-image 5000 --textons 32 --position --quiet >/dev/null
  $GROVE eval "$d/grove.model" "$d/test" --json "$d/grove.json" --quiet >/dev/null
  t1=$(now)
  echo "$(echo "$t1 - $t0" | bc -l) $(python3 -c "import json,sys; print(json.load(open(sys.argv[1]))['mean_iou'])" "$d/grove.json")"
}

run_reference() {
  local d=$1 t0 t1
  t0=$(now)
  python3 "$BASE/reference_pipeline.py" "$d/train" --test "$d/test" --trees 32 --samples-per-image 5000 \
    --textons 32 --out "$d/ref.json" >/dev/null
  t1=$(now)
  echo "$(echo "$t1 - $t0" | bc -l) $(python3 -c "import json,sys; print(json.load(open(sys.argv[1]))['mean_iou'])" "$d/ref.json")"
}

prepare
printf '| data set | grove s | reference s | speed-up | grove mIoU | reference mIoU |\n|---|---|---|---|---|---|\n'
for set in texture texture512 mni152; do
  d="$WORK/$set"; : > "$d/g.txt"; : > "$d/r.txt"
  for _ in $(seq "$RUNS"); do
    run_grove "$d" >> "$d/g.txt"
    run_reference "$d" >> "$d/r.txt"
  done
  gt=$(cut -d' ' -f1 "$d/g.txt" | median); rt=$(cut -d' ' -f1 "$d/r.txt" | median)
  gi=$(cut -d' ' -f2 "$d/g.txt" | median); ri=$(cut -d' ' -f2 "$d/r.txt" | median)
  printf '| %s | %.2f | %.2f | %.1fx | %.4f | %.4f |\n' "$set" "$gt" "$rt" "$(echo "$rt / $gt" | bc -l)" "$gi" "$ri"
done
