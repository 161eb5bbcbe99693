#!/bin/bash
# Submit a sharded topostate ingest to Slurm: five jobs chained with
# --dependency=afterok, the two per-shard stages as array jobs.
#
#   plan ──> sample[1..N] ──> fit ──> compute[1..N] ──> [surrogates[1..N]] ──> merge
#
# With --surrogates M in INGEST_OPTS the surrogate-data test's M + 1 runs
# (docs/methods.md §10) are split over the N array tasks of the surrogates
# stage; each run is a whole-cohort fit on at most 2,000 windows (8 CPU
# seconds measured for 100 series x 1,000 time points x 100 regions: README
# "Do the states exist?"), and a task holds the analysed series of the whole
# cohort in memory (T x p x 8 bytes per series) plus one series' windows
# per worker.
#
# afterok on an array job waits for every task of it, and a failed job
# leaves the jobs after it pending with reason DependencyNeverSatisfied.
# Cancel them with scancel, fix the cause, and submit again from the stage
# that failed with START=sample|fit|compute|surrogates|merge: the finished stages need
# not run again (a shard run again overwrites its own files).
#
# Usage:
#   INPUT=/data/cohort WORK=/scratch/$USER/tsw DB=/data/warehouse.duckdb \
#   ANALYSIS=discovery SHARDS=40 INGEST_OPTS="--seed 7" \
#   scripts/slurm/submit.sh
#
# With STATES_FROM=NAME STATES_DB=FILE the fit stage reuses the states of
# an earlier analysis and the sample stage is skipped.
#
# Resource requests. Measured with `/usr/bin/time -f %M` (peak resident
# memory) on a generated cohort of 48 series x 100 regions x 960 time
# points (window 50) in 3 shards of 16 series, 2 workers per stage, on a
# 2-core machine that other jobs kept at a 1-minute load average of 37-40
# (2 December 2026): the wall times below are those of a crowded machine,
# the CPU times (user) what the stage itself needed. A series of T time
# points and p regions has W = T - window + 1 windows of D = p(p-1)/2
# values; one series' windows, W x D x 4 bytes (18 MB here), are held per
# busy worker. Scale the numbers for your own T, p and cohort size.
#
#  plan     reads and checksums every file once (validation of the whole
#           cohort: constant regions, one region list, duplicates) with all
#           its cores: 63 MB, 0.6 s CPU for 48 series (about 12 ms of one
#           core per series here: minutes for thousands).
#  sample   200-215 MB per shard, nearly independent of its size (rows go
#           to Parquet every 16 MB of values): about 170 MB plus one
#           series' windows per worker. 1.0-1.1 s CPU per 16 series.
#  fit      the one large job: the fitting pool, at most
#           min(--fit-windows, --fit-memory / (4 D)) rows of D float32
#           values (a uniform reservoir sample of the shards' windows, so
#           it never holds more): 8,805 rows here (174 MB), 467 MB at the
#           peak with k-means' work arrays. At the defaults the pool is at
#           most 1 GiB whatever p (20,000 windows up to p = 164, fewer
#           beyond: 13,489 at p = 200), so 4G covers any p. k-means uses
#           every core it gets: 30 s CPU for the elbow scan k = 2..10
#           of an earlier default here (the default choice of k now
#           also computes prediction strength: README, Number of states).
#  compute  135-150 MB per shard with 2 workers, independent of its size
#           (rows go to Parquet every million rows). 1.3-1.4 s CPU per 16
#           series.
#  merge    one DuckDB transaction over every shard's files, one core:
#           347 MB, 0.9 s CPU for 48 series (712,800 filtration events).
#           DuckDB's memory is capped at 1 GiB while it writes (beyond it
#           the transaction spills to <warehouse>.tmp beside the file), so
#           4G covers cohorts of any size.
#
# Times below are generous ceilings; --time must only be long enough, but a
# shorter limit gets a job scheduled sooner on most clusters. Each stage's
# requests can be replaced whole through PLAN_RES, SAMPLE_RES, FIT_RES,
# COMPUTE_RES, SURROGATES_RES and MERGE_RES (try-local.sh does, for a
# 2-core node).
: "${PLAN_RES:=--cpus-per-task=4 --mem=1G --time=01:00:00}"
: "${SAMPLE_RES:=--cpus-per-task=2 --mem=1G --time=00:30:00}"
: "${FIT_RES:=--cpus-per-task=8 --mem=4G --time=02:00:00}"
: "${COMPUTE_RES:=--cpus-per-task=2 --mem=1G --time=00:30:00}"
: "${SURROGATES_RES:=--cpus-per-task=2 --mem=4G --time=02:00:00}"
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

# submit NAME STAGE ARRAY RESOURCES: one job after the previous one.
after=
submit() {
	local name=$1 stage=$2 array=$3 res=$4 out dep=() arr=() id
	out="$LOGS/$stage-%j.out"
	if [[ -n $array ]]; then
		arr=(--array="$array")
		out="$LOGS/$stage-%A_%a.out"
	fi
	[[ -n $after ]] && dep=(--dependency=afterok:"$after")
	# shellcheck disable=SC2086 # res is a list of options
	id=$(sbatch --parsable "${extra[@]}" --job-name="$name" --output="$out" "${dep[@]}" "${arr[@]}" $res "$job" "$stage")
	after=$id
	echo "  $stage: job $id${array:+ (array $array)}"
}
stages=(plan sample fit compute surrogates merge)
start=${START:-plan}
[[ " ${stages[*]} " == *" $start "* ]] || { echo "submit.sh: START=$start: want one of ${stages[*]}" >&2; exit 2; }
echo "submitted:"
go=
for s in "${stages[@]}"; do
	[[ $s == "$start" ]] && go=1
	[[ -n $go ]] || continue
	case $s in
	plan) submit ts-plan plan "" "$PLAN_RES" ;;
	sample) [[ -n $STATES_FROM ]] || submit ts-sample sample "1-$SHARDS" "$SAMPLE_RES" ;;
	fit) submit ts-fit fit "" "$FIT_RES" ;;
	compute) submit ts-compute compute "1-$SHARDS" "$COMPUTE_RES" ;;
	surrogates)
		if [[ " $INGEST_OPTS " =~ \ --surrogates[=\ ]+[1-9] ]]; then
			submit ts-surrogates surrogates "1-$SHARDS" "$SURROGATES_RES"
		fi
		;;
	merge) submit ts-merge merge "" "$MERGE_RES" ;;
	esac
done
merge=$after
echo "watch with: squeue -u ${USER:-$(id -un)}; logs in $LOGS; the warehouse appears at $DB when job $merge has finished"
