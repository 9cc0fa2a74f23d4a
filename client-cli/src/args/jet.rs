//! Argument groups that say which jet: the nozzle and operating point (`JetArgs`), or the
//! fully expanded state (`JetSourceArgs`), with the shock-cell, convection and screech-model
//! options shared by the tone commands.

use crate::failure::Failure;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use jetloop_proto::pb::jet_input::Source;
use jetloop_proto::pb::nozzle::Kind;
use jetloop_proto::pb::operating_point::Pressure;

/// Nozzle kinds on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum NozzleArg {
    /// Round convergent (sonic exit): needs --diameter-m.
    Convergent,
    /// Round convergent-divergent: needs --diameter-m and --design-mach or --area-ratio.
    Cd,
    /// Rectangular: needs --height-m and --width-m (optional --design-mach).
    Rectangular,
    /// Planar (two-dimensional): needs --height-m (optional --design-mach).
    Planar,
}

/// `jetloop jet`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
#[command(group(clap::ArgGroup::new("pressure").args(["npr", "total_pressure_pa", "gauge_pressure_pa"])))]
pub struct JetArgs {
    /// Nozzle kind.
    #[arg(long, value_enum, default_value = "convergent")]
    pub(crate) nozzle: NozzleArg,
    /// Exit diameter in m (round nozzles).
    #[arg(long)]
    pub(crate) diameter_m: Option<f64>,
    /// Exit height in m (rectangular, planar).
    #[arg(long)]
    pub(crate) height_m: Option<f64>,
    /// Exit width in m (rectangular).
    #[arg(long)]
    pub(crate) width_m: Option<f64>,
    /// Design Mach number (cd, rectangular, planar).
    #[arg(long)]
    pub(crate) design_mach: Option<f64>,
    /// Exit-to-throat area ratio (cd, instead of --design-mach).
    #[arg(long, conflicts_with = "design_mach")]
    pub(crate) area_ratio: Option<f64>,
    /// Nozzle pressure ratio p0/p_ambient.
    #[arg(long)]
    pub(crate) npr: Option<f64>,
    /// Reservoir total pressure in Pa (absolute); needs --ambient-pressure-pa.
    #[arg(long, requires = "ambient_pressure_pa")]
    pub(crate) total_pressure_pa: Option<f64>,
    /// Reservoir gauge pressure in Pa (above ambient, as rig transducers read it); needs
    /// --ambient-pressure-pa (absolute, e.g. the lab barometer). Example: --gauge-pressure-pa
    /// 253312 --ambient-pressure-pa 101325 is NPR 3.5.
    #[arg(long, requires = "ambient_pressure_pa")]
    pub(crate) gauge_pressure_pa: Option<f64>,
    /// Ambient pressure in Pa (server default 101325).
    #[arg(long)]
    pub(crate) ambient_pressure_pa: Option<f64>,
    /// Reservoir total temperature in K (server default: the ambient temperature).
    #[arg(long)]
    pub(crate) total_temperature_k: Option<f64>,
    /// Ambient temperature in K (server default 288.15).
    #[arg(long)]
    pub(crate) ambient_temperature_k: Option<f64>,
    /// Ratio of specific heats (server default 1.4).
    #[arg(long)]
    pub(crate) gamma: Option<f64>,
    /// Specific gas constant in J/(kg K) (server default 287.05).
    #[arg(long)]
    pub(crate) gas_constant: Option<f64>,
    /// Ratio of specific heats of the surroundings (server default 1.4, dry air).
    #[arg(long)]
    pub(crate) ambient_gamma: Option<f64>,
    /// Specific gas constant of the surroundings in J/(kg K) (server default 287.05, dry air).
    #[arg(long)]
    pub(crate) ambient_gas_constant: Option<f64>,
    /// Tolerance on |pe/pa - 1| for the ideally expanded class (server default 0.005).
    #[arg(long)]
    pub(crate) ideal_tolerance: Option<f64>,
}

