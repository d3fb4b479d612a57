-- geofold results schema: version 1 -> 2, applied by geofold itself (never
-- by hand) inside the transaction that creates every current results table
-- from its definition (src/results/mod.rs) just before this runs. {schema} is
-- the quoted results schema. Every run is kept:
-- - runs gains model, family, session and pinned;
-- - predictions (wide) -> held_out (lean; the errors become a view);
-- - unit_errors of runs with several repetitions -> unit_summaries;
-- - fold_scores and run_scores (wide) -> folds, fold_score_values and
--   run_score_values (scores by name; the wide forms become views);
-- - blocks -> fold_regions (kind 'block');
-- - store_settings loses unit_id_type and block_srid: a schema now holds
--   jobs of any id type and SRID.
-- The old per-job views were dropped just before (they depend on the old
-- tables); each job's new views come with its next run.

ALTER TABLE {schema}.runs
    ADD COLUMN model text,
    ADD COLUMN family text,
    ADD COLUMN session text,
    ADD COLUMN pinned boolean NOT NULL DEFAULT false;
UPDATE {schema}.runs
    SET model = coalesce(parameters #>> '{model,model}', 'ols'), family = 'regression';
ALTER TABLE {schema}.runs
    ALTER COLUMN model SET NOT NULL,
    ALTER COLUMN family SET NOT NULL,
    ALTER COLUMN pinned DROP DEFAULT;
COMMENT ON COLUMN {schema}.runs.model IS 'the model family';
COMMENT ON COLUMN {schema}.runs.family IS 'regression, binary or count: decides the scores';
COMMENT ON COLUMN {schema}.runs.session IS 'the process that runs it, so a run whose process is gone is marked failed';
COMMENT ON COLUMN {schema}.runs.pinned IS 'true for the job''s pinned baseline run';

INSERT INTO {schema}.held_out (run_id, repetition, fold, observed, predicted, unit_id)
    SELECT run_id, repetition, fold, observed, predicted, unit_id::text FROM {schema}.predictions;

INSERT INTO {schema}.unit_summaries
        (run_id, fold, observed, mean_predicted, mae, rmse, repetitions, unit_id)
    SELECT e.run_id, p.fold, e.observed, e.predicted, e.abs_error, e.rmse, e.repetitions, e.unit_id::text
    FROM {schema}.unit_errors e
    JOIN {schema}.predictions p
        ON p.run_id = e.run_id AND p.unit_id = e.unit_id AND p.repetition = 1
    WHERE e.repetitions > 1;

INSERT INTO {schema}.folds (run_id, repetition, fold, n_train, n_test, n_excluded)
    SELECT run_id, repetition, fold, n_train, n_test, 0 FROM {schema}.fold_scores;

INSERT INTO {schema}.fold_score_values (run_id, repetition, fold, score, value)
    SELECT run_id, repetition, fold, s.score, s.value
    FROM {schema}.fold_scores f
    CROSS JOIN LATERAL (VALUES ('rmse', f.rmse), ('mae', f.mae), ('bias', f.bias), ('r2', f.r2)) AS s (score, value);

INSERT INTO {schema}.run_score_values (run_id, score, statistic, value)
    SELECT run_id, s.score, s.statistic, s.value
    FROM {schema}.run_scores r
    CROSS JOIN LATERAL (VALUES
        ('n', 'pooled', r.n_predictions::double precision),
        ('rmse', 'pooled', r.rmse), ('mae', 'pooled', r.mae), ('bias', 'pooled', r.bias), ('r2', 'pooled', r.r2),
        ('rmse', 'fold_mean', r.rmse_fold_mean), ('rmse', 'fold_sd', r.rmse_fold_sd),
        ('mae', 'fold_mean', r.mae_fold_mean), ('mae', 'fold_sd', r.mae_fold_sd),
        ('bias', 'fold_mean', r.bias_fold_mean), ('bias', 'fold_sd', r.bias_fold_sd),
        ('r2', 'fold_mean', r.r2_fold_mean), ('r2', 'fold_sd', r.r2_fold_sd)
    ) AS s (score, statistic, value);

INSERT INTO {schema}.fold_regions (run_id, repetition, fold, kind, label, units, srid, geom)
    SELECT run_id, repetition, fold, 'block', 'block ' || block_col || ',' || block_row, n_units,
           ST_SRID(geom), ST_Multi(geom)
    FROM {schema}.blocks ORDER BY block_key;

DROP VIEW {schema}.fold_members;
DROP TABLE {schema}.predictions, {schema}.unit_errors, {schema}.fold_scores, {schema}.run_scores,
           {schema}.blocks;
DELETE FROM {schema}.store_settings WHERE key IN ('unit_id_type', 'block_srid');
