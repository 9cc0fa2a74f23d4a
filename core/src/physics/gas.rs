//! Perfect-gas relations: isentropic flow, Prandtl-Meyer expansion and normal shocks
//! (NACA Report 1135, 1953).
//!
//! ```
//! use jetloop_core::physics::gas::Gas;
//! let air = Gas::AIR;
//! let r = air.isentropic_at(2.0).unwrap();
//! assert!((r.pressure_ratio - 0.127_804_525_462_951).abs() < 1e-12);
//! ```

use super::bounds::{Bounds, RangeError, Setting};
use super::roots::newton_bracketed;

/// Largest ratio of specific heats of a perfect gas: 5/3, a monatomic gas (kinetic theory:
/// cv = 3/2 R with no internal degrees of freedom).
pub const MAX_GAMMA: f64 = 5.0 / 3.0;
/// Allowed ratio of specific heats, dimensionless: (1, 5/3].
pub const GAMMA: Bounds = Bounds::open_closed(1.0, MAX_GAMMA, "");
/// The allowed range of gamma in words, as error messages give it.
pub const GAMMA_ALLOWED: &str = "(1, 5/3]: no perfect gas has a ratio of specific heats above 5/3, \
the value of a monatomic gas (kinetic theory)";
/// Allowed specific gas constant, J/(kg K).
pub const GAS_CONSTANT: Bounds = Bounds::open_closed(0.0, 100_000.0, "J/(kg K)");
/// Allowed Mach number for isentropic relations, dimensionless.
pub const MACH: Bounds = Bounds::closed(0.0, 100.0, "");
/// Allowed upstream Mach number of a normal shock, dimensionless.
pub const SHOCK_MACH: Bounds = Bounds::closed(1.0, 100.0, "");
/// Allowed static-to-total ratios (temperature, pressure, density).
pub const STATIC_TO_TOTAL: Bounds = Bounds::open_closed(0.0, 1.0, "");
/// Allowed area ratio A/A*.
pub const AREA_RATIO: Bounds = Bounds::closed(1.0, 1e12, "");
/// Allowed Mach angle, degrees.
pub const MACH_ANGLE: Bounds = Bounds::open_closed(0.0, 90.0, "deg");

/// Ratio of specific heats of dry air (common practice).
pub const AIR_GAMMA: f64 = 1.4;
/// Specific gas constant of dry air, J/(kg K) (ICAO standard atmosphere, Doc 7488).
pub const AIR_GAS_CONSTANT: f64 = 287.05;
/// Ratio of specific heats of the jet gas when unset: dry air.
pub const JET_GAMMA: Setting =
    Setting::new("gamma", GAMMA, AIR_GAMMA, "dry air, common practice").explained(GAMMA_ALLOWED);
/// Specific gas constant of the jet gas when unset: dry air.
pub const JET_GAS_CONSTANT: Setting =
    Setting::new("gas_constant_j_per_kg_k", GAS_CONSTANT, AIR_GAS_CONSTANT, "dry air, common practice");
/// Ratio of specific heats of the surroundings when unset: dry air whatever the jet gas is.
pub const AMBIENT_GAMMA: Setting = Setting::new(
    "gamma",
    GAMMA,
    AIR_GAMMA,
    "the surroundings are dry air whatever the jet gas is (common practice)",
)
.explained(GAMMA_ALLOWED);
/// Specific gas constant of the surroundings when unset: dry air whatever the jet gas is.
pub const AMBIENT_GAS_CONSTANT: Setting = Setting::new(
    "gas_constant_j_per_kg_k",
    GAS_CONSTANT,
    AIR_GAS_CONSTANT,
    "the surroundings are dry air whatever the jet gas is (common practice)",
);

/// A calorically perfect gas.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Gas {
    gamma: f64,
    r: f64,
}

/// Which root of a relation with a subsonic and a supersonic solution.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Branch {
    /// Mach number at most 1.
    Subsonic,
    /// Mach number at least 1.
    Supersonic,
}

/// The one quantity an isentropic question starts from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum IsentropicInput {
    /// Mach number.
    Mach(f64),
    /// T/T0.
    TemperatureRatio(f64),
    /// p/p0.
    PressureRatio(f64),
    /// rho/rho0.
    DensityRatio(f64),
    /// A/A* with the branch to return.
    AreaRatio(f64, Branch),
    /// Mach angle in degrees (supersonic only).
    MachAngleDeg(f64),
    /// Prandtl-Meyer angle in degrees (supersonic only).
    PrandtlMeyerDeg(f64),
}

