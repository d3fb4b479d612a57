//! Text features: one-hot encoding of their levels (see the parent
//! module's doc) and the [`Categorical`] record of where the indicator
//! columns of each text feature are.

use std::collections::HashMap;

use super::Dataset;
use crate::error::Error;

/// Most levels a text feature may have.
pub const MAX_LEVELS: usize = 100;

/// A text feature, one-hot encoded: the indicator columns of its levels are
/// `first_column..first_column + levels.len()` of the dataset's features.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Categorical {
    /// The source column.
    pub name: String,
    /// Its distinct values, in byte order.
    pub levels: Vec<String>,
    /// The feature index of the first level's indicator.
    pub first_column: usize,
}

impl Categorical {
    /// The indicator columns.
    pub fn columns(&self) -> std::ops::Range<usize> {
        self.first_column..self.first_column + self.levels.len()
    }

    /// The level of unit `i` (the one indicator that is 1).
    pub fn level_of(&self, data: &Dataset, i: usize) -> usize {
        let row = &data.features_of(i)[self.columns()];
        row.iter().position(|&v| v == 1.0).unwrap_or(0)
    }
}

/// Expands the text features (whose values are first-seen codes) into 0/1
/// indicator columns of their levels in byte order.
type Encoded = (Vec<f64>, Vec<String>, Vec<Categorical>);

pub(super) fn one_hot(
    table: &str,
    names: &[String],
    text: &[bool],
    levels: Vec<HashMap<String, u32>>,
    features: Vec<f64>,
) -> Result<Encoded, Error> {
    if !text.contains(&true) {
        return Ok((features, names.to_vec(), Vec::new()));
    }
    let m = names.len();
    // Per text feature: the sorted levels, and first-seen code → sorted position.
    let mut sorted: Vec<(Vec<String>, Vec<usize>)> = Vec::new();
    for (k, map) in levels.into_iter().enumerate() {
        let name = names
            .iter()
            .zip(text)
            .filter(|(_, &t)| t)
            .nth(k)
            .map(|(n, _)| n.clone())
            .unwrap_or_default();
        if map.len() > MAX_LEVELS {
            return Err(Error::input(
                table,
                Some(&name),
                None,
                format!(
                    "text feature has {} distinct values; a categorical feature may have at most {MAX_LEVELS}",
                    map.len()
                ),
            ));
        }
        let mut pairs: Vec<(String, u32)> = map.into_iter().collect();
        pairs.sort_by(|a, b| a.0.as_bytes().cmp(b.0.as_bytes()));
        let mut position = vec![0usize; pairs.len()];
        for (at, (_, code)) in pairs.iter().enumerate() {
            position[*code as usize] = at;
        }
        sorted.push((
            pairs.into_iter().map(|(level, _)| level).collect(),
            position,
        ));
    }
    let mut new_names = Vec::new();
    let mut categorical = Vec::new();
    let mut k = 0;
    for (j, name) in names.iter().enumerate() {
        if text[j] {
            categorical.push(Categorical {
                name: name.clone(),
                levels: sorted[k].0.clone(),
                first_column: new_names.len(),
            });
            new_names.extend(sorted[k].0.iter().map(|level| format!("{name}={level}")));
            k += 1;
        } else {
            new_names.push(name.clone());
        }
    }
    let width = new_names.len();
    let n = features.len().checked_div(m).unwrap_or(0);
    let mut expanded = vec![0.0; n * width];
    for i in 0..n {
        let (mut at, mut k) = (i * width, 0);
        for j in 0..m {
            let value = features[i * m + j];
            if text[j] {
                let (levels, position) = &sorted[k];
                expanded[at + position[value as usize]] = 1.0;
                at += levels.len();
                k += 1;
            } else {
                expanded[at] = value;
                at += 1;
            }
        }
    }
    Ok((expanded, new_names, categorical))
}
