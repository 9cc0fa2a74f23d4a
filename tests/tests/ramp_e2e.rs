//! End to end over a real socket: AnalyseRamp on a continuous NPR ramp recorded with a gauge
//! pressure channel, and its fit points fitted by FitStages.

use jetloop_proto::pb::{
    self, spectrum_service_client::SpectrumServiceClient, staging_service_client::StagingServiceClient,
};
use jetloop_tests::demo_sweep::{model_hz, stage_at, DOWN, UP};
use jetloop_tests::fixtures::{nozzle_only, round};
use jetloop_tests::samples::welch_segment;
use jetloop_tests::signals::XorShift;
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;

const FS: f64 = 25_600.0;
/// Seconds up and seconds down.
const HALF_S: f64 = 10.0;
/// Gauge transducer: 1e5 Pa per volt (0-10 V over 0-1 MPa; invented rig).
const PA_PER_VOLT: f64 = 1e5;
const AMBIENT_PA: f64 = 101_325.0;

/// NPR at time `t`: 2.3 -> 4.5 over HALF_S, then back.
fn npr_at(t: f64) -> f64 {
    let u = if t < HALF_S { t / HALF_S } else { 2.0 - t / HALF_S };
    2.3 + 2.2 * u
}

/// Two channels, interleaved f32: a microphone (pascals) with the demo-sweep stage tone at
/// its instantaneous loop-model frequency (phase integrated sample by sample) over white
/// noise, and the gauge transducer in volts.
fn ramp_recording() -> Vec<u8> {
    let n = (2.0 * HALF_S * FS) as usize;
    let mut phase = 0.0f64;
    let mut noise = XorShift::new(7);
    let mut out = Vec::with_capacity(n * 8);
    for i in 0..n {
        let t = i as f64 / FS;
        let npr = npr_at(t);
        let f = model_hz(stage_at(npr, t < HALF_S), npr);
        phase += 2.0 * std::f64::consts::PI * f / FS;
        let p = 20.0 * phase.sin() + 2.0 * noise.centered();
        let volts = (npr - 1.0) * AMBIENT_PA / PA_PER_VOLT;
        out.extend_from_slice(&(p as f32).to_le_bytes());
        out.extend_from_slice(&(volts as f32).to_le_bytes());
    }
    out
}

fn request(data: Vec<u8>) -> pb::AnalyseRampRequest {
    pb::AnalyseRampRequest {
        samples: Some(jetloop_tests::f32_pascals(data, FS, 2)),
        control: Some(pb::ControlChannel {
            channel: 1,
            quantity: pb::ControlQuantity::ReservoirGaugePressurePa as i32,
            units_per_sample: PA_PER_VOLT,
            offset: None,
            ambient_pressure_pa: Some(AMBIENT_PA),
        }),
        frame_duration_s: Some(0.2),
        welch: Some(welch_segment(1024)),
        tones: None,
        fit_channel: None,
    }
}

