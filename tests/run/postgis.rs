//! `run` cases only PostGIS has: source id types and the QGIS layers made
//! for them, geometry rules checked against PostGIS functions, an
//! independent numpy refit, bad tables, a failing write, the libpq
//! environment and TLS.

use std::process::Output;

use geozero::ToGeo;

use crate::common::fixtures::{
    args, create_lattice, create_two_blocks, create_units, grid, utm_lattice, IdType,
};
use crate::common::pg::{check_qgis_layer, db_uri, libpq_environment, Scratch};
use crate::common::reference::{check_units_sit_in_their_blocks, numpy_refit};
use crate::common::{
    assert_contains, code, fails, json, ok_json, run, run_id, Workdir, RUN_TABLES,
};

fn run_ok(scratch: &Scratch, workdir: &Workdir, arguments: &[&str]) -> serde_json::Value {
    ok_json(&scratch.geofold_run(workdir, arguments))
}

fn run_fails(scratch: &Scratch, workdir: &Workdir, arguments: &[&str], expected: i32) -> String {
    fails(&scratch.geofold_run(workdir, arguments), expected)
}

#[test]
fn each_id_type_gets_a_typed_qgis_layer_joined_by_the_source_type() {
    for (id, key_type, source_type) in [
        (IdType::Integer, "integer", "integer"),
        (IdType::Bigint, "bigint", "bigint"),
        // Text ids: the key is the rank of the id, an integer.
        (IdType::Text, "integer", "text"),
    ] {
        let scratch = Scratch::new("ids");
        let workdir = Workdir::new();
        create_units(&scratch, "units", id);
        let document = run_ok(
            &scratch,
            &workdir,
            &args(&[&grid("{s}.units", "a,b", "200", "3"), &["--json"]]),
        );
        let job = scratch.fill("{s}_units");
        assert_eq!(
            document["job"],
            job.as_str(),
            "the default job names schema and table"
        );
        scratch.bind("job", &job);
        scratch.bind("p", &run_id(&document, 0));
        check_qgis_layer(
            &scratch.results,
            &job,
            ("fid", key_type),
            "MULTIPOLYGON",
            32631,
            36,
        );
        check_qgis_layer(
            &scratch.results,
            &format!("{job}_regions"),
            ("region_id", "integer"),
            "MULTIPOLYGON",
            32631,
            9,
        );
        assert_eq!(
            scratch.query(
                "SELECT atttypid::regtype FROM pg_attribute
                 WHERE attrelid = '{r}.{job}'::regclass AND attname = 'unit_id'"
            ),
            source_type,
            "{id:?}: the job view's unit_id has the source's type"
        );
        // The source side of the view's join is the bare id column (its index
        // serves the join); the cast is on the results side.
        let definition = scratch.query("SELECT pg_get_viewdef('{r}.{job}'::regclass)");
        assert!(
            definition.contains("s.id = ") && !definition.contains("(s.id)::"),
            "{id:?}: {definition}"
        );
        scratch.check(
            "the view joins to the source and shows the primary run",
            "SELECT count(*) = 36 AND bool_and(v.run_id = '{p}') FROM {r}.{job} v JOIN {s}.units s ON s.id = v.unit_id",
        );
        scratch.bind("first", &id.id(1));
        assert_eq!(
            scratch.query("SELECT count(*) FROM {r}.fold_members WHERE run_id = '{p}' AND unit_id = '{first}'"),
            "1",
            "{id:?}: ids are stored as the source's text form"
        );
    }
}

/// Decodes lowercase hex (psql's `encode(…, 'hex')`).
fn hex_bytes(hex: &str) -> Vec<u8> {
    (0..hex.len())
        .step_by(2)
        .map(|i| u8::from_str_radix(&hex[i..i + 2], 16).expect("hex"))
        .collect()
}

