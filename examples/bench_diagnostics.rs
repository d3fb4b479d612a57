//! Benchmark of the spatial diagnostics at a million units: prints timings.
//!
//! ```text
//! cargo run --release --example bench_diagnostics [N_UNITS] [PERMUTATIONS]
//! ```
//!
//! Defaults: 1,000,000 units, 999 permutations. The units are points drawn
//! uniformly (seed 42) in a 100 km square with a smooth field plus noise as
//! values. Steps timed: 8-nearest-neighbour weights, Moran's I with its
//! analytic moments, the seeded permutation test, the semivariogram (a
//! seeded sample of 10,000,000 pairs beyond 100,000 units), its model fits
//! and advice, and an exact semivariogram and correlogram of the first
//! 100,000 units (the exact limit). Targets (the issue): Moran's I with 8-NN
//! weights and 999 permutations at 1,000,000 units under 30 s on 2 cores.
//! Speed is checked here, never by timed tests.

use std::time::Instant;

use geofold::core::diagnostics::advice::{advise, AdviceParams};
use geofold::core::diagnostics::correlogram::Correlogram;
use geofold::core::diagnostics::moran::moran;
use geofold::core::diagnostics::pairs::{summarise_pairs, LagParams};
use geofold::core::diagnostics::permutation::{moran_permutation, PermutationParams};
use geofold::core::diagnostics::semivariogram::{semivariogram, Semivariogram};
use geofold::core::diagnostics::variogram_fit::fit_both;
use geofold::core::diagnostics::weights::{Transform, Weights};
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let n: usize = args
        .next()
        .map(|a| a.parse())
        .transpose()?
        .unwrap_or(1_000_000);
    let permutations: usize = args.next().map(|a| a.parse()).transpose()?.unwrap_or(999);
    println!(
        "bench_diagnostics: {n} units, {permutations} permutations, {} threads (rayon)",
        rayon::current_num_threads()
    );

    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let mut uniform = move || (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64;
    let side = 100_000.0;
    let points: Vec<[f64; 2]> = (0..n)
        .map(|_| [uniform() * side, uniform() * side])
        .collect();
    let values: Vec<f64> = points
        .iter()
        .map(|p| (p[0] / 5_000.0).sin() + (p[1] / 7_000.0).cos() + uniform() - 0.5)
        .collect();

    let started = Instant::now();
    let weights = Weights::k_nearest(&points, 8, Transform::Row)?;
    let knn_s = started.elapsed().as_secs_f64();
    println!(
        "8-NN weights (row-standardised):      {knn_s:8.2} s  ({} links)",
        weights.links()
    );

    let started = Instant::now();
    let analytic = moran(&weights, &values)?;
    let analytic_s = started.elapsed().as_secs_f64();
    println!(
        "Moran's I with analytic moments:      {analytic_s:8.2} s  (I = {:.4}, z_R = {:.1})",
        analytic.statistic, analytic.randomisation.z
    );

    let started = Instant::now();
    let test = moran_permutation(
        &weights,
        &values,
        &PermutationParams {
            permutations,
            seed: 42,
        },
    )?;
    let permutation_s = started.elapsed().as_secs_f64();
    println!(
        "permutation test:                     {permutation_s:8.2} s  (p_greater = {}, mean {:.2e}, sd {:.2e})",
        test.p_greater, test.mean, test.sd
    );
    println!(
        "Moran's I total (weights + I + test): {:8.2} s  (target < 30 s on 2 cores)",
        knn_s + analytic_s + permutation_s
    );

    let started = Instant::now();
    let params = LagParams {
        seed: 42,
        ..LagParams::default()
    };
    let sv = semivariogram(&points, &values, &params)?;
    let semivariogram_s = started.elapsed().as_secs_f64();
    println!(
        "semivariogram ({:?}): {semivariogram_s:8.2} s  (first lag: {} pairs visited, γ = {:.4})",
        sv.mode,
        sv.lags[0].pairs,
        sv.lags[0].gamma.unwrap_or(f64::NAN)
    );
    let started = Instant::now();
    let fits = fit_both(&sv)?;
    let advice = advise(&sv, &fits, &AdviceParams::default());
    println!(
        "fits and advice:                      {:8.3} s  (range {:.0}, block {:?})",
        started.elapsed().as_secs_f64(),
        advice.basis.as_ref().map_or(f64::NAN, |b| b.range),
        advice.block_size
    );

    let exact_n = n.min(100_000);
    let started = Instant::now();
    let summary = summarise_pairs(&points[..exact_n], &values[..exact_n], &params)?;
    let exact = Semivariogram::from_pairs(&summary);
    let correlogram = Correlogram::from_pairs(&summary)?;
    println!(
        "exact semivariogram + correlogram at {exact_n} units: {:8.2} s  ({} pairs in lags, I(first class) = {:.3})",
        started.elapsed().as_secs_f64(),
        exact.lags.iter().map(|l| l.pairs).sum::<u64>(),
        correlogram.classes[0].statistic.unwrap_or(f64::NAN)
    );
    Ok(())
}
