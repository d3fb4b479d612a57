//! What the source's geometry column and column names may be (issue 6,
//! items 1, 2, 11, 12, 15 and 16): mixed SRIDs, undefined and geographic
//! CRSs, geography columns, a source whose geometry type changed, default
//! job names, and column names as each store matches them. PostGIS's own
//! ST_Transform, ST_Centroid and ST_Contains are the reference for where
//! transformed units fall.

use crate::common::fixtures::{
    args, create_lattice, create_squares, create_units, grid, utm_lattice, IdType, Lattice,
    UNITS_COLUMNS,
};
use crate::common::gdal::{
    gdal_extent, gdal_layers, gdal_validates, layer, numbers_in, ogrinfo_sql,
};
use crate::common::pg::{check_qgis_layer, Scratch};
use crate::common::reference::check_units_sit_in_their_blocks;
use crate::common::stores::{Stores, BOTH};
use crate::common::{assert_contains, fails, ok_json, run_id, stdout, Workdir};

/// A scratch schema with a [`create_squares`] table `{s}.units`, and a scratch directory.
fn squares_case(label: &str) -> (Scratch, Workdir) {
    let scratch = Scratch::new(label);
    create_squares(&scratch, "units");
    (scratch, Workdir::new())
}

/// Runs `base` without and then with `--distance-srid 32631`: without, it
/// exits `code` naming each of `says` and records nothing; with, it runs,
/// and every unit of `table` (36 here) sits in the block that holds the
/// centroid PostGIS's transform `geom` gives. Returns the run id.
fn refused_then_transformed(
    scratch: &Scratch,
    workdir: &Workdir,
    base: &[&str],
    (code, says): (i32, &[&str]),
    (table, geom): (&str, &str),
) -> String {
    let message = fails(&scratch.geofold_run(workdir, base), code);
    let says: Vec<String> = says.iter().map(|part| scratch.fill(part)).collect();
    assert_contains(
        &message,
        &says.iter().map(String::as_str).collect::<Vec<_>>(),
    );
    assert_eq!(scratch.runs_count(), 0, "nothing recorded");
    let document = ok_json(&scratch.geofold_run(
        workdir,
        &args(&[base, &["--distance-srid", "32631", "--json"]]),
    ));
    let run = run_id(&document, 0);
    assert_eq!(document["units_used"], 36);
    assert_eq!(
        check_units_sit_in_their_blocks(scratch, table, &run, geom),
        36
    );
    run
}

