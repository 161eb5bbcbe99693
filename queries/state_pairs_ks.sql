-- name: state_pairs_ks
-- description: Exact KS test between every pair of states on the filtration events of the group-level state centroid networks.
-- param: analysis analysis -- analysis id, name or latest (the newest); may be left out when the warehouse holds one analysis
-- One row per pair of states (state_a < state_b) and dimension (0: the p-1
-- maximum-spanning-tree weights, beta0; 1: the other edges, beta1) of the
-- k-means centroids (state_centroids), so both samples have the same size.
-- When the analysis clustered Fisher z values the centroids are in z; the
-- KS test depends only on the order of the values, so the result is the
-- same as on the correlation scale. BH adjustment is across the pairs of one
-- dimension.
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
tests AS (
    SELECT x.state AS state_a, y.state AS state_b, x.dimension,
           len(x.ev) AS n_events, ks_test(x.ev, y.ev) AS ks
    FROM events x JOIN events y ON x.dimension = y.dimension AND x.state < y.state
)
SELECT state_a, state_b, dimension, n_events,
       ks.statistic AS ks_statistic, ks.pvalue AS ks_p, ks.method AS ks_method,
       bh_adjust(ks.pvalue, list(ks.pvalue) OVER (PARTITION BY dimension)) AS ks_p_bh
FROM tests
ORDER BY dimension, state_a, state_b;