#[test]
fn representative_points_follow_postgis_centroid_else_a_point_inside() {
    // geofold's rule (src/core/geometry.rs): the centroid, else for polygons whose
    // centroid lies outside, a point inside. Reference: PostGIS ST_Centroid and
    // ST_Contains on the same rows.
    let scratch = Scratch::new("reppoints");
    scratch.script(
        "CREATE TABLE {s}.shapes (id integer PRIMARY KEY, geom geometry(Geometry, 32631));
         INSERT INTO {s}.shapes VALUES
           -- C shape: centroid in the notch
           (1, 'SRID=32631;POLYGON((0 0,10 0,10 2,2 2,2 8,10 8,10 10,0 10,0 0))'),
           -- L shape: centroid (29/9, 29/9) by hand, outside both arms
           (2, 'SRID=32631;POLYGON((0 0,10 0,10 2,2 2,2 10,0 10,0 0))'),
           -- square ring: centroid (15, 15) in the hole
           (3, 'SRID=32631;POLYGON((0 0,30 0,30 30,0 30,0 0),(10 10,20 10,20 20,10 20,10 10))'),
           -- two far-apart parts: centroid between them
           (4, 'SRID=32631;MULTIPOLYGON(((0 0,1 0,1 1,0 1,0 0)),((100 100,101 100,101 101,100 101,100 100)))'),
           -- U shape at UTM magnitudes: centroid (500150, 5000135.7…) in the notch
           (6, 'SRID=32631;POLYGON((500000 5000000,500300 5000000,500300 5000300,500200 5000300,500200 5000100,
                500100 5000100,500100 5000300,500000 5000300,500000 5000000))'),
           -- convex and near-convex shapes: centroid inside
           (7, 'SRID=32631;POLYGON((500000 5000000,500080 5000000,500080 5000080,500000 5000080,500000 5000000))'),
           (8, 'SRID=32631;POLYGON((0 0,9 0,0 6,0 0))'),
           (9, 'SRID=32631;POLYGON((0 0,40 0,40 40,0 40,0 0),(25 25,35 25,35 35,25 35,25 25))'),
           (10, 'SRID=32631;MULTIPOLYGON(((0 0,10 0,10 10,0 10,0 0)),((20 0,22 0,22 2,20 2,20 0)))'),
           -- points: always the centroid
           (11, 'SRID=32631;POINT(3 4)'),
           (12, 'SRID=32631;MULTIPOINT((0 0),(10 0),(0 10))');
         -- a crescent (centroid outside) and a rotated, shifted C (irrational coordinates)
         INSERT INTO {s}.shapes SELECT 5, ST_Difference(ST_Buffer(ST_MakePoint(50, 50), 10),
                                                        ST_Buffer(ST_MakePoint(53, 50), 9))::geometry(Polygon, 32631);
         INSERT INTO {s}.shapes SELECT 14, ST_Translate(ST_Rotate(geom, 0.6457718232379019), 500000, 5000000)
             FROM {s}.shapes WHERE id = 1;",
    );
    let mut points = Vec::new();
    for line in scratch
        .query("SELECT id, encode(ST_AsEWKB(geom), 'hex') FROM {s}.shapes ORDER BY id")
        .lines()
    {
        let (id, hex) = line.split_once('|').unwrap();
        let geometry = geozero::wkb::Ewkb(hex_bytes(hex)).to_geo().unwrap();
        let point = geofold::core::geometry::representative_point(&geometry)
            .unwrap_or_else(|| panic!("shape {id} has no representative point"));
        points.push(format!(
            "({id}, '{:?}'::float8, '{:?}'::float8)",
            point[0], point[1]
        ));
    }
    let rows = scratch.query(&format!(
        "SELECT s.id, ST_Dimension(s.geom) = 2 AND NOT ST_Contains(s.geom, ST_Centroid(s.geom)),
                abs(p.x - ST_X(ST_Centroid(s.geom))), abs(p.y - ST_Y(ST_Centroid(s.geom))),
                ST_Contains(s.geom, ST_SetSRID(ST_MakePoint(p.x, p.y), 32631))
         FROM {{s}}.shapes s JOIN (VALUES {}) p (id, x, y) ON s.id = p.id ORDER BY s.id",
        points.join(", ")
    ));
    let mut outside = Vec::new();
    for line in rows.lines() {
        let fields: Vec<&str> = line.split('|').collect();
        let (id, centroid_outside) = (fields[0], fields[1] == "t");
        if centroid_outside {
            outside.push(id.parse::<i32>().unwrap());
            assert_eq!(
                fields[4], "t",
                "shape {id}: PostGIS says the point is not inside"
            );
        } else {
            let dx: f64 = fields[2].parse().unwrap();
            let dy: f64 = fields[3].parse().unwrap();
            assert!(
                dx <= 1e-9 && dy <= 1e-9,
                "shape {id}: off ST_Centroid by ({dx}, {dy})"
            );
        }
    }
    // The shapes built to have their centroid outside (see the comments above), as PostGIS sees them.
    assert_eq!(outside, vec![1, 2, 3, 4, 5, 6, 14]);
}

