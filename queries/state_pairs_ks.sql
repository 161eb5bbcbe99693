-- name: state_pairs_ks
-- description: Descriptive: KS distance D between the filtration events of every pair of state centroid networks. No p-value: the states are clusters of the very windows compared, so a test here is circular; whether the states exist is the surrogate test (README, on whether the states exist).
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- One row per pair of states (state_a < state_b) and dimension (0: the p-1
-- maximum-spanning-tree weights, beta0; 1: the other edges, beta1) of the
-- k-means centroids (state_centroids), so both samples have the same size.
-- ks_distance is the two-sample Kolmogorov-Smirnov statistic D = max |F_a -
-- F_b| of the two event sets (docs/methods.md §6), a distance in [0, 1]
-- between the states' edge-weight distributions; betti_distance is the
-- sup-norm distance between the two centroid networks' Betti curves,
-- max over thresholds |beta_a - beta_b|, which for events e is the largest
-- difference of the counts #{e <= t} (beta0 steps at the tree weights, beta1
-- at the other edges). Both describe how different the fitted states are;
-- neither is a test (docs/methods.md §6 says why), so no p-value and no
-- adjustment is given. When the analysis clustered Fisher z values the
-- centroids are in z; D and the count differences depend only on the order
-- of the values, so they are the same as on the correlation scale.
WITH nets AS (
    SELECT state, list(weight ORDER BY i, j) AS upper
    FROM state_centroids
    WHERE analysis_id = getvariable('analysis')
    GROUP BY state
),
events AS (
    SELECT state, d.dimension, graph_filtration_events(upper, d.dimension) AS ev
    FROM nets, (VALUES (0), (1)) d(dimension)
),
pairs AS (
    SELECT x.state AS state_a, y.state AS state_b, x.dimension,
           len(x.ev) AS n_events, ks_test(x.ev, y.ev).statistic AS ks_distance,
           x.ev AS ev_a, y.ev AS ev_b
    FROM events x JOIN events y ON x.dimension = y.dimension AND x.state < y.state
)
SELECT state_a, state_b, dimension, n_events, ks_distance,
       -- Both event lists have n_events values, so the count gap is
       -- n_events * D at the threshold where the gap is largest.
       round(ks_distance * n_events)::BIGINT AS betti_distance
FROM pairs
ORDER BY dimension, state_a, state_b;
