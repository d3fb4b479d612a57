//! The parameters a run records and the warnings from the job's last inspection.

use super::*;

/// What `runs.parameters` records: the scheme's and the model's options, the
/// exclusion radius, the unseen-level policy when there are text features,
/// and for `--assign-only` how to read the source again (`assignment`: the
/// source without its connection string, the columns, the distance SRID), so
/// `geofold score` reads the same units.
pub(super) fn parameters(
    spec: &RunSpec,
    info: &SourceInfo,
    data: &Dataset,
    scheme: &dyn FoldScheme,
    model: &dyn crate::core::models::Model,
) -> serde_json::Value {
    let mut parameters = serde_json::json!({
        "scheme": scheme.parameters(),
        "model": model.parameters(),
        "exclusion-radius": spec.exclusion_radius,
        GATES_KEY: spec.gates,
        BASELINE_RUNS_KEY: spec.baseline_runs,
    });
    if !data.categorical.is_empty() {
        parameters["unseen-levels"] = serde_json::json!(spec.unseen_levels);
    }
    if spec.assign_only {
        let source = match &spec.source {
            SourceRef::Postgis { .. } => SourceRef::Postgis {
                db: None,
                table: info.table.clone(),
            },
            SourceRef::Gpkg { file, .. } => SourceRef::Gpkg {
                file: file.canonicalize().unwrap_or_else(|_| file.clone()),
                layer: Some(info.qualified_table.clone()),
            },
        };
        parameters["assignment"] = serde_json::json!({
            "source": source,
            "columns": spec.columns,
            "distance_srid": spec.distance_srid,
            "strict": spec.strict,
        });
    }
    parameters
}

/// A block size or exclusion radius below this share of the residual
/// autocorrelation range of the job's last inspection is warned about.
pub const WELL_BELOW_RANGE: f64 = 0.5;

/// Warnings when the run's block size or exclusion radius (from its stored
/// parameters) is well below the range found by the job's last inspection.
pub(super) fn scale_warnings(
    parameters: &serde_json::Value,
    inspection: &StoredInspection,
    length: &dyn Fn(f64) -> String,
) -> Vec<String> {
    let range = inspection.fitted_range;
    let sizes = [
        ("block size", parameters["scheme"]["block-size"].as_f64()),
        ("exclusion radius", parameters["exclusion-radius"].as_f64()),
    ];
    sizes
        .into_iter()
        .filter_map(|(what, size)| {
            let size = size?;
            (size < WELL_BELOW_RANGE * range).then(|| {
                format!(
                    "the {what} {} is well below the {} range of residual autocorrelation that the job's last \
                     inspection found ({}, {}): held-out units sit close to units they resemble, so the scores \
                     may be optimistic; see geofold inspect",
                    length(size),
                    length(range),
                    inspection.inspection_id,
                    inspection.started_at
                )
            })
        })
        .collect()
}
