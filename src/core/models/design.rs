//! Which feature columns a fold's model uses, and held-out levels its
//! training units never had.
//!
//! Every numeric feature is used. A text feature (one indicator column per
//! level, see [`Categorical`]) is encoded with the levels *seen in the fold's
//! training units*: the first of them in byte order is the reference level
//! (no column, absorbed by the intercept, as in treatment coding; e.g.
//! Dobson, A. J. (1990), *An Introduction to Generalized Linear Models*,
//! Chapman & Hall, §2.4, from memory for the section), and each other seen
//! level gets its indicator. Indicators of levels unseen in training are
//! not used, so a held-out unit with such a level has all-zero indicators
//! and is predicted as the reference level; whether that is allowed is the
//! run's `--unseen-levels` policy ([`UnseenPolicy`]), checked before any fit
//! by [`unseen_levels`].

use serde::{Deserialize, Serialize};

use super::FitError;
use crate::core::folds::FoldSet;
use crate::core::units::{Categorical, Dataset};

/// What a held-out unit whose text feature has a level unseen in its fold's
/// training units gets.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum UnseenPolicy {
    /// The run stops with an error naming the fold, column, level and row.
    #[default]
    Error,
    /// All-zero indicators (the reference level's prediction), counted in the summary.
    Zero,
}

impl UnseenPolicy {
    /// The policy named `error` or `zero`.
    pub fn from_name(name: &str) -> Option<UnseenPolicy> {
        match name {
            "error" => Some(UnseenPolicy::Error),
            "zero" => Some(UnseenPolicy::Zero),
            _ => None,
        }
    }
}

/// Per text feature, the number of units at each level, over `units`.
pub fn level_counts(data: &Dataset, units: impl IntoIterator<Item = u32>) -> Vec<Vec<u64>> {
    let mut counts: Vec<Vec<u64>> = data
        .categorical
        .iter()
        .map(|c| vec![0; c.levels.len()])
        .collect();
    if counts.is_empty() {
        return counts;
    }
    for unit in units {
        for (c, categorical) in data.categorical.iter().enumerate() {
            counts[c][categorical.level_of(data, unit as usize)] += 1;
        }
    }
    counts
}

/// Per fold, the training units' level counts: all units minus the fold's
/// test units and its exclusions.
pub fn training_level_counts(data: &Dataset, folds: &FoldSet) -> Vec<Vec<Vec<u64>>> {
    let all = level_counts(data, 0..data.len() as u32);
    folds
        .test_units()
        .iter()
        .enumerate()
        .map(|(fold, units)| {
            let removed = level_counts(
                data,
                units
                    .iter()
                    .chain(folds.excluded_from(fold as u32))
                    .copied(),
            );
            all.iter()
                .zip(&removed)
                .map(|(a, r)| a.iter().zip(r).map(|(a, r)| a - r).collect())
                .collect()
        })
        .collect()
}

/// The feature columns used with these training level counts, ascending.
///
/// # Errors
/// [`FitError::OneLevel`] for a text feature with one level in training.
pub fn used_columns(data: &Dataset, counts: &[Vec<u64>]) -> Result<Vec<usize>, FitError> {
    let mut used: Vec<usize> = (0..data.n_features()).collect();
    for (categorical, counts) in data.categorical.iter().zip(counts) {
        let seen: Vec<usize> = (0..counts.len()).filter(|&l| counts[l] > 0).collect();
        if seen.len() == 1 {
            return Err(FitError::OneLevel {
                feature: categorical.name.clone(),
                level: categorical.levels[seen[0]].clone(),
            });
        }
        let dropped: Vec<usize> = categorical
            .columns()
            .filter(|&column| {
                let level = column - categorical.first_column;
                counts[level] == 0 || seen.first() == Some(&level)
            })
            .collect();
        used.retain(|column| !dropped.contains(column));
    }
    Ok(used)
}

