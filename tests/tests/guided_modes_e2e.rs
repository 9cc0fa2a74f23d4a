//! End to end over a real socket: ToneService.GuidedModes, guided modes in PredictScreech and
//! SweepScreech, and stage labels on extracted tones. The roots themselves are checked against
//! an independent SciPy solver in tests/python/test_guided_modes.py.

use jetloop_proto::pb::{
    self, samples::Data, spectrum_service_client::SpectrumServiceClient,
    tone_service_client::ToneServiceClient,
};
use jetloop_tests::fixtures::{
    conditions, direct, expanded_input, fully_expanded, inch_nozzle, npr_sweep, point, rel, round,
};
use jetloop_tests::samples::{
    f32_pascals, frames_block, opening_block, pascals, track_frames, track_start, welch_segment,
};
use jetloop_tests::signals::f32_le;
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use tonic::Code;

fn sheet(mj: f64, t0: f64) -> pb::guided_modes_request::Source {
    pb::guided_modes_request::Source::VortexSheet(pb::VortexSheetJet {
        fully_expanded_mach_number: mj,
        temperature: Some(pb::vortex_sheet_jet::Temperature::TotalTemperatureRatio(t0)),
        gamma: None,
        geometry: 0,
    })
}

fn round_mode(m: u32, r: u32) -> pb::GuidedModeId {
    pb::GuidedModeId { shape: pb::ModeShape::Round as i32, azimuthal_order: m, radial_order: r }
}

#[tokio::test]
async fn bad_inputs_name_their_field() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let ask = |source, options| pb::GuidedModesRequest { source: Some(source), options, curve_points: None };
    // Mj <= 1 for the solver.
    let e = t.guided_modes(ask(sheet(1.0, 1.0), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "vortex_sheet.fully_expanded_mach_number");
    // Temperature ratio <= 0.
    let e = t.guided_modes(ask(sheet(1.5, 0.0), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "vortex_sheet.total_temperature_ratio");
    // Mode orders out of range.
    let opts = |m| Some(pb::GuidedModeOptions { modes: vec![m], ..Default::default() });
    let e = t.guided_modes(ask(sheet(1.5, 1.0), opts(round_mode(3, 1)))).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "options.modes[0].azimuthal_order");
    let e = t.guided_modes(ask(sheet(1.5, 1.0), opts(round_mode(0, 4)))).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "options.modes[0].radial_order");
    // A planar mode for a round jet.
    let planar = pb::GuidedModeId {
        shape: pb::ModeShape::PlanarSymmetric as i32,
        azimuthal_order: 0,
        radial_order: 1,
    };
    let e = t.guided_modes(ask(sheet(1.5, 1.0), opts(planar))).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "options.modes[0].shape");
    // A jet outside the solver's range names the field the caller sent (not the solver's own
    // parameters): a fully expanded Mach number given directly, a pressure ratio, and the
    // temperatures that set an extreme density ratio.
    let expanded = |mj: f64, t0: Option<f64>, ta: Option<f64>| {
        pb::guided_modes_request::Source::Jet(expanded_input(pb::FullyExpandedJet {
            total_temperature_k: t0,
            ambient_temperature_k: ta,
            ..fully_expanded(mj, 0.0254)
        }))
    };
    let e = t.guided_modes(ask(expanded(6.5, None, None), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "jet.fully_expanded.fully_expanded_mach_number");
    let e = t
        .guided_modes(ask(pb::guided_modes_request::Source::Jet(inch_nozzle(600.0)), None))
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "jet.conditions.operating_point.nozzle_pressure_ratio");
    // Tj / Ta = (5000 K / 1.8) / 20 K = 139: density ratio 0.007, below the solver's 0.01.
    let e = t.guided_modes(ask(expanded(2.0, Some(5000.0), Some(20.0)), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "jet.fully_expanded.total_temperature_k");
    assert_field(&e, Code::InvalidArgument, "jet.fully_expanded.ambient_temperature_k");
    for v in
        tonic_types::StatusExt::get_error_details(&e).bad_request().expect("details").field_violations.iter()
    {
        assert!(!v.field.ends_with(".density_ratio") && v.field != "jet.fully_expanded_mach_number", "{v:?}");
    }
    // A subsonic jet given by conditions is a precondition failure, not an argument error.
    let e =
        t.guided_modes(ask(pb::guided_modes_request::Source::Jet(inch_nozzle(1.5)), None)).await.unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition);
}

