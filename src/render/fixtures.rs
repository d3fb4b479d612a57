//! Invented map data for the tests, the examples and the size benchmark.
//!
//! Every shape and value here is generated: square units on a grid in a
//! made-up projected CRS, folds by square blocks of cells, a one-cell buffer of
//! excluded units around each fold, and residuals from a fixed arithmetic
//! pattern (no randomness, so every call gives the same data). Nothing describes
//! a real place.

use geo_types::{polygon, Geometry, LineString, MultiPolygon, Polygon};

use super::input::{CrsInfo, FoldRegion, MapInput, MapUnit};

/// The invented CRS of the fixtures: projected, in metres.
pub fn fixture_crs() -> CrsInfo {
    CrsInfo::projected_metres(32631, "WGS 84 / UTM zone 31N")
}

fn square(x: f64, y: f64, size: f64) -> Polygon<f64> {
    polygon![(x: x, y: y), (x: x + size, y: y), (x: x + size, y: y + size), (x: x, y: y + size), (x: x, y: y)]
}

/// Four 1 km cells in a 2 × 2 grid with known values:
///
/// | unit | cell | fold | abs error | residual | shape |
/// |---|---|---|---|---|---|
/// | 0 | bottom left | 1 | 0.5 | −0.5 | square |
/// | 1 | bottom right | 2 | 1.5 | 1.5 | square |
/// | 2 | top left | 3 | 2.5 | −2.5 | square with a 400 m hole in the middle |
/// | 3 | top right | 4 | 3.5 | 3.5 | two 400 m wide strips, 200 m apart |
///
/// Unit 1 is excluded from fold 1's training set. Each fold's region is its cell.
pub fn tiny_map() -> MapInput {
    let (x0, y0) = (500_000.0, 5_600_000.0);
    let cell = 1000.0;
    let hole = LineString::from(vec![
        (x0 + 300.0, y0 + 1300.0),
        (x0 + 700.0, y0 + 1300.0),
        (x0 + 700.0, y0 + 1700.0),
        (x0 + 300.0, y0 + 1700.0),
        (x0 + 300.0, y0 + 1300.0),
    ]);
    let with_hole = Polygon::new(square(x0, y0 + cell, cell).exterior().clone(), vec![hole]);
    let strips = MultiPolygon::new(vec![
        polygon![(x: x0 + 1000.0, y: y0 + 1000.0), (x: x0 + 1400.0, y: y0 + 1000.0),
                 (x: x0 + 1400.0, y: y0 + 2000.0), (x: x0 + 1000.0, y: y0 + 2000.0)],
        polygon![(x: x0 + 1600.0, y: y0 + 1000.0), (x: x0 + 2000.0, y: y0 + 1000.0),
                 (x: x0 + 2000.0, y: y0 + 2000.0), (x: x0 + 1600.0, y: y0 + 2000.0)],
    ]);
    let geometries = [
        Geometry::Polygon(square(x0, y0, cell)),
        Geometry::Polygon(square(x0 + cell, y0, cell)),
        Geometry::Polygon(with_hole),
        Geometry::MultiPolygon(strips),
    ];
    let values = [(0.5, -0.5), (1.5, 1.5), (2.5, -2.5), (3.5, 3.5)];
    let units = geometries
        .into_iter()
        .zip(values)
        .enumerate()
        .map(|(i, (geometry, (abs_error, residual)))| MapUnit {
            geometry,
            fold: Some(i as u32 + 1),
            excluded_from: if i == 1 { vec![1] } else { Vec::new() },
            abs_error: Some(abs_error),
            residual: Some(residual),
        })
        .collect();
    let corners = [(0.0, 0.0), (cell, 0.0), (0.0, cell), (cell, cell)];
    let regions = corners
        .iter()
        .enumerate()
        .map(|(i, (dx, dy))| FoldRegion {
            fold: i as u32 + 1,
            geometry: MultiPolygon::new(vec![square(x0 + dx, y0 + dy, cell)]),
        })
        .collect();
    MapInput {
        title: "tiny fixture".to_string(),
        crs: fixture_crs(),
        target: "nitrate".to_string(),
        target_unit: "mg/L".to_string(),
        units,
        regions,
    }
}

/// `columns × rows` square units of `cell` metres; folds by blocks of
/// `block × block` cells, numbered 1..=`folds` in a repeating diagonal pattern;
/// units in a cell next to (8-neighbourhood) a cell of another fold are
/// excluded from that fold's training set; residuals follow a fixed pattern
/// between −5 and 5, and the absolute error is their absolute value.
pub fn grid_map(columns: u32, rows: u32, cell: f64, block: u32, folds: u32) -> MapInput {
    let block = block.max(1);
    let folds = folds.max(1);
    let fold_of = |c: u32, r: u32| ((c / block) + 2 * (r / block)) % folds + 1;
    let mut units = Vec::with_capacity((columns * rows) as usize);
    for r in 0..rows {
        for c in 0..columns {
            let fold = fold_of(c, r);
            let mut excluded_from = Vec::new();
            for (dc, dr) in [
                (-1i64, -1i64),
                (0, -1),
                (1, -1),
                (-1, 0),
                (1, 0),
                (-1, 1),
                (0, 1),
                (1, 1),
            ] {
                let (nc, nr) = (i64::from(c) + dc, i64::from(r) + dr);
                if nc < 0 || nr < 0 || nc >= i64::from(columns) || nr >= i64::from(rows) {
                    continue;
                }
                let other = fold_of(nc as u32, nr as u32);
                if other != fold && !excluded_from.contains(&other) {
                    excluded_from.push(other);
                }
            }
            excluded_from.sort_unstable();
            let pattern =
                (u64::from(c) * 7919 + u64::from(r) * 104_729 + u64::from(c * r) * 31) % 1000;
            let residual = (pattern as f64 / 100.0 - 5.0) * (1.0 + f64::from(c % 7) / 7.0) / 2.0;
            units.push(MapUnit {
                geometry: Geometry::Polygon(square(f64::from(c) * cell, f64::from(r) * cell, cell)),
                fold: Some(fold),
                excluded_from,
                abs_error: Some(residual.abs()),
                residual: Some(residual),
            });
        }
    }
    let mut regions: Vec<FoldRegion> = (1..=folds)
        .map(|fold| FoldRegion {
            fold,
            geometry: MultiPolygon::new(Vec::new()),
        })
        .collect();
    let side = f64::from(block) * cell;
    for br in 0..rows.div_ceil(block) {
        for bc in 0..columns.div_ceil(block) {
            let fold = fold_of(bc * block, br * block);
            let width = (f64::from(columns) * cell - f64::from(bc) * side).min(side);
            let height = (f64::from(rows) * cell - f64::from(br) * side).min(side);
            let (x, y) = (f64::from(bc) * side, f64::from(br) * side);
            regions[(fold - 1) as usize].geometry.0.push(polygon![
                (x: x, y: y), (x: x + width, y: y), (x: x + width, y: y + height), (x: x, y: y + height)
            ]);
        }
    }
    MapInput {
        title: format!("{columns} \u{00d7} {rows} grid fixture"),
        crs: fixture_crs(),
        target: "nitrate".to_string(),
        target_unit: "mg/L".to_string(),
        units,
        regions,
    }
}
