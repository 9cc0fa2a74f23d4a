//! End to end over a real socket: one calibration per channel. A ring of microphones with
//! different sensitivities, recorded as int16 counts, must give every channel the level its
//! pressure was made with, and the same azimuthal mode energies as the same ring sent in
//! pascals with one calibration.

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::samples::{pascals_per_unit, raw, ring_positions, welch_segment};
use jetloop_tests::signals::ring_channels;
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use tonic::Code;

/// Pascals per count of each of 4 invented microphones (spread about +-2 dB, a typical ring).
const PA_PER_COUNT: [f64; 4] = [1.0e-3, 1.26e-3, 0.79e-3, 1.12e-3];

/// The channels as interleaved int16 counts, channel j at `pa_per_count[j]`.
fn counts(channels: &[Vec<f64>], pa_per_count: &[f64]) -> Vec<u8> {
    let n = channels[0].len();
    (0..n)
        .flat_map(|i| {
            channels
                .iter()
                .zip(pa_per_count)
                .flat_map(move |(c, k)| ((c[i] / k).round() as i16).to_le_bytes())
        })
        .collect()
}

fn per_channel(k: &[f64]) -> Vec<pb::Calibration> {
    k.iter().copied().map(pascals_per_unit).collect()
}

/// Interleaved int16 `bytes` of `channels` channels at `fs` Hz, one calibration per channel.
fn int16_samples(bytes: Vec<u8>, fs: f64, channels: u32, cal: Vec<pb::Calibration>) -> pb::Samples {
    pb::Samples { channel_calibrations: cal, ..raw(bytes, pb::SampleFormat::I16Le, fs, channels, None) }
}

#[tokio::test]
async fn each_channel_reads_its_own_level_through_its_own_sensitivity() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (fs, n, f0) = (48_000.0, 1 << 16, 1000.0);
    // 1 Pa rms on every microphone: 20 log10(1 / 20e-6) = 93.98 dB (closed form).
    let p = ring_channels(4, n, fs, |_, t| 2f64.sqrt() * (2.0 * PI * f0 * t).sin());
    let r = c
        .extract_tones(jetloop_tests::tones_request(int16_samples(
            counts(&p, &PA_PER_COUNT),
            fs,
            4,
            per_channel(&PA_PER_COUNT),
        )))
        .await
        .expect("per-channel calibration is accepted")
        .into_inner();
    assert_eq!(r.channels.len(), 4);
    for ch in &r.channels {
        let t = ch.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)).expect("a tone");
        assert!((t.frequency_hz - f0).abs() < 1.0, "channel {}: {}", ch.channel, t.frequency_hz);
        assert!((t.level_db - 93.979).abs() < 0.05, "channel {}: {} dB", ch.channel, t.level_db);
    }
    // The same counts read with one calibration (the first microphone's) are off by each
    // microphone's sensitivity ratio: what a ring gave before per-channel calibration.
    let one = pb::Samples {
        calibration: per_channel(&PA_PER_COUNT[..1]).pop(),
        channel_calibrations: Vec::new(),
        ..int16_samples(counts(&p, &PA_PER_COUNT), fs, 4, Vec::new())
    };
    let r1 = c.extract_tones(jetloop_tests::tones_request(one)).await.expect("answer").into_inner();
    let top = |ch: &pb::ChannelSpectrum| ch.tones.iter().map(|t| t.level_db).fold(f64::MIN, f64::max);
    let off = top(&r1.channels[2]) - top(&r.channels[2]);
    let expected = 20.0 * (PA_PER_COUNT[0] / PA_PER_COUNT[2]).log10();
    assert!((off - expected).abs() < 0.05, "{off} dB against {expected} dB");
    server.stop().await;
}

#[tokio::test]
async fn mode_energies_of_a_ring_with_mixed_sensitivities_equal_those_of_one_calibration() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (fs, n, f0) = (51_200.0, 1 << 16, 2000.0);
    let w = 2.0 * PI * f0;
    // A spinning m = 1 mode with a weaker m = 0 part, 0.5 Pa amplitude.
    let p = ring_channels(4, n, fs, |th, t| 0.5 * (w * t - th).cos() + 0.2 * (w * t).cos());
    let positions = ring_positions(4);
    let ask = |samples| pb::CrossSpectraRequest {
        samples: Some(samples),
        welch: Some(welch_segment(4096)),
        positions: positions.clone(),
        ..Default::default()
    };
    let mixed = c
        .cross_spectra(ask(int16_samples(counts(&p, &PA_PER_COUNT), fs, 4, per_channel(&PA_PER_COUNT))))
        .await
        .expect("answer")
        .into_inner();
    let same = [1.0e-3; 4];
    let uniform = c
        .cross_spectra(ask(int16_samples(counts(&p, &same), fs, 4, per_channel(&same))))
        .await
        .expect("answer")
        .into_inner();
    let energies = |r: &pb::CrossSpectraResponse| {
        let m = r.tones[0].modes.clone().expect("modes");
        (m.dominant_order, m.orders.iter().map(|o| (o.order, o.energy)).collect::<Vec<_>>())
    };
    let (a, b) = (energies(&mixed), energies(&uniform));
    assert_eq!(a.0, 1, "{a:?}");
    assert_eq!(a.0, b.0);
    for ((oa, ea), (ob, eb)) in a.1.iter().zip(&b.1) {
        assert_eq!(oa, ob);
        // int16 rounding differs between the two recordings: 1e-3 relative is far below the
        // 25 % (2 dB) a single calibration would be off by.
        assert!((ea - eb).abs() <= 1e-3 * eb.abs().max(1e-12) + 1e-9, "order {oa}: {ea} against {eb}");
    }
    server.stop().await;
}

#[tokio::test]
async fn per_channel_calibrations_must_be_one_per_channel_and_not_beside_a_common_one() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let bytes = vec![0u8; 4 * 2 * 4096];
    let e = c
        .extract_tones(jetloop_tests::tones_request(int16_samples(
            bytes.clone(),
            48_000.0,
            4,
            per_channel(&PA_PER_COUNT[..3]),
        )))
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples.channel_calibrations");
    let both = pb::Samples {
        calibration: jetloop_tests::in_pascals(),
        ..int16_samples(bytes.clone(), 48_000.0, 4, per_channel(&PA_PER_COUNT))
    };
    let e = c.extract_tones(jetloop_tests::tones_request(both)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples.channel_calibrations");
    let mut bad = per_channel(&PA_PER_COUNT);
    bad[2] = pascals_per_unit(-1.0);
    let e = c
        .extract_tones(jetloop_tests::tones_request(int16_samples(bytes, 48_000.0, 4, bad)))
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples.channel_calibrations[2].pascals_per_unit");
    server.stop().await;
}