#[test]
fn a_ring_is_placed_in_a_block_it_covers_not_in_its_hole() {
    // 16 squares of 60 m, one per 100 m block (x 500000–500400, y 5000000–5000400),
    // and a square ring 501000–501300 whose hole 501100–501200 holds its centroid
    // (hand computation; checked below with ST_Centroid). Placed at its centroid,
    // the ring would make the block of the hole; by geofold's rule it sits in one
    // of the 8 blocks it covers.
    let scratch = Scratch::new("ring");
    let workdir = Workdir::new();
    create_lattice(
        &scratch,
        "units",
        IdType::Integer,
        &utm_lattice(4, 60.0, "Polygon"),
    );
    scratch.script(
        "INSERT INTO {s}.units VALUES (17, 61.5, 1.2, 0.7, 1.5, 'ring',
             ST_Difference(ST_MakeEnvelope(501000, 5001000, 501300, 5001300, 32631),
                           ST_MakeEnvelope(501100, 5001100, 501200, 5001200, 32631)));",
    );
    scratch.check(
        "the ring's centroid is in its hole",
        "SELECT ST_Equals(ST_Centroid(geom), 'SRID=32631;POINT(501150 5001150)') FROM {s}.units WHERE id = 17",
    );
    let document = run_ok(
        &scratch,
        &workdir,
        &args(&[&grid("{s}.units", "a,b", "100", "3"), &["--json"]]),
    );
    scratch.bind("p", &run_id(&document, 0));
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.fold_regions WHERE run_id = '{p}'"),
        "17"
    );
    scratch.check(
        "no block at the ring's centroid",
        "SELECT count(*) = 0 FROM {r}.fold_regions b, {s}.units s
         WHERE b.run_id = '{p}' AND s.id = 17 AND ST_Intersects(b.geom, ST_Centroid(s.geom))",
    );
    scratch.check(
        "exactly one block overlaps the ring, holds it alone, and has its fold",
        "SELECT count(*) = 1 AND bool_and(b.units = 1 AND b.fold = m.fold)
         FROM {r}.fold_regions b, {s}.units s JOIN {r}.fold_members m ON s.id::text = m.unit_id
         WHERE b.run_id = '{p}' AND m.run_id = '{p}' AND s.id = 17
           AND ST_Area(ST_Intersection(b.geom, s.geom)) > 0",
    );
    assert_eq!(
        check_units_sit_in_their_blocks(&scratch, "units", &run_id(&document, 0), "s.geom"),
        16
    );
}

