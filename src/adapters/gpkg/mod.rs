//! The GeoPackage adapter (being built: see issue "Embedded default").

pub mod export;

use std::path::Path;

use crate::adapters::{
    ColumnSpec, FinishedRun, ResultStore, RunRecord, Source, SourceInfo, StoreReport,
};
use crate::core::units::{Dataset, UnitCollector};
use crate::demo::DemoUnit;
use crate::error::Error;

fn not_yet() -> Error {
    Error::Internal("GeoPackage support is not built yet".into())
}

/// A GeoPackage layer opened as a source.
pub struct GpkgSource {
    info: SourceInfo,
}

impl GpkgSource {
    /// Opens a layer.
    ///
    /// # Errors
    /// Always, for now.
    pub fn open(
        _path: &Path,
        _layer: Option<&str>,
        _columns: &ColumnSpec,
    ) -> Result<GpkgSource, Error> {
        Err(not_yet())
    }
}

impl Source for GpkgSource {
    fn info(&self) -> &SourceInfo {
        &self.info
    }
    fn read(&mut self, _collector: &mut UnitCollector) -> Result<(), Error> {
        Err(not_yet())
    }
}

/// A GeoPackage results store.
pub struct GpkgStore;

impl GpkgStore {
    /// Opens or creates the file.
    ///
    /// # Errors
    /// Always, for now.
    pub fn open(_path: &Path) -> Result<GpkgStore, Error> {
        Err(not_yet())
    }
}

impl ResultStore for GpkgStore {
    fn prepare(&mut self, _info: &SourceInfo) -> Result<(), Error> {
        Err(not_yet())
    }
    fn begin(&mut self, _info: &SourceInfo, _records: &[RunRecord]) -> Result<(), Error> {
        Err(not_yet())
    }
    fn commit(
        &mut self,
        _info: &SourceInfo,
        _dataset: &Dataset,
        _runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error> {
        Err(not_yet())
    }
    fn fail(&mut self, _records: &[RunRecord], _message: &str) {}
}

/// Writes the demo scenario as a GeoPackage layer.
///
/// # Errors
/// Always, for now.
pub fn write_demo(_path: &Path, _units: &[DemoUnit]) -> Result<(), Error> {
    Err(not_yet())
}
