//! Shock-cell and tone subcommands: cells, screech, shock-noise, sweep.

use crate::gas::{regime_name, JetArgs};
use crate::output::{Report, Table, Val};
use crate::{Ctx, Failure, Run};
use clap::{Args, ValueEnum};
use jetloop_proto::pb::{
    self, jet_input::Source, shock_cell_service_client::ShockCellServiceClient,
    tone_service_client::ToneServiceClient,
};

/// The jet: nozzle and operating point, or the fully expanded state with --mj.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct JetSourceArgs {
    #[command(flatten)]
    conditions: JetArgs,
    /// Give the fully expanded jet directly: its Mach number (then --dj-m, or --hj-m [--bj-m]).
    #[arg(long, conflicts_with_all = ["npr", "total_pressure_pa"])]
    mj: Option<f64>,
    /// Fully expanded diameter in m (round jet, with --mj).
    #[arg(long, requires = "mj")]
    dj_m: Option<f64>,
    /// Fully expanded height in m (planar jet, or rectangular with --bj-m; with --mj).
    #[arg(long, requires = "mj")]
    hj_m: Option<f64>,
    /// Fully expanded width in m (rectangular jet, with --mj and --hj-m).
    #[arg(long, requires = "hj_m")]
    bj_m: Option<f64>,
}

/// Short name of a guided mode: "m=1 r1" (round), "sym r1" / "anti r2" (planar).
pub fn mode_label(m: &pb::GuidedModeId) -> String {
    match pb::ModeShape::try_from(m.shape) {
        Ok(pb::ModeShape::Round) => format!("m={} r{}", m.azimuthal_order, m.radial_order),
        Ok(pb::ModeShape::PlanarSymmetric) => format!("sym r{}", m.radial_order),
        Ok(pb::ModeShape::PlanarAntisymmetric) => format!("anti r{}", m.radial_order),
        _ => "?".into(),
    }
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
    spacing_factor: Option<f64>,
    /// Number of waveguide modes.
    #[arg(long)]
    modes: Option<u32>,
    /// Number of shock positions.
    #[arg(long)]
    shocks: Option<u32>,
}

impl CellArgs {
    fn options(&self) -> pb::CellOptions {
        pb::CellOptions { spacing_factor: self.spacing_factor, modes: self.modes, shock_count: self.shocks }
    }
}

/// Convection speed options.
#[derive(Debug, Args)]
pub struct ConvectionArgs {
    /// Uc / Uj (server default 0.7).
    #[arg(long, conflicts_with = "convection_speed_m_per_s")]
    convection_ratio: Option<f64>,
    /// Uc in m/s (e.g. two-thirds of the ambient sound speed for cold jets).
    #[arg(long)]
    convection_speed_m_per_s: Option<f64>,
}