/// Isentropic ratios at one Mach number.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Isentropic {
    /// Mach number.
    pub mach: f64,
    /// T/T0.
    pub temperature_ratio: f64,
    /// p/p0.
    pub pressure_ratio: f64,
    /// rho/rho0.
    pub density_ratio: f64,
    /// A/A* (infinite at Mach 0).
    pub area_ratio: f64,
    /// Mach angle in degrees, for Mach >= 1.
    pub mach_angle_deg: Option<f64>,
    /// Prandtl-Meyer angle in degrees, for Mach >= 1.
    pub prandtl_meyer_deg: Option<f64>,
    /// V/a*, velocity over the critical speed of sound.
    pub critical_velocity_ratio: f64,
}

/// A plane oblique shock: upstream Mach number, wave angle and flow deflection.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ObliqueShock {
    /// Upstream Mach number M1.
    pub upstream_mach: f64,
    /// Wave angle beta between the shock and the upstream flow, degrees.
    pub wave_angle_deg: f64,
    /// Flow deflection theta across the shock, degrees.
    pub deflection_deg: f64,
    /// Static pressure ratio p2/p1.
    pub static_pressure_ratio: f64,
    /// Downstream Mach number M2.
    pub downstream_mach: f64,
}

/// Jump conditions across a normal shock.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NormalShock {
    /// Upstream Mach number M1.
    pub upstream_mach: f64,
    /// Downstream Mach number M2.
    pub downstream_mach: f64,
    /// p2/p1.
    pub static_pressure_ratio: f64,
    /// rho2/rho1.
    pub density_ratio: f64,
    /// T2/T1.
    pub static_temperature_ratio: f64,
    /// p02/p01.
    pub total_pressure_ratio: f64,
    /// p02/p1 (Rayleigh pitot formula).
    pub pitot_to_upstream_static_ratio: f64,
}

impl Gas {
    /// Dry air: gamma 1.4, R 287.05 J/(kg K).
    pub const AIR: Gas = Gas { gamma: AIR_GAMMA, r: AIR_GAS_CONSTANT };

    /// A perfect gas with ratio of specific heats `gamma` and gas constant `r` in J/(kg K).
    ///
    /// # Errors
    /// [`RangeError`] naming `gamma` or `gas_constant_j_per_kg_k` when outside [`GAMMA`] or
    /// [`GAS_CONSTANT`].
    pub fn new(gamma: f64, r: f64) -> Result<Self, RangeError> {
        if !GAMMA.contains(gamma) {
            return Err(RangeError::new("gamma", gamma, GAMMA_ALLOWED));
        }
        Ok(Self { gamma, r: GAS_CONSTANT.check("gas_constant_j_per_kg_k", r)? })
    }

    /// Ratio of specific heats.
    pub fn gamma(&self) -> f64 {
        self.gamma
    }

    /// Specific gas constant, J/(kg K).
    pub fn gas_constant(&self) -> f64 {
        self.r
    }

    /// Speed of sound sqrt(gamma R T) in m/s at static temperature `t` in K.
    pub fn sound_speed(&self, t: f64) -> f64 {
        (self.gamma * self.r * t).sqrt()
    }

    /// T0/T = 1 + (gamma-1)/2 M^2.
    pub fn total_to_static_temperature(&self, m: f64) -> f64 {
        1.0 + 0.5 * (self.gamma - 1.0) * m * m
    }

    /// T/T0 at Mach `m`.
    pub fn temperature_ratio(&self, m: f64) -> f64 {
        1.0 / self.total_to_static_temperature(m)
    }

    /// p/p0 at Mach `m`.
    pub fn pressure_ratio(&self, m: f64) -> f64 {
        self.temperature_ratio(m).powf(self.gamma / (self.gamma - 1.0))
    }

    /// rho/rho0 at Mach `m`.
    pub fn density_ratio(&self, m: f64) -> f64 {
        self.temperature_ratio(m).powf(1.0 / (self.gamma - 1.0))
    }

