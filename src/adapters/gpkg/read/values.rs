//! Reading one row of a source layer: ids, geometry blobs, numbers and text, each checked, with the
//! row named in every problem.

use super::*;

/// Turns the values of one row into what the collector takes.
pub(super) struct RowReader<'a> {
    pub(super) info: &'a SourceInfo,
}

impl<'a> RowReader<'a> {
    pub(super) fn new(info: &'a SourceInfo) -> RowReader<'a> {
        RowReader { info }
    }

    pub(super) fn id(&self, value: ValueRef<'_>) -> Result<UnitId, String> {
        match (self.info.id_kind, value) {
            (_, ValueRef::Null) => Err("NULL id".to_string()),
            (IdKind::Integer, ValueRef::Integer(value)) => Ok(UnitId::Int(value)),
            (IdKind::Text, ValueRef::Text(bytes)) => {
                Ok(UnitId::Text(String::from_utf8_lossy(bytes).into_owned()))
            }
            (IdKind::Text, ValueRef::Integer(value)) => Ok(UnitId::Text(value.to_string())),
            (kind, other) => Err(format!(
                "id value {} does not fit the column's type ({})",
                describe(other),
                match kind {
                    IdKind::Integer => "INTEGER",
                    IdKind::Text => "TEXT",
                }
            )),
        }
    }

    /// The blob of a geometry value after its checks; None for NULL.
    pub(super) fn checked_blob<'v>(
        &self,
        value: ValueRef<'v>,
    ) -> Result<Option<(&'v [u8], blob::Header)>, String> {
        let bytes = match value {
            ValueRef::Null => return Ok(None),
            ValueRef::Blob(bytes) => bytes,
            other => {
                return Err(format!(
                    "geometry is {}, not a GeoPackageBinary BLOB",
                    describe(other)
                ))
            }
        };
        let header = blob::check(bytes).map_err(|error| error.to_string())?;
        if i64::from(header.srs_id) != i64::from(self.info.source_srid) {
            return Err(format!(
                "geometry carries SRS id {} but the layer's SRS id is {} (GeoPackage Requirement 33)",
                header.srs_id, self.info.source_srid
            ));
        }
        Ok(Some((bytes, header)))
    }

    /// The decoded geometry of a row; the empty flag gives an empty geometry.
    pub(super) fn geometry(&self, value: ValueRef<'_>) -> Result<RawGeometry, String> {
        let Some((bytes, header)) = self.checked_blob(value)? else {
            return Ok(RawGeometry::Null);
        };
        if header.empty {
            return Ok(RawGeometry::Decoded(Geometry::GeometryCollection(
                GeometryCollection::new_from(Vec::new()),
            )));
        }
        geozero::wkb::Wkb(&bytes[header.wkb_offset..])
            .to_geo()
            .map(RawGeometry::Decoded)
            .map_err(|error| format!("geometry cannot be decoded: {error}"))
    }

    /// Every problem of a row, each with its location. A good row allocates nothing.
    pub(super) fn check(&self, row: &Row<'_>) -> Result<Vec<(Location, String)>, Error> {
        let info = self.info;
        let get = |index: usize| {
            row.get_ref(index).map_err(|e| {
                Error::Internal(format!("reading column {index} of {}: {e}", info.table))
            })
        };
        let numbers = std::iter::once(&info.target_column).chain(info.feature_columns.iter());
        let id = self.id(get(0)?);
        let geometry = self.checked_blob(get(1)?).err();
        let mut bad_numbers = Vec::new();
        for (index, name) in numbers.enumerate() {
            let value = get(2 + index)?;
            let problem = if index > 0 && info.text_features[index - 1] {
                match value {
                    ValueRef::Blob(_) => Some(format!("{} in a text column", describe(value))),
                    _ => None,
                }
            } else {
                number(value).err()
            };
            if let Some(problem) = problem {
                bad_numbers.push((name, problem));
            }
        }
        if id.is_ok() && geometry.is_none() && bad_numbers.is_empty() {
            return Ok(Vec::new());
        }
        let mut problems = Vec::new();
        let mut at = |column: &str, row_id: Option<String>, problem: String| {
            problems.push((
                Location {
                    table: info.table.clone(),
                    column: Some(column.to_string()),
                    row_id,
                },
                problem,
            ));
        };
        let row_id = match id {
            Ok(id) => Some(id.to_string()),
            Err(problem) => {
                let rowid = match get(3 + info.feature_columns.len())? {
                    ValueRef::Integer(rowid) => format!(" (SQLite rowid {rowid})"),
                    _ => String::new(),
                };
                at(&info.id_column, None, format!("{problem}{rowid}"));
                None
            }
        };
        if let Some(problem) = geometry {
            at(&info.geom_column, row_id.clone(), problem);
        }
        for (name, problem) in bad_numbers {
            at(name, row_id.clone(), problem);
        }
        Ok(problems)
    }
}

/// Whether a declared type holds text (a categorical feature).
pub(super) fn is_text(declared: &str) -> bool {
    matches!(base_type(declared).as_str(), "TEXT" | "VARCHAR" | "CHAR")
}

/// A text value (numbers as SQLite prints them); NULL is missing.
pub(super) fn text(value: ValueRef<'_>) -> Option<String> {
    match value {
        ValueRef::Text(bytes) => Some(String::from_utf8_lossy(bytes).into_owned()),
        ValueRef::Integer(value) => Some(value.to_string()),
        ValueRef::Real(value) => Some(value.to_string()),
        ValueRef::Null | ValueRef::Blob(_) => None,
    }
}

/// A numeric value; NULL is missing (the collector skips the row).
pub(super) fn number(value: ValueRef<'_>) -> Result<Option<f64>, String> {
    match value {
        ValueRef::Null => Ok(None),
        ValueRef::Integer(value) => Ok(Some(value as f64)),
        ValueRef::Real(value) => Ok(Some(value)),
        other => Err(format!(
            "{} in a numeric column; SQLite stores what it is given, so the value must be fixed or set to NULL",
            describe(other)
        )),
    }
}

pub(super) fn describe(value: ValueRef<'_>) -> String {
    match value {
        ValueRef::Null => "NULL".to_string(),
        ValueRef::Integer(value) => format!("integer {value}"),
        ValueRef::Real(value) => format!("real {value}"),
        ValueRef::Text(bytes) => {
            let text = String::from_utf8_lossy(bytes);
            let shown: String = text.chars().take(40).collect();
            format!("TEXT {shown:?}")
        }
        ValueRef::Blob(bytes) => format!("a BLOB of {} bytes", bytes.len()),
    }
}
