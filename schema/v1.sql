-- topostate warehouse, schema version 1.
-- Every result row carries analysis_id; states are numbered from 1.
-- Column comments here are the data dictionary's source (see dictionary.go).

CREATE TABLE IF NOT EXISTS schema_version (
    version    INTEGER NOT NULL,  -- warehouse layout version
    applied_at TIMESTAMP NOT NULL -- when this version was created in the file
);


CREATE TABLE IF NOT EXISTS analyses (
    analysis_id  INTEGER PRIMARY KEY, -- identifier of one ingest run
    name         VARCHAR NOT NULL UNIQUE, -- name given with --analysis
    created_at   TIMESTAMP NOT NULL,  -- when the ingest committed (UTC)
    tool_version VARCHAR NOT NULL,    -- topostate version that wrote it
    parameters   JSON NOT NULL,       -- every ingest option, as JSON
    input_dir    VARCHAR NOT NULL,    -- cohort folder read
    n_subjects   INTEGER NOT NULL,    -- series files analysed (subject x session)
    n_regions    INTEGER NOT NULL,    -- regions per network after any drop
    n_states     INTEGER NOT NULL,    -- number of connectivity states k
    n_windows    BIGINT NOT NULL,     -- windows over all series
    fit_windows  INTEGER NOT NULL     -- windows used to fit the states
);

CREATE TABLE IF NOT EXISTS dropped_analyses (
    analysis_id  INTEGER NOT NULL,   -- identifier the dropped analysis had; never given out again
    name         VARCHAR NOT NULL,   -- its name (free for reuse)
    dropped_at   TIMESTAMP NOT NULL, -- when 'topostate drop' removed it (UTC)
    rows_removed BIGINT NOT NULL     -- result rows deleted with it
);

CREATE TABLE IF NOT EXISTS inputs (
    analysis_id INTEGER NOT NULL, -- analysis
    subject_id  VARCHAR NOT NULL, -- participant label as in participants.tsv, with sub- prefix
    session_id  VARCHAR NOT NULL, -- session label with ses- prefix; '' when the cohort has no sessions
    path        VARCHAR NOT NULL, -- series file, relative to the input folder
    sha256      VARCHAR NOT NULL, -- SHA-256 of the file's bytes (hex)
    timepoints  INTEGER NOT NULL, -- rows of the series (T)
    regions     INTEGER NOT NULL, -- columns of the series (p) as read
    tr_seconds  DOUBLE NOT NULL,  -- repetition time used (s)
    tr_source   VARCHAR NOT NULL  -- where the TR came from: option or sidecar path
);

CREATE TABLE IF NOT EXISTS excluded_inputs (
    analysis_id INTEGER NOT NULL, -- analysis
    subject_id  VARCHAR NOT NULL, -- participant label
    session_id  VARCHAR NOT NULL, -- session label or ''
    path        VARCHAR NOT NULL, -- series file
    reason      VARCHAR NOT NULL  -- why it was left out (--on-bad-subject skip)
);

CREATE TABLE IF NOT EXISTS subjects (
    analysis_id INTEGER NOT NULL, -- analysis whose participants sheet this row came from
    subject_id  VARCHAR NOT NULL  -- participant_id from participants.tsv
    -- one further column per participants.tsv covariate is added at ingest
);

CREATE TABLE IF NOT EXISTS regions (
    analysis_id  INTEGER NOT NULL, -- analysis
    region_index INTEGER,          -- 1-based node number in the networks; NULL when dropped
    column_index INTEGER NOT NULL, -- 1-based column in the series files
    region_name  VARCHAR NOT NULL, -- header name in the series files
    dropped      BOOLEAN NOT NULL  -- true when left out (constant series, --constant-region drop)
);

CREATE TABLE IF NOT EXISTS elbow (
    analysis_id     INTEGER NOT NULL, -- analysis
    k               INTEGER NOT NULL, -- number of states fitted
    wcss            DOUBLE NOT NULL,  -- within-cluster sum of squared distances on the fitting windows
    chosen          BOOLEAN NOT NULL, -- the k used for the analysis
    chord_pick      BOOLEAN NOT NULL, -- the chord-distance rule picks this k
    second_diff_pick BOOLEAN NOT NULL, -- the largest-second-difference rule picks this k
    gap_log_wcss    DOUBLE,           -- log W(k) on the gap statistic's sample of the fitting windows; NULL: no gap computed (older analyses, or a rule other than gap)
    gap_ref_log_wcss DOUBLE,          -- mean log W*(k) over the uniform reference sets in the principal-component box; NULL as gap_log_wcss
    gap             DOUBLE,           -- gap statistic Gap(k) = gap_ref_log_wcss - gap_log_wcss; NULL as gap_log_wcss
    gap_se          DOUBLE,           -- s(k) = sd of the reference log W*(k) times sqrt(1 + 1/B); NULL as gap_log_wcss
    gap_pick        BOOLEAN,          -- the gap rule (smallest k with Gap(k) >= Gap(k+1) - s(k+1)) picks this k; NULL as gap_log_wcss
    strength        DOUBLE,           -- prediction strength ps(k): mean over random halvings of the fitting windows of the smallest share of a cluster's pairs the other half's centroids keep together; NULL: not computed (older analyses, or a rule other than strength)
    strength_se     DOUBLE,           -- standard error of strength (sd of the 2 x splits estimates / sqrt of their number); NULL as strength
    strength_pick   BOOLEAN           -- the strength rule (largest k with strength >= the threshold, parameters strength_threshold) picks this k; NULL as strength
);

