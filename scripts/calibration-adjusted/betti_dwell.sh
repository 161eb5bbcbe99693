#!/usr/bin/env bash
# Why betti0_area in adjusted_group_contrast has no p-value: on simulated
# cohorts whose groups differ only in dwell time (null (b), identical state
# networks), this runs the bundled query with the Betti rows' p-values put
# back (the CASE that hides them removed from the --show text) and counts
# Student t p <= 0.05 among them.
# Usage: betti_dwell.sh TOPOSTATE_BINARY OUT_DIR REPLICATES [GROUP_EFFECT]
set -euo pipefail
bin=$1 out=$2 reps=$3 effect=${4:-0.02}
mkdir -p "$out"
"$bin" query --show adjusted_group_contrast |
    sed "s/CASE WHEN measure <> 'betti0_area' THEN r.p END AS p,/r.p AS p,/" > "$out/with_betti_p.sql"
grep -q "r.p AS p," "$out/with_betti_p.sql" || { echo "betti_dwell.sh: could not put the p-values back" >&2; exit 1; }
n=0 k=0
for r in $(seq 1 "$reps"); do
    dir="$out/rep$r"
    rm -rf "$dir"
    "$bin" simulate --out "$dir/cohort" --subjects 24 --regions 12 --timepoints 300 --states 3 \
        --group-effect "$effect" --seed "$((5000 + r))" > /dev/null
    "$bin" ingest --input "$dir/cohort" --db "$dir/w.duckdb" --window 20 --states 3 --grid=-0.5:1:31 \
        --seed "$r" -q > /dev/null
    for p in $("$bin" query --db "$dir/w.duckdb" --file "$out/with_betti_p.sql" --param group_a=B --param group_b=A \
            --param adjust=age --param n_perm=9 -f tsv | awk -F'\t' 'NR == 1 { for (i = 1; i <= NF; i++) c[$i] = i; next }
            $c["measure"] == "betti0_area" && $c["p"] != "" { print $c["p"] }'); do
        n=$((n + 1))
        if awk -v p="$p" 'BEGIN { exit !(p <= 0.05) }'; then k=$((k + 1)); fi
    done
    rm -rf "$dir"
done
echo "betti0_area, groups differing only in dwell (group effect $effect): $k of $n tests p <= 0.05"
