//! The jet state at an operating point: nozzle exit, expansion regime, Mach disk, and the
//! fully expanded jet (Tam & Tanna 1982).

use super::*;

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
