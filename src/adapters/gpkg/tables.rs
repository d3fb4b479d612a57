//! The results tables in a GeoPackage: created from their one definition in
//! [`crate::results`], upgraded in place from earlier versions (runs kept),
//! and the derived views (not registered in `gpkg_contents`, see `rebuild_views`).
//!
//! Attribute tables are registered in `gpkg_contents` with
//! `data_type = 'attributes'` (clause 2.4); `fold_regions` is a feature table
//! with an R-tree (its geometries carry SRS -1, see the module doc of
//! [`super`]). Per-unit tables carry no index (SQLite has no BRIN, and a
//! B-tree on `run_id` would double the time to write a million-unit run): a
//! run's rows are contiguous in `fid` order.

use std::path::Path;

use geozero::ToGeo;
use rusqlite::{params, Connection};

use super::schema::{self, FeatureTable, TriggerSet};
use super::{blob, quote, sqlite_error};
use crate::adapters::wkb;
use crate::error::Error;
use crate::results::ddl::{column_definitions, create_table, Dialect};
use crate::results::{views, ColumnType, TableDef, FOLD_REGIONS, TABLES};

/// The version of the results tables this geofold writes, as SQLite stores it.
pub const RESULTS_VERSION: i64 = crate::results::RESULTS_VERSION as i64;

/// The feature table a geometry results table becomes.
pub fn feature_table(table: &TableDef) -> FeatureTable {
    let columns: Vec<String> = column_definitions(table, Dialect::Gpkg, "")
        .into_iter()
        .zip(table.columns)
        .filter(|(_, column)| column.ty != ColumnType::Geometry)
        .map(|(definition, _)| definition)
        .collect();
    let key = match table.keying {
        crate::results::Keying::Serial(key) => key,
        _ => "fid",
    };
    FeatureTable {
        name: table.name.to_string(),
        key: key.to_string(),
        columns: columns.join(", "),
        geometry_type: "MULTIPOLYGON".into(),
        geometry_not_null: true,
        srs_id: -1,
        z: 0,
        m: 0,
        description: table.about.to_string(),
    }
}

fn register_attributes(conn: &Connection, name: &str, about: &str) -> rusqlite::Result<()> {
    conn.execute(
        "INSERT INTO gpkg_contents (table_name, data_type, identifier, description)
         VALUES (?1, 'attributes', ?1, ?2)",
        params![name, about],
    )?;
    Ok(())
}

/// Creates one results table with its registration.
fn create(conn: &Connection, table: &TableDef, triggers: TriggerSet) -> rusqlite::Result<()> {
    if table.has_geometry() {
        let feature = feature_table(table);
        schema::create_feature_table(conn, &feature)?;
        schema::index_feature_table(conn, &feature, triggers)?;
        conn.execute_batch(&format!(
            "CREATE INDEX {} ON {} (run_id, repetition);",
            quote(&format!("{}_run_idx", table.name)),
            quote(table.name)
        ))
    } else {
        conn.execute_batch(&create_table(table, Dialect::Gpkg, ""))?;
        register_attributes(conn, table.name, table.about)
    }
}

/// Creates or upgrades the results tables of the file (in the caller's
/// transaction) and rebuilds the views when their definitions changed.
///
/// # Errors
/// [`Error::Store`] for tables named like geofold's that geofold did not
/// make, or a newer version; SQLite errors.
pub fn prepare(conn: &Connection, path: &Path, triggers: TriggerSet) -> Result<(), Error> {
    let store = path.display().to_string();
    let error = |e: rusqlite::Error| sqlite_error(path, "preparing the results tables", &e);
    if !schema::has_table(conn, "main", "gpkg_extensions").map_err(error)? {
        schema::create_extensions(conn).map_err(error)?;
    }
    if !schema::has_table(conn, "main", "schema_version").map_err(error)? {
        for name in crate::results::reserved_names() {
            if schema::has_table(conn, "main", name).map_err(error)? {
                return Err(Error::Store {
                    store,
                    problem: format!(
                        "it has a table {name} that geofold did not make; write the results to another file"
                    ),
                });
            }
        }
        conn.execute_batch(
            "CREATE TABLE schema_version (
                 version      INTEGER PRIMARY KEY,
                 applied_at   DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ', 'now')),
                 tool_version TEXT NOT NULL);
             CREATE TABLE store_settings (
                 fid   INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
                 key   TEXT NOT NULL UNIQUE,
                 value TEXT NOT NULL);",
        )
        .map_err(error)?;
        register_attributes(
            conn,
            "schema_version",
            "geofold: versions of the results tables applied to this file",
        )
        .map_err(error)?;
        register_attributes(
            conn,
            "store_settings",
            "geofold: settings of these results (fingerprint of the views)",
        )
        .map_err(error)?;
    }
    let current: i64 = conn
        .query_row(
            "SELECT coalesce(max(version), 0) FROM schema_version",
            [],
            |row| row.get(0),
        )
        .map_err(error)?;
    if current > RESULTS_VERSION {
        return Err(Error::Store {
            store,
            problem: format!(
                "its results tables are version {current}, newer than this geofold knows ({RESULTS_VERSION}); upgrade geofold"
            ),
        });
    }
    // Versions after 2 only add tables, so every table not there yet is made,
    // on every run (a file made by an earlier build of this version gains the
    // tables it lacks).
    for table in TABLES {
        if !schema::has_table(conn, "main", table.name).map_err(error)? {
            create(conn, table, triggers).map_err(error)?;
        }
    }
    if current < RESULTS_VERSION {
        if current == 1 {
            upgrade_from_v1(conn, path)?;
        }
        conn.execute(
            "INSERT INTO schema_version (version, tool_version) VALUES (?1, ?2)",
            params![RESULTS_VERSION, env!("CARGO_PKG_VERSION")],
        )
        .map_err(error)?;
    }
    rebuild_views(conn, path)
}

