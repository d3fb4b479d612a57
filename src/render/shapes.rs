//! Geometry in pixels: projection, simplification to the output resolution,
//! ring orientation, and SVG path text.
//!
//! **Simplification rule.** Every coordinate is projected to pixels; a vertex
//! closer than half a pixel to the last vertex kept is dropped (what is drawn
//! cannot change by more than half a pixel). A ring left with fewer than three
//! vertices is below the resolution: an outer ring becomes a one-pixel dot at its
//! mean position (so a sub-pixel unit still shows, and units sharing a pixel merge
//! into one dot), an inner ring (a hole smaller than a pixel) is dropped.
//!
//! **Holes and multipolygons.** All shapes of one class go into one path. Outer
//! rings are turned clockwise on screen and holes counter-clockwise, and the path
//! is filled with the non-zero rule: a hole cancels its outer ring, and where two
//! units overlap (which the even-odd rule would punch out as a hole) the overlap
//! stays filled. The tests check a polygon with a hole and a multipolygon
//! pixel by pixel.

use std::fmt::Write as _;

use geo_types::{Coord, Geometry, LineString, Polygon};

use super::frame::MapFrame;

/// Radius of the circle a point unit is drawn as, in pixels.
pub const POINT_RADIUS: f32 = 3.0;

/// Squared minimum distance between kept vertices: (half a pixel)².
const MIN_STEP_SQUARED: f32 = 0.25;

/// The shapes of one class in pixel coordinates.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ShapeGroup {
    /// Ring vertices, x and y interleaved.
    pub ring_coords: Vec<f32>,
    /// Index (in vertices) where each ring starts; it ends where the next starts.
    pub ring_starts: Vec<u32>,
    /// Sub-pixel units, drawn as one-pixel squares at these positions.
    pub dots: Vec<[f32; 2]>,
    /// Point units, drawn as circles of [`POINT_RADIUS`].
    pub points: Vec<[f32; 2]>,
    /// Line vertices, x and y interleaved.
    pub line_coords: Vec<f32>,
    /// Index (in vertices) where each line starts.
    pub line_starts: Vec<u32>,
}

impl ShapeGroup {
    /// Vertices this group costs to draw as vectors (dots count 4, points 4).
    pub fn vertex_count(&self) -> usize {
        self.ring_coords.len() / 2
            + self.line_coords.len() / 2
            + 4 * (self.dots.len() + self.points.len())
    }

    /// True when nothing is in the group.
    pub fn is_empty(&self) -> bool {
        self.ring_starts.is_empty()
            && self.dots.is_empty()
            && self.points.is_empty()
            && self.line_starts.is_empty()
    }

