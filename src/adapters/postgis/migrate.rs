//! Creating and upgrading a PostGIS results schema.
//!
//! A new schema gets every table from its definition in [`crate::results`]
//! (version [`RESULTS_VERSION`]). A schema made by an earlier geofold is
//! upgraded in place, keeping its runs: version 1 (wide per-unit tables, one
//! id type and one block SRID per schema) becomes version 2 by `sql/002_*.sql`;
//! version 3 only adds tables (the inspection and diagnostics tables), and so
//! does any later version: every table not yet there is made.
//! The derived views are rebuilt whenever their definitions change
//! (fingerprint in `store_settings`).
//!
//! # Concurrency and privileges
//! Everything happens in one transaction holding a transaction-level advisory
//! lock keyed on the schema, so two first runs that start together do not
//! both create the schema: the second waits, then finds it made. Only what is
//! missing is created, so a role that owns an existing results schema needs
//! no privilege on the database; a missing privilege is reported with the
//! grant that gives it.

use tokio_postgres::Transaction;

use super::{database_error, quote_ident, quote_literal, Session};
use crate::error::Error;
use crate::results::ddl::{create_table, Dialect};
use crate::results::views;
use crate::results::TABLES;

pub use crate::results::RESULTS_VERSION;

/// Version 1 → 2: data moved into the new tables, old tables dropped.
const FROM_V1: &str = include_str!("../../../sql/002_from_v1.sql");

/// A 64-bit FNV-1a hash of `text` (Fowler, Noll & Vo; the offset basis and
/// prime of the published 64-bit variant), used for advisory lock keys: a
/// stable, documented function rather than PostgreSQL's internal `hashtext`.
pub fn lock_key(text: &str) -> i64 {
    let mut hash: u64 = 0xcbf2_9ce4_8422_2325;
    for byte in text.as_bytes() {
        hash ^= u64::from(*byte);
        hash = hash.wrapping_mul(0x0000_0100_0000_01b3);
    }
    hash as i64
}

/// Creates or upgrades the schema `schema` (unquoted).
///
/// # Errors
/// Permission errors naming the grant; a schema made by a newer geofold.
pub fn prepare_schema(session: &mut Session, schema: &str) -> Result<(), Error> {
    let quoted = quote_ident(schema);
    let action = format!("preparing results schema {schema}");
    let tool = env!("CARGO_PKG_VERSION");
    let runtime = &session.runtime;
    let client = &mut session.client;
    runtime.block_on(async {
        let tx = client
            .transaction()
            .await
            .map_err(|e| database_error(&action, &e))?;
        tx.execute(
            "SELECT pg_advisory_xact_lock($1)",
            &[&lock_key(&format!("geofold schema {schema}"))],
        )
        .await
        .map_err(|e| database_error(&action, &e))?;
        let exists = tx
            .query_opt("SELECT 1 FROM pg_namespace WHERE nspname = $1", &[&schema])
            .await
            .map_err(|e| database_error(&action, &e))?
            .is_some();
        if !exists {
            tx.batch_execute(&format!("CREATE SCHEMA {quoted}"))
                .await
                .map_err(|e| database_error(&format!("creating results schema {schema}"), &e))?;
        }
        if !has_table(&tx, schema, "schema_version").await? {
            if has_table(&tx, schema, "runs").await? {
                return Err(Error::Store {
                    store: schema.to_string(),
                    problem: "it has a table runs but no schema_version: it was not made by geofold; \
                              use another --results-schema"
                        .into(),
                });
            }
            tx.batch_execute(&format!(
                "CREATE TABLE {quoted}.schema_version (
                     version integer PRIMARY KEY,
                     applied_at timestamptz NOT NULL DEFAULT now(),
                     tool_version text NOT NULL);
                 CREATE TABLE {quoted}.store_settings (key text PRIMARY KEY, value text NOT NULL);
                 COMMENT ON TABLE {quoted}.schema_version IS 'geofold: versions of the results tables applied to this schema';
                 COMMENT ON TABLE {quoted}.store_settings IS 'geofold: settings of this results schema (fingerprint of its views)';"
            ))
            .await
            .map_err(|e| database_error(&action, &e))?;
        }
        let current: i32 = tx
            .query_one(
                &format!("SELECT coalesce(max(version), 0) FROM {quoted}.schema_version"),
                &[],
            )
            .await
            .and_then(|row| row.try_get(0))
            .map_err(|e| database_error(&action, &e))?;
        if current > RESULTS_VERSION {
            return Err(Error::Store {
                store: schema.to_string(),
                problem: format!(
                    "its results tables are version {current}, newer than this geofold knows ({RESULTS_VERSION}); upgrade geofold"
                ),
            });
        }
        // Versions after 2 only add tables, so every table not there yet is
        // made, on every run: a store made by an earlier build of this
        // version gains the tables it lacks, and the creation needs no
        // privilege beyond owning the schema.
        let present: Vec<String> = tx
            .query(
                "SELECT c.relname::text FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
                 WHERE n.nspname = $1",
                &[&schema],
            )
            .await
            .map_err(|e| database_error(&action, &e))?
            .iter()
            .map(|row| row.get(0))
            .collect();
        for table in TABLES {
            if present.iter().any(|name| name == table.name) {
                continue;
            }
            tx.batch_execute(&create_table(table, Dialect::Postgis, &quoted))
                .await
                .map_err(|e| database_error(&format!("{action}: creating {}", table.name), &e))?;
        }
        if current < RESULTS_VERSION {
            if current == 1 {
                upgrade_from_v1(&tx, schema).await?;
            }
            tx.execute(
                &format!("INSERT INTO {quoted}.schema_version (version, tool_version) VALUES ($1, $2)"),
                &[&RESULTS_VERSION, &tool],
            )
            .await
            .map_err(|e| database_error(&action, &e))?;
        }
        rebuild_views(&tx, schema).await?;
        tx.commit().await.map_err(|e| database_error(&action, &e))
    })
}

