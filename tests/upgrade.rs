//! Results stores made by version 1 of the results tables, upgraded in place
//! by the next run: every earlier run kept with the same values in the new
//! tables and views, the old tables gone, the current `schema_version` (3), the new run
//! added, and (GeoPackage) a file GDAL validates.
//!
//! Each test builds a version-1 store the way the previous geofold left it:
//! PostGIS from `sql/001_results.sql` with its placeholders (`{schema}`,
//! `{unit_id_type}` = bigint, `{srid}` = 32631) plus the `schema_version` and
//! `store_settings` rows and the per-job views `<job>` and `<job>_blocks` of
//! the old layer code; GeoPackage from `src/adapters/gpkg/results_v1.sql`
//! with the attribute tables registered, and the feature tables `blocks`,
//! `<job>` and `<job>_blocks` written by GDAL. The runs in them are invented
//! but consistent (predictions near the observed target, scores computed by
//! PostgreSQL from those predictions, blocks from the units' centroids), and
//! are kept as snapshot tables to compare with after the upgrade.

mod common;

use std::path::Path;

use common::fixtures::{create_squares, UNITS_GRID};
use common::gdal::{
    gdal_layers, gdal_rows, gdal_validates, geometry_last, numbers_in, ogr2ogr, rtree_check,
    sqlite_checks,
};
use common::pg::{check_qgis_layer, db_uri, Scratch};
use common::{assert_close, assert_rows_match, ok_json, Workdir};

/// Version 1 of the PostGIS results schema, as released.
const V1_POSTGIS: &str = include_str!("../sql/001_results.sql");
/// Version 1 of the GeoPackage results tables, as released.
const V1_GPKG: &str = include_str!("../src/adapters/gpkg/results_v1.sql");

/// The four version-1 runs: an older grid run of one repetition (C), a grid
/// run of two repetitions (A) with its random comparison (B), and a failed
/// run (D) with no rows.
const RUN_C: &str = "00000000-0000-4000-8000-00000000000c";
const RUN_A: &str = "00000000-0000-4000-8000-00000000000a";
const RUN_B: &str = "00000000-0000-4000-8000-00000000000b";
const RUN_D: &str = "00000000-0000-4000-8000-00000000000d";

/// The four run ids as an SQL list.
fn old_runs() -> String {
    format!("('{RUN_C}', '{RUN_A}', '{RUN_B}', '{RUN_D}')")
}

