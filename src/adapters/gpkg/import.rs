//! Copying runs from another store into a GeoPackage (what `geofold export`
//! writes): the runs' rows of every results table, and the job's two map
//! layers with the unit geometries the other store supplies.
//!
//! Everything is written in one transaction; a new file is built under a
//! temporary name and renamed into place at the end, so a failure leaves no
//! trace. Run ids are UUIDs, so imported runs never collide with local ones;
//! a run already in the file is refused.

use std::path::Path;

use geo_types::MultiPolygon;
use rusqlite::{params, Connection, TransactionBehavior};

use super::container::NewFile;
use super::rows::{region_layer_table, unit_layer_table, Inserter};
use super::schema::{self, Srs, TriggerSet};
use super::{blob, check_geopackage, open_file, quote, sqlite_error, tables};
use crate::adapters::{add_count, wkb};
use crate::core::units::IdKind;
use crate::error::Error;
use crate::results::rows::Owned;
use crate::results::TableDef;

/// One row of a job's unit layer.
pub struct UnitLayerRow {
    /// The source id.
    pub unit_id: Owned,
    /// The run.
    pub run_id: String,
    /// Fold in repetition 1.
    pub fold: i64,
    /// Observed target.
    pub observed: f64,
    /// Mean held-out prediction.
    pub predicted: f64,
    /// Residual.
    pub residual: f64,
    /// Mean absolute error.
    pub abs_error: f64,
    /// RMSE over repetitions.
    pub rmse: f64,
    /// Repetitions.
    pub repetitions: i64,
    /// Mean log-loss or Poisson deviance term (binary and count models).
    pub loss: Option<f64>,
    /// The unit's geometry as ISO WKB, when the source still has it.
    pub geometry: Option<Vec<u8>>,
}

/// One region of a job's regions layer.
pub struct RegionLayerRow {
    /// The run.
    pub run_id: String,
    /// Fold.
    pub fold: i64,
    /// Kind.
    pub kind: String,
    /// Label.
    pub label: String,
    /// Units in it.
    pub units: i64,
    /// Outline.
    pub geometry: MultiPolygon<f64>,
}

/// What the unit layer is made of.
pub struct UnitLayer {
    /// Kind of the source id.
    pub id_kind: IdKind,
    /// Geometry type name (`MULTIPOLYGON`, …).
    pub geometry_type: String,
    /// SRS of the unit geometries.
    pub srs_id: i32,
}

/// The open transaction rows are copied into.
pub struct ImportSink<'c> {
    conn: &'c Connection,
    path: &'c Path,
    triggers: TriggerSet,
    current: Option<(&'static TableDef, Inserter<'c>)>,
    counts: Vec<(String, u64)>,
}

impl<'c> ImportSink<'c> {
    fn close_table(&mut self) -> Result<(), Error> {
        if let Some((table, inserter)) = self.current.take() {
            let written = inserter.finish()?;
            add_count(&mut self.counts, table.name, written);
        }
        Ok(())
    }

