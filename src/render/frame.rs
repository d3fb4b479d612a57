//! Where the map goes on the page: projection, the data-to-pixel transform, the
//! scale bar and the north arrow.
//!
//! **Projected CRS.** Coordinates are drawn as they are, x to the right and y up,
//! one scale for both axes. Up is *grid north* of the CRS (true north differs by
//! the meridian convergence, which is not computed: geofold carries no projection
//! library), and the north arrow says "grid north".
//!
//! **Geographic CRS.** Longitude/latitude are drawn in the equirectangular
//! projection with a standard parallel φ0 (the caller's, or the middle of the
//! data): x = λ·cos φ0, y = φ. Meridians are vertical, so up is true north. The
//! scale is true east–west along φ0 only; the scale bar is measured there, as the
//! geodesic length on the WGS 84 ellipsoid (Karney 2013, through `geo`'s
//! `Geodesic`) of a short east–west span at the map's centre, and the caption says so.
//!
//! **Scale bar.** Its length is the largest 1, 2 or 5 × 10^k metres that fits in a
//! fifth of the map's width, labelled in m below 1 km and in km above.

use geo::{Distance, Geodesic, Point};

use super::error::RenderError;
use super::input::{CrsInfo, MapOptions};

/// Width of the legend column on the right, in pixels.
pub const LEGEND_WIDTH: f64 = 250.0;
/// Height of the title band at the top.
pub const TITLE_HEIGHT: f64 = 40.0;
/// Height of the caption band at the bottom.
pub const CAPTION_HEIGHT: f64 = 40.0;
/// Margin around the map panel.
pub const MARGIN: f64 = 10.0;

/// The data-to-pixel transform of one map, and what the scale bar needs.
#[derive(Debug, Clone, PartialEq)]
pub struct MapFrame {
    /// Width of the whole SVG in pixels.
    pub width: u32,
    /// Height of the whole SVG in pixels.
    pub height: u32,
    /// Left edge of the map panel.
    pub panel_x: f64,
    /// Top edge of the map panel.
    pub panel_y: f64,
    /// Panel width.
    pub panel_width: f64,
    /// Panel height.
    pub panel_height: f64,
    /// Pixels per projected unit.
    pub scale: f64,
    /// Projected x drawn at pixel x = `offset_x`.
    pub origin_x: f64,
    /// Projected y drawn at pixel y = `offset_y`.
    pub origin_y: f64,
    /// Pixel x of `origin_x`.
    pub offset_x: f64,
    /// Pixel y of `origin_y`.
    pub offset_y: f64,
    /// cos φ0 for a geographic CRS, 1 for a projected one.
    pub cos_standard_parallel: f64,
    /// The standard parallel in degrees, for a geographic CRS.
    pub standard_parallel: Option<f64>,
    /// Ground metres per pixel at the map's centre, east–west.
    pub metres_per_pixel: f64,
}