    /// ln(A/A*) at Mach `m` > 0, computed in log space so large ratios do not overflow.
    fn ln_area_ratio(&self, m: f64) -> f64 {
        let g = self.gamma;
        let e = (g + 1.0) / (2.0 * (g - 1.0));
        -m.ln() + e * ((2.0 / (g + 1.0)) * self.total_to_static_temperature(m)).ln()
    }

    /// A/A* at Mach `m` (infinite at 0).
    pub fn area_ratio(&self, m: f64) -> f64 {
        if m == 0.0 {
            f64::INFINITY
        } else {
            self.ln_area_ratio(m).exp()
        }
    }

    /// Prandtl-Meyer function nu(M) in radians for M >= 1.
    pub fn prandtl_meyer(&self, m: f64) -> f64 {
        let g = self.gamma;
        let k = ((g + 1.0) / (g - 1.0)).sqrt();
        let s = (m * m - 1.0).max(0.0).sqrt();
        k * (s / k).atan() - s.atan()
    }

    /// Largest Prandtl-Meyer angle (M -> infinity) in degrees: 90 (sqrt((g+1)/(g-1)) - 1).
    pub fn max_prandtl_meyer_deg(&self) -> f64 {
        90.0 * (((self.gamma + 1.0) / (self.gamma - 1.0)).sqrt() - 1.0)
    }

    /// Critical (choking) pressure ratio p0/p* = ((g+1)/2)^(g/(g-1)); 1.8929 for air.
    pub fn critical_pressure_ratio(&self) -> f64 {
        (0.5 * (self.gamma + 1.0)).powf(self.gamma / (self.gamma - 1.0))
    }

    /// Nozzle pressure ratio p0/p of an isentropic expansion to Mach `m`:
    /// (1 + (g-1)/2 M^2)^(g/(g-1)), the inverse of
    /// [`Gas::mach_from_total_to_static_pressure`].
    pub fn npr_for_mach(&self, m: f64) -> f64 {
        1.0 / self.pressure_ratio(m)
    }

    /// Mach number at which p0/p equals `npr` (isentropic expansion), for `npr` >= 1.
    pub fn mach_from_total_to_static_pressure(&self, npr: f64) -> f64 {
        let g = self.gamma;
        (2.0 / (g - 1.0) * (npr.powf((g - 1.0) / g) - 1.0)).max(0.0).sqrt()
    }

    fn mach_from_t0_over_t(&self, t0_over_t: f64) -> f64 {
        (2.0 / (self.gamma - 1.0) * (t0_over_t - 1.0)).max(0.0).sqrt()
    }

    /// Mach number from A/A* on the given branch.
    ///
    /// # Errors
    /// [`RangeError`] for `area_ratio` outside [`AREA_RATIO`].
    pub fn mach_from_area_ratio(&self, area_ratio: f64, branch: Branch) -> Result<f64, RangeError> {
        AREA_RATIO.check("area_ratio", area_ratio)?;
        if area_ratio == 1.0 {
            return Ok(1.0);
        }
        let target = area_ratio.ln();
        let g = self.gamma;
        // d ln(A/A*)/dM = (M^2 - 1) / (M (1 + (g-1)/2 M^2))
        let f = |m: f64| {
            let d = (m * m - 1.0) / (m * self.total_to_static_temperature(m));
            (self.ln_area_ratio(m) - target, d)
        };
        Ok(match branch {
            Branch::Subsonic => {
                // A/A* -> 1/M * const as M -> 0: the root lies above this lower bracket.
                let lo = (0.5 * (g + 1.0)).powf(-(g + 1.0) / (2.0 * (g - 1.0))) / area_ratio * 0.5;
                newton_bracketed(f, lo.min(0.5), 1.0)
            }
            Branch::Supersonic => {
                let mut hi = 2.0;
                while self.ln_area_ratio(hi) < target && hi < 1e12 {
                    hi *= 2.0;
                }
                newton_bracketed(f, 1.0, hi)
            }
        })
    }