/// The value of `flag`, which `--nozzle nozzle` needs.
///
/// # Errors
/// [`Failure::Usage`] naming the missing flag.
pub(crate) fn need(v: Option<f64>, flag: &str, nozzle: &str) -> Result<f64, Failure> {
    v.ok_or_else(|| Failure::Usage(format!("--nozzle {nozzle} needs {flag}")))
}

impl JetArgs {
    /// The jet conditions message these arguments describe.
    pub fn conditions(&self) -> Result<pb::JetConditions, Failure> {
        self.conditions_inner(false)
    }

    /// The nozzle, temperatures and gas, with the pressure left for the server to fill (sweeps
    /// and fits set it per point).
    pub fn context(&self) -> Result<pb::JetConditions, Failure> {
        self.conditions_inner(true)
    }

    /// The jet conditions; with `pressure_optional` a missing pressure is left unset.
    pub(crate) fn conditions_inner(&self, pressure_optional: bool) -> Result<pb::JetConditions, Failure> {
        use pb::round_convergent_divergent_nozzle::Design;
        let kind = match self.nozzle {
            NozzleArg::Convergent => Kind::RoundConvergent(pb::RoundConvergentNozzle {
                exit_diameter_m: need(self.diameter_m, "--diameter-m", "convergent")?,
            }),
            NozzleArg::Cd => Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle {
                exit_diameter_m: need(self.diameter_m, "--diameter-m", "cd")?,
                design: Some(match (self.design_mach, self.area_ratio) {
                    (Some(md), _) => Design::DesignMachNumber(md),
                    (None, Some(ar)) => Design::ExitToThroatAreaRatio(ar),
                    (None, None) => {
                        return Err(Failure::Usage("--nozzle cd needs --design-mach or --area-ratio".into()))
                    }
                }),
            }),
            NozzleArg::Rectangular => Kind::Rectangular(pb::RectangularNozzle {
                exit_height_m: need(self.height_m, "--height-m", "rectangular")?,
                exit_width_m: need(self.width_m, "--width-m", "rectangular")?,
                design_mach_number: self.design_mach,
            }),
            NozzleArg::Planar => Kind::Planar(pb::PlanarNozzle {
                exit_height_m: need(self.height_m, "--height-m", "planar")?,
                design_mach_number: self.design_mach,
            }),
        };
        let (pressure, ambient_pressure_pa) = match (self.npr, self.total_pressure_pa) {
            (Some(npr), _) => (Some(Pressure::NozzlePressureRatio(npr)), self.ambient_pressure_pa),
            (None, None) if self.gauge_pressure_pa.is_some() => (
                Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
                    reservoir_gauge_pressure_pa: self.gauge_pressure_pa.unwrap_or_default(),
                    ambient_pressure_pa: self.ambient_pressure_pa.unwrap_or_default(),
                })),
                None,
            ),
            (None, Some(p0)) => (
                Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
                    total_pressure_pa: p0,
                    ambient_pressure_pa: self.ambient_pressure_pa.unwrap_or_default(),
                })),
                None,
            ),
            (None, None) if pressure_optional => (None, self.ambient_pressure_pa),
            (None, None) => {
                return Err(Failure::Usage("give --npr, --total-pressure-pa or --gauge-pressure-pa".into()))
            }
        };
        Ok(pb::JetConditions {
            nozzle: Some(pb::Nozzle { kind: Some(kind) }),
            operating_point: Some(pb::OperatingPoint {
                pressure,
                total_temperature_k: self.total_temperature_k,
                ambient_temperature_k: self.ambient_temperature_k,
                ambient_pressure_pa,
            }),
            gas: Some(pb::Gas { gamma: self.gamma, gas_constant_j_per_kg_k: self.gas_constant }),
            ambient_gas: Some(self.ambient_gas()),
            ideal_expansion_tolerance: self.ideal_tolerance,
        })
    }

    /// The gas of the surroundings.
    pub fn ambient_gas(&self) -> pb::Gas {
        pb::Gas { gamma: self.ambient_gamma, gas_constant_j_per_kg_k: self.ambient_gas_constant }
    }
}

