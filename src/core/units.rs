//! Units: the places being validated (districts, catchments, tracts, sites).
//!
//! Adapters feed raw rows (id, geometry, target, features) into a [`UnitCollector`],
//! which applies the input-hygiene rules once for every source: rows with a NULL
//! or empty geometry, or a missing / non-finite target or feature, are skipped and
//! counted by reason; duplicate ids are an error. The result is a [`Dataset`] in
//! id order, so fold assignment does not depend on the row order of the source.
//!
//! # Text features
//! A feature column of text is categorical: it becomes one 0/1 indicator
//! column per level (the distinct values, in byte order), named
//! `column=level`, at the column's place among the features ([`Categorical`]).
//! Which levels a fold's model uses is decided per fold from its training
//! units (`models::design`). A NULL text is a missing feature (the row is
//! skipped); more than [`MAX_LEVELS`] levels is an error.

use std::cmp::Ordering;
use std::collections::HashMap;
use std::fmt;

use geo_types::Geometry;
use serde::Serialize;
use sha2::{Digest, Sha256};

use crate::core::geometry::representative_point;
use crate::error::{Error, Location};

mod categorical;

use categorical::one_hot;
pub use categorical::{Categorical, MAX_LEVELS};

mod skipped;
pub use skipped::Skipped;

/// A unit's id as it is in the source table: an integer or a text.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub enum UnitId {
    /// An `integer`/`bigint`/`smallint` id (or an INTEGER GeoPackage key).
    Int(i64),
    /// A `text`/`varchar` id.
    Text(String),
}

impl Ord for UnitId {
    fn cmp(&self, other: &Self) -> Ordering {
        match (self, other) {
            (UnitId::Int(a), UnitId::Int(b)) => a.cmp(b),
            (UnitId::Text(a), UnitId::Text(b)) => a.as_bytes().cmp(b.as_bytes()),
            (UnitId::Int(_), UnitId::Text(_)) => Ordering::Less,
            (UnitId::Text(_), UnitId::Int(_)) => Ordering::Greater,
        }
    }
}

impl PartialOrd for UnitId {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}

impl fmt::Display for UnitId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            UnitId::Int(value) => write!(f, "{value}"),
            UnitId::Text(value) => write!(f, "{value}"),
        }
    }
}

/// The kind of id a source has; results tables use the matching column type.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum IdKind {
    /// Integers of any width, stored as 64-bit.
    Integer,
    /// Text.
    Text,
}

/// A geometry as an adapter found it.
pub enum RawGeometry {
    /// The column is NULL.
    Null,
    /// Decoded.
    Decoded(Geometry<f64>),
}

/// The units of one run, in ascending id order, with their representative points.
#[derive(Debug, Clone)]
pub struct Dataset {
    /// Unit ids, ascending.
    pub ids: Vec<UnitId>,
    /// Representative point (x, y) of each unit, in the distance CRS.
    pub points: Vec<[f64; 2]>,
    /// Observed target of each unit.
    pub target: Vec<f64>,
    /// Feature values, row-major: unit `i`, feature `j` at `i * n_features + j`.
    pub features: Vec<f64>,
    /// Feature names, in column order.
    pub feature_names: Vec<String>,
    /// Kind of id.
    pub id_kind: IdKind,
    /// Geometry kinds seen among used units.
    pub geometry_kinds: GeometryKinds,
    /// Rows read from the source (used + skipped).
    pub rows_read: u64,
    /// Skipped rows by reason, with their ids.
    pub skipped: Skipped,
    /// Each unit's group, when a group column was read.
    pub groups: Option<Groups>,
    /// Each unit's exposure (e.g. a population at risk), when an exposure column was read.
    pub exposure: Option<Vec<f64>>,
    /// The text features, one-hot encoded into `features` (empty when none).
    pub categorical: Vec<Categorical>,
    /// Each unit's geometry (distance CRS), kept only when the fold scheme
    /// draws from it (see [`UnitCollector::with_geometries`]).
    pub geometries: Option<Vec<Geometry<f64>>>,
}

/// The group of each unit (e.g. a district code), as codes into sorted names.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Groups {
    /// The group column.
    pub column: String,
    /// The distinct group values, sorted (bytewise).
    pub names: Vec<String>,
    /// Each unit's index into `names`, in dataset order.
    pub codes: Vec<u32>,
}

/// The values of the extra columns of one row: a group, an exposure and the
/// text features, each `None` when NULL (or not read).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Extras {
    /// The group value, as text.
    pub group: Option<String>,
    /// The exposure.
    pub exposure: Option<f64>,
    /// The values of the text features, in feature order.
    pub texts: Vec<Option<String>>,
}

