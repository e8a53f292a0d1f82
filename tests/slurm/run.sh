#!/usr/bin/env bash
# The demo campaign through a real Slurm scheduler: installs Debian's slurm-wlm and munge when
# missing, starts a single-node cluster (controller and one compute node, loopback only) in a
# temporary folder, and checks that
#   1. the demo campaign's job array gives combined results identical to a local run;
#   2. with one ensemble's table broken, exactly that ensemble's tasks fail, the others combine
#      with a warning, and resubmitting only the failed tasks completes the campaign with the
#      same combined results as the local run.
# Stops exactly the daemons it started. Needs root (CI runs it from .ci/run).
# Usage: tests/slurm/run.sh [path/to/formfactory]   (default: builds target/release/formfactory)
set -euo pipefail
ROOT=$(cd "$(dirname "$0")/../.." && pwd)
cd "$ROOT"
TIMEOUT=${FF_SLURM_TIMEOUT:-180}   # seconds to wait for one job array

if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge >/dev/null
fi

FF=${1:-}
if [ -z "$FF" ]; then
  cargo build --release --quiet
  FF="$ROOT/target/release/formfactory"
fi

# A short folder: Unix socket paths are limited to 108 bytes.
WORK=$(mktemp -d /tmp/ffs.XXXXXX)
chmod 755 "$WORK"
PIDS=()
cleanup() {
  local rc=$?
  for pid in "${PIDS[@]}"; do kill "$pid" 2>/dev/null || true; done
  # slurmstepd detaches from slurmd: end the ones that hold files in our folder
  for p in /proc/[0-9]*; do
    if ls -l "$p/fd" 2>/dev/null | grep -q "$WORK"; then kill "${p#/proc/}" 2>/dev/null || true; fi
  done
  sleep 1
  if [ "$rc" -ne 0 ]; then
    echo "--- slurmctld.log (tail)"; tail -n 30 "$WORK/slurmctld.log" 2>/dev/null || true
    echo "--- slurmd.log (tail)"; tail -n 30 "$WORK/slurmd.log" 2>/dev/null || true
  fi
  rm -rf "$WORK"
  exit "$rc"
}
trap cleanup EXIT

free_port() {
  python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'
}

# --- munge with a private key and socket
mkdir -p "$WORK/munge" "$WORK/state" "$WORK/spool"
chmod 755 "$WORK/munge"
mungekey --create --keyfile "$WORK/munge/munge.key" 2>/dev/null \
  || dd if=/dev/urandom of="$WORK/munge/munge.key" bs=1024 count=1 status=none
chmod 400 "$WORK/munge/munge.key"
munged -F --force --key-file "$WORK/munge/munge.key" --socket "$WORK/munge/sock" \
  --pid-file "$WORK/munge/munged.pid" --log-file "$WORK/munge/munged.log" \
  --seed-file "$WORK/munge/seed" </dev/null >"$WORK/munge/out.log" 2>&1 &
PIDS+=($!)
for _ in $(seq 50); do [ -S "$WORK/munge/sock" ] && break; sleep 0.1; done

# --- slurm.conf
HOST=$(hostname -s)
CTLD_PORT=$(free_port)
SLURMD_PORT=$(free_port)
while [ "$SLURMD_PORT" = "$CTLD_PORT" ]; do SLURMD_PORT=$(free_port); done
CPUS=$(nproc)
cat >"$WORK/slurm.conf" <<CONF
ClusterName=ffdemo
SlurmctldHost=$HOST(127.0.0.1)
SlurmctldPort=$CTLD_PORT
SlurmdPort=$SLURMD_PORT
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$WORK/munge/sock
CommunicationParameters=NoCtldInAddrAny,NoInAddrAny
SlurmUser=root
SlurmdUser=root
StateSaveLocation=$WORK/state
SlurmdSpoolDir=$WORK/spool
SlurmctldPidFile=$WORK/slurmctld.pid
SlurmdPidFile=$WORK/slurmd.pid
SlurmctldLogFile=$WORK/slurmctld.log
SlurmdLogFile=$WORK/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MpiDefault=none
MailProg=/bin/true
ReturnToService=2
MinJobAge=600
NodeName=ffnode NodeHostname=$HOST NodeAddr=127.0.0.1 CPUs=$CPUS RealMemory=4000 State=UNKNOWN
PartitionName=debug Nodes=ffnode Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$WORK/slurm.conf"

slurmctld -D -f "$SLURM_CONF" </dev/null >"$WORK/slurmctld.out" 2>&1 &
PIDS+=($!)
slurmd -D -N ffnode -f "$SLURM_CONF" </dev/null >"$WORK/slurmd.out" 2>&1 &
PIDS+=($!)
for _ in $(seq 100); do
  sinfo -h -o %t 2>/dev/null | grep -qE '^(idle|mix|alloc)' && break
  sleep 0.2
done
sinfo -h -o '%P %t %D' | sed 's/^/cluster: /'