#[test]
fn mixed_srids_in_one_column_are_refused_naming_each_srid_and_its_rows() {
    // Issue 6 item 1. A geometry column without a type modifier holding three
    // SRIDs: rows with id ≡ 0 (mod 4) in EPSG:4326 (9 rows), id ≡ 1 (mod 6)
    // in EPSG:3857 (6 rows), the other 21 in EPSG:32631; each row transformed
    // from the same UTM square by PostGIS.
    let (scratch, workdir) = squares_case("mixed");
    scratch.script(
        "CREATE TABLE {s}.mixed (id integer PRIMARY KEY, target float8, a float8, b float8, geom geometry);
         INSERT INTO {s}.mixed SELECT id, target, a, b,
             CASE WHEN id % 4 = 0 THEN ST_Transform(geom, 4326)
                  WHEN id % 6 = 1 THEN ST_Transform(geom, 3857) ELSE geom END
         FROM {s}.units;",
    );
    assert_eq!(
        scratch.query("SELECT string_agg(srid || ':' || n, ',' ORDER BY srid) FROM (SELECT ST_SRID(geom) srid, count(*) n FROM {s}.mixed GROUP BY 1) x"),
        "3857:6,4326:9,32631:21",
        "the fixture as PostGIS sees it"
    );
    let base = grid("{s}.mixed", "a,b", "200", "3");
    // With --distance-srid every row is transformed from its own SRID.
    let run = refused_then_transformed(
        &scratch,
        &workdir,
        &base,
        (
            65,
            &[
                "{s}.mixed.geom",
                "SRID 32631: 21 rows",
                "SRID 4326: 9 rows",
                "SRID 3857: 6 rows",
                "--distance-srid",
            ],
        ),
        ("mixed", "ST_Transform(s.geom, 32631)"),
    );
    scratch.bind("p", &run);
    assert_eq!(
        scratch.query("SELECT distance_srid FROM {r}.runs WHERE run_id = '{p}'"),
        "32631"
    );
    // The job view is a layer QGIS can open: one SRID for every row.
    check_qgis_layer(
        &scratch.results,
        &scratch.fill("{s}_mixed"),
        ("fid", "integer"),
        "MULTIPOLYGON",
        32631,
        36,
    );
    scratch.check(
        "the job view's geometries are the source's, in one SRID",
        "SELECT bool_and(ST_SRID(v.geom) = 32631 AND ST_Equals(ST_SnapToGrid(v.geom, 0.001),
                                                               ST_SnapToGrid(ST_Multi(ST_Transform(s.geom, 32631)), 0.001)))
         FROM {r}.{s}_mixed v JOIN {s}.mixed s ON s.id = v.unit_id",
    );

    // Exported to a GeoPackage, the per-unit layer holds every unit in the
    // layer's CRS (EPSG:32631): GDAL's extent of it is PostGIS's extent of
    // the transformed rows (to a millimetre: GDAL prints six decimals).
    let export = workdir.run(&[
        "export",
        "--db",
        &crate::common::db_uri(),
        "--results-schema",
        &scratch.results,
        "--job",
        &scratch.fill("{s}_mixed"),
        "--to",
        "mixed.gpkg",
    ]);
    assert_eq!(
        crate::common::code(&export),
        0,
        "{}",
        crate::common::stderr(&export)
    );
    let file = workdir.path("mixed.gpkg");
    let exported = numbers_in(&gdal_extent(&file, &scratch.fill("{s}_mixed")));
    let expected: Vec<f64> = scratch
        .query(
            "SELECT concat_ws(' ', ST_XMin(e), ST_YMin(e), ST_XMax(e), ST_YMax(e))
             FROM (SELECT ST_Extent(ST_Transform(geom, 32631)) AS e FROM {s}.mixed) x",
        )
        .split(' ')
        .map(|v| v.parse().unwrap())
        .collect();
    assert_eq!(exported.len(), 4, "{exported:?}");
    for (a, b) in exported.iter().zip(&expected) {
        assert!(
            (a - b).abs() < 1e-3,
            "exported extent {exported:?}, PostGIS {expected:?}"
        );
    }
    gdal_validates(&file);

    // Rows with SRID 0 cannot be transformed: refused, naming ST_SetSRID.
    scratch.script("UPDATE {s}.mixed SET geom = ST_SetSRID(geom, 0) WHERE id = 5;");
    let message = fails(
        &scratch.geofold_run(&workdir, &args(&[&base, &["--distance-srid", "32631"]])),
        65,
    );
    assert_contains(&message, &["SRID 0: 1 rows", "ST_SetSRID"]);
}

