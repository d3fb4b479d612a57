//! Opening and streaming a GeoPackage feature table.
//!
//! Opening checks, before anything is written anywhere, that the file is a
//! GeoPackage, that the layer is a registered feature table with a geometry
//! column (`gpkg_contents`, `gpkg_geometry_columns`) whose SRS is in
//! `gpkg_spatial_ref_sys`, that every named column exists (all missing ones
//! are listed) with a usable declared type. Reading then streams the rows,
//! checking each as it comes: SQLite is dynamically typed, so a TEXT value in
//! a REAL column, a NULL id, a blob that is not GeoPackageBinary, a truncated
//! WKB or a blob with another SRS id (Requirement 33) is found and reported
//! with its row id, every problem of the layer at once (the rest of the layer
//! is still checked). The pipeline reads before it writes anything, so such a
//! layer leaves every file as it was. Good rows go to the collector, each WKB
//! body decoded with geozero; no geometry is kept.
//!
//! # Kind of SRS
//! `srs_id` 0 ("undefined geographic") and -1 ("undefined Cartesian"),
//! clause 1.1.2.1.2, are an undefined CRS: coordinates of no known unit. An
//! SRS counts as longitude/latitude when its definition is a WKT
//! `GEOGCS`/`GEOGCRS` or it is an EPSG geographic 2D code in
//! [`GEOGRAPHIC_EPSG`]. There is no PostGIS here to transform, so the
//! pipeline refuses distances in metres on such a layer and says how to
//! reproject it (or, for an undefined CRS, to assign one).

use std::path::{Path, PathBuf};

use geo_types::{Geometry, GeometryCollection};
use geozero::ToGeo;
use rusqlite::types::ValueRef;
use rusqlite::{Connection, OptionalExtension, Row};

use super::schema::Srs;
use super::{blob, check_geopackage, file_error, open_file, quote, sqlite_error};
use crate::adapters::{
    check_value_kinds, resolve_named_columns, suggest, ColumnSpec, CrsKind, NameMatch,
    NamedColumns, Source, SourceInfo, ValueKind,
};
use crate::core::diagnostics::contiguity::Contiguity;
use crate::core::units::{Dataset, Extras, IdKind, RawGeometry, UnitCollector, UnitId};
use crate::error::{Error, FileProblem, Location};

mod layers;
mod values;
use layers::*;
pub(crate) use layers::{choose_layer, srs_row};
use values::*;

/// EPSG codes of common geographic 2D CRSs (longitude/latitude in degrees):
/// WGS 84, ETRS89, NAD83, NAD27, GDA94, GDA2020, NZGD2000, NAD83(CSRS),
/// SIRGAS 2000, CGCS2000, NAD83(2011), JGD2000, JGD2011, ED50, OSGB36.
/// Common practice, no source; definitions starting with `GEOGCS` catch the rest.
pub const GEOGRAPHIC_EPSG: &[i32] = &[
    4326, 4258, 4269, 4267, 4283, 7844, 4167, 4617, 4674, 4490, 6318, 4612, 6668, 4230, 4277,
];

/// Declared types SQLite and the GeoPackage use for integers.
const INTEGER_TYPES: &[&str] = &[
    "INTEGER",
    "INT",
    "TINYINT",
    "SMALLINT",
    "MEDIUMINT",
    "BIGINT",
];

/// Declared types that hold other numbers (GeoPackage Table 1 plus SQLite's NUMERIC family).
const REAL_TYPES: &[&str] = &[
    "BOOLEAN",
    "FLOAT",
    "DOUBLE",
    "DOUBLE PRECISION",
    "REAL",
    "NUMERIC",
    "DECIMAL",
];

/// At most this many row problems are kept; the rest are counted.
const MAX_PROBLEMS: usize = 1000;

/// A GeoPackage layer opened as a source.
pub struct GpkgSource {
    path: PathBuf,
    info: SourceInfo,
    select: String,
}

struct TableColumn {
    name: String,
    declared: String,
    primary_key: bool,
}

fn base_type(declared: &str) -> String {
    declared
        .split('(')
        .next()
        .unwrap_or("")
        .trim()
        .to_ascii_uppercase()
}

