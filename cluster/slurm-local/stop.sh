#!/usr/bin/env bash
# Stop the one-node SLURM started by cluster/slurm-local/start.sh: cancel its jobs, then end
# slurmd, slurmctld and munged by the process ids start.sh recorded (nothing found by name).
# Safe to run when nothing is running; exits non-zero only if a daemon would not stop.
set -uo pipefail
dir="${ODDSMITH_SLURM_DIR:-/tmp/oddsmith-slurm}"
export SLURM_CONF="$dir/slurm.conf"
[[ -d $dir ]] || { echo "slurm-local: nothing to stop ($dir does not exist)"; exit 0; }

# Alive only if the recorded process id still runs that daemon (a reused id is left alone).
alive() { [[ -e $dir/$1.pid && $(cat "/proc/$(cat "$dir/$1.pid")/comm" 2>/dev/null) == "$1" ]]; }

# Jobs first, while the controller can still end them (slurmstepd outlives slurmd otherwise).
if alive slurmctld && alive slurmd; then
  jobs="$(squeue -h -o %i 2>/dev/null | tr '\n' ' ')"
  if [[ -n ${jobs// /} ]]; then
    # shellcheck disable=SC2086
    scancel $jobs 2>/dev/null || true
    for _ in $(seq 40); do
      [[ -z $(squeue -h -o %i 2>/dev/null) ]] && break
      sleep 0.25
    done
  fi
fi

status=0
for name in slurmd slurmctld munged; do
  alive "$name" || { rm -f "$dir/$name.pid"; continue; }
  pid="$(cat "$dir/$name.pid")"
  kill -TERM "$pid" 2>/dev/null
  for _ in $(seq 40); do kill -0 "$pid" 2>/dev/null || break; sleep 0.25; done
  if kill -0 "$pid" 2>/dev/null; then
    kill -KILL "$pid" 2>/dev/null
    sleep 0.5
  fi
  if kill -0 "$pid" 2>/dev/null; then
    echo "slurm-local: $name (pid $pid) would not stop" >&2
    status=1
  else
    echo "slurm-local: stopped $name (pid $pid)"
    rm -f "$dir/$name.pid"
  fi
done
exit $status
