-- geofold results schema, version 1.
-- Kept to build version-1 stores in the upgrade tests (tests/upgrade.rs);
-- geofold itself no longer applies it. The placeholders in braces are filled in by geofold: {schema} is the quoted
-- results schema, {unit_id_type} is bigint or text (the source id's kind),
-- {srid} is the SRID of the distance CRS of the block polygons.

CREATE TABLE {schema}.store_settings (
    key   text PRIMARY KEY,
    value text NOT NULL
);
COMMENT ON TABLE {schema}.store_settings IS 'geofold: fixed properties of this results schema (unit id type, block SRID)';

CREATE TABLE {schema}.runs (
    run_id           uuid PRIMARY KEY,
    job              text NOT NULL,
    primary_run_id   uuid REFERENCES {schema}.runs (run_id),
    status           text NOT NULL CHECK (status IN ('running', 'succeeded', 'failed')),
    started_at       timestamptz NOT NULL,
    finished_at      timestamptz,
    source_store     text NOT NULL,
    source_table     text NOT NULL,
    id_column        text NOT NULL,
    geometry_column  text NOT NULL,
    target_column    text NOT NULL,
    feature_columns  text[] NOT NULL,
    scheme           text NOT NULL,
    parameters       jsonb NOT NULL,
    seed             bigint NOT NULL,
    repeats          integer NOT NULL,
    folds            integer NOT NULL,
    source_srid      integer NOT NULL,
    distance_srid    integer NOT NULL,
    tool_version     text NOT NULL,
    input_fingerprint text,
    units_read       bigint,
    units_used       bigint,
    units_skipped    jsonb,
    error_message    text
);
CREATE INDEX runs_job_idx ON {schema}.runs (job, status, finished_at DESC);
COMMENT ON TABLE {schema}.runs IS 'geofold: one row per validation run; status running/succeeded/failed';
COMMENT ON COLUMN {schema}.runs.primary_run_id IS 'for a comparison run (random folds on the same rows), the run it accompanies';

-- Per-unit tables: written once per run with binary COPY, read by run. They
-- carry no primary key, no foreign key and only a BRIN index on run_id: a
-- run's rows are appended together, so a BRIN range holds one run and finds
-- it at a fraction of the cost of a B-tree, which would triple the time to
-- write a million-unit run. geofold writes them only inside the transaction
-- that also marks their run succeeded, and never twice for one unit.
CREATE TABLE {schema}.predictions (
    run_id        uuid NOT NULL,
    repetition    integer NOT NULL,
    fold          integer NOT NULL,
    unit_id       {unit_id_type} NOT NULL,
    observed      double precision NOT NULL,
    predicted     double precision NOT NULL,
    residual      double precision NOT NULL,
    abs_error     double precision NOT NULL,
    squared_error double precision NOT NULL
);
CREATE INDEX predictions_run_brin ON {schema}.predictions USING brin (run_id) WITH (pages_per_range = 32);
COMMENT ON TABLE {schema}.predictions IS 'geofold: held-out prediction of each unit per repetition (1-based); residual = observed - predicted';

-- Fold membership is exactly the (run, repetition, fold, unit) of each
-- held-out prediction, so it is a view rather than a second copy.
CREATE VIEW {schema}.fold_members AS
    SELECT run_id, repetition, fold, unit_id FROM {schema}.predictions;
COMMENT ON VIEW {schema}.fold_members IS 'geofold: the held-out fold of each unit in each repetition (1-based)';

CREATE TABLE {schema}.unit_errors (
    run_id         uuid NOT NULL,
    unit_key       integer NOT NULL,
    unit_id        {unit_id_type} NOT NULL,
    observed       double precision NOT NULL,
    predicted      double precision NOT NULL,
    residual       double precision NOT NULL,
    abs_error      double precision NOT NULL,
    rmse           double precision NOT NULL,
    repetitions    integer NOT NULL
);
CREATE INDEX unit_errors_run_brin ON {schema}.unit_errors USING brin (run_id) WITH (pages_per_range = 32);
COMMENT ON TABLE {schema}.unit_errors IS 'geofold: per-unit errors over all repetitions: predicted is the mean held-out prediction, residual = observed - predicted, abs_error the mean absolute error, rmse the RMSE over repetitions; unit_key numbers the units of a run 1..n in id order';

CREATE TABLE {schema}.fold_scores (
    run_id     uuid NOT NULL REFERENCES {schema}.runs (run_id) ON DELETE CASCADE,
    repetition integer NOT NULL,
    fold       integer NOT NULL,
    n_train    integer NOT NULL,
    n_test     integer NOT NULL,
    rmse       double precision,
    mae        double precision,
    bias       double precision,
    r2         double precision,
    PRIMARY KEY (run_id, repetition, fold)
);
COMMENT ON TABLE {schema}.fold_scores IS 'geofold: scores of each fold; bias = mean(predicted - observed); r2 = 1 - SSE/SST around the fold mean';

CREATE TABLE {schema}.run_scores (
    run_id         uuid PRIMARY KEY REFERENCES {schema}.runs (run_id) ON DELETE CASCADE,
    n_predictions  bigint NOT NULL,
    rmse           double precision,
    mae            double precision,
    bias           double precision,
    r2             double precision,
    rmse_fold_mean double precision,
    rmse_fold_sd   double precision,
    mae_fold_mean  double precision,
    mae_fold_sd    double precision,
    bias_fold_mean double precision,
    bias_fold_sd   double precision,
    r2_fold_mean   double precision,
    r2_fold_sd     double precision
);
COMMENT ON TABLE {schema}.run_scores IS 'geofold: rmse/mae/bias/r2 are pooled over all held-out predictions of the run; *_fold_mean and *_fold_sd are the mean and sample SD of the per-fold scores';

CREATE TABLE {schema}.blocks (
    block_key  integer GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    run_id     uuid NOT NULL REFERENCES {schema}.runs (run_id) ON DELETE CASCADE,
    repetition integer NOT NULL,
    block_col  bigint NOT NULL,
    block_row  bigint NOT NULL,
    fold       integer NOT NULL,
    n_units    integer NOT NULL,
    geom       geometry(Polygon, {srid}) NOT NULL
);
CREATE INDEX blocks_run_idx ON {schema}.blocks (run_id, repetition);
CREATE INDEX blocks_geom_idx ON {schema}.blocks USING gist (geom);
COMMENT ON TABLE {schema}.blocks IS 'geofold: grid blocks of block runs with the fold each was dealt to';
