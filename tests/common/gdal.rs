//! GDAL as the outside reader and writer of GeoPackages (`ogrinfo`,
//! `ogr2ogr` and `validate_gpkg.py` from Debian's gdal-bin and python3-gdal,
//! which `scripts/test.sh` installs), SQLite's own checks, and what a
//! directory holds.

use std::collections::BTreeMap;
use std::path::Path;
use std::process::{Command, Output};

use sha2::{Digest, Sha256};

/// What `ogrinfo -so -al` says about one layer.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerInfo {
    pub geometry: String,
    pub count: u64,
    /// The top-level `ID["EPSG",N]` of the layer's SRS, if it has one.
    pub epsg: Option<i32>,
}

pub fn layer(geometry: &str, count: u64, epsg: Option<i32>) -> LayerInfo {
    LayerInfo {
        geometry: geometry.to_string(),
        count,
        epsg,
    }
}

pub fn command_output(program: &str, args: &[&str], dir: &Path) -> Output {
    Command::new(program)
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap_or_else(|e| {
            panic!("{program} must be installed (Debian gdal-bin, which scripts/test.sh installs): {e}")
        })
}

fn parts(file: &Path) -> (&Path, &str) {
    (
        file.parent().unwrap(),
        file.file_name().unwrap().to_str().unwrap(),
    )
}

/// Layers of a GeoPackage as GDAL's `ogrinfo -so -al` lists them; asserts
/// that GDAL opens the file with nothing on stderr (a warning is a defect for
/// a GIS user).
pub fn gdal_layers(file: &Path) -> BTreeMap<String, LayerInfo> {
    let (dir, name) = parts(file);
    let output = command_output("ogrinfo", &["-ro", "-so", "-al", name], dir);
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        output.status.success(),
        "ogrinfo failed on {name}: {stderr}"
    );
    assert!(
        stderr.trim().is_empty(),
        "ogrinfo wrote to stderr for {name}:\n{stderr}"
    );
    let text = String::from_utf8_lossy(&output.stdout);
    let mut layers = BTreeMap::new();
    for block in text.split("\nLayer name: ").skip(1) {
        let layer = block.lines().next().unwrap().trim().to_string();
        let field = |label: &str| {
            block
                .lines()
                .find_map(|line| line.strip_prefix(label))
                .unwrap_or_else(|| panic!("no {label:?} for layer {layer} in:\n{block}"))
                .trim()
                .to_string()
        };
        // The CRS's own ID is the one indented by four spaces (nested ones are deeper).
        let epsg = block.lines().find_map(|line| {
            line.strip_prefix("    ID[\"EPSG\",")
                .and_then(|rest| rest.strip_suffix("]]"))
                .and_then(|code| code.parse().ok())
        });
        let info = LayerInfo {
            geometry: field("Geometry: "),
            count: field("Feature Count: ").parse().unwrap(),
            epsg,
        };
        layers.insert(layer, info);
    }
    layers
}

/// Runs GDAL's GeoPackage validator (`validate_gpkg.py`, python3-gdal) and
/// asserts it reports nothing.
pub fn gdal_validates(file: &Path) {
    let script = [
        "/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_gpkg.py",
        "/usr/share/doc/python3-gdal/examples/validate_gpkg.py",
    ]
    .into_iter()
    .find(|path| Path::new(path).exists())
    .expect("validate_gpkg.py from python3-gdal (a dependency of gdal-bin) is installed");
    let output = command_output(
        "/usr/bin/python3",
        &[script, file.to_str().unwrap()],
        Path::new("/"),
    );
    let report = format!(
        "{}{}",
        String::from_utf8_lossy(&output.stdout),
        String::from_utf8_lossy(&output.stderr)
    );
    assert!(
        output.status.success() && report.trim().is_empty(),
        "validate_gpkg.py rejects {}:\n{report}",
        file.display()
    );
}

