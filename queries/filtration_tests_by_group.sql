-- name: filtration_tests_by_group
-- description: Per state and dimension, exact KS test between the two groups' pooled filtration events and a permutation test between their Betti curves.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: n_perm integer = 9999 -- relabellings per curve permutation test
-- param: seed integer = 1 -- permutation seed; state s, dimension d use seed + 2s + d
-- One row per state and dimension (0: spanning-tree events, beta0; 1: other
-- edges, beta1). ks_*: the events of all subjects of a group pooled into
-- one sample (exact p when affordable, see ks_method). Events of one
-- subject are not independent of each other, so read the KS p-value as a
-- description of the pooled distributions; the curve permutation test,
-- which relabels whole subjects, is the group test. curve_distance is the
-- largest gap between the two group mean Betti curves (the permutation
-- statistic). A subject's sessions are averaged (curves) or pooled
-- (events). BH adjustment is across all rows, separately per test.
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
events AS (
    SELECT e.state, e.dimension,
           list(e.value) FILTER (WHERE g.side = 'a') AS a,
           list(e.value) FILTER (WHERE g.side = 'b') AS b
    FROM filtration_events e JOIN grp g USING (subject_id)
    WHERE e.analysis_id = getvariable('analysis')
    GROUP BY e.state, e.dimension
),
per_threshold AS (
    SELECT c.subject_id, g.side, c.state, c.dimension, c.threshold, avg(c.betti) AS betti
    FROM betti_curves c JOIN grp g USING (subject_id)
    WHERE c.analysis_id = getvariable('analysis')
    GROUP BY ALL
),
curves AS (
    SELECT state, dimension,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'a') AS a,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'b') AS b
    FROM (
        SELECT subject_id, side, state, dimension, list(betti ORDER BY threshold) AS curve
        FROM per_threshold
        GROUP BY ALL
    )
    GROUP BY state, dimension
),
mean_curves AS (
    SELECT state, dimension,
           list(m ORDER BY threshold) FILTER (WHERE side = 'a') AS a,
           list(m ORDER BY threshold) FILTER (WHERE side = 'b') AS b
    FROM (
        SELECT side, state, dimension, threshold, avg(betti) AS m
        FROM per_threshold
        GROUP BY ALL
    )
    GROUP BY state, dimension
),
tests AS (
    SELECT e.state, e.dimension,
           len(c.a) AS n_subjects_a, len(c.b) AS n_subjects_b,
           len(e.a) AS n_events_a, len(e.b) AS n_events_b,
           ks_test(e.a, e.b) AS ks,
           curve_distance(mc.a, mc.b) AS curve_distance,
           curve_perm_test(c.a, c.b, getvariable('n_perm')::INTEGER,
                           getvariable('seed') + 2 * e.state + e.dimension) AS cp
    FROM events e
    JOIN curves c USING (state, dimension)
    JOIN mean_curves mc USING (state, dimension)
)
SELECT state, dimension, n_subjects_a, n_subjects_b, n_events_a, n_events_b,
       ks.statistic AS ks_statistic, ks.pvalue AS ks_p, ks.method AS ks_method,
       bh_adjust(ks.pvalue, list(ks.pvalue) OVER ()) AS ks_p_bh,
       curve_distance, cp.pvalue AS curve_perm_p,
       bh_adjust(cp.pvalue, list(cp.pvalue) OVER ()) AS curve_perm_p_bh
FROM tests
ORDER BY state, dimension;
