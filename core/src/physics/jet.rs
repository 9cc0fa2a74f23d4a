//! Nozzles, operating points and the fully expanded jet (Tam & Tanna 1982, J. Sound Vib. 81).
//!
//! The fully expanded state is the one the jet would have if it expanded isentropically from
//! the reservoir to ambient pressure: Mach number Mj = sqrt(2/(g-1) (NPR^((g-1)/g) - 1)),
//! temperature, velocity, and the size that carries the nozzle's mass flow at that state.
//!
//! ```
//! use jetloop_core::physics::{gas::Gas, jet::{Nozzle, OperatingPoint, jet_state}};
//! let nozzle = Nozzle::round_convergent(0.0254).unwrap();
//! let op = OperatingPoint::new(4.0, 101_325.0, 288.15, 288.15).unwrap();
//! let s = jet_state(&Gas::AIR, &nozzle, &op);
//! assert!((s.mj - 1.558_83).abs() < 1e-5); // sqrt(5 (4^(2/7) - 1)), closed form
//! ```

use super::bounds::{Bounds, RangeError, Setting};
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
/// Allowed gauge pressure of the reservoir (above ambient), Pa.
pub const GAUGE_PRESSURE: Bounds = Bounds::closed(0.0, 1e9, "Pa");
/// Allowed absolute temperature, K.
pub const TEMPERATURE: Bounds = Bounds::open_closed(0.0, 5000.0, "K");

/// ICAO standard atmosphere at sea level: pressure in Pa.
pub const ISA_SEA_LEVEL_PRESSURE_PA: f64 = 101_325.0;
/// ICAO standard atmosphere at sea level: temperature in K.
pub const ISA_SEA_LEVEL_TEMPERATURE_K: f64 = 288.15;

/// Exit-to-ambient pressure ratio above which a Mach disk is expected in an under-expanded
/// jet (common practice: a convergent nozzle above NPR about 3.8, i.e. pe/pa about 2).
pub const MACH_DISK_EXIT_PRESSURE_RATIO: f64 = 2.0;

/// Default tolerance on |pe/pa - 1| within which a jet counts as ideally expanded: 0.5 % of
/// the ambient pressure, about what a lab pressure gauge resolves (common practice).
pub const DEFAULT_IDEAL_TOLERANCE: f64 = 0.005;
/// Allowed tolerance on |pe/pa - 1| for the ideally expanded class.
pub const IDEAL_TOLERANCE: Bounds = Bounds::closed(0.0, 0.2, "");
/// Relative exit-to-ambient pressure difference still called ideally expanded.
pub const IDEAL_EXPANSION_TOLERANCE: Setting = Setting::new(
    "ideal_expansion_tolerance",
    IDEAL_TOLERANCE,
    DEFAULT_IDEAL_TOLERANCE,
    "0.5 % of the ambient pressure, about what a lab pressure gauge resolves (common practice)",
);
/// Ambient temperature when unset: ICAO standard atmosphere at sea level.
pub const AMBIENT_TEMPERATURE: Setting = Setting::new(
    "ambient_temperature_k",
    TEMPERATURE,
    ISA_SEA_LEVEL_TEMPERATURE_K,
    "ICAO standard atmosphere, sea level",
);
/// Ambient pressure when unset: ICAO standard atmosphere at sea level.
pub const AMBIENT_PRESSURE: Setting = Setting::new(
    "ambient_pressure_pa",
    PRESSURE,
    ISA_SEA_LEVEL_PRESSURE_PA,
    "ICAO standard atmosphere, sea level",
);
/// Reservoir (total) temperature when unset: an unheated jet, the reservoir at the ambient
/// temperature (the default applied is the ambient temperature of the same request; this
/// constant's value is that of the standard atmosphere).
pub const TOTAL_TEMPERATURE: Setting = Setting::new(
    "total_temperature_k",
    TEMPERATURE,
    ISA_SEA_LEVEL_TEMPERATURE_K,
    "unheated jet: reservoir at the ambient temperature",
);
/// Design Mach number of a rectangular or planar nozzle when unset: a convergent nozzle.
pub const DESIGN_MACH_NUMBER: Setting =
    Setting::new("design_mach_number", DESIGN_MACH, 1.0, "convergent nozzle: sonic exit");
