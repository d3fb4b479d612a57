//! Each job's map views in PostGIS: `<job>` (per-unit errors of the job's
//! latest successful primary run, joined to the source geometry) and
//! `<job>_regions` (that run's fold regions of repetition 1).
//!
//! QGIS lists both as layers with no hand work: the first column is a
//! stable unique integer key (`fid`: the source's integer id, or for text ids
//! the rank of the id), and the geometry column has a type modifier (a cast
//! where the source column has none, or for the regions' per-row SRID). The
//! unit view joins the source by the source's own id column, casting only
//! the results side, so the source's index serves the join.
//!
//! A view is replaced only when its definition or the source table it joins
//! changes (a hash of both definitions and the table's oid are kept in
//! `jobs`), because replacing it waits for every
//! reader that holds it (a GIS with the layer open) and makes new readers
//! queue behind that wait.

use sha2::{Digest, Sha256};

use super::{quote_ident, quote_literal};
use crate::adapters::SourceInfo;
use crate::core::units::{Dataset, IdKind};
use crate::results::REGIONS_SUFFIX;

/// The definitions of a job's views.
pub struct JobViews {
    /// `(view name, CREATE VIEW …; COMMENT …)` in creation order.
    pub views: Vec<(String, String)>,
    /// Geometry type of the unit view (`MultiPolygon`, `MultiPoint`, `Geometry`).
    pub geometry_type: String,
    /// A hash of the definitions.
    pub definition: String,
}

/// The geometry expression of the unit view and its type: the source column
/// itself when it has a type modifier, else a cast that gives QGIS a typed
/// column.
fn unit_geometry(info: &SourceInfo, data: &Dataset) -> (String, String) {
    let column = format!("s.{}", quote_ident(&info.geom_column));
    let srid = info.source_srid;
    if info.declared_geometry_type != "GEOMETRY" && info.declared_geometry_type != "GEOGRAPHY" {
        return (column, info.declared_geometry_type.clone());
    }
    let column = if info.declared_geometry_type == "GEOGRAPHY" {
        format!("{column}::geometry")
    } else if srid != 0 {
        // An untyped column may mix SRIDs (a run with --distance-srid reads
        // it); the layer shows every row in the source SRID, so the type
        // modifier below holds for every row.
        format!(
            "CASE WHEN ST_SRID({column}) = {srid} THEN {column} ELSE ST_Transform({column}, {srid}) END"
        )
    } else {
        column
    };
    let kinds = data.geometry_kinds;
    let kind = match (kinds.points, kinds.polygons, kinds.other) {
        (false, true, false) => "MultiPolygon",
        (true, false, false) => "MultiPoint",
        _ => "Geometry",
    };
    let expression = if kind == "Geometry" {
        format!("{column}::geometry(Geometry, {srid})")
    } else {
        format!("ST_Multi({column})::geometry({kind}, {srid})")
    };
    (expression, kind.to_string())
}

/// The views of job `job` in `schema` for this source.
pub fn job_views(
    schema: &str,
    job: &str,
    info: &SourceInfo,
    data: &Dataset,
    regions: bool,
) -> JobViews {
    let q = |name: &str| format!("{}.{}", quote_ident(schema), quote_ident(name));
    let latest = format!(
        "(SELECT r.run_id FROM {runs} r WHERE r.job = {job_literal} AND r.status = 'succeeded' \
         AND r.primary_run_id IS NULL ORDER BY r.finished_at DESC LIMIT 1)",
        runs = q("runs"),
        job_literal = quote_literal(job)
    );
    let id = quote_ident(&info.id_column);
    let (cast, fid) = match info.id_kind {
        IdKind::Integer => ("bigint", format!("s.{id}")),
        IdKind::Text => (
            "text",
            "(row_number() OVER (ORDER BY e.unit_id))::integer".to_string(),
        ),
    };
    let (geometry, geometry_type) = unit_geometry(info, data);
    let unit_view = q(job);
    let mut views = vec![(
        job.to_string(),
        format!(
            "CREATE VIEW {unit_view} AS
             SELECT {fid} AS fid, s.{id} AS unit_id, e.run_id, e.fold, e.observed, e.predicted, e.residual,
                    e.abs_error, e.rmse, e.repetitions, e.loss, {geometry} AS geom
             FROM {unit_errors} e JOIN {source} s ON s.{id} = e.unit_id::{cast}
             WHERE e.run_id = {latest};
             COMMENT ON VIEW {unit_view} IS {comment};",
            unit_errors = q("unit_errors"),
            source = info.qualified_table,
            comment = quote_literal(&format!(
                "geofold: per-unit held-out errors of the latest successful run of job {job}; key: fid; \
                 residual = observed - predicted; loss: the log-loss or Poisson deviance term of binary and count models; \
                 fold: the unit's test fold in repetition 1"
            )),
        ),
    )];
    if regions {
        let name = format!("{job}{REGIONS_SUFFIX}");
        let view = q(&name);
        views.push((
            name,
            format!(
                "CREATE VIEW {view} AS
                 SELECT g.region_id, g.run_id, g.fold, g.kind, g.label, g.units,
                        g.geom::geometry(MultiPolygon, {srid}) AS geom
                 FROM {regions} g WHERE g.repetition = 1 AND g.run_id = {latest};
                 COMMENT ON VIEW {view} IS {comment};",
                srid = info.srid,
                regions = q("fold_regions"),
                comment = quote_literal(&format!(
                    "geofold: fold regions (repetition 1) of the latest successful run of job {job}; key: region_id"
                )),
            ),
        ));
    }
    let mut hasher = Sha256::new();
    for (_, sql) in &views {
        hasher.update(sql.as_bytes());
    }
    let definition = hasher
        .finalize()
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect();
    JobViews {
        views,
        geometry_type,
        definition,
    }
}