#[tokio::test]
async fn a_jet_with_a_size_gets_hertz_consistent_with_its_strouhal_numbers() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let r = t
        .guided_modes(pb::GuidedModesRequest {
            source: Some(pb::guided_modes_request::Source::Jet(direct(1.3, 0.02))),
            options: None,
            curve_points: Some(50),
        })
        .await
        .unwrap()
        .into_inner();
    let j = r.jet.unwrap();
    assert_eq!(r.modes.len(), 4);
    for m in &r.modes {
        assert_eq!(m.curve.len(), 50);
        let b = m.branch_point.unwrap();
        // St = f Dj / Uj (definition).
        let st = b.frequency_hz.unwrap() * j.reference_length_m / j.fully_expanded_velocity_m_per_s;
        assert!(rel(st, b.strouhal_number) < 1e-12);
        // The branch point lies on the sonic line k = -omega / a_ambient (definition).
        let k_sonic = -2.0 * PI * b.frequency_hz.unwrap() / j.ambient_sound_speed_m_per_s;
        assert!(rel(b.wavenumber_rad_per_m.unwrap(), k_sonic) < 1e-9, "{b:?} vs {k_sonic}");
    }
    // The same jet given by ratios: the cold jet T0 = Ta gives the same Strouhal numbers.
    let d = t
        .guided_modes(pb::GuidedModesRequest {
            source: Some(sheet(1.3, 1.0)),
            options: None,
            curve_points: Some(0),
        })
        .await
        .unwrap()
        .into_inner();
    for (a, b) in r.modes.iter().zip(&d.modes) {
        let (x, y) = (a.branch_point.unwrap().strouhal_number, b.branch_point.unwrap().strouhal_number);
        assert!(rel(x, y) < 1e-9, "{x} vs {y}");
        assert!(b.curve.is_empty() && b.branch_point.unwrap().frequency_hz.is_none());
    }
}

#[tokio::test]
async fn screech_and_sweep_carry_guided_modes_on_request() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let options = pb::ScreechOptions {
        cells: Some(pb::CellOptions { spacing_factor: Some(0.8), ..Default::default() }),
        guided_modes: Some(pb::GuidedModeOptions::default()),
        ..Default::default()
    };
    let r = t
        .predict_screech(pb::PredictScreechRequest {
            jet: Some(inch_nozzle(3.0)),
            options: Some(options.clone()),
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.guided_modes.len(), 4);
    // The closure took the request's spacing factor.
    assert!(r
        .provenance
        .unwrap()
        .defaults_applied
        .iter()
        .any(|d| d.field == "options.guided_modes.spacing_factor"
            && d.reason.contains("options.cells.spacing_factor")));
    // Every in-band closure of cell mode 1 is listed beside Powell and Tam, at its frequency.
    for m in &r.guided_modes {
        let t1 = m.tones.iter().find(|t| t.cell_mode == 1).unwrap();
        if t1.outcome == pb::ClosureOutcome::InBand as i32 {
            let f = t1.tone.unwrap().frequency_hz.unwrap();
            assert!(r
                .predictions
                .iter()
                .any(|p| p.model.starts_with("guided jet mode") && p.fundamental_hz == f));
        }
    }
    let sw = t
        .sweep_screech(pb::SweepScreechRequest {
            jet: Some(inch_nozzle(3.0)),
            variable: pb::SweepVariable::NozzlePressureRatio as i32,
            values: Some(pb::sweep_screech_request::Values::List(pb::SweepValues {
                values: vec![1.5, 2.5, 3.0, 4.0],
            })),
            options: Some(options.clone()),
        })
        .await
        .unwrap()
        .into_inner();
    for p in &sw.points {
        assert_eq!(p.guided_modes.len(), if p.supersonic { 4 } else { 0 });
    }
    // The sweep point at NPR 3.0 equals the single prediction.
    assert_eq!(sw.points[2].guided_modes, r.guided_modes);
    // Guided sweeps are bounded.
    let e = t
        .sweep_screech(pb::SweepScreechRequest {
            options: Some(options),
            ..npr_sweep(inch_nozzle(3.0), 2.0, 5.0, 2001)
        })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::ResourceExhausted);
}

