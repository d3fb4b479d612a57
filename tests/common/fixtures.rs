//! The invented test tables, behind named loader functions. Every value is
//! made up: lattices of squares in EPSG:32631 (UTM zone 31N) away from any
//! real place, with features and targets from simple formulas.

use std::path::Path;

use super::pg::Scratch;

/// The kinds of id column the results tables must join to.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum IdType {
    Integer,
    Bigint,
    Text,
}

impl IdType {
    /// (column type, id of lattice unit `n` as SQL).
    pub fn sql(self) -> (&'static str, &'static str) {
        match self {
            IdType::Integer => ("integer", "n"),
            IdType::Bigint => ("bigint", "5000000000 + n"),
            IdType::Text => ("text", "'u' || lpad(n::text, 2, '0')"),
        }
    }

    /// The id of lattice unit `n` as text (as the results tables hold it).
    pub fn id(self, n: u32) -> String {
        match self {
            IdType::Integer => n.to_string(),
            IdType::Bigint => (5_000_000_000u64 + u64::from(n)).to_string(),
            IdType::Text => format!("u{n:02}"),
        }
    }
}

/// A lattice of squares: unit n = 1 + side·i + j (i, j in 0..side) covers
/// `[x0 + i·step + margin, x0 + (i+1)·step - margin]` and likewise in y.
#[derive(Clone, Debug)]
pub struct Lattice {
    pub side: u32,
    pub origin: [f64; 2],
    pub step: f64,
    pub size: f64,
    pub srid: i32,
    pub geometry_type: &'static str,
}

/// A lattice of `size`-metre squares in 100 m cells from (500000, 5000000) in UTM 31N.
pub fn utm_lattice(side: u32, size: f64, geometry_type: &'static str) -> Lattice {
    Lattice {
        side,
        origin: [500000.0, 5000000.0],
        step: 100.0,
        size,
        srid: 32631,
        geometry_type,
    }
}

/// Creates `{s}.<table>` (id, target, a, b, c, label, geom) on the lattice, with
/// invented values: a = i + j/2, b = (i·j mod 5) + i/10, c = (13n mod 7)/2 + j/5,
/// and a target linear in them plus a fixed wiggle.
pub fn create_lattice(scratch: &Scratch, table: &str, id: IdType, lattice: &Lattice) {
    let (id_type, id_expr) = id.sql();
    let Lattice {
        side,
        origin: [x0, y0],
        step,
        size,
        srid,
        geometry_type,
    } = lattice;
    let margin = (step - size) / 2.0;
    let last = side - 1;
    let column = if *srid == 0 {
        "geometry".to_string()
    } else {
        format!("geometry({geometry_type}, {srid})")
    };
    scratch.script(&format!(
        "CREATE TABLE {{s}}.{table} (id {id_type} PRIMARY KEY, target float8, a float8, b float8,
             c float8, label text, geom {column});
         INSERT INTO {{s}}.{table}
         SELECT {id_expr}, 50 + 2*a - 1.5*b + 0.8*c + ((n*37) % 11 - 5) / 4.0, a, b, c, 'unit ' || n,
                ST_MakeEnvelope({x0} + i*{step} + {margin}, {y0} + j*{step} + {margin},
                                {x0} + (i+1)*{step} - {margin}, {y0} + (j+1)*{step} - {margin}, {srid})
         FROM (SELECT i, j, n, i + 0.5*j AS a, ((i*j) % 5) + 0.1*i AS b,
                      ((n*13) % 7) * 0.5 + 0.2*j AS c
               FROM (SELECT i, j, 1 + {side}*i + j AS n
                     FROM generate_series(0, {last}) i, generate_series(0, {last}) j) l) g;"
    ));
}

/// Creates `{s}.<table>` as [`create_lattice`]: 36 squares of 80 m centred
/// in a 6 × 6 lattice of 100 m cells from (500000, 5000000), EPSG:32631,
/// integer ids, a `geometry(Polygon, 32631)` column. Each square's centroid
/// is geofold's representative point.
pub fn create_squares(scratch: &Scratch, table: &str) {
    create_lattice(
        scratch,
        table,
        IdType::Integer,
        &utm_lattice(6, 80.0, "Polygon"),
    );
}

