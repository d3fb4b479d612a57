//! The pure core: units, folds, models, metrics and the validation itself.
//!
//! Nothing here touches a database, a file or async code: data in, values out.

pub mod buckets;
pub mod diagnostics;
pub mod folds;
pub mod geometry;
pub mod matching;
pub mod metrics;
pub mod models;
pub mod neighbours;
pub mod options;
pub mod parallel;
pub mod units;
pub mod validate;

#[cfg(test)]
pub mod testing;