#[test]
fn an_undefined_crs_refuses_grid_blocks_unless_assumed_metres_and_random_folds_run() {
    // Issue 6 item 2: SRID 0 in PostGIS; in the GeoPackage GDAL writes a
    // layer without a CRS with the undefined Cartesian SRS (-1); srs_id 0
    // (undefined geographic) is checked after.
    let stores = Stores::from_postgis("undefined", "units", |s| {
        let lattice = Lattice {
            srid: 0,
            ..utm_lattice(6, 80.0, "Polygon")
        };
        create_lattice(s, "units", IdType::Integer, &lattice);
    });
    let srs: i64 = rusqlite::Connection::open(&stores.source_gpkg)
        .unwrap()
        .query_row(
            "SELECT srs_id FROM gpkg_geometry_columns WHERE table_name = 'units'",
            [],
            |row| row.get(0),
        )
        .unwrap();
    assert!([0, -1].contains(&srs), "GDAL wrote SRS id {srs}");
    let columns = ["--id", "id", "--target", "target", "--features", "a,b"];
    let grid_args = [&columns[..], &["--block-size", "200", "--folds", "3"]].concat();
    let check_refusals = |stores: &Stores| {
        let refused = stores.run(&grid_args);
        for store in BOTH {
            let outcome = refused.get(store);
            let message = outcome.stderr();
            assert_eq!(outcome.code(), 64, "{store:?}: {message}");
            assert_contains(&message, &["no CRS defined", "--assume-metres"]);
            assert_eq!(stores.runs_recorded(store), 0, "{store:?}");
        }
        assert_contains(&refused.pg.stderr(), &["ST_SetSRID"]);
        assert_contains(&refused.gpkg.stderr(), &["ogr2ogr -a_srs"]);
        // An exclusion radius needs distances too.
        let buffered = stores.run(
            &[
                &columns[..],
                &["--scheme", "random", "--exclusion-radius", "150"],
            ]
            .concat(),
        );
        for store in BOTH {
            assert_eq!(buffered.get(store).code(), 64, "{store:?}");
        }
    };
    check_refusals(&stores);
    // Random folds need no distances: they run, and agree across stores.
    let random = stores.run_ok(&[&columns[..], &["--scheme", "random", "--folds", "3"]].concat());
    stores.assert_same(&random);
    // --assume-metres: grid blocks in the coordinates as metres.
    let assumed = stores.run_ok(&[&grid_args[..], &["--assume-metres"]].concat());
    stores.assert_same(&assumed);
    for store in BOTH {
        let described = assumed.get(store).doc["runs"][0]["scheme_described"]
            .as_str()
            .unwrap()
            .to_string();
        assert!(described.contains("200 m"), "{store:?}: {described}");
    }
    stores.pg.bind("p", &assumed.pg.run_id(0));
    stores.pg.check(
        "blocks of 200 units of the undefined CRS, holding all units",
        "SELECT count(*) = 9 AND bool_and(abs(ST_Area(geom) - 40000) < 1e-6 AND srid = 0) AND sum(units) = 36
         FROM {r}.fold_regions WHERE run_id = '{p}'",
    );
    gdal_validates(&stores.results_gpkg);

    // srs_id 0 in the GeoPackage: the layer's and every blob's (GeoPackage
    // Requirement 33 wants them equal; bytes 4..8 of the GeoPackageBinary header).
    // GDAL makes the edit: its R-tree triggers call its own SQL functions.
    for sql in [
        "UPDATE units SET geom = CAST(substr(geom, 1, 4) || X'00000000' || substr(geom, 9) AS BLOB)",
        "UPDATE gpkg_geometry_columns SET srs_id = 0 WHERE table_name = 'units'",
        "UPDATE gpkg_contents SET srs_id = 0 WHERE table_name = 'units'",
    ] {
        ogrinfo_sql(&stores.source_gpkg, sql);
    }
    let refused = stores.run_one(crate::common::stores::Store::Gpkg, &grid_args);
    assert_eq!(refused.code(), 64, "{}", refused.stderr());
    assert_contains(
        &refused.stderr(),
        &["no CRS defined", "ogr2ogr -a_srs", "--assume-metres"],
    );
    let assumed = stores.run_one(
        crate::common::stores::Store::Gpkg,
        &[&grid_args[..], &["--assume-metres"]].concat(),
    );
    assert_eq!(assumed.code(), 0, "{}", assumed.stderr());
}

