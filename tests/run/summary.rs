//! What the text and `--json` summaries of `run` say (issue 6, items 13, 14
//! and 17), on both stores: the split's blocks counted against PostGIS, the
//! warning when blocks are so small the split is close to random, the
//! target, features and block size in words, a negative R² flagged, skipped
//! ids, and the caveat that scores describe predictive skill.

use crate::common::fixtures::{
    create_units, write_lattice_geojson, IdType, LATTICE_COLUMNS, UNITS_COLUMNS, UNITS_GRID,
};
use crate::common::stores::{Store, Stores, BOTH};
use crate::common::{assert_contains, code, stdout};

/// The text summary of the same run on one store (`--json` left out).
fn text(stores: &Stores, store: Store, args: &[&str]) -> String {
    stores.text(store, args)
}

fn lattice(label: &str) -> Stores {
    Stores::from_geojson(label, "lattice", "EPSG:32631", |path| {
        write_lattice_geojson(path, 8, 6)
    })
}

/// `--id code`, the lattice's target and features, 4 folds.
fn lattice_columns(extra: &[&'static str]) -> Vec<&'static str> {
    [&["--id", "code"], LATTICE_COLUMNS, &["--folds", "4"], extra].concat()
}

/// Occupied blocks of side `size` m (cells from the origin 0, 0) and the
/// median, smallest and largest units per block, by PostGIS from the
/// centroids of the units used (those with x1, x2 and y).
fn blocks_by_postgis(stores: &Stores, size: u32) -> (u64, f64, u64, u64) {
    let row = stores.pg.query(&format!(
        "SELECT count(*), percentile_cont(0.5) WITHIN GROUP (ORDER BY n), min(n), max(n) FROM (
             SELECT count(*) AS n FROM {{s}}.lattice
             WHERE x1 IS NOT NULL AND x2 IS NOT NULL AND y IS NOT NULL
             GROUP BY floor(ST_X(ST_Centroid(geom)) / {size}), floor(ST_Y(ST_Centroid(geom)) / {size})) b"
    ));
    let fields: Vec<&str> = row.split('|').collect();
    (
        fields[0].parse().unwrap(),
        fields[1].parse().unwrap(),
        fields[2].parse().unwrap(),
        fields[3].parse().unwrap(),
    )
}

#[test]
fn the_summary_reports_occupied_blocks_and_units_per_block_as_postgis_counts_them() {
    // Issue 6 item 13.
    let stores = lattice("sum_blocks");
    let args = lattice_columns(&["--block-size", "2000"]);
    let both = stores.run_ok(&args);
    stores.assert_same(&both);
    let (blocks, median, min, max) = blocks_by_postgis(&stores, 2000);
    for store in BOTH {
        let split = &both.get(store).doc["runs"][0]["split"];
        assert_eq!(split["occupied_blocks"], blocks, "{store:?}");
        assert_eq!(split["units_per_block"]["median"], median, "{store:?}");
        assert_eq!(split["units_per_block"]["min"], min, "{store:?}");
        assert_eq!(split["units_per_block"]["max"], max, "{store:?}");
        assert_eq!(
            both.get(store).doc["runs"][0]["warnings"],
            serde_json::json!([]),
            "{store:?}: 2 km blocks of 1 km units are not close to random"
        );
        let summary = text(&stores, store, &args);
        assert_contains(
            &summary,
            &[&format!(
                "{blocks} occupied blocks; units per block: median {median:.1}, range {min}–{max}"
            )],
        );
        assert!(!summary.contains("close to random"), "{summary}");
    }
}

#[test]
fn blocks_smaller_than_the_units_are_warned_about_as_close_to_random() {
    // Issue 6 item 13: 80 m blocks on a lattice of 1 km units put every unit
    // in a block of its own (REFERENCES §6.1: blocks smaller than the spacing
    // reproduce random k-fold CV).
    let stores = lattice("sum_random");
    let args = lattice_columns(&["--block-size", "80"]);
    let both = stores.run_ok(&args);
    stores.assert_same(&both);
    let (blocks, median, min, max) = blocks_by_postgis(&stores, 80);
    assert_eq!(
        (blocks, median, min, max),
        (47, 1.0, 1, 1),
        "every unit alone"
    );
    for store in BOTH {
        let run = &both.get(store).doc["runs"][0];
        assert_eq!(run["split"]["occupied_blocks"], 47, "{store:?}");
        let warnings = run["warnings"].as_array().unwrap();
        assert!(
            warnings
                .iter()
                .any(|w| w.as_str().unwrap().contains("close to random")),
            "{store:?}: {warnings:?}"
        );
        let summary = text(&stores, store, &args);
        assert_contains(
            &summary,
            &[
                "47 occupied blocks; units per block: median 1.0, range 1–1",
                "warning: ",
                "close to random",
            ],
        );
    }
}

#[test]
fn the_summary_names_target_features_and_block_size_in_words() {
    // Issue 6 item 14.
    let stores = lattice("sum_words");
    let args = lattice_columns(&["--block-size", "4000"]);
    for store in BOTH {
        let summary = text(&stores, store, &args);
        assert_contains(
            &summary,
            &[
                "validated: y predicted from x1, x2 with ordinary least squares",
                "square blocks of 4 km",
                "47 units used of 48 rows read",
                // The caveat every summary carries.
                "scores describe predictive skill",
                "not causes",
                "do not replace domain judgment, local rules or licensed practice",
            ],
        );
    }
    let metres = lattice_columns(&["--block-size", "1500"]);
    for store in BOTH {
        assert_contains(&text(&stores, store, &metres), &["square blocks of 1.5 km"]);
    }
    let small = lattice_columns(&["--block-size", "800"]);
    for store in BOTH {
        assert_contains(&text(&stores, store, &small), &["square blocks of 800 m"]);
    }
}

/// Two blocks of 6 points, 200 m apart: the target is about 0 in the west
/// block and about 10 in the east one, and the features do not tell them
/// apart. Holding out one block, the model learns the other block's level,
/// so every held-out prediction is off by about 10 (hand reasoning).
fn two_levels(scratch: &crate::common::pg::Scratch) {
    scratch.script(
        "CREATE TABLE {s}.levels (id integer PRIMARY KEY, target float8, a float8, b float8,
             geom geometry(Point, 32631));
         INSERT INTO {s}.levels
         SELECT 1 + 6*side + k, 10*side + 0.1*((k*7) % 3), k, (k*k) % 5,
                ST_SetSRID(ST_MakePoint(500010 + 200*side + 20*k, 5000050), 32631)
         FROM generate_series(0, 1) side, generate_series(0, 5) k;",
    );
}

