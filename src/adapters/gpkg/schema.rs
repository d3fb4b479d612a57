//! The GeoPackage container: required tables, SRS rows, table registration,
//! the R-tree spatial index, and geofold's results tables.
//!
//! Sources, all OGC GeoPackage Encoding Standard 1.3 unless said otherwise:
//! - the required tables are created with the normative DDL of Annex C
//!   ("Table Definition SQL"), copied verbatim because validators compare
//!   column names, types, defaults and key flags;
//! - SRS rows -1, 0 and 4326 are required by clause 1.1.2.1.2 (Requirements
//!   11 and 12), and every SRS that content uses needs its own row;
//! - feature tables (clause 2.1.6) have an `INTEGER PRIMARY KEY AUTOINCREMENT`
//!   and one geometry column whose declared type equals
//!   `gpkg_geometry_columns.geometry_type_name`; attribute tables (clause 2.4)
//!   are registered with `data_type = 'attributes'`;
//! - the R-tree index follows Annex F.3 "RTree Spatial Indexes": a virtual
//!   table, a `gpkg_extensions` row, the existing rows loaded (packed by
//!   `rtree`), then the triggers.
//!
//! # Version and trigger set
//! New files declare `user_version` 10300 (GeoPackage 1.3.0): GDAL 3.6, the
//! GDAL of Debian 12, warns "may only be partially supported" on every open of
//! a 1.4 file (checked with ogrinfo 3.6.2), and a warning is a defect for a GIS
//! user. A 1.3 file carries the 1.3 trigger set (`insert`, `update1` to
//! `update4` with the corrected `update3` of 1.2.1, `delete`), which is also
//! what GDAL 3.6 writes and what its `validate_gpkg.py` checks. When geofold
//! adds tables to a file that declares 1.4 or later it writes the 1.4 set
//! instead (`update1`/`update3` replaced by `update5` to `update7`, Annex F.3
//! of 1.4.0), because 1.4 validators reject the deprecated triggers.
//!
//! # SQL functions
//! The triggers call `ST_IsEmpty`, `ST_MinX`, `ST_MaxX`, `ST_MinY` and
//! `ST_MaxY` (Annex F.3, "GeoPackage SQLite Extension"), which SQLite does not
//! provide. [`register_functions`] defines them on geofold's own connections
//! (reading the blob header's envelope, or walking the WKB when there is none),
//! so geofold's later inserts keep the index right. GIS software that writes
//! to the file registers its own.

use rusqlite::functions::FunctionFlags;
use rusqlite::types::ValueRef;
use rusqlite::{params, Connection};

use super::quote;
use super::{blob, rtree};

/// `PRAGMA application_id` of a GeoPackage: "GPKG" (clause 1.1.1.1.1, Requirement 2).
pub const APPLICATION_ID: i32 = 0x4750_4B47;

/// `PRAGMA user_version` geofold writes into new files: 1.3.0 (see the module doc).
pub const USER_VERSION: i32 = 10300;

/// The extension definition URL GDAL and other writers use for the R-tree row.
const RTREE_DEFINITION: &str = "http://www.geopackage.org/spec120/#extension_rtree";

/// The required tables, Annex C "Table Definition SQL", verbatim.
const CORE_DDL: &str = "
CREATE TABLE gpkg_spatial_ref_sys (
  srs_name TEXT NOT NULL,
  srs_id INTEGER PRIMARY KEY,
  organization TEXT NOT NULL,
  organization_coordsys_id INTEGER NOT NULL,
  definition  TEXT NOT NULL,
  description TEXT
);
CREATE TABLE gpkg_contents (
  table_name TEXT NOT NULL PRIMARY KEY,
  data_type TEXT NOT NULL,
  identifier TEXT UNIQUE,
  description TEXT DEFAULT '',
  last_change DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')),
  min_x DOUBLE,
  min_y DOUBLE,
  max_x DOUBLE,
  max_y DOUBLE,
  srs_id INTEGER,
  CONSTRAINT fk_gc_r_srs_id FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys(srs_id)
);
CREATE TABLE gpkg_geometry_columns (
  table_name TEXT NOT NULL,
  column_name TEXT NOT NULL,
  geometry_type_name TEXT NOT NULL,
  srs_id INTEGER NOT NULL,
  z TINYINT NOT NULL,
  m TINYINT NOT NULL,
  CONSTRAINT pk_geom_cols PRIMARY KEY (table_name, column_name),
  CONSTRAINT uk_gc_table_name UNIQUE (table_name),
  CONSTRAINT fk_gc_tn FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name),
  CONSTRAINT fk_gc_srs FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys (srs_id));