/// Which geometry families the used units have, so writers can type their columns.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct GeometryKinds {
    /// Any Point or MultiPoint.
    pub points: bool,
    /// Any Polygon or MultiPolygon.
    pub polygons: bool,
    /// Anything else (lines, collections).
    pub other: bool,
}

impl Dataset {
    /// Number of units.
    pub fn len(&self) -> usize {
        self.ids.len()
    }

    /// True when there are no units.
    pub fn is_empty(&self) -> bool {
        self.ids.is_empty()
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.feature_names.len()
    }

    /// The feature values of unit `i`.
    pub fn features_of(&self, i: usize) -> &[f64] {
        let m = self.n_features();
        &self.features[i * m..(i + 1) * m]
    }

    /// A SHA-256 fingerprint of the used units (ids, points, target and features,
    /// in id order) and the skip counts: equal inputs give equal fingerprints
    /// whatever the row order of the source.
    pub fn fingerprint(&self) -> String {
        let mut hasher = Sha256::new();
        for name in &self.feature_names {
            hasher.update(name.as_bytes());
            hasher.update([0u8]);
        }
        for i in 0..self.len() {
            match &self.ids[i] {
                UnitId::Int(value) => {
                    hasher.update([1u8]);
                    hasher.update(value.to_le_bytes());
                }
                UnitId::Text(value) => {
                    hasher.update([2u8]);
                    hasher.update((value.len() as u64).to_le_bytes());
                    hasher.update(value.as_bytes());
                }
            }
            hasher.update(self.points[i][0].to_bits().to_le_bytes());
            hasher.update(self.points[i][1].to_bits().to_le_bytes());
            hasher.update(self.target[i].to_bits().to_le_bytes());
            for value in self.features_of(i) {
                hasher.update(value.to_bits().to_le_bytes());
            }
        }
        hasher.update(self.skipped.total().to_le_bytes());
        let digest = hasher.finalize();
        digest.iter().map(|byte| format!("{byte:02x}")).collect()
    }

    /// Bounding box of the representative points: `[min_x, min_y, max_x, max_y]`.
    pub fn bounds(&self) -> Option<[f64; 4]> {
        let first = self.points.first()?;
        let mut bounds = [first[0], first[1], first[0], first[1]];
        for point in &self.points {
            bounds[0] = bounds[0].min(point[0]);
            bounds[1] = bounds[1].min(point[1]);
            bounds[2] = bounds[2].max(point[0]);
            bounds[3] = bounds[3].max(point[1]);
        }
        Some(bounds)
    }
}

/// Collects rows from an adapter and applies the input-hygiene rules.
pub struct UnitCollector {
    table: String,
    target_name: String,
    feature_names: Vec<String>,
    strict: bool,
    rows: Vec<(UnitId, [f64; 2], f64)>,
    features: Vec<f64>,
    skipped: Skipped,
    strict_problems: Vec<(Location, String)>,
    rows_read: u64,
    id_kind: Option<IdKind>,
    geometry_kinds: GeometryKinds,
    group_column: Option<String>,
    exposure_column: Option<String>,
    groups: Vec<String>,
    exposure: Vec<f64>,
    row_counter: Option<std::sync::Arc<std::sync::atomic::AtomicU64>>,
    /// Per feature, whether it is text.
    text: Vec<bool>,
    /// Per text feature, its levels in first-seen order (codes are positions).
    levels: Vec<HashMap<String, u32>>,
    keep_geometries: bool,
    geometries: Vec<Geometry<f64>>,
}

impl UnitCollector {
    /// Also keeps each used row's geometry (for schemes that draw regions
    /// from the units' shapes; costs the geometries' size in memory).
    pub fn with_geometries(mut self, keep: bool) -> UnitCollector {
        self.keep_geometries = keep;
        self
    }

    /// Also counts every row pushed into `counter`, which another thread may
    /// read while the rows arrive (a progress display).
    pub fn with_row_counter(
        mut self,
        counter: std::sync::Arc<std::sync::atomic::AtomicU64>,
    ) -> UnitCollector {
        self.row_counter = Some(counter);
        self
    }

    /// Marks which features are text columns (one flag per feature); their
    /// values come in [`Extras::texts`].
    pub fn with_text_features(mut self, text: &[bool]) -> UnitCollector {
        self.text = text.to_vec();
        self.levels = vec![HashMap::new(); text.iter().filter(|&&t| t).count()];
        self
    }

    /// Also collects a group column (a row whose group is NULL is skipped).
    pub fn with_group(mut self, column: Option<&str>) -> UnitCollector {
        self.group_column = column.map(str::to_string);
        self
    }