    /// Mach number from a Prandtl-Meyer angle in degrees, [0, nu_max).
    ///
    /// # Errors
    /// [`RangeError`] naming `prandtl_meyer_angle_deg` outside `[0, nu_max(gamma))`.
    pub fn mach_from_prandtl_meyer_deg(&self, nu_deg: f64) -> Result<f64, RangeError> {
        let max = self.max_prandtl_meyer_deg();
        Bounds::closed_open(0.0, max, "deg").check("prandtl_meyer_angle_deg", nu_deg)?;
        if nu_deg == 0.0 {
            return Ok(1.0);
        }
        let target = nu_deg.to_radians();
        let f = |m: f64| {
            let d = (m * m - 1.0).sqrt() / (m * self.total_to_static_temperature(m));
            (self.prandtl_meyer(m) - target, d)
        };
        let mut hi = 2.0;
        while self.prandtl_meyer(hi) < target {
            hi *= 2.0;
            if hi > 1e15 {
                return Err(RangeError::new(
                    "prandtl_meyer_angle_deg",
                    nu_deg,
                    format!("[0, {max}) deg, and far enough below the limit that M < 1e15"),
                ));
            }
        }
        Ok(newton_bracketed(f, 1.0, hi))
    }

    /// All isentropic ratios at Mach `m`.
    ///
    /// # Errors
    /// [`RangeError`] naming `mach_number` outside [`MACH`].
    pub fn isentropic_at(&self, m: f64) -> Result<Isentropic, RangeError> {
        MACH.check("mach_number", m)?;
        let g = self.gamma;
        let supersonic = m >= 1.0;
        // V/a* = M sqrt((g+1)/2 / (1 + (g-1)/2 M^2))
        let critical_velocity_ratio = m * (0.5 * (g + 1.0) / self.total_to_static_temperature(m)).sqrt();
        Ok(Isentropic {
            mach: m,
            temperature_ratio: self.temperature_ratio(m),
            pressure_ratio: self.pressure_ratio(m),
            density_ratio: self.density_ratio(m),
            area_ratio: self.area_ratio(m),
            mach_angle_deg: supersonic.then(|| (1.0 / m).asin().to_degrees()),
            prandtl_meyer_deg: supersonic.then(|| self.prandtl_meyer(m).to_degrees()),
            critical_velocity_ratio,
        })
    }

    /// Solves the isentropic relations from any one quantity.
    ///
    /// # Errors
    /// [`RangeError`] naming the given quantity when it is outside its range.
    pub fn isentropic(&self, input: IsentropicInput) -> Result<Isentropic, RangeError> {
        let g = self.gamma;
        let m = match input {
            IsentropicInput::Mach(m) => m,
            IsentropicInput::TemperatureRatio(r) => {
                self.mach_from_t0_over_t(1.0 / STATIC_TO_TOTAL.check("temperature_ratio", r)?)
            }
            IsentropicInput::PressureRatio(r) => {
                let r = STATIC_TO_TOTAL.check("pressure_ratio", r)?;
                self.mach_from_t0_over_t((1.0 / r).powf((g - 1.0) / g))
            }
            IsentropicInput::DensityRatio(r) => {
                let r = STATIC_TO_TOTAL.check("density_ratio", r)?;
                self.mach_from_t0_over_t((1.0 / r).powf(g - 1.0))
            }
            IsentropicInput::AreaRatio(a, b) => self.mach_from_area_ratio(a, b)?,
            IsentropicInput::MachAngleDeg(mu) => {
                1.0 / MACH_ANGLE.check("mach_angle_deg", mu)?.to_radians().sin()
            }
            IsentropicInput::PrandtlMeyerDeg(nu) => self.mach_from_prandtl_meyer_deg(nu)?,
        };
        // A result beyond the Mach range (a ratio very close to 0) is reported against the
        // input the caller gave, not against a Mach number they never sent.
        self.isentropic_at(m).map_err(|e| match input {
            IsentropicInput::Mach(_) => e,
            _ => RangeError::new(
                input_name(&input),
                input_value(&input),
                format!("values whose Mach number lies in {MACH}"),
            ),
        })
    }

