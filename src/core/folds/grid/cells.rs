//! The cells of the block grid: squares or hexagons, which cell a point is
//! in, each cell's outline, and the fixed dealing pattern.
//!
//! # Squares
//! Cell `(col, row)` is `[x0 + col·s, x0 + (col+1)·s) × [y0 + row·s, y0 + (row+1)·s)`:
//! a point is in `(floor((x − x0)/s), floor((y − y0)/s))`, closed on the west
//! and south edges.
//!
//! # Hexagons
//! Flat-topped hexagons (two sides parallel to the x axis) whose opposite
//! sides are `s` apart (`s` = `block-size`), so their side and circumradius is
//! `R = s/√3`. Hexagon `(col, row)` is centred on
//! `(x0 + col·(3/2)R, y0 + row·s + (col odd ? s/2 : 0))`: columns `3R/2` apart,
//! odd columns raised by half a hexagon, hexagon `(0, 0)` centred on the
//! origin. A point is in the hexagon whose centre is nearest (the hexagons
//! are the Voronoi cells of their centres); a point equidistant from two or
//! three centres (on an edge or a corner, in double precision) goes to the
//! lowest `(col, row)`.
//!
//! # Systematic dealing
//! - Squares: fold `(col + m·row) mod k`, with `m = 1` for `k ≤ 3` and
//!   `m = 2` for `k ≥ 4`. Squares sharing an edge differ by `1` or `m` (mod
//!   `k`), never 0, so they never share a fold; for `k ≥ 4` squares sharing
//!   only a corner (differing by `m ± 1`) do not either. With `k = 2` it is a
//!   checkerboard.
//! - Hexagons: in axial coordinates `q = col`, `r = row − floor(col/2)`, fold
//!   `(q − r) mod k`. The six neighbours of a hexagon differ by ±1 or ±2, so
//!   with `k ≥ 3` hexagons sharing an edge never share a fold. Two folds are
//!   not enough: three hexagons meet at every corner.

use geo_types::{Coord, LineString, Polygon};

use crate::core::geometry::cell_polygon;

/// The shape of the blocks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shape {
    /// Squares of side `block-size`.
    Square,
    /// Flat-topped hexagons `block-size` between opposite sides.
    Hex,
}

/// A grid of cells.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cells {
    /// The shape.
    pub shape: Shape,
    /// The block size (see the module doc), CRS units.
    pub size: f64,
    /// The origin: a square corner, or a hexagon's centre.
    pub origin: [f64; 2],
}

impl Cells {
    /// Circumradius of a hexagon.
    fn radius(&self) -> f64 {
        self.size / 3f64.sqrt()
    }

    /// Distance between hexagon columns.
    fn column_step(&self) -> f64 {
        1.5 * self.radius()
    }

    /// The centre of hexagon `(col, row)`.
    fn hex_centre(&self, col: i64, row: i64) -> [f64; 2] {
        let lift = if col.rem_euclid(2) == 1 {
            self.size / 2.0
        } else {
            0.0
        };
        [
            self.origin[0] + col as f64 * self.column_step(),
            self.origin[1] + row as f64 * self.size + lift,
        ]
    }

    /// The point scaled to cell units, to check that cell numbers stay
    /// exact integers.
    pub fn scaled(&self, point: [f64; 2]) -> [f64; 2] {
        let step_x = match self.shape {
            Shape::Square => self.size,
            Shape::Hex => self.column_step(),
        };
        [
            (point[0] - self.origin[0]) / step_x,
            (point[1] - self.origin[1]) / self.size,
        ]
    }

    /// The cell of a point (module doc).
    pub fn cell_of(&self, point: [f64; 2]) -> (i64, i64) {
        match self.shape {
            Shape::Square => {
                let [x, y] = self.scaled(point);
                (x.floor() as i64, y.floor() as i64)
            }
            Shape::Hex => {
                let near = self.scaled(point)[0].round() as i64;
                let mut best: Option<(f64, (i64, i64))> = None;
                for col in near - 1..=near + 1 {
                    let lift = if col.rem_euclid(2) == 1 {
                        self.size / 2.0
                    } else {
                        0.0
                    };
                    let row = ((point[1] - self.origin[1] - lift) / self.size).round() as i64;
                    for row in row - 1..=row + 1 {
                        let centre = self.hex_centre(col, row);
                        let dx = point[0] - centre[0];
                        let dy = point[1] - centre[1];
                        let d = dx * dx + dy * dy;
                        let better = match best {
                            None => true,
                            Some((best_d, cell)) => {
                                d < best_d || (d == best_d && (col, row) < cell)
                            }
                        };
                        if better {
                            best = Some((d, (col, row)));
                        }
                    }
                }
                best.map_or((near, 0), |(_, cell)| cell)
            }
        }
    }

