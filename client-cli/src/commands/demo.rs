//! `jetloop demo`: the whole job on an invented scenario, end to end against a running server.
//!
//! Scenario (invented): a cold 25.4 mm round convergent nozzle on an imagined model-scale rig,
//! the NPR swept up from 2.3 to 4.5 and back. The rig screeches on three stages, each on
//! Powell's loop with loop order 4 and source cell 4 but its own convection ratio
//! ([`STAGES`]); on the way up the tone changes stage at NPR 3.125 and 3.825, on the way down
//! at 3.625 and 2.875 (hysteresis). The loop frequencies come from the server's own screech
//! model (SweepScreech). At every point a microphone signal is synthesized (tone, second
//! harmonic, broadband noise), its tones extracted (ExtractTones), and the strongest tones of
//! the sweep go to FitStages: the summary says whether the fitted loop orders are the ones
//! the scenario was built with. Plots and the points go to the output folder.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use jetloop_proto::pb::staging_service_client::StagingServiceClient;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;
use std::path::PathBuf;

/// Convection ratio Uc/Uj of each stage (invented).
pub(crate) const STAGES: [f64; 3] = [0.72, 0.58, 0.68];

/// Loop order and source cell of every stage.
pub(crate) const ORDER: u32 = 4;

/// NPR at which the tone moves up a stage on the way up.
pub(crate) const UP: [f64; 2] = [3.125, 3.825];

/// NPR at which the tone moves down a stage on the way down.
pub(crate) const DOWN: [f64; 2] = [2.875, 3.625];

/// Nozzle exit diameter, m.
pub(crate) const DIAMETER_M: f64 = 0.0254;

/// Sample rate of the synthesized microphone, Hz.
pub(crate) const FS: f64 = 51_200.0;

/// `jetloop demo`.
#[derive(Debug, Args)]
pub struct DemoCmd {
    /// Folder for the plots, the points and the summary (created if missing).
    out: PathBuf,
    /// A smaller sweep (NPR steps of 0.1 instead of 0.05, 0.1 s per point instead of 0.25 s).
    #[arg(long)]
    small: bool,
}

/// The scenario's jet: the round convergent nozzle ([`DIAMETER_M`]) at NPR 3 (sweeps set
/// the NPR per point).
pub(crate) fn jet() -> pb::JetInput {
    pb::JetInput {
        source: Some(pb::jet_input::Source::Conditions(pb::JetConditions {
            nozzle: Some(pb::Nozzle {
                kind: Some(pb::nozzle::Kind::RoundConvergent(pb::RoundConvergentNozzle {
                    exit_diameter_m: DIAMETER_M,
                })),
            }),
            operating_point: Some(pb::OperatingPoint {
                pressure: Some(pb::operating_point::Pressure::NozzlePressureRatio(3.0)),
                ..Default::default()
            }),
            ..Default::default()
        })),
    }
}

/// One second of a microphone at `f` Hz: tone at 130 dB re 20 uPa, second harmonic 9 dB
/// below, white noise at 110 dB overall; `seconds` long, seeded.
pub(crate) fn microphone(f: f64, seconds: f64, seed: u64) -> Vec<u8> {
    let n = (seconds * FS) as usize;
    let amp = |db: f64| 20e-6 * 10f64.powf(db / 20.0) * 2f64.sqrt();
    let (a1, a2, sigma) = (amp(130.0), amp(121.0), 20e-6 * 10f64.powf(110.0 / 20.0));
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut uniform = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    let mut out = Vec::with_capacity(4 * n);
    for k in 0..n {
        let t = k as f64 / FS;
        let w = 2.0 * std::f64::consts::PI * f * t;
        let g = (-2.0 * uniform().ln()).sqrt() * (2.0 * std::f64::consts::PI * uniform()).cos();
        let p = a1 * w.sin() + a2 * (2.0 * w + 0.4).sin() + sigma * g;
        out.extend_from_slice(&(p as f32).to_le_bytes());
    }
    out
}

/// Writes `text` to `path`.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be written.
pub(crate) fn write(path: &std::path::Path, text: &str) -> Result<(), Failure> {
    std::fs::write(path, text).map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))
}

/// A plot as `name.svg` and `name.png` in `dir`.
pub(crate) fn plot(dir: &std::path::Path, name: &str, svg: &str) -> Result<(), Failure> {
    write(&dir.join(format!("{name}.svg")), svg)?;
    crate::render::plot::write_plot(&dir.join(format!("{name}.png")), svg).map_err(Failure::Usage)
}