    /// Normal-shock relations for upstream Mach `m1`.
    ///
    /// # Errors
    /// [`RangeError`] naming `upstream_mach_number` outside [`SHOCK_MACH`].
    pub fn normal_shock(&self, m1: f64) -> Result<NormalShock, RangeError> {
        SHOCK_MACH.check("upstream_mach_number", m1)?;
        let g = self.gamma;
        let m1s = m1 * m1;
        let m2 = ((1.0 + 0.5 * (g - 1.0) * m1s) / (g * m1s - 0.5 * (g - 1.0))).sqrt();
        let p = 1.0 + 2.0 * g / (g + 1.0) * (m1s - 1.0);
        let rho = (g + 1.0) * m1s / ((g - 1.0) * m1s + 2.0);
        let t = p / rho;
        // p02/p01 = (p2/p1) (p02/p2) / (p01/p1)
        let p0 = p * self.pressure_ratio(m1) / self.pressure_ratio(m2);
        let pitot = p / self.pressure_ratio(m2);
        Ok(NormalShock {
            upstream_mach: m1,
            downstream_mach: m2,
            static_pressure_ratio: p,
            density_ratio: rho,
            static_temperature_ratio: t,
            total_pressure_ratio: p0,
            pitot_to_upstream_static_ratio: pitot,
        })
    }
}

impl Gas {
    /// Flow deflection theta in radians across an oblique shock of wave angle `beta` (radians)
    /// at upstream Mach `m1`: tan theta = 2 cot beta (M1^2 sin^2 beta - 1) /
    /// (M1^2 (g + cos 2 beta) + 2) (NACA Report 1135, oblique-shock relations).
    pub fn oblique_deflection(&self, m1: f64, beta: f64) -> f64 {
        let g = self.gamma;
        let (s, m2) = (beta.sin(), m1 * m1);
        (2.0 / beta.tan() * (m2 * s * s - 1.0) / (m2 * (g + (2.0 * beta).cos()) + 2.0)).atan()
    }

    /// Largest deflection in degrees that an attached oblique shock can give at Mach `m` > 1,
    /// from the wave angle of the maximum in closed form: sin^2 beta = [(g+1) M^2 - 4 +
    /// sqrt((g+1)((g+1) M^4 + 8 (g-1) M^2 + 16))] / (4 g M^2)
    /// (NACA Report 1135, oblique-shock relations).
    /// 0 for `m` <= 1.
    pub fn max_deflection_deg(&self, m: f64) -> f64 {
        if m <= 1.0 {
            return 0.0;
        }
        let g = self.gamma;
        let m2 = m * m;
        let root = ((g + 1.0) * ((g + 1.0) * m2 * m2 + 8.0 * (g - 1.0) * m2 + 16.0)).sqrt();
        let s2 = ((g + 1.0) * m2 - 4.0 + root) / (4.0 * g * m2);
        self.oblique_deflection(m, s2.sqrt().asin()).to_degrees()
    }

    /// The weak oblique shock at upstream Mach `m1` with static pressure ratio `p_ratio` =
    /// p2/p1: M1 sin beta = sqrt(1 + (g+1)/(2g) (p2/p1 - 1)) (NACA Report 1135, oblique-shock relations).
    /// `None` when `m1` <= 1 or `p_ratio` is not in [1, p2/p1 of the normal shock at `m1`].
    pub fn oblique_shock_for_pressure_ratio(&self, m1: f64, p_ratio: f64) -> Option<ObliqueShock> {
        if m1.is_nan() || p_ratio.is_nan() || m1 <= 1.0 || p_ratio < 1.0 {
            return None;
        }
        let g = self.gamma;
        let m1n2 = 1.0 + (g + 1.0) / (2.0 * g) * (p_ratio - 1.0);
        let sin_beta = (m1n2 / (m1 * m1)).sqrt();
        if sin_beta > 1.0 {
            return None;
        }
        let beta = sin_beta.asin();
        let theta = self.oblique_deflection(m1, beta);
        let m2n2 = (1.0 + 0.5 * (g - 1.0) * m1n2) / (g * m1n2 - 0.5 * (g - 1.0));
        let downstream_mach = m2n2.sqrt() / (beta - theta).sin();
        Some(ObliqueShock {
            upstream_mach: m1,
            wave_angle_deg: beta.to_degrees(),
            deflection_deg: theta.to_degrees(),
            static_pressure_ratio: p_ratio,
            downstream_mach,
        })
    }
}

