//! Group folds: purity on the generated lattice and on a real data set (the
//! 32 Mexican states of libpysal 4.14.1's example `mexico`, grouped by INEGI
//! region), with regions checked against PostGIS's `ST_Union`.

use std::collections::{BTreeMap, BTreeSet};

use crate::common::{code, json, python_script};
use crate::support::*;

#[test]
fn groups_stay_whole_on_generated_data() {
    let case = Case::new("groups");
    create_units(&case);
    case.copy_to_gpkg("units");
    let zone_of: BTreeMap<String, String> = case
        .query("SELECT id, zone FROM {s}.units")
        .lines()
        .map(|l| {
            let f: Vec<&str> = l.split('|').collect();
            (f[0].to_string(), f[1].to_string())
        })
        .collect();
    for store in STORES {
        let run = run_id(&case.ok(
            store,
            "--scheme group --group-column zone --folds 3 --repeats 3",
        ));
        let mut folds_of: BTreeMap<(String, String), BTreeSet<String>> = BTreeMap::new();
        for row in case.members(store, &run) {
            let f: Vec<&str> = row.split('|').collect();
            folds_of
                .entry((f[0].to_string(), zone_of[f[2]].clone()))
                .or_default()
                .insert(f[1].to_string());
        }
        assert_eq!(folds_of.len(), 9, "3 repetitions × 3 zones");
        assert!(
            folds_of.values().all(|folds| folds.len() == 1),
            "{store:?}: a zone split over folds"
        );
    }
}

#[test]
fn mexican_regions_stay_whole_and_their_regions_are_the_unions_of_their_states() {
    // The 32 states (libpysal 4.14.1 example `mexico`: Rey & Sastre Gutierrez
    // 2010, BSD-3), grouped by INEGI region (integer codes 1 to 5); target per
    // capita GDP 2000, features 1940 and 1960. Longitude/latitude polygons:
    // the group scheme needs no distances.
    let case = Case::new("mexico");
    let rows = python_script("python/schemes_reference.py", &["mexico"], "");
    let mut sql = String::from(
        "CREATE TABLE {s}.mexico (id integer PRIMARY KEY, inegi integer, g1940 float8, g1960 float8, g2000 float8,
             geom geometry(MultiPolygon, 4326));\n",
    );
    for line in rows.lines() {
        let f: Vec<&str> = line.splitn(6, '|').collect();
        sql.push_str(&format!(
            "INSERT INTO {{s}}.mexico VALUES ({}, {}, {}, {}, {}, ST_Multi(ST_GeomFromText('{}', 4326)));\n",
            f[0], f[1], f[2], f[3], f[4], f[5]
        ));
    }
    case.script(&sql);
    assert_eq!(
        case.query("SELECT count(*), count(DISTINCT inegi) FROM {s}.mexico"),
        "32|5"
    );
    case.copy_to_gpkg("mexico");
    let source: Vec<String> = case
        .query("SELECT id, g2000, g1940, g1960 FROM {s}.mexico ORDER BY id")
        .lines()
        .map(str::to_string)
        .collect();
    let mut membership = Vec::new();
    for store in STORES {
        let output = case.run(
            store,
            "mexico",
            "g2000",
            "g1940,g1960",
            "--scheme group --group-column inegi --folds 5",
        );
        assert_eq!(code(&output), 0);
        let run = run_id(&json(&output));
        each_unit_once(&case, store, &run, 32, 1);
        matches_numpy_refit(&case, store, &run, &source);
        // Five folds for five regions: one region per fold.
        let regions = case.results(
            store,
            &format!("SELECT fold, label, kind FROM {{r}}.fold_regions WHERE run_id = '{run}' ORDER BY fold"),
        );
        let folds: BTreeSet<&str> = regions
            .iter()
            .map(|r| r.split('|').next().unwrap())
            .collect();
        assert_eq!((regions.len(), folds.len()), (5, 5), "{regions:?}");
        membership.push(case.members(store, &run));
        if store == Store::Postgis {
            // Each region is the union of its states: same unit count, and its
            // area is PostGIS's ST_Area(ST_Union(geom)) of them, to 1e-9 relative.
            let compared = case.query(&format!(
                "SELECT count(*) FROM {{r}}.fold_regions g
                 JOIN (SELECT inegi::text AS label, ST_Area(ST_Union(geom)) AS area, count(*) AS n
                       FROM {{s}}.mexico GROUP BY inegi) m ON m.label = g.label
                 WHERE g.run_id = '{run}' AND g.kind = 'group' AND g.units = m.n
                 AND abs(ST_Area(g.geom) - m.area) <= 1e-9 * m.area"
            ));
            assert_eq!(
                compared, "5",
                "group regions are the unions of their states"
            );
        }
    }
    assert_eq!(
        membership[0], membership[1],
        "the same folds from both stores"
    );
}
