-- name: adjusted_group_contrast
-- description: Group contrast of occupancy and mean dwell time per state and of switch rate, adjusted for the subjects columns in adjust by least squares, with Student t and Freedman-Lane permutation p-values, BH across those rows (one family); the Betti-0 curve area per state as a description (no p-value).
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: group_column column = group -- subjects column that holds the group
-- param: group_a text -- value of group_column for the first group
-- param: group_b text -- value of group_column for the second group
-- param: adjust columns = '' -- comma-separated subjects columns to adjust for, e.g. age,sex,site; numeric columns enter as they are, other columns as indicators; empty: no covariates
-- param: n_perm integer = 9999 -- permutations per Freedman-Lane test
-- param: seed integer = 1 -- permutation seed; row k uses seed + 100 * measure number + state
-- One row per measure and state: occupancy (share of windows, 0-1) and
-- dwell_seconds (mean dwell time, s, over all of the subject's runs of the
-- state, runs cut by the scan's start or end included, where
-- state_dwell_by_group uses complete runs only) per state, switch_rate (switches per
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
-- subjects who never visited the state. A row whose subjects cannot
-- support the model (fewer than 2 in a group, fewer than model columns + 2,
-- or a rank-deficient design among them, e.g. a site level held only by
-- one group's visitors of a state) has NULL results and the reason in
-- note; when no row can be tested the query stops with the reason.
-- p_bh and perm_p_bh adjust across every row of the result (all measures
-- and states) but betti0_area. betti0_area is descriptive (estimate, se, t;
-- p-values NULL, note says why): windows that straddle a switch blur a
-- state network, the more so the shorter the dwells, so groups that differ
-- only in dwell time differ in it too (measured: 31 of 300 tests p < 0.05
-- on such simulated cohorts, README "Adjusting for covariates").
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
    SELECT subject_id, state, avg(occupancy) AS occupancy, avg(mean_dwell_seconds) AS dwell_seconds
    FROM state_metrics
    WHERE analysis_id = getvariable('analysis')
    GROUP BY ALL
),
thresholds AS (
    -- the analysis's threshold grid with each point's trapezoid weight,
    -- half the distance between its neighbours (half the one gap at an end)
    SELECT threshold,
           (coalesce(lead(threshold) OVER w, threshold) - coalesce(lag(threshold) OVER w, threshold)) / 2 AS weight
    FROM (SELECT DISTINCT threshold FROM betti_curves
          WHERE analysis_id = getvariable('analysis') AND dimension = 0)
    WINDOW w AS (ORDER BY threshold)
),
b0_area AS (
    -- the area under each session's Betti-0 curve by the trapezoid rule,
    -- sum over thresholds of weight * betti (every curve of an analysis
    -- has every threshold of the grid), averaged over the subject's
    -- sessions: the area under the averaged curve. A sum per session, not
    -- a group per threshold, keeps this fast on a large warehouse.
    SELECT subject_id, state, avg(area) AS area
    FROM (SELECT c.subject_id, c.state, sum(c.betti * t.weight) AS area
          FROM betti_curves c JOIN thresholds t USING (threshold)
          WHERE c.analysis_id = getvariable('analysis') AND c.dimension = 0
          GROUP BY c.subject_id, c.session_id, c.state)
    GROUP BY ALL
),
long AS (
    SELECT subject_id, 1 AS mi, 'occupancy' AS measure, state, occupancy AS y FROM metrics
    UNION ALL
    SELECT subject_id, 2, 'dwell_seconds', state, dwell_seconds FROM metrics WHERE dwell_seconds IS NOT NULL
    UNION ALL
    SELECT subject_id, 3, 'switch_rate', NULL, avg(switch_rate)
    FROM subject_dynamics WHERE analysis_id = getvariable('analysis') GROUP BY subject_id
    UNION ALL
    SELECT subject_id, 4, 'betti0_area', state, area FROM b0_area
),
samples AS (
    SELECT l.mi, l.measure, l.state, count(*) AS n,
           count(*) FILTER (WHERE d.side = 'a') AS n_a,
           count(*) FILTER (WHERE d.side = 'b') AS n_b,
           list(l.y ORDER BY d.subject_id) AS y,
           list(CASE WHEN d.side = 'a' THEN 1.0 ELSE 0.0 END ORDER BY d.subject_id) AS x,
           list(d.num ORDER BY d.subject_id) AS num,
           list(d.fac ORDER BY d.subject_id) AS fac,
           list(d.subject_id ORDER BY d.subject_id) AS ids,
           any_value(list_concat(d.num_names, d.fac_names)) AS names
    FROM long l JOIN design d USING (subject_id)
    GROUP BY l.mi, l.measure, l.state
),
checked AS MATERIALIZED (
    -- a test the subjects of its row cannot support is left out, with the
    -- reason in note (lm_design_problem says what lm_test would refuse)
    SELECT *,
           CASE WHEN n_a < 2 OR n_b < 2 THEN 'fewer than 2 subjects in a group'
                ELSE lm_design_problem(x, num, fac, names) END AS problem
    FROM samples
),
tests AS (
    SELECT *,
           CASE WHEN problem IS NULL
                THEN lm_test(y, x, num, fac, names, ids,
                             CASE WHEN measure = 'betti0_area' THEN 1 ELSE getvariable('n_perm') END::INTEGER,
                             getvariable('seed') + 100 * mi + coalesce(state, 0)) END AS r
    FROM checked
    -- when no row can be tested, stop with the reason rather than print
    -- an empty table
    WHERE CASE WHEN (SELECT count(*) FILTER (WHERE problem IS NULL) FROM checked) = 0
               THEN error('adjusted_group_contrast: no test can be run: ' ||
                          coalesce((SELECT min(problem) FROM checked), 'no subject of either group has the measures'))
               ELSE true END
),
shown AS (
    -- betti0_area is descriptive: no p-value, not in the BH family
    SELECT *,
           CASE WHEN measure <> 'betti0_area' THEN r.p END AS p,
           CASE WHEN measure <> 'betti0_area' THEN r.perm_p END AS perm_p,
           CASE WHEN problem IS NOT NULL THEN problem
                WHEN measure = 'betti0_area'
                THEN 'descriptive: differs with dwell time alone (windows straddling switches); no p-value' END AS note
    FROM tests
)
SELECT measure, state,
       getvariable('group_a') AS group_a, n_a, getvariable('group_b') AS group_b, n_b,
       getvariable('adjust') AS adjusted_for,
       (SELECT count(*) FROM all_design) - (SELECT count(*) FROM design) AS n_incomplete,
       r.estimate AS estimate, r.se AS se, r.t AS t, r.df AS df,
       p, bh_adjust(p, list(p) OVER ()) AS p_bh,
       perm_p, bh_adjust(perm_p, list(perm_p) OVER ()) AS perm_p_bh,
       note
FROM shown
ORDER BY mi, state;
