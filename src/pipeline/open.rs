//! Opening the source and the results store, and the checks that need only what opening found (job
//! label, CRS).

use super::*;

/// Opens a source.
///
/// # Errors
/// Connection errors; a missing table, layer or column; bad column types.
pub fn open_source(
    source: &SourceRef,
    columns: &ColumnSpec,
    distance_srid: Option<i32>,
    limits: &Limits,
) -> Result<Box<dyn Source>, Error> {
    Ok(match source {
        SourceRef::Postgis { db, table } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(limits.lock_timeout(), limits.statement_timeout())?;
            Box::new(PostgisSource::open(session, table, columns, distance_srid)?)
        }
        SourceRef::Gpkg { file, layer } => {
            Box::new(GpkgSource::open(file, layer.as_deref(), columns)?)
        }
    })
}

/// Opens a results store.
///
/// # Errors
/// Connection errors; a results file that cannot be written.
pub fn open_store(results: &ResultsRef, limits: &Limits) -> Result<Box<dyn Store>, Error> {
    Ok(match results {
        ResultsRef::Postgis { db, schema } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(limits.lock_timeout(), limits.statement_timeout())?;
            Box::new(PostgisStore::new(session, schema, db.as_deref()))
        }
        ResultsRef::Gpkg { file } => Box::new(GpkgStore::open(file, limits.lock_timeout())?),
    })
}

/// The job label: the one given, or the default for the source (a layer's
/// name with `_cv` when results go into the source's own GeoPackage, so the
/// source layer is never replaced).
pub fn job_of(
    job: Option<&str>,
    source: &SourceRef,
    results: &ResultsRef,
    info: &SourceInfo,
) -> String {
    if let Some(job) = job {
        return job.to_string();
    }
    let job = default_job(&info.table);
    match (source, results) {
        (SourceRef::Gpkg { file, .. }, ResultsRef::Gpkg { file: results }) if file == results => {
            let mut job = job;
            job.truncate(crate::adapters::MAX_JOB_LEN - 3);
            format!("{job}_cv")
        }
        _ => job,
    }
}

/// What in a run measures distances, which decides whether a CRS without a
/// length unit is refused and what the refusal suggests.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Distances {
    /// Nothing: any CRS will do.
    Unused,
    /// Only the fold scheme: random folds would need none.
    ByScheme,
    /// Something random folds would not avoid: a model on locations, an
    /// exclusion buffer, prediction locations, an inspection.
    Needed,
}

/// Opens the source and checks that its CRS gives distances when `needs`
/// says they are measured (see [`check_crs`]); returns the source and what was
/// found when it was opened, with the CRS unit settled.
///
/// # Errors
/// As [`open_source`] and [`check_crs`].
pub fn open_checked(
    source: &SourceRef,
    columns: &ColumnSpec,
    distance_srid: Option<i32>,
    limits: &Limits,
    needs: Distances,
    assume_metres: bool,
) -> Result<(Box<dyn Source>, SourceInfo), Error> {
    let source = open_source(source, columns, distance_srid, limits)?;
    let mut info = source.info().clone();
    check_crs(needs, assume_metres, &mut info)?;
    Ok((source, info))
}

/// Refuses distances (`needs`) on a CRS in degrees or without units,
/// saying how to fix the data (and that random folds need none, when only
/// the scheme measures them); with `assume_metres`, a CRS without units is
/// taken as metres.
pub fn check_crs(
    needs: Distances,
    assume_metres: bool,
    info: &mut SourceInfo,
) -> Result<(), Error> {
    if needs == Distances::Unused {
        return Ok(());
    }
    let or_random = if needs == Distances::ByScheme {
        ", or use --scheme random"
    } else {
        ""
    };
    let what = format!("{}.{}", info.table, info.geom_column);
    match info.crs {
        CrsKind::Projected => Ok(()),
        CrsKind::Geographic => {
            let fix = if info.store == "gpkg" {
                "reproject the layer to a projected CRS in metres first (for example \
                 ogr2ogr -t_srs EPSG:N out.gpkg in.gpkg LAYER)"
            } else {
                "pass --distance-srid N with a projected CRS in metres (PostGIS transforms the geometries)"
            };
            Err(Error::Usage(format!(
                "{what} has SRID {}, a longitude/latitude CRS (degrees), but distances and block sizes are in \
                 metres; {fix}{or_random}",
                info.source_srid
            )))
        }
        CrsKind::Undefined if assume_metres => {
            info.length_unit = Some("metre".into());
            Ok(())
        }
        CrsKind::Undefined => {
            let assign = if info.store == "gpkg" {
                "assign one with ogr2ogr -a_srs EPSG:N out.gpkg in.gpkg"
            } else {
                "assign one with UPDATE … SET geom = ST_SetSRID(geom, N)"
            };
            Err(Error::Usage(format!(
                "{what} has no CRS defined (SRID {}), so its coordinates have no known unit and block sizes and \
                 distances cannot be read in metres; {assign}, or pass --assume-metres if the coordinates are \
                 metres{or_random}",
                info.source_srid
            )))
        }
    }
}
