#!/usr/bin/env bash
# End-to-end check of the README's Slurm job-array template: starts a
# one-node Slurm cluster on this machine (Debian's slurmctld, slurmd and
# munge, installed when missing), submits the template with a small sweep
# (2 values of α × 2 parts, 24 sites, 400 trajectories), waits for it, merges
# each α and compares the merged file byte for byte with a single run.
#
#   tests/slurm/array.sh [SPREADSCOPE_BINARY]
#
# Exit status: 0 the check passed; 1 it failed; 3 no cluster could be
# started here (the reason is printed; tests/run.sh then says the check
# was not run).
set -euo pipefail
cd "$(dirname "$0")/../.."
repo=$(pwd)
binary=$(realpath "${1:-target/debug/spreadscope}")

cannot() {
  echo "slurm check: no one-node cluster here: $*" >&2
  exit 3
}

as_root() {
  if [ "$(id -u)" -eq 0 ]; then
    "$@"
  elif command -v sudo >/dev/null 2>&1; then
    sudo "$@"
  else
    return 1
  fi
}

if ! command -v slurmctld >/dev/null 2>&1 || ! command -v sbatch >/dev/null 2>&1 || ! command -v munged >/dev/null 2>&1; then
  as_root env DEBIAN_FRONTEND=noninteractive apt-get update -qq >/dev/null 2>&1 || cannot "apt-get update failed"
  as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurmctld slurmd slurm-client munge >/dev/null 2>&1 ||
    cannot "Debian's slurmctld, slurmd, slurm-client and munge could not be installed"
fi

state=/tmp/spreadscope-slurm
host=$(hostname -s)
cpus=$(nproc)
if ! sinfo -h -o %T 2>/dev/null | grep -qE 'idle|mixed|allocated'; then
  as_root mkdir -p "$state/state" "$state/spool" /run/munge || cannot "no state directories"
  as_root chown munge:munge /run/munge 2>/dev/null || true
  [ -f /etc/munge/munge.key ] || as_root mungekey --create >/dev/null 2>&1 || cannot "no munge key"
  as_root tee /etc/slurm/slurm.conf >/dev/null <<EOF
ClusterName=spreadscope-check
SlurmctldHost=$host
AuthType=auth/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SchedulerType=sched/builtin
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SlurmUser=root
SlurmdUser=root
StateSaveLocation=$state/state
SlurmdSpoolDir=$state/spool
SlurmctldPidFile=$state/slurmctld.pid
SlurmdPidFile=$state/slurmd.pid
ReturnToService=2
MpiDefault=none
JobCompType=jobcomp/none
AccountingStorageType=accounting_storage/none
NodeName=$host CPUs=$cpus State=UNKNOWN
PartitionName=check Nodes=$host Default=YES MaxTime=INFINITE State=UP
EOF
  pgrep -x munged >/dev/null || as_root munged --force >/dev/null 2>&1 || cannot "munged did not start"
  pgrep -x slurmctld >/dev/null || as_root slurmctld >/dev/null 2>&1 || cannot "slurmctld did not start"
  pgrep -x slurmd >/dev/null || as_root slurmd >/dev/null 2>&1 || cannot "slurmd did not start"
  for _ in $(seq 30); do
    sinfo -h -o %T 2>/dev/null | grep -qE 'idle|mixed|allocated' && break
    sleep 1
  done
  sinfo -h -o %T 2>/dev/null | grep -qE 'idle|mixed|allocated' || cannot "the node did not come up"
fi

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
# The template exactly as the README shows it.
awk '/<!-- slurm-array -->/{f=1; next} /<!-- \/slurm-array -->/{f=0} f' README.md |
  sed -n '/^```sh$/,/^```$/p' | sed '1d;$d' >"$work/sweep.sbatch"
grep -q 'SBATCH --array' "$work/sweep.sbatch" || { echo "slurm check: no template in the README" >&2; exit 1; }
mkdir -p "$work/bin"
ln -s "$binary" "$work/bin/spreadscope"
cd "$work"
export PATH="$work/bin:$PATH" ALPHAS="0.8 1.2" PARTS=2 SITES=24 TRAJECTORIES=400
# The four tasks take seconds; a cluster that has not run them in five
# minutes cannot run them here (too few CPUs for the template, a stuck node).
status=0
timeout 300 sbatch --wait --array=0-3 sweep.sbatch >/dev/null || status=$?
if [ "$status" -eq 124 ]; then
  scancel --name=dtwa-sweep >/dev/null 2>&1 || true
  cannot "the job array did not finish within five minutes"
elif [ "$status" -ne 0 ]; then
  echo "slurm check: a task of the job array failed:" >&2
  cat dtwa-*.log >&2 || true
  exit 1
fi
for alpha in 0.8 1.2; do
  spreadscope merge dtwa-alpha$alpha-part*.json --out merged-$alpha.csv
  spreadscope simulate spin-chain --sites 24 --alpha "$alpha" --method dtwa \
    --trajectories 400 --times 0:10:51 --seed 1 --out single-$alpha.csv
  if ! cmp -s merged-$alpha.csv single-$alpha.csv; then
    echo "slurm check: the merged file for α = $alpha differs from a single run" >&2
    exit 1
  fi
done
echo "slurm check: a job array of 2 α × 2 parts ran on a one-node cluster; every merged file equals its single run"
cd "$repo"
