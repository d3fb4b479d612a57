//! Reading a stored run back out of either store, so that `report` and `map`
//! draw what a run stored without knowing where it is stored.
//!
//! [`ReadBack`] has three reads, each the same in both stores:
//! - [`ReadBack::read_rows`]: the rows of any results table
//!   ([`crate::results::TableDef`]) whose key column (`run_id`,
//!   `analysis_id`, `job`, …) is among given values, as
//!   [`Owned`] values in the definition's column order (what `geofold
//!   export` copies, too);
//! - [`ReadBack::unit_geometries`]: each unit's geometry, keyed by the unit
//!   id as text, in the run's distance CRS when the store can give it;
//! - [`ReadBack::crs`]: what a CRS is, for captions, scale bars and north
//!   arrows.
//!
//! Values travel as the store holds them; nothing is derived here (the
//! residual and the errors are derived by [`crate::readback`], as the views
//! of [`crate::results::views`] define them).

use geo_types::Geometry;
use serde::Serialize;

use super::CrsKind;
use crate::error::Error;
use crate::results::rows::Owned;
use crate::results::TableDef;

/// Where a run's units came from, as its `runs` row records it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UnitSource {
    /// The run (its units are the unit ids of its `held_out` rows).
    pub run_id: String,
    /// The job (a GeoPackage keeps the unit geometries of the job's latest
    /// run in the layer named after it).
    pub job: String,
    /// `postgis` or `gpkg`: where the source was.
    pub source_store: String,
    /// The source table or layer as recorded (`schema.table`, `file.gpkg:layer`).
    pub source_table: String,
    /// The source's id column.
    pub id_column: String,
    /// The source's geometry column.
    pub geometry_column: String,
    /// SRID of the source geometries.
    pub source_srid: i32,
    /// SRID the run computed distances and regions in.
    pub distance_srid: i32,
}

/// What [`ReadBack::unit_geometries`] read, besides the shapes.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct GeometryOrigin {
    /// Where the shapes came from, in words: `PostGIS table demo.cells`,
    /// `layer demo_nitrate of results.gpkg`.
    pub read_from: String,
    /// The SRID of the shapes handed over (the distance SRID, unless the
    /// store could not transform them).
    pub srid: i32,
}

/// What a CRS is.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CrsFacts {
    /// The SRID (0 or negative: undefined).
    pub srid: i32,
    /// Its name from the WKT (`WGS 84 / UTM zone 31N`), when the store has one.
    pub name: Option<String>,
    /// Projected, geographic or undefined.
    pub kind: CrsKind,
    /// Name of the coordinate unit (`metre`, `US survey foot`, `degree`).
    pub unit_name: Option<String>,
    /// Metres per coordinate unit of a projected CRS, from the WKT's unit.
    pub metres_per_unit: Option<f64>,
}

impl CrsFacts {
    /// An undefined CRS: plain coordinates.
    pub fn undefined(srid: i32) -> CrsFacts {
        CrsFacts {
            srid,
            name: None,
            kind: CrsKind::Undefined,
            unit_name: None,
            metres_per_unit: None,
        }
    }

    /// The facts a WKT (WKT1 or WKT2) states: its name, whether it is
    /// geographic (or `proj4` says `+proj=longlat`), its last unit and that
    /// unit's factor. An empty or `undefined` WKT is an undefined CRS.
    pub fn from_wkt(srid: i32, wkt: &str, proj4: &str) -> CrsFacts {
        let trimmed = wkt.trim();
        if srid <= 0 || trimmed.is_empty() || trimmed.eq_ignore_ascii_case("undefined") {
            return CrsFacts::undefined(srid);
        }
        let upper = trimmed.to_ascii_uppercase();
        let geographic = upper.starts_with("GEOGCS[")
            || upper.starts_with("GEOGCRS[")
            || upper.starts_with("GEODCRS[")
            || proj4.contains("+proj=longlat");
        let unit = super::wkb::wkt_unit(trimmed);
        CrsFacts {
            srid,
            name: super::gpkg::schema::wkt_name(trimmed),
            kind: if geographic {
                CrsKind::Geographic
            } else {
                CrsKind::Projected
            },
            unit_name: unit.as_ref().map(|u| u.0.clone()),
            metres_per_unit: if geographic {
                None
            } else {
                unit.and_then(|u| u.1)
            },
        }
    }
}

