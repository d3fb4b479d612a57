//! Finding the layer, its SRS and its columns in a GeoPackage source.

use super::*;

/// What kind of CRS an SRS is (see the module doc).
pub(super) fn crs_kind(srs: &Srs) -> CrsKind {
    let upper = srs.definition.trim_start().to_ascii_uppercase();
    if srs.srs_id == 0
        || srs.srs_id == -1
        || (upper == "UNDEFINED" && srs.organization.eq_ignore_ascii_case("NONE"))
    {
        CrsKind::Undefined
    } else if upper.starts_with("GEOGCS[")
        || upper.starts_with("GEOGCRS[")
        || (srs.organization.eq_ignore_ascii_case("EPSG")
            && GEOGRAPHIC_EPSG.contains(&srs.organization_id))
    {
        CrsKind::Geographic
    } else {
        CrsKind::Projected
    }
}

/// The layer to read: the one named, or the file's only feature layer.
pub(crate) fn choose_layer(
    conn: &Connection,
    path: &Path,
    layer: Option<&str>,
) -> Result<String, Error> {
    let error = |e: rusqlite::Error| sqlite_error(path, "reading gpkg_contents", &e);
    let mut statement = conn
        .prepare("SELECT table_name, data_type FROM gpkg_contents ORDER BY table_name")
        .map_err(error)?;
    let contents: Vec<(String, String)> = statement
        .query_map([], |row| Ok((row.get(0)?, row.get(1)?)))
        .map_err(error)?
        .collect::<Result<_, _>>()
        .map_err(error)?;
    let features: Vec<&str> = contents
        .iter()
        .filter(|(_, kind)| kind == "features")
        .map(|(name, _)| name.as_str())
        .collect();
    let list = if features.is_empty() {
        "it has no feature layers".to_string()
    } else {
        format!("its feature layers are {}", features.join(", "))
    };
    match layer {
        Some(name) => match contents
            .iter()
            .find(|(table, _)| table.eq_ignore_ascii_case(name))
        {
            Some((table, kind)) if kind == "features" => Ok(table.clone()),
            Some((_, kind)) => Err(file_error(
                path,
                format!("layer {name} is a {kind} table, not a feature layer; {list}"),
                FileProblem::Missing,
            )),
            None => {
                let unregistered =
                    crate::adapters::gpkg::schema::has_table(conn, "main", name).map_err(error)?;
                let problem = if unregistered {
                    format!("table {name} is not registered in gpkg_contents, so it is not a layer; {list}")
                } else {
                    let names: Vec<String> = features.iter().map(|f| f.to_string()).collect();
                    format!("no layer {name}{}; {list}", suggest(name, &names))
                };
                Err(file_error(path, problem, FileProblem::Missing))
            }
        },
        None => match features.as_slice() {
            [only] => Ok(only.to_string()),
            [] => Err(file_error(path, list, FileProblem::Missing)),
            _ => Err(Error::Usage(format!(
                "{} has several feature layers ({}); name one with --layer",
                path.display(),
                features.join(", ")
            ))),
        },
    }
}

/// The `gpkg_spatial_ref_sys` row of `srs_id`, if there is one.
///
/// # Errors
/// SQLite errors.
pub(crate) fn srs_row(conn: &Connection, path: &Path, srs_id: i64) -> Result<Option<Srs>, Error> {
    conn.query_row(
        "SELECT srs_id, srs_name, organization, organization_coordsys_id, definition
         FROM gpkg_spatial_ref_sys WHERE srs_id = ?1",
        [srs_id],
        |row| {
            Ok(Srs {
                srs_id: row.get(0)?,
                name: row.get(1)?,
                organization: row.get(2)?,
                organization_id: row.get(3)?,
                definition: row.get(4)?,
            })
        },
    )
    .optional()
    .map_err(|e| sqlite_error(path, "reading gpkg_spatial_ref_sys", &e))
}

pub(super) fn table_columns(
    conn: &Connection,
    path: &Path,
    layer: &str,
) -> Result<Vec<TableColumn>, Error> {
    let error =
        |e: rusqlite::Error| sqlite_error(path, &format!("reading the columns of {layer}"), &e);
    let mut statement = conn
        .prepare("SELECT name, type, pk FROM pragma_table_info(?1)")
        .map_err(error)?;
    let columns = statement
        .query_map([layer], |row| {
            Ok(TableColumn {
                name: row.get(0)?,
                declared: row.get(1)?,
                primary_key: row.get::<_, i64>(2)? > 0,
            })
        })
        .map_err(error)?
        .collect::<Result<Vec<_>, _>>()
        .map_err(error)?;
    Ok(columns)
}
