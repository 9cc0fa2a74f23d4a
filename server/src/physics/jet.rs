//! Nozzles, operating points and the fully expanded jet (Tam & Tanna 1982, J. Sound Vib. 81).
//!
//! The fully expanded state is the one the jet would have if it expanded isentropically from
//! the reservoir to ambient pressure: Mach number Mj = sqrt(2/(g-1) (NPR^((g-1)/g) - 1)),
//! temperature, velocity, and the size that carries the nozzle's mass flow at that state.
//!
//! ```
//! use jetloop_server::physics::{gas::Gas, jet::{Nozzle, OperatingPoint, jet_state}};
//! let nozzle = Nozzle::round_convergent(0.0254).unwrap();
//! let op = OperatingPoint::new(4.0, 101_325.0, 288.15, 288.15).unwrap();
//! let s = jet_state(&Gas::AIR, &nozzle, &op);
//! assert!((s.mj - 1.558_83).abs() < 1e-5); // sqrt(5 (4^(2/7) - 1)), closed form
//! ```

use super::bounds::{Bounds, RangeError};
use super::gas::{Branch, Gas};

/// Allowed nozzle dimension (diameter, height, width), m.
pub const LENGTH: Bounds = Bounds::open_closed(0.0, 100.0, "m");
/// Allowed design Mach number.
pub const DESIGN_MACH: Bounds = Bounds::closed(1.0, 20.0, "");
/// Allowed exit-to-throat area ratio of a convergent-divergent nozzle.
pub const NOZZLE_AREA_RATIO: Bounds = Bounds::closed(1.0, 1e6, "");
/// Allowed nozzle pressure ratio p0/p_ambient.
pub const NPR: Bounds = Bounds::closed(1.0, 1000.0, "");
/// Allowed absolute pressure, Pa.
pub const PRESSURE: Bounds = Bounds::open_closed(0.0, 1e9, "Pa");
/// Allowed absolute temperature, K.
pub const TEMPERATURE: Bounds = Bounds::open_closed(0.0, 5000.0, "K");

/// ICAO standard atmosphere at sea level: pressure in Pa.
pub const ISA_SEA_LEVEL_PRESSURE_PA: f64 = 101_325.0;
/// ICAO standard atmosphere at sea level: temperature in K.
pub const ISA_SEA_LEVEL_TEMPERATURE_K: f64 = 288.15;

/// Exit-to-ambient pressure ratio above which a Mach disk is expected in an under-expanded
/// jet (common practice: a convergent nozzle above NPR about 3.8, i.e. pe/pa about 2).
pub const MACH_DISK_EXIT_PRESSURE_RATIO: f64 = 2.0;

/// Relative tolerance within which the operating point counts as ideally expanded.
pub const IDEAL_TOLERANCE: f64 = 1e-9;

/// A cross-section: the nozzle exit ([`Shape`]) or the fully expanded jet ([`JetSize`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Section {
    /// Round, of diameter `diameter_m` (m).
    Round {
        /// Diameter, m.
        diameter_m: f64,
    },
    /// Rectangular; `height_m` is the short side (m).
    Rectangular {
        /// Height (short side), m.
        height_m: f64,
        /// Width (long side), m.
        width_m: f64,
    },
    /// Two-dimensional, of height `height_m` (m) and infinite span.
    Planar {
        /// Height, m.
        height_m: f64,
    },
}

impl Section {
    /// The length Strouhal numbers and positions are scaled with: the diameter of a round
    /// section, the height otherwise, m.
    pub fn reference_length_m(&self) -> f64 {
        match *self {
            Section::Round { diameter_m } => diameter_m,
            Section::Rectangular { height_m, .. } | Section::Planar { height_m } => height_m,
        }
    }
}

/// Cross-section of the nozzle exit.
pub type Shape = Section;

/// A nozzle: exit shape and design Mach number (1 for a convergent nozzle).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Nozzle {
    shape: Shape,
    design_mach: f64,
}

