//! A stored run → [`MapInput`]: each unit with its fold of repetition 1, the
//! folds whose training left it out, its absolute error and residual; the
//! fold regions of repetition 1; the CRS in the renderer's terms. Pure.

use geo_types::Geometry;

use super::{StoredRun, UnitRecord};
use crate::adapters::readback::CrsFacts;
use crate::adapters::CrsKind;
use crate::render::{CrsInfo, FoldRegion, MapInput, MapUnit};

/// The CRS as the renderer needs it. A projected CRS whose unit factor is not
/// stated is taken as metres when its unit is named a metre, else drawn with
/// no ground scale (as an undefined CRS: plain coordinates, said so in the
/// caption).
pub fn crs_info(crs: &CrsFacts) -> CrsInfo {
    let name = crs.name.clone().unwrap_or_default();
    match crs.kind {
        CrsKind::Geographic => CrsInfo::geographic_degrees(crs.srid, &name),
        CrsKind::Projected if crs.metres_per_unit.is_some() => CrsInfo {
            srid: crs.srid,
            name,
            geographic: false,
            units_name: crs.unit_name.clone().unwrap_or_else(|| "metre".into()),
            metres_per_unit: crs.metres_per_unit.unwrap_or(1.0),
            centre_latitude: None,
        },
        _ => CrsInfo {
            srid: crs.srid.min(0),
            name,
            geographic: false,
            units_name: String::new(),
            metres_per_unit: 1.0,
            centre_latitude: None,
        },
    }
}

/// A short title: "nitrate_mg_l, job demo_nitrate, run 1a2b3c4d".
pub fn title(stored: &StoredRun) -> String {
    let run = &stored.run;
    format!(
        "{}, job {}, run {}",
        run.target_column,
        run.job,
        run.run_id.chars().take(8).collect::<String>()
    )
}

fn map_unit(unit: &UnitRecord, geometry: Geometry<f64>) -> MapUnit {
    MapUnit {
        geometry,
        fold: unit.fold,
        excluded_from: unit.excluded_from.clone(),
        abs_error: unit.abs_error,
        residual: unit.residual,
    }
}

fn with_units(stored: &StoredRun, target_unit: &str, units: Vec<MapUnit>) -> MapInput {
    MapInput {
        title: title(stored),
        crs: crs_info(&stored.crs),
        target: stored.run.target_column.clone(),
        target_unit: target_unit.to_string(),
        units,
        regions: stored
            .regions
            .iter()
            .map(|(fold, geometry)| FoldRegion {
                fold: *fold,
                geometry: geometry.clone(),
            })
            .collect(),
    }
}

/// The map input of a stored run read with its units; `target_unit` is the
/// target's unit for the legends (the store does not know it), empty for none.
/// Units without a geometry are left out (counted in
/// [`StoredRun::units_without_geometry`]).
pub fn map_input(stored: &StoredRun, target_unit: &str) -> MapInput {
    let units = stored
        .units
        .iter()
        .filter_map(|u| Some(map_unit(u, u.geometry.clone()?)))
        .collect();
    with_units(stored, target_unit, units)
}

/// [`map_input`], moving the unit shapes out of `stored` instead of copying
/// them (at a million units the shapes are most of the memory).
pub fn take_map_input(stored: &mut StoredRun, target_unit: &str) -> MapInput {
    let units = stored
        .units
        .iter_mut()
        .filter_map(|u| {
            let geometry = u.geometry.take()?;
            Some(map_unit(u, geometry))
        })
        .collect();
    with_units(stored, target_unit, units)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crs_facts_become_renderer_crs() {
        let utm = CrsFacts::from_wkt(32631, crate::demo::DEMO_SRS_WKT, "");
        let info = crs_info(&utm);
        assert!(!info.geographic);
        assert_eq!(info.metres_per_unit, 1.0);
        assert_eq!(info.units_name, "metre");
        let undefined = crs_info(&CrsFacts::undefined(0));
        assert_eq!(undefined.srid, 0);
        let geographic = crs_info(&CrsFacts::from_wkt(
            4326,
            "GEOGCS[\"WGS 84\",UNIT[\"degree\",0.0174532925199433]]",
            "",
        ));
        assert!(geographic.geographic);
        assert_eq!(geographic.name, "WGS 84");
    }
}