impl GpkgSource {
    /// Opens `layer` of the GeoPackage at `path` (the only feature layer when
    /// `layer` is None). The id defaults to the layer's INTEGER PRIMARY KEY,
    /// the geometry to the column registered in `gpkg_geometry_columns`.
    ///
    /// # Errors
    /// Exit 66 for a missing file, layer or column; 65 for a file that is not a
    /// GeoPackage, an unknown SRS id, columns of the wrong type and bad rows
    /// (every one listed with its row id); 64 when the layer must be named;
    /// 75 when another program holds a lock for longer than the busy timeout.
    pub fn open(
        path: &Path,
        layer: Option<&str>,
        columns: &ColumnSpec,
    ) -> Result<GpkgSource, Error> {
        let conn = open_file(path, false)?;
        check_geopackage(&conn, path)?;
        let layer = choose_layer(&conn, path, layer)?;
        let display = format!("{}:{layer}", path.display());
        let registered: Option<(String, String, i64)> = conn
            .query_row(
                "SELECT column_name, geometry_type_name, srs_id FROM gpkg_geometry_columns WHERE table_name = ?1",
                [&layer],
                |row| Ok((row.get(0)?, row.get(1)?, row.get(2)?)),
            )
            .optional()
            .map_err(|e| sqlite_error(path, "reading gpkg_geometry_columns", &e))?;
        let Some((registered_geom, geometry_type, srs_id)) = registered else {
            return Err(file_error(
                path,
                format!("layer {layer} has no row in gpkg_geometry_columns, so it has no geometry column"),
                FileProblem::BadContent,
            ));
        };
        let srs = srs_row(&conn, path, srs_id)?.ok_or_else(|| {
            file_error(
                path,
                format!(
                    "layer {layer}: unknown SRS id {srs_id}: gpkg_geometry_columns names it but gpkg_spatial_ref_sys has no such srs_id"
                ),
                FileProblem::BadContent,
            )
        })?;
        let table_columns = table_columns(&conn, path, &layer)?;
        let id_column = match &columns.id {
            Some(id) => id.clone(),
            None => {
                let keys: Vec<&TableColumn> =
                    table_columns.iter().filter(|c| c.primary_key).collect();
                match keys.as_slice() {
                    [only] if INTEGER_TYPES.contains(&base_type(&only.declared).as_str()) => {
                        only.name.clone()
                    }
                    _ => {
                        return Err(Error::Usage(format!(
                        "layer {display} has no INTEGER PRIMARY KEY: name the id column with --id"
                    )))
                    }
                }
            }
        };
        let geom_column = columns.geom.clone().unwrap_or(registered_geom.clone());
        let names: Vec<String> = table_columns.iter().map(|c| c.name.clone()).collect();
        let NamedColumns {
            id: id_column,
            geom: geom_column,
            target: target_column,
            features: feature_columns,
            group: group_column,
            exposure: exposure_column,
        } = resolve_named_columns(
            &id_column,
            &geom_column,
            columns,
            &names,
            NameMatch::Sqlite,
            &format!("layer {layer} of {}", path.display()),
        )?;
        let find = |name: &str| table_columns.iter().find(|c| c.name == name);
        let location = |column: &str| Location {
            table: display.clone(),
            column: Some(column.to_string()),
            row_id: None,
        };
        let mut problems = Vec::new();
        if !geom_column.eq_ignore_ascii_case(&registered_geom) {
            problems.push((
                location(&geom_column),
                format!(
                    "not the layer's geometry column: gpkg_geometry_columns registers {registered_geom}"
                ),
            ));
        }
        let id_type = find(&id_column)
            .map(|c| base_type(&c.declared))
            .unwrap_or_default();
        let id_kind = if INTEGER_TYPES.contains(&id_type.as_str()) {
            IdKind::Integer
        } else if id_type == "TEXT" {
            IdKind::Text
        } else {
            problems.push((
                location(&id_column),
                format!("id column has type {id_type:?}; it must be INTEGER or TEXT"),
            ));
            IdKind::Integer
        };
        // A TEXT feature is categorical; the target and exposure must be numbers.
        let text_features = check_value_kinds(
            &target_column,
            &feature_columns,
            exposure_column.as_deref(),
            |name| {
                find(name).map(|c| {
                    let declared = base_type(&c.declared);
                    if INTEGER_TYPES.contains(&declared.as_str())
                        || REAL_TYPES.contains(&declared.as_str())
                    {
                        ValueKind::Number
                    } else if is_text(&c.declared) {
                        ValueKind::Text
                    } else {
                        ValueKind::Other
                    }
                })
            },
            |name, _| {
                let declared = find(name).map_or("", |c| c.declared.as_str());
                (
                    location(name),
                    format!(
                        "column has type {declared:?}; it must be numeric (INTEGER, REAL, DOUBLE…)"
                    ),
                )
            },
            &mut problems,
        );
        if let Some(group) = group_column.as_deref().and_then(find) {
            let declared = base_type(&group.declared);
            if !INTEGER_TYPES.contains(&declared.as_str()) && declared != "TEXT" {
                problems.push((
                    location(&group.name),
                    format!(
                        "group column has type {:?}; it must be INTEGER or TEXT (a code such as a district \
                         number or name), so pick another --group-column or add a coded column",
                        group.declared
                    ),
                ));
            }
        }
        if !problems.is_empty() {
            return Err(Error::Input { problems });
        }
        let numbers: Vec<String> = std::iter::once(&target_column)
            .chain(feature_columns.iter())
            .map(|name| quote(name))
            .collect();
        let extras: String = group_column
            .iter()
            .chain(exposure_column.iter())
            .map(|name| format!(", {}", quote(name)))
            .collect();
        let select = format!(
            "SELECT {}, {}, {}, rowid{extras} FROM {}",
            quote(&id_column),
            quote(&geom_column),
            numbers.join(", "),
            quote(&layer)
        );
        let srs_id = i32::try_from(srs_id).map_err(|_| {
            file_error(
                path,
                format!("layer {layer}: SRS id {srs_id} is out of range"),
                FileProblem::BadContent,
            )
        })?;
        let crs = crs_kind(&srs);
        let srs_name = if srs.organization.eq_ignore_ascii_case("NONE") {
            srs.name.clone()
        } else {
            format!(
                "{}:{}",
                srs.organization.to_ascii_uppercase(),
                srs.organization_id
            )
        };
        let id_type = match id_kind {
            IdKind::Integer => "INTEGER",
            IdKind::Text => "TEXT",
        }
        .to_string();
        let info = SourceInfo {
            store: "gpkg",
            table: display,
            qualified_table: layer,
            file: Some(path.to_path_buf()),
            id_column,
            geom_column,
            target_column,
            feature_columns,
            text_features,
            group_column,
            exposure_column,
            id_kind,
            id_type,
            source_srid: srs_id,
            srid: srs_id,
            crs,
            length_unit: crate::adapters::wkb::wkt_length_unit(&srs.definition),
            declared_geometry_type: geometry_type.to_ascii_uppercase(),
            srs_wkt: (!srs.definition.eq_ignore_ascii_case("undefined"))
                .then(|| srs.definition.clone()),
            srs_name: Some(srs_name),
        };
        Ok(GpkgSource {
            path: path.to_path_buf(),
            info,
            select,
        })
    }
}