impl Nozzle {
    /// Round convergent nozzle of exit diameter `d` in m.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` outside [`LENGTH`].
    pub fn round_convergent(d: f64) -> Result<Self, RangeError> {
        Ok(Self { shape: Shape::Round { diameter_m: LENGTH.check("exit_diameter_m", d)? }, design_mach: 1.0 })
    }

    /// Round convergent-divergent nozzle of exit diameter `d` in m and design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` or `design_mach_number`.
    pub fn round_cd(d: f64, md: f64) -> Result<Self, RangeError> {
        Ok(Self {
            shape: Shape::Round { diameter_m: LENGTH.check("exit_diameter_m", d)? },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Round convergent-divergent nozzle from its exit-to-throat area ratio; the design Mach
    /// number is the supersonic root of A/A* for `gas`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` or `exit_to_throat_area_ratio`.
    pub fn round_cd_from_area_ratio(d: f64, area_ratio: f64, gas: &Gas) -> Result<Self, RangeError> {
        let ar = NOZZLE_AREA_RATIO.check("exit_to_throat_area_ratio", area_ratio)?;
        let md = gas
            .mach_from_area_ratio(ar, Branch::Supersonic)
            .map_err(|e| RangeError { quantity: "exit_to_throat_area_ratio", ..e })?;
        Self::round_cd(d, md).map_err(|e| match e.quantity {
            "design_mach_number" => RangeError::new(
                "exit_to_throat_area_ratio",
                area_ratio,
                format!("ratios whose design Mach number lies in {DESIGN_MACH}"),
            ),
            _ => e,
        })
    }

    /// Rectangular nozzle, exit height `h` (short side) and width `b` in m, design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_height_m`, `exit_width_m` (also when narrower than the
    /// height) or `design_mach_number`.
    pub fn rectangular(h: f64, b: f64, md: f64) -> Result<Self, RangeError> {
        let h = LENGTH.check("exit_height_m", h)?;
        let b =
            Bounds::closed(h, LENGTH.max, "m (not less than the exit height)").check("exit_width_m", b)?;
        Ok(Self {
            shape: Shape::Rectangular { height_m: h, width_m: b },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Planar nozzle of exit height `h` in m and design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_height_m` or `design_mach_number`.
    pub fn planar(h: f64, md: f64) -> Result<Self, RangeError> {
        Ok(Self {
            shape: Shape::Planar { height_m: LENGTH.check("exit_height_m", h)? },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Exit shape.
    pub fn shape(&self) -> Shape {
        self.shape
    }

    /// Design Mach number (1 for convergent nozzles).
    pub fn design_mach(&self) -> f64 {
        self.design_mach
    }

    /// Exit area in m^2 (round, rectangular) or exit height in m (planar, per metre of span).
    fn exit_measure(&self) -> f64 {
        match self.shape {
            Shape::Round { diameter_m } => std::f64::consts::PI * 0.25 * diameter_m * diameter_m,
            Shape::Rectangular { height_m, width_m } => height_m * width_m,
            Shape::Planar { height_m } => height_m,
        }
    }
}

/// Reservoir and ambient conditions.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatingPoint {
    npr: f64,
    ambient_pressure_pa: f64,
    total_temperature_k: f64,
    ambient_temperature_k: f64,
}

impl OperatingPoint {
    /// Operating point from the nozzle pressure ratio, ambient pressure (Pa), total and
    /// ambient temperatures (K).
    ///
    /// # Errors
    /// [`RangeError`] naming `nozzle_pressure_ratio`, `ambient_pressure_pa`,
    /// `total_temperature_k` or `ambient_temperature_k`.
    pub fn new(npr: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        Ok(Self {
            npr: NPR.check("nozzle_pressure_ratio", npr)?,
            ambient_pressure_pa: PRESSURE.check("ambient_pressure_pa", p_amb)?,
            total_temperature_k: TEMPERATURE.check("total_temperature_k", t0)?,
            ambient_temperature_k: TEMPERATURE.check("ambient_temperature_k", t_amb)?,
        })
    }

    /// Operating point from reservoir total and ambient pressures in Pa.
    ///
    /// # Errors
    /// As [`OperatingPoint::new`], with `total_pressure_pa` named when it is out of range or
    /// below the ambient pressure.
    pub fn from_pressures(p0: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        let p0 = PRESSURE.check("total_pressure_pa", p0)?;
        let p_amb = PRESSURE.check("ambient_pressure_pa", p_amb)?;
        let npr = p0 / p_amb;
        if !NPR.contains(npr) {
            return Err(RangeError::new(
                "total_pressure_pa",
                p0,
                format!("values that give p0/p_ambient in {NPR} (ambient {p_amb} Pa)"),
            ));
        }
        Self::new(npr, p_amb, t0, t_amb)
    }

    /// Nozzle pressure ratio p0/p_ambient.
    pub fn npr(&self) -> f64 {
        self.npr
    }

    /// Ambient pressure, Pa.
    pub fn ambient_pressure_pa(&self) -> f64 {
        self.ambient_pressure_pa
    }

    /// Reservoir total temperature, K.
    pub fn total_temperature_k(&self) -> f64 {
        self.total_temperature_k
    }

    /// Ambient temperature, K.
    pub fn ambient_temperature_k(&self) -> f64 {
        self.ambient_temperature_k
    }

    /// The same point at another nozzle pressure ratio.
    ///
    /// # Errors
    /// [`RangeError`] naming `nozzle_pressure_ratio`.
    pub fn with_npr(&self, npr: f64) -> Result<Self, RangeError> {
        Ok(Self { npr: NPR.check("nozzle_pressure_ratio", npr)?, ..*self })
    }
}

/// How the flow leaves the nozzle.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Regime {
    /// Subsonic jet: no shock cells.
    Subsonic,
    /// Convergent-divergent nozzle with a normal shock inside the divergent part.
    ShockInNozzle,
    /// Exit pressure below ambient.
    OverExpanded,
    /// Exit pressure equals ambient.
    IdeallyExpanded,
    /// Exit pressure above ambient.
    UnderExpanded,
}

/// Fully expanded dimensions of the jet (Dj, or hj and bj), by nozzle shape.
pub type JetSize = Section;

/// The fully expanded jet and the nozzle flow that produces it.
#[derive(Debug, Clone, PartialEq)]
pub struct JetState {
    /// Gas used.
    pub gas: Gas,
    /// Nozzle pressure ratio p0/p_ambient.
    pub npr: f64,
    /// Reservoir total pressure, Pa.
    pub total_pressure_pa: f64,
    /// Ambient static pressure, Pa.
    pub ambient_pressure_pa: f64,
    /// Reservoir total temperature, K.
    pub total_temperature_k: f64,
    /// Ambient static temperature, K.
    pub ambient_temperature_k: f64,
    /// Design Mach number Md.
    pub md: f64,
    /// NPR at which the nozzle is ideally expanded.
    pub design_npr: f64,
    /// Expansion regime.
    pub regime: Regime,
    /// True when shock cells can form (Mj > 1 and no shock in the nozzle).
    pub supersonic: bool,
    /// Fully expanded Mach number Mj.
    pub mj: f64,
    /// Off-design parameter beta = sqrt(|Mj^2 - Md^2|).
    pub beta: f64,
    /// Fully expanded static temperature Tj, K.
    pub tj_k: f64,
    /// Fully expanded velocity Uj, m/s.
    pub uj_m_s: f64,
    /// Fully expanded density, kg/m^3.
    pub rho_j_kg_m3: f64,
    /// Jet sound speed aj, m/s.
    pub aj_m_s: f64,
    /// Ambient sound speed, m/s.
    pub a_amb_m_s: f64,
    /// Acoustic Mach number Uj / a_ambient.
    pub acoustic_mach: f64,
    /// Exit Mach number.
    pub exit_mach: f64,
    /// Exit static pressure, Pa.
    pub exit_pressure_pa: f64,
    /// Aj / Ae (for planar nozzles, hj / h).
    pub area_ratio: f64,
    /// Fully expanded dimensions.
    pub size: JetSize,
    /// Exit area, m^2 (None for planar nozzles).
    pub exit_area_m2: Option<f64>,
    /// Mass flow, kg/s (kg/(s m) for planar nozzles).
    pub mass_flow: f64,
    /// Throat choked.
    pub choked: bool,
    /// Mach disk expected (common practice).
    pub mach_disk_expected: bool,
    /// T0 / T_ambient.
    pub temperature_ratio: f64,
    /// NPR at which the throat chokes (critical ratio for convergent nozzles).
    pub choking_npr: f64,
    /// NPR at which a normal shock stands in the exit plane (C-D nozzles).
    pub exit_shock_npr: f64,
}

impl JetState {
    /// Sentences explaining the regime, flags and assumptions (built on demand: sweeps do not
    /// pay for the formatting).
    pub fn notes(&self) -> Vec<String> {
        let mut notes = Vec::new();
        let (npr, p_amb, pe, design) =
            (self.npr, self.ambient_pressure_pa, self.exit_pressure_pa, self.design_npr);
        match self.regime {
            Regime::Subsonic => notes.push(format!(
                "Subsonic jet: NPR {npr:.4} is below the choking ratio {:.4}; there are no shock \
                 cells and no screech.",
                self.choking_npr
            )),
            Regime::ShockInNozzle => notes.push(format!(
                "A normal shock stands inside the divergent part of the nozzle (NPR between \
                 {:.4} and {:.4}): the exit flow is subsonic and the fully expanded values \
                 assume an isentropic expansion that does not happen.",
                self.choking_npr, self.exit_shock_npr
            )),
            Regime::OverExpanded => notes.push(format!(
                "Over-expanded: exit pressure {pe:.0} Pa is below ambient {p_amb:.0} Pa (design \
                 NPR {design:.4})."
            )),
            Regime::UnderExpanded => notes.push(format!(
                "Under-expanded: exit pressure {pe:.0} Pa is above ambient {p_amb:.0} Pa (design \
                 NPR {design:.4})."
            )),
            Regime::IdeallyExpanded => {}
        }
        if self.mach_disk_expected {
            notes.push(format!(
                "Mach disk expected: exit-to-ambient pressure ratio {:.3} exceeds about {} \
                 (common practice; for a convergent nozzle NPR above about 3.8). Vortex-sheet \
                 shock-cell models lose accuracy here.",
                pe / p_amb,
                MACH_DISK_EXIT_PRESSURE_RATIO
            ));
        }
        if matches!(self.size, JetSize::Rectangular { .. }) && self.supersonic {
            notes.push(
                "Rectangular jet: both sides of the exit grow (or shrink) by the same length so \
                 that the fully expanded area carries the nozzle's mass flow exactly; to first \
                 order this is the shared-growth rule used with Tam (1988)."
                    .into(),
            );
        }
        notes
    }

    /// The shape of the nozzle that produced this state.
    pub fn is_planar(&self) -> bool {
        matches!(self.size, JetSize::Planar { .. })
    }
}

/// Computes the fully expanded jet for a nozzle at an operating point.
pub fn jet_state(gas: &Gas, nozzle: &Nozzle, op: &OperatingPoint) -> JetState {
    let g = gas.gamma();
    let md = nozzle.design_mach;
    let npr = op.npr;
    let p_amb = op.ambient_pressure_pa;
    let t0 = op.total_temperature_k;
    let mj = gas.mach_from_total_to_static_pressure(npr);
    let design_npr = 1.0 / gas.pressure_ratio(md);
    let nozzle_area_ratio = gas.area_ratio(md); // Ae / A*
                                                // NPR at which the throat just chokes with a subsonic exit, and at which a normal shock
                                                // stands in the exit plane (both equal the critical ratio for a convergent nozzle).
    let npr_choke = if md == 1.0 {
        gas.critical_pressure_ratio()
    } else {
        let m_sub = gas.mach_from_area_ratio(nozzle_area_ratio, Branch::Subsonic).unwrap_or(1.0);
        1.0 / gas.pressure_ratio(m_sub)
    };
    let npr_exit_shock = if md == 1.0 {
        npr_choke
    } else {
        design_npr / gas.normal_shock(md).map_or(1.0, |s| s.static_pressure_ratio)
    };
    let regime = if npr < npr_choke && (npr / npr_choke - 1.0).abs() > IDEAL_TOLERANCE {
        Regime::Subsonic
    } else if md > 1.0 && npr < npr_exit_shock * (1.0 - IDEAL_TOLERANCE) {
        Regime::ShockInNozzle
    } else if (npr / design_npr - 1.0).abs() <= IDEAL_TOLERANCE {
        Regime::IdeallyExpanded
    } else if npr < design_npr {
        Regime::OverExpanded
    } else {
        Regime::UnderExpanded
    };
    let choked = regime != Regime::Subsonic;
    let supersonic = mj > 1.0 && !matches!(regime, Regime::Subsonic | Regime::ShockInNozzle);

    let (exit_mach, exit_pressure_pa) = match regime {
        Regime::Subsonic => (mj, p_amb),
        Regime::ShockInNozzle => {
            // Exit Mach number with a shock in the divergent part (subsonic exit at ambient
            // pressure, choked throat): p_e A_e M_e sqrt(1 + (g-1)/2 M_e^2) = const
            // (closed form, e.g. Anderson, Modern Compressible Flow, sec. 5.6).
            let k = npr / nozzle_area_ratio; // p01 A* / (p_e A_e)
            let c = (2.0 / (g + 1.0)).powf((g + 1.0) / (g - 1.0));
            let a = 1.0 / (g - 1.0);
            let me = (-a + (a * a + 2.0 * a * c * k * k).sqrt()).sqrt();
            (me, p_amb)
        }
        _ => (md, op.npr * p_amb * gas.pressure_ratio(md)),
    };

    let tj = t0 * gas.temperature_ratio(mj);
    let aj = gas.sound_speed(tj);
    let uj = mj * aj;
    let a_amb = gas.sound_speed(op.ambient_temperature_k);
    let rho_j = p_amb / (gas.gas_constant() * tj);
    // Mass conservation between the exit and the fully expanded state (Tam & Tanna 1982):
    // Aj/Ae = (A/A*)(Mj) / (A/A*)(Md).
    let area_ratio = if supersonic { gas.area_ratio(mj) / nozzle_area_ratio } else { 1.0 };
    let size = match nozzle.shape {
        Shape::Round { diameter_m } => JetSize::Round { diameter_m: diameter_m * area_ratio.sqrt() },
        Shape::Planar { height_m } => JetSize::Planar { height_m: height_m * area_ratio },
        Shape::Rectangular { height_m, width_m } => {
            let d = equal_growth(height_m, width_m, area_ratio);
            JetSize::Rectangular { height_m: height_m + d, width_m: width_m + d }
        }
    };
    let exit = nozzle.exit_measure();
    let mass_flow = if choked {
        let throat = exit / nozzle_area_ratio;
        let p0 = npr * p_amb;
        p0 * throat
            * (g / (gas.gas_constant() * t0)).sqrt()
            * (0.5 * (g + 1.0)).powf(-(g + 1.0) / (2.0 * (g - 1.0)))
    } else {
        rho_j * uj * exit
    };
    let mach_disk_expected =
        regime == Regime::UnderExpanded && exit_pressure_pa / p_amb > MACH_DISK_EXIT_PRESSURE_RATIO;
    JetState {
        gas: *gas,
        npr,
        total_pressure_pa: npr * p_amb,
        ambient_pressure_pa: p_amb,
        total_temperature_k: t0,
        ambient_temperature_k: op.ambient_temperature_k,
        md,
        design_npr,
        regime,
        supersonic,
        mj,
        beta: (mj * mj - md * md).abs().sqrt(),
        tj_k: tj,
        uj_m_s: uj,
        rho_j_kg_m3: rho_j,
        aj_m_s: aj,
        a_amb_m_s: a_amb,
        acoustic_mach: uj / a_amb,
        exit_mach,
        exit_pressure_pa,
        area_ratio,
        size,
        exit_area_m2: (!matches!(nozzle.shape, Shape::Planar { .. })).then_some(exit),
        mass_flow,
        choked,
        mach_disk_expected,
        temperature_ratio: t0 / op.ambient_temperature_k,
        choking_npr: npr_choke,
        exit_shock_npr: npr_exit_shock,
    }
}

/// Allowed fully expanded Mach number for a jet given directly.
pub const FULLY_EXPANDED_MACH: Bounds = Bounds::open_closed(1.0, 20.0, "");

/// The supersonic, fully expanded jet that shock-cell and tone models start from: Mach number,
/// size, velocity and the sound speeds. Made from a computed [`JetState`] or given directly.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExpandedJet {
    /// Gas.
    pub gas: Gas,
    /// Fully expanded Mach number Mj (> 1).
    pub mj: f64,
    /// Fully expanded dimensions.
    pub size: JetSize,
    /// Reservoir total temperature, K.
    pub total_temperature_k: f64,
    /// Ambient static temperature, K.
    pub ambient_temperature_k: f64,
    /// Fully expanded velocity Uj, m/s.
    pub uj_m_s: f64,
    /// Ambient sound speed, m/s.
    pub a_amb_m_s: f64,
}

/// Why a jet has no shock cells.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error(
    "the jet is not supersonic (regime {regime:?}, NPR {npr:.4}, Mj {mj:.4}): there are no shock \
     cells below the critical pressure ratio {critical:.4} (or with a shock inside the nozzle), \
     so no shock-cell, screech or shock-noise prediction exists"
)]
pub struct NotSupersonic {
    /// Regime found.
    pub regime: Regime,
    /// Nozzle pressure ratio.
    pub npr: f64,
    /// Fully expanded Mach number.
    pub mj: f64,
    /// Critical pressure ratio of the gas.
    pub critical: f64,
}

impl ExpandedJet {
    /// The expanded jet of a computed state.
    ///
    /// # Errors
    /// [`NotSupersonic`] when the state has no shock cells.
    pub fn from_state(s: &JetState) -> Result<Self, NotSupersonic> {
        if !s.supersonic {
            return Err(NotSupersonic {
                regime: s.regime,
                npr: s.npr,
                mj: s.mj,
                critical: s.gas.critical_pressure_ratio(),
            });
        }
        Ok(Self {
            gas: s.gas,
            mj: s.mj,
            size: s.size,
            total_temperature_k: s.total_temperature_k,
            ambient_temperature_k: s.ambient_temperature_k,
            uj_m_s: s.uj_m_s,
            a_amb_m_s: s.a_amb_m_s,
        })
    }

    /// A jet given directly by its fully expanded Mach number and size, with reservoir and
    /// ambient temperatures in K.
    ///
    /// # Errors
    /// [`RangeError`] naming `fully_expanded_mach_number`, a dimension, or a temperature.
    pub fn direct(gas: Gas, mj: f64, size: JetSize, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        let mj = FULLY_EXPANDED_MACH.check("fully_expanded_mach_number", mj)?;
        match size {
            JetSize::Round { diameter_m } => {
                LENGTH.check("fully_expanded_diameter_m", diameter_m)?;
            }
            JetSize::Planar { height_m } => {
                LENGTH.check("fully_expanded_height_m", height_m)?;
            }
            JetSize::Rectangular { height_m, width_m } => {
                LENGTH.check("fully_expanded_height_m", height_m)?;
                Bounds::closed(height_m, LENGTH.max, "m (not less than the height)")
                    .check("fully_expanded_width_m", width_m)?;
            }
        }
        let t0 = TEMPERATURE.check("total_temperature_k", t0)?;
        let t_amb = TEMPERATURE.check("ambient_temperature_k", t_amb)?;
        let tj = t0 * gas.temperature_ratio(mj);
        Ok(Self {
            gas,
            mj,
            size,
            total_temperature_k: t0,
            ambient_temperature_k: t_amb,
            uj_m_s: mj * gas.sound_speed(tj),
            a_amb_m_s: gas.sound_speed(t_amb),
        })
    }

    /// Length that Strouhal numbers and positions are scaled with: Dj for round jets, hj for
    /// rectangular and planar jets, m.
    pub fn reference_length_m(&self) -> f64 {
        self.size.reference_length_m()
    }

    /// sqrt(Mj^2 - 1).
    pub fn beta(&self) -> f64 {
        (self.mj * self.mj - 1.0).sqrt()
    }
}

/// Length d by which both sides of an h x b rectangle grow so that the area becomes
/// `ratio` h b: the root of d^2 + (h+b) d - (ratio-1) h b = 0 (written to avoid cancellation).
fn equal_growth(h: f64, b: f64, ratio: f64) -> f64 {
    let s = h + b;
    let c = (ratio - 1.0) * h * b;
    2.0 * c / (s + (s * s + 4.0 * c).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn op(npr: f64) -> OperatingPoint {
        OperatingPoint::new(npr, ISA_SEA_LEVEL_PRESSURE_PA, 288.15, 288.15).unwrap()
    }

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    #[test]
    fn ideally_expanded_cd_nozzle_has_dj_equal_d_and_zero_beta() {
        // Closed form: at the design NPR the jet leaves at ambient pressure with Mj = Md.
        let air = Gas::AIR;
        for md in [1.0, 1.5, 2.0, 3.0] {
            let n = Nozzle::round_cd(0.05, md).unwrap();
            let s = jet_state(&air, &n, &op(1.0 / air.pressure_ratio(md)));
            assert_eq!(s.regime, Regime::IdeallyExpanded, "Md {md}");
            assert!(rel(s.mj, md) < 1e-12);
            assert!(s.beta < 1e-5, "beta {}", s.beta);
            let JetSize::Round { diameter_m } = s.size else { panic!() };
            assert!(rel(diameter_m, 0.05) < 1e-9);
            assert!(rel(s.exit_pressure_pa, ISA_SEA_LEVEL_PRESSURE_PA) < 1e-9);
        }
    }

    #[test]
    fn tam_tanna_diameter_matches_the_closed_form() {
        // Dj/D = [(1 + (g-1)/2 Mj^2) / (1 + (g-1)/2 Md^2)]^((g+1)/(4(g-1))) (Md/Mj)^(1/2)
        // (Tam & Tanna 1982, J. Sound Vib. 81, eq. for the fully expanded diameter).
        let air = Gas::AIR;
        for (md, npr) in [(1.0, 3.0), (1.0, 5.0), (1.5, 2.5), (1.5, 5.0), (2.0, 4.0)] {
            let n = Nozzle::round_cd(0.0254, md).unwrap();
            let s = jet_state(&air, &n, &op(npr));
            let (mj, g) = (s.mj, 1.4);
            let expect = ((1.0 + 0.2 * mj * mj) / (1.0 + 0.2 * md * md)).powf((g + 1.0) / (4.0 * (g - 1.0)))
                * (md / mj).sqrt();
            let JetSize::Round { diameter_m } = s.size else { panic!() };
            assert!(rel(diameter_m / 0.0254, expect) < 1e-12, "Md {md} NPR {npr}");
        }
    }

    #[test]
    fn convergent_nozzle_regimes_and_choking() {
        let air = Gas::AIR;
        let n = Nozzle::round_convergent(0.0254).unwrap();
        let crit = air.critical_pressure_ratio();
        assert_eq!(jet_state(&air, &n, &op(1.5)).regime, Regime::Subsonic);
        assert!(!jet_state(&air, &n, &op(1.5)).supersonic);
        assert_eq!(jet_state(&air, &n, &op(crit)).regime, Regime::IdeallyExpanded);
        let s = jet_state(&air, &n, &op(3.0));
        assert_eq!(s.regime, Regime::UnderExpanded);
        assert!(s.choked && s.supersonic && !s.mach_disk_expected);
        assert!(jet_state(&air, &n, &op(4.0)).mach_disk_expected);
        // Mj at NPR 3 from Mj = sqrt(5 (3^(2/7) - 1)) = 1.3578 (closed form).
        assert!((s.mj - (5.0 * (3f64.powf(2.0 / 7.0) - 1.0)).sqrt()).abs() < 1e-14);
    }

    #[test]
    fn choked_mass_flow_is_continuous_at_the_critical_ratio() {
        // Below the critical ratio the exit is at ambient pressure; at it both formulas
        // describe the same sonic exit (closed form).
        let air = Gas::AIR;
        let n = Nozzle::round_convergent(0.0254).unwrap();
        let crit = air.critical_pressure_ratio();
        let below = jet_state(&air, &n, &op(crit * (1.0 - 1e-7)));
        let above = jet_state(&air, &n, &op(crit * (1.0 + 1e-7)));
        assert!(rel(below.mass_flow, above.mass_flow) < 1e-5);
    }

    #[test]
    fn cd_nozzle_regime_sequence() {
        // Md = 3: choking at the subsonic root of A/A* = 4.2346, exit shock at
        // NPR 36.733/10.333 = 3.5549 (NACA 1135 tables, closed form).
        let air = Gas::AIR;
        let n = Nozzle::round_cd(0.05, 3.0).unwrap();
        assert_eq!(jet_state(&air, &n, &op(1.01)).regime, Regime::Subsonic);
        let s = jet_state(&air, &n, &op(2.5));
        assert_eq!(s.regime, Regime::ShockInNozzle);
        assert!(s.exit_mach < 1.0 && !s.supersonic);
        assert_eq!(jet_state(&air, &n, &op(3.6)).regime, Regime::OverExpanded);
        assert_eq!(jet_state(&air, &n, &op(40.0)).regime, Regime::UnderExpanded);
    }

    #[test]
    fn rectangular_growth_conserves_mass_and_tends_to_planar() {
        let air = Gas::AIR;
        let (h, b) = (0.01, 0.05);
        let s = jet_state(&air, &Nozzle::rectangular(h, b, 1.0).unwrap(), &op(4.0));
        let JetSize::Rectangular { height_m, width_m } = s.size else { panic!() };
        assert!(rel(height_m * width_m, s.area_ratio * h * b) < 1e-12);
        // First-order shared-growth rule hj = h [1 + (Aj/A - 1) b/(h+b)] (physics notes;
        // memory): agrees to second order in (Aj/A - 1).
        let lin = h * (1.0 + (s.area_ratio - 1.0) * b / (h + b));
        assert!(rel(height_m, lin) < (s.area_ratio - 1.0).powi(2));
        // Very wide: the height grows like a planar jet's.
        let wide = jet_state(&air, &Nozzle::rectangular(h, 1e3 * h, 1.0).unwrap(), &op(4.0));
        let planar = jet_state(&air, &Nozzle::planar(h, 1.0).unwrap(), &op(4.0));
        let JetSize::Rectangular { height_m: hw, .. } = wide.size else { panic!() };
        let JetSize::Planar { height_m: hp } = planar.size else { panic!() };
        assert!(rel(hw, hp) < 2e-3);
    }

    #[test]
    fn area_ratio_design_matches_design_mach() {
        let air = Gas::AIR;
        let a = Nozzle::round_cd_from_area_ratio(0.05, 1.6875, &air).unwrap();
        assert!(rel(a.design_mach(), 2.0) < 1e-12);
        assert_eq!(
            Nozzle::round_cd_from_area_ratio(0.05, 0.9, &air).unwrap_err().quantity,
            "exit_to_throat_area_ratio"
        );
        assert_eq!(Nozzle::rectangular(0.02, 0.01, 1.0).unwrap_err().quantity, "exit_width_m");
        assert_eq!(
            OperatingPoint::from_pressures(50_000.0, 101_325.0, 300.0, 300.0).unwrap_err().quantity,
            "total_pressure_pa"
        );
    }
}
