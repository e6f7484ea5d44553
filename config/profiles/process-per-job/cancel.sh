#!/usr/bin/env bash
# Stop jobs started by submit.sh: each job id names one process group (setsid).
for id in "$@"; do
  pid_file=".snakemake/process-per-job/$id.pid"
  [[ -e $pid_file ]] && kill -TERM -- "-$(cat "$pid_file")" 2>/dev/null || true
done