#[test]
fn a_negative_r2_is_flagged_and_a_positive_one_is_not() {
    // Issue 6 item 14.
    let stores = Stores::from_postgis("sum_negative", "levels", two_levels);
    let args = [UNITS_COLUMNS, &["--block-size", "200", "--folds", "2"]].concat();
    let both = stores.run_ok(&args);
    stores.assert_same(&both);
    // R² = 1 - SSE/SST around the mean of all held-out values, recomputed by
    // PostgreSQL from the stored predictions (common practice, no source).
    stores.pg.bind("p", &both.pg.run_id(0));
    let r2: f64 = stores
        .pg
        .query(
            "SELECT 1 - sum((observed - predicted)^2) / sum((observed - m)^2)
             FROM {r}.predictions, (SELECT avg(observed) m FROM {r}.predictions WHERE run_id = '{p}') x
             WHERE run_id = '{p}'",
        )
        .parse()
        .unwrap();
    assert!(r2 < 0.0, "the fixture must give a negative R², got {r2}");
    for store in BOTH {
        let pooled = both.get(store).doc["runs"][0]["pooled"]["r2"]
            .as_f64()
            .unwrap();
        crate::common::assert_close(pooled, r2, "pooled R²");
        assert_contains(
            &text(&stores, store, &args),
            &["note: R² is negative: the held-out predictions are worse than predicting the mean"],
        );
    }
    // Control: the lattice's pooled R² is positive, and nothing is flagged.
    let lattice = lattice("sum_positive");
    let args = lattice_columns(&["--block-size", "2000"]);
    let both = lattice.run_ok(&args);
    for store in BOTH {
        let pooled = both.get(store).doc["runs"][0]["pooled"]["r2"]
            .as_f64()
            .unwrap();
        assert!(pooled > 0.0, "{store:?}: control R² {pooled}");
        assert!(!text(&lattice, store, &args).contains("R² is negative"));
    }
}

#[test]
fn skipped_ids_are_listed_first_few_in_the_text_and_all_in_json() {
    // Issue 6 item 17: 8 rows without a target (ids 201–208) and 1 without
    // a geometry (id 209).
    let stores = Stores::from_postgis("sum_skipped", "units", |s| {
        create_units(s, "units", IdType::Integer);
        s.script(
            "INSERT INTO {s}.units (id, target, a, b, c, label, geom)
             SELECT 200 + k, NULL, 1, 2, 3, 'no target',
                    ST_MakeEnvelope(500210, 5000210, 500290, 5000290, 32631)
             FROM generate_series(1, 8) k;
             INSERT INTO {s}.units (id, target, a, b, c, label, geom) VALUES (209, 1, 1, 2, 3, 'no geometry', NULL);",
        );
    });
    let args = UNITS_GRID;
    let both = stores.run_ok(args);
    stores.assert_same(&both);
    for store in BOTH {
        assert_eq!(
            both.get(store).doc["skipped"],
            serde_json::json!([
                {"reason": "no geometry", "count": 1, "ids": ["209"]},
                {"reason": "missing target", "count": 8,
                 "ids": ["201", "202", "203", "204", "205", "206", "207", "208"]},
            ]),
            "{store:?}"
        );
        let summary = text(&stores, store, args);
        assert_contains(
            &summary,
            &[
                "skipped 9 rows: 1 no geometry, 8 missing target",
                "no geometry: ids 209\n",
                "missing target: ids 201, 202, 203, 204, 205 and 3 more (all in --json)",
            ],
        );
        // Only the skipped lines: a run id may contain "206" by chance.
        let skipped: Vec<&str> = summary
            .lines()
            .filter(|line| line.contains("ids "))
            .collect();
        assert_eq!(skipped.len(), 2, "{store:?}: {summary}");
        assert!(
            skipped.iter().all(|line| !line.contains("206")),
            "{store:?}: only the first five: {summary}"
        );
    }
}

#[test]
fn the_help_names_the_exit_codes_and_what_scores_mean() {
    let workdir = crate::common::Workdir::new();
    let output = workdir.run(&["--help"]);
    assert_eq!(code(&output), 0);
    // Compared with the line breaks of the help's wrapping undone.
    let help = stdout(&output)
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    assert_contains(
        &help,
        &[
            "scores describe predictive skill",
            "say nothing about causes",
            "do not replace domain judgment, local rules or licensed practice",
        ],
    );
    let output = workdir.run(&["run", "--help"]);
    assert_eq!(code(&output), 0);
    let help = stdout(&output);
    for line in [
        "  2   busy",
        "  64  usage",
        "  65  bad input data",
        "  66  the source",
        "  69  the database server",
        "  70  internal error",
        "  75  temporary failure",
        "  77  permission denied",
        "  78  bad connection",
    ] {
        assert!(help.contains(line), "{line:?} in:\n{help}");
    }
}
