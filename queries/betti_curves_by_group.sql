-- name: betti_curves_by_group
-- description: Group mean Betti curves per state and dimension, one row per threshold, ready for plotting.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- One row per group, state, dimension (0: components, 1: cycles) and
-- threshold (correlation scale). A subject's sessions are averaged first;
-- a subject has curves only for the states it visited, and n_subjects
-- counts them.
WITH grp AS (
    SELECT subject_id, side, group_value
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
per_subject AS (
    SELECT c.subject_id, g.side, g.group_value, c.state, c.dimension, c.threshold,
           avg(c.betti) AS betti
    FROM betti_curves c JOIN grp g USING (subject_id)
    WHERE c.analysis_id = getvariable('analysis')
    GROUP BY ALL
)
SELECT group_value AS "group", state, dimension, threshold,
       avg(betti) AS mean_betti,
       stddev_samp(betti) AS sd_betti,
       count(*) AS n_subjects
FROM per_subject
GROUP BY side, group_value, state, dimension, threshold
ORDER BY side, state, dimension, threshold;