    /// Also collects an exposure column (a row whose exposure is NULL, NaN or
    /// infinite is skipped).
    pub fn with_exposure(mut self, column: Option<&str>) -> UnitCollector {
        self.exposure_column = column.map(str::to_string);
        self
    }

    /// A collector for `table` (as the user named it) with these columns.
    /// With `strict`, every row that would be skipped becomes an error instead.
    pub fn new(
        table: &str,
        target_name: &str,
        feature_names: &[String],
        strict: bool,
    ) -> UnitCollector {
        UnitCollector {
            table: table.to_string(),
            target_name: target_name.to_string(),
            feature_names: feature_names.to_vec(),
            strict,
            rows: Vec::new(),
            features: Vec::new(),
            skipped: Skipped::default(),
            strict_problems: Vec::new(),
            rows_read: 0,
            id_kind: None,
            geometry_kinds: GeometryKinds::default(),
            group_column: None,
            exposure_column: None,
            groups: Vec::new(),
            exposure: Vec::new(),
            row_counter: None,
            text: vec![false; feature_names.len()],
            levels: Vec::new(),
            keep_geometries: false,
            geometries: Vec::new(),
        }
    }

    /// Reserve room for `n` rows (an adapter that knows the row count saves reallocations).
    pub fn reserve(&mut self, n: usize) {
        self.rows.reserve(n);
        self.features.reserve(n * self.feature_names.len());
    }

    /// Adds one source row. `features` has one entry per feature column.
    ///
    /// # Errors
    /// A geometry whose representative point cannot be computed (e.g. a line
    /// with no length and no coordinates) is an input error naming the row.
    pub fn push(
        &mut self,
        id: UnitId,
        geometry: RawGeometry,
        target: Option<f64>,
        features: &[Option<f64>],
    ) -> Result<(), Error> {
        self.push_with(id, geometry, target, features, Extras::default())
    }

    /// [`push`](Self::push) with the values of the extra columns.
    ///
    /// # Errors
    /// As [`push`](Self::push).
    pub fn push_with(
        &mut self,
        id: UnitId,
        geometry: RawGeometry,
        target: Option<f64>,
        features: &[Option<f64>],
        extras: Extras,
    ) -> Result<(), Error> {
        self.rows_read += 1;
        if let Some(counter) = &self.row_counter {
            counter.store(self.rows_read, std::sync::atomic::Ordering::Relaxed);
        }
        let kind = match id {
            UnitId::Int(_) => IdKind::Integer,
            UnitId::Text(_) => IdKind::Text,
        };
        self.id_kind.get_or_insert(kind);
        let geometry = match geometry {
            RawGeometry::Null => {
                self.skip(id, None, 0, "no geometry", "NULL geometry");
                return Ok(());
            }
            RawGeometry::Decoded(geometry) => geometry,
        };
        let point = match representative_point(&geometry) {
            Some(point) => point,
            None => {
                self.skip(id, None, 1, "empty geometry", "empty geometry");
                return Ok(());
            }
        };
        let target = match target {
            Some(value) if value.is_finite() => value,
            _ => {
                let column = self.target_name.clone();
                self.skip(
                    id,
                    Some(&column),
                    2,
                    "missing target",
                    "target is NULL, NaN or infinite",
                );
                return Ok(());
            }
        };
        let text = &self.text;
        let mut texts = extras.texts.iter();
        if let Some(index) = features.iter().enumerate().position(|(j, value)| {
            if text.get(j).copied().unwrap_or(false) {
                texts.next().is_none_or(Option::is_none)
            } else {
                !matches!(value, Some(v) if v.is_finite())
            }
        }) {
            let column = self.feature_names[index].clone();
            self.skip(
                id,
                Some(&column),
                3 + index,
                &format!("missing feature {column}"),
                "feature is NULL, NaN or infinite",
            );
            return Ok(());
        }
        let m = self.feature_names.len();
        if let Some(column) = self.group_column.clone() {
            match extras.group {
                Some(group) => self.groups.push(group),
                None => {
                    self.skip(id, Some(&column), 3 + m, "no group", "group is NULL");
                    return Ok(());
                }
            }
        }
        if let Some(column) = self.exposure_column.clone() {
            match extras.exposure {
                Some(value) if value.is_finite() => self.exposure.push(value),
                _ => {
                    if self.group_column.is_some() {
                        self.groups.pop();
                    }
                    self.skip(
                        id,
                        Some(&column),
                        4 + m,
                        "missing exposure",
                        "exposure is NULL, NaN or infinite",
                    );
                    return Ok(());
                }
            }
        }
        match geometry {
            Geometry::Point(_) | Geometry::MultiPoint(_) => self.geometry_kinds.points = true,
            Geometry::Polygon(_)
            | Geometry::MultiPolygon(_)
            | Geometry::Rect(_)
            | Geometry::Triangle(_) => self.geometry_kinds.polygons = true,
            _ => self.geometry_kinds.other = true,
        }
        if self.keep_geometries {
            self.geometries.push(geometry);
        }
        self.rows.push((id, point, target));
        let mut texts = extras.texts.into_iter().flatten();
        let mut k = 0;
        for (j, value) in features.iter().enumerate() {
            if self.text.get(j).copied().unwrap_or(false) {
                let level = texts.next().unwrap_or_default();
                let known = self.levels[k].len() as u32;
                let code = *self.levels[k].entry(level).or_insert(known);
                self.features.push(f64::from(code));
                k += 1;
            } else {
                self.features.push(value.unwrap_or(f64::NAN));
            }
        }
        Ok(())
    }

