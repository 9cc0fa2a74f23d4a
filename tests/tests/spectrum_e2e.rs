//! End to end over a real socket: SpectrumService tones and bands, bad input with its field,
//! and the size limits.

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_server::config::Limits;
use jetloop_tests::samples::{in_pascals, pascals_per_unit, raw, welch_segment};
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;

use jetloop_tests::{pascals as samples, sine as tone, tones_request as request};

#[tokio::test]
async fn tones_levels_bands_and_caution() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    // 1 Pa rms tone reads 93.98 dB (closed form; 94 dB calibrator practice, IEC 60942).
    let fs = 48_000.0;
    let mut req = request(samples(tone(1 << 17, fs, 1000.0, 2f64.sqrt()), fs));
    req.predicted_screech_hz = Some(1010.0);
    req.include_band_levels = true;
    let r = c.extract_tones(req).await.unwrap().into_inner();
    let ch = &r.channels[0];
    let t = ch.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)).unwrap();
    assert!((t.frequency_hz - 1000.0).abs() < 0.01 * ch.analysis.as_ref().unwrap().frequency_resolution_hz);
    assert!((t.level_db - 93.979).abs() < 0.05, "{}", t.level_db);
    let m = ch.predicted_match.as_ref().unwrap();
    assert!(m.matched && (m.difference_hz.unwrap() + 10.0).abs() < 0.1);
    let bands = ch.bands.as_ref().unwrap();
    let b1k = bands.bands.iter().find(|b| b.nominal_hz == 1000.0).unwrap();
    assert!((b1k.level_db - 93.979).abs() < 0.05);
    assert!(ch.cautions.is_empty());
    // A 150 dB tone (894 Pa rms) carries the caution.
    let r =
        c.extract_tones(request(samples(tone(1 << 16, fs, 2000.0, 894.0 * 2f64.sqrt()), fs))).await.unwrap();
    assert!(r.into_inner().channels[0].cautions[0].contains("140 dB"));
    let b = c
        .band_levels(pb::BandLevelsRequest {
            samples: Some(samples(tone(1 << 16, fs, 1000.0, 1.0), fs)),
            welch: None,
            max_band_frequency_hz: Some(10_000.0),
            corrections: None,
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(b.channels[0].bands.as_ref().unwrap().bands.last().unwrap().nominal_hz, 10_000.0);
    server.stop().await;
}

#[tokio::test]
async fn bad_samples_name_the_field() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 10_000.0;
    let ok = || tone(4096, fs, 500.0, 1.0);
    let mut nan = ok();
    nan[100] = f64::NAN;
    let cases: Vec<(pb::ExtractTonesRequest, &str)> = vec![
        (request(samples(ok(), 0.0)), "samples.sample_rate_hz"),
        (request(samples(ok(), -48_000.0)), "samples.sample_rate_hz"),
        (request(samples(Vec::new(), fs)), "samples.values.values"),
        (request(samples(nan, fs)), "samples.values.values"),
        (request(samples(vec![0.5; 10], fs)), "samples"),
        (
            pb::ExtractTonesRequest { welch: Some(welch_segment(8192)), ..request(samples(ok(), fs)) },
            "welch.segment_length",
        ),
        (request(raw(vec![0; 64], pb::SampleFormat::Unspecified, fs, 1, in_pascals())), "samples.raw.format"),
        (request(raw(vec![0; 12], pb::SampleFormat::I16Le, fs, 4, in_pascals())), "samples.raw.data"),
        (request(pb::Samples { channel_count: 3, ..samples(vec![0.0; 4096], fs) }), "samples.values.values"),
        (request(pb::Samples { data: None, ..samples(ok(), fs) }), "samples.data"),
        // No unit is assumed: a request without a calibration is refused, and "already in
        // pascals" must be said with in_pascals = true.
        (request(pb::Samples { calibration: None, ..samples(ok(), fs) }), "samples.calibration"),
        (
            request(pb::Samples { calibration: Some(pb::Calibration { scale: None }), ..samples(ok(), fs) }),
            "samples.calibration",
        ),
        (
            request(pb::Samples {
                calibration: Some(pb::Calibration { scale: Some(pb::calibration::Scale::InPascals(false)) }),
                ..samples(ok(), fs)
            }),
            "samples.calibration.in_pascals",
        ),
        (
            pb::ExtractTonesRequest {
                welch: Some(pb::WelchOptions { overlap_fraction: Some(0.99), ..Default::default() }),
                ..request(samples(ok(), fs))
            },
            "welch.overlap_fraction",
        ),
        (
            pb::ExtractTonesRequest {
                tones: Some(pb::ToneOptions { threshold_db: Some(f64::NAN), ..Default::default() }),
                ..request(samples(ok(), fs))
            },
            "tones.threshold_db",
        ),
    ];
    for (req, field) in cases {
        let e = c.extract_tones(req).await.unwrap_err();
        assert_field(&e, Code::InvalidArgument, field);
    }
    let e = c.extract_tones(pb::ExtractTonesRequest::default()).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "samples");
    server.stop().await;
}

