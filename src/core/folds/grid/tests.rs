//! Tests of the grid scheme.

use super::*;
use crate::core::testing::Points;

fn grid(block_size: f64, folds: u32) -> Grid {
    Grid::new(GridParams {
        block_size,
        grid_origin: [0.0, 0.0],
        folds,
        block_shape: BlockShape::Square,
        deal: Deal::Random,
    })
    .unwrap()
}

fn lattice(n: usize, spacing: f64) -> Points {
    Points::new(
        (0..n * n)
            .map(|i| {
                [
                    (i % n) as f64 * spacing + 0.5,
                    (i / n) as f64 * spacing + 0.5,
                ]
            })
            .collect(),
    )
}

#[test]
fn cells_are_half_open() {
    let p = grid(10.0, 2).params;
    assert_eq!(cell_of([0.0, 0.0], &p), (0, 0));
    assert_eq!(cell_of([9.999, 9.999], &p), (0, 0));
    assert_eq!(cell_of([10.0, 0.0], &p), (1, 0));
    assert_eq!(cell_of([-0.001, 0.0], &p), (-1, 0));
}

#[test]
fn units_of_a_block_share_a_fold_and_folds_are_balanced() {
    let points = lattice(30, 1.0);
    let scheme = grid(4.0, 5);
    let set = scheme
        .assign(&points.input(), &mut FoldRng::new(11, 0))
        .unwrap();
    for (i, point) in points.points.iter().enumerate() {
        let (col, row) = cell_of(*point, &scheme.params);
        let region = set
            .regions
            .iter()
            .find(|r| r.label == format!("block {col},{row}"))
            .unwrap();
        assert_eq!(set.fold_of[i], region.fold);
    }
    let sizes = set.fold_sizes();
    let largest_block = set.regions.iter().map(|r| r.units as usize).max().unwrap();
    assert!(sizes.iter().all(|&s| s > 0));
    assert!(
        sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= largest_block,
        "{sizes:?}"
    );
    assert_eq!(set.regions.iter().map(|r| r.units).sum::<u32>(), 900);
    assert_eq!(set.facts["occupied_blocks"], 64);
    assert!(set.excluded.is_empty());
}

#[test]
fn one_block_cannot_make_folds() {
    // A block larger than the extent puts every unit in one block, which must be
    // an error for k > 1 (Roberts et al. 2017 degenerate case; common practice).
    let points = lattice(5, 1.0);
    let error = grid(1000.0, 2)
        .assign(&points.input(), &mut FoldRng::new(1, 0))
        .unwrap_err();
    assert!(
        error.to_string().contains("larger than the study area"),
        "{error}"
    );
    assert_eq!(error.exit_code(), crate::error::exit::DATA);
    // Blocks inside the extent but fewer than the folds.
    let error = grid(3.0, 5)
        .assign(&points.input(), &mut FoldRng::new(1, 0))
        .unwrap_err();
    assert!(
        error.to_string().contains("only 4 occupied blocks"),
        "{error}"
    );
}

#[test]
fn tiny_blocks_give_one_unit_per_block_and_a_warning() {
    let points = lattice(10, 1.0);
    let set = grid(0.5, 10)
        .assign(&points.input(), &mut FoldRng::new(3, 0))
        .unwrap();
    assert_eq!(set.regions.len(), 100);
    assert!(set.fold_sizes().iter().all(|&s| s == 10));
    assert!(
        set.warnings[0].contains("close to random"),
        "{:?}",
        set.warnings
    );
}

#[test]
fn seeds_change_the_deal_but_not_reproducibility() {
    let points = lattice(20, 1.0);
    let scheme = grid(3.0, 4);
    let a = scheme
        .assign(&points.input(), &mut FoldRng::new(9, 0))
        .unwrap();
    let b = scheme
        .assign(&points.input(), &mut FoldRng::new(9, 0))
        .unwrap();
    let c = scheme
        .assign(&points.input(), &mut FoldRng::new(9, 1))
        .unwrap();
    assert_eq!(a, b);
    assert_ne!(a.fold_of, c.fold_of);
}

