//! End to end over a real socket: CalibrationService.CalibratorSensitivity on synthetic
//! calibrator recordings (invented data). Closed forms: a calibrator stating L dB re 20 uPa
//! makes p_rms = 20e-6 x 10^(L/20) Pa (ISO 1683 reference pressure), so 94 dB is 1.0024 Pa and
//! 114 dB is 10.024 Pa; a microphone of sensitivity S V/Pa then gives V_rms = S p_rms, a sine of
//! amplitude sqrt(2) V_rms.

use jetloop_proto::pb::{self, calibration_service_client::CalibrationServiceClient};
use jetloop_tests::samples::{pascals_per_unit, raw};
use jetloop_tests::signals::{f32_le, interleave, sine, Lcg};
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;
use tonic_types::StatusExt;

/// p_rms of a calibrator stating `level_db`, Pa (ISO 1683: 20 uPa reference).
fn p_rms(level_db: f64) -> f64 {
    20e-6 * 10f64.powf(level_db / 20.0)
}

fn request(
    samples: pb::Samples,
    level_db: f64,
    frequency_hz: f64,
    volts: Vec<f64>,
) -> pb::CalibratorSensitivityRequest {
    pb::CalibratorSensitivityRequest {
        samples: Some(samples),
        stated_level_db: level_db,
        stated_frequency_hz: frequency_hz,
        volts_per_unit: volts,
        ..Default::default()
    }
}

/// Interleaved i16 counts of `channels` (values in counts, rounded and saturated as a converter
/// does).
fn i16_counts(channels: &[Vec<f64>]) -> Vec<u8> {
    interleave(channels)
        .iter()
        .flat_map(|v| (v.round().clamp(-32768.0, 32767.0) as i16).to_le_bytes())
        .collect()
}

fn kinds(c: &pb::CalibratorChannel) -> Vec<pb::CalibratorWarningKind> {
    c.warnings.iter().filter_map(|w| pb::CalibratorWarningKind::try_from(w.kind).ok()).collect()
}

#[tokio::test]
async fn four_microphones_at_94_db_read_back_their_sensitivities() {
    let server = TestServer::start().await;
    let mut c = CalibrationServiceClient::new(server.channel().await);
    let (fs, n, f0) = (48_000.0, 2 * 48_000, 1000.0);
    // 50, 12.5, 3.16 and 1 mV/Pa (invented chain), recorded in volts (f32) with a floor of
    // 1 uV rms of noise, 60 dB below the weakest tone.
    let s = [50e-3, 12.5e-3, 3.16e-3, 1e-3];
    let mut rng = Lcg::new(7);
    let chans: Vec<Vec<f64>> = s
        .iter()
        .map(|s| {
            sine(n, fs, f0, 2f64.sqrt() * s * p_rms(94.0)).into_iter().map(|v| v + rng.normal(1e-6)).collect()
        })
        .collect();
    let mut samples = raw(f32_le(&interleave(&chans)), pb::SampleFormat::F32Le, fs, 4, None);
    samples.channel_names = ["north", "east", "south", "west"].map(String::from).to_vec();
    let r =
        c.calibrator_sensitivity(request(samples, 94.0, f0, vec![1.0])).await.expect("answer").into_inner();
    assert!((r.stated_rms_pa - 1.002_374).abs() < 1e-6, "{}", r.stated_rms_pa);
    assert_eq!(r.channels.len(), 4);
    for (ch, s) in r.channels.iter().zip(s) {
        let got = ch.sensitivity_v_per_pa.expect("volts were given");
        // Within 0.05 dB of the closed form (the brief's tolerance; the reading is far closer).
        assert!((20.0 * (got / s).log10()).abs() < 0.05, "{}: {got} V/Pa against {s}", ch.name);
        assert!((ch.pascals_per_unit * got - 1.0).abs() < 1e-9, "pascals per volt = 1 / S");
        assert!((ch.frequency_hz - f0).abs() < 0.01, "{}", ch.frequency_hz);
        assert!(ch.level_span_db < 0.01 && ch.thd_percent < 0.1, "{ch:?}");
        assert!(ch.warnings.is_empty(), "{:?}", ch.warnings);
        assert_eq!(ch.full_scale_samples, None, "float data has no full scale");
    }
    assert_eq!(r.channels[2].name, "south");
    let p = r.provenance.expect("provenance");
    let applied: Vec<&str> = p.defaults_applied.iter().map(|d| d.field.as_str()).collect();
    assert!(applied.contains(&"frequency_tolerance_fraction"), "{applied:?}");
    server.stop().await;
}

#[tokio::test]
async fn a_114_db_250_hz_calibrator_on_a_16_bit_converter() {
    let server = TestServer::start().await;
    let mut c = CalibrationServiceClient::new(server.channel().await);
    // +-10 V over 16 bits: 10 / 32768 V per count; 50 and 6.3 mV/Pa microphones (invented).
    let (fs, n, f0, vpc) = (51_200.0, 3 * 51_200, 250.0, 10.0 / 32_768.0);
    let s = [50e-3, 6.3e-3];
    let chans: Vec<Vec<f64>> =
        s.iter().map(|s| sine(n, fs, f0, 2f64.sqrt() * s * p_rms(114.0) / vpc)).collect();
    let samples = raw(i16_counts(&chans), pb::SampleFormat::I16Le, fs, 2, None);
    let r =
        c.calibrator_sensitivity(request(samples, 114.0, f0, vec![vpc])).await.expect("answer").into_inner();
    for (ch, s) in r.channels.iter().zip(s) {
        let got = ch.sensitivity_v_per_pa.expect("volts were given");
        assert!((20.0 * (got / s).log10()).abs() < 0.05, "{got} V/Pa against {s}");
        assert!((ch.frequency_hz - f0).abs() < 0.01, "{}", ch.frequency_hz);
        assert_eq!(ch.full_scale_samples, Some(0));
        assert!(ch.warnings.is_empty(), "{:?}", ch.warnings);
    }
    server.stop().await;
}