/// Fills `{r}` with a version-1 results schema for job `job` on the
/// [`create_lattice`] table `{s}.units` (36 squares, 200 m blocks), and keeps
/// copies of its rows in `{s}.v1_*`. `source` is what `runs` records
/// (`(store, table)`).
fn v1_postgis_store(scratch: &Scratch, job: &str, source: (&str, &str)) {
    // What the previous geofold ran: the schema_version table, then the
    // migration with its placeholders, then the version row and the settings.
    scratch.script(&format!(
        "CREATE SCHEMA {{r}};
         CREATE TABLE {{r}}.schema_version (
             version integer PRIMARY KEY,
             applied_at timestamptz NOT NULL DEFAULT now(),
             tool_version text NOT NULL);
         {}
         INSERT INTO {{r}}.schema_version (version, tool_version) VALUES (1, '0.1.0');
         INSERT INTO {{r}}.store_settings VALUES ('unit_id_type', 'bigint'), ('block_srid', '32631');",
        V1_POSTGIS
            .replace("{schema}", "{r}")
            .replace("{unit_id_type}", "bigint")
            .replace("{srid}", "32631")
    ));
    scratch.bind("job", job);
    scratch.bind("store", source.0);
    scratch.bind("table", source.1);
    scratch.script(
        r#"
        INSERT INTO {r}.runs (run_id, job, primary_run_id, status, started_at, finished_at, source_store,
            source_table, id_column, geometry_column, target_column, feature_columns, scheme, parameters, seed,
            repeats, folds, source_srid, distance_srid, tool_version, input_fingerprint, units_read, units_used,
            units_skipped, error_message)
        SELECT run_id::uuid, '{job}', primary_run_id::uuid, status, started::timestamptz, finished::timestamptz,
               '{store}', '{table}', 'id', 'geom', 'target', '{a,b}', scheme,
               jsonb_build_object('scheme', CASE WHEN scheme = 'grid'
                                      THEN jsonb_build_object('scheme', 'grid', 'block_size', 200.0, 'origin', '[0.0, 0.0]'::jsonb, 'folds', 3)
                                      ELSE jsonb_build_object('scheme', 'random', 'folds', 3) END,
                                  'model', '{"model": "ols", "intercept": true, "solver": "householder_qr"}'::jsonb,
                                  'repeats', repeats, 'seed', 1),
               1, repeats, 3, 32631, 32631, '0.1.0',
               CASE WHEN status = 'succeeded' THEN 'v1-fingerprint' END,
               CASE WHEN status = 'succeeded' THEN 36 END, CASE WHEN status = 'succeeded' THEN 36 END,
               CASE WHEN status = 'succeeded'
                    THEN '{"no_geometry": 0, "empty_geometry": 0, "missing_target": 0, "missing_feature": {}}'::jsonb END,
               CASE WHEN status = 'failed' THEN 'cannot fit fold 2 (repetition 1) with ols: feature b is constant' END
        FROM (VALUES
            ('00000000-0000-4000-8000-00000000000c', NULL, 'succeeded', '2026-01-05 02:00:00+00', '2026-01-05 02:00:03+00', 'grid', 1),
            ('00000000-0000-4000-8000-00000000000a', NULL, 'succeeded', '2026-01-06 02:00:00+00', '2026-01-06 02:00:04+00', 'grid', 2),
            ('00000000-0000-4000-8000-00000000000b', '00000000-0000-4000-8000-00000000000a', 'succeeded',
             '2026-01-06 02:00:00+00', '2026-01-06 02:00:04+00', 'random', 2),
            ('00000000-0000-4000-8000-00000000000d', NULL, 'failed', '2026-01-07 02:00:00+00', '2026-01-07 02:00:01+00', 'grid', 1)
        ) v (run_id, primary_run_id, status, started, finished, scheme, repeats)
        ORDER BY started, primary_run_id NULLS FIRST;

        -- Each unit's block and, per run and repetition, its fold and an
        -- invented held-out prediction near its target.
        CREATE TABLE {s}.v1_cells AS
            SELECT id, target, floor(ST_X(ST_Centroid(geom)) / 200)::bigint AS col,
                   floor(ST_Y(ST_Centroid(geom)) / 200)::bigint AS row FROM {s}.units;
        INSERT INTO {r}.predictions (run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error)
        SELECT run_id, repetition, fold, id, target, predicted, target - predicted, abs(target - predicted),
               (target - predicted) * (target - predicted)
        FROM (SELECT r.run_id, rep AS repetition, c.id, c.target,
                     c.target + 0.1::float8 * (((c.id * 11 + rep * 3) % 7) - 3) + 0.01::float8 * r.k AS predicted,
                     CASE WHEN r.scheme = 'grid' THEN ((c.col + c.row + rep) % 3) + 1
                          ELSE ((c.id * 7 + rep) % 3) + 1 END AS fold
              FROM (SELECT run_id, scheme, repeats,
                           CASE scheme WHEN 'random' THEN 3 ELSE repeats END AS k
                    FROM {r}.runs WHERE status = 'succeeded') r
              CROSS JOIN LATERAL generate_series(1, r.repeats) rep
              CROSS JOIN {s}.v1_cells c
              ORDER BY r.run_id, rep, c.id) p;

        INSERT INTO {r}.unit_errors (run_id, unit_key, unit_id, observed, predicted, residual, abs_error, rmse, repetitions)
        SELECT run_id, row_number() OVER (PARTITION BY run_id ORDER BY unit_id)::integer, unit_id, observed,
               avg(predicted), observed - avg(predicted), avg(abs_error), sqrt(avg(squared_error)), count(*)
        FROM {r}.predictions GROUP BY run_id, unit_id, observed ORDER BY run_id, unit_id;

        INSERT INTO {r}.fold_scores (run_id, repetition, fold, n_train, n_test, rmse, mae, bias, r2)
        SELECT run_id, repetition, fold, 36 - count(*), count(*), sqrt(avg(squared_error)), avg(abs_error),
               avg(predicted - observed), 1 - sum(squared_error) / sum((observed - m) * (observed - m))
        FROM (SELECT *, avg(observed) OVER (PARTITION BY run_id, repetition, fold) AS m FROM {r}.predictions) p
        GROUP BY run_id, repetition, fold;

        INSERT INTO {r}.run_scores
        SELECT p.run_id, p.n, p.rmse, p.mae, p.bias, p.r2, f.rmse_mean, f.rmse_sd, f.mae_mean, f.mae_sd,
               f.bias_mean, f.bias_sd, f.r2_mean, f.r2_sd
        FROM (SELECT run_id, count(*) AS n, sqrt(avg(squared_error)) AS rmse, avg(abs_error) AS mae,
                     avg(predicted - observed) AS bias,
                     1 - sum(squared_error) / sum((observed - m) * (observed - m)) AS r2
              FROM (SELECT *, avg(observed) OVER (PARTITION BY run_id) AS m FROM {r}.predictions) q
              GROUP BY run_id) p
        JOIN (SELECT run_id, avg(rmse) AS rmse_mean, stddev_samp(rmse) AS rmse_sd, avg(mae) AS mae_mean,
                     stddev_samp(mae) AS mae_sd, avg(bias) AS bias_mean, stddev_samp(bias) AS bias_sd,
                     avg(r2) AS r2_mean, stddev_samp(r2) AS r2_sd
              FROM {r}.fold_scores GROUP BY run_id) f USING (run_id);

        INSERT INTO {r}.blocks (run_id, repetition, block_col, block_row, fold, n_units, geom)
        SELECT p.run_id, p.repetition, c.col, c.row, min(p.fold), count(*),
               ST_MakeEnvelope(c.col * 200, c.row * 200, (c.col + 1) * 200, (c.row + 1) * 200, 32631)
        FROM {r}.predictions p JOIN {r}.runs r USING (run_id) JOIN {s}.v1_cells c ON c.id = p.unit_id
        WHERE r.scheme = 'grid'
        GROUP BY p.run_id, p.repetition, c.col, c.row
        ORDER BY p.run_id, p.repetition, c.col, c.row;

        -- Snapshots of what version 1 held, to compare with after the upgrade.
        CREATE TABLE {s}.v1_runs AS SELECT * FROM {r}.runs;
        CREATE TABLE {s}.v1_predictions AS SELECT * FROM {r}.predictions;
        CREATE TABLE {s}.v1_unit_errors AS SELECT * FROM {r}.unit_errors;
        CREATE TABLE {s}.v1_fold_scores AS SELECT * FROM {r}.fold_scores;
        CREATE TABLE {s}.v1_run_scores AS SELECT * FROM {r}.run_scores;
        CREATE TABLE {s}.v1_blocks AS SELECT * FROM {r}.blocks;
        "#,
    );
}

