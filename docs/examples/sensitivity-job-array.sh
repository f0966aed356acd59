#!/usr/bin/env bash
# Spread `latens sensitivity` over a cluster with a batch scheduler's job
# array, then merge. Written for Slurm; the same pattern works with any
# scheduler that gives each array task an index (PBS: $PBS_ARRAY_INDEX,
# SGE: $SGE_TASK_ID, LSF: $LSB_JOBINDEX).
#
#   sbatch --array=1-16 docs/examples/sensitivity-job-array.sh
#   # when all tasks have finished:
#   latens sensitivity merge shards --out sensitivity
#
#SBATCH --job-name=latens-sensitivity
#SBATCH --cpus-per-task=2
#SBATCH --time=00:30:00
set -euo pipefail
N=${SLURM_ARRAY_TASK_COUNT:-16}
K=${SLURM_ARRAY_TASK_ID:?run as an array job}
# Every task must use the same inputs, grid, trials and seed: each fits
# every body, runs every N-th hypothesis of the threshold's null
# simulations (the costly part) and draws every N-th distance's trials; the
# merge gives the same numbers an unsharded run gives. A population: give
# --obs a directory of observation files (or planned schedules with
# --orbit DIR).
latens sensitivity \
  --obs observations.csv --sites sites.csv \
  --grid 40:40 --trials 64 --seed 1 \
  --shard "${K}/${N}" --out shards