#[test]
fn held_out_predictions_match_a_numpy_refit_on_the_folds_read_back() {
    // Reference: numpy.linalg.lstsq per fold (tests/fixtures/ols_refit.py), fed
    // the fold assignment read back from fold_members and the source rows.
    let (scratch, workdir) = units_case("numpy");
    let document = run_ok(
        &scratch,
        &workdir,
        &args(&[
            &grid("{s}.units", "a,b,c", "200", "3"),
            &["--repeats", "2", "--also-random", "--json"],
        ]),
    );
    for index in [0, 1] {
        let run = run_id(&document, index);
        let input = scratch.query(&format!(
            "SELECT m.repetition, m.fold, s.id, s.target, s.a, s.b, s.c
             FROM {{s}}.units s JOIN {{r}}.fold_members m ON s.id::text = m.unit_id
             WHERE m.run_id = '{run}' ORDER BY m.repetition, s.id"
        ));
        let reference = numpy_refit(&input);
        let stored = scratch.query(&format!(
            "SELECT repetition, unit_id, predicted FROM {{r}}.predictions WHERE run_id = '{run}'"
        ));
        let mut compared = 0;
        for line in stored.lines() {
            let (key, value) = line.rsplit_once('|').unwrap();
            let predicted: f64 = value.parse().unwrap();
            let expected = reference[key];
            assert!(
                (predicted - expected).abs() <= 1e-8 * expected.abs(),
                "run {run} repetition|unit {key}: geofold {predicted}, numpy {expected}"
            );
            compared += 1;
        }
        assert_eq!(compared, 72, "2 repetitions × 36 units");
        assert_eq!(reference.len(), 72);
    }
}

#[test]
fn row_order_does_not_change_folds_scores_or_fingerprint() {
    let (scratch, workdir) = units_case("order");
    scratch.script(
        "CREATE TABLE {s}.shuffled (LIKE {s}.units INCLUDING ALL);
         INSERT INTO {s}.shuffled SELECT * FROM {s}.units ORDER BY md5(id::text);",
    );
    scratch.check(
        "the two tables hold the rows in different physical order",
        "SELECT (SELECT string_agg(id::text, ',' ORDER BY ctid) FROM {s}.units)
             <> (SELECT string_agg(id::text, ',' ORDER BY ctid) FROM {s}.shuffled)",
    );
    let options: &[&str] = &["--also-random", "--json"];
    let first = run_ok(
        &scratch,
        &workdir,
        &args(&[&grid("{s}.units", "a,b", "200", "3"), options]),
    );
    let second = run_ok(
        &scratch,
        &workdir,
        &args(&[&grid("{s}.shuffled", "a,b", "200", "3"), options]),
    );
    for index in [0, 1] {
        scratch.bind("one", &run_id(&first, index));
        scratch.bind("two", &run_id(&second, index));
        // Compared as SQL text: float8 output is the shortest exact decimal, so equal text is equal bits.
        for sql in [
            "SELECT repetition, fold, unit_id FROM {r}.fold_members WHERE run_id = '{run}'",
            "SELECT repetition, unit_id, predicted::text FROM {r}.predictions WHERE run_id = '{run}'",
            "SELECT repetition, fold, n_train, n_test, rmse::text, mae::text, bias::text, r2::text
             FROM {r}.fold_scores WHERE run_id = '{run}'",
            "SELECT rmse::text, mae::text, bias::text, r2::text, rmse_fold_sd::text
             FROM {r}.run_scores WHERE run_id = '{run}'",
            "SELECT label, fold, units FROM {r}.fold_regions WHERE run_id = '{run}'
             UNION ALL SELECT 'none', 0, 0",
            "SELECT input_fingerprint, units_used FROM {r}.runs WHERE run_id = '{run}'",
        ] {
            let one = sql.replace("{run}", "{one}");
            let two = sql.replace("{run}", "{two}");
            scratch.check(
                "same rows in another order give the same results",
                &format!(
                    "SELECT count(*) > 0 AND NOT EXISTS (({one}) EXCEPT ({two})) AND NOT EXISTS (({two}) EXCEPT ({one}))
                     FROM ({one}) a"
                ),
            );
        }
    }
    assert_eq!(first["input_fingerprint"], second["input_fingerprint"]);
}