/// The per-job views of the previous geofold's layer code, for job `{job}`
/// on `{s}.units` (a typed geometry column).
fn v1_job_views(scratch: &Scratch) {
    scratch.script(
        "CREATE OR REPLACE VIEW {r}.{job} AS
             SELECT e.unit_key AS fid, e.unit_id, e.run_id, e.observed, e.predicted, e.residual, e.abs_error, e.rmse,
                    e.repetitions, s.geom AS geom
             FROM {r}.unit_errors e JOIN {s}.units s ON s.id = e.unit_id
             WHERE e.run_id = (SELECT r.run_id FROM {r}.runs r WHERE r.job = '{job}' AND r.status = 'succeeded'
                               AND r.primary_run_id IS NULL ORDER BY r.finished_at DESC LIMIT 1);
         COMMENT ON VIEW {r}.{job} IS 'geofold: per-unit held-out errors of the latest successful run of job {job}; key: fid; residual = observed - predicted';
         CREATE OR REPLACE VIEW {r}.{job}_blocks AS
             SELECT b.block_key, b.run_id, b.block_col, b.block_row, b.fold, b.n_units, b.geom
             FROM {r}.blocks b WHERE b.repetition = 1
               AND b.run_id = (SELECT r.run_id FROM {r}.runs r WHERE r.job = '{job}' AND r.status = 'succeeded'
                               AND r.primary_run_id IS NULL ORDER BY r.finished_at DESC LIMIT 1);
         COMMENT ON VIEW {r}.{job}_blocks IS 'geofold: blocks (repetition 1) of the latest successful run of job {job}; key: block_key';",
    );
}