";

/// `gpkg_extensions`, Annex C, verbatim; created when the first extension is used.
const EXTENSIONS_DDL: &str = "
CREATE TABLE gpkg_extensions (
  table_name TEXT,
  column_name TEXT,
  extension_name TEXT NOT NULL,
  definition TEXT NOT NULL,
  scope TEXT NOT NULL,
  CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name)
);
";

/// WKT of EPSG:4326 as PostGIS 3.3's `spatial_ref_sys.srtext` has it (WKT1,
/// which GDAL reads; it cannot interpret a row that has only WKT2).
const WGS84_WKT: &str = "GEOGCS[\"WGS 84\",DATUM[\"WGS_1984\",SPHEROID[\"WGS 84\",6378137,298.257223563,AUTHORITY[\"EPSG\",\"7030\"]],AUTHORITY[\"EPSG\",\"6326\"]],PRIMEM[\"Greenwich\",0,AUTHORITY[\"EPSG\",\"8901\"]],UNIT[\"degree\",0.0174532925199433,AUTHORITY[\"EPSG\",\"9122\"]],AUTHORITY[\"EPSG\",\"4326\"]]";

/// A row of `gpkg_spatial_ref_sys`.
#[derive(Debug, Clone, PartialEq)]
pub struct Srs {
    /// `srs_id`.
    pub srs_id: i32,
    /// `srs_name`.
    pub name: String,
    /// `organization`, e.g. `EPSG`.
    pub organization: String,
    /// `organization_coordsys_id`.
    pub organization_id: i32,
    /// `definition`: WKT1, or `undefined`.
    pub definition: String,
}

impl Srs {
    /// An EPSG row with a WKT1 definition (`undefined` when none is known).
    pub fn epsg(code: i32, name: Option<&str>, wkt: Option<&str>) -> Srs {
        let name = name
            .map(str::to_string)
            .or_else(|| wkt.and_then(wkt_name))
            .unwrap_or_else(|| format!("EPSG:{code}"));
        Srs {
            srs_id: code,
            name,
            organization: "EPSG".to_string(),
            organization_id: code,
            definition: wkt.unwrap_or("undefined").to_string(),
        }
    }
}

/// The name in a WKT's first quoted string: `PROJCS["WGS 84 / UTM zone 31N",…` → `WGS 84 / UTM zone 31N`.
pub fn wkt_name(wkt: &str) -> Option<String> {
    let start = wkt.find('"')? + 1;
    let length = wkt[start..].find('"')?;
    Some(wkt[start..start + length].to_string())
}

/// Creates the required tables and SRS rows in an empty database, and sets
/// `application_id` and `user_version`.
///
/// # Errors
/// SQLite errors.
pub fn create_container(conn: &Connection) -> rusqlite::Result<()> {
    conn.execute_batch(&format!(
        "PRAGMA application_id = {APPLICATION_ID}; PRAGMA user_version = {USER_VERSION};"
    ))?;
    conn.execute_batch(CORE_DDL)?;
    conn.execute_batch(EXTENSIONS_DDL)?;
    for srs in [
        Srs {
            srs_id: -1,
            name: "Undefined Cartesian SRS".into(),
            organization: "NONE".into(),
            organization_id: -1,
            definition: "undefined".into(),
        },
        Srs {
            srs_id: 0,
            name: "Undefined geographic SRS".into(),
            organization: "NONE".into(),
            organization_id: 0,
            definition: "undefined".into(),
        },
        Srs::epsg(4326, Some("WGS 84 geodetic"), Some(WGS84_WKT)),
    ] {
        ensure_srs(conn, &srs)?;
    }
    Ok(())
}

/// Creates `gpkg_extensions` (for files made without it).
///
/// # Errors
/// SQLite errors.
pub fn create_extensions(conn: &Connection) -> rusqlite::Result<()> {
    conn.execute_batch(EXTENSIONS_DDL)
}

/// True when the database has a table or view of that name.
///
/// # Errors
/// SQLite errors.
pub fn has_table(conn: &Connection, schema: &str, name: &str) -> rusqlite::Result<bool> {
    let sql = format!(
        "SELECT count(*) FROM {}.sqlite_master WHERE type IN ('table', 'view') AND name = ?1",
        quote(schema)
    );
    let count: i64 = conn.query_row(&sql, [name], |row| row.get(0))?;
    Ok(count > 0)
}

