#!/usr/bin/env bash
# Submit one Snakemake job to SLURM with sbatch and print its SLURM job id. Called by the
# cluster-generic executor as
#   submit.sh RULE THREADS MEM_MB RUNTIME JOBSCRIPT
# threads -> --cpus-per-task, mem_mb -> --mem (MB), runtime (minutes) -> --time. Site
# options (partition, account, qos) go in ODDSMITH_SBATCH_EXTRA, e.g. "--partition=short".
# Records: .snakemake/slurm/<id>.job (the request), <id>.log (the job's output),
# <id>.exit (written by job.sh when the job ends).
set -euo pipefail
rule=$1 threads=$2 mem_mb=$3 runtime=$4 jobscript=$5
here="$(dirname "$0")"
records=.snakemake/slurm
# shellcheck source=lib.sh
source "$here/lib.sh"
mkdir -p "$records"

problem="$(never_fits "slurm-sbatch: rule $rule" "$threads" "$mem_mb")"
[[ -z $problem ]] || { echo "$problem" >&2; exit 1; }

extra=()
[[ -n ${ODDSMITH_SBATCH_EXTRA:-} ]] && read -ra extra <<<"$ODDSMITH_SBATCH_EXTRA"
id="$(sbatch --parsable --job-name="oddsmith-$rule" --cpus-per-task="$threads" --mem="$mem_mb" \
  --time="$runtime" --output="$records/%j.log" "${extra[@]}" "$here/job.sh" "$records" "$jobscript")"
id="${id%%;*}"  # a multi-cluster site answers "id;cluster"
printf 'rule=%s threads=%s mem_mb=%s runtime=%s jobscript=%s\n' \
  "$rule" "$threads" "$mem_mb" "$runtime" "$jobscript" > "$records/$id.job"
echo "$id"
