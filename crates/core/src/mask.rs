//! Why a cell has no value, and how many cells each reason removed.

/// The reason a layer's thermal wind is undefined at a cell (physics.md, "What is
/// undefined"). When several apply, the first in this order is recorded.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[repr(u8)]
pub enum MaskReason {
    /// The thermal wind is defined.
    Valid = 0,
    /// The layer's bottom lies below the ground at this cell.
    BelowGround = 1,
    /// A pole row, where the zonal derivative is singular.
    Pole = 2,
    /// Inside the equatorial band, where geostrophic balance fails.
    Equator = 3,
    /// An input is missing at the cell or at a stencil neighbour.
    Missing = 4,
}

impl MaskReason {
    /// Decodes the stored byte.
    pub fn from_u8(code: u8) -> Self {
        match code {
            0 => Self::Valid,
            1 => Self::BelowGround,
            2 => Self::Pole,
            3 => Self::Equator,
            _ => Self::Missing,
        }
    }
}

/// Cell counts by mask reason over some set of cells.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct MaskCounts {
    /// Cells where the thermal wind is defined.
    pub valid: usize,
    /// Cells in the equatorial band.
    pub equator: usize,
    /// Cells on a pole row.
    pub pole: usize,
    /// Cells with a missing input at the cell or a stencil neighbour.
    pub missing: usize,
    /// Cells where the layer is below ground.
    pub below_ground: usize,
}

impl MaskCounts {
    /// Counts one cell.
    pub fn add(&mut self, reason: MaskReason) {
        match reason {
            MaskReason::Valid => self.valid += 1,
            MaskReason::BelowGround => self.below_ground += 1,
            MaskReason::Pole => self.pole += 1,
            MaskReason::Equator => self.equator += 1,
            MaskReason::Missing => self.missing += 1,
        }
    }

    /// Adds another set of counts.
    pub fn merge(&mut self, other: &MaskCounts) {
        self.valid += other.valid;
        self.equator += other.equator;
        self.pole += other.pole;
        self.missing += other.missing;
        self.below_ground += other.below_ground;
    }

    /// All cells counted.
    pub fn total(&self) -> usize {
        self.valid + self.equator + self.pole + self.missing + self.below_ground
    }
}