impl JetArgs {
    /// True when an operating pressure (NPR or total pressure) was given.
    pub fn pressure_given(&self) -> bool {
        self.npr.is_some() || self.total_pressure_pa.is_some() || self.gauge_pressure_pa.is_some()
    }

    /// Total and ambient temperatures and the gas, for a jet given directly.
    pub fn conditions_gas_and_temperatures(&self) -> (Option<f64>, Option<f64>, pb::Gas) {
        (
            self.total_temperature_k,
            self.ambient_temperature_k,
            pb::Gas { gamma: self.gamma, gas_constant_j_per_kg_k: self.gas_constant },
        )
    }
}

/// The jet: nozzle and operating point, or the fully expanded state with --mj.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct JetSourceArgs {
    #[command(flatten)]
    /// The nozzle, operating point and gases (the jet with --npr or a pressure).
    pub(crate) conditions: JetArgs,
    /// Give the fully expanded jet directly: its Mach number (then --dj-m, or --hj-m [--bj-m]).
    #[arg(long, conflicts_with_all = ["npr", "total_pressure_pa"])]
    pub(crate) mj: Option<f64>,
    /// Fully expanded diameter in m (round jet, with --mj).
    #[arg(long, requires = "mj")]
    pub(crate) dj_m: Option<f64>,
    /// Fully expanded height in m (planar jet, or rectangular with --bj-m; with --mj).
    #[arg(long, requires = "mj")]
    pub(crate) hj_m: Option<f64>,
    /// Fully expanded width in m (rectangular jet, with --mj and --hj-m).
    #[arg(long, requires = "hj_m")]
    pub(crate) bj_m: Option<f64>,
}

impl JetSourceArgs {
    /// The --mj value, if given.
    pub fn mach(&self) -> Option<f64> {
        self.mj
    }

    /// True when a jet was described (an operating pressure, or --mj).
    pub fn given(&self) -> bool {
        self.mj.is_some() || self.conditions.pressure_given()
    }

    /// The jet these arguments describe.
    pub fn input(&self) -> Result<pb::JetInput, Failure> {
        use pb::fully_expanded_jet::Size;
        let source = match self.mj {
            None => Source::Conditions(self.conditions.conditions()?),
            Some(mj) => {
                let size = match (self.dj_m, self.hj_m, self.bj_m) {
                    (Some(d), None, None) => Size::FullyExpandedDiameterM(d),
                    (None, Some(h), None) => Size::PlanarHeightM(h),
                    (None, Some(h), Some(b)) => {
                        Size::Rectangular(pb::RectangularJetSize { height_m: h, width_m: b })
                    }
                    _ => return Err(Failure::Usage("with --mj give --dj-m, or --hj-m (and --bj-m)".into())),
                };
                let c = self.conditions.conditions_gas_and_temperatures();
                Source::FullyExpanded(pb::FullyExpandedJet {
                    fully_expanded_mach_number: mj,
                    size: Some(size),
                    total_temperature_k: c.0,
                    ambient_temperature_k: c.1,
                    gas: Some(c.2),
                    ambient_gas: Some(self.conditions.ambient_gas()),
                })
            }
        };
        Ok(pb::JetInput { source: Some(source) })
    }
}

/// Shock-cell model options.
#[derive(Debug, Args)]
pub struct CellArgs {
    /// Factor on the vortex-sheet spacing (server default 1; 0.8 as Tam, Seiner & Yu 1986).
    #[arg(long)]
    pub(crate) spacing_factor: Option<f64>,
    /// Number of waveguide modes.
    #[arg(long)]
    pub(crate) modes: Option<u32>,
    /// Number of shock positions.
    #[arg(long)]
    pub(crate) shocks: Option<u32>,
}

impl CellArgs {
    /// The shock-cell options message (unset ones left to the server).
    pub(crate) fn options(&self) -> pb::CellOptions {
        pb::CellOptions { spacing_factor: self.spacing_factor, modes: self.modes, shock_count: self.shocks }
    }
}

