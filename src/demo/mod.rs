//! The demo scenario: sub-catchments of an invented river basin.
//!
//! Everything here is made up by a seeded generator ([`DEMO_SEED`]): 384
//! sub-catchments on a jittered 24 × 16 lattice of roughly 1 km cells. The
//! target is a nitrate concentration in mg/L:
//!
//! ```text
//! nitrate = 1.5 + 5.0·farmland_share + 0.004·(rainfall_mm − 900)
//!           − 0.006·(elevation_m − 180) + hidden + noise        (floored at 0.05)
//! ```
//!
//! - **Measured drivers** (the features): farmland share, rainfall and
//!   elevation, smooth surfaces made of Gaussian bumps (widths 2.5, 3.5 and
//!   3 km) plus gentle trends across the basin.
//! - **`hidden`**: what nobody measured (geology, groundwater age, land-use
//!   history). A zero-mean Gaussian random field with the exponential
//!   covariance `C(h) = σ² exp(−h / a)`, σ = [`HIDDEN_SD_MG_L`] mg/L and
//!   a = [`HIDDEN_RANGE_PARAMETER_M`] m (the correlation falls to 5 % at
//!   3a = 6 km), simulated exactly at the sub-catchment centres as `L z` with
//!   `L` the Cholesky factor of the covariance matrix and `z` independent
//!   standard normal draws.
//! - **`noise`**: independent normal, SD [`NOISE_SD_MG_L`] mg/L.
//!
//! The spatially structured part the features cannot explain is what makes
//! random folds look better than they are; the numbers were chosen once to
//! look like regional water-quality data and are not tuned toward any result.
//! Two sub-catchments lack a rainfall value, and one has a hole (a lake), so
//! the input-hygiene and geometry rules show up too.
//!
//! The coordinates are in EPSG:32631 (UTM zone 31N) and lie on open sea just
//! north of the equator: no real place is depicted.

pub mod gpkg;
pub mod postgis;

use geo_types::{Coord, LineString, MultiPolygon, Polygon};
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

/// SRID of the demo geometries.
pub const DEMO_SRID: i32 = 32631;

/// WKT (OGC WKT1) of EPSG:32631, as PostGIS 3.3's `spatial_ref_sys.srtext` has it.
pub const DEMO_SRS_WKT: &str = include_str!("srs_32631.wkt");

/// Seed of the demo generator.
pub const DEMO_SEED: u64 = 20_261_202;

/// Block size the demo validates with, in metres.
pub const DEMO_BLOCK_SIZE_M: f64 = 4000.0;

/// Standard deviation σ of the unmeasured field, mg/L.
pub const HIDDEN_SD_MG_L: f64 = 1.2;

/// Range parameter a of the unmeasured field's exponential covariance, m.
pub const HIDDEN_RANGE_PARAMETER_M: f64 = 2000.0;

/// Standard deviation of the unstructured noise, mg/L.
pub const NOISE_SD_MG_L: f64 = 0.35;

/// Name of the demo layer / table.
pub const DEMO_LAYER: &str = "subcatchments";

/// The demo's feature columns.
pub const DEMO_FEATURES: [&str; 3] = ["farmland_share", "rainfall_mm", "elevation_m"];

/// The demo's target column.
pub const DEMO_TARGET: &str = "nitrate_mg_l";

/// One invented sub-catchment.
#[derive(Debug, Clone)]
pub struct DemoUnit {
    /// Integer id, 1..
    pub id: i64,
    /// A label such as `SC-001`.
    pub name: String,
    /// The outline.
    pub geometry: MultiPolygon<f64>,
    /// Share of farmland, 0..1.
    pub farmland_share: f64,
    /// Mean annual rainfall, mm; None where the (invented) gauge record has a gap.
    pub rainfall_mm: Option<f64>,
    /// Mean elevation, m.
    pub elevation_m: f64,
    /// Nitrate concentration, mg/L.
    pub nitrate_mg_l: f64,
}

const NX: usize = 24;
const NY: usize = 16;
const CELL_M: f64 = 1000.0;
const ORIGIN: [f64; 2] = [480_000.0, 10_000.0];

fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64
}

fn normal(rng: &mut ChaCha8Rng) -> f64 {
    // Box–Muller transform.
    let u1 = uniform(rng).max(f64::MIN_POSITIVE);
    let u2 = uniform(rng);
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// A smooth random field: a sum of Gaussian bumps of width `width_m`.
struct Field {
    bumps: Vec<(f64, f64, f64)>,
    width_m: f64,
}

impl Field {
    fn new(rng: &mut ChaCha8Rng, count: usize, width_m: f64) -> Field {
        let bumps = (0..count)
            .map(|_| {
                let x = ORIGIN[0] - 3000.0 + uniform(rng) * (NX as f64 * CELL_M + 6000.0);
                let y = ORIGIN[1] - 3000.0 + uniform(rng) * (NY as f64 * CELL_M + 6000.0);
                (x, y, normal(rng))
            })
            .collect();
        Field { bumps, width_m }
    }

    fn at(&self, x: f64, y: f64) -> f64 {
        let scale = 2.0 * self.width_m * self.width_m;
        self.bumps
            .iter()
            .map(|(bx, by, a)| a * (-((x - bx).powi(2) + (y - by).powi(2)) / scale).exp())
            .sum()
    }
}

fn standardise(values: &mut [f64]) {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n).sqrt();
    for v in values.iter_mut() {
        *v = (*v - mean) / sd;
    }
}

