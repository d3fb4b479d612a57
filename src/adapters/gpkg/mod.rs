//! The GeoPackage adapter: a [`Source`](crate::adapters::Source) that streams a
//! feature table and a [`ResultStore`](crate::adapters::ResultStore) that writes
//! runs into a GeoPackage file, through rusqlite with its bundled SQLite (so
//! nothing needs installing).
//!
//! - [`blob`]: the GeoPackageBinary header and the WKB walk that checks it.
//! - [`schema`]: the required tables, SRS rows, table registration, the R-tree
//!   index and its SQL functions, and the results tables.
//! - `rtree`: Sort-Tile-Recursive packing of a new R-tree index.
//! - `read`: [`GpkgSource`].
//! - `write`: [`GpkgStore`] and [`write_demo`].
//! - [`export`]: one run's results from PostGIS into a GeoPackage.
//!
//! # Results in a GeoPackage
//! The results use the table names and columns of the PostGIS results schema
//! (`runs`, `fold_members`, `predictions`, `unit_errors`, `fold_scores`,
//! `run_scores`, `blocks`, plus `schema_version` and `store_settings`). The
//! attribute tables get an integer `fid` key where the PostGIS key is not one
//! integer (the GeoPackage requires one); `blocks` is a feature layer.
//!
//! Each job also gets two feature layers for a map user: `<job>`, the
//! per-unit errors of the job's latest successful primary run joined to the
//! unit geometry (key `fid`, which is `unit_errors.unit_key`), and
//! `<job>_blocks`, that run's blocks of repetition 1 (key `block_key`). In
//! PostGIS these are views; here they are tables rewritten on each successful
//! run of the job, because a GeoPackage view cannot carry an R-tree index
//! (the index triggers and virtual table need a real table) and GIS software
//! would scan the whole join on every pan. Earlier runs stay in the attribute
//! tables and in `blocks`. A job label that would replace a layer geofold did
//! not make for that job (the source layer, say) is refused.
//!
//! # Files, transactions and locks
//! A new file is built under a temporary name in the same directory and
//! renamed into place once complete (so a failure leaves no file). Writing
//! into an existing file is one SQLite transaction (`BEGIN IMMEDIATE`, the
//! default rollback journal, which unlike WAL also works on network shares):
//! a failure leaves the file as it was. Another program's lock is waited for
//! [`BUSY_TIMEOUT`], then reported with exit code 75.

pub mod blob;
pub mod export;
mod read;
mod rtree;
pub mod schema;
mod write;

use std::fs;
use std::path::{Path, PathBuf};
use std::time::Duration;

use rusqlite::{Connection, ErrorCode, OpenFlags};

pub use read::GpkgSource;
pub use write::{write_demo, GpkgStore};

use crate::error::{exit, Error};

/// How long geofold waits for another program's lock on a GeoPackage.
pub const BUSY_TIMEOUT: Duration = Duration::from_secs(5);

/// SQLite quotes identifiers with double quotes, as PostgreSQL does (SQL
/// standard), so the PostGIS adapter's quoting serves both.
pub(crate) use crate::adapters::postgis::quote_ident as quote;

/// A file error at `path`.
pub(crate) fn file_error(path: &Path, problem: impl Into<String>, code: i32) -> Error {
    Error::File {
        path: path.display().to_string(),
        problem: problem.into(),
        code,
    }
}

/// Maps an SQLite error met while doing `action` on `path` to an [`Error`]
/// with the exit code that fits.
pub(crate) fn sqlite_error(path: &Path, action: &str, error: &rusqlite::Error) -> Error {
    let (code, what) = match error.sqlite_error_code() {
        Some(ErrorCode::DatabaseBusy | ErrorCode::DatabaseLocked) => (
            exit::TEMPFAIL,
            format!(
                "the file is locked by another program (waited {} s); nothing was written; try again when it is free",
                BUSY_TIMEOUT.as_secs()
            ),
        ),
        Some(ErrorCode::NotADatabase) => (
            exit::DATA,
            "not a GeoPackage: the file is not an SQLite database".to_string(),
        ),
        Some(ErrorCode::DatabaseCorrupt) => (
            exit::DATA,
            format!("the SQLite database is corrupt ({error})"),
        ),
        Some(ErrorCode::ReadOnly | ErrorCode::PermissionDenied) => (
            exit::NO_PERMISSION,
            format!("no permission to write the file ({error})"),
        ),
        Some(ErrorCode::CannotOpen) => (exit::CANT_CREATE, format!("cannot open ({error})")),
        Some(
            ErrorCode::DiskFull
            | ErrorCode::SystemIoFailure
            | ErrorCode::TooBig
            | ErrorCode::NoLargeFileSupport,
        ) => (exit::IO, format!("I/O error ({error})")),
        Some(ErrorCode::ConstraintViolation) => (
            exit::DATA,
            format!("the file's contents conflict with what geofold writes ({error})"),
        ),
        _ => (exit::SOFTWARE, format!("SQLite error ({error})")),
    };
    file_error(path, format!("{action}: {what}"), code)
}

