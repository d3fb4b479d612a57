//! Benchmark of the model families at a million units: prints the model
//! compute time of each (fits, held-out predictions and scores of every fold,
//! no I/O).
//!
//! ```text
//! cargo run --release --example bench_models [N_UNITS] [FOLDS]
//! ```
//!
//! Defaults: 1,000,000 units, 10 folds. The units are points drawn uniformly
//! (ChaCha8, seed 42) in a 100 km square with 5 features (smooth fields plus
//! noise); folds are square grid blocks of 5 km dealt to the folds. Targets:
//! a continuous one for OLS and ridge, a 0/1 outcome drawn from a logistic
//! model for logistic, counts drawn from a Poisson model with an exposure
//! (100 to 1,100) for Poisson, the continuous one for IDW and kNN (8
//! neighbours). Target of the issue: logistic and Poisson at 1,000,000 units,
//! 10 folds, 5 features under 10 s of model compute on 2 cores. Speed is
//! checked here, never by timed tests. Each line gives the wall time and the
//! CPU time of all threads: on a busy shared machine the CPU time is the
//! steadier measure of the work, and idle cores approach CPU time / cores.

use std::time::Instant;

use geofold::core::folds::{build_scheme, SchemeInput};
use geofold::core::metrics::Family;
use geofold::core::models::build_model;
use geofold::core::neighbours::NeighbourIndex;
use geofold::core::options::Options;
use geofold::core::units::{Dataset, GeometryKinds, IdKind, Skipped, UnitId};
use geofold::core::validate::{assign_folds, fit_and_score, Plan};
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let n: usize = args
        .next()
        .map(|a| a.parse())
        .transpose()?
        .unwrap_or(1_000_000);
    let folds: u32 = args.next().map(|a| a.parse()).transpose()?.unwrap_or(10);
    let threads = std::thread::available_parallelism().map_or(1, |t| t.get());
    println!("bench_models: {n} units, {folds} folds, 5 features, {threads} threads");

    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let mut uniform = move || (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64;
    let side = 100_000.0;
    let points: Vec<[f64; 2]> = (0..n)
        .map(|_| [uniform() * side, uniform() * side])
        .collect();
    let mut features = Vec::with_capacity(n * 5);
    let mut eta = Vec::with_capacity(n);
    for p in &points {
        let row = [
            (p[0] / 7_000.0).sin() + 0.3 * uniform(),
            (p[1] / 9_000.0).cos() + 0.3 * uniform(),
            uniform(),
            2.0 * uniform() - 1.0,
            (p[0] + p[1]) / side + 0.2 * uniform(),
        ];
        eta.push(0.8 * row[0] - 0.5 * row[1] + 0.3 * row[2] - 0.2 * row[3] + 0.4 * row[4]);
        features.extend_from_slice(&row);
    }
    let continuous: Vec<f64> = eta.iter().map(|e| 2.0 + e + uniform() - 0.5).collect();
    let outcome: Vec<f64> = eta
        .iter()
        .map(|e| f64::from(u8::from(uniform() < 1.0 / (1.0 + (-e).exp()))))
        .collect();
    let exposure: Vec<f64> = (0..n).map(|_| 100.0 + 1000.0 * uniform()).collect();
    let counts: Vec<f64> = eta
        .iter()
        .zip(&exposure)
        .map(|(e, x)| poisson(x * (e - 5.0).exp(), &mut uniform))
        .collect();
    let data = |target: &[f64], exposure: Option<Vec<f64>>| Dataset {
        ids: (0..n as i64).map(UnitId::Int).collect(),
        points: points.clone(),
        target: target.to_vec(),
        features: features.clone(),
        feature_names: (1..=5).map(|j| format!("x{j}")).collect(),
        id_kind: IdKind::Integer,
        geometry_kinds: GeometryKinds::default(),
        rows_read: n as u64,
        skipped: Skipped::default(),
        groups: None,
        exposure,
        categorical: Vec::new(),
        geometries: None,
    };

    let index = NeighbourIndex::new(&points);
    let input = SchemeInput {
        points: &points,
        index: &index,
        groups: None,
        prediction_points: None,
        geometries: None,
        exclusion_radius: None,
    };
    let mut scheme_options = Options::new();
    scheme_options.insert("block-size".into(), 5000.into());
    scheme_options.insert("folds".into(), folds.into());
    let scheme = build_scheme("grid", &scheme_options)?;

    type Case<'a> = (&'a str, Vec<(&'a str, serde_json::Value)>, &'a [f64], bool);
    let cases: Vec<Case<'_>> = vec![
        ("ols", vec![], &continuous, false),
        ("ridge", vec![("penalty", 10.0.into())], &continuous, false),
        ("logistic", vec![], &outcome, false),
        ("poisson", vec![], &counts, true),
        ("knn", vec![("neighbours", 8.into())], &continuous, false),
        (
            "idw",
            vec![("neighbours", 8.into()), ("power", 2.0.into())],
            &continuous,
            false,
        ),
    ];
    for (name, options, target, with_exposure) in cases {
        let data = data(target, with_exposure.then(|| exposure.clone()));
        let options: Options = options
            .into_iter()
            .map(|(k, v)| (k.to_string(), v))
            .collect();
        let model = build_model(name, &options)?;
        let plan = Plan {
            scheme: scheme.as_ref(),
            model: model.as_ref(),
            repeats: 1,
            seed: 1,
            exclusion_radius: None,
        };
        let sets = assign_folds(&input, &plan)?;
        let started = Instant::now();
        let cpu_before = cpu_seconds();
        let outcome = fit_and_score(&data, &plan, sets)?;
        let seconds = started.elapsed().as_secs_f64();
        let cpu = cpu_seconds() - cpu_before;
        let headline = outcome.family.headline();
        println!(
            "{name:<9} {seconds:8.2} s wall {cpu:8.2} s CPU   pooled {headline} {:.4} (baseline {:.4}){}",
            outcome.pooled.get(headline).unwrap_or(f64::NAN),
            outcome.baseline.get(headline).unwrap_or(f64::NAN),
            if outcome.family == Family::Binary {
                format!(
                    ", AUC {:.4}",
                    outcome.pooled.get("roc_auc").unwrap_or(f64::NAN)
                )
            } else {
                String::new()
            }
        );
    }
    Ok(())
}

/// User and system CPU time of this process so far (all threads), seconds:
/// on a machine shared with other work, the work done, which wall time on
/// idle cores approaches as CPU time / cores.
fn cpu_seconds() -> f64 {
    // SAFETY: getrusage fills the struct it is given; a zeroed rusage is a
    // valid value of that plain C struct.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: RUSAGE_SELF and a valid pointer to a live rusage.
    let status = unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut usage) };
    if status != 0 {
        return f64::NAN;
    }
    let seconds = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 / 1e6;
    seconds(usage.ru_utime) + seconds(usage.ru_stime)
}

/// A Poisson draw by inversion (fine for the small means used here).
fn poisson(mean: f64, uniform: &mut impl FnMut() -> f64) -> f64 {
    let u = uniform();
    let (mut k, mut p) = (0.0, (-mean).exp());
    let mut cumulative = p;
    while u > cumulative && k < 1000.0 {
        k += 1.0;
        p *= mean / k;
        cumulative += p;
    }
    k
}
