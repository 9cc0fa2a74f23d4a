//! End to end over a real socket: SpectrumService.CrossSpectra on a synthetic ring of eight
//! microphones and a pair, and its bad inputs. The spectra themselves are checked against
//! scipy.signal.csd / coherence in tests/python/test_cross_spectra.py.

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::samples::{ring_positions, welch_segment};
use jetloop_tests::signals::{interleave, ring_channels, Lcg};
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use tonic::Code;

/// Seeded Gaussian noise (Box-Muller on a 64-bit LCG whose first state is skipped; synthetic).
fn noise(n: usize, seed: u64, sigma: f64) -> Vec<f64> {
    let mut rng = Lcg::new(seed);
    rng.next_u64();
    (0..n).map(|_| rng.normal(sigma)).collect()
}

/// Interleaved samples of `m` microphones at azimuths 2 pi j / m with pattern `f(theta, t)`
/// at 10 dB tone-to-noise (tone mean square 0.5, noise variance 0.05).
fn ring(
    m: usize,
    n: usize,
    fs: f64,
    f: impl Fn(f64, f64) -> f64,
) -> (pb::Samples, Vec<pb::MicrophonePosition>) {
    let sigma = 0.05_f64.sqrt();
    let mut chans = ring_channels(m, n, fs, f);
    for (j, c) in chans.iter_mut().enumerate() {
        for (x, e) in c.iter_mut().zip(noise(n, 40 + j as u64, sigma)) {
            *x += e;
        }
    }
    let positions = ring_positions(m)
        .into_iter()
        .map(|p| pb::MicrophonePosition { polar_angle_deg: Some(90.0), distance_m: Some(0.5), ..p })
        .collect();
    (pb::Samples { channel_count: m as u32, ..jetloop_tests::pascals(interleave(&chans), fs) }, positions)
}

#[tokio::test]
async fn a_ring_of_eight_identifies_spinning_standing_and_axisymmetric_tones() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (fs, n, f0) = (51_200.0, 1 << 16, 2000.0);
    let w = 2.0 * PI * f0;
    type Case = (&'static str, fn(f64, f64, f64) -> f64, u32, pb::AzimuthalPattern);
    let cases: [Case; 4] = [
        ("spinning +", |th, t, w| (w * t - th).cos(), 1, pb::AzimuthalPattern::SpinningIncreasing),
        ("spinning -", |th, t, w| (w * t + th).cos(), 1, pb::AzimuthalPattern::SpinningDecreasing),
        ("standing", |th, t, w| th.cos() * (w * t).cos(), 1, pb::AzimuthalPattern::Standing),
        ("axisymmetric", |_, t, w| (w * t).cos(), 0, pb::AzimuthalPattern::Axisymmetric),
    ];
    for (name, f, order, pattern) in cases {
        let (samples, positions) = ring(8, n, fs, |th, t| f(th, t, w));
        let r = c
            .cross_spectra(pb::CrossSpectraRequest {
                samples: Some(samples),
                welch: Some(welch_segment(4096)),
                positions,
                ..Default::default()
            })
            .await
            .unwrap()
            .into_inner();
        let t = &r.tones[0];
        assert!((t.frequency_hz - f0).abs() < 1.0, "{name}: {}", t.frequency_hz);
        let m = t.modes.as_ref().unwrap();
        assert_eq!((m.dominant_order, m.pattern), (order, pattern as i32), "{name}: {m:?}");
        assert_eq!(t.channels.len(), 7);
    }
}