/// Opens an existing file; `write` asks for a read-write connection.
///
/// Every connection waits [`BUSY_TIMEOUT`] for locks, has geofold's R-tree SQL
/// functions, and enforces foreign keys.
///
/// # Errors
/// Exit 66 when the file does not exist, 65 when it is a directory; SQLite errors.
pub(crate) fn open_file(path: &Path, write: bool) -> Result<Connection, Error> {
    match fs::metadata(path) {
        Err(_) => {
            return Err(file_error(path, "the file does not exist", exit::NO_INPUT));
        }
        Ok(metadata) if metadata.is_dir() => {
            return Err(file_error(
                path,
                "is a directory, not a GeoPackage file",
                exit::DATA,
            ));
        }
        Ok(_) => {}
    }
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

/// Opens (creating) a new database file at `path` for writing.
fn create_file(path: &Path) -> Result<Connection, Error> {
    connect(
        path,
        OpenFlags::SQLITE_OPEN_READ_WRITE
            | OpenFlags::SQLITE_OPEN_CREATE
            | OpenFlags::SQLITE_OPEN_NO_MUTEX
            | OpenFlags::SQLITE_OPEN_URI,
    )
}

fn connect(path: &Path, flags: OpenFlags) -> Result<Connection, Error> {
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
                exit::DATA,
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

/// The directory a new file at `path` goes into.
///
/// # Errors
/// Exit 73 when it does not exist.
pub(crate) fn directory_of(path: &Path) -> Result<PathBuf, Error> {
    let directory = match path.parent() {
        Some(parent) if !parent.as_os_str().is_empty() => parent.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !directory.is_dir() {
        return Err(file_error(
            path,
            format!(
                "cannot create: directory {} does not exist",
                directory.display()
            ),
            exit::CANT_CREATE,
        ));
    }
    Ok(directory)
}

/// A file being built under a temporary name next to its final path; removed
/// on drop unless [`NewFile::finish`] renamed it into place.
pub(crate) struct NewFile {
    temp: PathBuf,
    target: PathBuf,
    finished: bool,
}

impl NewFile {
    /// Starts a new file for `target` and opens it.
    ///
    /// # Errors
    /// Exit 73 when the directory does not exist or cannot be written.
    pub(crate) fn create(target: &Path) -> Result<(NewFile, Connection), Error> {
        let directory = match target.parent() {
            Some(parent) if !parent.as_os_str().is_empty() => parent.to_path_buf(),
            _ => PathBuf::from("."),
        };
        if !directory.is_dir() {
            return Err(file_error(
                target,
                format!(
                    "cannot create: directory {} does not exist",
                    directory.display()
                ),
                exit::CANT_CREATE,
            ));
        }
        let name = target
            .file_name()
            .map(|name| name.to_string_lossy().into_owned())
            .unwrap_or_else(|| "geofold.gpkg".to_string());
        let temp = directory.join(format!(".{name}.tmp-{}", std::process::id()));
        let file = NewFile {
            temp,
            target: target.to_path_buf(),
            finished: false,
        };
        file.remove_temp();
        let conn = create_file(&file.temp).map_err(|error| match error {
            Error::File { problem, .. } => file_error(target, problem, exit::CANT_CREATE),
            other => other,
        })?;
        Ok((file, conn))
    }

    /// Closes the connection, flushes the file and renames it into place.
    ///
    /// # Errors
    /// Exit 74 when flushing or renaming fails (the temporary file is removed).
    pub(crate) fn finish(mut self, conn: Connection) -> Result<(), Error> {
        conn.close()
            .map_err(|(_, e)| sqlite_error(&self.target, "closing the new file", &e))?;
        let io = |action: &str, error: std::io::Error| {
            file_error(&self.target, format!("{action}: {error}"), exit::IO)
        };
        fs::File::open(&self.temp)
            .and_then(|file| file.sync_all())
            .map_err(|e| io("flushing the new file", e))?;
        fs::rename(&self.temp, &self.target)
            .map_err(|e| io("moving the new file into place", e))?;
        self.finished = true;
        if let Some(directory) = self.target.parent() {
            // Make the rename durable; not all file systems allow it, which is harmless.
            let directory = if directory.as_os_str().is_empty() {
                Path::new(".")
            } else {
                directory
            };
            let _ = fs::File::open(directory).and_then(|d| d.sync_all());
        }
        Ok(())
    }

    fn remove_temp(&self) {
        let _ = fs::remove_file(&self.temp);
        let mut journal = self.temp.clone().into_os_string();
        journal.push("-journal");
        let _ = fs::remove_file(journal);
    }
}

impl Drop for NewFile {
    fn drop(&mut self) {
        if !self.finished {
            self.remove_temp();
        }
    }
}
