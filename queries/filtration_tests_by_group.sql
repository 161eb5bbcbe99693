-- name: filtration_tests_by_group
-- description: Per state and dimension, a permutation test between the two groups' core Betti curves (the group test of topology, not confounded by dwell time); with pooled_events = 1 also, as a description only, the KS distance between the groups' pooled filtration events (slow on a large warehouse, so left out by default).
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: n_perm integer = 999 -- relabellings per curve permutation test (the smallest p it can give is 1/(1 + n_perm))
-- param: seed integer = 1 -- permutation seed; state s, dimension d use seed + 2s + d
-- param: pooled_events integer = 0 -- 1: also compute the descriptive n_events_a, n_events_b and pooled_events_ks_distance (a sort of every filtration event of the two groups); 0: leave them NULL
-- One row per state and dimension (0: components, beta0; 1: cycles, beta1)
-- that a subject of either group has a state network of.
-- The test: curve_perm_p relabels whole subjects and compares the groups'
-- core Betti curves (core_betti_curves): each subject's state network is
-- the correlation over the same number N of core time points, those covered
-- only by windows of the state, so windows straddling a switch do not blur
-- it and subjects who switch more often do not get different networks for
-- that reason alone (docs/methods.md §7). Subjects with fewer than N core
-- time points in a state are left out of that state's test:
-- n_subjects_a and n_subjects_b count those tested. curve_distance is the
-- largest gap between the two group mean core curves (the permutation
-- statistic); n_perm is the number of relabellings it was compared with
-- (p = (1 + #{T* >= T}) / (1 + n_perm)); curve_perm_p_bh is BH-adjusted
-- across all rows. A subject's sessions are averaged. Descriptive only, and
-- computed only with pooled_events = 1: pooled_events_ks_distance is the
-- two-sample KS distance between the filtration events (of the state
-- networks averaged over all windows) of all subjects of a group pooled;
-- the events of one subject are not independent, so no p-value is given.
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
cells AS (
    SELECT DISTINCT n.state, d.dimension
    FROM state_networks n JOIN grp g USING (subject_id)
    CROSS JOIN (VALUES (0), (1)) d(dimension)
    WHERE n.analysis_id = getvariable('analysis')
),
events AS (
    SELECT state, dimension, len(a) AS n_events_a, len(b) AS n_events_b,
           ks_test(a, b).statistic AS pooled_events_ks_distance
    FROM (
        SELECT e.state, e.dimension,
               list(e.value) FILTER (WHERE g.side = 'a') AS a,
               list(e.value) FILTER (WHERE g.side = 'b') AS b
        FROM filtration_events e JOIN grp g USING (subject_id)
        WHERE e.analysis_id = getvariable('analysis')
          AND CASE getvariable('pooled_events')
                  WHEN 0 THEN false WHEN 1 THEN true
                  ELSE error('filtration_tests_by_group: pooled_events is 0 or 1, not ' || getvariable('pooled_events')) END
        GROUP BY e.state, e.dimension
    )
),
session_curves AS (
    -- one list per session, state and dimension: grouping the curve points
    -- by session (thousands of groups) instead of by threshold (hundreds of
    -- thousands) is what keeps this query fast on a large warehouse
    SELECT c.subject_id, g.side, c.state, c.dimension, list(c.betti ORDER BY c.threshold) AS curve
    FROM core_betti_curves c JOIN grp g USING (subject_id)
    WHERE c.analysis_id = getvariable('analysis')
    GROUP BY c.subject_id, c.session_id, g.side, c.state, c.dimension
),
subject_curves AS MATERIALIZED (
    -- a subject's curve: its sessions' curves averaged threshold by
    -- threshold (every curve of an analysis has the same thresholds);
    -- computed once for curves and mean_curves
    SELECT subject_id, side, state, dimension,
           CASE WHEN len(cs) = 1 THEN cs[1]::DOUBLE[] -- one session: the curve itself
                ELSE list_transform(range(1, len(cs[1]) + 1), i -> list_avg(list_transform(cs, c -> c[i]))) END AS curve
    FROM (SELECT subject_id, side, state, dimension, list(curve) AS cs
          FROM session_curves
          GROUP BY ALL)
),
curves AS (
    SELECT state, dimension,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'a') AS a,
           list(curve ORDER BY subject_id) FILTER (WHERE side = 'b') AS b
    FROM subject_curves
    GROUP BY state, dimension
),
mean_curves AS (
    SELECT state, dimension,
           list(m ORDER BY i) FILTER (WHERE side = 'a') AS a,
           list(m ORDER BY i) FILTER (WHERE side = 'b') AS b
    FROM (
        SELECT side, state, dimension, i, avg(v) AS m
        FROM (SELECT side, state, dimension, unnest(curve) AS v, generate_subscripts(curve, 1) AS i
              FROM subject_curves)
        GROUP BY ALL
    )
    GROUP BY state, dimension
),
tests AS (
    SELECT x.state, x.dimension,
           coalesce(len(c.a), 0) AS n_subjects_a, coalesce(len(c.b), 0) AS n_subjects_b,
           e.n_events_a, e.n_events_b, e.pooled_events_ks_distance,
           curve_distance(mc.a, mc.b) AS curve_distance,
           curve_perm_test(c.a, c.b, getvariable('n_perm')::INTEGER,
                           getvariable('seed') + 2 * x.state + x.dimension) AS cp
    FROM cells x
    LEFT JOIN events e USING (state, dimension)
    LEFT JOIN curves c USING (state, dimension)
    LEFT JOIN mean_curves mc USING (state, dimension)
)
SELECT state, dimension, n_subjects_a, n_subjects_b,
       curve_distance, cp.pvalue AS curve_perm_p,
       bh_adjust(cp.pvalue, list(cp.pvalue) OVER ()) AS curve_perm_p_bh,
       CASE WHEN cp IS NOT NULL THEN getvariable('n_perm') END AS n_perm,
       n_events_a, n_events_b, pooled_events_ks_distance
FROM tests
ORDER BY state, dimension;