/// Steps through the rows of `select` on `conn`.
fn each_row(
    conn: &Connection,
    path: &Path,
    info: &SourceInfo,
    select: &str,
    mut on_row: impl FnMut(&Row<'_>) -> Result<(), Error>,
) -> Result<(), Error> {
    let action = format!("reading layer {}", info.qualified_table);
    let error = |e: rusqlite::Error| sqlite_error(path, &action, &e);
    let mut statement = conn.prepare(select).map_err(error)?;
    let mut rows = statement.query([]).map_err(error)?;
    while let Some(row) = rows.next().map_err(error)? {
        on_row(row)?;
    }
    Ok(())
}

/// Rows handed from the thread that steps through SQLite to the one that
/// decodes: ids, numbers and geometry bytes, copied out of SQLite's pages.
#[derive(Default)]
struct Batch {
    ids: Vec<UnitId>,
    /// `1 + n_features` values per row: the target, then the features.
    numbers: Vec<Option<f64>>,
    /// Per row, the byte range of its blob in `bytes` (None for NULL).
    geometries: Vec<Option<(usize, usize)>>,
    bytes: Vec<u8>,
    /// Per row, the values of the extra columns (group, exposure).
    extras: Vec<Extras>,
}

/// Rows per batch.
const BATCH_ROWS: usize = 4096;

impl Source for GpkgSource {
    fn info(&self) -> &SourceInfo {
        &self.info
    }

    /// Reads the geometries of the dataset's units again and finds their
    /// neighbours in geofold (the GeoPackage has no spatial SQL).
    fn contiguity(&mut self, data: &Dataset, rule: Contiguity) -> Result<Vec<(u32, u32)>, Error> {
        let info = &self.info;
        let conn = open_file(&self.path, false)?;
        let reader = RowReader::new(info);
        let mut geometries: Vec<Option<Geometry<f64>>> = vec![None; data.len()];
        let select = format!(
            "SELECT {}, {} FROM {}",
            quote(&info.id_column),
            quote(&info.geom_column),
            quote(&info.qualified_table)
        );
        each_row(&conn, &self.path, info, &select, |row| {
            let get = |index: usize| {
                row.get_ref(index).map_err(|e| {
                    sqlite_error(
                        &self.path,
                        &format!("reading layer {}", info.qualified_table),
                        &e,
                    )
                })
            };
            let Ok(id) = reader.id(get(0)?) else {
                return Ok(());
            };
            if let Ok(unit) = data.ids.binary_search(&id) {
                if let Ok(RawGeometry::Decoded(geometry)) = reader.geometry(get(1)?) {
                    geometries[unit] = Some(geometry);
                }
            }
            Ok(())
        })?;
        let geometries: Vec<Geometry<f64>> = geometries
            .into_iter()
            .map(|g| {
                g.unwrap_or(Geometry::GeometryCollection(GeometryCollection::new_from(
                    Vec::new(),
                )))
            })
            .collect();
        crate::core::diagnostics::contiguity::contiguity_pairs(&geometries, rule).map_err(|error| {
            Error::input(
                &info.table,
                Some(&info.geom_column),
                None,
                error.to_string(),
            )
        })
    }

    /// Streams the rows into the collector. One thread steps through SQLite
    /// (on its own read-only connection) and copies each batch of rows out;
    /// this thread decodes the WKB and feeds the collector, so the two
    /// overlap as the PostgreSQL server and geofold do on the PostGIS path.
    /// At most four batches are in flight, so memory stays bounded.
    fn read(&mut self, collector: &mut UnitCollector) -> Result<(), Error> {
        let (info, path, select) = (&self.info, &self.path, &self.select);
        let n_numbers = 1 + info.feature_columns.len();
        std::thread::scope(|scope| {
            let (sender, receiver) = std::sync::mpsc::sync_channel::<Result<Batch, Error>>(4);
            let producer = scope.spawn(move || produce(path, info, select, &sender));
            let reader = RowReader::new(info);
            let mut consumed = Ok(());
            for batch in receiver {
                consumed = batch.and_then(|mut batch| {
                    for (row, id) in batch.ids.into_iter().enumerate() {
                        let geometry = match batch.geometries[row] {
                            None => RawGeometry::Null,
                            Some((start, end)) => reader
                                .geometry(ValueRef::Blob(&batch.bytes[start..end]))
                                .map_err(|problem| {
                                    Error::input(
                                        &info.table,
                                        Some(&info.geom_column),
                                        Some(id.to_string()),
                                        problem,
                                    )
                                })?,
                        };
                        let numbers = &batch.numbers[row * n_numbers..(row + 1) * n_numbers];
                        let extras = std::mem::take(&mut batch.extras[row]);
                        collector.push_with(id, geometry, numbers[0], &numbers[1..], extras)?;
                    }
                    Ok(())
                });
                if consumed.is_err() {
                    // Dropping the receiver stops the producer at its next send.
                    break;
                }
            }
            let produced = producer
                .join()
                .map_err(|_| Error::Internal("the GeoPackage reader thread panicked".into()))?;
            consumed.and(produced)
        })
    }

    fn read_locations(
        &mut self,
        table: &str,
        _geom: Option<&str>,
        _distance_srid: Option<i32>,
    ) -> Result<crate::adapters::Locations, Error> {
        super::locations::read(&self.path, &self.info, table)
    }
}

/// The producer of [`GpkgSource::read`]: steps through the rows and sends batches.
fn produce(
    path: &Path,
    info: &SourceInfo,
    select: &str,
    sender: &std::sync::mpsc::SyncSender<Result<Batch, Error>>,
) -> Result<(), Error> {
    let conn = open_file(path, false)?;
    let reader = RowReader::new(info);
    let mut batch = Batch::default();
    let stopped = || Error::Internal("the GeoPackage reader stopped".into());
    let mut problems: Vec<(Location, String)> = Vec::new();
    let mut unlisted = 0usize;
    let stepped = each_row(&conn, path, info, select, |row| {
        let found = reader.check(row)?;
        if !found.is_empty() {
            for problem in found {
                if problems.len() < MAX_PROBLEMS {
                    problems.push(problem);
                } else {
                    unlisted += 1;
                }
            }
            return Ok(());
        }
        if !problems.is_empty() {
            // Only problems are wanted now: the rows will not be used.
            return Ok(());
        }
        let get = |index: usize| {
            row.get_ref(index).map_err(|e| {
                sqlite_error(path, &format!("reading layer {}", info.qualified_table), &e)
            })
        };
        let id = reader
            .id(get(0)?)
            .map_err(|problem| Error::input(&info.table, Some(&info.id_column), None, problem))?;
        let mut extras = Extras::default();
        for (index, name) in std::iter::once(&info.target_column)
            .chain(info.feature_columns.iter())
            .enumerate()
        {
            if index > 0 && info.text_features[index - 1] {
                extras.texts.push(text(get(2 + index)?));
                batch.numbers.push(None);
                continue;
            }
            let value = number(get(2 + index)?).map_err(|problem| {
                Error::input(&info.table, Some(name), Some(id.to_string()), problem)
            })?;
            batch.numbers.push(value);
        }
        let geometry = match get(1)? {
            ValueRef::Blob(bytes) => {
                let start = batch.bytes.len();
                batch.bytes.extend_from_slice(bytes);
                Some((start, batch.bytes.len()))
            }
            ValueRef::Null => None,
            other => {
                return Err(Error::input(
                    &info.table,
                    Some(&info.geom_column),
                    Some(id.to_string()),
                    format!(
                        "geometry is {}, not a GeoPackageBinary BLOB",
                        describe(other)
                    ),
                ))
            }
        };
        // After the id, geometry, target, features and rowid.
        let mut next = 4 + info.feature_columns.len();
        if let Some(column) = &info.group_column {
            extras.group = match get(next)? {
                ValueRef::Null => None,
                ValueRef::Integer(value) => Some(value.to_string()),
                ValueRef::Text(bytes) => Some(String::from_utf8_lossy(bytes).into_owned()),
                other => {
                    return Err(Error::input(
                        &info.table,
                        Some(column),
                        Some(id.to_string()),
                        format!(
                            "group value {} is not an integer or a text",
                            describe(other)
                        ),
                    ))
                }
            };
            next += 1;
        }
        if let Some(column) = &info.exposure_column {
            extras.exposure = number(get(next)?).map_err(|problem| {
                Error::input(&info.table, Some(column), Some(id.to_string()), problem)
            })?;
        }
        batch.extras.push(extras);
        batch.geometries.push(geometry);
        batch.ids.push(id);
        if batch.ids.len() == BATCH_ROWS {
            sender
                .send(Ok(std::mem::take(&mut batch)))
                .map_err(|_| stopped())?;
        }
        Ok(())
    });
    if unlisted > 0 {
        problems.push((
            Location {
                table: info.table.clone(),
                column: None,
                row_id: None,
            },
            format!("{unlisted} further problems not listed"),
        ));
    }
    let last = stepped.and_then(|()| {
        if problems.is_empty() {
            Ok(batch)
        } else {
            Err(Error::Input { problems })
        }
    });
    // A closed channel means the consumer stopped on an error of its own.
    let _ = sender.send(last);
    Ok(())
}

#[cfg(test)]
mod tests;