/// Creates `{s}.<table>`: 36 units, squares of 80 m centred in a 6 × 6 lattice
/// of 100 m cells in UTM 31N (x 500000–500600, y 5000000–5000600), so 200 m
/// blocks hold 2 × 2 units and the lattice covers 3 × 3 = 9 blocks. Unit n = 1
/// gets a hole away from its centre and unit n = 2 becomes a two-part
/// multipolygon; both stay inside their own lattice cell.
pub fn create_units(scratch: &Scratch, table: &str, id: IdType) {
    create_lattice(scratch, table, id, &utm_lattice(6, 80.0, "Geometry"));
    let (_, id_expr) = id.sql();
    scratch.script(&format!(
        "UPDATE {{s}}.{table} SET geom = ST_Difference(geom,
                ST_MakeEnvelope(500015, 5000015, 500040, 5000040, 32631))
         WHERE id = (SELECT {id_expr} FROM (SELECT 1 AS n) one);
         UPDATE {{s}}.{table} SET geom = ST_Collect(
                ST_MakeEnvelope(500010, 5000110, 500040, 5000140, 32631),
                ST_MakeEnvelope(500060, 5000160, 500090, 5000190, 32631))
         WHERE id = (SELECT {id_expr} FROM (SELECT 2 AS n) one);"
    ));
}

/// Adds 7 bad rows (ids 101–107) to a [`create_units`] table with integer
/// ids: 101 and 102 miss the target (NULL, NaN), 103 and 107 feature a
/// (±infinity), 104 feature b (NULL), 105 has no geometry, 106 an empty one.
pub fn add_bad_rows(scratch: &Scratch, table: &str) {
    scratch.script(&format!(
        "INSERT INTO {{s}}.{table} (id, target, a, b, c, label, geom)
         SELECT id, target, a, b, 1, 'bad', geom FROM (VALUES
             (101, NULL, 1.0, 2.0, ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631)),
             (102, 'NaN'::float8, 1.0, 2.0, ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631)),
             (103, 60.0, 'Infinity'::float8, 2.0, ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631)),
             (104, 60.0, 1.0, NULL, ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631)),
             (105, 60.0, 1.0, 2.0, NULL),
             (106, 60.0, 1.0, 2.0, 'SRID=32631;POLYGON EMPTY'::geometry),
             (107, 60.0, '-Infinity'::float8, 2.0, ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631))
         ) v (id, target, a, b, geom);"
    ));
}

/// Points in two 200 m blocks, 6 each (x 500010–500110 and 500210–500310). c is 1
/// in the west block and 2 in the east one, so with 2 folds (one block each) c is
/// constant on every fold's training units; d = 2a + 1 everywhere.
pub fn create_two_blocks(scratch: &Scratch) {
    scratch.script(
        "CREATE TABLE {s}.points (id integer PRIMARY KEY, target float8, a float8, b float8,
             c float8, d float8, geom geometry(Point, 32631));
         INSERT INTO {s}.points
         SELECT 1 + 6*side + k, 5 + k + side + (k*k % 4), k, k*k, 1 + side, 2*k + 1,
                ST_SetSRID(ST_MakePoint(500010 + 200*side + 20*k, 5000050), 32631)
         FROM generate_series(0, 1) side, generate_series(0, 5) k;",
    );
}

