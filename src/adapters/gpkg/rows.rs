//! Writing result rows into a GeoPackage, and rewriting a job's layers.
//!
//! Rows come from [`crate::results::rows`] as values in column order; they
//! are inserted [`ROWS_PER_INSERT`] to a statement (measured: about half the
//! cost of one statement per row on a million-row write). A job's layers
//! (`<job>`, `<job>_regions`) are dropped and created afresh for the run they
//! show, then indexed with a packed R-tree.

use std::path::Path;

use rusqlite::Connection;

use super::schema::{self, FeatureTable, TriggerSet};
use super::{blob, quote, sqlite_error};
use crate::adapters::{wkb, Layer, SourceInfo};
use crate::core::folds::Region;
use crate::core::units::{IdKind, UnitId};
use crate::error::Error;
use crate::results::rows::{RowSource, Value};
use crate::results::{TableDef, REGIONS_SUFFIX};

/// Rows per multi-row `INSERT`.
const ROWS_PER_INSERT: usize = 64;

/// Binds one value (SRS -1 for a geometry: see the module doc of `super`).
fn bind(
    statement: &mut rusqlite::Statement<'_>,
    at: usize,
    value: &Value<'_>,
) -> rusqlite::Result<()> {
    match value {
        Value::Null => statement.raw_bind_parameter(at, rusqlite::types::Null),
        Value::Uuid(id) => statement.raw_bind_parameter(at, id.to_string()),
        Value::Str(text) => statement.raw_bind_parameter(at, *text),
        Value::Id(UnitId::Int(number)) => {
            let mut digits = itoa::Buffer::new();
            statement.raw_bind_parameter(at, digits.format(*number))
        }
        Value::Id(UnitId::Text(text)) => statement.raw_bind_parameter(at, text.as_str()),
        Value::Int(number) => statement.raw_bind_parameter(at, number),
        Value::Float(number) => statement.raw_bind_parameter(at, number),
        Value::Geometry(shape) => {
            let body = wkb::multipolygon(shape, None);
            let encoded = blob::encode_wkb(-1, &body)
                .map_err(|e| rusqlite::Error::ToSqlConversionFailure(Box::new(e)))?;
            statement.raw_bind_parameter(at, encoded)
        }
        Value::Timestamp(micros) => statement.raw_bind_parameter(at, iso_timestamp(*micros)),
    }
}

/// Unix microseconds as the GeoPackage DATETIME text `YYYY-MM-DDTHH:MM:SS.SSSZ`.
pub(crate) fn iso_timestamp(micros: i64) -> String {
    let format = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z"
    );
    time::OffsetDateTime::from_unix_timestamp_nanos(i128::from(micros) * 1000)
        .ok()
        .and_then(|t| t.format(&format).ok())
        .unwrap_or_default()
}

/// Inserts rows one at a time into a table, [`ROWS_PER_INSERT`] to a statement.
pub(crate) struct Inserter<'c> {
    conn: &'c Connection,
    path: &'c Path,
    table: &'static TableDef,
    full: rusqlite::Statement<'c>,
    owned: Vec<Vec<crate::results::rows::Owned>>,
    first: Option<i64>,
    written: u64,
}

