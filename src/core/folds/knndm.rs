//! k-fold nearest-neighbour distance matching (kNNDM).
//!
//! Linnenbrink, J., Milà, C., Ludwig, M. & Meyer, H. (2024). kNNDM CV:
//! k-fold nearest-neighbour distance matching cross-validation for map
//! accuracy estimation. *Geoscientific Model Development* 17: 5897–5912.
//! doi:10.5194/gmd-17-5897-2024 (CC BY 4.0).
//!
//! # What could be verified
//! Only the abstract could be read: kNNDM "tries to find a k-fold
//! configuration such that the empirical cumulative distribution function
//! (ECDF) of NNDs between test and training locations during CV is matched
//! to the ECDF of NNDs between prediction and training locations". The
//! paper's candidate cluster counts, its clustering, its merge rule and its
//! preliminary check could not be reached; REFERENCES.md §6.5 recalls them
//! from memory (clustering for counts from k up to n, merging into k folds,
//! the configuration with the smallest Wasserstein statistic W). The rule
//! below follows that outline with geofold's own choices, stated.
//!
//! # Rule
//! 1. **Target.** The prediction distances (each prediction location to its
//!    nearest unit).
//! 2. **Candidates**, in this order: for `t = 0, 1, …, 6`, `q = round(k·10^(t/2))`
//!    clusters (k, 3.2k, 10k, 32k, 100k, 316k, 1000k) while `q ≤ n/2` (`q = k`
//!    always); then plain random k-fold (the [`super::random`] rule), which
//!    stands for `q = n` and takes the place of the paper's preliminary
//!    check: when the units are not clustered relative to the prediction
//!    locations, random folds match best and are chosen.
//! 3. **Clustering** of each `q`: k-means of the units' points (the
//!    [`super::kmeans::lloyd`] rules: k-means++ seeding, Lloyd iterations)
//!    with one start and at most [`CANDIDATE_ITERATIONS`] iterations.
//! 4. **Merge rule.** The `q` clusters are dealt to the `k` folds by
//!    [`super::deal::deal_balanced`] (largest first to the fold with the fewest
//!    units, then evening moves and swaps; equal sizes in a seeded order).
//! 5. **Choice.** For each candidate, the CV distances (each unit to the
//!    nearest unit of another fold) of the evaluation units against the
//!    target: W, the Wasserstein-1 distance between the two distributions.
//!    The candidate with the smallest W is kept (ties to the earlier).
//!    Evaluation units: all units when there are at most [`EVALUATION_UNITS`],
//!    else that many drawn without replacement from the repetition's stream
//!    (a Fisher–Yates prefix), so large inputs cost candidates × 10,000 nearest
//!    distances rather than candidates × n. The W reported for the run is
//!    computed afterwards over every unit.
//! 6. **Regions.** The convex hull of each fold's points (`fold`).
//!
//! Every draw (evaluation sample, each candidate's seeding and deal, the
//! random candidate's shuffle) comes in that order from the repetition's
//! stream, so repetitions differ and the same seed repeats.

use serde::{Deserialize, Serialize};

use super::deal::deal_balanced;
use super::grid::default_folds;
use super::kmeans::lloyd::{kmeans, Settings};
use super::random::check_folds;
use super::regions::hull;
use super::{
    scheme_params, unequal_folds, FoldRng, FoldScheme, FoldSet, Region, Requirements, SchemeEntry,
    SchemeInput,
};
use crate::core::matching::{cv_distances_of, prediction_distances, wasserstein1};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "knndm",
    about: "k-fold nearest-neighbour distance matching (Linnenbrink et al. 2024); needs prediction locations",
    options: &["folds"],
    build,
};

/// Lloyd iterations of a candidate clustering.
pub const CANDIDATE_ITERATIONS: u32 = 20;

/// Units whose CV distances decide between candidates.
pub const EVALUATION_UNITS: usize = 10_000;

/// Options of kNNDM.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct KnndmParams {
    /// Number of folds, 2 to 1000.
    #[serde(default = "default_folds")]
    pub folds: u32,
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let params: KnndmParams = scheme_params("knndm", ENTRY.options, options)?;
    check_folds(params.folds)?;
    Ok(Box::new(Knndm { params }))
}

/// The kNNDM scheme.
#[derive(Debug, Clone)]
pub struct Knndm {
    params: KnndmParams,
}

impl Knndm {
    /// kNNDM with `folds` folds.
    ///
    /// # Errors
    /// Folds outside 2 to 1000.
    pub fn new(folds: u32) -> Result<Knndm, Error> {
        check_folds(folds)?;
        Ok(Knndm {
            params: KnndmParams { folds },
        })
    }
}

