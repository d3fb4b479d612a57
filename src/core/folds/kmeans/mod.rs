//! k-means spatial folds: clusters of the units' representative points.
//!
//! Brenning, A. (2012). Spatial cross-validation and bootstrap for the
//! assessment of prediction rules in remote sensing. *Proc. IEEE
//! International Geoscience and Remote Sensing Symposium (IGARSS) 2012*,
//! Munich, 5372–5375. doi:10.1109/IGARSS.2012.6352393. The paper's abstract
//! and a textbook's description ("using the observations' coordinates in a
//! k-means clustering") could be read; its full text could not, so the
//! clustering details below (seeding, iteration cap, starts, dealing) are
//! geofold's own, stated here.
//!
//! # Rules
//! - **Clusters.** `clusters` clusters (default: one per fold) of the
//!   representative points by k-means, as in [`lloyd`]: k-means++ seeding
//!   (Arthur & Vassilvitskii 2007), Lloyd iterations until no unit changes
//!   cluster or [`MAX_ITERATIONS`], the best of `starts` starts (default 10)
//!   by within-cluster sum of squares. Every draw comes from the
//!   repetition's [`FoldRng`], so repetitions give different clusterings.
//! - **Folds.** The clusters are dealt to the folds by [`deal_balanced`]
//!   (largest first, each to the fold with the fewest units, then moves and
//!   swaps that even the folds out; ties in size in a seeded order). With
//!   one cluster per fold each fold is one cluster (the largest is fold 1);
//!   with more clusters than folds, the largest fold exceeds the smallest by
//!   at most the largest cluster.
//! - **Regions.** The convex hull of each cluster's points (`cluster`); a
//!   cluster whose points have a hull of no area (fewer than three, or on one
//!   line) has none and is counted in the facts.
//! - **Warnings.** Folds are called *unequal* when the largest holds more
//!   than 1.5 times the units of the smallest (k-means follows the density
//!   of units, not the range of autocorrelation); a start that reached
//!   [`MAX_ITERATIONS`] without settling is reported.
//!
//! Distances are Euclidean in the distance CRS: a projected CRS is required.

pub mod hamerly;
pub mod lloyd;

use serde::{Deserialize, Serialize};

use super::deal::{deal_balanced, loads};
use super::grid::default_folds;
use super::random::check_folds;
use super::regions::hull;
use super::{
    count_summary, scheme_params, unequal_folds, FoldRng, FoldScheme, FoldSet, Region, SchemeEntry,
    SchemeInput,
};
use crate::core::options::Options;
use crate::error::Error;
use lloyd::{kmeans, Settings};

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "kmeans",
    about: "k-means clusters of the units' points (Brenning 2012), dealt to folds",
    options: &["folds", "clusters", "starts"],
    build,
};

/// Most Lloyd iterations of one start.
pub const MAX_ITERATIONS: u32 = 300;

/// Most starts.
pub const MAX_STARTS: u32 = 1000;

/// Most clusters.
pub const MAX_CLUSTERS: u32 = 10_000_000;

/// Options of the k-means scheme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct KmeansParams {
    /// Number of folds, 2 to 1000.
    #[serde(default = "default_folds")]
    pub folds: u32,
    /// Number of clusters, at least `folds`; None for one per fold.
    #[serde(default)]
    pub clusters: Option<u32>,
    /// k-means starts, 1 to [`MAX_STARTS`]; the best is kept.
    #[serde(default = "default_starts")]
    pub starts: u32,
}

fn default_starts() -> u32 {
    10
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let params: KmeansParams = scheme_params("kmeans", ENTRY.options, options)?;
    Ok(Box::new(Kmeans::new(params)?))
}

/// The k-means scheme.
#[derive(Debug, Clone)]
pub struct Kmeans {
    params: KmeansParams,
}

