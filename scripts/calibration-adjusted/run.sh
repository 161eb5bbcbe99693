#!/usr/bin/env bash
# Rejection rates of adjusted_group_contrast (docs/methods.md §8) on
# simulated null cohorts, run end to end: simulate, add covariates, ingest,
# query. Usage: run.sh TOPOSTATE_BINARY OUT_DIR REPLICATES [GROUP_EFFECT [FIRST]]
#   GROUP_EFFECT 0 (default): null (a), nothing differs between the groups.
#   GROUP_EFFECT > 0: null (b), the groups differ only in dwell time; the
#   state networks are identical, so only dwell-related rows may reject.
#   FIRST (default 1): number of the first replicate (seeds follow it), to
#   extend an earlier run.
# Covariates added to participants.tsv: sex (random F/M), site (site1..3,
# group A drawn mostly from site1: a covariate tied to the group), and the
# simulator's age. Output: OUT_DIR/rows.tsv (every result row, with the
# replicate) and a summary per measure on standard output.
set -euo pipefail
bin=$1 out=$2 reps=$3 effect=${4:-0} first=${5:-1}
mkdir -p "$out"
rows="$out/rows.tsv"
: > "$rows"
for r in $(seq "$first" "$((first + reps - 1))"); do
    dir="$out/rep$r"
    rm -rf "$dir"
    "$bin" simulate --out "$dir/cohort" --subjects 24 --regions 12 --timepoints 300 --states 3 \
        --group-effect "$effect" --seed "$((1000 + r))" > /dev/null
    awk -v seed="$r" 'BEGIN { FS = OFS = "\t"; srand(seed) }
        NR == 1 { print $0, "sex", "site"; next }
        { sex = (rand() < 0.5) ? "F" : "M"
          u = rand()
          if ($2 == "A") site = (u < 0.7) ? "site1" : ((u < 0.85) ? "site2" : "site3")
          else site = (u < 0.2) ? "site1" : ((u < 0.6) ? "site2" : "site3")
          print $0, sex, site }' "$dir/cohort/participants.tsv" > "$dir/p.tsv"
    mv "$dir/p.tsv" "$dir/cohort/participants.tsv"
    "$bin" ingest --input "$dir/cohort" --db "$dir/w.duckdb" --window 20 --states 3 --grid=-0.5:1:31 \
        --seed "$r" -q > /dev/null
    "$bin" query --db "$dir/w.duckdb" adjusted_group_contrast --param group_a=B --param group_b=A \
        --param adjust=age,sex,site --param n_perm=999 --param seed="$r" -f tsv |
        awk -v r="$r" -v first="$first" 'NR > 1 || r == first { print (NR == 1 ? "replicate" : r) "\t" $0 }' >> "$rows"
    rm -rf "$dir"
done
# Summary: rejections at alpha 0.05 per measure (state rows pooled).
awk -F"\t" 'NR == 1 { for (i = 1; i <= NF; i++) col[$i] = i; next }
    { m = $(col["measure"]); n[m]++
      if ($(col["p"]) != "" && $(col["p"]) <= 0.05) p[m]++
      if ($(col["perm_p"]) != "" && $(col["perm_p"]) <= 0.05) q[m]++ }
    END { for (m in n) printf "%s: p %d/%d, perm_p %d/%d\n", m, p[m], n[m], q[m], n[m] }' "$rows"
