-- name: state_dwell_by_group
-- description: Fractional occupancy and mean dwell time per state in two groups, with Welch and permutation tests and BH-adjusted p across states.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: n_perm integer = 9999 -- relabellings per permutation test
-- param: seed integer = 1 -- permutation seed; state s uses seed + s
-- One row per state and measure (occupancy: share of windows, 0-1;
-- dwell_seconds: mean dwell time in seconds). Subjects are the unit: a
-- subject's sessions are averaged first; dwell time leaves out subjects who
-- never visited the state. difference = mean_a - mean_b. BH adjustment is
-- across the states of one measure.
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
per_subject AS (
    SELECT m.subject_id, g.side, m.state,
           avg(m.occupancy) AS occupancy,
           avg(m.mean_dwell_seconds) AS dwell_seconds
    FROM state_metrics m JOIN grp g USING (subject_id)
    WHERE m.analysis_id = getvariable('analysis')
    GROUP BY ALL
),
long AS (
    SELECT subject_id, side, state, 'occupancy' AS measure, occupancy AS value FROM per_subject
    UNION ALL
    SELECT subject_id, side, state, 'dwell_seconds', dwell_seconds FROM per_subject
    WHERE dwell_seconds IS NOT NULL
),
samples AS (
    SELECT state, measure,
           coalesce(list(value ORDER BY subject_id) FILTER (WHERE side = 'a'), []) AS a,
           coalesce(list(value ORDER BY subject_id) FILTER (WHERE side = 'b'), []) AS b
    FROM long
    GROUP BY state, measure
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
       welch.t AS welch_t, welch.df AS welch_df, welch.pvalue AS welch_p,
       bh_adjust(welch.pvalue, list(welch.pvalue) OVER (PARTITION BY measure)) AS welch_p_bh,
       perm.pvalue AS perm_p,
       bh_adjust(perm.pvalue, list(perm.pvalue) OVER (PARTITION BY measure)) AS perm_p_bh
FROM tests
ORDER BY measure DESC, state;