    fn skip(&mut self, id: UnitId, column: Option<&str>, rank: usize, reason: &str, problem: &str) {
        if self.strict {
            self.strict_problems.push((
                Location {
                    table: self.table.clone(),
                    column: column.map(str::to_string),
                    row_id: Some(id.to_string()),
                },
                format!("{problem} (--strict forbids skipping rows)"),
            ));
        }
        self.skipped.add(rank, reason, id);
    }

    /// Sorts by id, checks id uniqueness and returns the dataset.
    ///
    /// # Errors
    /// Duplicate ids (every one is listed), rows skipped under `strict`, mixed
    /// integer and text ids.
    pub fn finish(self, id_column: &str) -> Result<Dataset, Error> {
        if !self.strict_problems.is_empty() {
            return Err(Error::Input {
                problems: self.strict_problems,
            });
        }
        let m = self.feature_names.len();
        let mut order: Vec<usize> = (0..self.rows.len()).collect();
        order.sort_by(|&a, &b| self.rows[a].0.cmp(&self.rows[b].0));
        let mut problems = Vec::new();
        for pair in order.windows(2) {
            if self.rows[pair[0]].0 == self.rows[pair[1]].0 {
                problems.push((
                    Location {
                        table: self.table.clone(),
                        column: Some(id_column.to_string()),
                        row_id: Some(self.rows[pair[0]].0.to_string()),
                    },
                    "duplicate id: ids must be unique".to_string(),
                ));
            }
        }
        if !problems.is_empty() {
            problems.dedup();
            return Err(Error::Input { problems });
        }
        let mut ids = Vec::with_capacity(order.len());
        let mut points = Vec::with_capacity(order.len());
        let mut target = Vec::with_capacity(order.len());
        let mut features = Vec::with_capacity(order.len() * m);
        let mut rows: Vec<Option<(UnitId, [f64; 2], f64)>> =
            self.rows.into_iter().map(Some).collect();
        for &index in &order {
            if let Some((id, point, value)) = rows[index].take() {
                ids.push(id);
                points.push(point);
                target.push(value);
                features.extend_from_slice(&self.features[index * m..(index + 1) * m]);
            }
        }
        let groups = self.group_column.map(|column| {
            let mut names: Vec<String> = self.groups.clone();
            names.sort_by(|a, b| a.as_bytes().cmp(b.as_bytes()));
            names.dedup();
            let codes = order
                .iter()
                .map(|&index| {
                    names
                        .binary_search_by(|name| name.as_bytes().cmp(self.groups[index].as_bytes()))
                        .map(|code| code as u32)
                        .unwrap_or(0)
                })
                .collect();
            Groups {
                column,
                names,
                codes,
            }
        });
        let exposure = self
            .exposure_column
            .map(|_| order.iter().map(|&index| self.exposure[index]).collect());
        let (features, feature_names, categorical) = one_hot(
            &self.table,
            &self.feature_names,
            &self.text,
            self.levels,
            features,
        )?;
        let geometries = self.keep_geometries.then(|| {
            let mut kept: Vec<Option<Geometry<f64>>> =
                self.geometries.into_iter().map(Some).collect();
            order
                .iter()
                .filter_map(|&index| kept.get_mut(index).and_then(Option::take))
                .collect()
        });
        Ok(Dataset {
            ids,
            points,
            target,
            features,
            feature_names,
            id_kind: self.id_kind.unwrap_or(IdKind::Integer),
            geometry_kinds: self.geometry_kinds,
            rows_read: self.rows_read,
            skipped: self.skipped,
            groups,
            exposure,
            categorical,
            geometries,
        })
    }
}

#[cfg(test)]
mod tests;