    /// The rings, each as a slice of interleaved x, y.
    pub fn rings(&self) -> impl Iterator<Item = &[f32]> + '_ {
        spans(&self.ring_starts, &self.ring_coords)
    }

    /// The lines, each as a slice of interleaved x, y.
    pub fn lines(&self) -> impl Iterator<Item = &[f32]> + '_ {
        spans(&self.line_starts, &self.line_coords)
    }

    /// Adds a geometry, projected through `frame` and simplified.
    pub fn add(&mut self, geometry: &Geometry<f64>, frame: &MapFrame) {
        match geometry {
            Geometry::Point(p) => self.add_point(p.0, frame),
            Geometry::MultiPoint(points) => points.iter().for_each(|p| self.add_point(p.0, frame)),
            Geometry::Line(line) => self.add_line(&[line.start, line.end], frame),
            Geometry::LineString(line) => self.add_line(&line.0, frame),
            Geometry::MultiLineString(lines) => {
                lines.iter().for_each(|l| self.add_line(&l.0, frame))
            }
            Geometry::Polygon(polygon) => self.add_polygon(polygon, frame),
            Geometry::MultiPolygon(polygons) => {
                polygons.iter().for_each(|p| self.add_polygon(p, frame))
            }
            Geometry::Rect(rect) => self.add_polygon(&rect.to_polygon(), frame),
            Geometry::Triangle(triangle) => self.add_polygon(&triangle.to_polygon(), frame),
            Geometry::GeometryCollection(members) => {
                members.iter().for_each(|g| self.add(g, frame))
            }
        }
    }

    /// Adds a polygon: its exterior and holes, oriented for the non-zero rule.
    pub fn add_polygon(&mut self, polygon: &Polygon<f64>, frame: &MapFrame) {
        if !self.add_ring(polygon.exterior(), frame, true) {
            return;
        }
        for hole in polygon.interiors() {
            self.add_ring(hole, frame, false);
        }
    }

    fn add_point(&mut self, coord: Coord<f64>, frame: &MapFrame) {
        let (x, y) = frame.to_pixel(coord.x, coord.y);
        self.points.push([x as f32, y as f32]);
    }

    fn add_line(&mut self, coords: &[Coord<f64>], frame: &MapFrame) {
        let start = self.line_coords.len();
        push_simplified(&mut self.line_coords, coords, frame);
        if self.line_coords.len() - start >= 4 {
            self.line_starts.push((start / 2) as u32);
        } else {
            self.line_coords.truncate(start);
            if let Some(first) = coords.first() {
                let (x, y) = frame.to_pixel(first.x, first.y);
                self.dots.push([x as f32, y as f32]);
            }
        }
    }

    /// Adds one ring; returns false when an outer ring was too small and became a dot
    /// (its holes are then not drawn either).
    fn add_ring(&mut self, ring: &LineString<f64>, frame: &MapFrame, outer: bool) -> bool {
        let start = self.ring_coords.len();
        push_simplified(&mut self.ring_coords, &ring.0, frame);
        // Drop the closing vertex (and any vertex within half a pixel of the first).
        while self.ring_coords.len() - start >= 4 {
            let n = self.ring_coords.len();
            let dx = self.ring_coords[n - 2] - self.ring_coords[start];
            let dy = self.ring_coords[n - 1] - self.ring_coords[start + 1];
            if dx * dx + dy * dy < MIN_STEP_SQUARED {
                self.ring_coords.truncate(n - 2);
            } else {
                break;
            }
        }
        let vertices = &self.ring_coords[start..];
        let area = signed_area(vertices);
        if vertices.len() < 6 || area == 0.0 {
            let dot = mean_position(vertices);
            self.ring_coords.truncate(start);
            if outer {
                if let Some(dot) = dot {
                    self.dots.push(dot);
                }
            }
            return false;
        }
        // Screen y points down, so a positive shoelace area is clockwise on screen.
        if (area > 0.0) != outer {
            reverse_pairs(&mut self.ring_coords[start..]);
        }
        self.ring_starts.push((start / 2) as u32);
        true
    }

    /// Appends this group's fill geometry as SVG path data (absolute, 0.1 px).
    pub fn write_fill_path(&self, out: &mut String) {
        for ring in self.rings() {
            write_polyline(out, ring);
            out.push('Z');
        }
        for [x, y] in &self.dots {
            out.push('M');
            write_pair(out, x.floor(), y.floor());
            out.push_str("h1v1h-1Z");
        }
        let r = POINT_RADIUS;
        for [x, y] in &self.points {
            out.push('M');
            write_pair(out, x - r, *y);
            let _ = write!(
                out,
                "a{r} {r} 0 1 0 {d} 0a{r} {r} 0 1 0 -{d} 0Z",
                d = 2.0 * r
            );
        }
    }

    /// Appends this group's lines as SVG path data.
    pub fn write_line_path(&self, out: &mut String) {
        for line in self.lines() {
            write_polyline(out, line);
        }
    }
}

fn spans<'a>(starts: &'a [u32], coords: &'a [f32]) -> impl Iterator<Item = &'a [f32]> + 'a {
    starts.iter().enumerate().map(move |(i, start)| {
        let from = *start as usize * 2;
        let to = starts
            .get(i + 1)
            .map_or(coords.len(), |next| *next as usize * 2);
        &coords[from..to]
    })
}

/// Projects `coords` and appends those at least half a pixel from the last kept.
fn push_simplified(out: &mut Vec<f32>, coords: &[Coord<f64>], frame: &MapFrame) {
    let mut last: Option<(f32, f32)> = None;
    for coord in coords {
        let (x, y) = frame.to_pixel(coord.x, coord.y);
        let (x, y) = (x as f32, y as f32);
        if let Some((lx, ly)) = last {
            let (dx, dy) = (x - lx, y - ly);
            if dx * dx + dy * dy < MIN_STEP_SQUARED {
                continue;
            }
        }
        out.push(x);
        out.push(y);
        last = Some((x, y));
    }
}

/// Shoelace area of interleaved x, y (positive: clockwise on a y-down screen).
fn signed_area(coords: &[f32]) -> f64 {
    let n = coords.len() / 2;
    let mut twice = 0.0f64;
    for i in 0..n {
        let j = (i + 1) % n;
        let (xi, yi) = (f64::from(coords[2 * i]), f64::from(coords[2 * i + 1]));
        let (xj, yj) = (f64::from(coords[2 * j]), f64::from(coords[2 * j + 1]));
        twice += xi * yj - xj * yi;
    }
    twice / 2.0
}