/// The comparisons made on both stores after an upgrade: (what, SQL on the
/// upgraded store, SQL on the version-1 snapshots in PostGIS). The rows are
/// compared sorted (as text), see [`sorted`].
fn old_rows_checks() -> Vec<(&'static str, String, String)> {
    let old_runs = old_runs();
    vec![
        (
            "held-out predictions (the predictions view)",
            format!(
                "SELECT run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error
                 FROM predictions WHERE run_id IN {old_runs} ORDER BY run_id, repetition, unit_id"
            ),
            "SELECT run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error
             FROM {s}.v1_predictions"
                .to_string(),
        ),
        (
            "per-unit errors (the unit_errors view)",
            format!(
                "SELECT run_id, unit_id, observed, predicted, residual, abs_error, rmse, repetitions
                 FROM unit_errors WHERE run_id IN {old_runs} ORDER BY run_id, unit_id"
            ),
            "SELECT run_id, unit_id, observed, predicted, residual, abs_error, rmse, repetitions
             FROM {s}.v1_unit_errors"
                .to_string(),
        ),
        (
            "fold scores (the fold_scores view)",
            format!(
                "SELECT run_id, repetition, fold, n_train, n_test, n_excluded, rmse, mae, bias, r2
                 FROM fold_scores WHERE run_id IN {old_runs} ORDER BY run_id, repetition, fold"
            ),
            "SELECT run_id, repetition, fold, n_train, n_test, 0, rmse, mae, bias, r2
             FROM {s}.v1_fold_scores ORDER BY run_id, repetition, fold"
                .to_string(),
        ),
        (
            "run scores (the run_scores view)",
            format!(
                "SELECT run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean,
                        mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd
                 FROM run_scores WHERE run_id IN {old_runs} ORDER BY run_id"
            ),
            "SELECT run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean,
                    mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd
             FROM {s}.v1_run_scores ORDER BY run_id"
                .to_string(),
        ),
        (
            "runs",
            format!(
                "SELECT run_id, job, coalesce(CAST(primary_run_id AS TEXT), '-'), status, scheme, model, family, seed, repeats,
                        folds, coalesce(units_used, -1), coalesce(error_message, '-')
                 FROM runs WHERE run_id IN {old_runs} ORDER BY run_id"
            ),
            "SELECT run_id, job, coalesce(primary_run_id::text, '-'), status, scheme, 'ols', 'regression', seed,
                    repeats, folds, coalesce(units_used, -1), coalesce(error_message, '-')
             FROM {s}.v1_runs ORDER BY run_id"
                .to_string(),
        ),
    ]
}

/// Rows sorted as text, so two tools' orders of text ids do not matter.
fn sorted(mut rows: Vec<Vec<String>>) -> Vec<Vec<String>> {
    rows.sort();
    rows
}

/// The old blocks as fold regions: attributes, then the outline's coordinates.
fn v1_blocks_as_regions(scratch: &Scratch) -> Vec<Vec<String>> {
    scratch.rows(
        "SELECT run_id, repetition, fold, 'block', format('block %s,%s', block_col, block_row), n_units, 32631,
                ST_AsText(ST_Multi(geom))
         FROM {s}.v1_blocks ORDER BY run_id, repetition, block_col, block_row",
    )
}

/// Upgraded regions against the version-1 blocks, both sorted as text.
fn assert_same_regions(upgraded: &[Vec<String>], v1: &[Vec<String>]) {
    let (upgraded, v1) = (sorted(upgraded.to_vec()), sorted(v1.to_vec()));
    assert_eq!(upgraded.len(), v1.len(), "fold regions");
    assert_eq!(upgraded.len(), 27, "9 blocks in each of 3 grid repetitions");
    for (a, b) in upgraded.iter().zip(v1) {
        assert_eq!(a[..7], b[..7], "region attributes");
        let (p, q) = (numbers_in(&a[7]), numbers_in(&b[7]));
        assert_eq!(p.len(), q.len(), "{} vs {}", a[7], b[7]);
        for (x, y) in p.iter().zip(&q) {
            assert_close(*x, *y, "region outline");
        }
    }
}

/// `geofold run` arguments on the lattice: 200 m blocks, 3 folds, `--json`.
fn grid_args() -> Vec<&'static str> {
    [UNITS_GRID, &["--json"]].concat()
}

