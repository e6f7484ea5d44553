#!/usr/bin/env bash
# Cancel SLURM jobs submitted by submit.sh (Snakemake passes one or more job ids).
exec scancel "$@"