impl MapFrame {
    /// Fits the data bounds (in the CRS's own coordinates: min x, min y, max x,
    /// max y) into the map panel of a map of the given size.
    ///
    /// # Errors
    /// [`RenderError::Size`] for a size out of range, [`RenderError::Input`] for
    /// bounds that are not finite or a geographic standard parallel beyond ±85°.
    pub fn fit(
        bounds: [f64; 4],
        crs: &CrsInfo,
        options: &MapOptions,
    ) -> Result<MapFrame, RenderError> {
        if !(400..=4000).contains(&options.width) {
            return Err(RenderError::Size {
                what: "map width",
                value: options.width,
                range: "400 to 4000 pixels",
            });
        }
        if !(300..=4000).contains(&options.height) {
            return Err(RenderError::Size {
                what: "map height",
                value: options.height,
                range: "300 to 4000 pixels",
            });
        }
        let [min_x, min_y, max_x, max_y] = bounds;
        if !bounds.iter().all(|v| v.is_finite()) || min_x > max_x || min_y > max_y {
            return Err(RenderError::Input {
                what: "map".to_string(),
                problems: vec!["no finite coordinates to draw".to_string()],
            });
        }
        let (cos_phi, standard_parallel) = if crs.geographic {
            let phi = crs.centre_latitude.unwrap_or((min_y + max_y) / 2.0);
            if !phi.is_finite() || phi.abs() > 85.0 {
                return Err(RenderError::Input {
                    what: "map".to_string(),
                    problems: vec![format!(
                        "standard parallel {phi}° is not within ±85°: the equirectangular drawing cannot show it"
                    )],
                });
            }
            (phi.to_radians().cos(), Some(phi))
        } else {
            (1.0, None)
        };
        let panel_x = MARGIN;
        let panel_y = TITLE_HEIGHT;
        let panel_width = f64::from(options.width) - LEGEND_WIDTH - 2.0 * MARGIN;
        let panel_height = f64::from(options.height) - TITLE_HEIGHT - CAPTION_HEIGHT;
        // A single point or a line gets a span of one unit so the scale is finite.
        let span_x = ((max_x - min_x) * cos_phi).max(f64::EPSILON * max_x.abs().max(1.0));
        let span_y = (max_y - min_y).max(f64::EPSILON * max_y.abs().max(1.0));
        let inner = 0.96;
        let scale = (panel_width * inner / span_x).min(panel_height * inner / span_y);
        let mut frame = MapFrame {
            width: options.width,
            height: options.height,
            panel_x,
            panel_y,
            panel_width,
            panel_height,
            scale,
            origin_x: (min_x + max_x) / 2.0 * cos_phi,
            origin_y: (min_y + max_y) / 2.0,
            offset_x: panel_x + panel_width / 2.0,
            offset_y: panel_y + panel_height / 2.0,
            cos_standard_parallel: cos_phi,
            standard_parallel,
            metres_per_pixel: 0.0,
        };
        frame.metres_per_pixel = if crs.geographic {
            frame.geodesic_metres_per_pixel((min_x + max_x) / 2.0)
        } else {
            crs.metres_per_unit / scale
        };
        if !frame.metres_per_pixel.is_finite() || frame.metres_per_pixel <= 0.0 {
            return Err(RenderError::Input {
                what: "map".to_string(),
                problems: vec![format!(
                    "the CRS's metres per unit ({}) give no usable map scale",
                    crs.metres_per_unit
                )],
            });
        }
        Ok(frame)
    }

    /// Pixel position of a point given in the CRS's own coordinates.
    pub fn to_pixel(&self, x: f64, y: f64) -> (f64, f64) {
        (
            self.offset_x + (x * self.cos_standard_parallel - self.origin_x) * self.scale,
            self.offset_y - (y - self.origin_y) * self.scale,
        )
    }

    /// Geodesic metres per pixel east–west at the map centre (longitude `centre_lon`).
    fn geodesic_metres_per_pixel(&self, centre_lon: f64) -> f64 {
        let latitude = self.standard_parallel.unwrap_or(0.0);
        // A span of 100 pixels, short enough that the geodesic and the parallel agree
        // to far better than the scale bar's drawing precision.
        let half_degrees = 50.0 / (self.scale * self.cos_standard_parallel);
        let west = Point::new(centre_lon - half_degrees, latitude);
        let east = Point::new(centre_lon + half_degrees, latitude);
        Geodesic.distance(west, east) / 100.0
    }

    /// The scale bar: its length in metres, its length in pixels and its label.
    pub fn scale_bar(&self) -> (f64, f64, String) {
        let target = self.metres_per_pixel * self.panel_width / 5.0;
        let power = 10f64.powf(target.log10().floor());
        let nice = [5.0, 2.0, 1.0]
            .into_iter()
            .map(|m| m * power)
            .find(|length| *length <= target)
            .unwrap_or(power);
        let label = if nice >= 1000.0 {
            format!("{} km", trim_number(nice / 1000.0))
        } else {
            format!("{} m", trim_number(nice))
        };
        (nice, nice / self.metres_per_pixel, label)
    }
}