/// The columns used when training on `rows`.
///
/// # Errors
/// As [`used_columns`].
pub fn columns_of_rows(data: &Dataset, rows: &[u32]) -> Result<Vec<usize>, FitError> {
    used_columns(data, &level_counts(data, rows.iter().copied()))
}

/// A held-out level its fold's training units never had.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Unseen {
    /// The fold (0-based).
    pub fold: u32,
    /// The text feature.
    pub column: String,
    /// The level.
    pub level: String,
    /// The held-out units with it, ascending.
    pub units: Vec<u32>,
}

/// Every held-out level unseen in its fold's training units.
pub fn unseen_levels(data: &Dataset, folds: &FoldSet) -> Vec<Unseen> {
    if data.categorical.is_empty() {
        return Vec::new();
    }
    let training = training_level_counts(data, folds);
    let mut found = Vec::new();
    for (fold, units) in folds.test_units().iter().enumerate() {
        for (c, categorical) in data.categorical.iter().enumerate() {
            let mut by_level: Vec<Vec<u32>> = vec![Vec::new(); categorical.levels.len()];
            for &unit in units {
                let level = categorical.level_of(data, unit as usize);
                if training[fold][c][level] == 0 {
                    by_level[level].push(unit);
                }
            }
            for (level, units) in by_level.into_iter().enumerate() {
                if !units.is_empty() {
                    found.push(Unseen {
                        fold: fold as u32,
                        column: categorical.name.clone(),
                        level: categorical.levels[level].clone(),
                        units,
                    });
                }
            }
        }
    }
    found
}

/// The feature names of `columns`.
pub fn names_of(data: &Dataset, columns: &[usize]) -> Vec<String> {
    columns
        .iter()
        .map(|&c| data.feature_names[c].clone())
        .collect()
}

/// The categorical feature a column belongs to, if any.
pub fn categorical_of(data: &Dataset, column: usize) -> Option<&Categorical> {
    data.categorical
        .iter()
        .find(|c| c.columns().contains(&column))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::points_dataset;

    /// Six units, one text feature with levels a, b, c (unit 5 alone has c).
    fn data() -> Dataset {
        let mut data = points_dataset(&[[0.0, 0.0]; 6]);
        let levels = [0usize, 1, 0, 1, 0, 2];
        data.feature_names = vec!["x".into(), "k=a".into(), "k=b".into(), "k=c".into()];
        data.features = (0..6)
            .flat_map(|i| {
                let mut row = vec![i as f64, 0.0, 0.0, 0.0];
                row[1 + levels[i]] = 1.0;
                row
            })
            .collect();
        data.categorical = vec![Categorical {
            name: "k".into(),
            levels: vec!["a".into(), "b".into(), "c".into()],
            first_column: 1,
        }];
        data
    }

    #[test]
    fn the_first_seen_level_is_the_reference_and_unseen_levels_are_dropped() {
        let data = data();
        // Training on units 0..5: a, b seen; a is the reference, c unseen.
        assert_eq!(
            columns_of_rows(&data, &[0, 1, 2, 3, 4]).unwrap(),
            vec![0, 2]
        );
        // Training on units 1, 3, 5: b and c seen; b is the reference.
        assert_eq!(columns_of_rows(&data, &[1, 3, 5]).unwrap(), vec![0, 3]);
        assert_eq!(
            columns_of_rows(&data, &[0, 2, 4]).unwrap_err(),
            FitError::OneLevel {
                feature: "k".into(),
                level: "a".into()
            }
        );
    }

    #[test]
    fn held_out_levels_missing_from_training_are_listed() {
        let data = data();
        let folds = FoldSet::plain(2, vec![0, 0, 1, 1, 1, 1]);
        let unseen = unseen_levels(&data, &folds);
        assert_eq!(
            unseen,
            vec![Unseen {
                fold: 1,
                column: "k".into(),
                level: "c".into(),
                units: vec![5]
            }]
        );
    }
}
