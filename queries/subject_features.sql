-- name: subject_features
-- description: One row per subject (and session) with every covariate and the per-state features, for R, Stata, SPSS or pandas.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- Columns: subject_id, session_id ('' without sessions), every covariate
-- of participants.tsv, the subject's dynamics (n_windows, n_transitions,
-- switch_rate, states_visited), then per state NN (two digits, from 01):
-- dwell_seconds_sNN (mean dwell, seconds; empty when never visited),
-- n_dwells_sNN, occupancy_sNN (share of windows, 0-1) and tree_weight_sNN
-- (total maximum-spanning-tree weight of the subject's network in that
-- state, correlation scale; empty when never visited).
WITH feats AS (
    SELECT subject_id, session_id, 'occupancy_s' || printf('%02d', state) AS feature, occupancy AS value
    FROM state_metrics WHERE analysis_id = getvariable('analysis')
    UNION ALL
    SELECT subject_id, session_id, 'dwell_seconds_s' || printf('%02d', state), mean_dwell_seconds
    FROM state_metrics WHERE analysis_id = getvariable('analysis')
    UNION ALL
    SELECT subject_id, session_id, 'n_dwells_s' || printf('%02d', state), n_dwells::DOUBLE
    FROM state_metrics WHERE analysis_id = getvariable('analysis')
    UNION ALL
    SELECT m.subject_id, m.session_id, 'tree_weight_s' || printf('%02d', m.state), n.tree_weight
    FROM state_metrics m LEFT JOIN state_networks n
      ON n.analysis_id = m.analysis_id AND n.subject_id = m.subject_id
     AND n.session_id = m.session_id AND n.state = m.state
    WHERE m.analysis_id = getvariable('analysis')
),
wide AS (
    PIVOT feats ON feature USING first(value) GROUP BY subject_id, session_id
)
SELECT s.subject_id, w.session_id, s.* EXCLUDE (analysis_id, subject_id),
       d.n_windows, d.n_transitions, d.switch_rate, d.states_visited,
       w.* EXCLUDE (subject_id, session_id)
FROM subjects s
JOIN subject_dynamics d ON d.analysis_id = s.analysis_id AND d.subject_id = s.subject_id
JOIN wide w ON w.subject_id = d.subject_id AND w.session_id = d.session_id
WHERE s.analysis_id = getvariable('analysis')
ORDER BY s.subject_id, w.session_id;
