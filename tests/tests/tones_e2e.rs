//! End to end over a real socket: ShockCellService and ToneService, including bad input,
//! subsonic jets and sweep limits.

use jetloop_proto::pb::{
    self, feedback_loop::Source as LoopSource, shock_cell_service_client::ShockCellServiceClient,
    sweep_screech_request::Values, tone_service_client::ToneServiceClient,
};
use jetloop_tests::fixtures::{direct, inch_nozzle as conditions, rel};
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;
use tonic_types::StatusExt;

#[tokio::test]
async fn cell_spacing_round_jet_and_subsonic_precondition() {
    let server = TestServer::start().await;
    let mut c = ShockCellServiceClient::new(server.channel().await);
    let r = c
        .cell_spacing(pb::CellSpacingRequest {
            jet: Some(direct(1.5, 0.02)),
            options: Some(pb::CellOptions {
                spacing_factor: Some(0.8),
                modes: Some(5),
                shock_count: Some(3),
            }),
        })
        .await
        .unwrap()
        .into_inner();
    // scipy.special.jn_zeros(0, 5) (also Abramowitz & Stegun Table 9.5).
    let zeros = [
        2.404_825_557_695_773,
        5.520_078_110_286_311,
        8.653_727_912_911_013,
        11.791_534_439_014_281,
        14.930_917_708_487_787,
    ];
    for (m, z) in r.modes.iter().zip(zeros) {
        assert!((m.bessel_zero.unwrap() - z).abs() < 1e-13);
        let ls = std::f64::consts::PI * 1.25f64.sqrt() * 0.02 / z;
        assert!(rel(m.vortex_sheet_spacing_m, ls) < 1e-13);
        assert!(rel(m.spacing_m, 0.8 * ls) < 1e-13);
    }
    assert_eq!(r.shocks.len(), 3);
    assert!(rel(r.shocks[2].axial_position_m, 3.0 * r.modes[0].spacing_m) < 1e-14);
    assert!(r.provenance.unwrap().models.iter().any(|m| m.reference.contains("Pack (1950)")));

    let e = c
        .cell_spacing(pb::CellSpacingRequest { jet: Some(conditions(1.5)), options: None })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition);
    assert!(e.message().contains("no shock"), "{}", e.message());
    server.stop().await;
}

#[tokio::test]
async fn screech_models_side_by_side() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let opts = pb::ScreechOptions {
        convection: Some(pb::Convection { speed: Some(pb::convection::Speed::ConvectionRatio(0.7)) }),
        cells: Some(pb::CellOptions { spacing_factor: Some(0.8), ..Default::default() }),
        r#loop: Some(pb::FeedbackLoop { max_loop_order: Some(4), ..Default::default() }),
        harmonics: Some(3),
        ..Default::default()
    };
    let r = t
        .predict_screech(pb::PredictScreechRequest { jet: Some(conditions(3.5)), options: Some(opts) })
        .await
        .unwrap()
        .into_inner();
    let powell = r.predictions.iter().find(|p| p.model.starts_with("Powell")).unwrap();
    let tam = r.predictions.iter().find(|p| p.model.starts_with("Tam")).unwrap();
    // Tam, Seiner & Yu 1986 = Powell with Uc = 0.7 Uj and 0.8 of the vortex-sheet spacing,
    // except for the rounding of the constant 0.7 j0,1/(0.8 pi) = 0.669795 to 0.67.
    let exact = 0.7 * 2.404_825_557_695_773 / (0.8 * std::f64::consts::PI);
    assert!(rel(tam.fundamental_hz / powell.fundamental_hz, 0.67 / exact) < 1e-12);
    assert_eq!(powell.harmonics.len(), 3);
    assert!(rel(powell.harmonics[2].frequency_hz, 3.0 * powell.fundamental_hz) < 1e-15);
    // A cold 25.4 mm convergent jet at NPR 3.5 screeches at a few kHz (Strouhal ~0.3 to 0.6;
    // Tam, Seiner & Yu 1986, Fig. 7 data; memory).
    assert!((0.25..0.6).contains(&tam.strouhal_number), "St {}", tam.strouhal_number);
    let fl = r.feedback_loop.unwrap();
    assert_eq!(fl.orders.len(), 4);
    assert!(rel(fl.orders[0].frequency_hz, powell.fundamental_hz) < 1e-13);
    server.stop().await;
}

