//! The training units as seen by the location-only families ([`super::idw`],
//! [`super::knn`], [`super::mean`]): their representative points in a
//! neighbour index of their own (built per fold, so a held-out unit never
//! finds itself or another unit of its fold), their targets and exposures,
//! and the family's intercept-only prediction as the fallback.
//!
//! # Predictions
//! A held-out unit's neighbours `j` with weights `w_j` give
//! `Σ w_j y_j / Σ w_j` (a weighted mean; for a 0/1 target, a probability);
//! for a count family with an exposure, `E · Σ w_j y_j / Σ w_j E_j` (the
//! neighbours' pooled rate times the unit's own exposure). The intercept-only
//! prediction is the same with every training unit at weight 1: the training
//! mean, or the training rate times the exposure.

use super::UnitView;
use crate::core::metrics::Family;
use crate::core::neighbours::{Neighbour, NeighbourIndex};
use crate::core::units::Dataset;

/// The note of a prediction made by the fallback.
pub const FALLBACK_NOTE: &str =
    "no training unit within the radius: predicted by the training mean (or rate)";

/// The training units of one fold.
pub struct TrainingPoints {
    /// Index over the training units' points (positions in `rows`).
    pub index: NeighbourIndex,
    points: Vec<[f64; 2]>,
    target: Vec<f64>,
    exposure: Option<Vec<f64>>,
    family: Family,
    /// Training mean of the target, or the training rate Σy/ΣE.
    overall: f64,
}

impl TrainingPoints {
    /// The training units `rows` of `data`, for a model of `family`.
    pub fn new(data: &Dataset, rows: &[u32], family: Family) -> TrainingPoints {
        let points: Vec<[f64; 2]> = rows.iter().map(|&u| data.points[u as usize]).collect();
        let target: Vec<f64> = rows.iter().map(|&u| data.target[u as usize]).collect();
        let exposure = match family {
            Family::Count => data
                .exposure
                .as_ref()
                .map(|e| rows.iter().map(|&u| e[u as usize]).collect::<Vec<f64>>()),
            _ => None,
        };
        let total: f64 = target.iter().sum();
        let overall = match &exposure {
            Some(e) => total / e.iter().sum::<f64>(),
            None => total / target.len().max(1) as f64,
        };
        TrainingPoints {
            index: NeighbourIndex::new(&points),
            points,
            target,
            exposure,
            family,
            overall,
        }
    }

    /// The intercept-only prediction for a unit.
    pub fn intercept_only(&self, unit: &UnitView<'_>) -> f64 {
        match (&self.exposure, unit.exposure) {
            (Some(_), Some(e)) => self.overall * e,
            _ => self.overall,
        }
    }

    /// The weighted prediction of the module doc from `(neighbour, weight)`.
    pub fn weighted(&self, unit: &UnitView<'_>, neighbours: &[(Neighbour, f64)]) -> f64 {
        let (mut top, mut bottom) = (0.0, 0.0);
        for (neighbour, weight) in neighbours {
            let j = neighbour.index as usize;
            top += weight * self.target[j];
            bottom += weight * self.exposure.as_ref().map_or(1.0, |e| e[j]);
        }
        let value = top / bottom;
        match (&self.exposure, unit.exposure, self.family) {
            (Some(_), Some(e), Family::Count) => value * e,
            _ => value,
        }
    }

    /// The `k` nearest training units to the unit's point, and, with a
    /// radius, only those within it (distance ≤ radius).
    pub fn neighbours(
        &self,
        unit: &UnitView<'_>,
        k: Option<usize>,
        radius: Option<f64>,
    ) -> Vec<Neighbour> {
        match (k, radius) {
            (Some(k), radius) => {
                let mut found = self.index.nearest(unit.point, k, |_| true);
                if let Some(radius) = radius {
                    found.retain(|n| n.distance <= radius);
                }
                found
            }
            (None, Some(radius)) => {
                let mut found: Vec<Neighbour> = Vec::new();
                self.index.for_each_within(unit.point, radius, |index| {
                    let p = self.points[index as usize];
                    let distance =
                        ((p[0] - unit.point[0]).powi(2) + (p[1] - unit.point[1]).powi(2)).sqrt();
                    found.push(Neighbour { index, distance });
                });
                found.sort_by_key(|n| n.index);
                found
            }
            (None, None) => Vec::new(),
        }
    }
}
