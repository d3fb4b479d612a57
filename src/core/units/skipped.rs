//! The rows skipped by the input-hygiene rules, counted by reason with their ids.

use serde::Serialize;

use super::UnitId;

/// Why rows were skipped, with the ids of the skipped rows. Each skipped row
/// counts once, under the first reason found in this order: geometry (NULL,
/// then empty), target, features (in the order given).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Skipped {
    /// `(rank, reason, ids)`, ordered by rank (the order above).
    reasons: Vec<(usize, String, Vec<UnitId>)>,
}

impl Skipped {
    /// Records a skipped row under `reason` (ranked `rank` for ordering).
    pub fn add(&mut self, rank: usize, reason: &str, id: UnitId) {
        match self.reasons.iter_mut().find(|(_, r, _)| r == reason) {
            Some((_, _, ids)) => ids.push(id),
            None => {
                self.reasons.push((rank, reason.to_string(), vec![id]));
                self.reasons.sort_by_key(|(rank, _, _)| *rank);
            }
        }
    }

    /// All skipped rows.
    pub fn total(&self) -> u64 {
        self.reasons
            .iter()
            .map(|(_, _, ids)| ids.len() as u64)
            .sum()
    }

    /// The count of one reason (0 when absent).
    pub fn count(&self, reason: &str) -> u64 {
        self.reasons
            .iter()
            .find(|(_, r, _)| r == reason)
            .map_or(0, |(_, _, ids)| ids.len() as u64)
    }

    /// The skipped rows as one phrase, e.g. `2 missing feature rainfall_mm, 1 no geometry`
    /// (empty when none were skipped).
    pub fn describe(&self) -> String {
        self.reasons()
            .iter()
            .map(|(reason, count)| format!("{count} {reason}"))
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// `(reason, count)` pairs, in rank order.
    pub fn reasons(&self) -> Vec<(String, u64)> {
        self.reasons
            .iter()
            .map(|(_, reason, ids)| (reason.clone(), ids.len() as u64))
            .collect()
    }

    /// `(reason, ids)` pairs, in rank order; ids in the order the rows were read.
    pub fn ids(&self) -> impl Iterator<Item = (&str, &[UnitId])> {
        self.reasons
            .iter()
            .map(|(_, reason, ids)| (reason.as_str(), ids.as_slice()))
    }

    /// The counts by reason as a JSON object (what `runs.units_skipped` stores).
    pub fn counts_json(&self) -> serde_json::Value {
        let map: serde_json::Map<String, serde_json::Value> = self
            .reasons
            .iter()
            .map(|(_, reason, ids)| (reason.clone(), ids.len().into()))
            .collect();
        serde_json::Value::Object(map)
    }
}

impl Serialize for Skipped {
    /// A list of `{reason, count, ids}` in rank order, every id as text.
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeSeq;
        let mut seq = serializer.serialize_seq(Some(self.reasons.len()))?;
        for (_, reason, ids) in &self.reasons {
            let ids: Vec<String> = ids.iter().map(UnitId::to_string).collect();
            seq.serialize_element(&serde_json::json!({
                "reason": reason,
                "count": ids.len(),
                "ids": ids,
            }))?;
        }
        seq.end()
    }
}
