//! `jetloop fit`: stages, jumps, hysteresis and loop-model fits of a measured sweep read from CSV.

use crate::args::jet::JetArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::stages_plot;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
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

pub(crate) fn direction(s: &str) -> Option<pb::SweepDirection> {
    match s.trim().to_ascii_lowercase().as_str() {
        "up" | "increasing" | "+" | "inc" => Some(pb::SweepDirection::Increasing),
        "down" | "decreasing" | "-" | "dec" => Some(pb::SweepDirection::Decreasing),
        "" => Some(pb::SweepDirection::Unspecified),
        _ => None,
    }
}

pub(crate) fn read_points(path: &PathBuf) -> Result<Vec<pb::MeasuredTone>, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
    let mut out = Vec::new();
    for (i, cells) in crate::readers::csv_rows(&text) {
        let (Ok(x), Ok(f)) = (cells[0].parse::<f64>(), cells.get(1).unwrap_or(&"").parse::<f64>()) else {
            if out.is_empty() {
                continue; // header
            }
            return Err(Failure::Usage(format!(
                "{} line {}: x and frequency must be numbers",
                path.display(),
                i + 1
            )));
        };
        let level_db = cells.get(2).and_then(|c| c.parse::<f64>().ok());
        let dir = match cells.get(3) {
            None => pb::SweepDirection::Unspecified,
            Some(c) => direction(c).ok_or_else(|| {
                Failure::Usage(format!("{} line {}: direction '{c}' is not up/down", path.display(), i + 1))
            })?,
        };
        out.push(pb::MeasuredTone {
            x,
            frequency_hz: f,
            level_db,
            frequency_uncertainty_hz: None,
            direction: dir as i32,
            acquisition_index: Some(out.len() as u64),
        });
    }
    Ok(out)
}

pub(crate) fn param_text(p: &pb::FittedParameter) -> String {
    let mut s = match p.standard_error {
        Some(se) => crate::render::report::fmt_uncertain(p.value, se),
        None => crate::render::report::fmt_plain(p.value),
    };
    if p.fixed {
        s.push_str(" (fixed)");
    }
    if p.at_bound {
        s.push_str(" (at bound)");
    }
    s
}

/// The loop fit's verdict against the stated noise, with its reduced chi^2.
pub(crate) fn verdict_text(s: &pb::StageResult) -> Option<Val> {
    let chi = s.reduced_chi_square.map(|c| format!(" (chi^2/dof {c:.2})")).unwrap_or_default();
    match pb::FitVerdict::try_from(s.fit_verdict) {
        Ok(pb::FitVerdict::Consistent) => Some(Val::Text(format!("ok{chi}"))),
        Ok(pb::FitVerdict::ResidualsAboveNoise) => Some(Val::Text(format!("ABOVE NOISE{chi}"))),
        Ok(pb::FitVerdict::NoFreedom) => Some(Val::Text("no freedom".into())),
        _ => None,
    }
}

pub(crate) fn find<'a>(ps: &'a [pb::FittedParameter], name: &str) -> Option<&'a pb::FittedParameter> {
    ps.iter().find(|p| p.name == name)
}