impl ConvectionArgs {
    fn convection(&self) -> Option<pb::Convection> {
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
    convection: ConvectionArgs,
    #[command(flatten)]
    cells: CellArgs,
    /// Loop source at the end of this many shock cells (server default 1).
    #[arg(long, conflicts_with = "source_distance_m")]
    source_cells: Option<f64>,
    /// Loop source at this distance downstream of the exit, m.
    #[arg(long)]
    source_distance_m: Option<f64>,
    /// Reflector this far upstream of the nozzle lip, m (adds 2 d of acoustic path).
    #[arg(long)]
    reflector_distance_m: Option<f64>,
    /// Fixed delay added to the loop, s (repeatable).
    #[arg(long = "delay-s")]
    delays_s: Vec<f64>,
    /// Highest loop order n_max (server default 4, at most 50).
    #[arg(long)]
    max_loop_order: Option<u32>,
    /// Harmonics per model, including the fundamental (server default 3).
    #[arg(long)]
    harmonics: Option<u32>,
    /// Add the guided-jet-mode model: stage bands and closure tones per mode (round and
    /// planar jets).
    #[arg(long)]
    guided: bool,
}

impl ScreechArgs {
    fn options(&self) -> pb::ScreechOptions {
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

/// `jetloop cells`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct CellsCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    cells: CellArgs,
    /// Write the shock positions along the jet as a plot (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

/// `jetloop screech`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ScreechCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    screech: ScreechArgs,
}

/// `jetloop shock-noise`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ShockNoiseCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    convection: ConvectionArgs,
    #[command(flatten)]
    cells: CellArgs,
    /// Observer angles from the downstream jet axis in degrees, comma separated (server
    /// default 30..180 in 10 degree steps).
    #[arg(long, value_delimiter = ',')]
    angles_deg: Vec<f64>,
    /// Write the peak frequency against observer angle as a plot, one series per shock-cell
    /// mode (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

/// Swept quantity.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum VaryArg {
    /// Nozzle pressure ratio.
    Npr,
    /// Fully expanded Mach number.
    Mj,
    /// Reflector distance upstream of the lip, m.
    Reflector,
}

/// `jetloop sweep`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct SweepCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    screech: ScreechArgs,
    /// What to vary.
    #[arg(long, value_enum)]
    vary: VaryArg,
    /// First value (with --to and --count).
    #[arg(long, requires_all = ["to", "count"], conflicts_with = "values")]
    from: Option<f64>,
    /// Last value.
    #[arg(long)]
    to: Option<f64>,
    /// Number of values (at most 10000).
    #[arg(long)]
    count: Option<u32>,
    /// Explicit values, comma separated.
    #[arg(long, value_delimiter = ',')]
    values: Vec<f64>,
    /// Write the points as CSV to this file and print a one-line summary instead of the table
    /// ("-": the CSV on standard output instead of the table).
    #[arg(long)]
    csv: Option<std::path::PathBuf>,
    /// Write the screech map as a plot (SVG, or PNG for a .png name): frequency against the
    /// swept value for Powell and
    /// Tam, and with --guided the stage bands shaded and the closure tones of each mode.
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

/// The screech map of a sweep: models as lines, guided-mode bands shaded (one band per run of
/// consecutive points where the mode has one), closure tones of the first shock-cell mode as
/// dots and of the second as rings.
pub fn sweep_plot(r: &pb::SweepScreechResponse, x_label: &str) -> String {
    use crate::plot::{Axis, Marker, Plot, COLOURS};
    let pts: Vec<&pb::SweepPoint> = r.points.iter().filter(|p| p.supersonic).collect();
    let xs = pts.iter().map(|p| p.value);
    let (xlo, xhi) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    let (xlo, xhi) = if xlo.is_finite() && xhi > xlo { (xlo, xhi) } else { (0.0, 1.0) };
    let mut ymax = 0.0_f64;
    for p in &pts {
        for v in p.powell_fundamental_hz.iter().chain(p.tam_1986_hz.iter()) {
            ymax = ymax.max(*v);
        }
        for m in &p.guided_modes {
            for t in m.tones.iter().filter_map(|t| t.tone.as_ref()) {
                ymax = ymax.max(t.frequency_hz.unwrap_or(0.0));
            }
        }
    }
    let ymax = if ymax > 0.0 { ymax * 1.15 } else { 1.0 };
    let mut p = Plot::new(
        "Screech map",
        900.0,
        560.0,
        Axis::linear(xlo, xhi, x_label),
        Axis::linear(0.0, ymax, "frequency [Hz]"),
    );
    let modes = pts.iter().map(|q| q.guided_modes.len()).max().unwrap_or(0);
    for i in 0..modes {
        let colour = COLOURS[(i + 2) % COLOURS.len()];
        let name = pts
            .iter()
            .find_map(|q| q.guided_modes.get(i))
            .map(|m| {
                let id = m.mode.as_ref().map(mode_label).unwrap_or_default();
                if m.customary_stage.is_empty() {
                    id
                } else {
                    format!("{id} ({})", m.customary_stage)
                }
            })
            .unwrap_or_default();
        // Runs of consecutive points with a band.
        let mut labelled = false;
        let mut run: Vec<(f64, f64, f64)> = Vec::new();
        let flush = |p: &mut Plot, run: &mut Vec<(f64, f64, f64)>, labelled: &mut bool| {
            if run.len() >= 2 {
                let lo: Vec<(f64, f64)> = run.iter().map(|r| (r.0, r.1)).collect();
                let hi: Vec<(f64, f64)> = run.iter().map(|r| (r.0, r.2)).collect();
                let label = format!("{name} band");
                p.band(&lo, &hi, colour, if *labelled { None } else { Some(label.as_str()) });
                *labelled = true;
            }
            run.clear();
        };
        for q in &pts {
            let band = q.guided_modes.get(i).filter(|m| m.has_band).and_then(|m| {
                let lo = m.branch_point.as_ref()?.frequency_hz?;
                let hi = m.saddle_point.as_ref()?.frequency_hz?;
                Some((q.value, lo, hi))
            });
            match band {
                Some(b) => run.push(b),
                None => flush(&mut p, &mut run, &mut labelled),
            }
        }
        flush(&mut p, &mut run, &mut labelled);
        for (n, marker) in [(1, Marker::Dot), (2, Marker::Ring)] {
            let tones: Vec<(f64, f64)> = pts
                .iter()
                .filter_map(|q| {
                    let t = q.guided_modes.get(i)?.tones.iter().find(|t| t.cell_mode == n)?;
                    Some((q.value, t.tone.as_ref()?.frequency_hz?))
                })
                .collect();
            let label = format!("{name} closure, cell mode {n}");
            p.markers(&tones, colour, marker, (!tones.is_empty()).then_some(label.as_str()));
        }
    }
    let line = |f: &dyn Fn(&pb::SweepPoint) -> Option<f64>| -> Vec<(f64, f64)> {
        pts.iter().filter_map(|q| f(q).map(|v| (q.value, v))).collect()
    };
    p.line(&line(&|q| q.powell_fundamental_hz), COLOURS[0], false, Some("Powell fundamental"));
    let tam = line(&|q| q.tam_1986_hz);
    if !tam.is_empty() {
        p.line(&tam, COLOURS[1], true, Some("Tam, Seiner & Yu 1986"));
    }
    p.finish()
}

fn jet_rows(r: Report, j: &Option<pb::ExpandedJetSummary>) -> Report {
    let j = j.clone().unwrap_or_default();
    r.num("fully_expanded_mach_number", "Mj", j.fully_expanded_mach_number, "")
        .num("beta_from_sonic", "sqrt(Mj^2-1)", j.beta_from_sonic, "")
        .num("fully_expanded_velocity_m_per_s", "Uj", j.fully_expanded_velocity_m_per_s, "m/s")
        .num("ambient_sound_speed_m_per_s", "a_ambient", j.ambient_sound_speed_m_per_s, "m/s")
        .num("reference_length_m", "reference length (Dj or hj)", j.reference_length_m, "m")
        .opt("fully_expanded_width_m", "bj", j.fully_expanded_width_m, "m")
}

/// Runs `cells`.
impl Run for CellsCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ShockCellServiceClient::new(ch)
            .cell_spacing(pb::CellSpacingRequest {
                jet: Some(a.jet.input()?),
                options: Some(a.cells.options()),
            })
            .await?
            .into_inner();
        let mut modes = Table::new("modes", "Waveguide modes")
            .col("mode", "mode")
            .col("vortex_sheet_spacing_m", "vortex sheet [m]")
            .col("spacing_m", "spacing [m]")
            .col("spacing_over_reference_length", "spacing / L")
            .col("bessel_zero", "j0,n");
        for m in &r.modes {
            modes.row(vec![
                Some(Val::Int(m.mode.into())),
                Some(Val::Num(m.vortex_sheet_spacing_m)),
                Some(Val::Num(m.spacing_m)),
                Some(Val::Num(m.spacing_over_reference_length)),
                m.bessel_zero.map(Val::Num),
            ]);
        }
        let mut shocks = Table::new("shocks", "Shock positions (fundamental mode)")
            .col("index", "shock")
            .col("axial_position_m", "x [m]")
            .col("axial_position_over_reference_length", "x / L");
        for s in &r.shocks {
            shocks.row(vec![
                Some(Val::Int(s.index.into())),
                Some(Val::Num(s.axial_position_m)),
                Some(Val::Num(s.axial_position_over_reference_length)),
            ]);
        }
        let rep = jet_rows(Report::new("Shock cells (vortex-sheet model)"), &r.jet).num(
            "spacing_factor",
            "spacing factor",
            r.spacing_factor,
            "",
        );
        if let Some(path) = &a.plot {
            crate::plot::write_plot(path, &cells_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(rep.table(modes).table(shocks).provenance(r.provenance))
    }
}

/// Shock positions along the jet axis (x in m and x / L), one marker per shock, with the cell
/// boundaries drawn down to the axis.
pub fn cells_plot(r: &pb::CellSpacingResponse) -> String {
    use crate::plot::{Axis, Marker, Plot, COLOURS};
    let xs: Vec<f64> = r.shocks.iter().map(|s| s.axial_position_m).collect();
    let xmax = xs.iter().copied().fold(0.0, f64::max).max(1e-6);
    let mut p = Plot::new(
        "Shock positions along the jet (vortex-sheet spacing, fundamental mode)",
        900.0,
        320.0,
        Axis::linear(0.0, xmax * 1.05, "axial distance from the nozzle exit x [m]"),
        Axis::linear(0.0, f64::from(u32::try_from(xs.len()).unwrap_or(0)).max(1.0) + 1.0, "shock number"),
    );
    let pts: Vec<(f64, f64)> = r.shocks.iter().map(|s| (s.axial_position_m, f64::from(s.index))).collect();
    for &(x, n) in &pts {
        p.line(&[(x, 0.0), (x, n)], "#bbb", true, None);
        p.label(
            x,
            n,
            &format!("{:.1} L", x / r.jet.as_ref().map_or(1.0, |j| j.reference_length_m.max(1e-12))),
            COLOURS[0],
        );
    }
    p.markers(&pts, COLOURS[0], Marker::Dot, Some("shock (x and x / L, L the fully expanded size)"));
    p.finish()
}

/// Shock-associated noise peak frequency against observer angle, one series per mode.
pub fn shock_noise_plot(r: &pb::PredictShockNoiseResponse) -> String {
    use crate::plot::{Axis, Marker, Plot, COLOURS};
    let f: Vec<f64> = r.peaks.iter().filter_map(|p| p.peak_frequency_hz).collect();
    let (fmin, fmax) = (f.iter().copied().fold(f64::MAX, f64::min), f.iter().copied().fold(0.0, f64::max));
    let (fmin, fmax) = if fmax > 0.0 { (fmin, fmax) } else { (0.0, 1.0) };
    let mut p = Plot::new(
        "Shock-associated noise peak against observer angle",
        900.0,
        480.0,
        Axis::linear(0.0, 180.0, "observer angle from the downstream jet axis [deg]"),
        Axis::linear(fmin * 0.9, fmax * 1.1, "peak frequency [Hz]"),
    );
    let mut modes: Vec<u32> = r.peaks.iter().map(|p| p.mode).collect();
    modes.sort_unstable();
    modes.dedup();
    for (k, m) in modes.iter().enumerate() {
        let pts: Vec<(f64, f64)> = r
            .peaks
            .iter()
            .filter(|p| p.mode == *m)
            .filter_map(|p| p.peak_frequency_hz.map(|f| (p.observer_angle_deg, f)))
            .collect();
        let c = COLOURS[k % COLOURS.len()];
        p.line(&pts, c, false, None);
        p.markers(&pts, c, Marker::Dot, Some(&format!("shock-cell mode {m}")));
    }
    p.finish()
}

fn tone_table(key: &'static str, title: &str, tones: &[pb::Tone]) -> Table {
    let mut t =
        Table::new(key, title).col("order", "n").col("frequency_hz", "f [Hz]").col("strouhal_number", "St");
    for x in tones {
        t.row(vec![
            Some(Val::Int(x.order.into())),
            Some(Val::Num(x.frequency_hz)),
            Some(Val::Num(x.strouhal_number)),
        ]);
    }
    t
}

/// Runs `screech`.
impl Run for ScreechCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch)
            .predict_screech(pb::PredictScreechRequest {
                jet: Some(a.jet.input()?),
                options: Some(a.screech.options()),
            })
            .await?
            .into_inner();
        let mut models = Table::new("predictions", "Screech predictions")
            .col("model", "model")
            .col("fundamental_hz", "f [Hz]")
            .col("strouhal_number", "St = f L/Uj")
            .col("harmonics_hz", "harmonics [Hz]");
        for p in &r.predictions {
            let h: Vec<String> =
                p.harmonics.iter().skip(1).map(|t| format!("{:.0}", t.frequency_hz)).collect();
            models.row(vec![
                Some(Val::Text(p.model.clone())),
                Some(Val::Num(p.fundamental_hz)),
                Some(Val::Num(p.strouhal_number)),
                Some(Val::Text(h.join(" "))),
            ]);
        }
        let fl = r.feedback_loop.clone().unwrap_or_default();
        let mut paths = Table::new("loop_segments", "Feedback loop paths")
            .col("label", "path")
            .col("length_m", "length [m]")
            .col("speed_m_per_s", "speed [m/s]")
            .col("time_s", "time [s]");
        for s in &fl.segments {
            paths.row(vec![
                Some(Val::Text(s.label.clone())),
                Some(Val::Num(s.length_m)),
                Some(Val::Num(s.speed_m_per_s)),
                Some(Val::Num(s.time_s)),
            ]);
        }
        let rep = jet_rows(Report::new("Screech prediction"), &r.jet)
            .num("spacing_m", "shock-cell spacing", r.spacing_m, "m")
            .num("spacing_factor", "spacing factor", r.spacing_factor, "")
            .num("convection_speed_m_per_s", "Uc", fl.convection_speed_m_per_s, "m/s")
            .num("convective_mach_number", "Mc = Uc/a", fl.convective_mach_number, "")
            .num("source_distance_m", "loop source distance", fl.source_distance_m, "m")
            .num("fixed_delay_s", "fixed delays", fl.fixed_delay_s, "s")
            .num("loop_time_s", "loop time tau", fl.loop_time_s, "s");
        let mut rep = rep.table(models).table(paths).table(tone_table(
            "loop_orders",
            "Loop orders (n periods in the loop time: f = n / tau)",
            &fl.orders,
        ));
        if !r.guided_modes.is_empty() {
            let (bands, closures) = crate::modes::mode_tables(&r.guided_modes, true);
            rep = rep.table(bands).table(closures);
        }
        Ok(rep.provenance(r.provenance))
    }
}