/// Convection speed options.
#[derive(Debug, Args)]
pub struct ConvectionArgs {
    /// Uc / Uj (server default 0.7).
    #[arg(long, conflicts_with = "convection_speed_m_per_s")]
    pub(crate) convection_ratio: Option<f64>,
    /// Uc in m/s (e.g. two-thirds of the ambient sound speed for cold jets).
    #[arg(long)]
    pub(crate) convection_speed_m_per_s: Option<f64>,
}

impl ConvectionArgs {
    /// The convection speed given (a ratio Uc/Uj or a speed in m/s), if any.
    pub(crate) fn convection(&self) -> Option<pb::Convection> {
        use pb::convection::Speed;
        let speed = match (self.convection_ratio, self.convection_speed_m_per_s) {
            (Some(r), _) => Some(Speed::ConvectionRatio(r)),
            (None, Some(v)) => Some(Speed::ConvectionSpeedMPerS(v)),
            _ => None,
        };
        speed.map(|s| pb::Convection { speed: Some(s) })
    }
}

/// Screech model options.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ScreechArgs {
    #[command(flatten)]
    /// Convection speed of the loop.
    pub(crate) convection: ConvectionArgs,
    #[command(flatten)]
    /// Shock-cell model options.
    pub(crate) cells: CellArgs,
    /// Loop source at the end of this many shock cells (server default 1).
    #[arg(long, conflicts_with = "source_distance_m")]
    pub(crate) source_cells: Option<f64>,
    /// Loop source at this distance downstream of the exit, m.
    #[arg(long)]
    pub(crate) source_distance_m: Option<f64>,
    /// Reflector this far upstream of the nozzle lip, m (adds 2 d of acoustic path).
    #[arg(long)]
    pub(crate) reflector_distance_m: Option<f64>,
    /// Fixed delay added to the loop, s (repeatable).
    #[arg(long = "delay-s")]
    pub(crate) delays_s: Vec<f64>,
    /// Highest loop order n_max (server default 4, at most 50).
    #[arg(long)]
    pub(crate) max_loop_order: Option<u32>,
    /// Harmonics per model, including the fundamental (server default 3).
    #[arg(long)]
    pub(crate) harmonics: Option<u32>,
    /// Add the guided-jet-mode model: stage bands and closure tones per mode (round and
    /// planar jets).
    #[arg(long)]
    pub(crate) guided: bool,
}

impl ScreechArgs {
    /// The screech options message: convection, cells, the feedback loop (source, reflector,
    /// fixed delays in s, highest order), harmonics and the guided-mode model.
    pub(crate) fn options(&self) -> pb::ScreechOptions {
        use pb::feedback_loop::Source as S;
        let source = match (self.source_cells, self.source_distance_m) {
            (Some(n), _) => Some(S::SourceCells(n)),
            (None, Some(d)) => Some(S::SourceDistanceM(d)),
            _ => None,
        };
        pb::ScreechOptions {
            convection: self.convection.convection(),
            cells: Some(self.cells.options()),
            r#loop: Some(pb::FeedbackLoop {
                source,
                reflector_distance_m: self.reflector_distance_m,
                segments: Vec::new(),
                fixed_delays_s: self.delays_s.clone(),
                max_loop_order: self.max_loop_order,
            }),
            harmonics: self.harmonics,
            guided_modes: self.guided.then(pb::GuidedModeOptions::default),
        }
    }
}

#[cfg(test)]
mod tests {
    //! Arguments -> request, without a server: what each flag puts in the message.

    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    #[command(allow_negative_numbers = true)]
    struct Jet {
        #[command(flatten)]
        jet: JetSourceArgs,
        #[command(flatten)]
        screech: ScreechArgs,
    }

    fn parse(args: &str) -> Jet {
        Jet::try_parse_from(std::iter::once("t").chain(args.split_whitespace())).expect("parses")
    }

    fn conditions(args: &str) -> pb::JetConditions {
        match parse(args).jet.input().expect("a jet").source {
            Some(Source::Conditions(c)) => c,
            other => panic!("not conditions: {other:?}"),
        }
    }

