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

use super::report::input::{
    Better, Comparison, Correlogram, CorrelogramBin, DistanceRow, FittedVariogram, FoldCoefficient,
    FoldScores, Gate, HistoryPoint, NearestDistances, ReportInput, ResidualMoran, RunFacts, Score,
    ScoreDefinition, ScoreHistory, ScoreTable, Semivariogram, Setting, SkipReason, TestDistances,
    VariogramBin, VariogramModel,
};

fn score_list(rmse: f64, mae: f64, bias: f64) -> Vec<Score> {
    vec![
        Score {
            name: "RMSE".to_string(),
            value: rmse,
        },
        Score {
            name: "MAE".to_string(),
            value: mae,
        },
        Score {
            name: "bias".to_string(),
            value: bias,
        },
    ]
}

/// A report with only what every run has: settings and scores (four folds),
/// no comparison and none of the optional diagnostics.
pub fn minimal_report() -> ReportInput {
    let setting = |name: &str, value: &str| Setting {
        name: name.to_string(),
        value: value.to_string(),
    };
    let folds = (1..=4u32)
        .map(|fold| {
            let f = f64::from(fold);
            FoldScores {
                repetition: 1,
                fold,
                n_train: 3,
                n_test: 1,
                scores: score_list(1.0 + 0.5 * f, 0.8 + 0.4 * f, 0.1 * f - 0.2),
            }
        })
        .collect();
    ReportInput {
        run: RunFacts {
            job: "invented-basin".to_string(),
            run_id: "00000000-0000-4000-8000-000000000001".to_string(),
            started: "2026-01-01 00:00:00 UTC".to_string(),
            finished: Some("2026-01-01 00:00:02 UTC".to_string()),
            tool_version: "0.1.0".to_string(),
            source: "GeoPackage invented.gpkg, layer cells".to_string(),
            crs: "EPSG:32631 WGS 84 / UTM zone 31N (metre)".to_string(),
            target: "nitrate".to_string(),
            target_unit: "mg/L".to_string(),
            features: vec!["farmland_share".to_string(), "rainfall_mm".to_string()],
            scheme: "grid blocks".to_string(),
            scheme_settings: vec![
                setting("block size", "1,000 m"),
                setting("folds", "4"),
                setting("repetitions", "1"),
                setting("seed", "1"),
            ],
            model: "ordinary least squares".to_string(),
            model_settings: Vec::new(),
            units_used: 4,
            units_skipped: vec![SkipReason {
                reason: "target is missing".to_string(),
                count: 2,
            }],
            fingerprint: "sha256:0123456789abcdef".to_string(),
        },
        scores: ScoreTable {
            definitions: vec![
                ScoreDefinition {
                    name: "RMSE".to_string(),
                    unit: "mg/L".to_string(),
                    better: Better::Lower,
                    description: "root mean squared error".to_string(),
                },
                ScoreDefinition {
                    name: "MAE".to_string(),
                    unit: "mg/L".to_string(),
                    better: Better::Lower,
                    description: "mean absolute error".to_string(),
                },
                ScoreDefinition {
                    name: "bias".to_string(),
                    unit: "mg/L".to_string(),
                    better: Better::NearZero,
                    description: "mean of predicted minus observed".to_string(),
                },
            ],
            pooled: score_list(2.4, 1.8, 0.05),
            baseline: score_list(3.0, 2.5, 0.0),
            folds,
        },
        comparison: None,
        coefficients: Vec::new(),
        held_out_moran: None,
        semivariogram: None,
        correlogram: None,
        nearest_distances: None,
        test_distances: None,
        history: Vec::new(),
    }
}

/// [`minimal_report`] with every optional section filled with invented values:
/// a random-fold comparison, coefficients, a semivariogram with a spherical
/// model, a correlogram, nearest distances and a history of eight runs with a
/// gate breached by the last two.
pub fn full_report() -> ReportInput {
    let mut report = minimal_report();
    report.comparison = Some(Comparison {
        label: "random 4-fold".to_string(),
        run_id: "00000000-0000-4000-8000-000000000002".to_string(),
        pooled: score_list(1.6, 1.2, 0.01),
    });
    for fold in 1..=4u32 {
        let f = f64::from(fold);
        for (term, value) in [
            ("intercept", 10.0 + f),
            ("farmland_share", 4.0 - f),
            ("rainfall_mm", 0.02 * f),
        ] {
            report.coefficients.push(FoldCoefficient {
                repetition: 1,
                fold,
                term: term.to_string(),
                value,
            });
        }
    }
    report.held_out_moran = Some(ResidualMoran {
        weights: "the 8 nearest units as neighbours (knn:8, weights row-standardised)".to_string(),
        units: 4,
        sampled_from: None,
        value: 0.21,
        expected: -1.0 / 3.0,
        z: 2.4,
        p_value: 0.016,
    });
    let fitted = FittedVariogram {
        model: VariogramModel::Spherical,
        nugget: 0.5,
        partial_sill: 2.0,
        range: 1500.0,
    };
    report.semivariogram = Some(Semivariogram {
        of: "the target".to_string(),
        distance_unit: "m".to_string(),
        bins: (1..=10u32)
            .map(|i| {
                let lag = 200.0 * f64::from(i);
                VariogramBin {
                    lag,
                    gamma: fitted.gamma(lag) + 0.05 * f64::from(i % 3),
                    pairs: 40 + 10 * u64::from(i),
                }
            })
            .collect(),
        fitted: Some(fitted),
        advice: "The fitted range is about 1,500 m: blocks of at least that size keep test units apart from \
                 correlated training units."
            .to_string(),
    });
    report.correlogram = Some(Correlogram {
        of: "residuals".to_string(),
        distance_unit: "m".to_string(),
        bins: (1..=6)
            .map(|i| CorrelogramBin {
                lag: 300.0 * f64::from(i),
                morans_i: 0.6 - 0.15 * f64::from(i),
                pairs: 100,
                p_value: Some(0.001 * f64::from(i)),
            })
            .collect(),
        note: String::new(),
    });
    report.nearest_distances = Some(NearestDistances {
        distance_unit: "m".to_string(),
        cross_validation: (0..200).map(|i| 100.0 + 5.0 * f64::from(i % 40)).collect(),
        prediction: (0..150).map(|i| 300.0 + 9.0 * f64::from(i % 50)).collect(),
    });
    report.test_distances = Some(TestDistances {
        distance_unit: "m".to_string(),
        run_median: Some(1250.0),
        comparison: Some(("random 4-fold".to_string(), 400.0)),
        prediction_median: Some(2000.0),
        rows: vec![
            DistanceRow {
                label: "this run, all folds".to_string(),
                n: 24_000,
                sampled_from: Some(40_000),
                quantiles: [100.0, 500.0, 1250.0, 2000.0, 3000.0],
            },
            DistanceRow {
                label: "fold 1".to_string(),
                n: 2_000,
                sampled_from: None,
                quantiles: [120.0, 520.0, 1300.0, 2100.0, 2900.0],
            },
        ],
    });
    report.history = vec![ScoreHistory {
        score: "RMSE".to_string(),
        unit: "mg/L".to_string(),
        points: (1..=8)
            .map(|i| HistoryPoint {
                run_id: format!("run-{i}"),
                label: format!("2026-01-0{i}"),
                value: 2.0 + 0.1 * f64::from(i),
                breached: i >= 7,
            })
            .collect(),
        gates: vec![Gate {
            label: "RMSE at most 2.65 mg/L".to_string(),
            value: 2.65,
        }],
    }];
    report
}