impl<'c> Inserter<'c> {
    /// An inserter into `table`.
    ///
    /// # Errors
    /// SQLite errors, naming the table.
    pub(crate) fn new(
        conn: &'c Connection,
        path: &'c Path,
        table: &'static TableDef,
    ) -> Result<Inserter<'c>, Error> {
        let full = conn
            .prepare(&insert_sql(table, ROWS_PER_INSERT))
            .map_err(|e| sqlite_error(path, &format!("writing {}", table.name), &e))?;
        Ok(Inserter {
            conn,
            path,
            table,
            full,
            owned: Vec::with_capacity(ROWS_PER_INSERT),
            first: None,
            written: 0,
        })
    }

    /// Adds one row read from another store.
    ///
    /// # Errors
    /// SQLite errors.
    pub(crate) fn push_owned(
        &mut self,
        row: Vec<crate::results::rows::Owned>,
    ) -> Result<(), Error> {
        self.owned.push(row);
        if self.owned.len() == ROWS_PER_INSERT {
            self.flush()?;
        }
        Ok(())
    }

    fn flush(&mut self) -> Result<(), Error> {
        if self.owned.is_empty() {
            return Ok(());
        }
        let width = self.table.columns.len();
        let error = |e: rusqlite::Error| {
            sqlite_error(self.path, &format!("writing {}", self.table.name), &e)
        };
        let n = self.owned.len();
        let mut tail;
        let statement = if n == ROWS_PER_INSERT {
            &mut self.full
        } else {
            tail = self
                .conn
                .prepare(&insert_sql(self.table, n))
                .map_err(error)?;
            &mut tail
        };
        for (k, row) in self.owned.iter().enumerate() {
            for (j, value) in row.iter().enumerate() {
                bind(statement, k * width + j + 1, &value.value()).map_err(error)?;
            }
        }
        statement.raw_execute().map_err(error)?;
        if self.first.is_none() {
            self.first = Some(self.conn.last_insert_rowid() - n as i64 + 1);
        }
        self.written += n as u64;
        self.owned.clear();
        Ok(())
    }

    /// Writes what is pending; returns the rows written.
    ///
    /// # Errors
    /// SQLite errors.
    pub(crate) fn finish(mut self) -> Result<u64, Error> {
        self.flush()?;
        Ok(self.written)
    }
}

/// `INSERT INTO table (columns) VALUES (?, …), …` for `rows` rows.
fn insert_sql(table: &TableDef, rows: usize) -> String {
    let one = format!("({})", vec!["?"; table.columns.len()].join(", "));
    // An inspection and its figures are immutable records under their own
    // id: copying a job's runs into a file that already holds its
    // inspections (a second export) keeps the rows there.
    let verb = match table.owner_column() {
        Some("inspection_id" | "analysis_id") => "INSERT OR IGNORE",
        _ => "INSERT",
    };
    format!(
        "{verb} INTO main.{} ({}) VALUES {}",
        quote(table.name),
        table.column_list(),
        vec![one; rows].join(", ")
    )
}

/// Inserts every row of `rows`; returns the rowid range written (first, last).
///
/// # Errors
/// SQLite errors, naming the table.
pub(crate) fn insert_rows(
    conn: &Connection,
    path: &Path,
    rows: &dyn RowSource<'_>,
) -> Result<(i64, i64), Error> {
    let table = rows.table();
    let width = table.columns.len();
    let count = rows.len();
    let error = |e: rusqlite::Error| sqlite_error(path, &format!("writing {}", table.name), &e);
    let mut values = Vec::with_capacity(width);
    let mut start = 0;
    let mut first = None;
    let mut write_batch =
        |statement: &mut rusqlite::Statement<'_>, start: usize, n: usize| -> Result<(), Error> {
            for k in 0..n {
                rows.fill(start + k, &mut values);
                for (j, value) in values.iter().enumerate() {
                    bind(statement, k * width + j + 1, value).map_err(error)?;
                }
            }
            statement.raw_execute().map_err(error)?;
            Ok(())
        };
    if count >= ROWS_PER_INSERT {
        let mut full = conn
            .prepare(&insert_sql(table, ROWS_PER_INSERT))
            .map_err(error)?;
        while start + ROWS_PER_INSERT <= count {
            write_batch(&mut full, start, ROWS_PER_INSERT)?;
            if first.is_none() {
                first = Some(conn.last_insert_rowid() - ROWS_PER_INSERT as i64 + 1);
            }
            start += ROWS_PER_INSERT;
        }
    }
    if start < count {
        let mut tail = conn
            .prepare(&insert_sql(table, count - start))
            .map_err(error)?;
        write_batch(&mut tail, start, count - start)?;
        if first.is_none() {
            first = Some(conn.last_insert_rowid() - (count - start) as i64 + 1);
        }
    }
    let last = conn.last_insert_rowid();
    Ok((first.unwrap_or(last + 1), last))
}