impl Run for DemoCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let ch = ctx.channel().await?;
        std::fs::create_dir_all(&self.out)
            .map_err(|e| Failure::Usage(format!("cannot create {}: {e}", self.out.display())))?;
        let (step, seconds): (f64, f64) = if self.small { (0.1, 0.1) } else { (0.05, 0.25) };
        let count = ((4.5 - 2.3) / step).round() as usize;
        let grid: Vec<f64> = (0..=count).map(|k| 2.3 + step * k as f64).collect();

        // 1. The loop frequency of each stage over the grid, from the server's screech model.
        let mut tones = ToneServiceClient::new(ch.clone());
        let mut model: Vec<Vec<f64>> = Vec::new();
        let mut map = None;
        for kappa in STAGES {
            let r = tones
                .sweep_screech(pb::SweepScreechRequest {
                    jet: Some(jet()),
                    variable: pb::SweepVariable::NozzlePressureRatio as i32,
                    values: Some(pb::sweep_screech_request::Values::List(pb::SweepValues {
                        values: grid.clone(),
                    })),
                    options: Some(pb::ScreechOptions {
                        convection: Some(pb::Convection {
                            speed: Some(pb::convection::Speed::ConvectionRatio(kappa)),
                        }),
                        r#loop: Some(pb::FeedbackLoop {
                            source: Some(pb::feedback_loop::Source::SourceCells(f64::from(ORDER))),
                            max_loop_order: Some(ORDER),
                            ..Default::default()
                        }),
                        ..Default::default()
                    }),
                })
                .await?
                .into_inner();
            let f: Vec<f64> = r
                .points
                .iter()
                .map(|p| p.loop_frequencies_hz.get(ORDER as usize - 1).copied().unwrap_or(f64::NAN))
                .collect();
            if f.iter().any(|v| !v.is_finite()) {
                return Err(Failure::Usage(
                    "the scenario's jet is not supersonic over the whole sweep".into(),
                ));
            }
            model.push(f);
            map.get_or_insert(r);
        }

        // 2. Acquire the sweep: up, then down, one synthesized microphone per point.
        let bar = indicatif::ProgressBar::new(2 * grid.len() as u64);
        bar.set_style(
            indicatif::ProgressStyle::with_template("demo sweep {bar:30} {pos}/{len} points")
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        let mut spectrum = SpectrumServiceClient::new(ch.clone());
        let mut points = Vec::new();
        let mut first_psd = None;
        let order: Vec<(usize, bool)> =
            (0..grid.len()).map(|i| (i, true)).chain((0..grid.len()).rev().map(|i| (i, false))).collect();
        for (k, &(i, rising)) in order.iter().enumerate() {
            let x = grid[i];
            let thresholds = if rising { UP } else { DOWN };
            let stage = thresholds.iter().filter(|&&t| x > t).count();
            let f = model[stage][i];
            let r = spectrum
                .extract_tones(pb::ExtractTonesRequest {
                    samples: Some(pb::Samples {
                        sample_rate_hz: FS,
                        channel_count: 1,
                        data: Some(pb::samples::Data::Raw(pb::RawSamples {
                            data: microphone(f, seconds, k as u64 + 1).into(),
                            format: pb::SampleFormat::F32Le as i32,
                        })),
                        calibration: Some(pb::Calibration {
                            scale: Some(pb::calibration::Scale::InPascals(true)),
                        }),
                        ..Default::default()
                    }),
                    psd_output: Some(pb::PsdOutputOptions { include: k == 0, max_points: None }),
                    ..Default::default()
                })
                .await?
                .into_inner();
            let c = r.channels.into_iter().next().unwrap_or_default();
            if let Some(t) = c.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)) {
                points.push(pb::MeasuredTone {
                    x,
                    frequency_hz: t.frequency_hz,
                    level_db: Some(t.level_db),
                    frequency_uncertainty_hz: None,
                    direction: if rising {
                        pb::SweepDirection::Increasing
                    } else {
                        pb::SweepDirection::Decreasing
                    } as i32,
                    acquisition_index: Some(k as u64),
                });
            }
            if k == 0 {
                first_psd = c.psd.map(|p| (p, c.tones));
            }
            bar.inc(1);
        }
        bar.finish_and_clear();

        // 3. Fit the stages.
        let fit = StagingServiceClient::new(ch)
            .fit_stages(pb::FitStagesRequest {
                control: pb::ControlVariable::NozzlePressureRatio as i32,
                points: points.clone(),
                jet: match jet().source {
                    Some(pb::jet_input::Source::Conditions(c)) => Some(c),
                    _ => None,
                },
                options: Some(pb::FitOptions { source_cells: Some(ORDER), ..Default::default() }),
                stage_labels: None,
            })
            .await?
            .into_inner();

        // 4. Plots, points and summary.
        let mut csv = String::from("npr,frequency_hz,level_db,direction\n");
        for p in &points {
            let dir = if p.direction == pb::SweepDirection::Increasing as i32 { "up" } else { "down" };
            csv.push_str(&format!(
                "{:.2},{:.2},{:.2},{dir}\n",
                p.x,
                p.frequency_hz,
                p.level_db.unwrap_or(f64::NAN)
            ));
        }
        write(&self.out.join("points.csv"), &csv)?;
        plot(
            &self.out,
            "stages",
            &crate::render::charts::stages_plot(&points, &fit, "nozzle pressure ratio"),
        )?;
        if let Some(m) = &map {
            plot(&self.out, "screech-map", &crate::render::charts::sweep_plot(m, "nozzle pressure ratio"))?;
        }
        if let Some((p, t)) = &first_psd {
            let label = format!("NPR {:.2}", grid[0]);
            plot(
                &self.out,
                "spectrum",
                &crate::render::charts::svg_plot(&label, &[(label.clone(), p, t)], false),
            )?;
        }
        let mut t = Table::new("stages", "Stages found against the scenario")
            .col("stage", "stage")
            .col("x_from", "NPR from")
            .col("x_to", "NPR to")
            .col("points", "points")
            .col("fitted_loop_order", "fitted n")
            .col("built_loop_order", "built n")
            .col("fitted_convection_ratio", "fitted Uc/Uj");
        let mut recovered = fit.stages.len() == STAGES.len();
        for s in &fit.stages {
            let kappa = s.parameters.iter().find(|p| p.name.starts_with("convection")).map(|p| p.value);
            recovered &= s.loop_order == Some(ORDER);
            t.row(vec![
                Some(Val::Int(s.stage.into())),
                Some(Val::Num(s.x_min)),
                Some(Val::Num(s.x_max)),
                Some(Val::Int(s.point_count.into())),
                s.loop_order.map(|n| Val::Int(n.into())),
                Some(Val::Int(ORDER.into())),
                kappa.map(Val::Num),
            ]);
        }
        let summary = Report::new(format!(
            "Demo (invented scenario): cold {} mm convergent nozzle, NPR 2.3 -> 4.5 -> 2.3, {} points; plots in {}",
            DIAMETER_M * 1e3,
            points.len(),
            self.out.display()
        ))
        .int("points", "points acquired", points.len() as u64, "")
        .int("stages_built", "stages in the scenario", STAGES.len() as u64, "")
        .int("stages_found", "stages found", fit.stages.len() as u64, "")
        .int("jumps_found", "jumps found", fit.jumps.len() as u64, "")
        .flag("loop_orders_recovered", "fitted loop orders equal the built ones", recovered)
        .text("files", "files", "points.csv, stages, screech-map and spectrum as .svg and .png, summary.txt")
        .table(t);
        write(&self.out.join("summary.txt"), &summary.to_table())?;
        Ok(summary)
    }
}

#[cfg(test)]
mod tests {
    //! The scenario's fixed inputs, without a server.

    use super::*;

    #[test]
    fn the_scenario_jet_is_the_convergent_nozzle_and_the_microphone_is_seeded() {
        let Some(pb::jet_input::Source::Conditions(c)) = jet().source else { panic!("not conditions") };
        assert_eq!(
            c.nozzle.and_then(|n| n.kind),
            Some(pb::nozzle::Kind::RoundConvergent(pb::RoundConvergentNozzle {
                exit_diameter_m: DIAMETER_M
            }))
        );
        let m = microphone(5000.0, 0.01, 1);
        assert_eq!(m.len(), 4 * 512, "0.01 s at 51.2 kHz as f32");
        assert_eq!(m, microphone(5000.0, 0.01, 1), "the same seed, the same signal");
        assert_ne!(m, microphone(5000.0, 0.01, 2));
    }
}