    /// The outline of a cell (counter-clockwise, closed).
    pub fn polygon(&self, (col, row): (i64, i64)) -> Polygon<f64> {
        match self.shape {
            Shape::Square => cell_polygon(self.origin, self.size, col, row),
            Shape::Hex => {
                let [cx, cy] = self.hex_centre(col, row);
                let r = self.radius();
                let h = self.size / 2.0;
                let ring = vec![
                    Coord { x: cx + r, y: cy },
                    Coord {
                        x: cx + r / 2.0,
                        y: cy + h,
                    },
                    Coord {
                        x: cx - r / 2.0,
                        y: cy + h,
                    },
                    Coord { x: cx - r, y: cy },
                    Coord {
                        x: cx - r / 2.0,
                        y: cy - h,
                    },
                    Coord {
                        x: cx + r / 2.0,
                        y: cy - h,
                    },
                    Coord { x: cx + r, y: cy },
                ];
                Polygon::new(LineString::new(ring), vec![])
            }
        }
    }

    /// The fold of a cell under systematic dealing into `k` folds (module doc).
    pub fn systematic_fold(&self, (col, row): (i64, i64), k: u32) -> u32 {
        let k = i64::from(k.max(1));
        let value = match self.shape {
            Shape::Square => {
                let m = if k <= 3 { 1 } else { 2 };
                (col % k) + m * (row % k)
            }
            Shape::Hex => {
                let r = row - col.div_euclid(2);
                (col % k) - (r % k)
            }
        };
        value.rem_euclid(k) as u32
    }

    /// The cells that share an edge with a cell (4 squares or 6 hexagons).
    pub fn edge_neighbours(&self, (col, row): (i64, i64)) -> Vec<(i64, i64)> {
        match self.shape {
            Shape::Square => vec![
                (col + 1, row),
                (col - 1, row),
                (col, row + 1),
                (col, row - 1),
            ],
            Shape::Hex => {
                // Axial neighbours (±1, 0), (0, ±1), (1, −1), (−1, 1), back to offsets.
                let q = col;
                let r = row - col.div_euclid(2);
                [(1, 0), (-1, 0), (0, 1), (0, -1), (1, -1), (-1, 1)]
                    .iter()
                    .map(|&(dq, dr)| {
                        let (nq, nr) = (q + dq, r + dr);
                        (nq, nr + nq.div_euclid(2))
                    })
                    .collect()
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use geo::{Area, Contains};
    use geo_types::Point;

    fn hex(size: f64) -> Cells {
        Cells {
            shape: Shape::Hex,
            size,
            origin: [100.0, 200.0],
        }
    }

    #[test]
    fn hexagons_have_the_stated_size_and_tile_the_plane() {
        let cells = hex(10.0);
        let shape = cells.polygon((0, 0));
        // Area of a regular hexagon with flat-to-flat width s: (√3/2)·s²
        // (common practice, no source).
        assert_relative_eq!(
            shape.unsigned_area(),
            3f64.sqrt() / 2.0 * 100.0,
            max_relative = 1e-12
        );
        let ys: Vec<f64> = shape.exterior().0.iter().map(|c| c.y).collect();
        let top = ys.iter().cloned().fold(f64::MIN, f64::max);
        let bottom = ys.iter().cloned().fold(f64::MAX, f64::min);
        assert_relative_eq!(top - bottom, 10.0, max_relative = 1e-12);
        // Two vertices on the top edge: it is parallel to the x axis.
        assert_eq!(ys.iter().filter(|&&y| (y - top).abs() < 1e-9).count(), 2);
        // Every point of a fine lattice lies in the hexagon it is assigned to,
        // and the nearest-centre cell agrees with containment (geo's Contains).
        for i in 0..60 {
            for j in 0..60 {
                let p = [
                    100.0 + i as f64 * 0.731 - 20.0,
                    200.0 + j as f64 * 0.677 - 20.0,
                ];
                let cell = cells.cell_of(p);
                let outline = cells.polygon(cell);
                assert!(
                    outline.contains(&Point::new(p[0], p[1]))
                        || geo::Distance::distance(
                            &geo::Euclidean,
                            &outline,
                            &Point::new(p[0], p[1])
                        ) < 1e-9,
                    "{p:?} in {cell:?}"
                );
            }
        }
        assert_eq!(cells.cell_of([100.0, 200.0]), (0, 0));
    }

    #[test]
    fn systematic_patterns_keep_edge_neighbours_apart() {
        for (shape, smallest_k) in [(Shape::Square, 2), (Shape::Hex, 3)] {
            let cells = Cells {
                shape,
                size: 1.0,
                origin: [0.0, 0.0],
            };
            for k in smallest_k..=12 {
                for col in -7..7 {
                    for row in -7..7 {
                        let fold = cells.systematic_fold((col, row), k);
                        for other in cells.edge_neighbours((col, row)) {
                            assert_ne!(
                                fold,
                                cells.systematic_fold(other, k),
                                "{shape:?} k={k} {col},{row} {other:?}"
                            );
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn hexagon_neighbours_share_an_edge() {
        // The six listed neighbours are exactly the centres at distance s
        // (hexagons sharing an edge have centres one width apart).
        let cells = hex(4.0);
        for (col, row) in [(0, 0), (1, 0), (-3, 2), (2, -5)] {
            let c = cells.hex_centre(col, row);
            for n in cells.edge_neighbours((col, row)) {
                let d = cells.hex_centre(n.0, n.1);
                assert_relative_eq!(
                    ((c[0] - d[0]).powi(2) + (c[1] - d[1]).powi(2)).sqrt(),
                    4.0,
                    max_relative = 1e-12
                );
            }
        }
    }
}
