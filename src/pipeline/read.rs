//! Reading and checking the units (step 4 of the pipeline): input hygiene, the target against the
//! model family, held-out text levels.

use super::*;

/// Reads and checks every row of the source, showing the count as it grows
/// when the progress display is live.
///
/// # Errors
/// Bad rows (every one listed), duplicate ids, no usable row.
pub fn read_units(
    source: &mut dyn Source,
    info: &SourceInfo,
    job: &str,
    strict: bool,
    keep_geometries: bool,
    progress: &dyn Progress,
) -> Result<Dataset, Error> {
    let clock = std::time::Instant::now();
    let counter = Arc::new(AtomicU64::new(0));
    let mut collector = UnitCollector::new(
        &info.table,
        &info.target_column,
        &info.feature_columns,
        strict,
    )
    .with_group(info.group_column.as_deref())
    .with_exposure(info.exposure_column.as_deref())
    .with_text_features(&info.text_features)
    .with_geometries(keep_geometries)
    .with_row_counter(Arc::clone(&counter));
    progress.start(Phase::Read, None);
    let read = read_rows(source, &mut collector, &counter, progress);
    progress.finish(counter.load(Ordering::Relaxed));
    read?;
    let data = collector.finish(&info.id_column)?;
    if data.is_empty() {
        let reasons = data.skipped.describe();
        return Err(Error::input(
            &info.table,
            None,
            None,
            format!(
                "no usable rows: {} rows read{}",
                data.rows_read,
                if reasons.is_empty() {
                    String::new()
                } else {
                    format!(", all skipped ({reasons})")
                }
            ),
        ));
    }
    tracing::info!(
        job,
        phase = "read",
        units = data.len(),
        skipped = data.skipped.total(),
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "read units"
    );
    Ok(data)
}

/// At most this many bad target or exposure values are listed.
pub(super) const MAX_LISTED: usize = 1000;

/// Checks every unit's target (and exposure) against the model's family:
/// 0/1 for binary, non-negative whole numbers for counts, positive exposures.
///
/// # Errors
/// [`Error::Input`] naming each row.
pub fn check_family(info: &SourceInfo, data: &Dataset, family: Family) -> Result<(), Error> {
    let mut problems = Vec::new();
    let mut more = 0usize;
    let mut add = |column: &str, i: usize, problem: String| {
        if problems.len() < MAX_LISTED {
            problems.push((
                Location {
                    table: info.table.clone(),
                    column: Some(column.to_string()),
                    row_id: Some(data.ids[i].to_string()),
                },
                problem,
            ));
        } else {
            more += 1;
        }
    };
    for i in 0..data.len() {
        if let Err(problem) = family.check_observed(data.target[i]) {
            add(&info.target_column, i, problem);
        }
        if let (Family::Count, Some(exposure), Some(column)) =
            (family, &data.exposure, &info.exposure_column)
        {
            let value = exposure[i];
            if value.is_nan() || value <= 0.0 {
                add(
                    column,
                    i,
                    format!(
                        "exposure is {value}; it must be positive (its logarithm is the offset)"
                    ),
                );
            }
        }
    }
    if problems.is_empty() {
        return Ok(());
    }
    if more > 0 {
        problems.push((
            Location {
                table: info.table.clone(),
                column: None,
                row_id: None,
            },
            format!("{more} further rows not listed"),
        ));
    }
    Err(Error::Input { problems })
}

/// Held-out levels of text features that their fold's training units never
/// had: an error naming fold, column, level and rows under the `error`
/// policy; otherwise `(note, units)` for the summary.
pub(super) fn check_unseen(
    info: &SourceInfo,
    data: &Dataset,
    sets: &[FoldSet],
    policy: UnseenPolicy,
) -> Result<Vec<(String, usize)>, Error> {
    let mut notes: Vec<(String, usize)> = Vec::new();
    let mut problems = Vec::new();
    for (repetition, folds) in sets.iter().enumerate() {
        for unseen in unseen_levels(data, folds) {
            match policy {
                UnseenPolicy::Error => problems.push((
                    Location {
                        table: info.table.clone(),
                        column: Some(unseen.column.clone()),
                        row_id: Some(id_list(data, &unseen.units, 5)),
                    },
                    format!(
                        "level {:?} is held out in fold {} (repetition {}) but no training unit of that fold has it; \
                         pass --unseen-levels zero to predict such units as the fold's reference level, or use folds \
                         that keep the level in training",
                        unseen.level,
                        unseen.fold + 1,
                        repetition + 1
                    ),
                )),
                UnseenPolicy::Zero => {
                    let note = format!(
                        "{}={} unseen in training: all-zero indicators (the fold's reference level)",
                        unseen.column, unseen.level
                    );
                    match notes.iter_mut().find(|(n, _)| *n == note) {
                        Some(entry) => entry.1 += unseen.units.len(),
                        None => notes.push((note, unseen.units.len())),
                    }
                }
            }
        }
    }
    if problems.is_empty() {
        Ok(notes)
    } else {
        Err(Error::Input { problems })
    }
}

/// Reads every row into the collector, updating the display from a second
/// thread while the display is live.
pub(super) fn read_rows(
    source: &mut dyn Source,
    collector: &mut UnitCollector,
    counter: &AtomicU64,
    progress: &dyn Progress,
) -> Result<(), Error> {
    if !progress.live() {
        return source.read(collector);
    }
    let (stop, stopped) = std::sync::mpsc::channel::<()>();
    std::thread::scope(|scope| {
        scope.spawn(move || {
            while let Err(std::sync::mpsc::RecvTimeoutError::Timeout) =
                stopped.recv_timeout(Duration::from_millis(100))
            {
                progress.update(counter.load(Ordering::Relaxed));
            }
        });
        let result = source.read(collector);
        let _ = stop.send(());
        result
    })
}