#[tokio::test]
async fn on_six_microphones_the_sense_of_order_three_is_not_determined() {
    // p_k = cos(w t - m theta_k), theta_k = 2 pi k / 6: at m = 3 = M/2, e^{i 3 theta_k} =
    // (-1)^k = e^{-i 3 theta_k} (closed form), so +3 and -3 alias and the spin sense cannot be
    // told; at m = 2 it can.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (fs, n, f0) = (51_200.0, 1 << 16, 2000.0);
    let w = 2.0 * PI * f0;
    for (m, sense, pattern) in [
        (3.0, 1.0, pb::AzimuthalPattern::SenseUndetermined),
        (3.0, -1.0, pb::AzimuthalPattern::SenseUndetermined),
        (2.0, 1.0, pb::AzimuthalPattern::SpinningIncreasing),
        (2.0, -1.0, pb::AzimuthalPattern::SpinningDecreasing),
    ] {
        let (samples, positions) = ring(6, n, fs, |th, t| (sense * w * t - m * th).cos());
        let r = c
            .cross_spectra(pb::CrossSpectraRequest {
                samples: Some(samples),
                welch: Some(welch_segment(4096)),
                positions,
                ..Default::default()
            })
            .await
            .unwrap()
            .into_inner();
        let modes = r.tones[0].modes.as_ref().unwrap();
        assert_eq!(
            (modes.dominant_order, modes.pattern),
            (m as u32, pattern as i32),
            "m {m} {sense}: {modes:?}"
        );
    }
}

#[tokio::test]
async fn a_reference_at_a_node_of_a_standing_mode_draws_a_warning() {
    // A standing m = 1 pattern p = cos(theta) cos(w t) on four microphones at 0, 90, 180 and
    // 270 deg: cos(90 deg) = cos(270 deg) = 0 (geometry), so channels 1 and 3 sit at nodes and
    // hear only the noise, while channels 0 and 2 carry the tone at amplitude 1 (mean square
    // 0.5 against noise variance 0.05 over the whole band: tens of dB above the noise density
    // at the tone bin).
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (fs, n, f0) = (51_200.0, 1 << 16, 2000.0);
    let w = 2.0 * PI * f0;
    let (samples, positions) = ring(4, n, fs, |th, t| th.cos() * (w * t).cos());
    let call = |reference: u32| pb::CrossSpectraRequest {
        samples: Some(samples.clone()),
        welch: Some(welch_segment(4096)),
        positions: positions.clone(),
        reference_channel: Some(reference),
        ..Default::default()
    };
    // Reference at 90 deg (a node): the reference shows no tone at f0, so the answer must say
    // that one stands elsewhere, naming its frequency and the channels that carry it.
    let r = c.cross_spectra(call(1)).await.unwrap().into_inner();
    assert!(r.tones.iter().all(|t| (t.frequency_hz - f0).abs() > 50.0), "{:?}", r.tones);
    let named: Vec<&String> = r.warnings.iter().filter(|w| w.contains("2000")).collect();
    assert_eq!(named.len(), 1, "{:?}", r.warnings);
    assert!(named[0].contains("channels 0, 2"), "{}", named[0]);
    // The better reference suggested is an antinode, 0 or 180 deg (geometry: |cos| = 1).
    let suggested = ["reference_channel = 0", "reference_channel = 2"];
    assert!(suggested.iter().any(|s| named[0].contains(s)), "{}", named[0]);
    // Reference at 0 deg (an antinode): the tone is the reference's own, no warning.
    let r = c.cross_spectra(call(0)).await.unwrap().into_inner();
    assert!((r.tones[0].frequency_hz - f0).abs() < 1.0, "{:?}", r.tones);
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);
}

#[tokio::test]
async fn bad_cross_requests_name_their_field() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (samples, positions) = ring(3, 8192, 48_000.0, |_, t| (2.0 * PI * 1000.0 * t).sin());
    let req = |samples: pb::Samples, positions, reference| pb::CrossSpectraRequest {
        samples: Some(samples),
        positions,
        reference_channel: reference,
        ..Default::default()
    };
    let e = c.cross_spectra(req(samples.clone(), positions[..2].to_vec(), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "positions");
    let e = c.cross_spectra(req(samples.clone(), Vec::new(), Some(3))).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "reference_channel");
    let mut bad = positions.clone();
    bad[1].azimuth_deg = f64::NAN;
    let e = c.cross_spectra(req(samples, bad, None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "positions[1].azimuth_deg");
    let (one, _) = ring(1, 8192, 48_000.0, |_, t| (2.0 * PI * 1000.0 * t).sin());
    let e = c.cross_spectra(req(one, Vec::new(), None)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples.channel_count");
}