/// The `gpkg_contents` descriptions that mark a job's layers as geofold's.
pub(crate) fn job_descriptions(job: &str) -> [(String, String); 2] {
    [
        (
            job.to_string(),
            format!(
                "geofold: per-unit held-out errors of the latest successful run of job {job}; key: fid; \
                 residual = observed - predicted; fold: the unit's test fold in repetition 1"
            ),
        ),
        (
            format!("{job}{REGIONS_SUFFIX}"),
            format!(
                "geofold: fold regions (repetition 1) of the latest successful run of job {job}; key: region_id"
            ),
        ),
    ]
}

/// The unit layer of a job: per-unit errors with the unit geometry.
pub(crate) fn unit_layer_table(
    job: &str,
    id_kind: IdKind,
    geometry_type: &str,
    srs_id: i32,
    (z, m): (i64, i64),
) -> FeatureTable {
    let [(name, description), _] = job_descriptions(job);
    let id_type = match id_kind {
        IdKind::Integer => "INTEGER",
        IdKind::Text => "TEXT",
    };
    FeatureTable {
        name,
        key: "fid".into(),
        columns: format!(
            "unit_id {id_type} NOT NULL, run_id TEXT NOT NULL, fold INTEGER, observed DOUBLE, predicted DOUBLE, \
             residual DOUBLE, abs_error DOUBLE, rmse DOUBLE, repetitions INTEGER, loss DOUBLE"
        ),
        geometry_type: geometry_type.to_string(),
        geometry_not_null: false,
        srs_id,
        z,
        m,
        description,
    }
}

/// The regions layer of a job, in the job's distance SRS.
pub(crate) fn region_layer_table(job: &str, srs_id: i32) -> FeatureTable {
    let [_, (name, description)] = job_descriptions(job);
    FeatureTable {
        name,
        key: "region_id".into(),
        columns: "run_id TEXT NOT NULL, fold INTEGER, kind TEXT, label TEXT, units INTEGER".into(),
        geometry_type: "MULTIPOLYGON".into(),
        geometry_not_null: false,
        srs_id,
        z: 0,
        m: 0,
        description,
    }
}

/// Where the unit layer's rows come from: the run's `held_out` rows (one
/// repetition) or `unit_summaries` rows (several), by rowid range.
pub(crate) struct UnitRows {
    /// `held_out` or `unit_summaries`.
    pub table: &'static str,
    /// First and last rowid of the run's rows.
    pub range: (i64, i64),
}

