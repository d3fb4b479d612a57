//! Checks of stored results against references outside geofold: the score
//! definitions recomputed in SQL by PostgreSQL, block membership by PostGIS
//! (`ST_Centroid`, `ST_Contains`), and an independent OLS refit with numpy.

use std::collections::BTreeMap;

use super::pg::Scratch;

/// `abs(a - b) <= 1e-12 · max(|b|, 1e-12)` as SQL.
pub fn close(a: &str, b: &str) -> String {
    format!("abs({a} - {b}) <= 1e-12 * greatest(abs({b}), 1e-12)")
}

/// The score definitions (common practice, no source: RMSE, MAE, bias =
/// mean(predicted − observed), R² = 1 − SSE/SST around the mean of the
/// scored set; the sample SD over folds) recomputed in SQL from the
/// `predictions` rows of run `run` in `{r}`, and compared with the
/// `fold_scores` and `run_scores` views to 1e-12 relative. `units` is the
/// number of units; a fold's training units are the others less the ones in
/// `fold_exclusions`.
pub fn check_scores(scratch: &Scratch, run: &str, units: usize) {
    let sql = format!(
        "WITH p AS (SELECT * FROM {{r}}.predictions WHERE run_id = '{run}'),
              x AS (SELECT repetition, fold, count(*) AS n FROM {{r}}.fold_exclusions
                    WHERE run_id = '{run}' GROUP BY repetition, fold),
              f AS (SELECT repetition, fold, count(*) AS n, sqrt(avg(squared_error)) AS rmse,
                           avg(abs(observed - predicted)) AS mae, avg(predicted - observed) AS bias,
                           1 - sum((observed - predicted)^2) / sum((observed - m)^2) AS r2
                    FROM (SELECT *, avg(observed) OVER (PARTITION BY repetition, fold) AS m FROM p) q
                    GROUP BY repetition, fold)
         SELECT count(*) = (SELECT count(DISTINCT (repetition, fold)) FROM p)
                AND bool_and(s.n_test = f.n AND s.n_excluded = coalesce(x.n, 0)
                    AND s.n_train = {units} - f.n - coalesce(x.n, 0)
                    AND {} AND {} AND {} AND {})
         FROM {{r}}.fold_scores s JOIN f USING (repetition, fold)
              LEFT JOIN x USING (repetition, fold) WHERE s.run_id = '{run}'",
        close("s.rmse", "f.rmse"),
        close("s.mae", "f.mae"),
        close("s.bias", "f.bias"),
        close("s.r2", "f.r2"),
    );
    scratch.check("fold_scores agree with the predictions", &sql);
    let sql = format!(
        "WITH p AS (SELECT * FROM {{r}}.predictions WHERE run_id = '{run}'),
              pooled AS (SELECT count(*) AS n, sqrt(avg((observed - predicted)^2)) AS rmse,
                                avg(abs(observed - predicted)) AS mae, avg(predicted - observed) AS bias,
                                1 - sum((observed - predicted)^2)
                                    / sum((observed - (SELECT avg(observed) FROM p))^2) AS r2 FROM p),
              folds AS (SELECT avg(rmse) AS rmse_mean, stddev_samp(rmse) AS rmse_sd,
                               avg(r2) AS r2_mean, stddev_samp(r2) AS r2_sd
                        FROM {{r}}.fold_scores WHERE run_id = '{run}')
         SELECT s.n_predictions = pooled.n AND {} AND {} AND {} AND {} AND {} AND {} AND {} AND {}
         FROM {{r}}.run_scores s, pooled, folds WHERE s.run_id = '{run}'",
        close("s.rmse", "pooled.rmse"),
        close("s.mae", "pooled.mae"),
        close("s.bias", "pooled.bias"),
        close("s.r2", "pooled.r2"),
        close("s.rmse_fold_mean", "folds.rmse_mean"),
        close("s.rmse_fold_sd", "folds.rmse_sd"),
        close("s.r2_fold_mean", "folds.r2_mean"),
        close("s.r2_fold_sd", "folds.r2_sd"),
    );
    scratch.check("run_scores agree with the predictions", &sql);
    scratch.check(
        "residual = observed - predicted and the error columns follow from it",
        &format!(
            "SELECT bool_and(residual = observed - predicted AND abs_error = abs(residual)
                    AND squared_error = residual * residual)
             FROM {{r}}.predictions WHERE run_id = '{run}'"
        ),
    );
}

/// Checks, against PostGIS, that every unit whose ST_Centroid lies inside it
/// (where geofold's representative point is that centroid) is in the fold of
/// the block that ST_Contains the centroid, in every repetition. `geom` is
/// the unit geometry in the distance CRS as SQL over `s`. Returns how many
/// units were checked.
pub fn check_units_sit_in_their_blocks(
    scratch: &Scratch,
    table: &str,
    run: &str,
    geom: &str,
) -> usize {
    let centroid_inside = format!("ST_Contains({geom}, ST_Centroid({geom}))");
    let expected: usize = scratch
        .query(&format!(
            "SELECT count(*) FROM {{s}}.{table} s WHERE {centroid_inside}"
        ))
        .parse()
        .unwrap();
    let repetitions: usize = scratch
        .query(&format!(
            "SELECT repeats FROM {{r}}.runs WHERE run_id = '{run}'"
        ))
        .parse()
        .unwrap();
    let sql = format!(
        "SELECT count(*) = {expected} * {repetitions} AND bool_and(b.fold = m.fold)
         FROM {{s}}.{table} s JOIN {{r}}.fold_members m ON s.id::text = m.unit_id
         JOIN {{r}}.fold_regions b ON b.run_id = m.run_id AND b.repetition = m.repetition
              AND ST_Contains(b.geom, ST_Centroid({geom}))
         WHERE m.run_id = '{run}' AND {centroid_inside}"
    );
    scratch.check(
        "units sit in the fold of the block holding their centroid",
        &sql,
    );
    expected
}

/// Runs tests/fixtures/ols_refit.py (numpy.linalg.lstsq per fold) on psql
/// rows `repetition|fold|unit_id|target|features…`; returns
/// `repetition|unit_id` → prediction.
pub fn numpy_refit(input: &str) -> BTreeMap<String, f64> {
    super::python_script("fixtures/ols_refit.py", &[], input)
        .lines()
        .map(|line| {
            let (key, value) = line.rsplit_once('|').unwrap();
            (key.to_string(), value.parse().unwrap())
        })
        .collect()
}
