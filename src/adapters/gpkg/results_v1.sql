-- geofold results tables in a GeoPackage, version 1: the same tables and
-- columns as the PostGIS results schema (sql/001_results.sql), so a script
-- written against one store reads the other. Types are mapped to the
-- GeoPackage column types (OGC GeoPackage 1.3, clause 1.1.1.1.3, Table 1):
-- uuid -> TEXT, timestamptz -> DATETIME (YYYY-MM-DDTHH:MM:SS.SSSZ, UTC),
-- jsonb and text[] -> TEXT holding JSON, double precision -> DOUBLE,
-- integer and bigint -> INTEGER. Attribute tables need an INTEGER PRIMARY KEY
-- (clause 2.4, Requirement 119), so tables whose PostGIS key is not one
-- integer get a `fid` key and keep the PostGIS key as a UNIQUE constraint.
-- Kept in step with sql/001_results.sql.
-- The `blocks` feature table is created by geofold's feature-table code (it
-- needs registration and an R-tree); {unit_id_type} is INTEGER or TEXT.
-- Applied by geofold itself, inside the transaction that records a run.

CREATE TABLE schema_version (
    version      INTEGER PRIMARY KEY,
    applied_at   DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ', 'now')),
    tool_version TEXT NOT NULL
);

CREATE TABLE store_settings (
    fid   INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    key   TEXT NOT NULL UNIQUE,
    value TEXT NOT NULL
);

CREATE TABLE runs (
    fid               INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    run_id            TEXT NOT NULL UNIQUE,
    job               TEXT NOT NULL,
    primary_run_id    TEXT REFERENCES runs (run_id),
    status            TEXT NOT NULL CHECK (status IN ('running', 'succeeded', 'failed')),
    started_at        DATETIME NOT NULL,
    finished_at       DATETIME,
    source_store      TEXT NOT NULL,
    source_table      TEXT NOT NULL,
    id_column         TEXT NOT NULL,
    geometry_column   TEXT NOT NULL,
    target_column     TEXT NOT NULL,
    feature_columns   TEXT NOT NULL,
    scheme            TEXT NOT NULL,
    parameters        TEXT NOT NULL,
    seed              INTEGER NOT NULL,
    repeats           INTEGER NOT NULL,
    folds             INTEGER NOT NULL,
    source_srid       INTEGER NOT NULL,
    distance_srid     INTEGER NOT NULL,
    tool_version      TEXT NOT NULL,
    input_fingerprint TEXT,
    units_read        INTEGER,
    units_used        INTEGER,
    units_skipped     TEXT,
    error_message     TEXT
);
CREATE INDEX runs_job_idx ON runs (job, status, finished_at);

-- Per-unit tables, as in PostGIS: no foreign key and no unique key (geofold
-- writes a run's rows once, inside the transaction that marks it succeeded).
-- SQLite has no BRIN, and a B-tree on run_id would double the time to write
-- a million-unit run, so there is no index: a run's rows are contiguous in
-- fid order, and a query by run scans the table. Add an index by hand when a
-- file holds many large runs.
CREATE TABLE predictions (
    fid           INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    run_id        TEXT NOT NULL,
    repetition    INTEGER NOT NULL,
    fold          INTEGER NOT NULL,
    unit_id       {unit_id_type} NOT NULL,
    observed      DOUBLE NOT NULL,
    predicted     DOUBLE NOT NULL,
    residual      DOUBLE NOT NULL,
    abs_error     DOUBLE NOT NULL,
    squared_error DOUBLE NOT NULL
);

-- Fold membership is the (run, repetition, fold, unit) of each held-out
-- prediction, so it is a view, as in PostGIS. Its first column is the unique
-- integer fid an attribute view needs (clause 2.4, Requirement 151).
CREATE VIEW fold_members AS
    SELECT fid, run_id, repetition, fold, unit_id FROM predictions;

CREATE TABLE unit_errors (
    fid         INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    run_id      TEXT NOT NULL,
    unit_key    INTEGER NOT NULL,
    unit_id     {unit_id_type} NOT NULL,
    observed    DOUBLE NOT NULL,
    predicted   DOUBLE NOT NULL,
    residual    DOUBLE NOT NULL,
    abs_error   DOUBLE NOT NULL,
    rmse        DOUBLE NOT NULL,
    repetitions INTEGER NOT NULL
);

CREATE TABLE fold_scores (
    fid        INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    run_id     TEXT NOT NULL REFERENCES runs (run_id) ON DELETE CASCADE,
    repetition INTEGER NOT NULL,
    fold       INTEGER NOT NULL,
    n_train    INTEGER NOT NULL,
    n_test     INTEGER NOT NULL,
    rmse       DOUBLE,
    mae        DOUBLE,
    bias       DOUBLE,
    r2         DOUBLE,
    UNIQUE (run_id, repetition, fold)
);

CREATE TABLE run_scores (
    fid            INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
    run_id         TEXT NOT NULL UNIQUE REFERENCES runs (run_id) ON DELETE CASCADE,
    n_predictions  INTEGER NOT NULL,
    rmse           DOUBLE,
    mae            DOUBLE,
    bias           DOUBLE,
    r2             DOUBLE,
    rmse_fold_mean DOUBLE,
    rmse_fold_sd   DOUBLE,
    mae_fold_mean  DOUBLE,
    mae_fold_sd    DOUBLE,
    bias_fold_mean DOUBLE,
    bias_fold_sd   DOUBLE,
    r2_fold_mean   DOUBLE,
    r2_fold_sd     DOUBLE
);
