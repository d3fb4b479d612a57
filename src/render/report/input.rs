//! What a report is made from: the run's record and results as plain strings
//! and numbers, filled by the caller from a stored run.
//!
//! Scores are name → value lists so that any model family's scores fit; their
//! units and direction come from [`ScoreDefinition`]s. Every section after the
//! scores is optional: an empty list or `None` leaves the section out.

/// A setting in plain words: "block size" → "4,000 m".
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Setting {
    /// What it is.
    pub name: String,
    /// Its value with its unit, as text.
    pub value: String,
}

/// Rows skipped for one reason.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SkipReason {
    /// Why, in plain words: "target is missing".
    pub reason: String,
    /// How many rows.
    pub count: u64,
}

/// The run's record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RunFacts {
    /// Job name.
    pub job: String,
    /// Run id.
    pub run_id: String,
    /// When the run started, as the store records it (the report adds no clock).
    pub started: String,
    /// When it finished, if it did.
    pub finished: Option<String>,
    /// geofold version that made the run.
    pub tool_version: String,
    /// Where the units came from: "PostGIS table hydro.subcatchments".
    pub source: String,
    /// The CRS, in words: "EPSG:32631 WGS 84 / UTM zone 31N (metre)".
    pub crs: String,
    /// Target column.
    pub target: String,
    /// Target unit, empty if none.
    pub target_unit: String,
    /// Feature columns.
    pub features: Vec<String>,
    /// Fold scheme name: "grid blocks".
    pub scheme: String,
    /// Its settings with units: block size, folds, repetitions, seed, buffer.
    pub scheme_settings: Vec<Setting>,
    /// Model name: "ordinary least squares".
    pub model: String,
    /// Its settings.
    pub model_settings: Vec<Setting>,
    /// Units used.
    pub units_used: u64,
    /// Rows skipped, by reason.
    pub units_skipped: Vec<SkipReason>,
    /// The data fingerprint (hash of the units as read).
    pub fingerprint: String,
}

/// Which direction of a score is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Better {
    /// Smaller is better (RMSE, MAE).
    Lower,
    /// Larger is better (R²).
    Higher,
    /// Closer to zero is better (bias).
    NearZero,
}

/// What a score is.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ScoreDefinition {
    /// Its name as in the score lists: "RMSE".
    pub name: String,
    /// Its unit, usually the target's; empty for unitless scores.
    pub unit: String,
    /// Which way is better.
    pub better: Better,
    /// One line saying what it measures.
    pub description: String,
}

/// One score value.
#[derive(Debug, Clone, PartialEq)]
pub struct Score {
    /// Name, matching a [`ScoreDefinition`].
    pub name: String,
    /// Value (non-finite values are shown as "n/a").
    pub value: f64,
}

/// Scores of one fold of one repetition.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldScores {
    /// Repetition, from 1.
    pub repetition: u32,
    /// Fold, from 1.
    pub fold: u32,
    /// Training units.
    pub n_train: u64,
    /// Test units.
    pub n_test: u64,
    /// Its scores.
    pub scores: Vec<Score>,
}

/// All scores of the run.
#[derive(Debug, Clone, PartialEq)]
pub struct ScoreTable {
    /// Definitions, in display order; the first is the headline score.
    pub definitions: Vec<ScoreDefinition>,
    /// Pooled over all held-out predictions.
    pub pooled: Vec<Score>,
    /// The same scores for predicting each fold's training mean.
    pub baseline: Vec<Score>,
    /// Per fold.
    pub folds: Vec<FoldScores>,
}

/// A comparison run on the same units (usually random k-fold).
#[derive(Debug, Clone, PartialEq)]
pub struct Comparison {
    /// What it is: "random 5-fold".
    pub label: String,
    /// Its run id.
    pub run_id: String,
    /// Its pooled scores.
    pub pooled: Vec<Score>,
}

/// One coefficient of one fold's fit.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldCoefficient {
    /// Repetition, from 1.
    pub repetition: u32,
    /// Fold, from 1.
    pub fold: u32,
    /// Term: "intercept", "rainfall_mm".
    pub term: String,
    /// Estimate.
    pub value: f64,
}