/// Inserts an SRS row unless one with that `srs_id` exists (an existing row is
/// the file's own and is kept).
///
/// # Errors
/// SQLite errors.
pub fn ensure_srs(conn: &Connection, srs: &Srs) -> rusqlite::Result<()> {
    conn.execute(
        "INSERT OR IGNORE INTO gpkg_spatial_ref_sys
            (srs_name, srs_id, organization, organization_coordsys_id, definition, description)
         VALUES (?1, ?2, ?3, ?4, ?5, NULL)",
        params![
            srs.name,
            srs.srs_id,
            srs.organization,
            srs.organization_id,
            srs.definition
        ],
    )?;
    Ok(())
}

/// A feature table geofold creates.
#[derive(Debug, Clone)]
pub struct FeatureTable {
    /// Table name.
    pub name: String,
    /// Its `INTEGER PRIMARY KEY AUTOINCREMENT` column.
    pub key: String,
    /// Column definitions between the key and the geometry, comma-separated.
    pub columns: String,
    /// Geometry type name, upper case (`POLYGON`, `MULTIPOLYGON`, `GEOMETRY`…).
    pub geometry_type: String,
    /// Whether the geometry column is NOT NULL.
    pub geometry_not_null: bool,
    /// SRS of the geometry column.
    pub srs_id: i32,
    /// `z` flag of gpkg_geometry_columns (0 prohibited, 1 mandatory, 2 optional).
    pub z: i64,
    /// `m` flag.
    pub m: i64,
    /// `gpkg_contents.description`.
    pub description: String,
}

/// Geometry column name of every feature table geofold creates (GDAL's default).
pub const GEOMETRY_COLUMN: &str = "geom";

/// Creates and registers an empty feature table with its (empty) R-tree
/// table; [`index_feature_table`] loads the index and adds the triggers.
///
/// # Errors
/// SQLite errors.
pub fn create_feature_table(conn: &Connection, table: &FeatureTable) -> rusqlite::Result<()> {
    let not_null = if table.geometry_not_null {
        " NOT NULL"
    } else {
        ""
    };
    conn.execute_batch(&format!(
        "CREATE TABLE main.{name} ({key} INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL, {columns}, {geom} {kind}{not_null});
         CREATE VIRTUAL TABLE main.{rtree} USING rtree(id, minx, maxx, miny, maxy);",
        name = quote(&table.name),
        key = quote(&table.key),
        columns = table.columns,
        geom = quote(GEOMETRY_COLUMN),
        kind = table.geometry_type,
        rtree = quote(&rtree_name(&table.name)),
    ))?;
    conn.execute(
        "INSERT INTO main.gpkg_contents (table_name, data_type, identifier, description, srs_id)
         VALUES (?1, 'features', ?1, ?2, ?3)",
        params![table.name, table.description, table.srs_id],
    )?;
    conn.execute(
        "INSERT INTO main.gpkg_geometry_columns (table_name, column_name, geometry_type_name, srs_id, z, m)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
        params![
            table.name,
            GEOMETRY_COLUMN,
            table.geometry_type,
            table.srs_id,
            table.z,
            table.m
        ],
    )?;
    conn.execute(
        "INSERT INTO main.gpkg_extensions (table_name, column_name, extension_name, definition, scope)
         VALUES (?1, ?2, 'gpkg_rtree_index', ?3, 'write-only')",
        params![table.name, GEOMETRY_COLUMN, RTREE_DEFINITION],
    )?;
    Ok(())
}

/// Builds the (empty) R-tree from the rows already in the table, creates the
/// triggers and sets the `gpkg_contents` extent. The index holds what Annex
/// F.3 "Load Spatial Index Values" loads (every non-NULL, non-empty geometry),
/// packed (`rtree::bulk_load`) instead of inserted row by row.
///
/// # Errors
/// SQLite errors; a malformed blob in the table.
pub fn index_feature_table(
    conn: &Connection,
    table: &FeatureTable,
    triggers: TriggerSet,
) -> rusqlite::Result<()> {
    let mut entries = Vec::new();
    let mut extent = blob::Bounds::default();
    {
        let mut statement = conn.prepare(&format!(
            "SELECT {i}, {c} FROM main.{t} WHERE {c} NOT NULL",
            i = quote(&table.key),
            c = quote(GEOMETRY_COLUMN),
            t = quote(&table.name)
        ))?;
        let mut rows = statement.query([])?;
        while let Some(row) = rows.next()? {
            let ValueRef::Blob(bytes) = row.get_ref(1)? else {
                continue;
            };
            if let Some(envelope) = envelope_of(bytes)? {
                extent.add_envelope(envelope);
                entries.push(rtree::Entry::new(row.get(0)?, envelope));
            }
        }
    }
    rtree::bulk_load(conn, &rtree_name(&table.name), entries)?;
    for sql in trigger_sql(&table.name, GEOMETRY_COLUMN, &table.key, triggers) {
        conn.execute_batch(&sql)?;
    }
    let bounds = extent.envelope();
    conn.execute(
        "UPDATE main.gpkg_contents SET min_x = ?2, min_y = ?3, max_x = ?4, max_y = ?5,
           last_change = strftime('%Y-%m-%dT%H:%M:%fZ', 'now')
         WHERE table_name = ?1",
        params![
            table.name,
            bounds.map(|b| b[0]),
            bounds.map(|b| b[2]),
            bounds.map(|b| b[1]),
            bounds.map(|b| b[3])
        ],
    )?;
    Ok(())
}