#[tokio::test]
async fn shock_noise_at_180_degrees_equals_powell() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let r = t
        .predict_screech(pb::PredictScreechRequest { jet: Some(conditions(4.0)), options: None })
        .await
        .unwrap()
        .into_inner();
    let powell = r.predictions[0].fundamental_hz;
    let s = t
        .predict_shock_noise(pb::PredictShockNoiseRequest {
            jet: Some(conditions(4.0)),
            convection: None,
            cells: Some(pb::CellOptions { modes: Some(2), ..Default::default() }),
            observer_angles_deg: vec![90.0, 180.0],
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(s.peaks.len(), 4);
    let p180 = s.peaks.iter().find(|p| p.observer_angle_deg == 180.0 && p.mode == 1).unwrap();
    assert!(rel(p180.peak_frequency_hz.unwrap(), powell) < 1e-13);
    let p90_2 = s.peaks.iter().find(|p| p.observer_angle_deg == 90.0 && p.mode == 2).unwrap();
    assert!(p90_2.peak_frequency_hz.unwrap() > p180.peak_frequency_hz.unwrap());
    server.stop().await;
}

#[tokio::test]
async fn sweeps_keep_subsonic_points_and_enforce_the_limit() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let r = t
        .sweep_screech(jetloop_tests::fixtures::npr_sweep(conditions(3.0), 1.5, 5.0, 36))
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.points.len(), 36);
    assert!(!r.points[0].supersonic && r.points[0].powell_fundamental_hz.is_none());
    assert!(r.points[35].supersonic && r.points[35].tam_1986_hz.is_some());
    assert!(r.provenance.unwrap().notes.iter().any(|n| n.contains("not supersonic")));
    // Fundamental falls as NPR rises (cells lengthen).
    let f: Vec<f64> = r.points.iter().filter_map(|p| p.powell_fundamental_hz).collect();
    assert!(f.windows(2).all(|w| w[1] < w[0]));

    // Reflector sweep with a directly given jet: lines n = 2, 3, 4 fall with distance.
    let opts = pb::ScreechOptions {
        r#loop: Some(pb::FeedbackLoop { source: Some(LoopSource::SourceCells(4.0)), ..Default::default() }),
        ..Default::default()
    };
    let r = t
        .sweep_screech(pb::SweepScreechRequest {
            jet: Some(direct(1.4, 0.02)),
            variable: pb::SweepVariable::ReflectorDistanceM as i32,
            values: Some(Values::List(pb::SweepValues { values: vec![0.0, 0.01, 0.02, 0.03] })),
            options: Some(opts),
        })
        .await
        .unwrap()
        .into_inner();
    for n in 1..4 {
        assert!(r.points.windows(2).all(|w| w[1].loop_frequencies_hz[n] < w[0].loop_frequencies_hz[n]));
    }

    let e = t
        .sweep_screech(jetloop_tests::fixtures::npr_sweep(conditions(3.0), 2.0, 5.0, 10_001))
        .await
        .unwrap_err();
    assert_field(&e, Code::ResourceExhausted, "range.count");
    assert!(e.message().contains("10000"));
    server.stop().await;
}