#[tokio::test]
async fn sizes_over_the_limits_are_refused() {
    // Our own sample limit (2^25 samples) with a transport limit large enough to carry them.
    let limits = Limits { max_request_bytes: 80 * 1024 * 1024, ..Limits::default() };
    let server = TestServer::start_with(limits).await;
    let mut c =
        SpectrumServiceClient::new(server.channel().await).max_encoding_message_size(100 * 1024 * 1024);
    let n = (1usize << 25) + 16;
    let req = request(raw(vec![0; 2 * n], pb::SampleFormat::I16Le, 48_000.0, 0, in_pascals()));
    let e = c.extract_tones(req).await.unwrap_err();
    assert_field(&e, Code::ResourceExhausted, "samples.raw.data");
    assert!(e.message().contains("33554432"), "{}", e.message());
    server.stop().await;

    // The transport's message limit, below our sample limit.
    let limits = Limits { max_request_bytes: 1024 * 1024, ..Limits::default() };
    let server = TestServer::start_with(limits).await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let e = c.extract_tones(request(samples(vec![0.0; 300_000], 48_000.0))).await.unwrap_err();
    assert!(matches!(e.code(), Code::ResourceExhausted | Code::OutOfRange), "{e:?}");
    server.stop().await;
}

#[tokio::test]
async fn figures_that_may_be_wrong_carry_a_warning() {
    // Each case reproduces a spectrum that used to be wrong without a word.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 48_000.0;
    let warnings = |r: pb::ExtractTonesResponse| r.channels[0].warnings.clone();

    // Clipped int16 data: a sine driven past full scale, saturated at +-32767 counts.
    let counts: Vec<u8> = tone(1 << 16, fs, 1000.0, 40_000.0)
        .iter()
        .flat_map(|v| (v.clamp(-32_767.0, 32_767.0) as i16).to_le_bytes())
        .collect();
    let clipped = raw(counts, pb::SampleFormat::I16Le, fs, 0, Some(pascals_per_unit(0.001)));
    let w = warnings(c.extract_tones(request(clipped)).await.unwrap().into_inner());
    assert!(w.iter().any(|s| s.contains("clipped")), "{w:?}");

    // A large offset with detrending off (a 40 Hz tone of 1 Pa on 10 Pa of DC).
    let offset: Vec<f64> = tone(1 << 16, fs, 40.0, 2f64.sqrt()).iter().map(|v| v + 10.0).collect();
    let mut req = request(samples(offset, fs));
    req.welch = Some(pb::WelchOptions { detrend: pb::DetrendKind::None as i32, ..welch_segment(8192) });
    let w = warnings(c.extract_tones(req).await.unwrap().into_inner());
    assert!(w.iter().any(|s| s.contains("detrending is off")), "{w:?}");

    // Two tones 2.5 bins apart, both found as peaks (Hann main lobe: 4 bins).
    let df = fs / 4096.0;
    let pair: Vec<f64> = tone(1 << 16, fs, 300.25 * df, 1.0)
        .iter()
        .zip(tone(1 << 16, fs, 302.75 * df, 1.0))
        .map(|(a, b)| a + b)
        .collect();
    let mut req = request(samples(pair, fs));
    req.welch = Some(welch_segment(4096));
    let w = warnings(c.extract_tones(req).await.unwrap().into_inner());
    assert!(w.iter().any(|s| s.contains("main lobe")), "{w:?}");

    // A noise-free sine: rounding noise is not reported as dozens of tones.
    let mut req = request(samples(tone(1 << 16, fs, 1000.0, 1.0), fs));
    req.welch = Some(welch_segment(4096));
    let r = c.extract_tones(req).await.unwrap().into_inner();
    assert!(
        r.channels[0].tones.len() <= 2,
        "{} tones: {:?}",
        r.channels[0].tones.len(),
        r.channels[0].tones.iter().map(|t| t.level_db).collect::<Vec<_>>()
    );
}