/// Sets the `gpkg_contents` extent of a feature table to that of its rows
/// (NULL when it has none) and touches `last_change`.
///
/// # Errors
/// SQLite errors.
pub fn refresh_extent(conn: &Connection, table: &str) -> rusqlite::Result<()> {
    let c = quote(GEOMETRY_COLUMN);
    let sql = format!(
        "UPDATE main.gpkg_contents SET (min_x, min_y, max_x, max_y) =
           (SELECT min(ST_MinX({c})), min(ST_MinY({c})), max(ST_MaxX({c})), max(ST_MaxY({c})) FROM main.{t}
            WHERE {c} NOT NULL AND NOT ST_IsEmpty({c})),
           last_change = strftime('%Y-%m-%dT%H:%M:%fZ', 'now')
         WHERE table_name = ?1",
        t = quote(table)
    );
    conn.execute(&sql, [table])?;
    Ok(())
}

/// Drops a feature table geofold made and everything registered for it.
///
/// # Errors
/// SQLite errors.
pub fn drop_feature_table(conn: &Connection, table: &str) -> rusqlite::Result<()> {
    conn.execute_batch(&format!(
        "DROP TABLE IF EXISTS main.{rtree}; DROP TABLE IF EXISTS main.{t};",
        rtree = quote(&rtree_name(table)),
        t = quote(table)
    ))?;
    for sql in [
        "DELETE FROM main.gpkg_extensions WHERE table_name = ?1",
        "DELETE FROM main.gpkg_geometry_columns WHERE table_name = ?1",
        "DELETE FROM main.gpkg_contents WHERE table_name = ?1",
    ] {
        conn.execute(sql, [table])?;
    }
    Ok(())
}

/// `rtree_<t>_<c>` for geofold's geometry column.
pub fn rtree_name(table: &str) -> String {
    format!("rtree_{table}_{GEOMETRY_COLUMN}")
}

/// Which R-tree trigger set to write (see the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TriggerSet {
    /// GeoPackage 1.2.1 to 1.3.x: insert, update1–update4, delete.
    V1_3,
    /// GeoPackage 1.4: insert, update2, update4–update7, delete.
    V1_4,
}

impl TriggerSet {
    /// The set a file of this `user_version` needs.
    pub fn for_user_version(user_version: i64) -> TriggerSet {
        if user_version >= 10400 {
            TriggerSet::V1_4
        } else {
            TriggerSet::V1_3
        }
    }
}