/// Drops the job's layers and makes them afresh for this run; returns the
/// layers and the number of units in the unit layer.
///
/// # Errors
/// SQLite errors.
#[allow(clippy::too_many_arguments)]
pub(crate) fn rewrite_job_layers(
    conn: &Connection,
    path: &Path,
    job: &str,
    info: &SourceInfo,
    source_schema: &str,
    units: UnitRows,
    regions: &[Region],
    triggers: TriggerSet,
) -> Result<(Vec<Layer>, u64), Error> {
    let at = |what: &'static str| move |e: rusqlite::Error| sqlite_error(path, what, &e);
    let [(units_name, _), (regions_name, _)] = job_descriptions(job);
    let (z, m): (i64, i64) = conn
        .query_row(
            &format!(
                "SELECT z, m FROM {}.gpkg_geometry_columns WHERE table_name = ?1",
                quote(source_schema)
            ),
            [&info.qualified_table],
            |row| Ok((row.get(0)?, row.get(1)?)),
        )
        .map_err(at("reading the source geometry column"))?;
    let unit_layer = unit_layer_table(
        job,
        info.id_kind,
        &info.declared_geometry_type,
        info.source_srid,
        (z, m),
    );
    let region_layer = region_layer_table(job, info.srid);
    for name in [&units_name, &regions_name] {
        schema::drop_feature_table(conn, name).map_err(at("replacing the job's layers"))?;
    }
    schema::create_feature_table(conn, &unit_layer).map_err(at("replacing the job's layers"))?;
    let source = format!("{}.{}", quote(source_schema), quote(&info.qualified_table));
    let id = quote(&info.id_column);
    let geom = quote(&info.geom_column);
    let join = match info.id_kind {
        IdKind::Integer => format!("s.{id} = CAST(e.unit_id AS INTEGER)"),
        IdKind::Text => format!("s.{id} = e.unit_id"),
    };
    let values = if units.table == "held_out" {
        "e.fold, e.observed, e.predicted, e.observed - e.predicted, abs(e.observed - e.predicted), \
         abs(e.observed - e.predicted), 1, e.loss"
    } else {
        "e.fold, e.observed, e.mean_predicted, e.observed - e.mean_predicted, e.mae, e.rmse, e.repetitions, \
         e.mean_loss"
    };
    // A skipped row may share its id with a used one: the first row with a
    // geometry is kept (INSERT OR IGNORE on the fid).
    conn.execute(
        &format!(
            "INSERT OR IGNORE INTO main.{layer}
               (fid, unit_id, run_id, fold, observed, predicted, residual, abs_error, rmse, repetitions, loss, geom)
             SELECT e.fid - ?1 + 1, s.{id}, e.run_id, {values}, s.{geom}
             FROM main.{table} e JOIN {source} s ON {join}
             WHERE e.fid BETWEEN ?1 AND ?2 AND s.{geom} IS NOT NULL",
            layer = quote(&units_name),
            table = quote(units.table),
        ),
        [units.range.0, units.range.1],
    )
    .map_err(at("copying the unit geometries"))?;
    schema::index_feature_table(conn, &unit_layer, triggers)
        .map_err(at("indexing the job's layers"))?;
    let written: i64 = conn
        .query_row(
            &format!("SELECT count(*) FROM main.{}", quote(&units_name)),
            [],
            |row| row.get(0),
        )
        .map_err(at("counting the unit layer"))?;
    let location = path.display().to_string();
    let mut layers = vec![Layer {
        name: format!("{location}:{units_name}"),
        key: "fid".into(),
        shows: "per-unit errors of the latest successful run, with each unit's fold".into(),
    }];
    if !regions.is_empty() {
        schema::create_feature_table(conn, &region_layer)
            .map_err(at("replacing the job's layers"))?;
        let run_id: String = conn
            .query_row(
                &format!(
                    "SELECT run_id FROM main.{} WHERE fid = ?1",
                    quote(units.table)
                ),
                [units.range.0],
                |row| row.get(0),
            )
            .map_err(at("writing the job's regions layer"))?;
        let mut insert = conn
            .prepare(&format!(
                "INSERT INTO main.{} (run_id, fold, kind, label, units, geom) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                quote(&regions_name)
            ))
            .map_err(at("writing the job's regions layer"))?;
        for region in regions {
            let body = wkb::multipolygon(&region.geometry, None);
            let geometry = blob::encode_wkb(info.srid, &body)
                .map_err(|e| Error::Internal(format!("encoding a region: {e}")))?;
            insert
                .execute(rusqlite::params![
                    run_id,
                    i64::from(region.fold) + 1,
                    region.kind,
                    region.label,
                    i64::from(region.units),
                    geometry
                ])
                .map_err(at("writing the job's regions layer"))?;
        }
        schema::index_feature_table(conn, &region_layer, triggers)
            .map_err(at("indexing the job's layers"))?;
        layers.push(Layer {
            name: format!("{location}:{regions_name}"),
            key: "region_id".into(),
            shows: "fold regions of that run, coloured by fold".into(),
        });
    }
    Ok((layers, written as u64))
}