/// Runs `fit`.
impl Run for FitCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let points = read_points(&a.file)?;
        let control = match a.control {
            ControlArg::Npr => pb::ControlVariable::NozzlePressureRatio,
            ControlArg::Mj => pb::ControlVariable::FullyExpandedMachNumber,
            ControlArg::Reflector => pb::ControlVariable::ReflectorDistanceM,
            ControlArg::Plain => pb::ControlVariable::Plain,
        };
        let jet = match a.control {
            ControlArg::Npr | ControlArg::Mj => Some(a.jet.context()?),
            _ => None,
        };
        let req = pb::FitStagesRequest {
            control: control as i32,
            points: points.clone(),
            stage_labels: a.label_stages.then(|| pb::StageLabelSettings {
                modes: Some(pb::GuidedModeOptions { spacing_factor: a.spacing_factor, ..Default::default() }),
                band_tolerance_fraction: None,
            }),
            jet,
            options: Some(pb::FitOptions {
                jump_fraction: a.jump_fraction,
                max_loop_order: a.max_loop_order,
                convection_ratio_min: a.kappa_min,
                convection_ratio_max: a.kappa_max,
                source_cells: a.source_cells,
                fit_reflector_path_factor: a.fit_path_factor,
                default_relative_uncertainty: a.relative_uncertainty,
                ..Default::default()
            }),
        };
        let s = crate::readers::spinner("fitting stages on the server");
        let r = StagingServiceClient::new(ch).max_decoding_message_size(256 << 20).fit_stages(req).await;
        s.finish_and_clear();
        let r = r?.into_inner();
        let mut stages = Table::new("stages", "Stages")
            .col("stage", "stage")
            .col("x_min", "x from")
            .col("x_max", "x to")
            .col("point_count", "points")
            .col("loop_order", "n")
            .col("convection_ratio", "Uc/Uj")
            .col("source_cells", "N cells")
            .col("fixed_delay_s", "tau0 [s]")
            .col("reflector_path_factor", "path factor g")
            .col("rms_relative_error", "rms rel. err.")
            .col("fit_verdict", "fit vs noise");
        if a.label_stages {
            stages = stages.col("stage_label", "guided mode (share of points)");
        }
        for s in &r.stages {
            let text = |n: &str| find(&s.parameters, n).map(|p| Val::Text(param_text(p)));
            let label = s.best_stage.as_ref().map(|b| {
                let id = b.mode.as_ref().map(crate::render::rows::mode_label).unwrap_or_default();
                let letters = if b.customary_stage.is_empty() {
                    String::new()
                } else {
                    format!(" {}", b.customary_stage)
                };
                Val::Text(format!("{id}{letters} ({:.0} %)", 100.0 * s.best_stage_point_fraction))
            });
            let mut row = vec![
                Some(Val::Int(s.stage.into())),
                Some(Val::Num(s.x_min)),
                Some(Val::Num(s.x_max)),
                Some(Val::Int(s.point_count.into())),
                s.loop_order.map(|n| Val::Int(n.into())),
                text("convection_ratio"),
                text("source_cells"),
                text("fixed_delay_s"),
                text("reflector_path_factor"),
                s.rms_relative_error.map(Val::Num),
                verdict_text(s),
            ];
            if a.label_stages {
                row.push(Some(label.unwrap_or(Val::Text("none".into()))));
            }
            stages.row(row);
        }
        let mut jumps = Table::new("jumps", "Jumps")
            .col("direction", "sweep")
            .col("x_before", "x before")
            .col("x_after", "x after")
            .col("from_stage", "from")
            .col("to_stage", "to")
            .col("frequency_before_hz", "f before [Hz]")
            .col("frequency_after_hz", "f after [Hz]");
        for j in &r.jumps {
            let d = match pb::SweepDirection::try_from(j.direction) {
                Ok(pb::SweepDirection::Increasing) => "up",
                Ok(pb::SweepDirection::Decreasing) => "down",
                _ => "-",
            };
            jumps.row(vec![
                Some(Val::Text(d.into())),
                Some(Val::Num(j.x_before)),
                Some(Val::Num(j.x_after)),
                Some(Val::Int(j.from_stage.into())),
                Some(Val::Int(j.to_stage.into())),
                Some(Val::Num(j.frequency_before_hz)),
                Some(Val::Num(j.frequency_after_hz)),
            ]);
        }
        let mut hyst = Table::new("hysteresis", "Hysteresis")
            .col("x_low", "x from")
            .col("x_high", "x to")
            .col("lower_stage", "stage below")
            .col("upper_stage", "stage above");
        for h in &r.hysteresis {
            hyst.row(vec![
                Some(Val::Num(h.x_low)),
                Some(Val::Num(h.x_high)),
                Some(Val::Int(h.lower_stage.into())),
                Some(Val::Int(h.upper_stage.into())),
            ]);
        }
        let mut models = Table::new("models", "Model comparison")
            .col("model", "model")
            .col("parameter_count", "parameters")
            .col("chi_square", "chi^2")
            .col("aic", "AIC")
            .col("bic", "BIC")
            .col("preferred", "preferred");
        for m in &r.models {
            models.row(vec![
                Some(Val::Text(m.model.clone())),
                Some(Val::Int(m.parameter_count.into())),
                Some(Val::Num(m.chi_square)),
                Some(Val::Num(m.aic)),
                Some(Val::Num(m.bic)),
                Some(Val::Flag(m.preferred)),
            ]);
        }
        let mut rep = Report::new(format!(
            "Stages of {} ({} points, {:.2} ms server time)",
            a.file.display(),
            r.points.len(),
            r.compute_time_s * 1e3
        ))
        .table(stages)
        .table(jumps)
        .table(hyst)
        .table(models);
        for w in &r.warnings {
            rep = rep.text("warning", "warning", w.clone());
        }
        for s in &r.stages {
            if !s.alias_resolution.is_empty() {
                rep = rep.text(
                    "alias",
                    "loop-order ambiguity",
                    format!("stage {}: {}", s.stage, s.alias_resolution),
                );
            }
        }
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
        Ok(rep.provenance(r.provenance))
    }
}
