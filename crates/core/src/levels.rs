//! Pressure levels and layers.

use crate::CoreError;

/// Pressure levels in Pa, bottom-up (strictly decreasing pressure).
#[derive(Debug, Clone, PartialEq)]
pub struct Levels {
    pa: Vec<f64>,
}

/// A layer between two levels, by index into [`Levels`]: `bottom < top` as indices, so the
/// bottom has the higher pressure.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Layer {
    /// Index of the bottom (higher-pressure) level.
    pub bottom: usize,
    /// Index of the top (lower-pressure) level.
    pub top: usize,
}

impl Levels {
    /// Builds levels from pressures in Pa, strictly decreasing (bottom-up) and positive.
    pub fn from_pa(pa: Vec<f64>) -> Result<Self, CoreError> {
        if pa.is_empty() {
            return Err(CoreError::TooShort { axis: "pressure", len: 0, min: 1 });
        }
        if let Some(&value) = pa.iter().find(|p| !(p.is_finite() && **p > 0.0)) {
            return Err(CoreError::OutOfRange {
                axis: "pressure",
                value,
                expected: "a positive pressure in Pa",
            });
        }
        for (index, w) in pa.windows(2).enumerate() {
            if w[1] >= w[0] {
                return Err(CoreError::NotMonotonic {
                    axis: "pressure",
                    index: index + 1,
                    prev: w[0],
                    next: w[1],
                });
            }
        }
        Ok(Self { pa })
    }

    /// Number of levels.
    pub fn len(&self) -> usize {
        self.pa.len()
    }

    /// Always false: a `Levels` holds at least one level.
    pub fn is_empty(&self) -> bool {
        self.pa.is_empty()
    }

    /// Pressures in Pa, bottom-up.
    pub fn pa(&self) -> &[f64] {
        &self.pa
    }

    /// Pressure of level `idx` in hPa.
    pub fn hpa(&self, idx: usize) -> f64 {
        self.pa[idx] / 100.0
    }

    /// Pressures in hPa, bottom-up.
    pub fn all_hpa(&self) -> Vec<f64> {
        self.pa.iter().map(|p| p / 100.0).collect()
    }

    /// The index of the level at `hpa` (within 0.001 hPa).
    pub fn index_of_hpa(&self, hpa: f64) -> Result<usize, CoreError> {
        self.pa.iter().position(|p| (p / 100.0 - hpa).abs() < 1e-3).ok_or_else(|| {
            CoreError::LevelNotFound { wanted_hpa: hpa, available_hpa: self.all_hpa() }
        })
    }

    /// The layer from `bottom_hpa` up to `top_hpa`; both must be levels present.
    pub fn layer(&self, bottom_hpa: f64, top_hpa: f64) -> Result<Layer, CoreError> {
        if bottom_hpa <= top_hpa {
            return Err(CoreError::InvertedLayer { bottom_hpa, top_hpa });
        }
        Ok(Layer { bottom: self.index_of_hpa(bottom_hpa)?, top: self.index_of_hpa(top_hpa)? })
    }

    /// Every layer between adjacent levels, bottom-up.
    pub fn adjacent_layers(&self) -> Vec<Layer> {
        (1..self.pa.len()).map(|k| Layer { bottom: k - 1, top: k }).collect()
    }
}