fn mean_position(coords: &[f32]) -> Option<[f32; 2]> {
    let n = coords.len() / 2;
    if n == 0 {
        return None;
    }
    let (sx, sy) = coords
        .chunks_exact(2)
        .fold((0.0f32, 0.0f32), |(sx, sy), p| (sx + p[0], sy + p[1]));
    Some([sx / n as f32, sy / n as f32])
}

fn reverse_pairs(coords: &mut [f32]) {
    let n = coords.len() / 2;
    for i in 0..n / 2 {
        let j = n - 1 - i;
        coords.swap(2 * i, 2 * j);
        coords.swap(2 * i + 1, 2 * j + 1);
    }
}

/// Writes interleaved x, y as "Mx yLx y x y…" (later pairs repeat the L).
fn write_polyline(out: &mut String, coords: &[f32]) {
    for (i, pair) in coords.chunks_exact(2).enumerate() {
        out.push(match i {
            0 => 'M',
            1 => 'L',
            _ => ' ',
        });
        write_pair(out, pair[0], pair[1]);
    }
}

/// Writes "x y" with one decimal, dropping ".0".
fn write_pair(out: &mut String, x: f32, y: f32) {
    write_coord(out, x);
    out.push(' ');
    write_coord(out, y);
}

fn write_coord(out: &mut String, value: f32) {
    // Tenths of a pixel as an integer: exact, short, and never "-0".
    let tenths = (value * 10.0).round() as i64;
    let (sign, tenths) = if tenths < 0 {
        ("-", -tenths)
    } else {
        ("", tenths)
    };
    let _ = if tenths % 10 == 0 {
        write!(out, "{sign}{}", tenths / 10)
    } else {
        write!(out, "{sign}{}.{}", tenths / 10, tenths % 10)
    };
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::input::{CrsInfo, MapOptions};
    use geo_types::{polygon, Point};

    fn frame() -> MapFrame {
        MapFrame::fit(
            [0.0, 0.0, 100.0, 100.0],
            &CrsInfo::projected_metres(3035, "LAEA"),
            &MapOptions::default(),
        )
        .unwrap()
    }

    #[test]
    fn vertices_closer_than_half_a_pixel_are_dropped() {
        let frame = frame();
        // scale is 520 * 0.96 / 100 = 4.99 px per metre: 0.05 m is a quarter pixel.
        let square = polygon![
            (x: 0.0, y: 0.0), (x: 0.05, y: 0.0), (x: 50.0, y: 0.0),
            (x: 50.0, y: 50.0), (x: 0.0, y: 50.0), (x: 0.0, y: 0.02), (x: 0.0, y: 0.0)
        ];
        let mut group = ShapeGroup::default();
        group.add_polygon(&square, &frame);
        assert_eq!(group.ring_coords.len() / 2, 4);
        assert!(group.dots.is_empty());
    }

    #[test]
    fn sub_pixel_units_become_dots_and_holes_turn_the_other_way() {
        let frame = frame();
        let tiny = polygon![(x: 10.0, y: 10.0), (x: 10.05, y: 10.0), (x: 10.05, y: 10.05), (x: 10.0, y: 10.0)];
        let mut group = ShapeGroup::default();
        group.add_polygon(&tiny, &frame);
        assert_eq!(group.dots.len(), 1);
        assert!(group.ring_starts.is_empty());
        // A counter-clockwise exterior with a counter-clockwise hole: after adding,
        // the exterior and the hole have opposite orientation.
        let with_hole = Polygon::new(
            LineString::from(vec![
                (0.0, 0.0),
                (60.0, 0.0),
                (60.0, 60.0),
                (0.0, 60.0),
                (0.0, 0.0),
            ]),
            vec![LineString::from(vec![
                (20.0, 20.0),
                (40.0, 20.0),
                (40.0, 40.0),
                (20.0, 40.0),
                (20.0, 20.0),
            ])],
        );
        group.add_polygon(&with_hole, &frame);
        let areas: Vec<f64> = group.rings().map(signed_area).collect();
        assert_eq!(areas.len(), 2);
        assert!(areas[0] > 0.0 && areas[1] < 0.0, "{areas:?}");
        group.add(&Geometry::Point(Point::new(5.0, 5.0)), &frame);
        let mut d = String::new();
        group.write_fill_path(&mut d);
        assert!(d.starts_with('M') && d.contains('Z') && d.contains("h1v1h-1Z") && d.contains('a'));
    }

    #[test]
    fn coordinates_are_written_in_tenths() {
        let mut out = String::new();
        write_pair(&mut out, 12.34, -0.04);
        write_pair(&mut out, -3.25, 7.0);
        assert_eq!(out, "12.3 0-3.3 7");
    }
}
