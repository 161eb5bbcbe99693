-- name: adjusted_group_contrast
-- description: Group contrast of occupancy, mean dwell time, switch rate and Betti-0 curve area per state, adjusted for the subjects columns in adjust by least squares, with Student t and Freedman-Lane permutation p-values; BH across all rows of the result (one family).
-- param: analysis analysis = latest -- analysis id or name; latest is the newest
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: adjust columns = '' -- comma-separated subjects columns to adjust for, e.g. age,sex,site; numeric columns enter as they are, other columns as indicators; empty: no covariates (betti0_area is always adjusted for the state's run share and occupancy too)
-- param: n_perm integer = 9999 -- permutations per Freedman-Lane test
-- param: seed integer = 1 -- permutation seed; row k uses seed + 100 * measure number + state
-- One row per measure and state: occupancy (share of windows, 0-1) and
-- dwell_seconds (mean dwell time, s) per state, switch_rate (switches per
-- window step; state NULL: one per subject), betti0_area (area under the
-- subject's Betti-0 curve of the state over the threshold grid, trapezoid
-- rule). Subjects are the unit: a subject's sessions are averaged first.
-- Model per row: measure = b0 + b1 [group_a] + covariates + e, fitted by
-- least squares (lm_test); estimate is b1, the adjusted difference group_a
-- minus group_b, with se, t and df; p is the Student t p-value, perm_p the
-- Freedman-Lane permutation p-value (docs/methods.md §8). A text covariate
-- is coded as indicators, its first level in sorted order the reference; a
-- site stored as numbers enters as a number (store it as text to get
-- indicators). Subjects with a missing covariate are left out
-- (n_incomplete counts them); dwell_seconds and betti0_area leave out
-- subjects who never visited the state. A row with fewer than 2 subjects
-- in a group or fewer subjects than model columns + 2 has NULL results.
-- p_bh and perm_p_bh adjust across every row of the result (all measures
-- and states). betti0_area is also adjusted for the subject's run share
-- (1 / mean dwell in windows: the share of the state's windows that start
-- a run) and occupancy of the state: windows that straddle a switch blur a
-- state network, the more so the shorter the dwells, so without this a
-- dwell difference alone would show as a topology difference.
WITH grp AS (
    SELECT subject_id, side
    FROM subject_groups(getvariable('analysis'), getvariable('group_column'),
                        getvariable('group_a'), getvariable('group_b'))
),
adj AS (
    SELECT a.name, a.k,
           upper(ic.data_type) IN ('TINYINT', 'SMALLINT', 'INTEGER', 'BIGINT', 'HUGEINT', 'UTINYINT', 'USMALLINT',
                                   'UINTEGER', 'UBIGINT', 'FLOAT', 'DOUBLE', 'REAL')
               OR upper(ic.data_type) LIKE 'DECIMAL%' AS is_numeric
    FROM (SELECT unnest(l) AS name, generate_subscripts(l, 1) AS k
          FROM (SELECT list_filter(string_split(getvariable('adjust'), ','), s -> s <> '') AS l)) a
    JOIN information_schema.columns ic
      ON ic.table_schema = 'main' AND ic.table_name = 'subjects' AND ic.column_name = a.name
    WHERE CASE WHEN a.name = getvariable('group_column')
               THEN error('adjusted_group_contrast: adjust lists the group column ' || a.name || ', which is the tested term; leave it out')
               ELSE true END
),
cov_long AS (
    SELECT subject_id, covariate AS name, value
    FROM (
        UNPIVOT (SELECT analysis_id, subject_id,
                        COLUMNS(* EXCLUDE (analysis_id, subject_id))::VARCHAR
                 FROM subjects)
        ON COLUMNS(* EXCLUDE (analysis_id, subject_id))
        INTO NAME covariate VALUE value
    )
    WHERE analysis_id = getvariable('analysis')
),
all_design AS (
    SELECT g.subject_id, g.side,
           coalesce(list(CASE WHEN a.is_numeric THEN c.value::DOUBLE END ORDER BY a.k)
                    FILTER (WHERE a.is_numeric AND c.value IS NOT NULL), []) AS num,
           coalesce(list(c.value ORDER BY a.k) FILTER (WHERE NOT a.is_numeric AND c.value IS NOT NULL), []) AS fac,
           count(c.value) AS n_given,
           coalesce(list(a.name ORDER BY a.k) FILTER (WHERE a.is_numeric), []) AS num_names,
           coalesce(list(a.name ORDER BY a.k) FILTER (WHERE NOT a.is_numeric), []) AS fac_names
    FROM grp g
    LEFT JOIN adj a ON true
    LEFT JOIN cov_long c ON c.subject_id = g.subject_id AND c.name = a.name
    GROUP BY g.subject_id, g.side
),
design AS (
    SELECT * FROM all_design WHERE n_given = (SELECT count(*) FROM adj)
),
metrics AS (
    SELECT subject_id, state, avg(occupancy) AS occupancy, avg(mean_dwell_seconds) AS dwell_seconds,
           avg(1.0 / mean_dwell_windows) AS run_share
    FROM state_metrics
    WHERE analysis_id = getvariable('analysis')
    GROUP BY ALL
),
b0 AS (
    SELECT subject_id, state, threshold, avg(betti) AS betti
    FROM betti_curves
    WHERE analysis_id = getvariable('analysis') AND dimension = 0
    GROUP BY ALL
),
b0_area AS (
    SELECT subject_id, state, sum(segment) AS area
    FROM (SELECT subject_id, state,
                 (threshold - lag(threshold) OVER w) * (betti + lag(betti) OVER w) / 2 AS segment
          FROM b0
          WINDOW w AS (PARTITION BY subject_id, state ORDER BY threshold))
    GROUP BY ALL
),
long AS (
    -- extra: nuisance columns of this measure only, beside the user's
    SELECT subject_id, 1 AS mi, 'occupancy' AS measure, state, occupancy AS y,
           []::DOUBLE[] AS extra, []::VARCHAR[] AS extra_names
    FROM metrics
    UNION ALL
    SELECT subject_id, 2, 'dwell_seconds', state, dwell_seconds, [], []
    FROM metrics WHERE dwell_seconds IS NOT NULL
    UNION ALL
    SELECT subject_id, 3, 'switch_rate', NULL, avg(switch_rate), [], []
    FROM subject_dynamics WHERE analysis_id = getvariable('analysis') GROUP BY subject_id
    UNION ALL
    -- the Betti-0 area is adjusted for the subject's run share and
    -- occupancy of the state as well (docs/methods.md §8)
    SELECT b.subject_id, 4, 'betti0_area', b.state, b.area,
           [m.run_share, m.occupancy], ['run_share', 'occupancy']
    FROM b0_area b JOIN metrics m USING (subject_id, state)
    WHERE m.dwell_seconds IS NOT NULL
),
samples AS (
    SELECT l.mi, l.measure, l.state, count(*) AS n,
           count(*) FILTER (WHERE d.side = 'a') AS n_a,
           count(*) FILTER (WHERE d.side = 'b') AS n_b,
           list(l.y ORDER BY d.subject_id) AS y,
           list(CASE WHEN d.side = 'a' THEN 1.0 ELSE 0.0 END ORDER BY d.subject_id) AS x,
           list(list_concat(d.num, l.extra) ORDER BY d.subject_id) AS num,
           list(d.fac ORDER BY d.subject_id) AS fac,
           list(d.subject_id ORDER BY d.subject_id) AS ids,
           any_value(list_concat(list_concat(d.num_names, l.extra_names), d.fac_names)) AS names
    FROM long l JOIN design d USING (subject_id)
    GROUP BY l.mi, l.measure, l.state
),
sized AS (
    -- model columns: intercept, group, numeric covariates, and one
    -- indicator per level but the first of each text covariate
    SELECT *, 2 + len(num[1]) + coalesce(list_sum(list_transform(range(1, len(fac[1]) + 1),
                   j -> len(list_distinct(list_transform(fac, f -> f[j]))) - 1)), 0) AS n_columns
    FROM samples
),
tests AS (
    SELECT *,
           CASE WHEN n_a >= 2 AND n_b >= 2 AND n >= n_columns + 2
                THEN lm_test(y, x, num, fac, names, ids, getvariable('n_perm')::INTEGER,
                             getvariable('seed') + 100 * mi + coalesce(state, 0)) END AS r
    FROM sized
)
SELECT measure, state,
       getvariable('group_a') AS group_a, n_a, getvariable('group_b') AS group_b, n_b,
       getvariable('adjust') AS adjusted_for,
       (SELECT count(*) FROM all_design) - (SELECT count(*) FROM design) AS n_incomplete,
       r.estimate AS estimate, r.se AS se, r.t AS t, r.df AS df,
       r.p AS p, bh_adjust(r.p, list(r.p) OVER ()) AS p_bh,
       r.perm_p AS perm_p, bh_adjust(r.perm_p, list(r.perm_p) OVER ()) AS perm_p_bh
FROM tests
ORDER BY mi, state;
