//! The GeoPackage adapter: a [`Source`](crate::adapters::Source) that streams a
//! feature table and a [`ResultStore`](crate::adapters::ResultStore) that writes
//! runs into a GeoPackage file, through rusqlite with its bundled SQLite (so
//! nothing needs installing).
//!
//! - [`blob`]: the GeoPackageBinary header and the WKB walk that checks it.
//! - [`schema`]: the required tables, SRS rows, table registration, the R-tree
//!   index and its SQL functions.
//! - [`tables`]: the results tables, from their one definition, and their upgrades.
//! - `container`: new files under a temporary name, crash recovery, the job lock.
//! - `rtree`: Sort-Tile-Recursive packing of a new R-tree index.
//! - `read`: [`GpkgSource`].
//! - `store`: [`GpkgStore`]; `rows`: writing result rows and the job's layers;
//!   `history`: fold scores and unit errors of a run, removing runs;
//!   `readback`: rows of any results table, unit geometries and CRS facts
//!   for `report` and `map`.
//! - `locations`: prediction locations from a layer (`--prediction-layer`);
//!   `import`: runs copied in from another store (`geofold export`);
//!   `scoring`: what `geofold score` reads.
//!
//! # Results in a GeoPackage
//! The results use the table and view names and columns of the PostGIS
//! results schema ([`crate::results`]). Attribute tables get an integer `fid`
//! key (the GeoPackage requires one) and keep the PostGIS key as a UNIQUE
//! constraint; `fold_regions` is a feature layer whose geometries carry SRS
//! -1 ("undefined Cartesian"), because one GeoPackage layer holds one SRS
//! while a file holds the runs of jobs in several; each row's own SRID is in
//! its `srid` column.
//!
//! Each job also gets feature layers for a map user: `<job>`, the per-unit
//! errors of the job's latest successful primary run joined to the unit
//! geometry (key `fid`), and `<job>_regions`, that run's fold regions of
//! repetition 1 in the job's SRS (key `region_id`), when its scheme has
//! regions. In PostGIS these are views; here they are tables rewritten on
//! each successful run of the job, because a GeoPackage view cannot carry an
//! R-tree index and GIS software would scan the whole join on every pan. A
//! job label that would replace a layer geofold did not make for that job
//! (the source layer, say) is refused.
//!
//! # Files, transactions and locks
//! A new file is built under a temporary name in the same directory and
//! renamed into place once the run succeeded (so a failure leaves no file).
//! Writing into an existing file is one SQLite transaction (`BEGIN
//! IMMEDIATE`, the default rollback journal, which unlike WAL also works on
//! network shares): a failure leaves the file as it was. Another program's
//! lock is waited for (5 s for a source, `--lock-timeout` for results), then
//! reported with exit code 75.

pub mod blob;
pub(crate) mod container;
mod history;
pub mod import;
pub mod locations;
mod read;
mod readback;
mod rows;
mod rtree;
pub mod schema;
pub mod scoring;
mod store;
pub mod tables;

use std::fs;
use std::path::Path;
use std::time::Duration;

use rusqlite::{Connection, ErrorCode, OpenFlags};

pub use read::GpkgSource;
pub use store::GpkgStore;

use crate::error::{Error, FileProblem};

/// How long geofold waits for another program's lock on a GeoPackage it
/// reads; a results file waits `--lock-timeout` instead.
pub const BUSY_TIMEOUT: Duration = Duration::from_secs(5);

/// SQLite quotes identifiers with double quotes, as PostgreSQL does (SQL
/// standard), so one quoting serves both.
pub(crate) use crate::adapters::sql::quote_ident as quote;

/// A file error at `path`.
pub(crate) fn file_error(path: &Path, problem: impl Into<String>, kind: FileProblem) -> Error {
    Error::File {
        path: path.display().to_string(),
        problem: problem.into(),
        kind,
    }
}

