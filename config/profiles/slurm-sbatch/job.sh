#!/usr/bin/env bash
# The batch script of every job submitted by submit.sh:
#   job.sh RECORDS JOBSCRIPT
# runs Snakemake's job script, then keeps its exit code (and which job script it was) in
# RECORDS/<SLURM job id>.exit, so status.sh still knows the outcome after SLURM has
# forgotten the job (MinJobAge) or was restarted.
records=$1 jobscript=$2
bash "$jobscript"
code=$?
printf 'jobscript=%s exit=%s\n' "$jobscript" "$code" > "$records/$SLURM_JOB_ID.exit.tmp" \
  && mv "$records/$SLURM_JOB_ID.exit.tmp" "$records/$SLURM_JOB_ID.exit"
exit "$code"