/// Semivariogram model families, with the conventions of
/// [`FittedVariogram::gamma`] (N. Cressie, *Statistics for Spatial Data*, rev. ed.,
/// Wiley 1993, §2.3.1; practical range for the exponential and Gaussian forms
/// as in R. Webster & M. A. Oliver, *Geostatistics for Environmental
/// Scientists*, 2nd ed., Wiley 2007, §6.3).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VariogramModel {
    /// c0 + c·(1.5 h/a − 0.5 (h/a)³) up to the range a, c0 + c beyond.
    Spherical,
    /// c0 + c·(1 − exp(−3h/a)), a the practical range (95 % of the sill).
    Exponential,
    /// c0 + c·(1 − exp(−3h²/a²)), a the practical range.
    Gaussian,
}

/// A fitted semivariogram model.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedVariogram {
    /// Model family.
    pub model: VariogramModel,
    /// Nugget c0.
    pub nugget: f64,
    /// Partial sill c (sill = c0 + c).
    pub partial_sill: f64,
    /// Range a, in the distance unit.
    pub range: f64,
}

impl FittedVariogram {
    /// The model's semivariance at lag `h` (0 at h = 0).
    pub fn gamma(&self, h: f64) -> f64 {
        if h <= 0.0 {
            return 0.0;
        }
        let (c0, c, a) = (self.nugget, self.partial_sill, self.range);
        if a <= 0.0 {
            return c0 + c;
        }
        let r = h / a;
        c0 + c * match self.model {
            VariogramModel::Spherical if r < 1.0 => 1.5 * r - 0.5 * r * r * r,
            VariogramModel::Spherical => 1.0,
            VariogramModel::Exponential => 1.0 - (-3.0 * r).exp(),
            VariogramModel::Gaussian => 1.0 - (-3.0 * r * r).exp(),
        }
    }
}

/// One lag bin of the empirical semivariogram.
#[derive(Debug, Clone, PartialEq)]
pub struct VariogramBin {
    /// Mean lag of the pairs in the bin.
    pub lag: f64,
    /// Semivariance γ.
    pub gamma: f64,
    /// Pairs in the bin.
    pub pairs: u64,
}

/// The semivariogram of the target (or residuals) with its fitted model.
#[derive(Debug, Clone, PartialEq)]
pub struct Semivariogram {
    /// Of what: "residuals of the full-data fit".
    pub of: String,
    /// Distance unit: "m".
    pub distance_unit: String,
    /// Empirical bins.
    pub bins: Vec<VariogramBin>,
    /// Fitted model, if one was fitted.
    pub fitted: Option<FittedVariogram>,
    /// The advice drawn from it (for example on block size), in plain words.
    pub advice: String,
}

/// One lag bin of a Moran's I correlogram.
#[derive(Debug, Clone, PartialEq)]
pub struct CorrelogramBin {
    /// Upper (or mean) lag of the bin.
    pub lag: f64,
    /// Moran's I.
    pub morans_i: f64,
    /// Pairs in the bin.
    pub pairs: u64,
    /// Permutation or normal p-value, if computed.
    pub p_value: Option<f64>,
}

/// A Moran's I correlogram.
#[derive(Debug, Clone, PartialEq)]
pub struct Correlogram {
    /// Of what: "residuals".
    pub of: String,
    /// Distance unit.
    pub distance_unit: String,
    /// Bins by lag.
    pub bins: Vec<CorrelogramBin>,
    /// A note on reading it, if any.
    pub note: String,
}

/// Nearest-distance samples: how far held-out units were from the nearest
/// training unit in cross-validation, against how far the places to be
/// predicted are from the nearest observed unit.
#[derive(Debug, Clone, PartialEq)]
pub struct NearestDistances {
    /// Distance unit.
    pub distance_unit: String,
    /// Test unit → nearest training unit, over all folds.
    pub cross_validation: Vec<f64>,
    /// Prediction location → nearest observed unit.
    pub prediction: Vec<f64>,
}

