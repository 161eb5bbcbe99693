-- topostate SQL macros, created as TEMP macros on every connection topostate
-- opens (topostate query, topostate export). They are plain DuckDB SQL: to use
-- them in another DuckDB client (duckdb CLI, R, Python), print them with
-- `topostate query --macros` and run the output in your session (drop the
-- word TEMP to store them in a database of your own).

-- bh_adjust(p, family), by_adjust(p, family): the Benjamini-Hochberg (1995)
-- and Benjamini-Yekutieli (2001) adjusted p-value of p within its family of
-- tests, a list holding every p-value of the family (p's own included).
-- With the m non-NULL values of the family sorted, s_1 <= ... <= s_m,
--   q(p) = min over j with s_j >= p of c m s_j / j, capped at 1,
-- c = 1 (BH) or sum_{i<=m} 1/i (BY; valid under any dependence): the
-- step-up form q_(i) = min_{j>=i} c (m/j) p_(j), in which tied p-values get
-- one q (that of their highest rank). NULL p gives NULL; NULLs in the family
-- are not counted in m. Used as a window expression:
--   bh_adjust(pvalue, list(pvalue) OVER (PARTITION BY family_columns))
-- Each row sorts the whole family, so a family of m tests costs
-- O(m^2 log m) in all: fine for hundreds or a few thousand; for larger
-- families adjust the family once with the topostate function
-- adjust_pvalues over a list aggregate (O(m log m); see --list).
CREATE OR REPLACE TEMP MACRO bh_adjust(p, family) AS (
    CASE
        WHEN p IS NULL THEN NULL
        WHEN p < 0 OR p > 1 OR isnan(p) THEN error('bh_adjust: p-value ' || p || ' is not in [0, 1]')
        ELSE least(1.0, len(list_filter(family, x -> x IS NOT NULL))::DOUBLE
                        * list_min(list_transform(list_sort(list_filter(family, x -> x IS NOT NULL)),
                                                  (x, j) -> CASE WHEN x >= p THEN x / j END)))
    END
);

CREATE OR REPLACE TEMP MACRO by_adjust(p, family) AS (
    CASE
        WHEN p IS NULL THEN NULL
        WHEN p < 0 OR p > 1 OR isnan(p) THEN error('by_adjust: p-value ' || p || ' is not in [0, 1]')
        ELSE least(1.0, list_sum(list_transform(
                 range(1, len(list_filter(family, y -> y IS NOT NULL)) + 1), i -> 1.0 / i))
             * bh_adjust(p, family))
    END
);

-- subject_covariate(analysis, column_name): one row per subject of the
-- analysis with a non-NULL value in the subjects column called column_name:
-- (subject_id, value), the value as VARCHAR. The column is chosen by its name
-- as data (UNPIVOT), so a column name given by a user is never pasted into
-- SQL text.
CREATE OR REPLACE TEMP MACRO subject_covariate(aid, column_name) AS TABLE
    SELECT subject_id, value
    FROM (
        UNPIVOT (SELECT analysis_id, subject_id,
                        COLUMNS(* EXCLUDE (analysis_id, subject_id))::VARCHAR
                 FROM subjects)
        ON COLUMNS(* EXCLUDE (analysis_id, subject_id))
        INTO NAME covariate VALUE value
    )
    WHERE analysis_id = aid AND covariate = column_name;

-- subject_groups(analysis, column_name, group_a, group_b): the subjects whose
-- column_name value (compared as text) is group_a or group_b:
-- (subject_id, side, group_value) with side 'a' or 'b'. A group value that
-- no subject of the analysis has is an error listing the values present in
-- the column (and the one that differs only in case, when there is one),
-- never an empty group: a typo must not read as "n = 0".
CREATE OR REPLACE TEMP MACRO subject_groups(aid, column_name, group_a, group_b) AS TABLE
    WITH cov AS (
        SELECT subject_id, value FROM subject_covariate(aid, column_name)
    ),
    present AS (
        SELECT coalesce(list(DISTINCT value ORDER BY value), []) AS vals FROM cov
    ),
    missing AS (
        SELECT vals,
               CASE WHEN NOT list_contains(vals, group_a) THEN 'group_a'
                    WHEN NOT list_contains(vals, group_b) THEN 'group_b' END AS which,
               CASE WHEN NOT list_contains(vals, group_a) THEN group_a
                    WHEN NOT list_contains(vals, group_b) THEN group_b END AS given
        FROM present
    ),
    checked AS (
        SELECT CASE
            WHEN group_a IS NULL OR group_b IS NULL
                THEN error('subject_groups: group_a and group_b must both be given')
            WHEN group_a = group_b
                THEN error('subject_groups: group_a and group_b are both ' || group_a)
            WHEN len(vals) = 0
                THEN error('subject_groups: column ' || column_name
                           || ' has no values for the subjects of analysis ' || aid)
            WHEN which IS NOT NULL
                THEN error('subject_groups: ' || which || ' value ''' || given
                           || ''' matches no subject of analysis ' || aid || ' in column ' || column_name
                           || '; the values there are: ' || array_to_string(vals[1:20], ', ')
                           || CASE WHEN len(vals) > 20 THEN ', ... (' || len(vals) || ' values)' ELSE '' END
                           || coalesce(' (did you mean '''
                                       || list_filter(vals, v -> lower(v) = lower(given))[1] || '''?)', ''))
            ELSE true
        END AS ok
        FROM missing
    )
    SELECT subject_id,
           CASE WHEN value = group_a THEN 'a' ELSE 'b' END AS side,
           value AS group_value
    FROM cov, checked
    WHERE ok AND value IN (group_a, group_b);