/// Runs, asserts exit `expected` and that stderr holds every part (with
/// `{s}` and `{r}` filled in); returns stderr.
fn refused(
    scratch: &Scratch,
    workdir: &Workdir,
    arguments: &[&str],
    expected: i32,
    parts: &[&str],
) {
    let stderr = run_fails(scratch, workdir, arguments, expected);
    let parts: Vec<String> = parts.iter().map(|part| scratch.fill(part)).collect();
    assert_contains(
        &stderr,
        &parts.iter().map(String::as_str).collect::<Vec<_>>(),
    );
}

/// A scratch schema holding a [`create_units`] table `{s}.units`, and a scratch directory.
fn units_case(label: &str) -> (Scratch, Workdir) {
    let scratch = Scratch::new(label);
    create_units(&scratch, "units", IdType::Integer);
    (scratch, Workdir::new())
}

#[test]
fn missing_table_schema_or_column_exit_66() {
    let (scratch, workdir) = units_case("missing");
    for (table, features, says) in [
        ("{s}.nosuch", "a,b", "table {s}.nosuch does not exist"),
        ("{s}.unit", "a,b", "(did you mean units?)"),
        (
            "nosuch_schema_for_geofold.units",
            "a,b",
            "schema nosuch_schema_for_geofold does not exist",
        ),
        (
            "{s}.units",
            "a,rainfall",
            "column rainfall in table {s}.units",
        ),
    ] {
        refused(
            &scratch,
            &workdir,
            &grid(table, features, "200", "3"),
            66,
            &[says],
        );
    }
    assert_eq!(scratch.runs_count(), 0, "nothing recorded");
}

#[test]
fn bad_columns_and_duplicate_ids_exit_65_naming_table_column_and_row() {
    let (scratch, workdir) = units_case("badcolumns");
    scratch.script(
        "CREATE TABLE {s}.dupes AS SELECT * FROM {s}.units;
         INSERT INTO {s}.dupes SELECT id, target + 1, a, b, c, label, geom FROM {s}.units WHERE id = 7;",
    );
    // A text feature is categorical (tests/models_input.rs); a date is neither.
    scratch.script("ALTER TABLE {s}.units ADD COLUMN surveyed date DEFAULT '2020-01-01';");
    let date_feature = grid("{s}.units", "a,surveyed", "200", "3");
    refused(
        &scratch,
        &workdir,
        &date_feature,
        65,
        &[
            "{s}.units.surveyed",
            "numeric, or text for a categorical feature",
        ],
    );
    // A text target is refused: only a feature may be categorical.
    let mut text_target = grid("{s}.units", "a,b", "200", "3");
    text_target[7] = "label";
    refused(
        &scratch,
        &workdir,
        &text_target,
        65,
        &[
            "{s}.units.label",
            "column has type text; it must be numeric\n",
        ],
    );
    let dupes = grid("{s}.dupes", "a,b", "200", "3");
    refused(
        &scratch,
        &workdir,
        &dupes,
        65,
        &["{s}.dupes.id (row id=7)", "duplicate id"],
    );
    assert_eq!(scratch.runs_count(), 0, "nothing recorded");
}

#[test]
fn unfittable_folds_exit_65_naming_fold_and_features() {
    let scratch = Scratch::new("unfittable");
    let workdir = Workdir::new();
    create_two_blocks(&scratch);
    let fold = "cannot fit fold 1 (repetition 1)";
    let constant = grid("{s}.points", "a,b,c", "200", "2");
    refused(
        &scratch,
        &workdir,
        &constant,
        65,
        &[fold, "feature c is constant"],
    );
    let collinear = grid("{s}.points", "a,b,d", "200", "2");
    refused(
        &scratch,
        &workdir,
        &collinear,
        65,
        &[fold, "rank-deficient", "feature d is a linear combination"],
    );
    // 2 units per block: each fold trains on 2 units, and OLS with an intercept and
    // 3 features needs at least 4 (common practice, no source); found before any
    // run is recorded.
    scratch.script("DELETE FROM {s}.points WHERE (id - 1) % 6 >= 2;");
    refused(
        &scratch,
        &workdir,
        &collinear,
        65,
        &[
            "cannot build folds: fold 1 of repetition 1 keeps 2 training units",
            "fewer than the 4",
        ],
    );
}

