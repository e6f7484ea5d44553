#!/usr/bin/env bash
# Print the state of a SLURM job for the cluster-generic executor: running, success or failed.
#   status.sh JOBID
# Reads scontrol (no accounting database needed); when SLURM no longer knows the job, reads
# the exit code job.sh left in .snakemake/slurm/<id>.exit. A job pending on a request no node
# can hold is cancelled and reported failed with the reason, instead of waiting forever.
set -uo pipefail
id=$1
records=.snakemake/slurm
# shellcheck source=lib.sh
source "$(dirname "$0")/lib.sh"

say() { echo "slurm-sbatch: $*" >&2; [[ -e $records/$id.log ]] && echo "slurm-sbatch: $*" >> "$records/$id.log"; }
field() { grep -o "\b$1=[^ ]*" <<<"$info" | head -n 1 | cut -d= -f2-; }
record() { grep -o "\b$1=[^ ]*" "$2" 2>/dev/null | head -n 1 | cut -d= -f2-; }

info=""
for attempt in 1 2 3; do
  if info="$(scontrol show job -o "$id" 2>&1)"; then break; fi
  if [[ $info == *"Invalid job id"* ]]; then info=""; break; fi
  if (( attempt == 3 )); then say "cannot read job $id from SLURM: $info"; exit 1; fi
  sleep 2  # controller busy or restarting
done

if [[ -z $info ]]; then
  # Forgotten by SLURM: trust the exit record only if it belongs to this submission.
  submitted="$(record jobscript "$records/$id.job")"
  if [[ -n $submitted && $(record jobscript "$records/$id.exit") == "$submitted" ]]; then
    [[ $(record exit "$records/$id.exit") == 0 ]] && echo success || echo failed
  else
    say "job $id is no longer known to SLURM and left no exit record ($records/$id.exit)"
    echo failed
  fi
  exit 0
fi

state="$(field JobState)"
case $state in
  COMPLETED) echo success ;;
  PENDING)
    reason="$(field Reason)"
    problem="$(never_fits "job $id ($(field JobName))" "$(field NumCPUs)" "$(to_mb "$(field MinMemoryNode)")")"
    case $reason in
      PartitionConfig | BadConstraints | PartitionNodeLimit | PartitionTimeLimit)
        problem="${problem:-job $id ($(field JobName)) cannot start in partition $(field Partition): SLURM gives the reason '$reason'}" ;;
    esac
    if [[ -n $problem ]]; then
      scancel "$id" 2>/dev/null
      say "$problem (job cancelled)"
      echo failed
    else
      echo running
    fi
    ;;
  RUNNING | CONFIGURING | COMPLETING | SUSPENDED | REQUEUED | REQUEUE_* | RESIZING | SIGNALING | STAGE_OUT | RESV_DEL_HOLD)
    echo running ;;
  *)
    say "job $id ($(field JobName)) ended $state, exit code $(field ExitCode); its output: $records/$id.log"
    echo failed ;;
esac