#[test]
fn a_version_1_postgis_schema_is_upgraded_in_place_by_the_next_run() {
    let scratch = Scratch::new("upgrade_pg");
    let workdir = Workdir::new();
    create_squares(&scratch, "units");
    v1_postgis_store(&scratch, "units", ("postgis", &scratch.fill("{s}.units")));
    v1_job_views(&scratch);
    // The fixture is what version 1 held: its views work and show run A.
    assert_eq!(
        scratch.query("SELECT count(*), min(run_id::text), max(repetitions) FROM {r}.units"),
        format!("36|{RUN_A}|2")
    );
    assert_eq!(scratch.query("SELECT count(*) FROM {r}.units_blocks"), "9");
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.predictions"),
        (36 + 2 * 36 * 2).to_string()
    );

    let mut args = vec!["--table", "{s}.units", "--job", "units"];
    args.extend(grid_args());
    let document = ok_json(&scratch.geofold_run(&workdir, &args));
    let new_run = common::run_id(&document, 0);

    assert_eq!(
        scratch.query("SELECT string_agg(version::text, ',' ORDER BY version), max(version) FROM {r}.schema_version"),
        "1,3|3"
    );
    // The old tables are gone; the names that stay are views now.
    assert_eq!(
        scratch.query(
            "SELECT string_agg(c.relname || ':' || c.relkind::text, ',' ORDER BY c.relname) FROM pg_class c
             JOIN pg_namespace n ON n.oid = c.relnamespace
             WHERE n.nspname = '{r}' AND c.relname IN ('predictions', 'unit_errors', 'fold_scores', 'run_scores',
                                                     'fold_members', 'blocks', 'units_blocks')"
        ),
        "fold_members:v,fold_scores:v,predictions:v,run_scores:v,unit_errors:v"
    );
    assert_eq!(
        scratch.query("SELECT string_agg(key, ',' ORDER BY key) FROM {r}.store_settings"),
        "views",
        "the version-1 settings (one id type and one block SRID per schema) are gone"
    );
    // The old runs, with the same values, in the new tables and views.
    let in_results = |sql: &str| scratch.rows(&format!("SET search_path TO {{r}}, public; {sql}"));
    for (what, upgraded, v1) in old_rows_checks() {
        let (a, b) = (sorted(in_results(&upgraded)), sorted(scratch.rows(&v1)));
        assert!(!a.is_empty(), "{what}");
        assert_rows_match(&a, &b, what);
    }
    let old_runs = old_runs();
    assert_eq!(
        scratch.query(&format!(
            "SELECT count(*), count(DISTINCT run_id) FROM {{r}}.unit_summaries WHERE run_id IN {old_runs}"
        )),
        "72|2",
        "the runs of two repetitions keep a per-unit summary"
    );
    scratch.check(
        "the unit_errors fold of a run with repetitions is its fold in repetition 1",
        &format!(
            "SELECT bool_and(e.fold = p.fold) FROM {{r}}.unit_errors e
             JOIN {{s}}.v1_predictions p ON p.run_id = e.run_id AND p.unit_id::text = e.unit_id AND p.repetition = 1
             WHERE e.run_id IN {old_runs}"
        ),
    );
    let regions = in_results(&format!(
        "SELECT run_id, repetition, fold, kind, label, units, srid, ST_AsText(geom) FROM fold_regions
         WHERE run_id IN {old_runs} ORDER BY run_id, repetition, region_id"
    ));
    assert_same_regions(&regions, &v1_blocks_as_regions(&scratch));
    scratch.check(
        "region outlines keep their SRID per row",
        &format!("SELECT bool_and(ST_SRID(geom) = 32631) FROM {{r}}.fold_regions WHERE run_id IN {old_runs}"),
    );
    // The new run is there, and the job's layers are the new views, showing it.
    scratch.bind("new", &new_run);
    assert_eq!(
        scratch.query("SELECT status, model, family, pinned FROM {r}.runs WHERE run_id = '{new}'"),
        "succeeded|ols|regression|f"
    );
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.held_out WHERE run_id = '{new}'"),
        "36"
    );
    check_qgis_layer(
        &scratch.results,
        "units",
        ("fid", "integer"),
        "POLYGON",
        32631,
        36,
    );
    check_qgis_layer(
        &scratch.results,
        "units_regions",
        ("region_id", "integer"),
        "MULTIPOLYGON",
        32631,
        9,
    );
    scratch.check(
        "the layers show the new run",
        "SELECT (SELECT bool_and(run_id = '{new}') FROM {r}.units)
            AND (SELECT bool_and(run_id = '{new}') FROM {r}.units_regions)",
    );
    // A second run on the upgraded schema changes nothing of the old runs.
    ok_json(&scratch.geofold_run(&workdir, &args));
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.schema_version"),
        "2"
    );
    for (what, upgraded, v1) in old_rows_checks() {
        assert_rows_match(
            &sorted(in_results(&upgraded)),
            &sorted(scratch.rows(&v1)),
            what,
        );
    }
}