/// A number without trailing zeros: 2, 0.5, 0.05, 20000.
pub(crate) fn trim_number(value: f64) -> String {
    let text = format!("{value:.6}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    text.to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn projected_frame_keeps_aspect_and_flips_y() {
        let crs = CrsInfo::projected_metres(32631, "WGS 84 / UTM zone 31N");
        let frame = MapFrame::fit([0.0, 0.0, 1000.0, 500.0], &crs, &MapOptions::default()).unwrap();
        let (x0, y0) = frame.to_pixel(0.0, 0.0);
        let (x1, y1) = frame.to_pixel(1000.0, 500.0);
        assert_relative_eq!((x1 - x0) / 1000.0, (y0 - y1) / 500.0, epsilon = 1e-9);
        assert!(y1 < y0, "north is up");
        assert_relative_eq!(frame.metres_per_pixel, 1.0 / frame.scale, epsilon = 1e-12);
    }

    #[test]
    fn scale_bar_is_a_round_length_within_a_fifth_of_the_panel() {
        let crs = CrsInfo::projected_metres(3035, "ETRS89-extended / LAEA Europe");
        let frame =
            MapFrame::fit([0.0, 0.0, 37_000.0, 20_000.0], &crs, &MapOptions::default()).unwrap();
        let (metres, pixels, label) = frame.scale_bar();
        // The panel is 690 px wide for 37 km * 1/0.96: a fifth is about 7.7 km -> 5 km.
        assert_eq!(metres, 5000.0);
        assert_eq!(label, "5 km");
        assert_relative_eq!(pixels, 5000.0 * frame.scale, epsilon = 1e-9);
        // Feet: the same ground in US survey feet (1200/3937 m) gives the same bar.
        let feet = CrsInfo {
            metres_per_unit: 1200.0 / 3937.0,
            units_name: "US survey foot".to_string(),
            ..crs
        };
        let factor = 3937.0 / 1200.0;
        let frame = MapFrame::fit(
            [0.0, 0.0, 37_000.0 * factor, 20_000.0 * factor],
            &feet,
            &MapOptions::default(),
        )
        .unwrap();
        assert_eq!(frame.scale_bar().2, "5 km");
    }

    #[test]
    fn geographic_scale_is_the_geodesic_length_at_the_standard_parallel() {
        // Data one degree of longitude wide at 60°N. On WGS 84 a degree of longitude
        // at 60° is N(φ)·cos φ·π/180 = 55,800 m (closed form, a = 6378137 m,
        // e² = 0.00669438; textbook table value 55.80 km, from memory).
        let crs = CrsInfo::geographic_degrees(4326, "WGS 84");
        let frame = MapFrame::fit([10.0, 59.8, 11.0, 60.2], &crs, &MapOptions::default()).unwrap();
        let (a, e2, phi) = (6_378_137.0_f64, 0.006_694_38_f64, 60f64.to_radians());
        let parallel_degree =
            a / (1.0 - e2 * phi.sin().powi(2)).sqrt() * phi.cos() * std::f64::consts::PI / 180.0;
        assert_relative_eq!(parallel_degree, 55_800.0, max_relative = 1e-3);
        let pixels_per_degree = frame.scale * frame.cos_standard_parallel;
        assert_relative_eq!(
            frame.metres_per_pixel * pixels_per_degree,
            parallel_degree,
            max_relative = 1e-6
        );
        // x is scaled by cos 60° = 0.5 relative to y.
        let (x0, y0) = frame.to_pixel(10.0, 60.0);
        let (x1, _) = frame.to_pixel(11.0, 60.0);
        let (_, y1) = frame.to_pixel(10.0, 61.0);
        assert_relative_eq!((x1 - x0) / (y0 - y1), 0.5, epsilon = 1e-9);
    }

    #[test]
    fn bad_sizes_and_bounds_are_refused() {
        let crs = CrsInfo::projected_metres(3035, "LAEA");
        let small = MapOptions {
            width: 100,
            ..MapOptions::default()
        };
        assert!(matches!(
            MapFrame::fit([0.0, 0.0, 1.0, 1.0], &crs, &small),
            Err(RenderError::Size { .. })
        ));
        assert!(MapFrame::fit([f64::NAN, 0.0, 1.0, 1.0], &crs, &MapOptions::default()).is_err());
        let polar = CrsInfo::geographic_degrees(4326, "WGS 84");
        assert!(MapFrame::fit([0.0, 86.0, 1.0, 89.0], &polar, &MapOptions::default()).is_err());
    }
}