#[tokio::test]
async fn response_curves_distance_and_absorption_correct_the_levels() {
    // A 1 Pa rms tone at 8 kHz (93.98 dB re 20 uPa, closed form) measured at 4 m:
    // - a free-field curve of +1 dB at 1 kHz rising to +3 dB at 16 kHz (linear in log f: +2.5 dB
    //   at 8 kHz) and a flat +0.5 dB grid curve add 3 dB;
    // - corrected to 1 m: + 20 log10(4) = 12.041 dB (inverse-square law);
    // - with 20 C, 70 % RH air: + alpha(8 kHz) x 3 m, alpha = 0.0776 dB/m from the ISO 9613-1
    //   formula (ISO 9613-2:1996 Table 2 prints 76.6 dB/km at the 8 kHz octave; recalled from
    //   memory), so 0.23 dB within 0.01 dB of the table value x 3 m + 0.003.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 48_000.0;
    let level = |r: &pb::ExtractTonesResponse| {
        r.channels[0].tones.iter().map(|t| t.level_db).fold(f64::MIN, f64::max)
    };
    let curves = vec![
        pb::ResponseCurve {
            name: "free-field".into(),
            frequencies_hz: vec![1000.0, 16_000.0],
            corrections_db: vec![1.0, 3.0],
        },
        pb::ResponseCurve { name: "grid".into(), frequencies_hz: vec![8000.0], corrections_db: vec![0.5] },
    ];
    let base = request(samples(tone(1 << 16, fs, 8000.0, 2f64.sqrt()), fs));
    let plain = c.extract_tones(base.clone()).await.unwrap().into_inner();
    let mut req = base.clone();
    req.corrections = Some(pb::LevelCorrections {
        channels: vec![pb::ChannelCorrection { curves: curves.clone(), distance_m: Some(4.0) }],
        reference_distance_m: Some(1.0),
        atmosphere: None,
    });
    let spread = c.extract_tones(req.clone()).await.unwrap().into_inner();
    let (l0, l1) = (level(&plain), level(&spread));
    assert!((l0 - 93.979).abs() < 0.05, "{l0}");
    let curve_db = 1.0 + 2.0 * (8.0f64).ln() / (16.0f64).ln() + 0.5;
    assert!((l1 - l0 - (curve_db + 20.0 * 4f64.log10())).abs() < 1e-6, "{l0} -> {l1}");
    // The overall level follows the corrected PSD: the tone dominates, so it moves alike.
    let (o0, o1) = (plain.channels[0].overall_level_db, spread.channels[0].overall_level_db);
    assert!((o1 - o0 - (curve_db + 12.041)).abs() < 0.05, "{o0} -> {o1}");
    assert_eq!(spread.channels[0].corrections_applied.len(), 3);
    req.corrections.as_mut().unwrap().atmosphere =
        Some(pb::Atmosphere { temperature_k: 293.15, relative_humidity_percent: 70.0, pressure_pa: None });
    let absorbed = c.extract_tones(req.clone()).await.unwrap().into_inner();
    let extra = level(&absorbed) - l1;
    assert!((extra - 0.0766 * 3.0).abs() < 0.01 + 0.003, "absorption over 3 m: {extra} dB");

    // Bad corrections name the field.
    let bad = |corr: pb::LevelCorrections| {
        let mut r = base.clone();
        r.corrections = Some(corr);
        r
    };
    let cases = vec![
        (
            bad(pb::LevelCorrections {
                channels: vec![pb::ChannelCorrection {
                    curves: vec![pb::ResponseCurve {
                        name: "x".into(),
                        frequencies_hz: vec![1000.0, 500.0],
                        corrections_db: vec![0.0, 0.0],
                    }],
                    distance_m: None,
                }],
                ..Default::default()
            }),
            "corrections.channels[0].curves[0].frequencies_hz[1]",
        ),
        (
            bad(pb::LevelCorrections {
                channels: vec![pb::ChannelCorrection { curves: Vec::new(), distance_m: None }],
                reference_distance_m: Some(1.0),
                atmosphere: None,
            }),
            "corrections.channels[0].distance_m",
        ),
        (
            bad(pb::LevelCorrections {
                channels: vec![pb::ChannelCorrection { curves: Vec::new(), distance_m: Some(2.0) }],
                reference_distance_m: Some(1.0),
                atmosphere: Some(pb::Atmosphere {
                    temperature_k: 293.15,
                    relative_humidity_percent: 120.0,
                    pressure_pa: None,
                }),
            }),
            "corrections.atmosphere.relative_humidity_percent",
        ),
        (
            bad(pb::LevelCorrections {
                channels: vec![pb::ChannelCorrection::default(), pb::ChannelCorrection::default()],
                ..Default::default()
            }),
            "corrections.channels",
        ),
    ];
    for (req, field) in cases {
        let e = c.extract_tones(req).await.unwrap_err();
        assert_field(&e, Code::InvalidArgument, field);
    }
    // Band levels take the same corrections.
    let b = c
        .band_levels(pb::BandLevelsRequest {
            samples: base.samples.clone(),
            welch: None,
            max_band_frequency_hz: Some(10_000.0),
            corrections: Some(pb::LevelCorrections {
                channels: vec![pb::ChannelCorrection { curves, distance_m: None }],
                ..Default::default()
            }),
        })
        .await
        .unwrap()
        .into_inner();
    let b8k = b.channels[0].bands.as_ref().unwrap().bands.iter().find(|b| b.nominal_hz == 8000.0).unwrap();
    assert!((b8k.level_db - 93.979 - curve_db).abs() < 0.05, "{}", b8k.level_db);
    server.stop().await;
}