/// Relative tolerance of the choking and exit-shock thresholds (numerical, not a gauge's).
const THRESHOLD_TOLERANCE: f64 = 1e-9;

/// Static temperature below which air's components condense at atmospheric pressure:
/// nitrogen boils at 77.4 K and oxygen at 90.2 K at 101.325 kPa (CRC Handbook of Chemistry and
/// Physics; memory). The perfect-gas model stops describing an air jet near it.
pub const AIR_CONDENSATION_K: f64 = 90.0;
/// Reservoir temperature above which air's specific heats vary noticeably with temperature
/// (vibrational excitation), so a constant gamma of 1.4 overstates it (Anderson, Modern
/// Compressible Flow, ch. on high-temperature flows; memory: calorically perfect to about
/// 1000 K).
pub const AIR_CALORIC_LIMIT_K: f64 = 1000.0;
/// Reservoir temperature above which oxygen starts to dissociate at atmospheric pressure
/// (Anderson, Hypersonic and High-Temperature Gas Dynamics; memory: about 2000 K).
pub const AIR_DISSOCIATION_K: f64 = 2000.0;

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

/// Reservoir and ambient conditions, with the gas of the surroundings and the tolerance of
/// the ideally expanded class.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatingPoint {
    npr: f64,
    ambient_pressure_pa: f64,
    total_temperature_k: f64,
    ambient_temperature_k: f64,
    ambient_gas: Gas,
    ideal_tolerance: f64,
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
            ambient_gas: Gas::AIR,
            ideal_tolerance: DEFAULT_IDEAL_TOLERANCE,
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
                format!(
                    "[{}, {}] Pa: {NPR} times the ambient pressure {p_amb} Pa (the reservoir \
                     pressure may not be below ambient)",
                    NPR.min * p_amb,
                    NPR.max * p_amb
                ),
            ));
        }
        Self::new(npr, p_amb, t0, t_amb)
    }

    /// From a reservoir gauge pressure (what rig transducers read: p0 - p_ambient, Pa) and the
    /// absolute ambient pressure `p_amb` (Pa): p0 = p_gauge + p_amb.
    ///
    /// # Errors
    /// [`RangeError`] naming `reservoir_gauge_pressure_pa`, `ambient_pressure_pa` or a
    /// temperature, or the gauge pressure when the ratio leaves [`NPR`].
    pub fn from_gauge(p_gauge: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        let p_gauge = GAUGE_PRESSURE.check("reservoir_gauge_pressure_pa", p_gauge)?;
        let p_amb = PRESSURE.check("ambient_pressure_pa", p_amb)?;
        let npr = (p_gauge + p_amb) / p_amb;
        if !NPR.contains(npr) {
            return Err(RangeError::new(
                "reservoir_gauge_pressure_pa",
                p_gauge,
                format!(
                    "[0, {}] Pa: NPR at most {} over the ambient pressure {p_amb} Pa",
                    (NPR.max - 1.0) * p_amb,
                    NPR.max
                ),
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

    /// Gas of the surroundings (dry air unless set).
    pub fn ambient_gas(&self) -> Gas {
        self.ambient_gas
    }

    /// Tolerance on |pe/pa - 1| within which the jet counts as ideally expanded.
    pub fn ideal_tolerance(&self) -> f64 {
        self.ideal_tolerance
    }

    /// The same point with another ambient gas.
    pub fn with_ambient_gas(self, gas: Gas) -> Self {
        Self { ambient_gas: gas, ..self }
    }

    /// The same point with another ideal-expansion tolerance, in [`IDEAL_TOLERANCE`].
    ///
    /// # Errors
    /// [`RangeError`] naming `ideal_expansion_tolerance`.
    pub fn with_ideal_tolerance(self, tol: f64) -> Result<Self, RangeError> {
        Ok(Self { ideal_tolerance: IDEAL_TOLERANCE.check("ideal_expansion_tolerance", tol)?, ..self })
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

/// Whether a Mach disk (Mach reflection of the first-cell shocks) is expected, and by which
/// criterion.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum MachDisk {
    /// Regular reflection expected.
    NotExpected,
    /// Under-expanded with pe/pa above [`MACH_DISK_EXIT_PRESSURE_RATIO`] (common practice).
    StrongUnderExpansion,
    /// Over-expanded and the lip shock cannot reflect regularly: its deflection exceeds the
    /// largest a reflected shock at the post-shock Mach number can turn back (von Neumann's
    /// detachment criterion; Hornung 1986, Annu. Rev. Fluid Mech. 18), or no attached shock
    /// gives the pressure rise at all.
    DetachedReflection {
        /// Flow deflection across the lip shock, degrees (`None` if no attached shock exists).
        lip_deflection_deg: Option<f64>,
        /// Largest deflection of a reflected shock behind it, degrees.
        max_reflected_deg: f64,
    },
}

/// The Mach-disk criterion for a jet leaving at Mach `exit_mach` with pressure ratio
/// `pe_over_pa`, in gas `gas`.
pub fn mach_disk(gas: &Gas, regime: Regime, exit_mach: f64, pe_over_pa: f64) -> MachDisk {
    match regime {
        Regime::UnderExpanded if pe_over_pa > MACH_DISK_EXIT_PRESSURE_RATIO => MachDisk::StrongUnderExpansion,
        Regime::OverExpanded if exit_mach > 1.0 => {
            match gas.oblique_shock_for_pressure_ratio(exit_mach, 1.0 / pe_over_pa) {
                None => MachDisk::DetachedReflection { lip_deflection_deg: None, max_reflected_deg: 0.0 },
                Some(lip) => {
                    let max_reflected_deg = gas.max_deflection_deg(lip.downstream_mach);
                    if lip.deflection_deg > max_reflected_deg {
                        MachDisk::DetachedReflection {
                            lip_deflection_deg: Some(lip.deflection_deg),
                            max_reflected_deg,
                        }
                    } else {
                        MachDisk::NotExpected
                    }
                }
            }
        }
        _ => MachDisk::NotExpected,
    }
}

/// The fully expanded jet and the nozzle flow that produces it.
#[derive(Debug, Clone, PartialEq)]
pub struct JetState {
    /// Gas of the jet.
    pub gas: Gas,
    /// Gas of the surroundings (ambient sound speed).
    pub ambient_gas: Gas,
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
    /// True when the flow leaves the exit supersonic (even if Mj < 1).
    pub exit_supersonic: bool,
    /// True when the jet is what an isentropic expansion to ambient pressure gives: a
    /// supersonic jet, or a subsonic one with no shock anywhere. False with a shock in the
    /// nozzle or an over-expanded exit flow whose Mj is below 1: the fully expanded values
    /// (Mj, Tj, Uj, Dj, ...) are then reference values only.
    pub isentropic_expansion: bool,
    /// Isentropic Mach number Mj = sqrt(2/(g-1) (NPR^((g-1)/g) - 1)).
    pub mj: f64,
    /// Off-design parameter against the design Mach number, sqrt(|Mj^2 - Md^2|).
    pub beta_from_design_mach: f64,
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
    /// Tolerance on |pe/pa - 1| used for the ideally expanded class.
    pub ideal_tolerance: f64,
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
    /// Mach disk expected, and why.
    pub mach_disk: MachDisk,
    /// T0 / T_ambient.
    pub total_to_ambient_temperature_ratio: f64,
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
            Regime::OverExpanded if !self.supersonic => notes.push(format!(
                "Over-expanded below the critical pressure ratio: the flow leaves the exit \
                 supersonic (Me = {:.4}, exit pressure {pe:.0} Pa against ambient {p_amb:.0} Pa) \
                 but NPR {npr:.4} is below the critical {:.4}, so an isentropic expansion to \
                 ambient pressure would end subsonic (Mj = {:.4}). Shocks at the lip turn and \
                 slow the flow: the fully expanded values are not reported, and the vortex-sheet \
                 shock-cell, screech and shock-noise models (which need Mj > 1) do not apply.",
                self.exit_mach,
                self.gas.critical_pressure_ratio(),
                self.mj
            )),
            Regime::OverExpanded => notes.push(format!(
                "Over-expanded: exit pressure {pe:.0} Pa is below ambient {p_amb:.0} Pa (design \
                 NPR {design:.4}, pe/pa = {:.4}).",
                pe / p_amb
            )),
            Regime::UnderExpanded => notes.push(format!(
                "Under-expanded: exit pressure {pe:.0} Pa is above ambient {p_amb:.0} Pa (design \
                 NPR {design:.4}, pe/pa = {:.4}).",
                pe / p_amb
            )),
            Regime::IdeallyExpanded => notes.push(format!(
                "Ideally expanded within the tolerance: pe/pa = {:.5}, |pe/pa - 1| <= {} (design \
                 NPR {design:.4}).",
                pe / p_amb,
                self.ideal_tolerance
            )),
        }
        match self.mach_disk {
            MachDisk::NotExpected => {}
            MachDisk::StrongUnderExpansion => notes.push(format!(
                "Mach disk expected: exit-to-ambient pressure ratio {:.3} exceeds about {} \
                 (common practice; for a convergent nozzle NPR above about 3.8). Vortex-sheet \
                 shock-cell models lose accuracy here.",
                pe / p_amb,
                MACH_DISK_EXIT_PRESSURE_RATIO
            )),
            MachDisk::DetachedReflection { lip_deflection_deg, max_reflected_deg } => {
                notes.push(match lip_deflection_deg {
                    Some(t) => format!(
                        "Mach disk expected: the lip shock of this over-expanded jet (pa/pe = {:.3}) \
                     turns the flow by {t:.2} deg, more than the {max_reflected_deg:.2} deg a \
                     reflected shock behind it can turn back, so regular reflection is impossible \
                     (von Neumann detachment criterion for plane shocks; Hornung 1986). Round jets \
                     can show a small Mach disk earlier (conical shocks strengthen towards the \
                     axis). Vortex-sheet shock-cell models lose accuracy here.",
                        p_amb / pe
                    ),
                    None => format!(
                        "Mach disk expected: pa/pe = {:.3} exceeds the pressure rise of a normal shock \
                     at the exit Mach number; no attached lip shock exists.",
                        p_amb / pe
                    ),
                })
            }
        }
        notes.extend(self.perfect_gas_cautions());
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

    /// Cautions where the perfect-gas model stops describing the jet: condensation of cold air
    /// and the caloric imperfection and dissociation of hot air (limits and sources at
    /// [`AIR_CONDENSATION_K`], [`AIR_CALORIC_LIMIT_K`], [`AIR_DISSOCIATION_K`]). They are given
    /// for air-like (diatomic, gamma 1.4 within 0.02) jet gases; other gases have their own
    /// limits, which the caller knows better.
    pub fn perfect_gas_cautions(&self) -> Vec<String> {
        let mut v = Vec::new();
        if (self.gas.gamma() - 1.4).abs() > 0.02 {
            return v;
        }
        let coldest =
            self.total_temperature_k.min(if self.isentropic_expansion { self.tj_k } else { f64::MAX });
        if coldest < AIR_CONDENSATION_K {
            v.push(format!(
                "Caution: the {} falls to {coldest:.1} K, below about {AIR_CONDENSATION_K} K where \
                 air's nitrogen and oxygen condense at atmospheric pressure (boiling points 77.4 K \
                 and 90.2 K). The perfect-gas model does not describe a condensing jet; moisture \
                 in undried supply air condenses at far higher temperatures.",
                if coldest == self.total_temperature_k {
                    "reservoir temperature"
                } else {
                    "jet's static temperature"
                }
            ));
        }
        if self.total_temperature_k > AIR_DISSOCIATION_K {
            v.push(format!(
                "Caution: at a reservoir temperature of {:.0} K (above about {AIR_DISSOCIATION_K} K) \
                 oxygen starts to dissociate and air is far from a perfect gas with constant \
                 gamma: treat these numbers as rough estimates.",
                self.total_temperature_k
            ));
        } else if self.total_temperature_k > AIR_CALORIC_LIMIT_K {
            v.push(format!(
                "Caution: at a reservoir temperature of {:.0} K (above about {AIR_CALORIC_LIMIT_K} \
                 K) air's specific heats grow with temperature and its gamma falls below 1.4 \
                 (about 1.34 at 1000 K): a constant-gamma model with 1.4 is a few percent off; \
                 give the gamma of the hot gas.",
                self.total_temperature_k
            ));
        }
        v
    }

    /// True when a Mach disk is expected (by either criterion of [`MachDisk`]).
    pub fn mach_disk_expected(&self) -> bool {
        !matches!(self.mach_disk, MachDisk::NotExpected)
    }

    /// Exit-to-ambient static pressure ratio pe/pa.
    pub fn exit_to_ambient_pressure_ratio(&self) -> f64 {
        self.exit_pressure_pa / self.ambient_pressure_pa
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
    let design_npr = gas.npr_for_mach(md);
    let nozzle_area_ratio = gas.area_ratio(md); // Ae / A*
                                                // NPR at which the throat just chokes with a subsonic exit, and at which a normal shock
                                                // stands in the exit plane (both equal the critical ratio for a convergent nozzle).
    let npr_choke = if md == 1.0 {
        gas.critical_pressure_ratio()
    } else {
        let m_sub = gas.mach_from_area_ratio(nozzle_area_ratio, Branch::Subsonic).unwrap_or(1.0);
        gas.npr_for_mach(m_sub)
    };
    let npr_exit_shock = if md == 1.0 {
        npr_choke
    } else {
        design_npr / gas.normal_shock(md).map_or(1.0, |s| s.static_pressure_ratio)
    };
    // Supersonic exit: pe/pa = NPR / design NPR; ideally expanded within the tolerance.
    let regime = if npr < npr_choke && (npr / npr_choke - 1.0).abs() > THRESHOLD_TOLERANCE {
        Regime::Subsonic
    } else if md > 1.0 && npr < npr_exit_shock * (1.0 - THRESHOLD_TOLERANCE) {
        Regime::ShockInNozzle
    } else if (npr / design_npr - 1.0).abs() <= op.ideal_tolerance {
        Regime::IdeallyExpanded
    } else if npr < design_npr {
        Regime::OverExpanded
    } else {
        Regime::UnderExpanded
    };
    let choked = regime != Regime::Subsonic;
    let supersonic = mj > 1.0 && !matches!(regime, Regime::Subsonic | Regime::ShockInNozzle);
    let exit_supersonic = md > 1.0 && !matches!(regime, Regime::Subsonic | Regime::ShockInNozzle);
    let isentropic_expansion = supersonic || regime == Regime::Subsonic;

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
    let a_amb = op.ambient_gas.sound_speed(op.ambient_temperature_k);
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
    let mach_disk = mach_disk(gas, regime, exit_mach, exit_pressure_pa / p_amb);
    JetState {
        gas: *gas,
        ambient_gas: op.ambient_gas,
        npr,
        total_pressure_pa: npr * p_amb,
        ambient_pressure_pa: p_amb,
        total_temperature_k: t0,
        ambient_temperature_k: op.ambient_temperature_k,
        md,
        design_npr,
        regime,
        supersonic,
        exit_supersonic,
        isentropic_expansion,
        mj,
        beta_from_design_mach: (mj * mj - md * md).abs().sqrt(),
        tj_k: tj,
        uj_m_s: uj,
        rho_j_kg_m3: rho_j,
        aj_m_s: aj,
        a_amb_m_s: a_amb,
        acoustic_mach: uj / a_amb,
        exit_mach,
        exit_pressure_pa,
        ideal_tolerance: op.ideal_tolerance,
        area_ratio,
        size,
        exit_area_m2: (!matches!(nozzle.shape, Shape::Planar { .. })).then_some(exit),
        mass_flow,
        choked,
        mach_disk,
        total_to_ambient_temperature_ratio: t0 / op.ambient_temperature_k,
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
    /// Gas of the jet.
    pub gas: Gas,
    /// Gas of the surroundings.
    pub ambient_gas: Gas,
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
    /// Ambient sound speed (ambient gas), m/s.
    pub a_amb_m_s: f64,
}

/// Why a jet has no shock cells of the fully expanded (vortex-sheet) kind.
#[derive(Debug, Clone, PartialEq)]
pub struct NotSupersonic {
    /// Regime found.
    pub regime: Regime,
    /// Nozzle pressure ratio.
    pub npr: f64,
    /// Isentropic (fully expanded) Mach number.
    pub mj: f64,
    /// Critical pressure ratio of the gas.
    pub critical: f64,
    /// Exit Mach number.
    pub exit_mach: f64,
    /// NPR at which a normal shock stands in the exit plane.
    pub exit_shock_npr: f64,
}

impl std::fmt::Display for NotSupersonic {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let Self { regime, npr, mj, critical, exit_mach, exit_shock_npr } = *self;
        match regime {
            Regime::ShockInNozzle => write!(
                f,
                "a normal shock stands inside the divergent part of the nozzle (NPR {npr:.4} is \
                 below {exit_shock_npr:.4}, where the shock reaches the exit): the exit flow is \
                 subsonic (Me = {exit_mach:.4}), so the jet has no shock cells and no shock-cell, \
                 screech or shock-noise prediction exists"
            ),
            Regime::OverExpanded => write!(
                f,
                "the flow leaves the nozzle supersonic (Me = {exit_mach:.4}) but over-expanded \
                 below the critical pressure ratio (NPR {npr:.4} < {critical:.4}): its isentropic \
                 Mach number at ambient pressure is {mj:.4} < 1, so shocks at the lip turn the \
                 jet subsonic and the vortex-sheet shock-cell model (which needs Mj > 1) does not \
                 apply; no shock-cell, screech or shock-noise prediction is made"
            ),
            _ => write!(
                f,
                "the jet is subsonic (NPR {npr:.4} is below the critical pressure ratio \
                 {critical:.4}, Mj {mj:.4}): there are no shock cells, so no shock-cell, screech or \
                 shock-noise prediction exists"
            ),
        }
    }
}

impl std::error::Error for NotSupersonic {}

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
                exit_mach: s.exit_mach,
                exit_shock_npr: s.exit_shock_npr,
            });
        }
        Ok(Self {
            gas: s.gas,
            ambient_gas: s.ambient_gas,
            mj: s.mj,
            size: s.size,
            total_temperature_k: s.total_temperature_k,
            ambient_temperature_k: s.ambient_temperature_k,
            uj_m_s: s.uj_m_s,
            a_amb_m_s: s.a_amb_m_s,
        })
    }

    /// A jet of gas `gas` issuing into `ambient_gas`, given directly by its fully expanded Mach
    /// number and size, with reservoir and ambient temperatures in K.
    ///
    /// # Errors
    /// [`RangeError`] naming `fully_expanded_mach_number`, a dimension, or a temperature.
    pub fn direct(
        gas: Gas,
        ambient_gas: Gas,
        mj: f64,
        size: JetSize,
        t0: f64,
        t_amb: f64,
    ) -> Result<Self, RangeError> {
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
            ambient_gas,
            mj,
            size,
            total_temperature_k: t0,
            ambient_temperature_k: t_amb,
            uj_m_s: mj * gas.sound_speed(tj),
            a_amb_m_s: ambient_gas.sound_speed(t_amb),
        })
    }

    /// Length that Strouhal numbers and positions are scaled with: Dj for round jets, hj for
    /// rectangular and planar jets, m.
    pub fn reference_length_m(&self) -> f64 {
        self.size.reference_length_m()
    }

    /// Shock-cell parameter sqrt(Mj^2 - 1) (not the off-design parameter
    /// [`JetState::beta_from_design_mach`]).
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
            assert!(s.beta_from_design_mach < 1e-5, "beta {}", s.beta_from_design_mach);
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
        assert!(s.choked && s.supersonic && !s.mach_disk_expected());
        assert!(jet_state(&air, &n, &op(4.0)).mach_disk_expected());
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
    fn ambient_sound_speed_is_that_of_the_ambient_gas() {
        // a = sqrt(g R T) of the surroundings (dry air 1.4, 287.05 J/(kg K)) whatever the jet
        // gas: 340.2923 m/s at 288.15 K (closed form); helium outside gives 998.76 m/s.
        let helium = Gas::new(5.0 / 3.0, 2077.1).unwrap();
        let n = Nozzle::round_convergent(0.0254).unwrap();
        let s = jet_state(&helium, &n, &op(4.0));
        assert!(rel(s.a_amb_m_s, (1.4f64 * 287.05 * 288.15).sqrt()) < 1e-14);
        assert!(rel(s.aj_m_s, (5.0 / 3.0 * 2077.1 * s.tj_k).sqrt()) < 1e-14);
        let s2 = jet_state(&helium, &n, &op(4.0).with_ambient_gas(helium));
        assert!(rel(s2.a_amb_m_s, 998.762_872_257_474_3) < 1e-12);
    }

    #[test]
    fn over_expanded_cd_jet_below_the_critical_ratio_is_not_a_supersonic_jet() {
        // Md 1.5: design NPR 3.6710, exit shock at 3.6710 / 2.4583 = 1.4934 (NACA 1135 tables,
        // closed form); at NPR 1.6 the exit flow is supersonic (Me = Md) yet Mj < 1 because
        // 1.6 < 1.8929.
        let air = Gas::AIR;
        let n = Nozzle::round_cd(0.05, 1.5).unwrap();
        let s = jet_state(&air, &n, &op(1.6));
        assert_eq!(s.regime, Regime::OverExpanded);
        assert!(s.exit_supersonic && !s.supersonic && !s.isentropic_expansion);
        assert!(s.mj < 1.0 && (s.exit_mach - 1.5).abs() < 1e-15);
        // pe/pa = 1.6 x 0.272403 = 0.43584 (NACA 1135: p/p0 at M 1.5 = 0.27240).
        assert!((s.exit_to_ambient_pressure_ratio() - 1.6 * 0.272_403).abs() < 1e-5);
        let e = ExpandedJet::from_state(&s).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("supersonic (Me = 1.5000)") && msg.contains("does not apply"), "{msg}");
        assert!(s.notes().iter().any(|n| n.contains("below the critical pressure ratio")));
        // A shock in the nozzle: the isentropic Mj > 1 is a reference value only.
        let md3 = jet_state(&air, &Nozzle::round_cd(0.05, 3.0).unwrap(), &op(2.5));
        assert!(md3.mj > 1.0 && !md3.isentropic_expansion && !md3.exit_supersonic);
        // A convergent nozzle below critical is a real subsonic jet at ambient pressure.
        let sub = jet_state(&air, &Nozzle::round_convergent(0.02).unwrap(), &op(1.5));
        assert!(sub.isentropic_expansion && !sub.supersonic);
    }

    #[test]
    fn over_expanded_mach_disk_follows_the_detachment_criterion() {
        // Threshold NPR where the lip-shock deflection equals the largest deflection of a
        // reflected shock behind it, found with pygasflow (PyPI) shockwave functions
        // (get_upstream_normal_mach_from_ratio, theta_from_mach_beta, oblique_mach_downstream,
        // max_theta_from_mach) and scipy.optimize.brentq: Md 1.5 -> 2.711022, Md 2 -> 3.960484,
        // Md 3 -> 8.991880. Below it a Mach disk is expected, above it (still over-expanded)
        // regular reflection.
        let air = Gas::AIR;
        for (md, threshold) in [(1.5, 2.711_022_483_7), (2.0, 3.960_483_702_8), (3.0, 8.991_880_122_2)] {
            let n = Nozzle::round_cd(0.05, md).unwrap();
            let below = jet_state(&air, &n, &op(threshold * 0.995));
            let above = jet_state(&air, &n, &op(threshold * 1.005));
            assert_eq!(below.regime, Regime::OverExpanded);
            assert_eq!(above.regime, Regime::OverExpanded);
            assert!(
                matches!(below.mach_disk, MachDisk::DetachedReflection { .. }),
                "Md {md}: {:?}",
                below.mach_disk
            );
            assert_eq!(above.mach_disk, MachDisk::NotExpected, "Md {md}");
            // The switch sits at the published threshold to 1e-6 (bisection on the flag).
            let (mut lo, mut hi) = (threshold * 0.995, threshold * 1.005);
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if jet_state(&air, &n, &op(mid)).mach_disk_expected() {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            assert!(rel(lo, threshold) < 1e-6, "Md {md}: {lo}");
        }
        // Under-expanded side unchanged: convergent nozzle above pe/pa = 2 (common practice).
        let conv = Nozzle::round_convergent(0.0254).unwrap();
        assert_eq!(jet_state(&air, &conv, &op(4.0)).mach_disk, MachDisk::StrongUnderExpansion);
    }

    #[test]
    fn ideal_expansion_uses_a_gauge_tolerance() {
        // Md 1.5 has design NPR 3.671031 (NACA 1135, 1/0.27240); a lab writing 3.671 (four
        // significant figures, pe/pa - 1 = -8.3e-6) means ideally expanded.
        let air = Gas::AIR;
        let n = Nozzle::round_cd(0.05, 1.5).unwrap();
        let s = jet_state(&air, &n, &op(3.671));
        assert_eq!(s.regime, Regime::IdeallyExpanded);
        assert!((s.exit_to_ambient_pressure_ratio() - 3.671 / 3.671_030_627).abs() < 1e-8);
        // 1 % off design is outside the default 0.5 %; a zero tolerance classes 3.671 too.
        assert_eq!(jet_state(&air, &n, &op(3.671 * 1.01)).regime, Regime::UnderExpanded);
        let strict = op(3.671).with_ideal_tolerance(0.0).unwrap();
        assert_eq!(jet_state(&air, &n, &strict).regime, Regime::OverExpanded);
        assert_eq!(op(3.0).with_ideal_tolerance(0.5).unwrap_err().quantity, "ideal_expansion_tolerance");
    }

    #[test]
    fn perfect_gas_cautions_at_temperature_extremes() {
        // Limits: air's components condense near 77-90 K (N2 and O2 boiling points at 1 atm,
        // CRC Handbook; memory); calorically imperfect above about 1000 K, O2 dissociation
        // from about 2000 K (Anderson; memory).
        let air = Gas::AIR;
        let n = Nozzle::round_convergent(0.0254).unwrap();
        let at = |t0: f64| {
            jet_state(&air, &n, &OperatingPoint::new(4.0, 101_325.0, t0, 288.15).unwrap())
                .perfect_gas_cautions()
        };
        // 60 K reservoir at NPR 4: Tj = 60 / (1 + 0.2 x 1.5588^2) = 40.4 K.
        let cold = at(60.0);
        assert!(cold.len() == 1 && cold[0].contains("condense"), "{cold:?}");
        // 120 K reservoir: Tj = 80.9 K < 90 K, the jet's static temperature is named.
        assert!(at(120.0)[0].contains("static temperature"));
        assert!(at(288.15).is_empty() && at(900.0).is_empty());
        assert!(at(1500.0)[0].contains("specific heats"));
        assert!(at(2500.0)[0].contains("dissociate"));
        // Not for a gas that is not air-like.
        let he = Gas::new(5.0 / 3.0, 2077.1).unwrap();
        let s = jet_state(&he, &n, &OperatingPoint::new(4.0, 101_325.0, 60.0, 288.15).unwrap());
        assert!(s.perfect_gas_cautions().is_empty());
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