    #[test]
    fn a_round_convergent_nozzle_at_an_npr() {
        let c = conditions("--diameter-m 0.0254 --npr 3.5 --total-temperature-k 300");
        assert_eq!(
            c.nozzle.and_then(|n| n.kind),
            Some(Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m: 0.0254 }))
        );
        let op = c.operating_point.expect("operating point");
        assert_eq!(op.pressure, Some(Pressure::NozzlePressureRatio(3.5)));
        assert_eq!(op.total_temperature_k, Some(300.0));
        assert_eq!(op.ambient_temperature_k, None, "left to the server's default");
        assert_eq!(op.ambient_pressure_pa, None);
    }

    #[test]
    fn a_gauge_pressure_carries_its_ambient_pressure() {
        let c = conditions("--diameter-m 0.02 --gauge-pressure-pa 253312 --ambient-pressure-pa 101325");
        let op = c.operating_point.expect("operating point");
        assert_eq!(
            op.pressure,
            Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
                reservoir_gauge_pressure_pa: 253_312.0,
                ambient_pressure_pa: 101_325.0
            }))
        );
        assert_eq!(op.ambient_pressure_pa, None, "the ambient pressure travels inside `gauge`");
    }

    #[test]
    fn a_cd_nozzle_by_design_mach_or_area_ratio_and_one_without_either_is_refused() {
        use pb::round_convergent_divergent_nozzle::Design;
        let cd = |args: &str| match conditions(args).nozzle.and_then(|n| n.kind) {
            Some(Kind::RoundConvergentDivergent(n)) => n.design,
            other => panic!("{other:?}"),
        };
        assert_eq!(
            cd("--nozzle cd --diameter-m 0.03 --design-mach 1.5 --npr 4"),
            Some(Design::DesignMachNumber(1.5))
        );
        assert_eq!(
            cd("--nozzle cd --diameter-m 0.03 --area-ratio 1.2 --npr 4"),
            Some(Design::ExitToThroatAreaRatio(1.2))
        );
        let e = parse("--nozzle cd --diameter-m 0.03 --npr 4").jet.input().unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--design-mach")), "{e:?}");
        let e = parse("--nozzle rectangular --height-m 0.01 --npr 4").jet.input().unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--width-m")), "{e:?}");
    }

    #[test]
    fn a_jet_given_by_mj_and_dj_is_a_fully_expanded_jet() {
        let j = parse("--mj 1.4 --dj-m 0.02 --total-temperature-k 600").jet.input().expect("a jet");
        let Some(Source::FullyExpanded(f)) = j.source else { panic!("{j:?}") };
        assert_eq!(f.fully_expanded_mach_number, 1.4);
        assert_eq!(f.size, Some(pb::fully_expanded_jet::Size::FullyExpandedDiameterM(0.02)));
        assert_eq!(f.total_temperature_k, Some(600.0));
    }

    #[test]
    fn screech_options_carry_the_loop_the_cells_and_the_guided_model() {
        let o = parse("--diameter-m 0.0254 --npr 3 --source-cells 4 --reflector-distance-m 0.012 --delay-s 1e-5 --delay-s 2e-5 --spacing-factor 0.8 --convection-ratio 0.65 --harmonics 2 --guided").screech.options();
        let l = o.r#loop.expect("loop");
        assert_eq!(l.source, Some(pb::feedback_loop::Source::SourceCells(4.0)));
        assert_eq!(l.reflector_distance_m, Some(0.012));
        assert_eq!(l.fixed_delays_s, vec![1e-5, 2e-5]);
        assert_eq!(o.cells.and_then(|c| c.spacing_factor), Some(0.8));
        assert_eq!(
            o.convection,
            Some(pb::Convection { speed: Some(pb::convection::Speed::ConvectionRatio(0.65)) })
        );
        assert_eq!(o.harmonics, Some(2));
        assert!(o.guided_modes.is_some());
        let o = parse("--diameter-m 0.0254 --npr 3 --source-distance-m 0.05").screech.options();
        assert_eq!(o.r#loop.and_then(|l| l.source), Some(pb::feedback_loop::Source::SourceDistanceM(0.05)));
        assert!(o.guided_modes.is_none() && o.convection.is_none());
    }
}