#[test]
fn a_geography_column_needs_a_distance_srid_and_postgis_transforms_it() {
    // Issue 6 item 12.
    let (scratch, workdir) = squares_case("geography");
    scratch.script(
        "CREATE TABLE {s}.geo (id integer PRIMARY KEY, target float8, a float8, b float8, place geography(Polygon, 4326));
         INSERT INTO {s}.geo SELECT id, target, a, b, ST_Transform(geom, 4326)::geography FROM {s}.units;",
    );
    let base = grid("{s}.geo", "a,b", "200", "3")
        .into_iter()
        .map(|arg| if arg == "geom" { "place" } else { arg })
        .collect::<Vec<_>>();
    refused_then_transformed(
        &scratch,
        &workdir,
        &base,
        (64, &["{s}.geo.place", "geography", "--distance-srid"]),
        ("geo", "ST_Transform(s.place::geometry, 32631)"),
    );
    check_qgis_layer(
        &scratch.results,
        &scratch.fill("{s}_geo"),
        ("fid", "integer"),
        "MULTIPOLYGON",
        4326,
        36,
    );
    check_qgis_layer(
        &scratch.results,
        &scratch.fill("{s}_geo_regions"),
        ("region_id", "integer"),
        "MULTIPOLYGON",
        32631,
        9,
    );
}

#[test]
fn geographic_srid_needs_a_distance_srid_and_postgis_transforms() {
    let scratch = Scratch::new("lonlat");
    let workdir = Workdir::new();
    // 6 × 6 squares of 0.001° every 0.002° near 3° E 45° N (UTM zone 31N, central
    // meridian 3° E), so 500 m blocks in EPSG:32631 hold a few units each.
    let lattice = Lattice {
        side: 6,
        origin: [3.0, 45.0],
        step: 0.002,
        size: 0.001,
        srid: 4326,
        geometry_type: "Polygon",
    };
    create_lattice(&scratch, "units", IdType::Integer, &lattice);
    let base = grid("{s}.units", "a,b", "500", "3");
    // The folds follow the blocks of the centroids PostGIS's ST_Transform gives.
    let run = refused_then_transformed(
        &scratch,
        &workdir,
        &base,
        (64, &["--distance-srid", "4326"]),
        ("units", "ST_Transform(s.geom, 32631)"),
    );
    scratch.bind("p", &run);
    assert_eq!(
        scratch.query("SELECT source_srid, distance_srid FROM {r}.runs WHERE run_id = '{p}'"),
        "4326|32631"
    );
    scratch.check(
        "blocks are 500 m squares in EPSG:32631",
        "SELECT count(*) > 3 AND bool_and(ST_SRID(geom) = 32631 AND abs(ST_Area(geom) - 250000) < 1e-6)
         FROM {r}.fold_regions WHERE run_id = '{p}'",
    );
    // The job view shows the source geometry in its own SRID.
    check_qgis_layer(
        &scratch.results,
        &scratch.fill("{s}_units"),
        ("fid", "integer"),
        "POLYGON",
        4326,
        36,
    );
    // Random folds need no distances, so the refusal of grid blocks offers
    // them; a model on locations needs distances with any folds, so its
    // refusal must not (common practice, no source: a hint must work).
    let grid_message = fails(&scratch.geofold_run(&workdir, &base), 64);
    assert_contains(
        &grid_message,
        &["--distance-srid", "or use --scheme random"],
    );
    let knn = args(&[
        &["--table", "{s}.units"],
        UNITS_COLUMNS,
        &["--scheme", "random", "--model", "knn", "--neighbours", "3"],
    ]);
    let knn_message = fails(&scratch.geofold_run(&workdir, &knn), 64);
    assert_contains(&knn_message, &["--distance-srid"]);
    assert!(
        !knn_message.contains("--scheme random"),
        "knn on lon/lat must not be sent to random folds: {knn_message}"
    );
}

/// Runs job `job` on `{s}.<table>` and checks its view is a QGIS layer of
/// `geometry_type` joined to the table named `{s}.<table>` now.
fn run_and_check_layer(scratch: &Scratch, workdir: &Workdir, table: &str, geometry_type: &str) {
    let job = table;
    let source = format!("{{s}}.{table}");
    let arguments = args(&[&grid(&source, "a,b", "200", "3"), &["--job", job, "--json"]]);
    let document = ok_json(&scratch.geofold_run(workdir, &arguments));
    check_qgis_layer(
        &scratch.results,
        job,
        ("fid", "integer"),
        geometry_type,
        32631,
        36,
    );
    scratch.bind("job", job);
    scratch.bind("run", &run_id(&document, 0));
    scratch.check(
        "the view shows the new run, and joins the table the job names now",
        "SELECT bool_and(run_id = '{run}') AND pg_get_viewdef('{r}.{job}'::regclass) NOT LIKE '%{job}_old%'
         FROM {r}.{job}",
    );
}