/// Splits one CSV line (RFC 4180 quoting, as GDAL's CSV driver writes it).
fn csv_fields(line: &str) -> Vec<String> {
    let mut fields = Vec::new();
    let mut field = String::new();
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match (c, quoted) {
            ('"', true) if chars.peek() == Some(&'"') => {
                field.push('"');
                chars.next();
            }
            ('"', _) => quoted = !quoted,
            (',', false) => fields.push(std::mem::take(&mut field)),
            (c, _) => field.push(c),
        }
    }
    fields.push(field);
    fields
}

/// Rows of an SQL query as GDAL reads them (`ogr2ogr -f CSV /vsistdout/`,
/// geometry as WKT first when the query selects one), fields as text.
pub fn gdal_rows(file: &Path, sql: &str) -> Vec<Vec<String>> {
    let (dir, name) = parts(file);
    let output = command_output(
        "ogr2ogr",
        &[
            "-f",
            "CSV",
            "/vsistdout/",
            name,
            "-sql",
            sql,
            "-lco",
            "GEOMETRY=AS_WKT",
        ],
        dir,
    );
    assert!(
        output.status.success(),
        "ogr2ogr -sql {sql:?} failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8_lossy(&output.stdout)
        .lines()
        .skip(1)
        .map(csv_fields)
        .collect()
}

/// [`gdal_rows`] with each row's fields joined by `|`.
pub fn gdal_sql(file: &Path, sql: &str) -> Vec<String> {
    gdal_rows(file, sql)
        .into_iter()
        .map(|fields| fields.join("|"))
        .collect()
}

/// Runs ogr2ogr in `dir`, asserting success.
pub fn ogr2ogr(dir: &Path, args: &[&str]) {
    let output = command_output("ogr2ogr", args, dir);
    assert!(
        output.status.success(),
        "ogr2ogr {args:?} failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
}

/// Runs `ogrinfo FILE -sql SQL` (GDAL as a writer of plain SQL), asserting success.
pub fn ogrinfo_sql(file: &Path, sql: &str) {
    let (dir, name) = parts(file);
    let output = command_output("ogrinfo", &[name, "-sql", sql], dir);
    assert!(
        output.status.success(),
        "ogrinfo -sql {sql:?} failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
}

/// Features GDAL's spatial filter (`ogrinfo -spat`, which uses the R-tree)
/// finds in a window.
pub fn gdal_window_count(file: &Path, layer: &str, window: [f64; 4]) -> u64 {
    let (dir, name) = parts(file);
    let corners: Vec<String> = window.iter().map(|v| v.to_string()).collect();
    let mut args = vec!["-ro", "-so", "-spat"];
    args.extend(corners.iter().map(String::as_str));
    args.extend([name, layer]);
    let output = command_output("ogrinfo", &args, dir);
    String::from_utf8_lossy(&output.stdout)
        .lines()
        .find_map(|line| line.strip_prefix("Feature Count: "))
        .unwrap_or_else(|| panic!("no feature count from ogrinfo -spat on {layer}"))
        .trim()
        .parse()
        .unwrap()
}

/// GDAL's extent of a layer (`ogrinfo -so`), as it prints it.
pub fn gdal_extent(file: &Path, layer: &str) -> String {
    let (dir, name) = parts(file);
    let output = command_output("ogrinfo", &["-ro", "-so", name, layer], dir);
    String::from_utf8_lossy(&output.stdout)
        .lines()
        .find_map(|line| line.strip_prefix("Extent: "))
        .unwrap_or_else(|| panic!("no extent from ogrinfo for {layer}"))
        .to_string()
}

/// SQLite's own check of an R-tree index (`rtreecheck`, rtree.c) and its row
/// count, which must equal the layer's feature count.
pub fn rtree_check(file: &Path, layer: &str) -> (String, u64) {
    let conn = rusqlite::Connection::open(file).unwrap();
    let name = format!("rtree_{layer}_geom");
    let check: String = conn
        .query_row("SELECT rtreecheck(?1)", [&name], |row| row.get(0))
        .unwrap();
    let rows: i64 = conn
        .query_row(&format!("SELECT count(*) FROM \"{name}\""), [], |row| {
            row.get(0)
        })
        .unwrap();
    (check, rows as u64)
}

/// SQLite's integrity and foreign-key checks (GeoPackage Requirements 6 and 7).
pub fn sqlite_checks(file: &Path) {
    let conn = rusqlite::Connection::open(file).unwrap();
    let integrity: String = conn
        .query_row("PRAGMA integrity_check", [], |row| row.get(0))
        .unwrap();
    assert_eq!(integrity, "ok", "integrity_check of {}", file.display());
    let dangling: i64 = conn
        .query_row("SELECT count(*) FROM pragma_foreign_key_check", [], |row| {
            row.get(0)
        })
        .unwrap();
    assert_eq!(dangling, 0, "foreign_key_check of {}", file.display());
}

/// Runs SQL on a file with plain SQLite (for editing fixtures).
pub fn sqlite_edit(file: &Path, sql: &str) {
    let conn = rusqlite::Connection::open(file).unwrap();
    conn.execute_batch(sql)
        .unwrap_or_else(|e| panic!("{sql}: {e}"));
}

/// Replaces the geometry blob of one row of `layer` (key `fid`).
pub fn set_geometry(file: &Path, layer: &str, fid: i64, change: fn(Vec<u8>) -> Vec<u8>) {
    let conn = rusqlite::Connection::open(file).unwrap();
    let blob: Vec<u8> = conn
        .query_row(
            &format!("SELECT geom FROM \"{layer}\" WHERE fid = ?1"),
            [fid],
            |row| row.get(0),
        )
        .unwrap();
    conn.execute(
        &format!("UPDATE \"{layer}\" SET geom = ?1 WHERE fid = ?2"),
        rusqlite::params![change(blob), fid],
    )
    .unwrap();
}

pub fn sha256(path: &Path) -> String {
    let bytes = std::fs::read(path).unwrap();
    Sha256::digest(bytes)
        .iter()
        .map(|byte| format!("{byte:02x}"))
        .collect()
}

/// True for the side file of a results GeoPackage's per-job lock
/// (`.<name>.geofold-lock`): it stays after every run by design (it must
/// outlive runs so the lock always lives on the same file), so listings leave it out.
pub fn is_lock_file(name: &str) -> bool {
    name.starts_with('.') && name.ends_with(".geofold-lock")
}

/// Names in a directory, to see that nothing (temporary files, journals) is
/// left; job lock files are left out (see [`is_lock_file`]).
pub fn listing(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|entry| entry.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|name| !is_lock_file(name))
        .collect();
    names.sort();
    names
}

/// Every name in a directory, lock files included.
pub fn full_listing(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|entry| entry.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

/// `(name, SHA-256)` of every file [`listing`] shows.
pub fn hashes(dir: &Path) -> Vec<(String, String)> {
    listing(dir)
        .into_iter()
        .map(|name| {
            let hash = sha256(&dir.join(&name));
            (name, hash)
        })
        .collect()
}

/// The numbers in a text (a WKT), for comparing geometries printed by two tools.
pub fn numbers_in(text: &str) -> Vec<f64> {
    text.split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-' || c == 'e' || c == 'E'))
        .filter(|token| !token.is_empty() && token.chars().any(|c| c.is_ascii_digit()))
        .map(|token| {
            token
                .parse()
                .unwrap_or_else(|_| panic!("not a number: {token}"))
        })
        .collect()
}

/// Rows GDAL printed with the geometry (WKT) first, with it moved last and
/// the rows sorted again, to line up with psql's `…, ST_AsText(geom)`.
pub fn geometry_last(rows: Vec<Vec<String>>) -> Vec<Vec<String>> {
    let mut rows: Vec<Vec<String>> = rows
        .into_iter()
        .map(|mut row| {
            let wkt = row.remove(0);
            row.push(wkt);
            row
        })
        .collect();
    rows.sort();
    rows
}