/// Maps an SQLite error met while doing `action` on `path` to an [`Error`]
/// of the kind that fits.
pub fn sqlite_error(path: &Path, action: &str, error: &rusqlite::Error) -> Error {
    let (kind, what) = match error.sqlite_error_code() {
        Some(ErrorCode::DatabaseBusy | ErrorCode::DatabaseLocked) => (
            FileProblem::Locked,
            "the file is locked by another program (geofold waited --lock-timeout for a results file, \
             5 s for a source); nothing was written; try again when it is free"
                .to_string(),
        ),
        Some(ErrorCode::NotADatabase) => (
            FileProblem::BadContent,
            "not a GeoPackage: the file is not an SQLite database".to_string(),
        ),
        Some(ErrorCode::DatabaseCorrupt) => (
            FileProblem::BadContent,
            format!("the SQLite database is corrupt ({error})"),
        ),
        Some(ErrorCode::ReadOnly | ErrorCode::PermissionDenied) => (
            FileProblem::Permission,
            format!("no permission to write the file ({error})"),
        ),
        Some(ErrorCode::CannotOpen) => (FileProblem::CannotCreate, format!("cannot open ({error})")),
        Some(
            ErrorCode::DiskFull
            | ErrorCode::SystemIoFailure
            | ErrorCode::TooBig
            | ErrorCode::NoLargeFileSupport,
        ) => (FileProblem::Io, format!("I/O error ({error})")),
        Some(ErrorCode::ConstraintViolation) => (
            FileProblem::BadContent,
            format!("the file's contents conflict with what geofold writes ({error})"),
        ),
        _ => (FileProblem::Unexpected, format!("SQLite error ({error})")),
    };
    file_error(path, format!("{action}: {what}"), kind)
}

/// Opens an existing file; `write` asks for a read-write connection. A file
/// left with the journal of an interrupted write is rolled back first.
///
/// Every connection waits [`BUSY_TIMEOUT`] for locks, has geofold's R-tree SQL
/// functions, and enforces foreign keys.
///
/// # Errors
/// Missing file (66), a directory (65); SQLite errors.
pub(crate) fn open_file(path: &Path, write: bool) -> Result<Connection, Error> {
    match fs::metadata(path) {
        Err(_) => {
            return Err(file_error(
                path,
                "the file does not exist",
                FileProblem::Missing,
            ));
        }
        Ok(metadata) if metadata.is_dir() => {
            return Err(file_error(
                path,
                "is a directory, not a GeoPackage file",
                FileProblem::BadContent,
            ));
        }
        Ok(_) => {}
    }
    container::recover_hot_journal(path)?;
    let flags = if write {
        OpenFlags::SQLITE_OPEN_READ_WRITE
    } else {
        OpenFlags::SQLITE_OPEN_READ_ONLY
    };
    connect(
        path,
        flags | OpenFlags::SQLITE_OPEN_NO_MUTEX | OpenFlags::SQLITE_OPEN_URI,
    )
}

/// Opens a connection with geofold's settings (see [`open_file`]).
pub(crate) fn connect(path: &Path, flags: OpenFlags) -> Result<Connection, Error> {
    let conn =
        Connection::open_with_flags(path, flags).map_err(|e| sqlite_error(path, "opening", &e))?;
    let setup = || -> rusqlite::Result<()> {
        conn.busy_timeout(BUSY_TIMEOUT)?;
        schema::register_functions(&conn)?;
        conn.execute_batch("PRAGMA foreign_keys = ON;")
    };
    setup().map_err(|e| sqlite_error(path, "opening", &e))?;
    Ok(conn)
}

/// Checks that the file is a GeoPackage: an SQLite database with the
/// required tables (clause 1.1.1.1 and 1.1.2–1.1.3). Returns its `user_version`.
///
/// # Errors
/// Exit 65 for a file that is not SQLite or lacks the required tables; 75 when locked.
pub(crate) fn check_geopackage(conn: &Connection, path: &Path) -> Result<i64, Error> {
    let (application_id, user_version): (i64, i64) = conn
        .query_row(
            "SELECT (SELECT application_id FROM pragma_application_id), (SELECT user_version FROM pragma_user_version)",
            [],
            |row| Ok((row.get(0)?, row.get(1)?)),
        )
        .map_err(|e| sqlite_error(path, "reading the GeoPackage header", &e))?;
    for table in [
        "gpkg_spatial_ref_sys",
        "gpkg_contents",
        "gpkg_geometry_columns",
    ] {
        let present = schema::has_table(conn, "main", table)
            .map_err(|e| sqlite_error(path, "reading the GeoPackage tables", &e))?;
        if !present {
            return Err(file_error(
                path,
                format!("not a GeoPackage: the SQLite database has no {table} table"),
                FileProblem::BadContent,
            ));
        }
    }
    // GP10 and GP11 are the application ids of GeoPackage 1.0 and 1.1.
    if ![i64::from(schema::APPLICATION_ID), 0x4750_3130, 0x4750_3131].contains(&application_id) {
        tracing::warn!(
            path = %path.display(),
            application_id,
            "the file has the GeoPackage tables but not the GeoPackage application_id"
        );
    }
    Ok(user_version)
}
