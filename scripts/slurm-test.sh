#!/usr/bin/env bash
# The README's Slurm job-array script, run for real on a single-node Slurm started here.
#
# Starts munged, slurmctld and slurmd (Debian's slurm-wlm packages, installed if missing) as
# plain background processes with a private slurm.conf (no systemd, no cgroup plugins),
# generates the demo scenes and model, applies the model once unsharded, submits the job-array
# block of README.md unchanged as a 4-task array with ids 1,4,7,10 (so the shard index has to
# come from (ID - MIN) / STEP), waits, merges the shards' areas, and checks that
#   - every task completed with exit code 0,
#   - every scene was segmented by exactly one shard,
#   - the label maps are byte-identical to the unsharded run's,
#   - the merged areas equal the unsharded run's (when this grove has merge-areas),
#   - a resubmitted array skips every image (resume).
# Then stops the daemons it started (by PID) and exits 0 only if all of that held.
#
# Not part of `cargo test`: it needs root (packages, munge key, daemons) and ~1 minute.
# Usage: sudo bash scripts/slurm-test.sh        env: WORK (scratch folder), KEEP=1 (keep it)
set -euo pipefail

ROOT=$(cd "$(dirname "$0")/.." && pwd)
WORK=${WORK:-$(mktemp -d "${TMPDIR:-/tmp}/grove-slurm.XXXXXX")}
SL="$WORK/slurm"
t0=$EPOCHREALTIME
say() { awk -v a="$t0" -v b="$EPOCHREALTIME" -v m="$*" 'BEGIN{printf "[%6.1fs] %s\n", b-a, m}'; }
die() { say "FAIL: $*"; exit 1; }
[ "$(id -u)" = 0 ] || die "run as root (installs packages, starts munged/slurmctld/slurmd)"

# ------------------------------------------------------------------ packages
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null ||
   ! command -v sbatch >/dev/null || ! command -v munged >/dev/null; then
  export DEBIAN_FRONTEND=noninteractive
  made_policy=   # keep the packages' init scripts from starting daemons at install time
  if [ ! -e /usr/sbin/policy-rc.d ]; then
    printf '#!/bin/sh\nexit 101\n' > /usr/sbin/policy-rc.d; chmod +x /usr/sbin/policy-rc.d; made_policy=1
  fi
  apt-get update -q
  apt-get install -y -q --no-install-recommends slurmctld slurmd slurm-client munge
  [ -z "$made_policy" ] || rm -f /usr/sbin/policy-rc.d
fi
say "slurm: $(slurmctld -V)"