/// The attribute tables of a version-1 GeoPackage and their descriptions,
/// as the previous geofold registered them.
const V1_ATTRIBUTE_TABLES: &[(&str, &str)] = &[
    ("schema_version", "geofold: versions of the results tables applied to this file"),
    ("store_settings", "geofold: fixed properties of these results (unit id type, block SRID)"),
    ("runs", "geofold: one row per validation run; status running/succeeded/failed"),
    ("fold_members", "geofold: the held-out fold of each unit in each repetition (1-based)"),
    ("predictions", "geofold: held-out prediction of each unit per repetition (1-based); residual = observed - predicted"),
    ("unit_errors", "geofold: per-unit errors over all repetitions: predicted is the mean held-out prediction, residual = observed - predicted, abs_error the mean absolute error, rmse the RMSE over repetitions; unit_key numbers the units of a run 1..n in id order"),
    ("fold_scores", "geofold: scores of each fold; bias = mean(predicted - observed); r2 = 1 - SSE/SST around the fold mean"),
    ("run_scores", "geofold: rmse/mae/bias/r2 are pooled over all held-out predictions of the run; *_fold_mean and *_fold_sd are the mean and sample SD of the per-fold scores"),
];

/// Copies the rows of `from` (a version-1 PostGIS table, or a view of it
/// in the GeoPackage's text forms) into `table` of a version-1 GeoPackage,
/// in `order`; `kinds` says how to bind each column (`t` text, `n` text or
/// NULL when empty, `i` integer, `j` integer or NULL when empty, `f` float).
fn copy_rows(
    conn: &rusqlite::Connection,
    scratch: &Scratch,
    (from, table, order): (&str, &str, &str),
    columns: &str,
    kinds: &str,
) {
    use rusqlite::types::Value;
    let rows = scratch.rows(&format!("SELECT {columns} FROM {from} ORDER BY {order}"));
    assert!(!rows.is_empty(), "{table}: no rows to copy");
    assert_eq!(
        columns.split(',').count(),
        kinds.len(),
        "{table}: one kind per column"
    );
    let placeholders: Vec<String> = (1..=kinds.len()).map(|i| format!("?{i}")).collect();
    let sql = format!(
        "INSERT INTO {table} ({columns}) VALUES ({})",
        placeholders.join(", ")
    );
    let mut statement = conn.prepare(&sql).unwrap_or_else(|e| panic!("{sql}: {e}"));
    for row in rows {
        assert_eq!(row.len(), kinds.len(), "{table}: {row:?}");
        let values: Vec<Value> = row
            .iter()
            .zip(kinds.chars())
            .map(|(field, kind)| match kind {
                'n' | 'j' if field.is_empty() => Value::Null,
                'i' | 'j' => Value::Integer(field.parse().unwrap()),
                'f' => Value::Real(field.parse().unwrap()),
                _ => Value::Text(field.clone()),
            })
            .collect();
        statement
            .execute(rusqlite::params_from_iter(values))
            .unwrap_or_else(|e| panic!("{sql}: {e}"));
    }
}

