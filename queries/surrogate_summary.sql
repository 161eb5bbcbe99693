-- name: surrogate_summary
-- description: Do the states exist? The surrogate-data test of the state model against stationary phase-randomised surrogates, in plain words.
-- param: analysis analysis = latest -- analysis id or name; latest is the newest
-- One row per statistic of surrogate_tests (docs/methods.md §10), filled by
-- 'ingest --surrogates N' or 'topostate surrogates'; no rows when the
-- analysis has no surrogate test. p is the one-sided Monte-Carlo p-value
-- (1 + #{surrogate >= observed}) / (1 + N) of the hypothesis that the
-- series are stationary (linear Gaussian with their own spectra and static
-- correlations): a small p says the observed statistic lies above what
-- such series give. Each row is a separate question; p is not adjusted
-- for multiplicity. null_z is (observed - null_mean) / null_sd, a
-- descriptive effect size. state is the frequency rank of a state in the
-- test's own fit (mean_dwell per state), empty for the whole model.
SELECT statistic,
       state,
       observed,
       null_mean,
       null_sd,
       CASE WHEN null_sd > 0 THEN (observed - null_mean) / null_sd END AS null_z,
       n_surrogates,
       p,
       CASE statistic
           WHEN 'cluster_quality' THEN 'states more distinct (windows cluster more tightly)'
           WHEN 'window_variability' THEN 'window correlations vary more over time'
           WHEN 'betti_distance' THEN 'state networks differ more in topology (Betti curves)'
           WHEN 'mean_dwell' THEN CASE WHEN state IS NULL THEN 'states last longer'
                                       ELSE 'state ' || state || ' (by frequency) lasts longer' END
           ELSE statistic
       END || ' than in ' || n_surrogates || ' stationary surrogates: p = '
           || CASE WHEN p >= 0.01 THEN printf('%.2f', p) ELSE printf('%.3f', p) END AS in_words
FROM surrogate_tests
WHERE analysis_id = getvariable('analysis')
ORDER BY CASE statistic WHEN 'cluster_quality' THEN 1 WHEN 'window_variability' THEN 2
                        WHEN 'betti_distance' THEN 3 ELSE 4 END,
         state NULLS FIRST;
