//! Physical constants and kernel settings (physics.md, "Constants").

/// Physical constants used by every diagnostic. The defaults are those of the project's
/// numerical contract; each may be overridden.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Constants {
    /// Standard gravity g0, m s⁻² (CGPM 1901; U.S. Standard Atmosphere 1976).
    pub g0: f64,
    /// Earth's rotation rate Ω, rad s⁻¹ (IERS / WMO).
    pub omega: f64,
    /// Sphere radius a, m (WMO GRIB2 code table 3.2).
    pub radius: f64,
    /// Gas constant of dry air R_d, J kg⁻¹ K⁻¹ (U.S. Standard Atmosphere 1976).
    pub r_dry: f64,
    /// Heat capacity of dry air at constant pressure c_pd, J kg⁻¹ K⁻¹ (common practice).
    pub cp_dry: f64,
    /// Virtual-temperature factor ε in T_v = T (1 + ε q) (common practice).
    pub virtual_factor: f64,
    /// Reference pressure for potential temperature, Pa (common practice).
    pub p_ref: f64,
}

impl Default for Constants {
    fn default() -> Self {
        Self {
            g0: 9.80665,
            omega: 7.292115e-5,
            radius: 6_371_229.0,
            r_dry: 287.05,
            cp_dry: 1004.6,
            virtual_factor: 0.608,
            p_ref: 100_000.0,
        }
    }
}

impl Constants {
    /// κ = R_d / c_pd.
    pub fn kappa(&self) -> f64 {
        self.r_dry / self.cp_dry
    }

    /// Coriolis parameter f = 2Ω sin φ for a latitude in degrees.
    pub fn coriolis(&self, lat_deg: f64) -> f64 {
        2.0 * self.omega * lat_deg.to_radians().sin()
    }
}

/// Everything the kernel needs besides the fields: the constants and the masking rules.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Config {
    /// Physical constants.
    pub constants: Constants,
    /// Half-width of the equatorial band, degrees, in which balance-based quantities are
    /// masked (physics.md: 5°).
    pub equator_band_deg: f64,
}

impl Default for Config {
    fn default() -> Self {
        Self { constants: Constants::default(), equator_band_deg: 5.0 }
    }
}
