#!/usr/bin/env bash
# The cluster scripts of examples/slurm/ on a real Slurm: a one-node cluster on this machine runs
# fit-array.sbatch as a 4-task job array on the demo data (2 models, 2 starts) and merge.sbatch
# as a job depending on the array (afterok), then the same fit runs as a single process and
# every output file of the merged folder must equal the single run's byte for byte (cmp), with
# the same list of files. Also checked: every job ends COMPLETED with exit code 0 (scontrol), and
# each task's log holds its shard line and the fit's final progress line (progress reaches a
# Slurm log, where standard error is a file).
#
# Installs Debian's `slurm-wlm` (22.05 on bookworm) and `munge` with apt-get when missing. Needs
# root (re-runs itself with password-less sudo if it can): slurmd starts jobs as the submitting
# user. Everything it starts is its own and lives in a temporary folder: a munged with its own
# key and socket, slurmctld and slurmd with a generated slurm.conf (this host, CPUs from nproc,
# half the memory, proctrack/linuxproc, task/none, no cgroups) on ports 16817/16818, so the
# machine's own munge or Slurm configuration (if any) is neither read nor changed. The daemons
# are stopped and the folder removed on exit; on failure their logs and the jobs' logs are
# printed. Uses the release binary of `cargo test --release` (built when missing).
set -euo pipefail
script="$(realpath "$0")"
cd "$(dirname "$script")/../.."
repo="$PWD"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/valuedrift/target}"
bin="$CARGO_TARGET_DIR/release/valuedrift"
say() { echo "slurm_array: $*"; }
if [ ! -x "$bin" ]; then
  command -v cargo >/dev/null 2>&1 || { say "$bin missing and no cargo to build it" >&2; exit 1; }
  cargo build --release
fi

if [ "$(id -u)" -ne 0 ]; then
  if command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
    exec sudo -n CARGO_TARGET_DIR="$CARGO_TARGET_DIR" bash "$script" "$@"
  fi
  say "needs root (slurmd starts jobs as their user) or password-less sudo; user $(id -un) has neither" >&2
  exit 1
fi

packages=()
for program in slurmctld slurmd sbatch squeue sinfo scontrol; do
  command -v "$program" >/dev/null 2>&1 || { packages+=(slurm-wlm); break; }
done
command -v munged >/dev/null 2>&1 || packages+=(munge)
if [ "${#packages[@]}" -gt 0 ]; then
  say "installing Debian's ${packages[*]}"
  apt-get update -q
  DEBIAN_FRONTEND=noninteractive apt-get install -y -q "${packages[@]}"
fi

