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

mod expanded;
mod nozzle;
mod operating_point;
pub mod plausible;
mod state;

pub use expanded::*;
pub use nozzle::*;
pub use operating_point::*;
pub use state::*;

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