/// The trigger statements of Annex F.3 for table `t`, geometry `c`, key `i`
/// (all in `main`).
fn trigger_sql(t: &str, c: &str, i: &str, set: TriggerSet) -> Vec<String> {
    let rtree = quote(&format!("rtree_{t}_{c}"));
    // Trigger names are schema-qualified; the ON table and the body then
    // resolve in main even when a source file is attached.
    let name = |suffix: &str| format!("main.{}", quote(&format!("rtree_{t}_{c}_{suffix}")));
    let (t, c, i) = (quote(t), quote(c), quote(i));
    let insert_new = format!(
        "INSERT OR REPLACE INTO {rtree} VALUES (NEW.{i}, ST_MinX(NEW.{c}), ST_MaxX(NEW.{c}), ST_MinY(NEW.{c}), ST_MaxY(NEW.{c}));"
    );
    let mut statements = vec![format!(
        "CREATE TRIGGER {} AFTER INSERT ON {t} WHEN (new.{c} NOT NULL AND NOT ST_IsEmpty(NEW.{c})) \
         BEGIN {insert_new} END;",
        name("insert")
    )];
    let update2 = format!(
        "CREATE TRIGGER {} AFTER UPDATE OF {c} ON {t} WHEN OLD.{i} = NEW.{i} AND (NEW.{c} ISNULL OR ST_IsEmpty(NEW.{c})) \
         BEGIN DELETE FROM {rtree} WHERE id = OLD.{i}; END;",
        name("update2")
    );
    let update4 = format!(
        "CREATE TRIGGER {} AFTER UPDATE ON {t} WHEN OLD.{i} != NEW.{i} AND (NEW.{c} ISNULL OR ST_IsEmpty(NEW.{c})) \
         BEGIN DELETE FROM {rtree} WHERE id IN (OLD.{i}, NEW.{i}); END;",
        name("update4")
    );
    // The corrected update3 of 1.2.1 and the update5 of 1.4 have the same body.
    let id_change = |suffix: &str| {
        format!(
            "CREATE TRIGGER {} AFTER UPDATE ON {t} WHEN OLD.{i} != NEW.{i} AND (NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c})) \
             BEGIN DELETE FROM {rtree} WHERE id = OLD.{i}; {insert_new} END;",
            name(suffix)
        )
    };
    match set {
        TriggerSet::V1_3 => {
            statements.push(format!(
                "CREATE TRIGGER {} AFTER UPDATE OF {c} ON {t} WHEN OLD.{i} = NEW.{i} AND (NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c})) \
                 BEGIN {insert_new} END;",
                name("update1")
            ));
            statements.push(update2);
            statements.push(id_change("update3"));
            statements.push(update4);
        }
        TriggerSet::V1_4 => {
            statements.push(update2);
            statements.push(update4);
            statements.push(id_change("update5"));
            // Annex F.3 of 1.4.0 names the R-tree as the target of this UPDATE
            // (some drafts misprint it as <t>).
            statements.push(format!(
                "CREATE TRIGGER {} AFTER UPDATE OF {c} ON {t} WHEN OLD.{i} = NEW.{i} AND \
                 (NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c})) AND (OLD.{c} NOTNULL AND NOT ST_IsEmpty(OLD.{c})) \
                 BEGIN UPDATE {rtree} SET minx = ST_MinX(NEW.{c}), maxx = ST_MaxX(NEW.{c}), \
                 miny = ST_MinY(NEW.{c}), maxy = ST_MaxY(NEW.{c}) WHERE id = NEW.{i}; END;",
                name("update6")
            ));
            statements.push(format!(
                "CREATE TRIGGER {} AFTER UPDATE OF {c} ON {t} WHEN OLD.{i} = NEW.{i} AND \
                 (NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c})) AND (OLD.{c} ISNULL OR ST_IsEmpty(OLD.{c})) \
                 BEGIN INSERT INTO {rtree} VALUES (NEW.{i}, ST_MinX(NEW.{c}), ST_MaxX(NEW.{c}), \
                 ST_MinY(NEW.{c}), ST_MaxY(NEW.{c})); END;",
                name("update7")
            ));
        }
    }
    statements.push(format!(
        "CREATE TRIGGER {} AFTER DELETE ON {t} WHEN old.{c} NOT NULL \
         BEGIN DELETE FROM {rtree} WHERE id = OLD.{i}; END;",
        name("delete")
    ));
    statements
}

/// Defines `ST_IsEmpty`, `ST_MinX`, `ST_MaxX`, `ST_MinY` and `ST_MaxY` on the
/// connection (Annex F.3, "GeoPackage SQLite Extension"). Each returns NULL for
/// NULL or non-blob input; a malformed blob is an SQL error, so a bad insert
/// fails instead of leaving the index wrong.
///
/// # Errors
/// SQLite errors.
pub fn register_functions(conn: &Connection) -> rusqlite::Result<()> {
    let flags = FunctionFlags::SQLITE_UTF8
        | FunctionFlags::SQLITE_DETERMINISTIC
        | FunctionFlags::SQLITE_INNOCUOUS;
    conn.create_scalar_function("ST_IsEmpty", 1, flags, |ctx| {
        Ok(match ctx.get_raw(0) {
            ValueRef::Blob(bytes) => Some(i64::from(envelope_of(bytes)?.is_none())),
            _ => None,
        })
    })?;
    for (name, index) in [
        ("ST_MinX", 0),
        ("ST_MaxX", 1),
        ("ST_MinY", 2),
        ("ST_MaxY", 3),
    ] {
        conn.create_scalar_function(name, 1, flags, move |ctx| {
            Ok(match ctx.get_raw(0) {
                ValueRef::Blob(bytes) => envelope_of(bytes)?.map(|envelope| envelope[index]),
                _ => None,
            })
        })?;
    }
    Ok(())
}

fn envelope_of(bytes: &[u8]) -> rusqlite::Result<Option<[f64; 4]>> {
    blob::envelope(bytes).map_err(|error| rusqlite::Error::UserFunctionError(Box::new(error)))
}

#[cfg(test)]
mod tests;