/// The derived views, afresh when their definitions changed.
fn rebuild_views(conn: &Connection, path: &Path) -> Result<(), Error> {
    let error = |e: rusqlite::Error| sqlite_error(path, "creating the results views", &e);
    let fingerprint = views::fingerprint();
    let recorded: Option<String> = conn
        .query_row(
            "SELECT value FROM store_settings WHERE key = 'views'",
            [],
            |row| row.get(0),
        )
        .ok();
    if recorded.as_deref() == Some(fingerprint.as_str()) {
        return Ok(());
    }
    // Not registered: see the doc of `views::definitions`.
    for (name, _, select) in views::definitions("") {
        conn.execute_batch(&format!(
            "DROP VIEW IF EXISTS {name}; CREATE VIEW {name} AS {select};",
            name = quote(name)
        ))
        .map_err(error)?;
        conn.execute("DELETE FROM gpkg_contents WHERE table_name = ?1", [name])
            .map_err(error)?;
    }
    conn.execute(
        "INSERT INTO store_settings (key, value) VALUES ('views', ?1)
         ON CONFLICT (key) DO UPDATE SET value = excluded.value",
        [&fingerprint],
    )
    .map_err(error)?;
    Ok(())
}

/// Version 1 → 2, as `sql/002_from_v1.sql` does for PostGIS: every run kept,
/// the wide tables moved into the lean ones and dropped, the blocks moved to
/// `fold_regions`, each job's `<job>_blocks` layer dropped (its
/// `<job>_regions` comes with the job's next run).
fn upgrade_from_v1(conn: &Connection, path: &Path) -> Result<(), Error> {
    let error =
        |e: rusqlite::Error| sqlite_error(path, "upgrading the results tables from version 1", &e);
    conn.execute_batch(
        "ALTER TABLE runs ADD COLUMN model TEXT NOT NULL DEFAULT 'ols';
         ALTER TABLE runs ADD COLUMN family TEXT NOT NULL DEFAULT 'regression';
         ALTER TABLE runs ADD COLUMN session TEXT;
         ALTER TABLE runs ADD COLUMN pinned BOOLEAN NOT NULL DEFAULT 0;
         UPDATE runs SET model = coalesce(json_extract(parameters, '$.model.model'), 'ols');",
    )
    .map_err(error)?;
    let scores = ["rmse", "mae", "bias", "r2"];
    let mut fold_values = Vec::new();
    let mut run_values =
        vec!["SELECT run_id, 'n', 'pooled', n_predictions FROM run_scores".to_string()];
    for score in scores {
        fold_values.push(format!(
            "SELECT run_id, repetition, fold, '{score}', {score} FROM fold_scores"
        ));
        run_values.push(format!(
            "SELECT run_id, '{score}', 'pooled', {score} FROM run_scores"
        ));
        for statistic in ["fold_mean", "fold_sd"] {
            run_values.push(format!(
                "SELECT run_id, '{score}', '{statistic}', {score}_{statistic} FROM run_scores"
            ));
        }
    }
    conn.execute_batch(&format!(
        "INSERT INTO held_out (run_id, repetition, fold, observed, predicted, unit_id)
             SELECT run_id, repetition, fold, observed, predicted, CAST(unit_id AS TEXT) FROM predictions ORDER BY fid;
         INSERT INTO unit_summaries (run_id, fold, observed, mean_predicted, mae, rmse, repetitions, unit_id)
             SELECT e.run_id, p.fold, e.observed, e.predicted, e.abs_error, e.rmse, e.repetitions, CAST(e.unit_id AS TEXT)
             FROM unit_errors e JOIN predictions p
               ON p.run_id = e.run_id AND p.unit_id = e.unit_id AND p.repetition = 1
             WHERE e.repetitions > 1 ORDER BY e.fid;
         INSERT INTO folds (run_id, repetition, fold, n_train, n_test, n_excluded)
             SELECT run_id, repetition, fold, n_train, n_test, 0 FROM fold_scores ORDER BY fid;
         INSERT INTO fold_score_values (run_id, repetition, fold, score, value) {};
         INSERT INTO run_score_values (run_id, score, statistic, value) {};",
        fold_values.join(" UNION ALL "),
        run_values.join(" UNION ALL ")
    ))
    .map_err(error)?;
    // Blocks become fold regions: multipolygons with SRS -1 and their SRID in a column.
    type Block = (String, i64, i64, i64, i64, i64, Vec<u8>);
    let blocks: Vec<Block> = {
        let mut statement = conn
            .prepare(
                "SELECT run_id, repetition, fold, block_col, block_row, n_units, geom FROM blocks ORDER BY block_key",
            )
            .map_err(error)?;
        let rows = statement
            .query_map([], |row| {
                Ok((
                    row.get(0)?,
                    row.get(1)?,
                    row.get(2)?,
                    row.get(3)?,
                    row.get(4)?,
                    row.get(5)?,
                    row.get(6)?,
                ))
            })
            .map_err(error)?;
        rows.collect::<Result<_, _>>().map_err(error)?
    };
    {
        let mut insert = conn
            .prepare(&format!(
                "INSERT INTO {} (run_id, repetition, fold, kind, label, units, srid, geom)
                 VALUES (?1, ?2, ?3, 'block', ?4, ?5, ?6, ?7)",
                FOLD_REGIONS.name
            ))
            .map_err(error)?;
        for (run_id, repetition, fold, col, row, units, geometry) in blocks {
            let header = blob::check(&geometry).map_err(|e| {
                Error::Internal(format!(
                    "{}: a block of run {run_id} cannot be read: {e}",
                    path.display()
                ))
            })?;
            let polygon = match geozero::wkb::Wkb(&geometry[header.wkb_offset..]).to_geo() {
                Ok(geo_types::Geometry::Polygon(polygon)) => polygon,
                _ => continue,
            };
            let shape = geo_types::MultiPolygon::new(vec![polygon]);
            let body = wkb::multipolygon(&shape, None);
            let region = blob::encode_wkb(-1, &body)
                .map_err(|e| Error::Internal(format!("encoding a region: {e}")))?;
            insert
                .execute(params![
                    run_id,
                    repetition,
                    fold,
                    format!("block {col},{row}"),
                    units,
                    header.srs_id,
                    region
                ])
                .map_err(error)?;
        }
    }
    schema::refresh_extent(conn, FOLD_REGIONS.name).map_err(error)?;
    let jobs: Vec<String> = {
        let mut statement = conn
            .prepare("SELECT DISTINCT job FROM runs")
            .map_err(error)?;
        let rows = statement.query_map([], |row| row.get(0)).map_err(error)?;
        rows.collect::<Result<_, _>>().map_err(error)?
    };
    for job in jobs {
        let layer = format!("{job}_blocks");
        let ours: bool = conn
            .query_row(
                "SELECT count(*) FROM gpkg_contents WHERE table_name = ?1 AND description LIKE 'geofold: %'",
                [&layer],
                |row| row.get::<_, i64>(0),
            )
            .map_err(error)?
            > 0;
        if ours {
            schema::drop_feature_table(conn, &layer).map_err(error)?;
        }
    }
    conn.execute_batch(
        "DROP VIEW fold_members;
         DROP TABLE predictions; DROP TABLE unit_errors; DROP TABLE fold_scores; DROP TABLE run_scores;
         DELETE FROM gpkg_contents WHERE table_name IN ('fold_members', 'predictions', 'unit_errors', 'fold_scores', 'run_scores');
         DELETE FROM store_settings WHERE key IN ('unit_id_type', 'block_srid');",
    )
    .map_err(error)?;
    schema::drop_feature_table(conn, "blocks").map_err(error)?;
    Ok(())
}
