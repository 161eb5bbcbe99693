-- name: transitions_by_group
-- description: Transition matrix of each group: mean over subjects of the row-normalised transition probabilities.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- One row per group, from_state and to_state. A subject's sessions are
-- averaged first; a subject enters a row of the matrix only when it left
-- from_state at least once (otherwise its probabilities are NULL), so every
-- row of a group's matrix sums to 1. n_subjects counts those subjects.
WITH grp AS (
    SELECT subject_id, side, group_value
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
per_subject AS (
    SELECT t.subject_id, g.side, g.group_value, t.from_state, t.to_state,
           avg(t.probability) AS probability
    FROM transitions t JOIN grp g USING (subject_id)
    WHERE t.analysis_id = getvariable('analysis') AND t.probability IS NOT NULL
    GROUP BY ALL
)
SELECT group_value AS "group", from_state, to_state,
       avg(probability) AS mean_probability,
       stddev_samp(probability) AS sd_probability,
       count(*) AS n_subjects
FROM per_subject
GROUP BY side, group_value, from_state, to_state
ORDER BY side, from_state, to_state;
