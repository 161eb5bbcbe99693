-- name: state_dwell_by_group
-- description: Fractional occupancy and mean dwell time of complete runs per state in two groups, with Welch and permutation tests and BH-adjusted p across states. Occupancy includes every subject (0 for a state never visited); dwell time leaves out subjects without a complete run of the state (never visited, or visited only in runs cut by the scan's start or end), counted in n_without_visit_* and n_censored_only_*.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: n_perm integer = 9999 -- relabellings per permutation test
-- param: seed integer = 1 -- permutation seed; state s uses seed + s
-- One row per state and measure (occupancy: share of windows, 0-1;
-- dwell_seconds: mean length of the complete runs, seconds). Subjects are
-- the unit: a subject's sessions are averaged first. Subjects without a
-- visit to the state (n_without_visit_a/_b) enter occupancy with 0, a valid
-- value, but have no dwell time (a mean of no runs is undefined), so they
-- are left out of dwell_seconds; so are subjects whose every run of the
-- state touches the first or last window (n_censored_only_a/_b): such a
-- run is cut by the scan and its length is only a lower bound
-- (docs/methods.md §4). Leaving them out selects subjects, which the two
-- counts let a reader judge. dwell_runs says which runs the dwell time
-- averages: 'complete', or 'all' for an analysis written before layout 4
-- (no complete-run columns; re-ingest for the complete-run dwell).
-- difference = mean_a - mean_b. BH adjustment is across the states of one
-- measure.
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
layout AS (
    -- 'complete' when every row of the analysis has the complete-run columns.
    SELECT CASE WHEN count(*) FILTER (WHERE n_complete_dwells IS NULL) = 0
                THEN 'complete' ELSE 'all' END AS dwell_runs
    FROM state_metrics WHERE analysis_id = getvariable('analysis')
),
per_subject AS (
    SELECT m.subject_id, g.side, m.state,
           avg(m.occupancy) AS occupancy,
           max(m.occupancy) > 0 AS visited,
           CASE WHEN (SELECT dwell_runs FROM layout) = 'complete'
                THEN avg(m.complete_dwell_seconds)
                ELSE avg(m.mean_dwell_seconds) END AS dwell_seconds
    FROM state_metrics m JOIN grp g USING (subject_id)
    WHERE m.analysis_id = getvariable('analysis')
    GROUP BY ALL
),
counts AS (
    SELECT state,
           count(*) FILTER (WHERE side = 'a' AND NOT visited) AS n_without_visit_a,
           count(*) FILTER (WHERE side = 'b' AND NOT visited) AS n_without_visit_b,
           count(*) FILTER (WHERE side = 'a' AND visited AND dwell_seconds IS NULL) AS n_censored_only_a,
           count(*) FILTER (WHERE side = 'b' AND visited AND dwell_seconds IS NULL) AS n_censored_only_b
    FROM per_subject
    GROUP BY state
),
long AS (
    SELECT subject_id, side, state, 'occupancy' AS measure, occupancy AS value FROM per_subject
    UNION ALL
    SELECT subject_id, side, state, 'dwell_seconds', dwell_seconds FROM per_subject
    WHERE dwell_seconds IS NOT NULL
),
measures AS (
    SELECT DISTINCT state, m.measure
    FROM per_subject, (VALUES ('occupancy'), ('dwell_seconds')) m(measure)
),
samples AS (
    -- Every state and measure gets a row, even when no subject has a
    -- complete run (then n_a = n_b = 0 and no test).
    SELECT ms.state, ms.measure,
           coalesce(list(value ORDER BY subject_id) FILTER (WHERE side = 'a'), []) AS a,
           coalesce(list(value ORDER BY subject_id) FILTER (WHERE side = 'b'), []) AS b
    FROM measures ms LEFT JOIN long l USING (state, measure)
    GROUP BY ms.state, ms.measure
),
tests AS (
    SELECT state, measure, a, b,
           CASE WHEN len(a) >= 2 AND len(b) >= 2
                 AND (list_stddev_samp(a) > 0 OR list_stddev_samp(b) > 0)
                THEN welch_t_test(a, b) END AS welch,
           CASE WHEN len(a) >= 2 AND len(b) >= 2
                 AND (list_stddev_samp(a) > 0 OR list_stddev_samp(b) > 0)
                THEN perm_test_mean(a, b, getvariable('n_perm')::INTEGER, getvariable('seed') + state) END AS perm
    FROM samples
)
SELECT state, measure,
       getvariable('group_a') AS group_a, len(a) AS n_a, list_avg(a) AS mean_a, list_stddev_samp(a) AS sd_a,
       getvariable('group_b') AS group_b, len(b) AS n_b, list_avg(b) AS mean_b, list_stddev_samp(b) AS sd_b,
       list_avg(a) - list_avg(b) AS difference,
       c.n_without_visit_a, c.n_without_visit_b, c.n_censored_only_a, c.n_censored_only_b,
       CASE WHEN measure = 'dwell_seconds' THEN (SELECT dwell_runs FROM layout) END AS dwell_runs,
       welch.t AS welch_t, welch.df AS welch_df, welch.pvalue AS welch_p,
       bh_adjust(welch.pvalue, list(welch.pvalue) OVER (PARTITION BY measure)) AS welch_p_bh,
       perm.pvalue AS perm_p,
       bh_adjust(perm.pvalue, list(perm.pvalue) OVER (PARTITION BY measure)) AS perm_p_bh
FROM tests JOIN counts c USING (state)
ORDER BY measure DESC, state;