#[tokio::test]
async fn clipping_and_a_wrong_frequency_are_warned() {
    let server = TestServer::start().await;
    let mut c = CalibrationServiceClient::new(server.channel().await);
    let (fs, n) = (48_000.0, 2 * 48_000);
    // Channel 0: 45000 counts of amplitude on a 16-bit converter (clipped at full scale);
    // channel 1: a clean tone at 1050 Hz, 5 % above the stated 1 kHz (beyond the 1 %
    // tolerance of IEC 60942 class 1, recalled from memory).
    let chans = vec![sine(n, fs, 1000.0, 45_000.0), sine(n, fs, 1050.0, 10_000.0)];
    let samples = raw(i16_counts(&chans), pb::SampleFormat::I16Le, fs, 2, None);
    let r =
        c.calibrator_sensitivity(request(samples, 94.0, 1000.0, vec![])).await.expect("answer").into_inner();
    let (clipped, off) = (&r.channels[0], &r.channels[1]);
    assert!(kinds(clipped).contains(&pb::CalibratorWarningKind::FullScale), "{:?}", clipped.warnings);
    assert!(kinds(clipped).contains(&pb::CalibratorWarningKind::FlatTopped), "{:?}", clipped.warnings);
    assert!(clipped.full_scale_samples.unwrap_or(0) > 1000);
    assert_eq!(kinds(off), vec![pb::CalibratorWarningKind::FrequencyOff], "{:?}", off.warnings);
    assert!((off.frequency_deviation_fraction - 0.05).abs() < 1e-4);
    // No volts: only pascals per unit, from the closed form 1.0024 Pa / (10000 / sqrt 2).
    assert_eq!(off.sensitivity_v_per_pa, None);
    let want = p_rms(94.0) / (10_000.0 / 2f64.sqrt());
    assert!((20.0 * (off.pascals_per_unit / want).log10()).abs() < 0.05, "{}", off.pascals_per_unit);
    server.stop().await;
}

#[tokio::test]
async fn a_short_recording_and_a_calibrated_one_are_refused_with_their_reasons() {
    let server = TestServer::start().await;
    let mut c = CalibrationServiceClient::new(server.channel().await);
    let fs = 48_000.0;
    // 1 s at 48 kHz is fewer than 8 blocks of 8192 samples (65536, 1.365 s).
    let short = raw(f32_le(&sine(48_000, fs, 1000.0, 0.1)), pb::SampleFormat::F32Le, fs, 1, None);
    let e = c.calibrator_sensitivity(request(short.clone(), 94.0, 1000.0, vec![1.0])).await.unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition, "{e:?}");
    assert!(e.message().contains("fewer than the 65536"), "{}", e.message());
    let details = e.get_error_details();
    let v = &details.precondition_failure().expect("precondition failure").violations[0];
    assert_eq!(v.r#type, "RECORDING_TOO_SHORT");
    // A recording sent with a calibration to pascals is refused: it must come in its own units.
    let calibrated = pb::Samples { calibration: Some(pascals_per_unit(1.0)), ..short };
    let e = c.calibrator_sensitivity(request(calibrated, 94.0, 1000.0, vec![])).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples.calibration");
    server.stop().await;
}

#[tokio::test]
async fn the_service_is_listed_by_info_health_and_reflection() {
    use tonic_health::pb::{
        health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest,
    };
    use tonic_reflection::pb::v1::{
        server_reflection_client::ServerReflectionClient, server_reflection_request::MessageRequest,
        server_reflection_response::MessageResponse, ServerReflectionRequest,
    };
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let name = "jetloop.v1.CalibrationService";
    let info = pb::info_service_client::InfoServiceClient::new(ch.clone())
        .server_info(pb::ServerInfoRequest {})
        .await
        .expect("info")
        .into_inner();
    assert!(info.services.iter().any(|s| s == name), "{:?}", info.services);
    let r = HealthClient::new(ch.clone())
        .check(HealthCheckRequest { service: name.into() })
        .await
        .expect("health");
    assert_eq!(r.into_inner().status, ServingStatus::Serving as i32);
    let req = ServerReflectionRequest {
        host: String::new(),
        message_request: Some(MessageRequest::ListServices(String::new())),
    };
    let mut stream = ServerReflectionClient::new(ch)
        .server_reflection_info(tokio_stream::iter(vec![req]))
        .await
        .expect("reflection")
        .into_inner();
    let Some(MessageResponse::ListServicesResponse(list)) =
        stream.message().await.expect("answer").and_then(|m| m.message_response)
    else {
        panic!("unexpected reflection answer");
    };
    assert!(list.service.iter().any(|s| s.name == name), "{:?}", list.service);
    server.stop().await;
}