show_logs() {
  local log
  for log in "$work"/munge/munged.log "$work"/slurmctld.log "$work"/slurmd.log \
    "$work"/array/*.log; do
    [ -f "$log" ] || continue
    echo "----- $log (last 60 lines)" >&2
    tail -n 60 "$log" >&2
  done
  if [ -s "$work/jobs.txt" ]; then echo "----- jobs" >&2; cat "$work/jobs.txt" >&2; fi
}

# The daemons started here, last started first: their pids are read from their pid files as soon
# as they start (the daemons remove the files when they stop).
daemons=()
started() {
  for _ in $(seq 100); do [ -s "$1" ] && break; sleep 0.1; done
  [ -s "$1" ] || { say "$1 not written: the daemon did not start" >&2; exit 1; }
  daemons=("$(cat "$1")" "${daemons[@]}")
}

finish() {
  local status=$? pid ids
  trap - EXIT
  set +e
  if [ "$status" -ne 0 ]; then
    say "FAILED (exit $status); logs follow" >&2
    show_logs
    if [ -n "$jobs" ]; then
      IFS=, read -ra ids <<< "$jobs"
      timeout 20 scancel "${ids[@]}" 2>/dev/null
      for _ in $(seq 100); do
        [ -z "$(timeout 10 squeue -h -j "$jobs" -o %i 2>/dev/null)" ] && break; sleep 0.2
      done
    fi
  fi
  # slurmd, slurmctld, then munged (the others need it to authenticate): asked to stop, given
  # 20 s, then killed.
  for pid in "${daemons[@]}"; do
    kill -TERM "$pid" 2>/dev/null
    for _ in $(seq 100); do kill -0 "$pid" 2>/dev/null || break; sleep 0.2; done
    kill -KILL "$pid" 2>/dev/null
  done
  rm -rf "$work"
  exit "$status"
}
jobs=""  # the jobs submitted here, cancelled on failure
work="$(mktemp -d /tmp/valuedrift-slurm.XXXXXX)"
trap finish EXIT
chmod 755 "$work"
mkdir -m 755 "$work/munge"  # munged requires its socket folder open to all (the key stays 0400)
mkdir "$work/state" "$work/spool" "$work/array" "$work/single"
host="$(hostname -s)"
export SLURM_CONF="$work/slurm.conf"

# munged of our own: its own key, socket, pid, seed and log, in the temporary folder.
dd if=/dev/urandom of="$work/munge/munge.key" bs=1024 count=1 status=none
chmod 400 "$work/munge/munge.key"
munged --key-file="$work/munge/munge.key" --socket="$work/munge/munge.socket" \
  --pid-file="$work/munge/munged.pid" --seed-file="$work/munge/munged.seed" \
  --log-file="$work/munge/munged.log"
started "$work/munge/munged.pid"

cpus="$(nproc)"
memory_mb="$(awk '/^MemTotal:/ { print int($2 / 1024 / 2) }' /proc/meminfo)"
cat > "$SLURM_CONF" <<EOF
# One-node test cluster written by tests/scripts/slurm_array.sh.
ClusterName=valuedrift-test
SlurmctldHost=$host(127.0.0.1)
SlurmctldPort=16817
SlurmdPort=16818
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$work/munge/munge.socket
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
DependencyParameters=kill_invalid_depend
ReturnToService=2
MinJobAge=3600
PlugStackConfig=$work/plugstack.conf
StateSaveLocation=$work/state
SlurmdSpoolDir=$work/spool
SlurmctldPidFile=$work/slurmctld.pid
SlurmdPidFile=$work/slurmd.pid
SlurmctldLogFile=$work/slurmctld.log
SlurmdLogFile=$work/slurmd.log
NodeName=$host NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$memory_mb State=UNKNOWN
PartitionName=test Nodes=$host Default=YES MaxTime=INFINITE State=UP
EOF
: > "$work/plugstack.conf"

slurmctld -c -f "$SLURM_CONF"
started "$work/slurmctld.pid"
slurmd -f "$SLURM_CONF"
started "$work/slurmd.pid"
say "slurmctld and slurmd started on $host ($cpus CPUs, ${memory_mb} MB); waiting for the node"
state=""
for _ in $(seq 120); do
  state="$(timeout 10 sinfo -h -N -n "$host" -o %t 2>/dev/null || true)"
  [ "$state" = "idle" ] && break
  sleep 0.5
done
if [ "$state" != "idle" ]; then
  say "node $host is '${state:-not reported}' after 60 s, not idle" >&2
  timeout 10 sinfo -R >&2 || true
  exit 1
fi

# The fit, as a lab would set it up (examples/slurm/fit-array.sbatch reads these).
export FIT_DATA="$repo/demo-data/orchard_trials.csv" FIT_MODELS="gainloss-linear,delta-linear"
export FIT_STARTS=2 FIT_SEED=1 FIT_SHARD_DIR=shards FIT_OUT=fit VALUEDRIFT="$bin"
unset FIT_SHARDS FIT_OPTIONS  # N from the array's size
cd "$work/array"
started=$SECONDS
array="$(timeout 60 sbatch --parsable --array=1-4 --cpus-per-task=1 --mem-per-cpu=500M \
  --time=00:10:00 "$repo/examples/slurm/fit-array.sbatch")"
merge="$(timeout 60 sbatch --parsable --dependency="afterok:$array" --mem=500M \
  --time=00:10:00 "$repo/examples/slurm/merge.sbatch")"
jobs="$array,$merge"
say "submitted array job $array (4 tasks) and merge job $merge (afterok:$array)"
while [ -n "$(timeout 10 squeue -h -j "$jobs" -o %i 2>/dev/null || echo waiting)" ]; do
  if [ $((SECONDS - started)) -gt 600 ]; then
    say "jobs still queued or running after 600 s" >&2
    timeout 10 squeue -j "$jobs" >&2 || true
    exit 1
  fi
  sleep 1
done
say "jobs done in $((SECONDS - started)) s"

# Every job (4 tasks and the merge) COMPLETED with exit code 0.
timeout 10 scontrol -o show job "$array" > "$work/jobs.txt"
timeout 10 scontrol -o show job "$merge" >> "$work/jobs.txt"
completed="$(grep -c 'JobState=COMPLETED .*ExitCode=0:0' "$work/jobs.txt" || true)"
if [ "$completed" -ne 5 ]; then
  say "$completed of 5 jobs completed with exit code 0:" >&2
  sed -E 's/.*(JobId=[0-9]+).*(JobState=[A-Z_]+).*(ExitCode=[0-9:]+).*/\1 \2 \3/' \
    "$work/jobs.txt" >&2
  exit 1
fi
for shard in 1 2 3 4; do
  log="$work/array/valuedrift-fit-${array}_$shard.log"
  grep -q "^fit-array: shard $shard of 4 " "$log" \
    || { say "$log lacks its shard line" >&2; exit 1; }
  grep -q '^progress: fitting .*(100.0 %)' "$log" \
    || { say "$log lacks the final progress line" >&2; exit 1; }
done

# The same fit as one process, with the command line the array's tasks ran without --shard (the
# merged run.json records it), from a folder of its own so that --out is the same text.
cd "$work/single"
"$bin" fit --data "$FIT_DATA" --model "$FIT_MODELS" --starts "$FIT_STARTS" --seed "$FIT_SEED" \
  --threads 1 --out "$FIT_OUT" > single.log 2>&1 || { cat single.log >&2; exit 1; }

(cd "$work/array/fit" && find . -type f -printf '%P\n' | sort) > "$work/merged.files"
(cd "$work/single/fit" && find . -type f -printf '%P\n' | sort) > "$work/single.files"
if ! diff "$work/single.files" "$work/merged.files" >&2; then
  say "the merged folder's files (>) differ from the single run's (<)" >&2
  exit 1
fi
[ -s "$work/single.files" ] || { say "the single run wrote no file" >&2; exit 1; }
while read -r file; do
  cmp "$work/single/fit/$file" "$work/array/fit/$file" >&2 \
    || { say "$file differs between the merged and the single run" >&2; exit 1; }
done < "$work/single.files"
say "4-task array + merge on Slurm $(sbatch --version | cut -d' ' -f2) equals the single run," \
  "byte for byte: $(wc -l < "$work/single.files") files"