#[test]
fn bad_sizes_and_origins_are_refused_before_reading() {
    for size in [0.0, -1.0, f64::NAN, f64::INFINITY, 1e300] {
        let error = Grid::new(GridParams {
            block_size: size,
            grid_origin: [0.0, 0.0],
            folds: 5,
            block_shape: BlockShape::Square,
            deal: Deal::Random,
        })
        .unwrap_err();
        assert_eq!(error.exit_code(), crate::error::exit::USAGE, "{size}");
    }
    let error = Grid::new(GridParams {
        block_size: 10.0,
        grid_origin: [f64::NAN, 0.0],
        folds: 5,
        block_shape: BlockShape::Square,
        deal: Deal::Random,
    })
    .unwrap_err();
    assert_eq!(error.exit_code(), crate::error::exit::USAGE);
    // Coordinates far beyond what the block size can number.
    let points = Points::new(vec![[1e11, 0.0], [0.0, 0.0]]);
    let error = grid(1e-5, 2)
        .assign(&points.input(), &mut FoldRng::new(1, 0))
        .unwrap_err();
    assert!(error.to_string().contains("overflow"), "{error}");
}

#[test]
fn options_parse_from_the_map() {
    let mut options = Options::new();
    options.insert("block-size".into(), 4000.into());
    options.insert("grid-origin".into(), "-5000,0".into());
    let scheme = build(&options).unwrap();
    assert_eq!(
        scheme.parameters()["grid-origin"],
        serde_json::json!([-5000.0, 0.0])
    );
    assert_eq!(scheme.parameters()["folds"], 5);
    options.remove("block-size");
    let error = build(&options).err().unwrap();
    assert!(error.to_string().contains("needs --block-size"));
}

fn hex_grid(block_size: f64, folds: u32, deal: Deal) -> Grid {
    Grid::new(GridParams {
        block_size,
        grid_origin: [0.0, 0.0],
        folds,
        block_shape: BlockShape::Hex,
        deal,
    })
    .unwrap()
}

#[test]
fn hexagons_hold_their_units_and_are_dealt_like_squares() {
    use geo::Contains;
    let points = lattice(30, 1.0);
    let scheme = hex_grid(4.0, 5, Deal::Random);
    let set = scheme
        .assign(&points.input(), &mut FoldRng::new(11, 0))
        .unwrap();
    for (i, point) in points.points.iter().enumerate() {
        let region = set
            .regions
            .iter()
            .find(|r| {
                r.geometry
                    .contains(&geo_types::Point::new(point[0], point[1]))
            })
            .expect("every unit inside a hexagon");
        assert_eq!(set.fold_of[i], region.fold);
        assert_eq!(region.kind, "hexagon");
    }
    let sizes = set.fold_sizes();
    let largest_block = set.regions.iter().map(|r| r.units as usize).max().unwrap();
    assert!(sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= largest_block);
    assert_eq!(set.regions.iter().map(|r| r.units).sum::<u32>(), 900);
}

#[test]
fn systematic_deals_repeat_and_keep_neighbouring_blocks_apart() {
    let points = lattice(40, 1.0);
    for scheme in [
        Grid::new(GridParams {
            block_size: 5.0,
            grid_origin: [0.0, 0.0],
            folds: 4,
            block_shape: BlockShape::Square,
            deal: Deal::Systematic,
        })
        .unwrap(),
        hex_grid(5.0, 3, Deal::Systematic),
    ] {
        assert!(!scheme.randomised());
        let a = scheme
            .assign(&points.input(), &mut FoldRng::new(1, 0))
            .unwrap();
        let b = scheme
            .assign(&points.input(), &mut FoldRng::new(2, 5))
            .unwrap();
        assert_eq!(a, b);
        let cells = scheme.cells();
        let fold_of_block: std::collections::HashMap<(i64, i64), u32> = points
            .points
            .iter()
            .zip(&a.fold_of)
            .map(|(p, &f)| (cells.cell_of(*p), f))
            .collect();
        for (&cell, &fold) in &fold_of_block {
            for other in cells.edge_neighbours(cell) {
                if let Some(&other_fold) = fold_of_block.get(&other) {
                    assert_ne!(fold, other_fold, "{cell:?} and {other:?}");
                }
            }
        }
    }
    // Two folds cannot colour hexagons.
    let error = Grid::new(GridParams {
        block_size: 5.0,
        grid_origin: [0.0, 0.0],
        folds: 2,
        block_shape: BlockShape::Hex,
        deal: Deal::Systematic,
    })
    .unwrap_err();
    assert_eq!(error.exit_code(), crate::error::exit::USAGE);
}

#[test]
fn shape_and_deal_parse_from_the_map() {
    let mut options = Options::new();
    options.insert("block-size".into(), 4000.into());
    options.insert("block-shape".into(), "hex".into());
    options.insert("deal".into(), "systematic".into());
    let scheme = build(&options).unwrap();
    assert_eq!(scheme.parameters()["block-shape"], "hex");
    assert!(!scheme.randomised());
    options.insert("block-shape".into(), "triangle".into());
    let error = build(&options).err().unwrap();
    assert!(error.to_string().contains("triangle"), "{error}");
}