CREATE TABLE IF NOT EXISTS state_centroids (
    analysis_id INTEGER NOT NULL,  -- analysis
    state       SMALLINT NOT NULL, -- state, from 1
    i           SMALLINT NOT NULL, -- first region (region_index), i < j
    j           SMALLINT NOT NULL, -- second region (region_index)
    weight      DOUBLE NOT NULL    -- centroid value: correlation r, or Fisher z when fisher_z was on
);

CREATE TABLE IF NOT EXISTS state_sequence (
    analysis_id    INTEGER NOT NULL,  -- analysis
    subject_id     VARCHAR NOT NULL,  -- participant label
    session_id     VARCHAR NOT NULL,  -- session label or ''
    window_index   INTEGER NOT NULL,  -- window number from 1
    window_start   INTEGER NOT NULL,  -- first time point of the window, from 0
    center_seconds DOUBLE NOT NULL,   -- window centre (start + (w-1)/2) * TR, seconds
    state          SMALLINT NOT NULL, -- nearest state, from 1
    distance       DOUBLE NOT NULL    -- distance to that state's centroid
);

CREATE TABLE IF NOT EXISTS state_metrics (
    analysis_id        INTEGER NOT NULL,  -- analysis
    subject_id         VARCHAR NOT NULL,  -- participant label
    session_id         VARCHAR NOT NULL,  -- session label or ''
    state              SMALLINT NOT NULL, -- state, from 1
    occupancy          DOUBLE NOT NULL,   -- fractional occupancy: share of windows in the state
    n_dwells           INTEGER NOT NULL,  -- number of maximal runs in the state
    mean_dwell_windows DOUBLE,            -- mean run length, windows; NULL when never visited
    mean_dwell_seconds DOUBLE             -- mean run length * step * TR, seconds; NULL when never visited
);

CREATE TABLE IF NOT EXISTS subject_dynamics (
    analysis_id   INTEGER NOT NULL, -- analysis
    subject_id    VARCHAR NOT NULL, -- participant label
    session_id    VARCHAR NOT NULL, -- session label or ''
    n_windows     INTEGER NOT NULL, -- windows in the series
    n_transitions INTEGER NOT NULL, -- state switches between consecutive windows
    switch_rate   DOUBLE NOT NULL,  -- n_transitions / (n_windows - 1); 0 for one window
    states_visited INTEGER NOT NULL -- distinct states visited
);

CREATE TABLE IF NOT EXISTS transitions (
    analysis_id INTEGER NOT NULL,  -- analysis
    subject_id  VARCHAR NOT NULL,  -- participant label
    session_id  VARCHAR NOT NULL,  -- session label or ''
    from_state  SMALLINT NOT NULL, -- state at window w, from 1
    to_state    SMALLINT NOT NULL, -- state at window w + 1, from 1
    count       INTEGER NOT NULL,  -- number of such consecutive pairs
    probability DOUBLE             -- count / row total; NULL when from_state has no outgoing pair
);

CREATE TABLE IF NOT EXISTS betti_curves (
    analysis_id INTEGER NOT NULL,  -- analysis
    subject_id  VARCHAR NOT NULL,  -- participant label
    session_id  VARCHAR NOT NULL,  -- session label or ''
    state       SMALLINT NOT NULL, -- state, from 1
    dimension   TINYINT NOT NULL,  -- 0: connected components (beta0); 1: independent cycles (beta1)
    threshold   DOUBLE NOT NULL,   -- filtration value e (correlation scale); edges with weight > e kept
    betti       INTEGER NOT NULL   -- Betti number of the thresholded network
);

CREATE TABLE IF NOT EXISTS filtration_events (
    analysis_id INTEGER NOT NULL,  -- analysis
    subject_id  VARCHAR NOT NULL,  -- participant label
    session_id  VARCHAR NOT NULL,  -- session label or ''
    state       SMALLINT NOT NULL, -- state, from 1
    dimension   TINYINT NOT NULL,  -- 0: spanning-tree edge (beta0 steps); 1: other edge (beta1 steps)
    value       DOUBLE NOT NULL    -- edge weight (correlation scale) where the Betti number steps
);

CREATE TABLE IF NOT EXISTS state_networks (
    analysis_id INTEGER NOT NULL,  -- analysis
    subject_id  VARCHAR NOT NULL,  -- participant label
    session_id  VARCHAR NOT NULL,  -- session label or ''
    state       SMALLINT NOT NULL, -- state, from 1
    n_windows   INTEGER NOT NULL,  -- windows averaged into this network
    mean_weight DOUBLE NOT NULL,   -- mean edge weight (correlation scale)
    tree_weight DOUBLE NOT NULL,   -- total weight of the maximum spanning tree
    core_timepoints INTEGER        -- core time points of the state: covered only by windows of this state (docs/methods.md §7); NULL for analyses written before it existed
);

-- Betti curves of the core state networks (docs/methods.md §7): each is the
-- correlation over the first N core time points of a subject and state
-- (N in the analysis parameters, core_timepoints), free of windows that
-- straddle a switch and of equal size for every subject; a subject and
-- state with fewer than N core time points has no rows. The group test of
-- topology (filtration_tests_by_group) uses these.
CREATE TABLE IF NOT EXISTS core_betti_curves (
    analysis_id INTEGER NOT NULL,  -- analysis
    subject_id  VARCHAR NOT NULL,  -- participant label
    session_id  VARCHAR NOT NULL,  -- session label or ''
    state       SMALLINT NOT NULL, -- state, from 1
    dimension   TINYINT NOT NULL,  -- 0: connected components (beta0); 1: independent cycles (beta1)
    threshold   DOUBLE NOT NULL,   -- filtration value e (correlation scale); edges with weight > e kept
    betti       INTEGER NOT NULL   -- Betti number of the thresholded core network
);