/// Replaces `{s}.<table>` as a nightly load does: a new table of the rows
/// of `{s}.units` with the geometry column declared MultiPolygon, swapped in
/// under the name (the old one kept as `<table>_old`).
fn swap_in_multipolygons(scratch: &Scratch, table: &str) {
    scratch.script(&format!(
        "CREATE TABLE {{s}}.{table}_new (id integer PRIMARY KEY, target float8, a float8, b float8,
             geom geometry(MultiPolygon, 32631));
         INSERT INTO {{s}}.{table}_new SELECT id, target, a, b, ST_Multi(geom) FROM {{s}}.units;
         ALTER TABLE {{s}}.{table} RENAME TO {table}_old;
         ALTER TABLE {{s}}.{table}_new RENAME TO {table};"
    ));
}

#[test]
fn a_source_whose_geometry_type_changed_gets_its_job_view_rebuilt() {
    // Issue 6 item 11.
    let (scratch, workdir) = squares_case("retyped");
    // An untyped column whose rows turn from polygons into points: the run
    // succeeds and the view becomes a point layer.
    scratch.script(
        "CREATE TABLE {s}.shapes (id integer PRIMARY KEY, target float8, a float8, b float8, geom geometry);
         INSERT INTO {s}.shapes SELECT id, target, a, b, geom FROM {s}.units;",
    );
    run_and_check_layer(&scratch, &workdir, "shapes", "MULTIPOLYGON");
    scratch.script("UPDATE {s}.shapes SET geom = ST_Centroid(geom);");
    run_and_check_layer(&scratch, &workdir, "shapes", "MULTIPOINT");
    // An untyped table replaced by one declared MultiPolygon.
    swap_in_multipolygons(&scratch, "shapes");
    run_and_check_layer(&scratch, &workdir, "shapes", "MULTIPOLYGON");
    // Declared Polygon, replaced by a table declared MultiPolygon: the view's
    // SQL text is the same for both, yet it must follow the new table and its type.
    scratch.script(
        "CREATE TABLE {s}.typed AS SELECT * FROM {s}.units; ALTER TABLE {s}.typed ADD PRIMARY KEY (id);",
    );
    run_and_check_layer(&scratch, &workdir, "typed", "POLYGON");
    swap_in_multipolygons(&scratch, "typed");
    run_and_check_layer(&scratch, &workdir, "typed", "MULTIPOLYGON");
}

#[test]
fn default_jobs_include_the_schema_and_the_summary_names_the_layers() {
    // Issue 6 item 15: a.units and b.units into one results schema are two jobs.
    let one = Scratch::new("jobs_a");
    let two = Scratch::new("jobs_b");
    let workdir = Workdir::new();
    create_units(&one, "units", IdType::Integer);
    create_units(&two, "units", IdType::Integer);
    two.script("UPDATE {s}.units SET target = target + 10;");
    let run_on = |scratch: &Scratch| {
        let mut all = vec![
            "run".to_string(),
            "--db".to_string(),
            crate::common::db_uri(),
            "--results-schema".to_string(),
            one.results.clone(),
        ];
        all.extend(
            grid(&scratch.fill("{s}.units"), "a,b", "200", "3")
                .iter()
                .map(|s| s.to_string()),
        );
        workdir.run(&all)
    };
    let first = run_on(&one);
    let second = run_on(&two);
    for (scratch, output) in [(&one, &first), (&two, &second)] {
        let text = stdout(output);
        let job = scratch.fill("{s}_units");
        let run = text
            .lines()
            .find_map(|line| line.strip_prefix("grid run "))
            .and_then(|rest| rest.split_whitespace().next())
            .unwrap_or_else(|| panic!("no run id in:\n{text}"))
            .to_string();
        assert_contains(
            &text,
            &[
                &format!("job {job}: 36 units used"),
                &format!(
                    "layer {}.{job} (key fid): per-unit errors of the latest successful run, with each unit's fold; it now shows run {run}",
                    one.results
                ),
                &format!("layer {}.{job}_regions (key region_id)", one.results),
            ],
        );
        one.bind("job", &job);
        one.bind("run", &run);
        one.check(
            "each job's view shows its own run",
            "SELECT count(*) = 36 AND bool_and(run_id = '{run}') FROM {r}.{job}",
        );
    }
    assert_eq!(one.query("SELECT count(DISTINCT job) FROM {r}.runs"), "2");
}