# ------------------------------------------------------------------ grove, data, reference
command -v cargo >/dev/null || export PATH="$HOME/.cargo/bin:$PATH"
(cd "$ROOT" && cargo build --release -q)
GROVE_BIN="$ROOT/target/release"
grove() { "$GROVE_BIN/grove" "$@"; }
rm -rf "$WORK/demo" "$WORK/whole" "$WORK/maps"
mkdir -p "$WORK"
grove demo --out "$WORK/demo" --quiet > "$WORK/demo.log"
MODEL="$WORK/demo/model.grove"
INPUT="$WORK/demo/*/images/*.png"       # quoted: grove expands it
n_images=$(ls "$WORK"/demo/*/images/*.png | wc -l)
grove apply "$MODEL" "$INPUT" --out "$WORK/whole" --quiet > /dev/null
say "demo: $n_images scenes, unsharded reference in $WORK/whole"

# The README's job-array block, as it is.
awk '/<!-- slurm-array-script/{f=1; next} f && /^```sh$/{g=1; next} g && /^```$/{exit} g' \
  "$ROOT/README.md" > "$WORK/grove-array.sh"
grep -q 'SLURM_ARRAY_TASK_COUNT' "$WORK/grove-array.sh" || die "no job-array script found in README.md"

# ------------------------------------------------------------------ slurm
mkdir -p "$SL"/{etc,state,spool,log,run}
HOST=$(hostname -s)
NODE_HW=$(slurmd -C | head -1 | sed -e 's/^NodeName=[^ ]* //' -e 's/ RealMemory=[0-9]*//')
MEM_MB=$(( $(awk '/MemTotal/{print $2}' /proc/meminfo) / 1024 * 8 / 10 ))
export SLURM_CONF="$SL/etc/slurm.conf"
cat > "$SLURM_CONF" <<EOF
ClusterName=grovetest
SlurmctldHost=${HOST}(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
SchedulerParameters=batch_sched_delay=0
MailProg=/bin/true
SlurmctldPort=${SLURMCTLD_PORT:-6817}
SlurmdPort=${SLURMD_PORT:-6818}
SlurmctldPidFile=$SL/run/slurmctld.pid
SlurmdPidFile=$SL/run/slurmd.pid
StateSaveLocation=$SL/state
SlurmdSpoolDir=$SL/spool
SlurmctldLogFile=$SL/log/slurmctld.log
SlurmdLogFile=$SL/log/slurmd.log
NodeName=${HOST} NodeAddr=127.0.0.1 ${NODE_HW} RealMemory=${MEM_MB} State=UNKNOWN
PartitionName=debug Nodes=ALL Default=YES MaxTime=INFINITE State=UP
EOF

MUNGED_PID= CTLD_PID= SLURMD_PID= JOBIDS=
stop_pid() {   # TERM, up to 5 s, then KILL; only PIDs this script started
  [ -n "$1" ] || return 0
  kill "$1" 2>/dev/null || return 0
  for _ in $(seq 50); do kill -0 "$1" 2>/dev/null || return 0; sleep 0.1; done
  kill -9 "$1" 2>/dev/null || true
}
STEPD_BEFORE=" $(pgrep -x slurmstepd | tr '\n' ' ' || true) "
new_stepds() { for p in $(pgrep -x slurmstepd); do [[ $STEPD_BEFORE == *" $p "* ]] || echo "$p"; done; }
cleanup() {
  set +e
  if [ -n "$JOBIDS" ] && [ -n "$CTLD_PID" ] && kill -0 "$CTLD_PID" 2>/dev/null; then
    for j in $JOBIDS; do scancel "$j" 2>/dev/null; done
  fi
  # each job's slurmstepd lingers ~1 s reporting to slurmctld: let it go while that is up
  for _ in $(seq 100); do [ -z "$(new_stepds)" ] && break; sleep 0.1; done
  stop_pid "$SLURMD_PID"; stop_pid "$CTLD_PID"; stop_pid "$MUNGED_PID"
  for p in $(new_stepds); do kill -9 "$p" 2>/dev/null; done
  say "daemons stopped"
  [ -n "${KEEP:-}" ] || rm -rf "$WORK"
}
trap cleanup EXIT
trap 'exit 130' INT TERM

if munge -n 2>/dev/null | unmunge >/dev/null 2>&1; then
  say "using the munged already running"
else
  if [ ! -s /etc/munge/munge.key ]; then mkdir -p /etc/munge; mungekey --create --keyfile=/etc/munge/munge.key; fi
  chown munge:munge /etc/munge /etc/munge/munge.key; chmod 0700 /etc/munge; chmod 0400 /etc/munge/munge.key
  install -d -o munge -g munge -m 0755 /run/munge
  install -d -o munge -g munge -m 0700 /var/lib/munge /var/log/munge
  setpriv --reuid=munge --regid=munge --init-groups /usr/sbin/munged -F --force > "$SL/log/munged.out" 2>&1 &
  MUNGED_PID=$!
  for _ in $(seq 100); do munge -n 2>/dev/null | unmunge >/dev/null 2>&1 && break; sleep 0.1; done
  munge -n | unmunge | grep -q 'STATUS: *Success' || die "munged does not work: $(cat "$SL/log/munged.out")"
fi
/usr/sbin/slurmctld -D -i -f "$SLURM_CONF" > "$SL/log/slurmctld.out" 2>&1 &
CTLD_PID=$!
/usr/sbin/slurmd -D -N "$HOST" -f "$SLURM_CONF" > "$SL/log/slurmd.out" 2>&1 &
SLURMD_PID=$!
st=
for _ in $(seq 300); do
  st=$(sinfo -h -N -o '%T' 2>/dev/null | head -1 || true)
  [ "$st" = idle ] && break
  sleep 0.2
done
[ "$st" = idle ] || { tail -20 "$SL"/log/*; die "the node never became idle (state '$st')"; }
say "slurm up: $(sinfo -h -N -o '%N %T, %c CPUs')"

# ------------------------------------------------------------------ the job array
submit() {   # the README script, ids 1,4,7,10 (4 tasks), one core and 1 GiB each
  sbatch --parsable --array=1-10:3 --cpus-per-task=1 --mem=1G --chdir="$WORK" \
    --output="$SL/log/task-%A_%a.log" \
    --export="ALL,PATH=$GROVE_BIN:$PATH,MODEL=$MODEL,INPUT=$INPUT,OUT=$WORK/maps" \
    "$WORK/grove-array.sh"
}
wait_job() {
  for _ in $(seq 2400); do   # up to 10 minutes
    q=$(squeue -h -j "$1" -o %i 2>/dev/null) && [ -z "$q" ] && return 0
    sleep 0.25
  done
  squeue; die "job $1 did not finish within 10 minutes"
}
check_tasks() {
  scontrol -o show job "$1" | sed -E 's/.*ArrayTaskId=([^ ]*).* JobState=([^ ]*).* ExitCode=([^ ]*).*/  task \1: \2 exit \3/'
  n=$(scontrol -o show job "$1" | grep -c 'JobState=COMPLETED.*ExitCode=0:0' || true)
  [ "$n" = 4 ] || { tail -n 20 "$SL"/log/task-"$1"_*.log; die "$((4 - n)) of 4 tasks did not complete with exit 0"; }
}
JOB=$(submit); JOBIDS="$JOB"
say "submitted job array $JOB"
wait_job "$JOB"
check_tasks "$JOB"
say "array finished"

# ------------------------------------------------------------------ checks
shards=$(ls -d "$WORK"/maps/shard-*-of-4 | wc -l)
[ "$shards" = 4 ] || die "expected 4 shard folders, found $shards"
cnt=$(ls "$WORK"/maps/shard-*-of-4/labels/*.png | wc -l)
[ "$cnt" = "$n_images" ] || die "$cnt label maps from the shards, $n_images scenes"
dups=$(for d in "$WORK"/maps/shard-*-of-4/labels; do ls "$d"; done | sort | uniq -d | wc -l)
[ "$dups" = 0 ] || die "$dups scenes segmented by more than one shard"
for f in "$WORK"/whole/labels/*.png; do
  name=$(basename "$f")
  cmp -s "$f" "$WORK"/maps/shard-*-of-4/labels/"$name" || die "$name differs from the unsharded run"
done
say "label maps: $cnt from 4 shards ($(for d in "$WORK"/maps/shard-*-of-4; do ls "$d/labels" | wc -l; done | paste -sd+)), each once, byte-identical to one unsharded run"

if grove merge-areas --help > /dev/null 2>&1; then
  grove merge-areas "$WORK"/maps/shard-*-of-4 --out "$WORK/maps/areas.csv" > /dev/null
  [ -s "$WORK/whole/areas.csv" ] || die "the unsharded run wrote no areas.csv"
  # row order may differ: compare sorted rows
  diff <(sort "$WORK/whole/areas.csv") <(sort "$WORK/maps/areas.csv") > "$WORK/areas.diff" ||
    { head -20 "$WORK/areas.diff"; die "merged areas differ from the unsharded run's"; }
  say "areas: merge of 4 shards equals the unsharded run ($(wc -l < "$WORK/maps/areas.csv") rows)"
else
  say "areas: this grove has no merge-areas yet; not checked"
fi

JOB2=$(submit); JOBIDS="$JOBIDS $JOB2"
wait_job "$JOB2"
check_tasks "$JOB2"
done_lines=$(cat "$SL"/log/task-"$JOB2"_*.log | grep -c '"status":"done"' || true)
skip_lines=$(cat "$SL"/log/task-"$JOB2"_*.log | grep -c '"status":"skipped"' || true)
[ "$done_lines" = 0 ] && [ "$skip_lines" = "$n_images" ] ||
  die "resubmitted array: $done_lines images redone, $skip_lines skipped (expected 0 and $n_images)"
say "resume: the resubmitted array skipped all $skip_lines images"
say "PASS"