/// Reads a stored run back.
pub trait ReadBack {
    /// Every row of `table` whose column `key` holds one of `values` (compared
    /// as text), in the definition's column order, each handed to `visit`.
    /// Keyed tables come in key order; per-unit tables in the order they were
    /// written (callers that need an order sort).
    ///
    /// # Errors
    /// A `key` that is not a column of `table` ([`Error::Internal`]); database
    /// or file errors; an error returned by `visit` stops the read.
    fn read_rows(
        &mut self,
        table: &TableDef,
        key: &str,
        values: &[String],
        visit: &mut dyn FnMut(Vec<Owned>) -> Result<(), Error>,
    ) -> Result<(), Error>;

    /// Each unit's geometry, handed to `visit` with its id as text (ids of
    /// units the source no longer has are simply not visited; a unit whose
    /// geometry is NULL or cannot be decoded is visited with `None`).
    ///
    /// # Errors
    /// [`Error::NotFound`] when neither the source nor (in a GeoPackage) the
    /// job's unit layer can be read; database or file errors.
    fn unit_geometries(
        &mut self,
        units: &UnitSource,
        visit: &mut dyn FnMut(String, Option<Geometry<f64>>) -> Result<(), Error>,
    ) -> Result<GeometryOrigin, Error>;

    /// What the CRS of `srid` is, from the store's own CRS table; an SRID the
    /// store does not know is undefined.
    ///
    /// # Errors
    /// Database or file errors.
    fn crs(&mut self, srid: i32) -> Result<CrsFacts, Error>;
}

/// The SELECT list of `table` in a store whose table has the columns
/// `present`: `read(column)` for each column it has, `missing(type)` (a typed
/// NULL) for each it lacks (a store of an earlier results version); None when
/// it lacks the key column itself (no row can match).
pub fn select_list(
    table: &TableDef,
    key: &str,
    present: &[String],
    read: impl Fn(&crate::results::Column) -> String,
    missing: impl Fn(crate::results::ColumnType) -> String,
) -> Option<Vec<String>> {
    let has = |name: &str| present.iter().any(|p| p == name);
    has(key).then(|| {
        table
            .columns
            .iter()
            .map(|c| if has(c.name) { read(c) } else { missing(c.ty) })
            .collect()
    })
}

/// The position of column `key` in `table`.
///
/// # Errors
/// [`Error::Internal`] when `table` has no such column.
pub fn key_column<'t>(table: &'t TableDef, key: &str) -> Result<&'t crate::results::Column, Error> {
    table
        .columns
        .iter()
        .find(|c| c.name == key)
        .ok_or_else(|| Error::Internal(format!("table {} has no column {key}", table.name)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wkt_facts_give_name_kind_and_unit() {
        let utm = CrsFacts::from_wkt(32631, crate::demo::DEMO_SRS_WKT, "");
        assert_eq!(utm.kind, CrsKind::Projected);
        assert_eq!(utm.unit_name.as_deref(), Some("metre"));
        assert_eq!(utm.metres_per_unit, Some(1.0));
        assert!(utm.name.as_deref().is_some_and(|n| n.contains("UTM")));
        // EPSG:2240 states its unit as the US survey foot, 0.304800609601219 m
        // (EPSG registry, unit 9003).
        let feet = CrsFacts::from_wkt(
            2240,
            "PROJCS[\"NAD83 / Georgia West (ftUS)\",GEOGCS[\"NAD83\",UNIT[\"degree\",0.0174532925199433]],\
             UNIT[\"US survey foot\",0.304800609601219,AUTHORITY[\"EPSG\",\"9003\"]]]",
            "",
        );
        assert_eq!(feet.unit_name.as_deref(), Some("US survey foot"));
        assert_eq!(feet.metres_per_unit, Some(0.304800609601219));
        let geographic = CrsFacts::from_wkt(
            4326,
            "GEOGCS[\"WGS 84\",UNIT[\"degree\",0.0174532925199433]]",
            "",
        );
        assert_eq!(geographic.kind, CrsKind::Geographic);
        assert_eq!(geographic.metres_per_unit, None);
        assert_eq!(CrsFacts::from_wkt(0, "", "").kind, CrsKind::Undefined);
        assert_eq!(
            CrsFacts::from_wkt(-1, "undefined", "").kind,
            CrsKind::Undefined
        );
    }
}