#[tokio::test]
async fn tone_bad_input_names_the_field() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let screech = |jet: pb::JetInput, o: pb::ScreechOptions| pb::PredictScreechRequest {
        jet: Some(jet),
        options: Some(o),
    };
    let lp = |l: pb::FeedbackLoop| pb::ScreechOptions { r#loop: Some(l), ..Default::default() };
    let cases: Vec<(pb::PredictScreechRequest, Code, &str)> = vec![
        (
            screech(direct(0.9, 0.02), Default::default()),
            Code::InvalidArgument,
            "jet.fully_expanded.fully_expanded_mach_number",
        ),
        (
            screech(direct(f64::NAN, 0.02), Default::default()),
            Code::InvalidArgument,
            "jet.fully_expanded.fully_expanded_mach_number",
        ),
        (
            screech(direct(1.5, -0.02), Default::default()),
            Code::InvalidArgument,
            "jet.fully_expanded.fully_expanded_diameter_m",
        ),
        (
            screech(conditions(3.0), lp(pb::FeedbackLoop { max_loop_order: Some(51), ..Default::default() })),
            Code::InvalidArgument,
            "options.loop.max_loop_order",
        ),
        (
            screech(
                conditions(3.0),
                lp(pb::FeedbackLoop { source: Some(LoopSource::SourceDistanceM(0.0)), ..Default::default() }),
            ),
            Code::InvalidArgument,
            "options.loop",
        ),
        (
            screech(
                conditions(3.0),
                lp(pb::FeedbackLoop {
                    segments: vec![pb::LoopSegment {
                        label: "x".into(),
                        length: Some(pb::loop_segment::Length::LengthM(0.1)),
                        speed: 0,
                        speed_m_per_s: None,
                    }],
                    ..Default::default()
                }),
            ),
            Code::InvalidArgument,
            "options.loop.segments[0].speed",
        ),
        (
            screech(
                conditions(3.0),
                pb::ScreechOptions {
                    cells: Some(pb::CellOptions {
                        spacing_factor: Some(f64::INFINITY),
                        ..Default::default()
                    }),
                    ..Default::default()
                },
            ),
            Code::InvalidArgument,
            "options.cells.spacing_factor",
        ),
        (
            screech(
                conditions(3.0),
                pb::ScreechOptions {
                    convection: Some(pb::Convection {
                        speed: Some(pb::convection::Speed::ConvectionRatio(-0.1)),
                    }),
                    ..Default::default()
                },
            ),
            Code::InvalidArgument,
            "options.convection.convection_ratio",
        ),
        (
            screech(conditions(3.0), pb::ScreechOptions { harmonics: Some(0), ..Default::default() }),
            Code::InvalidArgument,
            "options.harmonics",
        ),
    ];
    for (req, code, field) in cases {
        let e = t.predict_screech(req).await.unwrap_err();
        assert_field(&e, code, field);
    }
    let e = t
        .predict_shock_noise(pb::PredictShockNoiseRequest {
            jet: Some(conditions(3.0)),
            observer_angles_deg: vec![200.0],
            ..Default::default()
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "observer_angles_deg[0]");
    let e = t
        .sweep_screech(pb::SweepScreechRequest {
            jet: Some(conditions(3.0)),
            variable: 0,
            values: Some(Values::List(pb::SweepValues { values: vec![3.0] })),
            options: None,
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "variable");
    let e = t
        .sweep_screech(pb::SweepScreechRequest {
            jet: Some(conditions(3.0)),
            variable: pb::SweepVariable::NozzlePressureRatio as i32,
            values: Some(Values::List(pb::SweepValues { values: vec![3.0, f64::NAN] })),
            options: None,
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "list.values[1]");
    let e = t
        .predict_screech(pb::PredictScreechRequest { jet: Some(conditions(1.2)), options: None })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition);
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn excess_concurrent_calls_are_refused_with_unavailable_and_a_retry_hint() {
    // One call in flight server-wide: of eight simultaneous 10,000-point sweeps, the ones that
    // find the slot taken are refused at once with UNAVAILABLE and RetryInfo, the rest succeed.
    let limits = jetloop_server::config::Limits { max_concurrent_requests: 1, ..Default::default() };
    let server = TestServer::start_with(limits).await;
    let ch = server.channel().await;
    let req = jetloop_tests::fixtures::npr_sweep(conditions(3.0), 2.0, 6.0, 10_000);
    let calls: Vec<_> = (0..8)
        .map(|_| {
            let mut t = ToneServiceClient::new(ch.clone());
            let r = req.clone();
            tokio::spawn(async move { t.sweep_screech(r).await.map(|_| ()) })
        })
        .collect();
    let mut ok = 0;
    let mut shed = 0;
    for c in calls {
        match c.await.unwrap() {
            Ok(()) => ok += 1,
            Err(e) => {
                assert_eq!(e.code(), Code::Unavailable, "{e:?}");
                let retry = e.get_error_details().retry_info().cloned().expect("RetryInfo");
                assert_eq!(retry.retry_delay, Some(std::time::Duration::from_millis(100)));
                shed += 1;
            }
        }
    }
    assert!(ok >= 1 && shed >= 1, "ok {ok}, shed {shed}");

    // A block stream left open holds the one slot: another call is refused, a health check is
    // still answered (orchestrators must not restart a busy server).
    // No sleeping: a probe that overtakes the stream is simply answered (or refuses the
    // stream, which is then opened again), until the stream holds the slot and a probe is
    // refused.
    let mut held = None;
    'attempt: for _ in 0..1000 {
        let (tx, rx) = tokio::sync::mpsc::channel::<pb::SampleBlock>(1);
        tx.send(pb::SampleBlock::default()).await.unwrap();
        let mut sc = jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient::new(ch.clone());
        let mut open = Box::pin(async move {
            sc.extract_tones_stream(tokio_stream::wrappers::ReceiverStream::new(rx)).await
        });
        for _ in 0..100 {
            let mut prober = ToneServiceClient::new(ch.clone());
            let probe = prober
                .predict_screech(pb::PredictScreechRequest { jet: Some(conditions(3.0)), options: None });
            tokio::select! {
                r = probe => match r {
                    Err(e) if e.code() == Code::Unavailable => {
                        held = Some((e, tx, open));
                        break 'attempt;
                    }
                    _ => tokio::task::yield_now().await,
                },
                // The stream was refused (a probe held the slot): open it again.
                _ = &mut open => continue 'attempt,
            }
        }
    }
    let (refused, tx, open) = held.expect("the open stream should hold the only slot");
    assert!(refused.get_error_details().retry_info().is_some());
    let mut health = tonic_health::pb::health_client::HealthClient::new(ch.clone());
    let h = health.check(tonic_health::pb::HealthCheckRequest { service: String::new() }).await.unwrap();
    assert_eq!(h.into_inner().status, tonic_health::pb::health_check_response::ServingStatus::Serving as i32);
    drop(tx);
    let _ = open.await;
    server.stop().await;
}

#[tokio::test]
async fn a_client_deadline_is_answered_with_deadline_exceeded() {
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let sweep = || jetloop_tests::fixtures::npr_sweep(conditions(3.0), 2.0, 6.0, 10_000);
    // A block stream that never ends, with a 500 ms deadline: the server answers
    // DEADLINE_EXCEEDED just before the deadline (tonic's client would otherwise give up
    // locally with CANCELLED).
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::SampleBlock>(1);
    tx.send(pb::SampleBlock::default()).await.unwrap();
    let mut req = tonic::Request::new(tokio_stream::wrappers::ReceiverStream::new(rx));
    req.set_timeout(std::time::Duration::from_millis(500));
    let mut spectrum =
        jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient::new(server.channel().await);
    let started = std::time::Instant::now();
    let e = spectrum.extract_tones_stream(req).await.unwrap_err();
    assert_eq!(e.code(), Code::DeadlineExceeded, "{e:?}");
    assert!(e.message().contains("caller's deadline"), "{}", e.message());
    assert!(started.elapsed() >= std::time::Duration::from_millis(480));
    drop(tx);
    // A very short deadline is cut short either way (tonic's own client timer may win).
    let mut req = tonic::Request::new(sweep());
    req.set_timeout(std::time::Duration::from_micros(50));
    let e = t.sweep_screech(req).await.unwrap_err();
    assert!(matches!(e.code(), Code::DeadlineExceeded | Code::Cancelled), "{e:?}");
    server.stop().await;

    // The server's own limit, far shorter than the work.
    let limits = jetloop_server::config::Limits {
        request_timeout: std::time::Duration::from_micros(100),
        ..Default::default()
    };
    let server = TestServer::start_with(limits).await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let e = t.sweep_screech(sweep()).await.unwrap_err();
    assert_eq!(e.code(), Code::DeadlineExceeded, "{e:?}");
    assert!(e.message().contains("server's time limit"), "{}", e.message());
    server.stop().await;
}

#[tokio::test]
async fn the_pressure_caution_comes_with_reservoir_conditions_only_and_once() {
    // Where the work can hurt someone (a pressurized reservoir) the answer says so, once; a jet
    // given directly by Mj and Dj has no reservoir to warn about.
    let server = TestServer::start().await;
    let mut t = ToneServiceClient::new(server.channel().await);
    let count = |notes: &[String]| notes.iter().filter(|n| n.contains("pressure equipment")).count();
    let from_npr = t
        .predict_screech(pb::PredictScreechRequest { jet: Some(conditions(3.5)), options: None })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(count(&from_npr.provenance.unwrap().notes), 1);
    let direct_jet = t
        .predict_screech(pb::PredictScreechRequest { jet: Some(direct(1.4, 0.02)), options: None })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(count(&direct_jet.provenance.unwrap().notes), 0);
    server.stop().await;
}