#[test]
fn a_table_name_with_sql_in_it_is_just_a_missing_table() {
    let (scratch, workdir) = units_case("inject");
    scratch.script("CREATE TABLE {s}.y (keep integer); INSERT INTO {s}.y VALUES (1);");
    let table = r#"{s}.x"; DROP TABLE {s}.y; --"#;
    refused(
        &scratch,
        &workdir,
        &grid(table, "a,b", "200", "3"),
        66,
        &["does not exist"],
    );
    assert_eq!(scratch.query("SELECT count(*) FROM {s}.y"), "1");
}

#[test]
fn a_run_failing_while_writing_leaves_no_rows_and_the_view_keeps_the_last_success() {
    let (scratch, workdir) = units_case("halfwritten");
    let arguments = args(&[
        &grid("{s}.units", "a,b", "200", "3"),
        &["--also-random", "--json"],
    ]);
    let first = run_ok(&scratch, &workdir, &arguments);
    scratch.bind("first", &run_id(&first, 0));
    // fold_regions is loaded after held_out and the score tables, so the
    // failure comes in the middle of writing. A statement-level trigger fires once the COPY has all
    // its rows (PostgreSQL "COPY" docs: AFTER STATEMENT triggers fire at its
    // end), so the server's message reliably reaches geofold; a row-level one
    // can stop the COPY while rows are still being sent, and the client
    // library then reports only that the load ended early.
    scratch.script(
        "CREATE FUNCTION {r}.refuse() RETURNS trigger LANGUAGE plpgsql
             AS $$ BEGIN RAISE EXCEPTION 'refused by the test trigger'; END $$;
         CREATE TRIGGER refuse AFTER INSERT ON {r}.fold_regions
             FOR EACH STATEMENT EXECUTE FUNCTION {r}.refuse();",
    );
    let output = scratch.geofold_run(&workdir, &arguments);
    let stderr = crate::common::stderr(&output);
    assert_eq!(
        code(&output),
        65,
        "a server-side rule rejected the data: {stderr}"
    );
    assert!(stderr.contains("refused by the test trigger"), "{stderr}");
    let failed =
        scratch.query("SELECT run_id FROM {r}.runs WHERE status = 'failed' ORDER BY scheme");
    let failed: Vec<&str> = failed.lines().collect();
    assert_eq!(failed.len(), 2, "the grid run and its random comparison");
    for run in failed {
        for (table, owner) in RUN_TABLES {
            assert_eq!(
                scratch.query(&format!(
                    "SELECT count(*) FROM {{r}}.{table} WHERE {owner} = '{run}'"
                )),
                "0",
                "{table} rows of failed run {run}"
            );
        }
    }
    scratch.check(
        "the failed runs say why",
        "SELECT bool_and(error_message LIKE '%refused by the test trigger%' AND finished_at IS NOT NULL)
         FROM {r}.runs WHERE status = 'failed'",
    );
    scratch.check(
        "the job views still show the first run",
        "SELECT (SELECT count(*) = 36 AND bool_and(run_id = '{first}') FROM {r}.{s}_units)
            AND (SELECT count(*) = 9 AND bool_and(run_id = '{first}') FROM {r}.{s}_units_regions)",
    );
}

