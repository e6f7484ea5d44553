#!/usr/bin/env bash
# Submit one Snakemake job as a separate, detached local process and print its job id,
# the way sbatch would. Called by the cluster-generic executor as
#   submit.sh RULE THREADS MEM_MB JOBSCRIPT
# Job records live in .snakemake/process-per-job/<id>.{job,pid,log,exit} of the project.
set -euo pipefail
rule=$1 threads=$2 mem_mb=$3 jobscript=$4
queue=.snakemake/process-per-job
mkdir -p "$queue"
id="$(date +%s%N)-$$"
printf 'rule=%s threads=%s mem_mb=%s\n' "$rule" "$threads" "$mem_mb" > "$queue/$id.job"
# The job writes its exit code last, through a rename, so status.sh never reads half a file.
setsid bash -c 'bash "$1" > "$2.log" 2>&1; echo $? > "$2.exit.tmp"; mv "$2.exit.tmp" "$2.exit"' \
  job "$jobscript" "$queue/$id" < /dev/null > /dev/null 2>&1 &
echo $! > "$queue/$id.pid"
echo "$id"
