#!/bin/sh
# True versus estimated mean dwell time for several window widths, on a
# simulated cohort whose latent mean dwell is known from its options
# (docs/methods.md §4): stay probability q per time point gives a
# geometric run length with mean 1/(1-q) time points, here q = 0.95 ->
# 20 time points x TR 1.5 s = 30 s. Usage: scripts/dwell_windowing.sh
# [topostate binary] [work folder]. Prints a Markdown table.
set -eu
bin=${1:-topostate}
dir=${2:-$(mktemp -d)}
q=0.95
tr=1.5
"$bin" simulate --out "$dir/cohort" --subjects 16 --regions 12 --timepoints 600 --states 3 \
    --tr $tr --stickiness $q --seed 11 > /dev/null
echo "| window (time points) | window (s) | true mean dwell (s) | complete runs | mean of complete runs (s) | cut runs | mean of all runs (s) |"
echo "|---|---|---|---|---|---|---|"
for w in 10 20 40 60; do
    db="$dir/w$w.duckdb"
    rm -f "$db"
    "$bin" ingest --input "$dir/cohort" --db "$db" --window $w --step 1 --states 3 -q > /dev/null
    "$bin" query --db "$db" --format csv --sql "
        SELECT sum(complete_dwell_seconds * n_complete_dwells) / sum(n_complete_dwells) AS complete_s,
               sum(n_complete_dwells) AS n_complete, sum(n_censored_dwells) AS n_cut,
               sum(mean_dwell_seconds * n_dwells) / sum(n_dwells) AS all_s
        FROM state_metrics" | tail -1 | awk -F, -v w=$w -v tr=$tr -v q=$q \
        '{ printf "| %d | %.1f | %.1f | %d | %.1f | %d | %.1f |\n", w, w*tr, tr/(1-q), $2, $1, $3, $4 }'
done