#[test]
fn column_names_match_as_each_store_matches_them_and_unknown_ones_get_suggestions() {
    // Issue 6 item 16. PostgreSQL folds an unquoted name to lower case; SQLite
    // matches names ignoring ASCII case. Spaces around --features entries are
    // not part of the names.
    let stores = Stores::from_postgis("names", "units", |s| {
        create_units(s, "units", IdType::Integer)
    });
    let grid_args = ["--block-size", "200", "--folds", "3"];
    let loose = [
        &["--id", "ID", "--target", "TARGET", "--features", " A , b "][..],
        &grid_args[..],
    ]
    .concat();
    let both = stores.run_ok(&loose);
    stores.assert_same(&both);
    for store in BOTH {
        let source = &both.get(store).doc["source"];
        assert_eq!(
            source["feature_columns"],
            serde_json::json!(["a", "b"]),
            "{store:?}"
        );
        assert_eq!(source["target_column"], "target", "{store:?}");
    }
    for (columns, says) in [
        (
            ["--target", "targt", "--features", "a,b"],
            "column targt (did you mean target?)",
        ),
        (
            ["--target", "target", "--features", "a,lable"],
            "column lable (did you mean label?)",
        ),
    ] {
        let wrong = [&["--id", "id"][..], &columns[..], &grid_args[..]].concat();
        let refused = stores.run(&wrong);
        for store in BOTH {
            let outcome = refused.get(store);
            assert_eq!(outcome.code(), 66, "{store:?}: {}", outcome.stderr());
            assert_contains(&outcome.stderr(), &[says]);
        }
    }
    // A quoted mixed-case PostgreSQL column matches exactly only.
    let scratch = &stores.pg;
    scratch.script(r#"ALTER TABLE {s}.units ADD COLUMN "Rainfall" float8; UPDATE {s}.units SET "Rainfall" = c;"#);
    let workdir = Workdir::new();
    let exact = grid("{s}.units", "a,Rainfall", "200", "3");
    ok_json(&scratch.geofold_run(&workdir, &args(&[&exact, &["--json"]])));
    let folded = grid("{s}.units", "a,rainfall", "200", "3");
    assert_contains(
        &fails(&scratch.geofold_run(&workdir, &folded), 66),
        &["column rainfall (did you mean Rainfall?)"],
    );
    // GDAL keeps the names of a GeoJSON file; geofold finds them in any case.
    let workdir = Workdir::new();
    crate::common::fixtures::gdal_lattice_gpkg(workdir.root(), "lattice.gpkg");
    let summary = ok_json(&workdir.run(&[
        "run",
        "--gpkg",
        "lattice.gpkg",
        "--layer",
        "UNITS",
        "--target",
        "Y",
        "--features",
        " X1 ,x2",
        "--block-size",
        "2000",
        "--folds",
        "4",
        "--json",
    ]));
    assert_eq!(
        summary["source"]["feature_columns"],
        serde_json::json!(["x1", "x2"])
    );
    let layers = gdal_layers(&workdir.path("lattice.gpkg"));
    assert_eq!(layers["units_cv"], layer("Polygon", 47, Some(32631)));
}