/// The unmeasured field at `points` (module doc): `L z`, `L` the Cholesky
/// factor of `C_ij = σ² exp(−d_ij / a)`.
fn exponential_field(rng: &mut ChaCha8Rng, points: &[[f64; 2]]) -> Vec<f64> {
    let n = points.len();
    let variance = HIDDEN_SD_MG_L * HIDDEN_SD_MG_L;
    let covariance = nalgebra::DMatrix::from_fn(n, n, |i, j| {
        let d = (points[i][0] - points[j][0]).hypot(points[i][1] - points[j][1]);
        variance * (-d / HIDDEN_RANGE_PARAMETER_M).exp()
    });
    let z = nalgebra::DVector::from_fn(n, |_, _| normal(rng));
    match covariance.cholesky() {
        Some(factor) => (factor.l() * z).iter().copied().collect(),
        // The exponential covariance is positive definite for distinct
        // points (the lattice centres are distinct), so this is not reached.
        None => vec![0.0; n],
    }
}

/// Generates the demo sub-catchments; the same on every machine.
pub fn generate() -> Vec<DemoUnit> {
    let mut rng = ChaCha8Rng::seed_from_u64(DEMO_SEED);
    let mut vertices = vec![[0.0f64; 2]; (NX + 1) * (NY + 1)];
    for j in 0..=NY {
        for i in 0..=NX {
            let mut x = ORIGIN[0] + i as f64 * CELL_M;
            let mut y = ORIGIN[1] + j as f64 * CELL_M;
            if i > 0 && i < NX && j > 0 && j < NY {
                x += (uniform(&mut rng) - 0.5) * 600.0;
                y += (uniform(&mut rng) - 0.5) * 600.0;
            }
            vertices[j * (NX + 1) + i] = [x, y];
        }
    }
    let land = Field::new(&mut rng, 40, 2500.0);
    let rain = Field::new(&mut rng, 30, 3500.0);
    let relief = Field::new(&mut rng, 30, 3000.0);
    let mut centres = Vec::with_capacity(NX * NY);
    let mut rings = Vec::with_capacity(NX * NY);
    for j in 0..NY {
        for i in 0..NX {
            let corners = [
                vertices[j * (NX + 1) + i],
                vertices[j * (NX + 1) + i + 1],
                vertices[(j + 1) * (NX + 1) + i + 1],
                vertices[(j + 1) * (NX + 1) + i],
            ];
            let cx = corners.iter().map(|c| c[0]).sum::<f64>() / 4.0;
            let cy = corners.iter().map(|c| c[1]).sum::<f64>() / 4.0;
            centres.push([cx, cy]);
            rings.push(corners);
        }
    }
    let sample = |field: &Field| -> Vec<f64> {
        let mut values: Vec<f64> = centres.iter().map(|c| field.at(c[0], c[1])).collect();
        standardise(&mut values);
        values
    };
    let (land_v, rain_v, relief_v) = (sample(&land), sample(&rain), sample(&relief));
    let hidden_v = exponential_field(&mut rng, &centres);
    let lake_unit = 150;
    let gauge_gaps = [37, 211];
    (0..NX * NY)
        .map(|k| {
            let id = k as i64 + 1;
            let farmland_share = 1.0 / (1.0 + (-1.3 * land_v[k]).exp());
            let rainfall = 900.0 + 110.0 * rain_v[k] + 0.012 * (centres[k][0] - ORIGIN[0]);
            let elevation_m = 180.0 + 55.0 * relief_v[k] + 0.004 * (centres[k][1] - ORIGIN[1]);
            let nitrate = 1.5 + 5.0 * farmland_share + 0.004 * (rainfall - 900.0)
                - 0.006 * (elevation_m - 180.0)
                + hidden_v[k]
                + NOISE_SD_MG_L * normal(&mut rng);
            let corners = rings[k];
            let mut exterior: Vec<Coord<f64>> =
                corners.iter().map(|c| Coord { x: c[0], y: c[1] }).collect();
            exterior.push(exterior[0]);
            let holes = if id == lake_unit {
                let [cx, cy] = centres[k];
                let d = 150.0;
                vec![LineString::new(vec![
                    Coord {
                        x: cx - d,
                        y: cy - d,
                    },
                    Coord {
                        x: cx - d,
                        y: cy + d,
                    },
                    Coord {
                        x: cx + d,
                        y: cy + d,
                    },
                    Coord {
                        x: cx + d,
                        y: cy - d,
                    },
                    Coord {
                        x: cx - d,
                        y: cy - d,
                    },
                ])]
            } else {
                vec![]
            };
            DemoUnit {
                id,
                name: format!("SC-{id:03}"),
                geometry: MultiPolygon::new(vec![Polygon::new(LineString::new(exterior), holes)]),
                farmland_share,
                rainfall_mm: (!gauge_gaps.contains(&id)).then_some(rainfall),
                elevation_m,
                nitrate_mg_l: nitrate.max(0.05),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use geo::Area;

    #[test]
    fn generator_is_reproducible_and_plausible() {
        let a = generate();
        let b = generate();
        assert_eq!(a.len(), 384);
        assert_eq!(a[100].nitrate_mg_l, b[100].nitrate_mg_l);
        assert_eq!(a.iter().filter(|u| u.rainfall_mm.is_none()).count(), 2);
        // Lattice cells tile the rectangle: areas add up to 24 km × 16 km minus the
        // 300 m × 300 m lake (hand computation).
        let total: f64 = a.iter().map(|u| u.geometry.unsigned_area()).sum();
        assert!(
            (total - (24_000.0 * 16_000.0 - 90_000.0)).abs() < 1e-3,
            "{total}"
        );
        assert!(a.iter().all(|u| (0.0..=1.0).contains(&u.farmland_share)));
    }
}
