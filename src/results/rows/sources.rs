//! The row sources of the per-unit and per-fold tables: each fills one row at a
//! time from the run's outcome, so nothing is copied before the store writes it.

use super::*;

/// The run score holding the match statistic W (the Wasserstein-1 distance
/// between the CV distances and the prediction distances): statistic
/// `pooled` over all repetitions' CV distances together, `repeat_mean` and
/// `repeat_sd` (sample SD) of each repetition's W with several repetitions.
pub const MATCH_SCORE: &str = "w_nnd";

/// `nearest_distances`: each repetition's CV distances (unit-major), then
/// the prediction distances; none without prediction locations.
pub(super) struct Nearest<'a> {
    pub(super) run_id: Uuid,
    pub(super) data: &'a Dataset,
    pub(super) outcome: &'a RunOutcome,
    /// The repetitions with CV distances (all of them when the run has
    /// prediction locations).
    pub(super) repetitions: Vec<usize>,
}

impl Nearest<'_> {
    fn cv_rows(&self) -> usize {
        self.repetitions.len() * self.data.len()
    }
}

impl<'a> RowSource<'a> for Nearest<'a> {
    fn table(&self) -> &'static TableDef {
        &NEAREST_DISTANCES
    }

    fn len(&self) -> usize {
        match &self.outcome.matching {
            Some(matching) => self.cv_rows() + matching.prediction.len(),
            None => 0,
        }
    }

    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>) {
        out.clear();
        let cv_rows = self.cv_rows();
        if row < cv_rows {
            let n = self.data.len();
            let (repetition, unit) = (row / n, row % n);
            let rep = self.outcome.repetitions.get(self.repetitions[repetition]);
            let (fold, distance) = rep.map_or((0, None), |r| {
                (
                    r.folds.fold_of[unit],
                    r.folds.cv_distances.as_ref().map(|d| d[unit]),
                )
            });
            out.extend([
                Value::Uuid(self.run_id),
                Value::Int(self.repetitions[repetition] as i64 + 1),
                Value::Str("cv"),
                Value::Int(i64::from(fold) + 1),
                Value::Id(&self.data.ids[unit]),
                Value::float(distance),
            ]);
        } else {
            let distance = self
                .outcome
                .matching
                .as_ref()
                .and_then(|m| m.prediction.get(row - cv_rows).copied());
            out.extend([
                Value::Uuid(self.run_id),
                Value::Null,
                Value::Str("prediction"),
                Value::Null,
                Value::Null,
                Value::float(distance),
            ]);
        }
    }
}

/// Rows given by a list of items and a function filling a row from one.
pub(super) struct Listed<T, F> {
    pub(super) table: &'static TableDef,
    pub(super) items: Vec<T>,
    pub(super) fill: F,
}

impl<'a, T, F> RowSource<'a> for Listed<T, F>
where
    F: Fn(&T, &mut Vec<Value<'a>>),
{
    fn table(&self) -> &'static TableDef {
        self.table
    }

    fn len(&self) -> usize {
        self.items.len()
    }

    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>) {
        out.clear();
        (self.fill)(&self.items[row], out);
    }
}

/// `held_out`: unit-major within each repetition.
pub(super) struct HeldOut<'a> {
    pub(super) run_id: Uuid,
    pub(super) data: &'a Dataset,
    pub(super) outcome: &'a RunOutcome,
}

impl<'a> RowSource<'a> for HeldOut<'a> {
    fn table(&self) -> &'static TableDef {
        &HELD_OUT
    }

    fn len(&self) -> usize {
        self.data.len() * self.outcome.repetitions.len()
    }

    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>) {
        let n = self.data.len();
        let (repetition, unit) = (row / n, row % n);
        let rep = &self.outcome.repetitions[repetition];
        let observed = self.data.target[unit];
        let predicted = rep.predicted[unit];
        let loss = predicted
            .is_finite()
            .then(|| self.outcome.family.loss(observed, predicted))
            .flatten();
        out.clear();
        out.extend([
            Value::Uuid(self.run_id),
            Value::Int(repetition as i64 + 1),
            Value::Int(i64::from(rep.folds.fold_of[unit]) + 1),
            Value::Float(observed),
            Value::float(Some(predicted)),
            Value::Id(&self.data.ids[unit]),
            Value::float(loss),
        ]);
    }
}

/// `unit_summaries`: only for runs with more than one repetition.
pub(super) struct Summaries<'a> {
    pub(super) run_id: Uuid,
    pub(super) data: &'a Dataset,
    pub(super) outcome: &'a RunOutcome,
}

impl<'a> RowSource<'a> for Summaries<'a> {
    fn table(&self) -> &'static TableDef {
        &UNIT_SUMMARIES
    }

    fn len(&self) -> usize {
        if self.outcome.repetitions.len() > 1 {
            self.data.len()
        } else {
            0
        }
    }

    fn fill(&self, unit: usize, out: &mut Vec<Value<'a>>) {
        let summary = unit_summary(self.data, self.outcome, unit);
        out.clear();
        out.extend([
            Value::Uuid(self.run_id),
            Value::Int(i64::from(self.outcome.repetitions[0].folds.fold_of[unit]) + 1),
            Value::Float(self.data.target[unit]),
            Value::Float(summary.mean_predicted),
            Value::Float(summary.mae),
            Value::Float(summary.rmse),
            Value::Int(self.outcome.repetitions.len() as i64),
            Value::Id(&self.data.ids[unit]),
            Value::float(summary.mean_loss),
        ]);
    }
}

/// `fold_exclusions`: `starts` holds, per fold of each repetition, the index
/// of its first row.
pub(super) struct Exclusions<'a> {
    pub(super) run_id: Uuid,
    pub(super) data: &'a Dataset,
    pub(super) outcome: &'a RunOutcome,
    pub(super) starts: Vec<(usize, usize, usize)>,
    pub(super) total: usize,
}

impl<'a> RowSource<'a> for Exclusions<'a> {
    fn table(&self) -> &'static TableDef {
        &FOLD_EXCLUSIONS
    }

    fn len(&self) -> usize {
        self.total
    }

    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>) {
        let at = self.starts.partition_point(|&(start, _, _)| start <= row) - 1;
        let (start, repetition, fold) = self.starts[at];
        let unit = self.outcome.repetitions[repetition]
            .folds
            .excluded_from(fold as u32)[row - start];
        out.clear();
        out.extend([
            Value::Uuid(self.run_id),
            Value::Int(repetition as i64 + 1),
            Value::Int(fold as i64 + 1),
            Value::Id(&self.data.ids[unit as usize]),
        ]);
    }
}
