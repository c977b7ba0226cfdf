//! The units stage's checked parameters (number of units, sample, minimum mapping unit,
//! seed, method, optional features) and its errors, one per broken rule.

use super::cluster::{self, ClusterError};

/// The default sample k-means is fitted on.
pub const DEFAULT_SAMPLE: usize = 20_000;
/// The largest K tried when choosing the number of units.
pub const DEFAULT_MAX_UNITS: usize = 10;

/// Checked parameters of the units stage.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitParams {
    /// The number of units; `None` chooses it by silhouette.
    pub units: Option<usize>,
    pub max_units: usize,
    /// Pixels k-means is fitted on; `None` for every pixel.
    pub sample: Option<usize>,
    /// Regions smaller than this many pixels are merged away (1 = keep all).
    pub min_area: usize,
    pub seed: u64,
    pub method: cluster::Method,
    /// Add the albedo (1 − shade fraction, 0–1) to the features.
    pub albedo: bool,
    /// Add the fit RMSE, divided by the unexplained threshold (0–1 for explained pixels).
    pub rmse: bool,
}

impl Default for UnitParams {
    fn default() -> Self {
        UnitParams {
            units: None,
            max_units: DEFAULT_MAX_UNITS,
            sample: Some(DEFAULT_SAMPLE),
            min_area: 4,
            seed: 1,
            method: cluster::Method::KMeans,
            albedo: false,
            rmse: false,
        }
    }
}

/// Why units could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitsError {
    #[error(transparent)]
    Cluster(#[from] ClusterError),
    #[error("at least one unit is needed")]
    ZeroUnits,
    #[error("the minimum mapping unit is at least one pixel")]
    ZeroArea,
    #[error("the sample needs at least one pixel")]
    ZeroSample,
}

impl UnitParams {
    pub fn check(&self) -> Result<(), UnitsError> {
        if self.units == Some(0) {
            return Err(UnitsError::ZeroUnits);
        }
        if self.min_area == 0 {
            return Err(UnitsError::ZeroArea);
        }
        if self.sample == Some(0) {
            return Err(UnitsError::ZeroSample);
        }
        Ok(())
    }
}