/// The candidate cluster counts for `k` folds and `n` units (rule 2).
pub fn candidate_counts(k: usize, n: usize) -> Vec<usize> {
    let mut counts = vec![k];
    for t in 1..=6 {
        let q = (k as f64 * 10f64.powf(t as f64 / 2.0)).round() as usize;
        if q <= n / 2 && counts.last() != Some(&q) {
            counts.push(q);
        }
    }
    counts
}

impl FoldScheme for Knndm {
    fn name(&self) -> &'static str {
        "knndm"
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
        format!(
            "{} folds matched to the prediction locations' nearest distances (k-fold NNDM over k-means cluster \
             counts and random folds)",
            self.params.folds
        )
    }

    fn requirements(&self) -> Requirements {
        Requirements {
            prediction_points: true,
            ..Requirements::default()
        }
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let prediction = input.prediction_points.ok_or_else(|| {
            Error::Usage(
                "--scheme knndm needs prediction locations: --prediction-table (PostGIS) or --prediction-layer \
                 (GeoPackage)"
                    .into(),
            )
        })?;
        let k = self.params.folds as usize;
        let n = input.points.len();
        if n < k {
            return Err(Error::Folds(format!("{n} units cannot fill {k} folds")));
        }
        let target = prediction_distances(prediction, input.index);
        if target.is_empty() {
            return Err(Error::Folds(
                "there are no prediction locations to match".into(),
            ));
        }
        let evaluated: Vec<u32> = if n <= EVALUATION_UNITS {
            (0..n as u32).collect()
        } else {
            let mut all: Vec<u32> = (0..n as u32).collect();
            for i in 0..EVALUATION_UNITS {
                let j = i + rng.index_below(n - i);
                all.swap(i, j);
            }
            all.truncate(EVALUATION_UNITS);
            all
        };
        let mut best: Option<(f64, Option<usize>, Vec<u32>)> = None;
        let mut tried = Vec::new();
        let mut consider = |clusters: Option<usize>, fold_of: Vec<u32>| {
            let set = FoldSet::plain(k as u32, fold_of);
            let distances = cv_distances_of(&set, input.points, input.index, &evaluated);
            let w = wasserstein1(&distances, &target);
            tried.push(serde_json::json!({
                "clusters": clusters.map_or(serde_json::Value::from("random"), serde_json::Value::from),
                "w": w,
            }));
            if best.as_ref().is_none_or(|(b, _, _)| w < *b) {
                best = Some((w, clusters, set.fold_of));
            }
        };
        for q in candidate_counts(k, n) {
            let clock = std::time::Instant::now();
            let clustering = match kmeans(
                input.points,
                input.index,
                Settings {
                    clusters: q,
                    starts: 1,
                    max_iterations: CANDIDATE_ITERATIONS,
                },
                rng,
            ) {
                Ok(clustering) => clustering,
                Err(_) if q > k => continue,
                Err(error) => return Err(error),
            };
            let fold_of_cluster = deal_balanced(&clustering.sizes(), k, Some(rng));
            let fold_of = clustering
                .cluster_of
                .iter()
                .map(|&c| fold_of_cluster[c as usize])
                .collect();
            let clustered_ms = clock.elapsed().as_millis() as u64;
            consider(Some(q), fold_of);
            tracing::debug!(
                clusters = q,
                clustered_ms,
                total_ms = clock.elapsed().as_millis() as u64,
                "kNNDM candidate"
            );
        }
        let mut order: Vec<usize> = (0..n).collect();
        rng.shuffle(&mut order);
        let mut random = vec![0u32; n];
        for (position, &unit) in order.iter().enumerate() {
            random[unit] = (position % k) as u32;
        }
        consider(None, random);
        let Some((w, clusters, fold_of)) = best else {
            return Err(Error::Internal("kNNDM tried no candidate".into()));
        };
        let mut members: Vec<Vec<[f64; 2]>> = vec![Vec::new(); k];
        for (unit, &fold) in fold_of.iter().enumerate() {
            members[fold as usize].push(input.points[unit]);
        }
        let mut set = FoldSet::plain(k as u32, fold_of);
        let sizes = set.fold_sizes();
        set.regions = members
            .into_iter()
            .enumerate()
            .filter_map(|(fold, points)| {
                hull(points).map(|geometry| Region {
                    fold: fold as u32,
                    kind: "fold",
                    label: format!("fold {}", fold + 1),
                    units: sizes[fold] as u32,
                    geometry,
                })
            })
            .collect();
        set.facts.insert(
            "chosen_clusters".into(),
            clusters.map_or(serde_json::Value::from("random"), serde_json::Value::from),
        );
        set.facts.insert("candidate_w".into(), serde_json::json!(w));
        set.facts
            .insert("candidates".into(), serde_json::Value::Array(tried));
        set.facts
            .insert("evaluation_units".into(), evaluated.len().into());
        set.warnings.extend(unequal_folds(
            &sizes,
            "; read the pooled scores rather than the per-fold mean",
        ));
        Ok(set)
    }
}

#[cfg(test)]
mod tests;
