//! The DDL of the results tables, derived from their definitions, in the
//! dialect of each store.
//!
//! PostGIS: native types (`uuid`, `timestamptz`, `jsonb`, `text[]`,
//! `geometry(MultiPolygon)` with the SRID per row), primary keys, foreign keys
//! to `runs` with `ON DELETE CASCADE`, a BRIN index on `run_id` for per-unit
//! tables, comments on tables and columns (QGIS shows them).
//!
//! GeoPackage: the column types of OGC GeoPackage 1.3 Table 1 (`TEXT`,
//! `INTEGER`, `DOUBLE`, `DATETIME`, `BOOLEAN`, `MULTIPOLYGON`), an
//! `INTEGER PRIMARY KEY` on every table (clause 2.4, Requirement 119: `fid`,
//! or the table's serial key), the PostGIS primary key kept as a `UNIQUE`
//! constraint. Registration in `gpkg_contents` and the R-tree of geometry
//! tables are the GeoPackage store's business.

use super::{ColumnType, Keying, TableDef};
use crate::adapters::sql::{quote_ident, quote_literal};

/// Which store's SQL.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dialect {
    /// PostgreSQL with PostGIS.
    Postgis,
    /// SQLite in a GeoPackage.
    Gpkg,
}

/// The SQL type of a column type.
pub fn sql_type(ty: ColumnType, dialect: Dialect) -> &'static str {
    use ColumnType::*;
    match dialect {
        Dialect::Postgis => match ty {
            RunId => "uuid",
            Text => "text",
            Int => "integer",
            BigInt => "bigint",
            Float => "double precision",
            Timestamp => "timestamptz",
            Json => "jsonb",
            TextList => "text[]",
            Bool => "boolean",
            Geometry => "geometry(MultiPolygon)",
        },
        Dialect::Gpkg => match ty {
            RunId | Text | Json | TextList => "TEXT",
            Int | BigInt => "INTEGER",
            Float => "DOUBLE",
            Timestamp => "DATETIME",
            Bool => "BOOLEAN",
            Geometry => "MULTIPOLYGON",
        },
    }
}

/// `prefix.name` with the name quoted; `prefix` is already quoted (or empty).
fn qualified(prefix: &str, name: &str) -> String {
    if prefix.is_empty() {
        quote_ident(name)
    } else {
        format!("{prefix}.{}", quote_ident(name))
    }
}

/// The column definitions of a table, without its integer key for a
/// GeoPackage (which [`create_table`] adds first).
pub fn column_definitions(table: &TableDef, dialect: Dialect, prefix: &str) -> Vec<String> {
    let runs = qualified(prefix, "runs");
    table
        .columns
        .iter()
        .map(|column| {
            let mut text = format!(
                "{} {}",
                quote_ident(column.name),
                sql_type(column.ty, dialect)
            );
            if !column.nullable {
                text.push_str(" NOT NULL");
            }
            if column.name == "run_id" && table.belongs_to_run {
                text.push_str(&format!(" REFERENCES {runs} (run_id) ON DELETE CASCADE"));
            }
            if column.name == "primary_run_id" {
                text.push_str(&format!(" REFERENCES {runs} (run_id)"));
            }
            text
        })
        .collect()
}

/// `CREATE TABLE` (and, for PostGIS, its indexes and comments) for `table`
/// under `prefix` (a quoted schema name, or empty for a GeoPackage's main).
/// A GeoPackage geometry table is created by the store as a feature table;
/// this gives its column definitions only through [`column_definitions`].
pub fn create_table(table: &TableDef, dialect: Dialect, prefix: &str) -> String {
    let name = qualified(prefix, table.name);
    let mut columns = Vec::new();
    match (dialect, table.keying) {
        (Dialect::Postgis, Keying::Serial(key)) => columns.push(format!(
            "{} integer GENERATED ALWAYS AS IDENTITY PRIMARY KEY",
            quote_ident(key)
        )),
        (Dialect::Gpkg, Keying::Serial(key)) => columns.push(format!(
            "{} INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL",
            quote_ident(key)
        )),
        (Dialect::Gpkg, _) => columns.push("fid INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL".into()),
        (Dialect::Postgis, _) => {}
    }
    columns.extend(column_definitions(table, dialect, prefix));
    if let Keying::Primary(key) = table.keying {
        let key: Vec<String> = key.iter().map(|c| quote_ident(c)).collect();
        columns.push(match dialect {
            Dialect::Postgis => format!("PRIMARY KEY ({})", key.join(", ")),
            Dialect::Gpkg => format!("UNIQUE ({})", key.join(", ")),
        });
    }
    let mut sql = format!(
        "CREATE TABLE {name} (\n    {}\n);\n",
        columns.join(",\n    ")
    );
    if dialect == Dialect::Postgis {
        if table.keying == Keying::PerUnit {
            sql.push_str(&format!(
                "CREATE INDEX {} ON {name} USING brin (run_id) WITH (pages_per_range = 32);\n",
                quote_ident(&format!("{}_run_brin", table.name))
            ));
        }
        if table.has_geometry() {
            sql.push_str(&format!(
                "CREATE INDEX {} ON {name} USING gist (geom);\nCREATE INDEX {} ON {name} (run_id, repetition);\n",
                quote_ident(&format!("{}_geom_idx", table.name)),
                quote_ident(&format!("{}_run_idx", table.name)),
            ));
        }
        sql.push_str(&format!(
            "COMMENT ON TABLE {name} IS {};\n",
            quote_literal(table.about)
        ));
        for column in table.columns {
            sql.push_str(&format!(
                "COMMENT ON COLUMN {name}.{} IS {};\n",
                quote_ident(column.name),
                quote_literal(column.about)
            ));
        }
    }
    if table.name == "runs" {
        sql.push_str(&format!(
            "CREATE INDEX {} ON {name} (job, status, finished_at);\n",
            quote_ident("runs_job_idx")
        ));
    }
    sql
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::results::{FOLD_REGIONS, HELD_OUT, RUNS};

    #[test]
    fn postgis_ddl_keys_indexes_and_comments_per_unit_tables() {
        let sql = create_table(&HELD_OUT, Dialect::Postgis, "\"geofold\"");
        assert!(sql.contains("\"unit_id\" text NOT NULL"), "{sql}");
        assert!(sql.contains("USING brin (run_id)"), "{sql}");
        assert!(!sql.contains("PRIMARY KEY"), "{sql}");
        assert!(sql.contains("COMMENT ON COLUMN \"geofold\".\"held_out\".\"predicted\""));
        let sql = create_table(&FOLD_REGIONS, Dialect::Postgis, "\"geofold\"");
        assert!(
            sql.contains("GENERATED ALWAYS AS IDENTITY PRIMARY KEY"),
            "{sql}"
        );
        assert!(sql.contains("geometry(MultiPolygon)"), "{sql}");
        assert!(sql.contains("REFERENCES \"geofold\".\"runs\" (run_id) ON DELETE CASCADE"));
    }

    #[test]
    fn geopackage_ddl_uses_the_geopackage_types_and_an_integer_key() {
        let sql = create_table(&RUNS, Dialect::Gpkg, "");
        assert!(
            sql.starts_with(
                "CREATE TABLE \"runs\" (\n    fid INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL"
            ),
            "{sql}"
        );
        assert!(sql.contains("\"started_at\" DATETIME NOT NULL"), "{sql}");
        assert!(sql.contains("UNIQUE (\"run_id\")"), "{sql}");
        assert!(!sql.contains("COMMENT"), "{sql}");
    }
}