/// Runs `shock-noise`.
impl Run for ShockNoiseCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch)
            .predict_shock_noise(pb::PredictShockNoiseRequest {
                jet: Some(a.jet.input()?),
                convection: a.convection.convection(),
                cells: Some(a.cells.options()),
                observer_angles_deg: a.angles_deg,
            })
            .await?
            .into_inner();
        let mut t = Table::new("peaks", "Shock-associated noise peak")
            .col("observer_angle_deg", "angle [deg]")
            .col("mode", "mode")
            .col("peak_frequency_hz", "f_peak [Hz]")
            .col("strouhal_number", "St");
        for p in &r.peaks {
            t.row(vec![
                Some(Val::Num(p.observer_angle_deg)),
                Some(Val::Int(p.mode.into())),
                p.peak_frequency_hz.map(Val::Num),
                p.strouhal_number.map(Val::Num),
            ]);
        }
        let rep = jet_rows(Report::new("Shock-associated noise"), &r.jet)
            .num("convection_speed_m_per_s", "Uc", r.convection_speed_m_per_s, "m/s")
            .num("convective_mach_number", "Mc = Uc/a", r.convective_mach_number, "");
        if let Some(path) = &a.plot {
            crate::plot::write_plot(path, &shock_noise_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(rep.table(t).provenance(r.provenance))
    }
}