/// 200 Pa amplitude: a screech tone of about 137 dB (below the 140 dB caution).
fn sine(n: usize, fs: f64, f: f64) -> Vec<f64> {
    jetloop_tests::sine(n, fs, f, 200.0)
}

#[tokio::test]
async fn a_tone_at_a_closure_frequency_is_labelled_with_its_stage_and_one_outside_every_band_with_none() {
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut t = ToneServiceClient::new(ch.clone());
    let mut s = SpectrumServiceClient::new(ch);
    // A cold 25.4 mm nozzle at NPR 3.0 with cells at 0.8 of the vortex sheet: the m = 1 mode
    // closes in its band (checked here, not assumed).
    let modes = pb::GuidedModeOptions { spacing_factor: Some(0.8), ..Default::default() };
    let g = t
        .guided_modes(pb::GuidedModesRequest {
            source: Some(pb::guided_modes_request::Source::Jet(inch_nozzle(3.0))),
            options: Some(modes.clone()),
            curve_points: Some(0),
        })
        .await
        .unwrap()
        .into_inner();
    let (mode, f_stage) = g
        .modes
        .iter()
        .find_map(|m| {
            let t = m.tones.iter().find(|t| t.outcome == pb::ClosureOutcome::InBand as i32)?;
            Some((m.mode.unwrap(), t.tone.unwrap().frequency_hz.unwrap()))
        })
        .expect("some mode closes in its band");
    let lowest = g
        .modes
        .iter()
        .filter(|m| m.has_band)
        .map(|m| m.branch_point.unwrap().frequency_hz.unwrap())
        .fold(f64::INFINITY, f64::min);
    let f_none = 0.5 * lowest;
    let fs = 96_000.0;
    let n = 1 << 17;
    let values: Vec<f64> = sine(n, fs, f_stage).iter().zip(sine(n, fs, f_none)).map(|(a, b)| a + b).collect();
    let req = pb::ExtractTonesRequest {
        samples: Some(pascals(values, fs)),
        stage_labels: Some(pb::StageLabelOptions {
            jet: Some(inch_nozzle(3.0)),
            modes: Some(modes),
            band_tolerance_fraction: None,
        }),
        ..Default::default()
    };
    // The same question as a block stream (raw f32 frames after the first message) must
    // carry the same labels.
    let Some(Data::Values(v)) = req.samples.as_ref().and_then(|x| x.data.clone()) else { unreachable!() };
    let raw = f32_le(&v.values);
    let mut first = req.clone();
    first.samples = Some(f32_pascals(Vec::new(), fs, 0));
    let msgs = vec![opening_block(first.clone()), frames_block(raw.clone())];
    let streamed = s.extract_tones_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    let r = s.extract_tones(req).await.unwrap().into_inner();
    assert_eq!(r.stage_bands.len(), 4);
    let best_of = |x: &pb::ExtractTonesResponse| -> Vec<Option<pb::GuidedModeId>> {
        x.channels[0].tones.iter().map(|t| t.best_stage.as_ref().and_then(|b| b.mode)).collect()
    };
    assert_eq!(best_of(&streamed), best_of(&r), "a stream labels its tones as one request does");
    let tones = &r.channels[0].tones;
    let near = |f: f64| tones.iter().find(|t| (t.frequency_hz - f).abs() < 0.002 * f).unwrap();
    let staged = near(f_stage);
    let best = staged.best_stage.as_ref().expect("labelled");
    assert_eq!(best.mode.unwrap(), mode);
    assert!(best.relative_deviation.unwrap().abs() < 1e-3, "{best:?}");
    assert!(best.band_low_hz <= f_stage && f_stage <= best.band_high_hz && best.band_distance == 0.0);
    let other = near(f_none);
    assert!(other.best_stage.is_none() && other.stages.is_empty(), "{other:?}");
    // A live tracking stream labels its tracked tones the same way.
    let mut analysis = first.clone();
    analysis.welch = Some(welch_segment(8192));
    let config = track_start(pb::TrackConfig { analysis: Some(analysis), ..Default::default() });
    let frames = track_frames(raw.clone());
    let mut live = s.track_tones(tokio_stream::iter(vec![config, frames])).await.unwrap().into_inner();
    let mut labelled = 0;
    while let Some(u) = live.message().await.unwrap() {
        for t in &u.channels[0].tones {
            if (t.frequency_hz - f_stage).abs() < 0.002 * f_stage {
                assert_eq!(t.best_stage.as_ref().and_then(|b| b.mode), Some(mode), "{t:?}");
                labelled += 1;
            } else if (t.frequency_hz - f_none).abs() < 0.002 * f_none {
                assert!(t.best_stage.is_none(), "{t:?}");
            }
        }
    }
    assert!(labelled > 0, "no update held the stage tone");
    // Stage labels need a round or planar jet.
    let e = s
        .extract_tones(pb::ExtractTonesRequest {
            samples: Some(pascals(sine(4096, fs, 1000.0), fs)),
            stage_labels: Some(pb::StageLabelOptions {
                jet: None,
                modes: None,
                band_tolerance_fraction: None,
            }),
            ..Default::default()
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "stage_labels.jet");
}

#[tokio::test]
async fn fitted_stages_are_labelled_with_the_mode_their_points_fit() {
    use jetloop_proto::pb::staging_service_client::StagingServiceClient;
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut t = ToneServiceClient::new(ch.clone());
    let mut st = StagingServiceClient::new(ch);
    let modes = pb::GuidedModeOptions { spacing_factor: Some(0.8), ..Default::default() };
    // Points at the m = 1 closure tone of a cold 25.4 mm nozzle over NPR 3.00-3.12 (where it
    // closes in its band with cells at 0.8 of the vortex sheet; checked, not assumed).
    let mut points = Vec::new();
    for k in 0..7 {
        let npr = 3.0 + 0.02 * f64::from(k);
        let g = t
            .guided_modes(pb::GuidedModesRequest {
                source: Some(pb::guided_modes_request::Source::Jet(inch_nozzle(npr))),
                options: Some(pb::GuidedModeOptions { modes: vec![round_mode(1, 1)], ..modes.clone() }),
                curve_points: Some(0),
            })
            .await
            .unwrap()
            .into_inner();
        let tone = g.modes[0].tones.iter().find(|t| t.cell_mode == 1).unwrap();
        assert_eq!(tone.outcome, pb::ClosureOutcome::InBand as i32, "NPR {npr}");
        points.push(point(npr, tone.tone.unwrap().frequency_hz.unwrap()));
    }
    let jet = conditions(round(0.0254), 3.0);
    let r = st
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::NozzlePressureRatio as i32,
            points,
            jet: Some(jet),
            options: None,
            stage_labels: Some(pb::StageLabelSettings {
                modes: Some(modes),
                band_tolerance_fraction: Some(0.0),
            }),
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.stages.len(), 1);
    let s = &r.stages[0];
    assert_eq!(s.best_stage.as_ref().unwrap().mode.unwrap(), round_mode(1, 1));
    assert_eq!(s.best_stage_point_fraction, 1.0);
    assert!(r.points.iter().all(|p| p.best_stage.as_ref().unwrap().relative_deviation.unwrap().abs() < 1e-9));
    // A plain control variable has no jet to label with.
    let e = st
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::Plain as i32,
            points: vec![point(1.0, 1000.0), point(2.0, 1010.0), point(3.0, 1020.0)],
            jet: None,
            options: None,
            stage_labels: Some(pb::StageLabelSettings::default()),
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "stage_labels");
}