/// `geofold run --results-schema {r} ARGS` with no `--db`: the connection comes
/// from the PG* variables of the test URI plus `extra`; other libpq variables
/// are cleared.
fn run_with_environment(
    scratch: &Scratch,
    workdir: &Workdir,
    arguments: &[&str],
    extra: &[(&str, &str)],
) -> Output {
    let mut command = workdir.geofold();
    command.args(["run", "--results-schema", &scratch.results]);
    command.args(arguments.iter().map(|arg| scratch.fill(arg)));
    for key in [
        "PGAPPNAME",
        "PGSSLMODE",
        "PGPASSWORD",
        "PGSERVICE",
        "PGOPTIONS",
    ] {
        command.env_remove(key);
    }
    command.envs(libpq_environment(&db_uri()));
    command.envs(extra.iter().copied());
    run(command)
}

#[test]
fn without_db_the_libpq_environment_is_used_and_application_name_is_geofold() {
    let (scratch, workdir) = units_case("environment");
    // The server decides what the view shows: all rows only to a session whose
    // application_name is geofold.
    scratch.script(
        "CREATE VIEW {s}.for_geofold AS SELECT * FROM {s}.units
         WHERE current_setting('application_name') = 'geofold';",
    );
    let arguments = args(&[&grid("{s}.for_geofold", "a,b", "200", "3"), &["--json"]]);
    let output = run_with_environment(&scratch, &workdir, &arguments, &[]);
    let document = ok_json(&output);
    assert_eq!(document["units_read"], 36);
    scratch.bind("p", &run_id(&document, 0));
    assert_eq!(
        scratch.query("SELECT status, units_read FROM {r}.runs WHERE run_id = '{p}'"),
        "succeeded|36"
    );
    // PGAPPNAME is honoured too: under another name the view is empty.
    let output = run_with_environment(
        &scratch,
        &workdir,
        &arguments,
        &[("PGAPPNAME", "nightly-batch")],
    );
    assert_eq!(code(&output), 65);
    assert_eq!(json(&output)["status"], "failed");
}

#[test]
fn sslmode_require_encrypts_the_connection_and_disable_does_not() {
    // The server says whether a session is encrypted (pg_stat_ssl, PostgreSQL
    // documentation "The Cumulative Statistics System"); this view shows its rows
    // only to TLS sessions. scripts/pg-throwaway.sh starts the test server with a
    // self-signed certificate; sslmode=require encrypts without verifying it,
    // as libpq does (PostgreSQL documentation, "SSL Mode Descriptions").
    let (scratch, workdir) = units_case("tls");
    scratch.script(
        "CREATE VIEW {s}.over_tls AS SELECT * FROM {s}.units
         WHERE (SELECT ssl FROM pg_stat_ssl WHERE pid = pg_backend_pid());",
    );
    let arguments = args(&[&grid("{s}.over_tls", "a,b", "200", "3"), &["--json"]]);
    let command =
        |mode: &str| run_with_environment(&scratch, &workdir, &arguments, &[("PGSSLMODE", mode)]);
    for mode in ["require", "prefer"] {
        let output = command(mode);
        assert_eq!(code(&output), 0, "sslmode={mode}");
        assert_eq!(json(&output)["units_read"], 36, "sslmode={mode}");
    }
    // Unencrypted, the view is empty: no usable rows.
    let output = command("disable");
    assert_eq!(code(&output), 65);
    assert!(json(&output)["error"]["message"]
        .as_str()
        .is_some_and(|m| m.contains("no usable rows")));
    // verify-full with no root certificate file is refused, as libpq refuses
    // it, rather than weakened (tests/connect.rs checks verification against
    // CAs of its own). HOME is the scratch directory, so ~/.postgresql/root.crt
    // does not exist.
    let home = workdir.root().display().to_string();
    let output = run_with_environment(
        &scratch,
        &workdir,
        &arguments,
        &[("PGSSLMODE", "verify-full"), ("HOME", &home)],
    );
    assert_eq!(code(&output), 78);
    assert!(crate::common::stderr(&output).contains("root.crt"));
}