/// True when `schema` has a table or view `name`.
async fn has_table(tx: &Transaction<'_>, schema: &str, name: &str) -> Result<bool, Error> {
    tx.query_opt(
        "SELECT 1 FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
         WHERE n.nspname = $1 AND c.relname = $2",
        &[&schema, &name],
    )
    .await
    .map(|row| row.is_some())
    .map_err(|e| database_error(&format!("reading results schema {schema}"), &e))
}

/// Version 1 → 2 (see `sql/002_from_v1.sql`): every job's old views go
/// first (they depend on the old tables); their new ones come with the job's
/// next run.
async fn upgrade_from_v1(tx: &Transaction<'_>, schema: &str) -> Result<(), Error> {
    let quoted = quote_ident(schema);
    let action = format!("upgrading results schema {schema} from version 1");
    let jobs: Vec<String> = tx
        .query(&format!("SELECT DISTINCT job FROM {quoted}.runs"), &[])
        .await
        .map_err(|e| database_error(&action, &e))?
        .iter()
        .filter_map(|row| row.try_get(0).ok())
        .collect();
    for job in jobs {
        for view in [job.clone(), format!("{job}_blocks")] {
            tx.batch_execute(&format!(
                "DROP VIEW IF EXISTS {quoted}.{}",
                quote_ident(&view)
            ))
            .await
            .map_err(|e| database_error(&action, &e))?;
        }
    }
    tx.batch_execute(&FROM_V1.replace("{schema}", &quoted))
        .await
        .map_err(|e| database_error(&action, &e))
}

/// Creates the derived views afresh when their definitions differ from the
/// ones recorded in `store_settings`.
async fn rebuild_views(tx: &Transaction<'_>, schema: &str) -> Result<(), Error> {
    let quoted = quote_ident(schema);
    let action = format!("creating the views of results schema {schema}");
    let fingerprint = views::fingerprint();
    let recorded: Option<String> = tx
        .query_opt(
            &format!("SELECT value FROM {quoted}.store_settings WHERE key = 'views'"),
            &[],
        )
        .await
        .map_err(|e| database_error(&action, &e))?
        .and_then(|row| row.try_get(0).ok());
    if recorded.as_deref() == Some(fingerprint.as_str()) {
        return Ok(());
    }
    let prefix = format!("{quoted}.");
    for (name, _, _) in views::definitions(&prefix).iter().rev() {
        tx.batch_execute(&format!(
            "DROP VIEW IF EXISTS {prefix}{}",
            quote_ident(name)
        ))
        .await
        .map_err(|e| database_error(&action, &e))?;
    }
    for (name, about, select) in views::definitions(&prefix) {
        let view = format!("{prefix}{}", quote_ident(name));
        tx.batch_execute(&format!(
            "CREATE VIEW {view} AS {select}; COMMENT ON VIEW {view} IS {};",
            quote_literal(about)
        ))
        .await
        .map_err(|e| database_error(&action, &e))?;
    }
    tx.execute(
        &format!(
            "INSERT INTO {quoted}.store_settings (key, value) VALUES ('views', $1) \
             ON CONFLICT (key) DO UPDATE SET value = excluded.value"
        ),
        &[&fingerprint],
    )
    .await
    .map_err(|e| database_error(&action, &e))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lock_keys_follow_fnv_1a() {
        // FNV-1a 64 of "" is the offset basis and of "a" is 0xaf63dc4c8601ec8c
        // (published test vectors of the FNV reference implementation).
        assert_eq!(lock_key("") as u64, 0xcbf2_9ce4_8422_2325);
        assert_eq!(lock_key("a") as u64, 0xaf63_dc4c_8601_ec8c);
        assert_ne!(lock_key("geofold job a b"), lock_key("geofold job b a"));
    }
}
