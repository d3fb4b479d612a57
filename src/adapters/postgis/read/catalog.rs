//! What the PostgreSQL catalogs say about a source table: its primary key, declared geometry types
//! and SRIDs, and the SRS of an SRID.

use super::*;

pub(super) fn primary_key(session: &Session, oid: u32) -> Result<Option<String>, Error> {
    let rows = session
        .runtime
        .block_on(session.client.query(
            "SELECT a.attname::text FROM pg_index i JOIN pg_attribute a \
             ON a.attrelid = i.indrelid AND a.attnum = ANY(i.indkey) WHERE i.indrelid = $1 AND i.indisprimary",
            &[&oid],
        ))
        .map_err(|e| database_error("looking up the primary key", &e))?;
    Ok(match rows.as_slice() {
        [only] => Some(
            only.try_get(0)
                .map_err(|e| database_error("looking up the primary key", &e))?,
        ),
        _ => None,
    })
}

/// `geometry(MultiPolygon,3035)` → `MULTIPOLYGON`; `geometry` → `GEOMETRY`.
pub(super) fn declared_type(formatted: &str) -> String {
    match formatted.find('(') {
        Some(start) => formatted[start + 1..]
            .split([',', ')'])
            .next()
            .unwrap_or("geometry")
            .trim()
            .to_ascii_uppercase(),
        None => "GEOMETRY".to_string(),
    }
}

/// The SRID of a `geography(Type,SRID)` type modifier.
pub(crate) fn declared_srid(formatted: &str) -> Option<i32> {
    let inside = formatted.split_once('(')?.1.trim_end_matches(')');
    inside.split(',').nth(1)?.trim().parse().ok()
}

/// The SRID of the column: its type modifier if it has one; else the SRIDs
/// its rows actually hold, which must be one, unless `--distance-srid`
/// transforms every row from its own SRID (rows with SRID 0 cannot be).
pub(crate) fn column_srid(
    session: &Session,
    schema: &str,
    table: &str,
    column: &str,
    display: &str,
    distance_srid: Option<i32>,
) -> Result<i32, Error> {
    let rt = &session.runtime;
    let registered = rt
        .block_on(session.client.query_opt(
            "SELECT srid FROM geometry_columns WHERE f_table_schema = $1 AND f_table_name = $2 AND f_geometry_column = $3",
            &[&schema, &table, &column],
        ))
        .map_err(|e| database_error("reading geometry_columns", &e))?
        .and_then(|row| row.try_get::<_, i32>(0).ok())
        .unwrap_or(0);
    if registered != 0 {
        return Ok(registered);
    }
    let sql = format!(
        "SELECT ST_SRID({c}), count(*) FROM {s}.{t} WHERE {c} IS NOT NULL GROUP BY 1 ORDER BY 2 DESC, 1",
        c = quote_ident(column),
        s = quote_ident(schema),
        t = quote_ident(table)
    );
    let counts: Vec<(i32, i64)> = rt
        .block_on(session.client.query(sql.as_str(), &[]))
        .map_err(|e| database_error(&format!("reading the SRIDs of {display}.{column}"), &e))?
        .iter()
        .filter_map(|row| Some((row.try_get(0).ok()?, row.try_get(1).ok()?)))
        .collect();
    let listing = || {
        counts
            .iter()
            .map(|(srid, n)| format!("SRID {srid}: {n} rows"))
            .collect::<Vec<_>>()
            .join(", ")
    };
    match (counts.as_slice(), distance_srid) {
        ([], _) => Ok(0),
        ([(only, _)], _) => Ok(*only),
        (_, Some(_)) if counts.iter().any(|(srid, _)| *srid == 0) => Err(Error::input(
            display,
            Some(column),
            None,
            format!(
                "the column mixes SRIDs ({}); rows with SRID 0 have no CRS and cannot be transformed: \
                 give them their CRS with ST_SetSRID",
                listing()
            ),
        )),
        (_, Some(_)) => Ok(counts[0].0),
        (_, None) => Err(Error::input(
            display,
            Some(column),
            None,
            format!(
                "the column mixes SRIDs ({}); distances need one CRS: pass --distance-srid N to transform every \
                 row from its own SRID to one projected CRS, or fix the rows with ST_Transform",
                listing()
            ),
        )),
    }
}

/// What `spatial_ref_sys` says of an SRID. SRID 0 is an undefined CRS.
///
/// # Errors
/// [`Error::Usage`] for an SRID missing from `spatial_ref_sys`.
pub fn srs_facts(session: &Session, srid: i32) -> Result<SrsFacts, Error> {
    if srid == 0 {
        return Ok(SrsFacts {
            crs: CrsKind::Undefined,
            name: None,
            wkt: None,
            length_unit: None,
        });
    }
    let row = session
        .runtime
        .block_on(session.client.query_opt(
            "SELECT coalesce(srtext, ''), coalesce(proj4text, ''), auth_name || ':' || auth_srid FROM spatial_ref_sys WHERE srid = $1",
            &[&srid],
        ))
        .map_err(|e| database_error("reading spatial_ref_sys", &e))?;
    let Some(row) = row else {
        return Err(Error::Usage(format!(
            "SRID {srid} is not in spatial_ref_sys"
        )));
    };
    let srtext: String = row
        .try_get(0)
        .map_err(|e| database_error("reading spatial_ref_sys", &e))?;
    let proj4: String = row
        .try_get(1)
        .map_err(|e| database_error("reading spatial_ref_sys", &e))?;
    let name: Option<String> = row
        .try_get(2)
        .map_err(|e| database_error("reading spatial_ref_sys", &e))?;
    let upper = srtext.to_ascii_uppercase();
    let geographic = upper.starts_with("GEOGCS[")
        || upper.starts_with("GEOGCRS[")
        || proj4.contains("+proj=longlat");
    Ok(SrsFacts {
        crs: if geographic {
            CrsKind::Geographic
        } else {
            CrsKind::Projected
        },
        name,
        length_unit: crate::adapters::wkb::wkt_length_unit(&srtext),
        wkt: (!srtext.is_empty()).then_some(srtext),
    })
}