/// Writes an invented lattice of `nx` × `ny` squares of 1 km in EPSG:32631
/// (x from 600 km, y from 20 km: open sea) as GeoJSON, with a text code, two
/// features and a target that depends on them plus a smooth east-west
/// component, rounded to six decimals. Unit 11 has no `x2` (a gap to be skipped).
pub fn write_lattice_geojson(path: &Path, nx: usize, ny: usize) {
    let mut features = Vec::new();
    for j in 0..ny {
        for i in 0..nx {
            let k = j * nx + i + 1;
            let (x0, y0) = (600_000.0 + i as f64 * 1000.0, 20_000.0 + j as f64 * 1000.0);
            let x1 = ((k * 7) % 11) as f64 / 10.0;
            let x2 = ((k * 3) % 13) as f64 + 0.5;
            let target = 1.0 + 0.8 * x1 - 0.2 * x2
                + 0.6 * ((x0 - 600_000.0) / 1500.0).sin()
                + 0.05 * (k as f64).cos();
            // Six decimals: GDAL sends 15 significant digits to PostgreSQL, so
            // longer values would not reach both copies bit for bit.
            let target = (target * 1e6).round() / 1e6;
            let x2_json = if k == 11 {
                serde_json::Value::Null
            } else {
                x2.into()
            };
            features.push(serde_json::json!({
                "type": "Feature",
                "properties": {"code": format!("U-{k:03}"), "x1": x1, "x2": x2_json, "y": target},
                "geometry": {"type": "Polygon", "coordinates": [[
                    [x0, y0], [x0 + 1000.0, y0], [x0 + 1000.0, y0 + 1000.0], [x0, y0 + 1000.0], [x0, y0]
                ]]}
            }));
        }
    }
    let collection = serde_json::json!({"type": "FeatureCollection", "features": features});
    std::fs::write(path, collection.to_string()).unwrap();
}

/// A GeoPackage of [`write_lattice_geojson`]'s 8 × 6 lattice written by GDAL
/// (layer `units`, key `fid`, EPSG:32631), without a spatial index so tests
/// can edit it with plain SQLite.
pub fn gdal_lattice_gpkg(dir: &Path, name: &str) -> std::path::PathBuf {
    let geojson = dir.join(format!("{name}.geojson"));
    write_lattice_geojson(&geojson, 8, 6);
    super::gdal::ogr2ogr(
        dir,
        &[
            "-f",
            "GPKG",
            name,
            geojson.to_str().unwrap(),
            "-nln",
            "units",
            "-a_srs",
            "EPSG:32631",
            "-lco",
            "SPATIAL_INDEX=NO",
        ],
    );
    std::fs::remove_file(&geojson).unwrap();
    dir.join(name)
}

/// `geofold run` arguments for a [`gdal_lattice_gpkg`] file: 2 km blocks, 4 folds.
pub fn lattice_args(file: &str) -> Vec<String> {
    let mut args: Vec<String> = ["run", "--gpkg", file, "--layer", "units"]
        .map(String::from)
        .to_vec();
    args.extend(LATTICE_COLUMNS.iter().map(|s| s.to_string()));
    args.extend(["--block-size", "2000", "--folds", "4"].map(String::from));
    args
}

/// `--table TABLE` with the columns of [`create_lattice`] tables (id, target
/// and FEATURES), square blocks of `block_size` metres and `folds` folds.
pub fn grid<'a>(
    table: &'a str,
    features: &'a str,
    block_size: &'a str,
    folds: &'a str,
) -> Vec<&'a str> {
    vec![
        "--table",
        table,
        "--id",
        "id",
        "--geom",
        "geom",
        "--target",
        "target",
        "--features",
        features,
        "--scheme",
        "grid",
        "--block-size",
        block_size,
        "--folds",
        folds,
    ]
}

/// The id, target and feature arguments for [`create_units`] and
/// [`create_lattice`] tables (source and results left to the caller).
pub const UNITS_COLUMNS: &[&str] = &["--id", "id", "--target", "target", "--features", "a,b"];

/// [`UNITS_COLUMNS`] with 200 m blocks (2 × 2 units of [`create_units`]) and 3 folds.
pub const UNITS_GRID: &[&str] = &[
    "--id",
    "id",
    "--target",
    "target",
    "--features",
    "a,b",
    "--block-size",
    "200",
    "--folds",
    "3",
];

/// The id, target and feature arguments for the demo scenario's layer
/// (`geofold demo` writes it as `subcatchments`).
pub const DEMO_COLUMNS: &[&str] = &[
    "--id",
    "id",
    "--target",
    "nitrate_mg_l",
    "--features",
    "farmland_share,rainfall_mm,elevation_m",
];

/// The target and feature arguments for [`write_lattice_geojson`] layers.
pub const LATTICE_COLUMNS: &[&str] = &["--target", "y", "--features", "x1,x2"];

/// Joins argument lists.
pub fn args<'a>(parts: &[&[&'a str]]) -> Vec<&'a str> {
    parts.concat()
}