impl Kmeans {
    /// The scheme with these options.
    ///
    /// # Errors
    /// [`Error::Usage`] for folds, clusters or starts out of range.
    pub fn new(params: KmeansParams) -> Result<Kmeans, Error> {
        check_folds(params.folds)?;
        if let Some(clusters) = params.clusters {
            if clusters < params.folds || clusters > MAX_CLUSTERS {
                return Err(Error::Usage(format!(
                    "--clusters must be at least --folds ({}) and at most {MAX_CLUSTERS}, got {clusters}",
                    params.folds
                )));
            }
        }
        if !(1..=MAX_STARTS).contains(&params.starts) {
            return Err(Error::Usage(format!(
                "--starts must be between 1 and {MAX_STARTS}, got {}",
                params.starts
            )));
        }
        Ok(Kmeans { params })
    }

    fn clusters(&self) -> u32 {
        self.params.clusters.unwrap_or(self.params.folds)
    }
}

impl FoldScheme for Kmeans {
    fn name(&self) -> &'static str {
        "kmeans"
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::to_value(&self.params).unwrap_or_default()
    }

    fn needs_distances(&self) -> bool {
        true
    }

    fn randomised(&self) -> bool {
        true
    }

    fn describe(&self, _length: &dyn Fn(f64) -> String) -> String {
        let clusters = self.clusters();
        if clusters == self.params.folds {
            format!(
                "{clusters} k-means clusters of the units' points, one per fold (best of {} starts)",
                self.params.starts
            )
        } else {
            format!(
                "{clusters} k-means clusters of the units' points (best of {} starts), dealt to {} folds balancing units",
                self.params.starts, self.params.folds
            )
        }
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let k = self.params.folds as usize;
        let q = self.clusters() as usize;
        let n = input.points.len();
        if n < q {
            return Err(Error::Folds(format!(
                "{n} units cannot make {q} clusters; use fewer {}",
                if q == k { "--folds" } else { "--clusters" }
            )));
        }
        let clustering = kmeans(
            input.points,
            input.index,
            Settings {
                clusters: q,
                starts: self.params.starts as usize,
                max_iterations: MAX_ITERATIONS,
            },
            rng,
        )?;
        let sizes = clustering.sizes();
        let fold_of_cluster = deal_balanced(&sizes, k, Some(rng));
        let fold_of: Vec<u32> = clustering
            .cluster_of
            .iter()
            .map(|&c| fold_of_cluster[c as usize])
            .collect();
        let mut members: Vec<Vec<[f64; 2]>> = vec![Vec::new(); q];
        for (unit, &c) in clustering.cluster_of.iter().enumerate() {
            members[c as usize].push(input.points[unit]);
        }
        let mut without_region = 0usize;
        let mut regions = Vec::with_capacity(q);
        for (c, points) in members.into_iter().enumerate() {
            match hull(points) {
                Some(geometry) => regions.push(Region {
                    fold: fold_of_cluster[c],
                    kind: "cluster",
                    label: format!("cluster {}", c + 1),
                    units: sizes[c] as u32,
                    geometry,
                }),
                None => without_region += 1,
            }
        }
        let mut set = FoldSet::plain(k as u32, fold_of);
        set.regions = regions;
        set.facts.insert("clusters".into(), q.into());
        set.facts
            .insert("units_per_cluster".into(), count_summary(&sizes));
        set.facts.insert(
            "within_cluster_sum_of_squares".into(),
            serde_json::json!(clustering.wcss),
        );
        set.facts
            .insert("lloyd_iterations".into(), clustering.iterations.into());
        set.facts
            .insert("best_start".into(), (clustering.start + 1).into());
        if without_region > 0 {
            set.facts
                .insert("clusters_without_region".into(), without_region.into());
        }
        let fold_sizes = loads(&sizes, &fold_of_cluster, k);
        if fold_sizes.contains(&0) {
            return Err(Error::Internal("a k-means fold got no cluster".into()));
        }
        let advice = if q == k {
            "; k-means clusters follow the density of units, and --clusters M (more clusters than folds) evens \
             the folds out"
        } else {
            "; k-means clusters follow the density of units"
        };
        set.warnings.extend(unequal_folds(&fold_sizes, advice));
        if !clustering.converged {
            set.warnings.push(format!(
                "the kept k-means start stopped at {MAX_ITERATIONS} iterations before every unit settled in a cluster"
            ));
        }
        Ok(set)
    }
}

#[cfg(test)]
mod tests;
