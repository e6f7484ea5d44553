#!/usr/bin/env bash
# Print the state of a job started by submit.sh: running, success or failed.
set -euo pipefail
exit_file=".snakemake/process-per-job/$1.exit"
if [[ ! -e $exit_file ]]; then
  echo running
elif [[ $(cat "$exit_file") == 0 ]]; then
  echo success
else
  echo failed
fi