# Wait for every task of job $1 to end; print "index state exitcode" lines.
wait_job() {
  local id=$1 deadline=$((SECONDS + TIMEOUT)) out
  while :; do
    out=$(scontrol -o show job "$id" 2>/dev/null || true)
    if [ -n "$out" ] && ! grep -qE 'JobState=(PENDING|RUNNING|CONFIGURING|COMPLETING|SUSPENDED)' <<<"$out"; then
      break
    fi
    if [ "$SECONDS" -ge "$deadline" ]; then
      echo "job $id did not finish within $TIMEOUT s"; echo "$out"; return 1
    fi
    sleep 1
  done
  grep -o 'ArrayTaskId=[0-9]* .*JobState=[A-Z_]*' <<<"$out" | sed -E 's/ArrayTaskId=([0-9]+) .*JobState=([A-Z_]+)/\1 \2/' | sort -n
}

submit() {  # campaign file, output folder, extra args; prints the job id
  # Echo the command's output on stderr through the open descriptor: `tee /dev/stderr` would
  # reopen (and truncate) a log file that stdout and stderr both point at.
  local out
  out=$("$FF" campaign slurm "$1" --output "$2" --submit "${@:3}") || return 1
  printf '%s\n' "$out" >&2
  sed -n 's/^submitted job //p' <<<"$out"
}

DEMO=pipelines/campaign-demo.yaml
TABLES="physical_point.csv fits.csv points.csv"

echo "== local run"
"$FF" campaign run "$DEMO" --output "$WORK/local" >/dev/null
"$FF" campaign combine "$DEMO" --output "$WORK/local" >/dev/null

echo "== the demo campaign as a job array"
ID=$(submit "$DEMO" "$WORK/cluster")
STATES=$(wait_job "$ID")
echo "$STATES"
if grep -qv ' COMPLETED$' <<<"$STATES"; then echo "FAIL: not every task completed"; exit 1; fi
[ "$(wc -l <<<"$STATES")" -eq 8 ] || { echo "FAIL: expected 8 array tasks"; exit 1; }
ls "$WORK/cluster/slurm/logs" | grep -q "^${ID}_0.log$" || { echo "FAIL: no per-task log"; exit 1; }
"$FF" campaign status "$DEMO" --output "$WORK/cluster" | tail -n 1
"$FF" campaign combine "$DEMO" --output "$WORK/cluster" >/dev/null
for t in $TABLES; do
  cmp "$WORK/local/combined/$t" "$WORK/cluster/combined/$t" || { echo "FAIL: $t differs from the local run"; exit 1; }
done
echo "ok: combined results identical to the local run"

echo "== one ensemble broken, then only the failed tasks resubmitted"
F="$WORK/fail"
mkdir -p "$F/data"
cp -r demo-data/campaign/a12m350 demo-data/campaign/a09m350 demo-data/campaign/a09m250 \
  demo-data/campaign/a06m300 "$F/data/"
cp pipelines/campaign-pion.yaml "$F/base.yaml"
sed -e 's#^pipeline: .*#pipeline: base.yaml#' -e 's#\.\./demo-data/campaign/#data/#g' \
  -e 's#^output: .*#output: out#' "$DEMO" >"$F/campaign.yaml"
cp "$F/data/a09m250/twopt.csv" "$F/good.csv"
echo "this,is,not,a,row" >>"$F/data/a09m250/twopt.csv"
ID=$(submit "$F/campaign.yaml" "$F/out")
STATES=$(wait_job "$ID")
echo "$STATES"
[ "$(grep -c ' FAILED$' <<<"$STATES")" -eq 2 ] || { echo "FAIL: expected the 2 tasks of a09m250 to fail"; exit 1; }
grep -qE '^(4|5) FAILED$' <<<"$STATES" || { echo "FAIL: the wrong tasks failed"; exit 1; }
STATUS=$("$FF" campaign status "$F/campaign.yaml")
grep -q '6 done, 2 failed' <<<"$STATUS" || { echo "FAIL: status"; echo "$STATUS"; exit 1; }
"$FF" campaign combine "$F/campaign.yaml" 2>"$F/combine.err" >/dev/null
grep -q 'warning: run a09m250/tmin3 is failed' "$F/combine.err" || { echo "FAIL: no warning"; cat "$F/combine.err"; exit 1; }
echo "ok: failed tasks reported, the others combined with a warning"
cp "$F/good.csv" "$F/data/a09m250/twopt.csv"
ID=$(submit "$F/campaign.yaml" "$F/out" --failed)
grep -q '^#SBATCH --array=4-5$' "$F/out/slurm/demo-failed.sbatch" || { echo "FAIL: resubmission array"; exit 1; }
STATES=$(wait_job "$ID")
echo "$STATES"
if grep -qv ' COMPLETED$' <<<"$STATES"; then echo "FAIL: resubmitted tasks did not complete"; exit 1; fi
"$FF" campaign status "$F/campaign.yaml" | tail -n 1 | grep -q '^8 done$' || { echo "FAIL: not all done"; exit 1; }
"$FF" campaign combine "$F/campaign.yaml" --force >/dev/null
for t in $TABLES; do
  cmp "$WORK/local/combined/$t" "$F/out/combined/$t" || { echo "FAIL: $t differs after resubmission"; exit 1; }
done
echo "ok: resubmitting only the failed tasks completed the campaign, identical to the local run"
echo "slurm: 3 passed, 0 failed"