fn input_name(i: &IsentropicInput) -> &'static str {
    match i {
        IsentropicInput::Mach(_) => "mach_number",
        IsentropicInput::TemperatureRatio(_) => "temperature_ratio",
        IsentropicInput::PressureRatio(_) => "pressure_ratio",
        IsentropicInput::DensityRatio(_) => "density_ratio",
        IsentropicInput::AreaRatio(..) => "area_ratio",
        IsentropicInput::MachAngleDeg(_) => "mach_angle_deg",
        IsentropicInput::PrandtlMeyerDeg(_) => "prandtl_meyer_angle_deg",
    }
}

fn input_value(i: &IsentropicInput) -> f64 {
    match *i {
        IsentropicInput::Mach(v)
        | IsentropicInput::TemperatureRatio(v)
        | IsentropicInput::PressureRatio(v)
        | IsentropicInput::DensityRatio(v)
        | IsentropicInput::AreaRatio(v, _)
        | IsentropicInput::MachAngleDeg(v)
        | IsentropicInput::PrandtlMeyerDeg(v) => v,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    /// NACA Report 1135 (1953), Table I (isentropic) and Table II (normal shock), gamma = 1.4,
    /// printed to 5 significant figures. Rows are M, p/p0, T/T0, rho/rho0, A/A*, nu (deg).
    /// The values were written down from memory (../shared/physics.md) and each one agrees with
    /// the closed forms of the same report to the printed digits, which this test also checks.
    type IsentropicRow = (f64, f64, f64, f64, f64, Option<f64>);
    const NACA_1135_ISENTROPIC: &[IsentropicRow] = &[
        (0.5, 0.84302, 0.95238, 0.88517, 1.3398, None),
        (0.8, 0.65602, 0.88652, 0.74000, 1.0382, None),
        (1.5, 0.27240, 0.68966, 0.39498, 1.1762, Some(11.905)),
        (2.0, 0.12780, 0.55556, 0.23005, 1.6875, Some(26.380)),
        (2.5, 0.058528, 0.44444, 0.13169, 2.6367, Some(39.124)),
        (3.0, 0.027224, 0.35714, 0.076226, 4.2346, Some(49.757)),
    ];

    /// Rows are M1, M2, p2/p1, rho2/rho1, T2/T1, p02/p01 (NACA 1135, Table II; memory,
    /// confirmed against the closed forms to the printed digits).
    const NACA_1135_SHOCK: &[(f64, f64, f64, f64, f64, f64)] = &[
        (1.5, 0.70109, 2.4583, 1.8621, 1.3202, 0.92978),
        (2.0, 0.57735, 4.5000, 2.6667, 1.6875, 0.72087),
        (3.0, 0.47519, 10.333, 3.8571, 2.6790, 0.32834),
    ];

    #[test]
    fn naca_1135_isentropic_table_to_5_significant_digits() {
        let air = Gas::AIR;
        for &(m, p, t, rho, a, nu) in NACA_1135_ISENTROPIC {
            let r = air.isentropic_at(m).unwrap();
            assert!(rel(r.pressure_ratio, p) < 5e-5, "p/p0 at M={m}: {}", r.pressure_ratio);
            assert!(rel(r.temperature_ratio, t) < 5e-5, "T/T0 at M={m}");
            assert!(rel(r.density_ratio, rho) < 5e-5, "rho/rho0 at M={m}");
            assert!(rel(r.area_ratio, a) < 5e-5, "A/A* at M={m}: {}", r.area_ratio);
            match nu {
                Some(nu) => assert!(rel(r.prandtl_meyer_deg.unwrap(), nu) < 5e-5),
                None => assert!(r.prandtl_meyer_deg.is_none()),
            }
        }
    }

    #[test]
    fn naca_1135_normal_shock_table_to_5_significant_digits() {
        for &(m1, m2, p, rho, t, p0) in NACA_1135_SHOCK {
            let s = Gas::AIR.normal_shock(m1).unwrap();
            assert!(rel(s.downstream_mach, m2) < 5e-5, "M2 at {m1}");
            assert!(rel(s.static_pressure_ratio, p) < 5e-5);
            assert!(rel(s.density_ratio, rho) < 5e-5);
            assert!(rel(s.static_temperature_ratio, t) < 5e-5);
            assert!(rel(s.total_pressure_ratio, p0) < 5e-5, "p02/p01 at {m1}");
        }
    }

    #[test]
    fn closed_form_facts() {
        // Critical pressure ratio ((g+1)/2)^(g/(g-1)) = 1.2^3.5 = 1.892929... (closed form)
        assert!((Gas::AIR.critical_pressure_ratio() - 1.892_929_158_737_854).abs() < 1e-12);
        // Prandtl-Meyer limit for air: 90 (sqrt(6) - 1) = 130.454... deg (closed form)
        assert!((Gas::AIR.max_prandtl_meyer_deg() - 90.0 * (6f64.sqrt() - 1.0)).abs() < 1e-12);
        // Sonic point: A/A* = 1, nu = 0, shock of zero strength.
        let s = Gas::AIR.isentropic_at(1.0).unwrap();
        assert!((s.area_ratio - 1.0).abs() < 1e-15);
        assert_eq!(s.prandtl_meyer_deg, Some(0.0));
        let n = Gas::AIR.normal_shock(1.0).unwrap();
        assert!((n.total_pressure_ratio - 1.0).abs() < 1e-14);
        // Rayleigh pitot at M = 2, gamma 1.4: p02/p1 = 5.6404 (NACA 1135 Table II; memory,
        // equals p02/p01 / (p/p0) = 0.72087 / 0.12780).
        assert!(rel(n.pitot_to_upstream_static_ratio, 1.0 / Gas::AIR.pressure_ratio(1.0)) < 1e-12);
        let n2 = Gas::AIR.normal_shock(2.0).unwrap();
        assert!(rel(n2.pitot_to_upstream_static_ratio, 5.6404) < 5e-5);
    }

    #[test]
    fn inverse_from_every_ratio() {
        let air = Gas::AIR;
        for (input, m) in [
            (IsentropicInput::PressureRatio(0.12780452546295096), 2.0),
            (IsentropicInput::TemperatureRatio(5.0 / 9.0), 2.0),
            (IsentropicInput::DensityRatio(0.23004814583331168), 2.0),
            (IsentropicInput::AreaRatio(1.6875, Branch::Supersonic), 2.0),
            (IsentropicInput::AreaRatio(1.33984375, Branch::Subsonic), 0.5),
            (IsentropicInput::MachAngleDeg(30.0), 2.0),
            (IsentropicInput::PrandtlMeyerDeg(26.379760813416457), 2.0),
        ] {
            let r = air.isentropic(input).unwrap();
            assert!(rel(r.mach, m) < 1e-12, "{input:?} gave {}", r.mach);
        }
    }

    #[test]
    fn out_of_range_inputs_are_named() {
        let air = Gas::AIR;
        let e = air.isentropic(IsentropicInput::PressureRatio(1.5)).unwrap_err();
        assert_eq!(e.quantity, "pressure_ratio");
        let e = air.isentropic(IsentropicInput::PrandtlMeyerDeg(131.0)).unwrap_err();
        assert_eq!(e.quantity, "prandtl_meyer_angle_deg");
        let e = air.isentropic(IsentropicInput::AreaRatio(0.5, Branch::Subsonic)).unwrap_err();
        assert_eq!(e.quantity, "area_ratio");
        assert_eq!(Gas::new(1.0, 287.0).unwrap_err().quantity, "gamma");
        assert_eq!(Gas::new(1.4, -1.0).unwrap_err().quantity, "gas_constant_j_per_kg_k");
        let e = air.normal_shock(0.9).unwrap_err();
        assert_eq!(e.quantity, "upstream_mach_number");
        let e = air.isentropic(IsentropicInput::PressureRatio(1e-300)).unwrap_err();
        assert_eq!(e.quantity, "pressure_ratio");
    }

    #[test]
    fn gamma_above_five_thirds_is_refused_with_the_reason() {
        // Kinetic theory: a monatomic perfect gas has gamma = 5/3, the largest of any gas.
        assert!(Gas::new(5.0 / 3.0, 2077.1).is_ok());
        let e = Gas::new(1.7, 287.0).unwrap_err();
        assert_eq!(e.quantity, "gamma");
        assert!(e.allowed.contains("5/3") && e.allowed.contains("monatomic"), "{}", e.allowed);
    }

    #[test]
    fn maximum_deflection_matches_pygasflow() {
        // pygasflow 2.x shockwave.max_theta_from_mach(M, 1.4) (PyPI), printed to 1e-12:
        // M 1.5 -> 12.112668885790837, 2 -> 22.97353176093536, 3 -> 34.0734397756058 deg
        // (NACA 1135 chart: 12.1, 23.0, 34.1; memory).
        let air = Gas::AIR;
        for (m, deg) in
            [(1.5, 12.112_668_885_790_837), (2.0, 22.973_531_760_935_36), (3.0, 34.073_439_775_605_8)]
        {
            assert!((air.max_deflection_deg(m) - deg).abs() < 1e-9, "M {m}: {}", air.max_deflection_deg(m));
        }
        // The closed-form wave angle is the maximum of a brute-force scan (slow reference).
        let g = Gas::new(1.3, 300.0).unwrap();
        for m in [1.2, 2.5, 6.0] {
            let scan = (1..200_000)
                .map(|i| g.oblique_deflection(m, f64::from(i) * std::f64::consts::FRAC_PI_2 / 200_000.0))
                .fold(f64::MIN, f64::max)
                .to_degrees();
            assert!((g.max_deflection_deg(m) - scan).abs() < 1e-6, "M {m}");
        }
    }

    #[test]
    fn oblique_shock_from_pressure_ratio_matches_pygasflow() {
        // M1 = 2, theta = 10 deg, weak shock: beta 39.31393184481887 deg, p2/p1
        // 1.706578604000033, M2 1.6405222290010812 (pygasflow shockwave.beta_from_mach_theta,
        // get_ratios_from_normal_mach_upstream, oblique_mach_downstream; NACA 1135 chart
        // 39.3 deg, 1.71, 1.64 from memory).
        let s = Gas::AIR.oblique_shock_for_pressure_ratio(2.0, 1.706_578_604_000_033).unwrap();
        assert!((s.wave_angle_deg - 39.313_931_844_818_87).abs() < 1e-9);
        assert!((s.deflection_deg - 10.0).abs() < 1e-9);
        assert!(rel(s.downstream_mach, 1.640_522_229_001_081_2) < 1e-9);
        // The normal-shock limit: beta 90 deg, no deflection, M2 of the normal shock.
        let ns = Gas::AIR.normal_shock(2.0).unwrap();
        let n = Gas::AIR.oblique_shock_for_pressure_ratio(2.0, ns.static_pressure_ratio).unwrap();
        assert!((n.wave_angle_deg - 90.0).abs() < 1e-6 && n.deflection_deg.abs() < 1e-6);
        assert!(rel(n.downstream_mach, ns.downstream_mach) < 1e-9);
        assert!(Gas::AIR.oblique_shock_for_pressure_ratio(2.0, ns.static_pressure_ratio * 1.01).is_none());
        assert!(Gas::AIR.oblique_shock_for_pressure_ratio(0.9, 1.2).is_none());
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(512))]

        /// Round trip M -> ratio -> M to 1e-12 relative for every ratio, any gamma in
        /// [1.05, 1.666] (property test; closed-form inverses and the safeguarded Newton solver).
        #[test]
        fn round_trip_mach_ratio_mach(m in 0.1f64..10.0, g in 1.05f64..1.666) {
            let gas = Gas::new(g, 287.05).unwrap();
            let r = gas.isentropic_at(m).unwrap();
            let branch = if m < 1.0 { Branch::Subsonic } else { Branch::Supersonic };
            let mut inputs = vec![
                IsentropicInput::TemperatureRatio(r.temperature_ratio),
                IsentropicInput::PressureRatio(r.pressure_ratio),
                IsentropicInput::DensityRatio(r.density_ratio),
            ];
            // A/A* and nu are flat at M = 1 (derivatives vanish): the inverse is
            // ill-conditioned there, so the strict tolerance applies away from it.
            if (m - 1.0).abs() > 0.05 {
                inputs.push(IsentropicInput::AreaRatio(r.area_ratio, branch));
            }
            if m > 1.05 {
                inputs.push(IsentropicInput::MachAngleDeg(r.mach_angle_deg.unwrap()));
                inputs.push(IsentropicInput::PrandtlMeyerDeg(r.prandtl_meyer_deg.unwrap()));
            }
            for i in inputs {
                let back = gas.isentropic(i).unwrap().mach;
                prop_assert!(rel(back, m) < 1e-12, "{:?}: {} vs {}", i, back, m);
            }
        }
    }
}
