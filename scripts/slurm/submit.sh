#!/bin/bash
# Submit a sharded topostate ingest to Slurm: five jobs chained with
# --dependency=afterok, the two per-shard stages as array jobs.
#
#   plan ──> sample[1..N] ──> fit ──> compute[1..N] ──> merge
#
# afterok on an array job waits for every task of it, and a failed job
# leaves the jobs after it pending with reason DependencyNeverSatisfied
# (cancel them with scancel, fix, and resubmit from the failed stage: the
# stages before it need not run again; a re-run shard overwrites its files).
#
# Usage:
#   INPUT=/data/cohort WORK=/scratch/$USER/tsw DB=/data/warehouse.duckdb \
#   ANALYSIS=discovery SHARDS=40 INGEST_OPTS="--window 30 --seed 7" \
#   scripts/slurm/submit.sh
#
# With STATES_FROM=NAME STATES_DB=FILE the fit stage reuses the states of
# an earlier analysis and the sample stage is skipped.
#
# Resource requests. Measured with `/usr/bin/time -f %M` on a generated
# cohort of 48 series x 116 regions x 1200 time points (--states 4, default
# --fit-windows 20000), shards of 8 to 48 series, 2 workers each, on a
# 2-core machine (README, "Large cohorts"). A series of T time points and p
# regions has W = T - window + 1 windows of D = p(p-1)/2 values; one
# series' windows, W x D x 4 bytes (31 MB here), are held per busy worker.
# Scale the numbers below for your own T, p and cohort size.
#
#  plan     reads and checksums every file once (validation of the whole
#           cohort: constant regions, one region list, duplicates), with
#           all its cores. 56 MB peak, 0.9 s for 48 series; about 20 ms of
#           one core per series here, so a few minutes for thousands.
#  sample   peak 350-430 MB whatever the shard size (rows go to Parquet
#           every 16 MB of values): about 300 MB plus one series' windows
#           per worker. 0.14 s of one core per series.
#  fit      the one big job: the pooled exemplars (at most about
#           2 x --fit-windows rows x D x 4 bytes before the cap: 1.07 GB for
#           p = 116) plus k-means' work arrays; 1.9 GB peak for 18,700 rows
#           here. k-means uses every core it gets. 41 s for a fixed k with
#           5 restarts on 2 cores; the elbow scan over k = 2..10 costs about
#           ten times that.
#  compute  240 MB peak with 2 workers, independent of the shard size
#           (rows go to Parquet every million rows): one series' windows and
#           results per worker. 0.1 s of one core per series.
#  merge    one DuckDB transaction over every shard's files: 414 MB peak,
#           1.4 s for 48 series (1.3 million filtration events); grows with
#           the warehouse (about 3 s per 100 series here), one core.
#
# Times below are generous ceilings; --time must only be long enough, but a
# shorter limit gets a job scheduled sooner on most clusters. Each stage's
# requests can be replaced whole through PLAN_RES, SAMPLE_RES, FIT_RES,
# COMPUTE_RES and MERGE_RES (try-local.sh does, for a 2-core node).
: "${PLAN_RES:=--cpus-per-task=4 --mem=1G --time=01:00:00}"
: "${SAMPLE_RES:=--cpus-per-task=2 --mem=1G --time=00:30:00}"
: "${FIT_RES:=--cpus-per-task=8 --mem=8G --time=04:00:00}"
: "${COMPUTE_RES:=--cpus-per-task=2 --mem=1G --time=00:30:00}"
: "${MERGE_RES:=--cpus-per-task=1 --mem=4G --time=02:00:00}"
set -euo pipefail
: "${INPUT:?set INPUT to the cohort folder}" "${WORK:?set WORK to a new work folder on a shared file system}"
: "${DB:?set DB to the warehouse file}" "${SHARDS:=8}" "${ANALYSIS:=}"
export INPUT WORK DB SHARDS ANALYSIS INGEST_OPTS="${INGEST_OPTS:-}" TOPOSTATE="${TOPOSTATE:-topostate}"
export STATES_FROM="${STATES_FROM:-}" STATES_DB="${STATES_DB:-}"
# Job logs go beside the work folder (plan wants the work folder new).
: "${LOGS:=${WORK%/}.logs}"
mkdir -p "$LOGS"
here=$(cd "$(dirname "$0")" && pwd)
job="$here/stage.sbatch"
# Extra sbatch options for every job (account, partition, qos), e.g.
# SBATCH_EXTRA="--account=lab --partition=short".
# shellcheck disable=SC2206
extra=(${SBATCH_EXTRA:-})

# shellcheck disable=SC2086 # the *_RES variables are lists of options
plan=$(sbatch --parsable "${extra[@]}" --job-name=ts-plan --output="$LOGS/plan-%j.out" $PLAN_RES "$job" plan)
after=$plan
if [[ -z $STATES_FROM ]]; then
	# shellcheck disable=SC2086
	sample=$(sbatch --parsable "${extra[@]}" --job-name=ts-sample --output="$LOGS/sample-%A_%a.out" --dependency=afterok:"$plan" \
		--array=1-"$SHARDS" $SAMPLE_RES "$job" sample)
	after=$sample
fi
# shellcheck disable=SC2086
fit=$(sbatch --parsable "${extra[@]}" --job-name=ts-fit --output="$LOGS/fit-%j.out" --dependency=afterok:"$after" $FIT_RES "$job" fit)
# shellcheck disable=SC2086
compute=$(sbatch --parsable "${extra[@]}" --job-name=ts-compute --output="$LOGS/compute-%A_%a.out" --dependency=afterok:"$fit" \
	--array=1-"$SHARDS" $COMPUTE_RES "$job" compute)
# shellcheck disable=SC2086
merge=$(sbatch --parsable "${extra[@]}" --job-name=ts-merge --output="$LOGS/merge-%j.out" --dependency=afterok:"$compute" $MERGE_RES "$job" merge)
echo "submitted: plan $plan, ${sample:+sample $sample (array 1-$SHARDS), }fit $fit, compute $compute (array 1-$SHARDS), merge $merge"
echo "watch with: squeue -u ${USER:-$(id -un)}; logs in $LOGS; the warehouse appears at $DB when job $merge has finished"