/// How far the run's test units were from the nearest unit they were trained
/// on (per fold and over all folds), beside the same over all folds of the
/// comparison run and the prediction locations' distances to the data.
#[derive(Debug, Clone, PartialEq)]
pub struct TestDistances {
    /// Distance unit.
    pub distance_unit: String,
    /// Median over all folds of this run.
    pub run_median: Option<f64>,
    /// Label and median over all folds of the comparison run, if stored.
    pub comparison: Option<(String, f64)>,
    /// Median distance from the prediction locations to the data, if given.
    pub prediction_median: Option<f64>,
    /// The table: this run over all folds, then per fold, then the
    /// comparison run and the prediction locations.
    pub rows: Vec<DistanceRow>,
}

/// One row of [`TestDistances`]: quantiles of nearest distances.
#[derive(Debug, Clone, PartialEq)]
pub struct DistanceRow {
    /// What the row is: "all folds", "fold 3", "random 5-fold, all folds", …
    pub label: String,
    /// Distances summarised.
    pub n: u64,
    /// Units a seeded sample was drawn from, if sampled.
    pub sampled_from: Option<u64>,
    /// Smallest, 10th percentile, median, 90th percentile, largest.
    pub quantiles: [f64; 5],
}

/// Global Moran's I of the run's held-out residuals: whether the errors
/// cluster in space.
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualMoran {
    /// The spatial weights, in words: "the 8 nearest units as neighbours (knn:8, weights
    /// row-standardised)".
    pub weights: String,
    /// Units used.
    pub units: u64,
    /// Units a seeded sample was drawn from, when one was.
    pub sampled_from: Option<u64>,
    /// Moran's I.
    pub value: f64,
    /// Its expectation under no autocorrelation.
    pub expected: f64,
    /// z under randomisation.
    pub z: f64,
    /// Two-sided p under randomisation.
    pub p_value: f64,
}

/// One run in a job's score history.
#[derive(Debug, Clone, PartialEq)]
pub struct HistoryPoint {
    /// Run id.
    pub run_id: String,
    /// Label: the run's start time as stored.
    pub label: String,
    /// The score's value in that run.
    pub value: f64,
    /// Whether a gate was breached by this run.
    pub breached: bool,
}

/// A gate on a score: a threshold a run must not cross.
#[derive(Debug, Clone, PartialEq)]
pub struct Gate {
    /// In words: "RMSE at most 2.5 mg/L".
    pub label: String,
    /// The threshold.
    pub value: f64,
}

/// One score over a job's runs, oldest first.
#[derive(Debug, Clone, PartialEq)]
pub struct ScoreHistory {
    /// Score name.
    pub score: String,
    /// Its unit.
    pub unit: String,
    /// Runs, oldest first.
    pub points: Vec<HistoryPoint>,
    /// Its gates.
    pub gates: Vec<Gate>,
}

/// Everything a report is made from (maps come separately, as a
/// [`MapInput`](crate::render::MapInput)).
#[derive(Debug, Clone, PartialEq)]
pub struct ReportInput {
    /// The run's record.
    pub run: RunFacts,
    /// Its scores.
    pub scores: ScoreTable,
    /// A comparison run, if there is one.
    pub comparison: Option<Comparison>,
    /// Per-fold coefficients; empty when not stored.
    pub coefficients: Vec<FoldCoefficient>,
    /// Moran's I of the held-out residuals, if stored.
    pub held_out_moran: Option<ResidualMoran>,
    /// Semivariogram, if stored.
    pub semivariogram: Option<Semivariogram>,
    /// Correlogram, if stored.
    pub correlogram: Option<Correlogram>,
    /// Nearest-distance samples, if stored.
    pub nearest_distances: Option<NearestDistances>,
    /// How far test units were from training, if stored.
    pub test_distances: Option<TestDistances>,
    /// The job's score history; empty when there is none.
    pub history: Vec<ScoreHistory>,
}