#[tokio::test]
async fn a_continuous_ramp_gives_tones_against_npr_ready_for_a_stage_fit() {
    let server = TestServer::start().await;
    let mut s = SpectrumServiceClient::new(server.channel().await).max_encoding_message_size(64 << 20);
    let r = s.analyse_ramp(request(ramp_recording())).await.expect("ramp").into_inner();
    assert_eq!(r.frames.len(), 100);
    assert_eq!(r.fit_channel, 0);
    // Every frame's NPR is the mean of the gauge channel: NPR = (gauge + pa) / pa (definition
    // of gauge pressure; common practice), within the f32 rounding of the volts.
    for f in &r.frames {
        let mid = 0.5 * (f.start_s + f.end_s);
        assert!((f.nozzle_pressure_ratio - npr_at(mid)).abs() < 1e-4, "{mid} s: {}", f.nozzle_pressure_ratio);
    }
    // The fit points: the tone's frequency at each frame within the frame's resolution (25 Hz)
    // plus the change of the synthesized frequency across the frame, except frames that hold a
    // stage change of the synthesized signal.
    assert_eq!(r.fit_points.len(), 100);
    let mut checked = 0;
    for p in &r.fit_points {
        let i = p.acquisition_index.expect("index") as usize;
        let fr = &r.frames[i];
        let rising = fr.end_s <= HALF_S;
        let (a, b) = (npr_at(fr.start_s), npr_at(fr.end_s));
        let (lo, hi) = (a.min(b), a.max(b));
        let thresholds = if rising { UP } else { DOWN };
        if thresholds.iter().any(|&x| x > lo && x <= hi) || (fr.start_s < HALF_S && fr.end_s > HALF_S) {
            continue;
        }
        let (fa, fb) = (model_hz(stage_at(a, rising), a), model_hz(stage_at(b, rising), b));
        let model = model_hz(stage_at(p.x, rising), p.x);
        assert!(
            (p.frequency_hz - model).abs() <= FS / 1024.0 + (fa - fb).abs(),
            "NPR {}: {} vs {model}",
            p.x,
            p.frequency_hz
        );
        let want = if rising { pb::SweepDirection::Increasing } else { pb::SweepDirection::Decreasing };
        assert_eq!(p.direction, want as i32);
        checked += 1;
    }
    assert!(checked >= 90, "{checked}");
    // Straight into FitStages: the three stages of the synthesized sweep, loop order 4 with
    // N = 4 given (the values the signal was made with), and jumps up and down.
    let mut st = StagingServiceClient::new(server.channel().await);
    let fit = st
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::NozzlePressureRatio as i32,
            points: r.fit_points.clone(),
            jet: Some(nozzle_only(round(0.0254))),
            options: Some(pb::FitOptions { source_cells: Some(4), ..Default::default() }),
            stage_labels: None,
        })
        .await
        .expect("fit")
        .into_inner();
    assert_eq!(
        fit.stages.len(),
        3,
        "{:?}",
        fit.stages.iter().map(|s| (s.x_min, s.x_max)).collect::<Vec<_>>()
    );
    for s in &fit.stages {
        assert_eq!(s.loop_order, Some(4), "stage {}", s.stage);
    }
    assert!(fit.jumps.len() >= 4, "{}", fit.jumps.len());

    // Bad requests name the field.
    let mut bad = request(vec![0; 8 * 4096]);
    bad.control.as_mut().unwrap().channel = 2;
    assert_field(&s.analyse_ramp(bad).await.unwrap_err(), Code::InvalidArgument, "control.channel");
    let mut bad = request(vec![0; 8 * 4096]);
    bad.control.as_mut().unwrap().quantity = 0;
    assert_field(&s.analyse_ramp(bad).await.unwrap_err(), Code::InvalidArgument, "control.quantity");
    let mut bad = request(vec![0; 8 * 4096]);
    bad.frame_duration_s = Some(10.0);
    assert_field(&s.analyse_ramp(bad).await.unwrap_err(), Code::InvalidArgument, "frame_duration_s");
    let mut bad = request(vec![0; 8 * 4096]);
    bad.fit_channel = Some(1);
    assert_field(&s.analyse_ramp(bad).await.unwrap_err(), Code::InvalidArgument, "fit_channel");
    server.stop().await;
}

#[tokio::test]
async fn the_ramp_sent_in_blocks_gives_the_frames_of_one_request() {
    // AnalyseRampStream: the same recording in uneven blocks (some shorter than a frame, one
    // spanning several) gives frame for frame the answer of one AnalyseRamp request, and the
    // server lets go of every frame once analysed.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await).max_encoding_message_size(64 << 20);
    let data = ramp_recording();
    let whole = c.analyse_ramp(request(data.clone())).await.unwrap().into_inner();
    let mut msgs =
        vec![pb::RampBlock { request: Some(request(data[..8 * 1000].to_vec())), frames: Default::default() }];
    let mut at = 8 * 1000;
    for len in [8 * 7, 8 * 20_000, 8 * 3, 8 * 61_000].iter().cycle() {
        if at >= data.len() {
            break;
        }
        let end = (at + len).min(data.len());
        msgs.push(pb::RampBlock { request: None, frames: bytes::Bytes::copy_from_slice(&data[at..end]) });
        at = end;
    }
    let streamed = c.analyse_ramp_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    assert_eq!(streamed.frames, whole.frames);
    assert_eq!(streamed.fit_points, whole.fit_points);
    assert_eq!(streamed.warnings, whole.warnings);
    assert!(!streamed.frames.is_empty());
    // Bad streams name the field: a question in a later message; a stream shorter than a frame.
    let first =
        || pb::RampBlock { request: Some(request(data[..8 * 100].to_vec())), frames: Default::default() };
    let e = c.analyse_ramp_stream(tokio_stream::iter(vec![first(), first()])).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "request");
    let e = c.analyse_ramp_stream(tokio_stream::iter(vec![first()])).await.unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition, "{e:?}");
    server.stop().await;
}
