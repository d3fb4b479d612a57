//! The fold schemes through `geofold run`, on PostGIS and on GeoPackage, checked
//! against references outside geofold:
//! - PostGIS itself: `ST_DWithin` for the exclusion buffer, `ST_Union`/`ST_Area`
//!   for group regions, `ST_Distance` for nearest distances; GDAL's `ogr2ogr`
//!   makes the GeoPackage copy of each table;
//! - numpy (`numpy.linalg.lstsq`) refits on the training sets geofold recorded,
//!   scipy (`scipy.stats.wasserstein_distance`) for the match statistic,
//!   scikit-learn's Lloyd k-means for the clusters
//!   (`tests/python/schemes_reference.py`, run with the project's Python);
//! - values of `../shared/REFERENCES.md` §2.4 and §6.2 on the Columbus fixture
//!   (Anselin 1988, as shipped in libpysal 4.14.1).
//!
//! The generated layer is invented: a 20 × 15 lattice of points 100 m apart in
//! EPSG:32631 (x from 500 km, y from 5000 km) with made-up features, a text
//! district (7 column bands) and an integer zone. Real data: the Columbus
//! fixture (`tests/fixtures/columbus/`) and the 32 Mexican states of libpysal's
//! example `mexico` (Rey & Sastre Gutierrez 2010; libpysal 4.14.1, BSD-3),
//! read at test time from the project's Python environment.

#[path = "../common/mod.rs"]
mod common;

#[path = "../fixtures/loaders.rs"]
mod loaders;

mod buffer;
mod every_scheme;
mod groups;
mod matching;
mod refusals;
mod support;