    /// Starts copying rows of `table`.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn table(&mut self, table: &'static TableDef) -> Result<(), Error> {
        self.close_table()?;
        self.current = Some((table, Inserter::new(self.conn, self.path, table)?));
        Ok(())
    }

    /// Copies one row of the current table (values in its column order).
    ///
    /// # Errors
    /// SQLite errors; a run already in the file.
    pub fn row(&mut self, row: Vec<Owned>) -> Result<(), Error> {
        match &mut self.current {
            Some((_, inserter)) => inserter.push_owned(row),
            None => Err(Error::Internal("a row before its table".into())),
        }
    }

    /// Writes the job's unit layer from `rows` (fids 1.. in the order given).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn unit_layer(
        &mut self,
        job: &str,
        layer: &UnitLayer,
        rows: impl IntoIterator<Item = UnitLayerRow>,
    ) -> Result<(), Error> {
        self.close_table()?;
        let at = |e: rusqlite::Error| sqlite_error(self.path, "writing the job's unit layer", &e);
        let table = unit_layer_table(
            job,
            layer.id_kind,
            &layer.geometry_type,
            layer.srs_id,
            (0, 0),
        );
        schema::drop_feature_table(self.conn, &table.name).map_err(at)?;
        schema::create_feature_table(self.conn, &table).map_err(at)?;
        let mut insert = self
            .conn
            .prepare(&format!(
                "INSERT INTO main.{} (fid, unit_id, run_id, fold, observed, predicted, residual, abs_error, rmse,
                    repetitions, loss, geom) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
                quote(&table.name)
            ))
            .map_err(at)?;
        let mut written = 0u64;
        for (index, row) in rows.into_iter().enumerate() {
            let geometry = match &row.geometry {
                Some(bytes) => Some(
                    blob::encode_wkb(layer.srs_id, bytes)
                        .map_err(|e| Error::Internal(format!("encoding a unit geometry: {e}")))?,
                ),
                None => None,
            };
            let id: rusqlite::types::Value = match row.unit_id {
                Owned::Int(value) => value.into(),
                Owned::Text(text) => text.into(),
                _ => rusqlite::types::Value::Null,
            };
            insert
                .execute(params![
                    index as i64 + 1,
                    id,
                    row.run_id,
                    row.fold,
                    row.observed,
                    row.predicted,
                    row.residual,
                    row.abs_error,
                    row.rmse,
                    row.repetitions,
                    row.loss,
                    geometry
                ])
                .map_err(at)?;
            written += 1;
        }
        drop(insert);
        schema::index_feature_table(self.conn, &table, self.triggers).map_err(at)?;
        add_count(&mut self.counts, &table.name, written);
        Ok(())
    }

    /// Writes the job's regions layer in SRS `srs_id`.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn region_layer(
        &mut self,
        job: &str,
        srs_id: i32,
        rows: &[RegionLayerRow],
    ) -> Result<(), Error> {
        self.close_table()?;
        let at =
            |e: rusqlite::Error| sqlite_error(self.path, "writing the job's regions layer", &e);
        let table = region_layer_table(job, srs_id);
        schema::drop_feature_table(self.conn, &table.name).map_err(at)?;
        if rows.is_empty() {
            return Ok(());
        }
        schema::create_feature_table(self.conn, &table).map_err(at)?;
        let mut insert = self
            .conn
            .prepare(&format!(
                "INSERT INTO main.{} (run_id, fold, kind, label, units, geom) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                quote(&table.name)
            ))
            .map_err(at)?;
        for row in rows {
            let geometry = blob::encode_wkb(srs_id, &wkb::multipolygon(&row.geometry, None))
                .map_err(|e| Error::Internal(format!("encoding a region: {e}")))?;
            insert
                .execute(params![
                    row.run_id, row.fold, row.kind, row.label, row.units, geometry
                ])
                .map_err(at)?;
        }
        drop(insert);
        schema::index_feature_table(self.conn, &table, self.triggers).map_err(at)?;
        add_count(&mut self.counts, &table.name, rows.len() as u64);
        Ok(())
    }
}

/// Copies runs into the GeoPackage at `path` (created when missing): adds
/// the SRS rows `srs`, creates or upgrades the results tables, refuses runs
/// already there, then lets `fill` copy rows through an [`ImportSink`], all in
/// one transaction. Returns the rows written per table.
///
/// # Errors
/// A run already in the file (65); file and SQLite errors.
pub fn import(
    path: &Path,
    srs: &[Srs],
    run_ids: &[String],
    fill: impl FnOnce(&mut ImportSink<'_>) -> Result<(), Error>,
) -> Result<Vec<(String, u64)>, Error> {
    let (new_file, mut conn) = if path.exists() {
        let conn = open_file(path, true)?;
        check_geopackage(&conn, path)?;
        (None, conn)
    } else {
        let (file, conn) = NewFile::create(path)?;
        schema::create_container(&conn)
            .map_err(|e| sqlite_error(path, "creating the GeoPackage", &e))?;
        (Some(file), conn)
    };
    let triggers = TriggerSet::for_user_version(
        conn.query_row("PRAGMA user_version", [], |row| row.get(0))
            .map_err(|e| sqlite_error(path, "reading user_version", &e))?,
    );
    let counts = {
        let tx = conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(|e| sqlite_error(path, "starting the transaction", &e))?;
        for row in srs {
            schema::ensure_srs(&tx, row)
                .map_err(|e| sqlite_error(path, "adding the SRS row", &e))?;
        }
        tables::prepare(&tx, path, triggers)?;
        for run_id in run_ids {
            let already: i64 = tx
                .query_row(
                    "SELECT count(*) FROM runs WHERE run_id = ?1",
                    [run_id],
                    |row| row.get(0),
                )
                .map_err(|e| sqlite_error(path, "checking the runs", &e))?;
            if already > 0 {
                return Err(Error::Store {
                    store: path.display().to_string(),
                    problem: format!("run {run_id} is already in it; nothing was written"),
                });
            }
        }
        let mut sink = ImportSink {
            conn: &tx,
            path,
            triggers,
            current: None,
            counts: Vec::new(),
        };
        fill(&mut sink)?;
        sink.close_table()?;
        let counts = std::mem::take(&mut sink.counts);
        drop(sink);
        schema::refresh_extent(&tx, "fold_regions")
            .map_err(|e| sqlite_error(path, "updating the extent of fold_regions", &e))?;
        tx.commit()
            .map_err(|e| sqlite_error(path, "committing", &e))?;
        counts
    };
    if let Some(file) = new_file {
        file.finish(conn)?;
    }
    Ok(counts)
}
