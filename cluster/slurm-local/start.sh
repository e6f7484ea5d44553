#!/usr/bin/env bash
# Start a one-node SLURM on this machine from Debian's packages (slurm-wlm, munge), as root:
#   cluster/slurm-local/start.sh            # then: export SLURM_CONF=<printed path>
# Everything it writes (configuration, keys, state, logs, process ids) lives in one folder,
# ODDSMITH_SLURM_DIR (default /tmp/oddsmith-slurm), so nothing under /etc is changed and
# cluster/slurm-local/stop.sh can stop exactly the daemons started here, by process id.
#
# The node offers every CPU of the machine and RealMemory = ODDSMITH_SLURM_MEM_PERCENT
# (default 85) percent of the memory slurmd detects, leaving the rest to the system. No
# accounting database: job states are read with squeue/scontrol (config/profiles/slurm-sbatch).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
dir="${ODDSMITH_SLURM_DIR:-/tmp/oddsmith-slurm}"
percent="${ODDSMITH_SLURM_MEM_PERCENT:-85}"
ctld_port="${ODDSMITH_SLURMCTLD_PORT:-6817}"
slurmd_port="${ODDSMITH_SLURMD_PORT:-6818}"
node=oddsmith-node

fail() { echo "slurm-local: $*" >&2; exit 1; }

[[ $(id -u) == 0 ]] || fail "must run as root (slurmd starts jobs as their user); found user $(id -un)"
for tool in munged slurmctld slurmd sbatch scontrol; do
  command -v "$tool" >/dev/null || fail "'$tool' not found; install Debian's packages: apt-get install slurm-wlm munge"
done
if [[ -e $dir/slurmctld.pid && $(cat "/proc/$(cat "$dir/slurmctld.pid")/comm" 2>/dev/null) == slurmctld ]]; then
  fail "already running from $dir (stop it first with $here/stop.sh)"
fi

# A fresh cluster each time; clear only a folder this script made (it holds slurm.conf).
if [[ -d $dir && -n $(ls -A "$dir") ]]; then
  grep -qs '^# Written by cluster/slurm-local/start.sh' "$dir/slurm.conf" \
    || fail "$dir is not empty and was not made by this script; choose another ODDSMITH_SLURM_DIR"
  rm -rf "$dir"
fi
mkdir -p -m 0700 "$dir"
mkdir -p -m 0700 "$dir/munge" "$dir/state" "$dir/spool"
dir="$(cd "$dir" && pwd)"

# Node size from slurmd's own view of the hardware, memory reduced to leave the system room.
hardware="$(slurmd -C | head -n 1)"
field() { sed -n "s/.*\b$1=\([0-9]*\).*/\1/p" <<<"$hardware"; }
detected_mb="$(field RealMemory)"
real_memory="$(( detected_mb * percent / 100 / 100 * 100 ))"
cpus="$(field CPUs)"

cat > "$dir/slurm.conf" <<CONF
# Written by cluster/slurm-local/start.sh: one node, this machine, no accounting.
ClusterName=oddsmith-local
SlurmctldHost=localhost
SlurmctldPort=$ctld_port
SlurmdPort=$slurmd_port
SlurmUser=root
AuthType=auth/munge
AuthInfo=socket=$dir/munge/munge.socket
CredType=cred/munge
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.daemon.pid
SlurmdPidFile=$dir/slurmd.daemon.pid
SlurmctldLogFile=$dir/slurmctld.log
SlurmdLogFile=$dir/slurmd.log
PlugStackConfig=$dir/plugstack.conf
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
JobCompType=jobcomp/none
# Finished jobs stay visible to scontrol for an hour; the sbatch profile also keeps each
# job's exit code in a file for the time after that.
MinJobAge=3600
ReturnToService=2
SchedulerType=sched/backfill
NodeName=$node NodeHostname=$(hostname -s) NodeAddr=127.0.0.1 CPUs=$cpus Sockets=$(field SocketsPerBoard) CoresPerSocket=$(field CoresPerSocket) ThreadsPerCore=$(field ThreadsPerCore) RealMemory=$real_memory State=UNKNOWN
PartitionName=local Nodes=$node Default=YES MaxTime=INFINITE State=UP
CONF
: > "$dir/plugstack.conf"

# A fresh MUNGE key for this cluster only, read by its own munged on its own socket.
dd if=/dev/urandom of="$dir/munge/munge.key" bs=1024 count=1 status=none
chmod 0400 "$dir/munge/munge.key"

# Each daemon runs in the foreground (-F/-D) in its own session; $! is its process id.
start_daemon() {
  local name=$1; shift
  SLURM_CONF="$dir/slurm.conf" setsid "$@" > "$dir/$name.out" 2>&1 < /dev/null &
  echo $! > "$dir/$name.pid"
}
start_daemon munged munged -F --force --key-file="$dir/munge/munge.key" \
  --socket="$dir/munge/munge.socket" --pid-file="$dir/munge/munged.pid" \
  --log-file="$dir/munge/munged.log" --seed-file="$dir/munge/munged.seed"
for _ in $(seq 50); do [[ -S $dir/munge/munge.socket ]] && break; sleep 0.1; done
[[ -S $dir/munge/munge.socket ]] || { "$here/stop.sh" >&2 || true; fail "munged did not start; see $dir/munged.out"; }
start_daemon slurmctld slurmctld -D -f "$dir/slurm.conf"
start_daemon slurmd slurmd -D -f "$dir/slurm.conf" -N "$node"

export SLURM_CONF="$dir/slurm.conf"
state=""
for _ in $(seq 60); do
  state="$(sinfo -h -n "$node" -o %T 2>/dev/null || true)"
  [[ $state == idle ]] && break
  sleep 0.5
done
if [[ $state != idle ]]; then
  echo "slurm-local: node $node is '${state:-unreachable}' after 30 s; last log lines:" >&2
  tail -n 5 "$dir/slurmctld.log" "$dir/slurmd.log" >&2 || true
  "$here/stop.sh" >&2 || true
  exit 1
fi
echo "slurm-local: node $node up with $cpus CPUs and RealMemory=$real_memory MB (of $detected_mb MB detected)"
echo "slurm-local: state, logs and process ids in $dir; stop with $here/stop.sh"
echo "export SLURM_CONF=$dir/slurm.conf"
