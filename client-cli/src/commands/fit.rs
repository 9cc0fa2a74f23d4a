//! `jetloop fit`: stages, jumps, hysteresis and loop-model fits of a measured sweep read from CSV.

use crate::args::jet::JetArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::readers::read_points;
use crate::render::charts::stages_plot;
use crate::render::progress::spinner;
use crate::render::report::Report;
use crate::render::stages::fit_report;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use jetloop_proto::pb::staging_service_client::StagingServiceClient;
use std::path::PathBuf;

/// Meaning of the x column.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum ControlArg {
    /// Nozzle pressure ratio (needs the nozzle: --nozzle, --diameter-m, ...).
    Npr,
    /// Fully expanded Mach number (needs the nozzle).
    Mj,
    /// Reflector displacement in m.
    Reflector,
    /// Any other variable (stages only).
    Plain,
}

/// `jetloop fit`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct FitCmd {
    /// CSV with columns x, frequency_hz [, level_db [, direction]] in acquisition order;
    /// direction is up/down (or increasing/decreasing, +/-). A header row is optional.
    file: PathBuf,
    /// Meaning of x.
    #[arg(long, value_enum)]
    control: ControlArg,
    /// The nozzle and gases (NPR and Mj sweeps; the pressure comes from each point).
    #[command(flatten)]
    jet: JetArgs,
    /// Relative frequency change that separates stages (server default 0.05).
    #[arg(long)]
    jump_fraction: Option<f64>,
    /// Highest loop order (server default 10, at most 50).
    #[arg(long)]
    max_loop_order: Option<u32>,
    /// Source position in whole shock cells, held fixed (default: searched).
    #[arg(long)]
    source_cells: Option<u32>,
    /// Lower bound of Uc/Uj (server default 0.4).
    #[arg(long)]
    kappa_min: Option<f64>,
    /// Upper bound of Uc/Uj (server default 0.9).
    #[arg(long)]
    kappa_max: Option<f64>,
    /// Fit the reflector path factor instead of holding it at 2.
    #[arg(long)]
    fit_path_factor: bool,
    /// Relative frequency uncertainty of every point (server default 0.01).
    #[arg(long)]
    relative_uncertainty: Option<f64>,
    /// Write a plot of frequency against x, coloured by stage, with the loop models (SVG, or PNG
    /// for a .png name).
    #[arg(long)]
    plot: Option<PathBuf>,
    /// Label each stage with the screech stage (guided jet mode) its points fit (NPR and Mj
    /// sweeps; at most 2000 points).
    #[arg(long)]
    label_stages: bool,
    /// Stage labels: factor on the vortex-sheet shock-cell spacing in the closure (server
    /// default 1).
    #[arg(long)]
    spacing_factor: Option<f64>,
}

impl FitCmd {
    /// The FitStages request for the measured `points`: the control variable, the nozzle and
    /// gases for NPR and Mj sweeps (the pressure comes from each point), the fit options and
    /// the stage-label settings.
    ///
    /// # Errors
    /// [`Failure::Usage`] when an NPR or Mj sweep's nozzle is incompletely given.
    pub(crate) fn request(&self, points: Vec<pb::MeasuredTone>) -> Result<pb::FitStagesRequest, Failure> {
        let control = match self.control {
            ControlArg::Npr => pb::ControlVariable::NozzlePressureRatio,
            ControlArg::Mj => pb::ControlVariable::FullyExpandedMachNumber,
            ControlArg::Reflector => pb::ControlVariable::ReflectorDistanceM,
            ControlArg::Plain => pb::ControlVariable::Plain,
        };
        let jet = match self.control {
            ControlArg::Npr | ControlArg::Mj => Some(self.jet.context()?),
            _ => None,
        };
        Ok(pb::FitStagesRequest {
            control: control as i32,
            points,
            stage_labels: self.label_stages.then(|| pb::StageLabelSettings {
                modes: Some(pb::GuidedModeOptions {
                    spacing_factor: self.spacing_factor,
                    ..Default::default()
                }),
                band_tolerance_fraction: None,
            }),
            jet,
            options: Some(pb::FitOptions {
                jump_fraction: self.jump_fraction,
                max_loop_order: self.max_loop_order,
                convection_ratio_min: self.kappa_min,
                convection_ratio_max: self.kappa_max,
                source_cells: self.source_cells,
                fit_reflector_path_factor: self.fit_path_factor,
                default_relative_uncertainty: self.relative_uncertainty,
                ..Default::default()
            }),
        })
    }
}

/// Runs `fit`.
impl Run for FitCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let points = read_points(&a.file)?;
        let req = a.request(points.clone())?;
        let s = spinner("fitting stages on the server");
        let r = StagingServiceClient::new(ch).max_decoding_message_size(256 << 20).fit_stages(req).await;
        s.finish_and_clear();
        let r = r?.into_inner();
        if let Some(path) = &a.plot {
            let x_label = match a.control {
                ControlArg::Npr => "nozzle pressure ratio",
                ControlArg::Mj => "fully expanded Mach number",
                ControlArg::Reflector => "reflector distance [m]",
                ControlArg::Plain => "x",
            };
            crate::render::plot::write_plot(path, &stages_plot(&points, &r, x_label))
                .map_err(Failure::Usage)?;
            eprintln!("wrote stage plot {}", path.display());
        }
        Ok(fit_report(r, &a.file, a.label_stages))
    }
}

#[cfg(test)]
mod tests {
    //! Command line and points -> FitStages request, without a server.

    use super::*;

    fn request(line: &str) -> Result<pb::FitStagesRequest, Failure> {
        let crate::Command::Fit(a) = crate::tests::command(line) else { panic!("{line}") };
        a.request(vec![pb::MeasuredTone { x: 3.0, frequency_hz: 5230.0, ..Default::default() }])
    }

    #[test]
    fn an_npr_sweep_sends_the_nozzle_without_a_pressure_and_the_fit_options() {
        let r = request(
            "fit sweep.csv --control npr --diameter-m 0.0254 --source-cells 4 --kappa-min 0.5 --kappa-max 0.85 \
             --max-loop-order 8 --relative-uncertainty 0.02 --label-stages --spacing-factor 0.8",
        )
        .expect("request");
        assert_eq!(r.control, pb::ControlVariable::NozzlePressureRatio as i32);
        assert_eq!(r.points.len(), 1);
        let jet = r.jet.expect("the nozzle");
        assert_eq!(jet.operating_point.and_then(|o| o.pressure), None, "each point carries its NPR");
        let o = r.options.expect("options");
        assert_eq!((o.source_cells, o.max_loop_order), (Some(4), Some(8)));
        assert_eq!((o.convection_ratio_min, o.convection_ratio_max), (Some(0.5), Some(0.85)));
        assert_eq!(o.default_relative_uncertainty, Some(0.02));
        assert!(!o.fit_reflector_path_factor);
        assert_eq!(r.stage_labels.and_then(|l| l.modes).and_then(|m| m.spacing_factor), Some(0.8));
    }

    #[test]
    fn a_reflector_sweep_needs_no_nozzle_and_an_npr_sweep_without_one_is_refused() {
        let r = request("fit refl.csv --control reflector --fit-path-factor").expect("request");
        assert_eq!(r.control, pb::ControlVariable::ReflectorDistanceM as i32);
        assert!(r.jet.is_none() && r.stage_labels.is_none());
        assert!(r.options.is_some_and(|o| o.fit_reflector_path_factor));
        let e = request("fit sweep.csv --control mj").unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--diameter-m")), "{e:?}");
    }
}
