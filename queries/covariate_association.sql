-- name: covariate_association
-- description: Pearson correlation of a numeric covariate with occupancy and complete-run dwell time per state, BH-adjusted across states; dwell time leaves out subjects without a complete run of the state.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- param: covariate numeric_column -- numeric subjects column, e.g. a symptom score
-- One row per state and measure (occupancy, 0-1; dwell_seconds). Subjects
-- with a covariate value are used; a subject's sessions are averaged first.
-- dwell_seconds is the mean length of complete runs (not cut by the scan's
-- start or end, docs/methods.md §4; all runs for an analysis written before
-- layout 4): it leaves out subjects who never visited the state (no dwell
-- time is defined) and those whose runs were all cut by the scan's edges;
-- n counts the subjects used. slope is
-- the least-squares change of the measure per unit of the covariate. BH
-- adjustment is across the states of one measure.
WITH cov AS (
    SELECT subject_id, value::DOUBLE AS x
    FROM subject_covariate(getvariable('analysis'), getvariable('covariate'))
),
per_subject AS (
    SELECT m.subject_id, c.x, m.state,
           avg(m.occupancy) AS occupancy,
           coalesce(avg(m.complete_dwell_seconds),
                    CASE WHEN bool_and(m.n_complete_dwells IS NULL) THEN avg(m.mean_dwell_seconds) END) AS dwell_seconds
    FROM state_metrics m JOIN cov c USING (subject_id)
    WHERE m.analysis_id = getvariable('analysis')
    GROUP BY ALL
),
long AS (
    SELECT subject_id, state, x, 'occupancy' AS measure, occupancy AS y FROM per_subject
    UNION ALL
    SELECT subject_id, state, x, 'dwell_seconds', dwell_seconds FROM per_subject
    WHERE dwell_seconds IS NOT NULL
),
tests AS (
    SELECT state, measure, count(*) AS n,
           list(x ORDER BY subject_id) AS xs, list(y ORDER BY subject_id) AS ys,
           regr_slope(y, x) AS slope
    FROM long
    GROUP BY state, measure
),
results AS (
    SELECT state, measure, n, slope,
           CASE WHEN n >= 3 AND list_stddev_samp(xs) > 0 AND list_stddev_samp(ys) > 0
                THEN pearson_test(xs, ys) END AS pt
    FROM tests
)
SELECT state, measure, getvariable('covariate') AS covariate, n,
       pt.r AS r, slope, pt.t AS t, pt.df AS df, pt.pvalue AS p,
       bh_adjust(pt.pvalue, list(pt.pvalue) OVER (PARTITION BY measure)) AS p_bh
FROM results
ORDER BY measure DESC, state;