/// Every option left unset is listed in `provenance.defaults_applied` with the value used (the
/// README's promise): the tone options and the detrending included, and none listed that was
/// given.
#[tokio::test]
async fn every_default_applied_to_a_tone_analysis_is_listed() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 48_000.0;
    let req = pb::ExtractTonesRequest {
        tones: Some(pb::ToneOptions { max_tones: Some(7), ..Default::default() }),
        ..request(samples(tone(1 << 15, fs, 1000.0, 1.0), fs))
    };
    let r = c.extract_tones(req).await.unwrap().into_inner();
    let applied = r.provenance.expect("provenance").defaults_applied;
    let value_of = |field: &str| applied.iter().find(|d| d.field == field).map(|d| d.value.clone());
    // Values from the proto comments of ToneOptions and WelchOptions ("Unset: ...").
    for (field, value) in [
        ("tones.threshold_db", "6 dB"),
        ("tones.floor_window_bins", "65 bins"),
        ("tones.harmonic_tolerance_bins", "2 bins"),
        ("tones.max_harmonic_order", "10"),
        ("tones.min_separation_hz", "0 Hz"),
        ("welch.detrend", "mean"),
        ("welch.overlap_fraction", "0.5"),
        ("welch.window", "Hann"),
    ] {
        assert_eq!(value_of(field).as_deref(), Some(value), "{field} in {applied:?}");
    }
    assert!(value_of("tones.max_tones").is_none(), "max_tones was given: {applied:?}");
    assert!(applied.iter().all(|d| !d.reason.is_empty()), "{applied:?}");
    server.stop().await;
}