/// A version-1 GeoPackage `file` holding the source layer `units` (written
/// by GDAL from `{s}.units`) and the results of job `units_cv` from the
/// version-1 schema `{r}` (see [`v1_postgis_store`]).
fn v1_gpkg_store(scratch: &Scratch, dir: &Path, file: &str) {
    let pg = format!("PG:{}", db_uri());
    ogr2ogr(
        dir,
        &[
            "-f",
            "GPKG",
            file,
            &pg,
            &scratch.fill("{s}.units"),
            "-nln",
            "units",
        ],
    );
    let path = dir.join(file);
    {
        let conn = rusqlite::Connection::open(&path).unwrap();
        conn.execute_batch(&V1_GPKG.replace("{unit_id_type}", "INTEGER"))
            .unwrap();
        for (table, description) in V1_ATTRIBUTE_TABLES {
            conn.execute(
                "INSERT INTO gpkg_contents (table_name, data_type, identifier, description)
                 VALUES (?1, 'attributes', ?1, ?2)",
                [table, description],
            )
            .unwrap();
        }
        conn.execute_batch(
            "INSERT INTO schema_version (version, tool_version) VALUES (1, '0.1.0');
             INSERT INTO store_settings (key, value) VALUES ('unit_id_type', 'bigint'), ('block_srid', '32631');",
        )
        .unwrap();
        // runs as the GeoPackage holds it: timestamps as ISO 8601 text in
        // UTC, the feature list as a JSON array.
        scratch.script(
            "CREATE VIEW {s}.v1_runs_text AS SELECT run_id, job, primary_run_id, status,
                 to_char(started_at AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"') AS started_at,
                 to_char(finished_at AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"') AS finished_at,
                 source_store, source_table, id_column, geometry_column, target_column,
                 array_to_json(feature_columns) AS feature_columns, scheme, parameters, seed, repeats, folds,
                 source_srid, distance_srid, tool_version, input_fingerprint, units_read, units_used,
                 units_skipped, error_message
             FROM {r}.runs",
        );
        let tables = [
            (
                ("{s}.v1_runs_text", "runs", "started_at, primary_run_id NULLS FIRST"),
                "run_id, job, primary_run_id, status, started_at, finished_at, source_store, source_table, \
                 id_column, geometry_column, target_column, feature_columns, scheme, parameters, seed, repeats, \
                 folds, source_srid, distance_srid, tool_version, input_fingerprint, units_read, units_used, \
                 units_skipped, error_message",
                "ttntttttttttttiiiiitnjjnn",
            ),
            (
                ("{r}.predictions", "predictions", "run_id, repetition, unit_id"),
                "run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error",
                "tiiifffff",
            ),
            (
                ("{r}.unit_errors", "unit_errors", "run_id, unit_key"),
                "run_id, unit_key, unit_id, observed, predicted, residual, abs_error, rmse, repetitions",
                "tiifffffi",
            ),
            (
                ("{r}.fold_scores", "fold_scores", "run_id, repetition, fold"),
                "run_id, repetition, fold, n_train, n_test, rmse, mae, bias, r2",
                "tiiiiffff",
            ),
            (
                ("{r}.run_scores", "run_scores", "run_id"),
                "run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean, \
                 mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd",
                "tiffffffffffff",
            ),
        ];
        for (source, columns, kinds) in tables {
            copy_rows(&conn, scratch, source, columns, kinds);
        }
    }
    // The feature tables, written by GDAL from PostGIS tables with the
    // version-1 columns (keys kept with -preserve_fid).
    scratch.script(&format!(
        "CREATE TABLE {{s}}.layer_blocks AS
             SELECT block_key, run_id::text AS run_id, repetition, block_col, block_row, fold, n_units, geom
             FROM {{r}}.blocks;
         ALTER TABLE {{s}}.layer_blocks ADD PRIMARY KEY (block_key);
         CREATE TABLE {{s}}.layer_units AS
             SELECT e.unit_key AS fid, e.unit_id, e.run_id::text AS run_id, e.observed, e.predicted, e.residual,
                    e.abs_error, e.rmse, e.repetitions, s.geom
             FROM {{r}}.unit_errors e JOIN {{s}}.units s ON s.id = e.unit_id WHERE e.run_id = '{RUN_A}';
         ALTER TABLE {{s}}.layer_units ADD PRIMARY KEY (fid);
         CREATE TABLE {{s}}.layer_job_blocks AS
             SELECT block_key, run_id, block_col, block_row, fold, n_units, geom
             FROM {{s}}.layer_blocks WHERE run_id = '{RUN_A}' AND repetition = 1;
         ALTER TABLE {{s}}.layer_job_blocks ADD PRIMARY KEY (block_key);"
    ));
    for (table, layer, key) in [
        ("layer_blocks", "blocks", "block_key"),
        ("layer_units", "units_cv", "fid"),
        ("layer_job_blocks", "units_cv_blocks", "block_key"),
    ] {
        ogr2ogr(
            dir,
            &[
                "-update",
                file,
                &pg,
                &scratch.fill(&format!("{{s}}.{table}")),
                "-nln",
                layer,
                "-lco",
                &format!("FID={key}"),
                "-preserve_fid",
            ],
        );
    }
    let conn = rusqlite::Connection::open(&path).unwrap();
    for (layer, description) in [
        ("blocks", "geofold: grid blocks of block runs with the fold each was dealt to".to_string()),
        (
            "units_cv",
            "geofold: per-unit held-out errors of the latest successful run of job units_cv; key: fid; residual = observed - predicted".to_string(),
        ),
        (
            "units_cv_blocks",
            "geofold: blocks (repetition 1) of the latest successful run of job units_cv; key: block_key".to_string(),
        ),
    ] {
        conn.execute(
            "UPDATE gpkg_contents SET description = ?2 WHERE table_name = ?1",
            [layer, &description],
        )
        .unwrap();
    }
}

#[test]
fn a_version_1_geopackage_is_upgraded_in_place_by_the_next_run() {
    let scratch = Scratch::new("upgrade_gpkg");
    let workdir = Workdir::new();
    create_squares(&scratch, "units");
    v1_postgis_store(&scratch, "units_cv", ("gpkg", "v1.gpkg:units"));
    v1_gpkg_store(&scratch, workdir.root(), "v1.gpkg");
    let file = workdir.path("v1.gpkg");
    // The fixture is a GeoPackage GDAL reads, with the version-1 layers.
    let layers = gdal_layers(&file);
    for name in [
        "units",
        "blocks",
        "units_cv",
        "units_cv_blocks",
        "predictions",
        "fold_scores",
        "runs",
    ] {
        assert!(layers.contains_key(name), "{name} in {layers:?}");
    }
    assert_eq!(layers["blocks"].count, 27);

    let mut args = vec!["run", "--gpkg", "v1.gpkg", "--layer", "units"];
    args.extend(grid_args());
    let document = ok_json(&workdir.run(&args));
    assert_eq!(document["job"], "units_cv", "the version-1 job, by default");
    let new_run = common::run_id(&document, 0);

    let sql = |query: &str| gdal_rows(&file, query);
    assert_eq!(
        sql("SELECT group_concat(version), max(version) FROM (SELECT version FROM schema_version ORDER BY version)"),
        [["1,3", "3"]]
    );
    // Old tables gone: the per-unit and score tables are views now (not
    // registered as layers), the blocks layers are dropped.
    assert_eq!(
        sql(
            "SELECT group_concat(name || ':' || type) FROM (SELECT name, type FROM sqlite_master
             WHERE name IN ('predictions', 'unit_errors', 'fold_scores', 'run_scores', 'fold_members', 'blocks',
                            'units_cv_blocks', 'rtree_blocks_geom', 'rtree_units_cv_blocks_geom') ORDER BY name)"
        ),
        [["fold_members:view,fold_scores:view,predictions:view,run_scores:view,unit_errors:view"]]
    );
    assert_eq!(
        sql(
            "SELECT count(*) FROM gpkg_contents WHERE table_name IN ('predictions', 'unit_errors', 'fold_scores',
             'run_scores', 'fold_members', 'blocks', 'units_cv_blocks')"
        ),
        [["0"]]
    );
    assert_eq!(
        sql("SELECT group_concat(key) FROM store_settings"),
        [["views"]]
    );
    for (what, upgraded, v1) in old_rows_checks() {
        let (a, b) = (sorted(sql(&upgraded)), sorted(scratch.rows(&v1)));
        assert!(!a.is_empty(), "{what}");
        assert_rows_match(&a, &b, what);
    }
    let old_runs = old_runs();
    let regions = geometry_last(sql(&format!(
        "SELECT geom, run_id, repetition, fold, kind, label, units, srid FROM fold_regions
         WHERE run_id IN {old_runs}"
    )));
    assert_same_regions(&regions, &v1_blocks_as_regions(&scratch));
    // The new run, and the job's layers showing it.
    assert_eq!(
        sql(&format!(
            "SELECT status, model, family FROM runs WHERE run_id = '{new_run}'"
        )),
        [["succeeded", "ols", "regression"]]
    );
    assert_eq!(
        sql("SELECT DISTINCT run_id FROM units_cv"),
        [[new_run.clone()]]
    );
    assert_eq!(
        sql("SELECT DISTINCT run_id FROM units_cv_regions"),
        [[new_run.clone()]]
    );
    let layers = gdal_layers(&file);
    assert_eq!(layers["units_cv"].count, 36);
    assert_eq!(layers["units_cv_regions"].count, 9);
    assert_eq!(layers["fold_regions"].count, 27 + 9);
    assert!(!layers.contains_key("blocks") && !layers.contains_key("units_cv_blocks"));
    assert_eq!(rtree_check(&file, "units_cv"), ("ok".to_string(), 36));
    assert_eq!(rtree_check(&file, "fold_regions"), ("ok".to_string(), 36));
    gdal_validates(&file);
    sqlite_checks(&file);
    // A second run on the upgraded file changes nothing of the old runs.
    ok_json(&workdir.run(&args));
    for (what, upgraded, v1) in old_rows_checks() {
        assert_rows_match(&sorted(sql(&upgraded)), &sorted(scratch.rows(&v1)), what);
    }
    gdal_validates(&file);
}