/// Runs `sweep`; the CSV file, when asked for, is written here.
impl Run for SweepCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        use pb::sweep_screech_request::Values;
        let values = match (a.from, a.to, a.count) {
            (Some(start), Some(stop), Some(count)) => Values::Range(pb::SweepRange { start, stop, count }),
            _ if !a.values.is_empty() => Values::List(pb::SweepValues { values: a.values.clone() }),
            _ => return Err(Failure::Usage("give --from, --to and --count, or --values".into())),
        };
        let variable = match a.vary {
            VaryArg::Npr => pb::SweepVariable::NozzlePressureRatio,
            VaryArg::Mj => pb::SweepVariable::FullyExpandedMachNumber,
            VaryArg::Reflector => pb::SweepVariable::ReflectorDistanceM,
        };
        let s = crate::readers::spinner("sweeping on the server");
        let r = ToneServiceClient::new(ch)
            .sweep_screech(pb::SweepScreechRequest {
                jet: Some(a.jet.input()?),
                variable: variable as i32,
                values: Some(values),
                options: Some(a.screech.options()),
            })
            .await;
        s.finish_and_clear();
        let r = r?.into_inner();
        let orders = r.points.iter().map(|p| p.loop_frequencies_hz.len()).max().unwrap_or(0);
        let value_key = match a.vary {
            VaryArg::Npr => ("nozzle_pressure_ratio_swept", "NPR"),
            VaryArg::Mj => ("fully_expanded_mach_number_swept", "Mj set"),
            VaryArg::Reflector => ("reflector_distance_m", "reflector [m]"),
        };
        // The swept NPR is the NPR column; the regime column only when the jet came from
        // reservoir conditions (a jet given directly has none).
        let npr_swept = matches!(a.vary, VaryArg::Npr);
        let regimes = r.points.iter().any(|p| p.regime != pb::ExpansionRegime::Unspecified as i32);
        let mut t = Table::new("points", "Sweep");
        t = if npr_swept {
            t.col("nozzle_pressure_ratio", "NPR")
        } else {
            t.col(value_key.0, value_key.1).col("nozzle_pressure_ratio", "NPR")
        };
        t = t.col("fully_expanded_mach_number", "Mj");
        if regimes {
            t = t.col("regime", "regime");
        }
        t = t
            .col("fully_expanded_velocity_m_per_s", "Uj [m/s]")
            .col("reference_length_m", "L [m]")
            .col("spacing_m", "Ls [m]")
            .col("powell_fundamental_hz", "Powell [Hz]")
            .col("tam_1986_hz", "Tam 1986 [Hz]");
        for n in 1..=orders {
            t = t.col(format!("loop_n{n}_hz"), format!("n={n} [Hz]"));
        }
        for p in &r.points {
            let mut row = Vec::new();
            if !npr_swept {
                row.push(Some(Val::Num(p.value)));
            }
            row.push(Some(Val::Num(p.nozzle_pressure_ratio)));
            row.push(Some(Val::Num(p.fully_expanded_mach_number)));
            if regimes {
                row.push(Some(Val::Text(regime_name(p.regime))));
            }
            row.extend([
                Some(Val::Num(p.fully_expanded_velocity_m_per_s)),
                Some(Val::Num(p.reference_length_m)),
                p.spacing_m.map(Val::Num),
                p.powell_fundamental_hz.map(Val::Num),
                p.tam_1986_hz.map(Val::Num),
            ]);
            for n in 0..orders {
                row.push(p.loop_frequencies_hz.get(n).copied().map(Val::Num));
            }
            t.row(row);
        }
        if let Some(path) = &a.plot {
            let x_label = match a.vary {
                VaryArg::Npr => "nozzle pressure ratio",
                VaryArg::Mj => "fully expanded Mach number Mj",
                VaryArg::Reflector => "reflector distance [m]",
            };
            crate::plot::write_plot(path, &sweep_plot(&r, x_label)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        if let Some(path) = &a.csv {
            let csv = t.to_csv();
            if path.as_os_str() == "-" {
                print!("{csv}");
                return Ok(Report::new("").quiet());
            }
            std::fs::write(path, csv)
                .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
            // The points went to the file: one summary line, not the table again (cautions
            // and sources stay in --json).
            let rep = Report::new(format!(
                "Screech sweep: {} points written to {} ({:.3} ms server time)",
                r.points.len(),
                path.display(),
                r.compute_time_s * 1e3
            ))
            .int("points", "points", r.points.len() as u64, "")
            .text("csv_file", "CSV file", path.display().to_string())
            .num("compute_time_s", "server compute time", r.compute_time_s, "s")
            .hide(&["compute_time_s"]);
            return Ok(rep.provenance(r.provenance).title_only());
        }
        Ok(Report::new(format!(
            "Screech sweep ({} points, {:.3} ms server time)",
            r.points.len(),
            r.compute_time_s * 1e3
        ))
        .num("compute_time_s", "server compute time", r.compute_time_s, "s")
        .hide(&["compute_time_s"])
        .table(t)
        .provenance(r.provenance))
    }
}
