//! End to end over a real socket: every GasDynamicsService RPC, InfoService, health and
//! reflection, bad input with its named field, and graceful shutdown.

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient, info_service_client::InfoServiceClient,
    isentropic_ratios_request::Given, nozzle::Kind, operating_point::Pressure,
};
use jetloop_tests::fixtures::{cd, conditions_at, rel, round};
use jetloop_tests::TestServer;
use tonic::Code;

/// Shared conditions with the reservoir temperature given (288.15 K).
fn conditions(kind: Kind, npr: f64) -> pb::JetConditions {
    conditions_at(kind, npr, 288.15)
}

/// Asserts INVALID_ARGUMENT with a BadRequest violation on `field`.
fn assert_field(status: &tonic::Status, field: &str) {
    jetloop_tests::assert_field(status, Code::InvalidArgument, field);
}

#[tokio::test]
async fn isentropic_and_normal_shock_match_naca_1135() {
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    // NACA Report 1135 (1953) Table I, M = 2, gamma 1.4: p/p0 0.12780, A/A* 1.6875, nu 26.380.
    let r = c
        .isentropic_ratios(pb::IsentropicRatiosRequest {
            gamma: None,
            given: Some(Given::MachNumber(2.0)),
            branch: 0,
        })
        .await
        .unwrap()
        .into_inner();
    assert!(rel(r.pressure_ratio, 0.12780) < 5e-5);
    assert!(rel(r.area_ratio, 1.6875) < 5e-5);
    assert!(rel(r.prandtl_meyer_angle_deg.unwrap(), 26.380) < 5e-5);
    let prov = r.provenance.unwrap();
    assert!(prov.models.iter().any(|m| m.reference.contains("NACA Report 1135")));
    assert!(prov.defaults_applied.iter().any(|d| d.field == "gamma"));
    // Back from A/A* on the subsonic branch: M = 0.5 for A/A* = 1.33984 (NACA 1135).
    let r = c
        .isentropic_ratios(pb::IsentropicRatiosRequest {
            gamma: Some(1.4),
            given: Some(Given::AreaRatio(1.339_843_75)),
            branch: pb::MachBranch::Subsonic as i32,
        })
        .await
        .unwrap()
        .into_inner();
    assert!(rel(r.mach_number, 0.5) < 1e-6);
    assert!(r.mach_angle_deg.is_none());
    // Normal shock, M1 = 2: M2 0.57735, p02/p01 0.72087 (NACA 1135 Table II).
    let s = c
        .normal_shock(pb::NormalShockRequest { gamma: Some(1.4), upstream_mach_number: 2.0 })
        .await
        .unwrap()
        .into_inner();
    assert!(rel(s.downstream_mach_number, 0.57735) < 5e-5);
    assert!(rel(s.total_pressure_ratio, 0.72087) < 5e-5);
    server.stop().await;
}

#[tokio::test]
async fn jet_state_every_nozzle_kind() {
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    // Convergent nozzle at NPR 4: Mj = sqrt(5 (4^(2/7) - 1)) = 1.55884 (closed form).
    let s = c
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(round(0.0254), 4.0)) })
        .await
        .unwrap()
        .into_inner();
    let st = s.state.unwrap();
    assert!(rel(st.fully_expanded_mach_number.unwrap(), 1.558_836_568) < 1e-9);
    assert_eq!(st.regime, pb::ExpansionRegime::UnderExpanded as i32);
    assert!(st.mach_disk_expected && st.choked && st.supersonic);
    assert!(st.fully_expanded_diameter_m.unwrap() > 0.0254);
    let prov = s.provenance.unwrap();
    assert!(prov.notes.iter().any(|n| n.contains("140 dB")));
    assert!(prov.notes.iter().any(|n| n.contains("common practice")));
    // Ideally expanded C-D nozzle, Md = 1.5: design NPR = 1/0.27240 = 3.6710 (NACA 1135).
    let st = c
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(cd(0.05, 1.5), 3.671_021_5)) })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    assert!(rel(st.design_nozzle_pressure_ratio, 1.0 / 0.272_403_2) < 1e-6);
    assert!(rel(st.fully_expanded_diameter_m.unwrap(), 0.05) < 1e-6);
    let rect = Kind::Rectangular(pb::RectangularNozzle {
        exit_height_m: 0.01,
        exit_width_m: 0.05,
        design_mach_number: None,
    });
    let st = c
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(rect, 3.0)) })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    let (hj, bj) = (st.fully_expanded_height_m.unwrap(), st.fully_expanded_width_m.unwrap());
    assert!(rel(hj * bj, st.fully_expanded_to_exit_area_ratio.unwrap() * 0.01 * 0.05) < 1e-12);
    let planar = Kind::Planar(pb::PlanarNozzle { exit_height_m: 0.004, design_mach_number: None });
    let st = c
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(planar, 1.5)) })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    assert_eq!(st.regime, pb::ExpansionRegime::Subsonic as i32);
    assert!(!st.supersonic);
    assert!(st.mass_flow_per_span_kg_per_s_m.is_some() && st.mass_flow_kg_per_s.is_none());
    server.stop().await;
}

#[tokio::test]
async fn bad_input_names_the_field() {
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    let iso = |gamma, given, branch: pb::MachBranch| pb::IsentropicRatiosRequest {
        gamma,
        given: Some(given),
        branch: branch as i32,
    };
    let cases: Vec<(pb::IsentropicRatiosRequest, &str)> = vec![
        (iso(Some(f64::NAN), Given::MachNumber(2.0), pb::MachBranch::Unspecified), "gamma"),
        (iso(Some(1.0), Given::MachNumber(2.0), pb::MachBranch::Unspecified), "gamma"),
        (iso(Some(0.5), Given::MachNumber(2.0), pb::MachBranch::Unspecified), "gamma"),
        (iso(None, Given::MachNumber(f64::INFINITY), pb::MachBranch::Unspecified), "mach_number"),
        (iso(None, Given::MachNumber(-1.0), pb::MachBranch::Unspecified), "mach_number"),
        (iso(None, Given::AreaRatio(0.8), pb::MachBranch::Supersonic), "area_ratio"),
        (iso(None, Given::PressureRatio(f64::NAN), pb::MachBranch::Unspecified), "pressure_ratio"),
        (iso(None, Given::PrandtlMeyerAngleDeg(20.0), pb::MachBranch::Subsonic), "prandtl_meyer_angle_deg"),
        (iso(None, Given::MachAngleDeg(30.0), pb::MachBranch::Subsonic), "mach_angle_deg"),
    ];
    for (req, field) in cases {
        let e = c.isentropic_ratios(req).await.unwrap_err();
        assert_field(&e, field);
    }
    let e = c
        .isentropic_ratios(pb::IsentropicRatiosRequest { gamma: None, given: None, branch: 0 })
        .await
        .unwrap_err();
    assert_field(&e, "given");
    let e =
        c.normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 0.5 }).await.unwrap_err();
    assert_field(&e, "upstream_mach_number");

    let jet = |c: pb::JetConditions| pb::JetStateRequest { conditions: Some(c) };
    let mut bad_p = conditions(round(0.02), 3.0);
    bad_p.operating_point = Some(pb::OperatingPoint {
        pressure: Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
            total_pressure_pa: -5.0,
            ambient_pressure_pa: 101_325.0,
        })),
        ..Default::default()
    });
    let mut zero_amb = conditions(round(0.02), 3.0);
    zero_amb.operating_point.as_mut().unwrap().ambient_pressure_pa = Some(0.0);
    let mut neg_t = conditions(round(0.02), 3.0);
    neg_t.operating_point.as_mut().unwrap().total_temperature_k = Some(-10.0);
    let mut zero_t_amb = conditions(round(0.02), 3.0);
    zero_t_amb.operating_point.as_mut().unwrap().ambient_temperature_k = Some(0.0);
    let mut bad_gamma = conditions(round(0.02), 3.0);
    bad_gamma.gas = Some(pb::Gas { gamma: Some(1.0), gas_constant_j_per_kg_k: Some(287.0) });
    let mut no_nozzle = conditions(round(0.02), 3.0);
    no_nozzle.nozzle = None;
    let cd_bad_ar = Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle {
        exit_diameter_m: 0.05,
        design: Some(pb::round_convergent_divergent_nozzle::Design::ExitToThroatAreaRatio(0.7)),
    });
    let rect_no_width = Kind::Rectangular(pb::RectangularNozzle {
        exit_height_m: 0.01,
        exit_width_m: 0.0,
        design_mach_number: None,
    });
    let jet_cases: Vec<(pb::JetConditions, &str)> = vec![
        (conditions(round(0.02), 0.9), "conditions.operating_point.nozzle_pressure_ratio"),
        (conditions(round(0.02), f64::NAN), "conditions.operating_point.nozzle_pressure_ratio"),
        (conditions(round(0.0), 3.0), "conditions.nozzle.round_convergent.exit_diameter_m"),
        (conditions(round(-1.0), 3.0), "conditions.nozzle.round_convergent.exit_diameter_m"),
        (bad_p, "conditions.operating_point.pressures.total_pressure_pa"),
        (zero_amb, "conditions.operating_point.ambient_pressure_pa"),
        (neg_t, "conditions.operating_point.total_temperature_k"),
        (zero_t_amb, "conditions.operating_point.ambient_temperature_k"),
        (bad_gamma, "conditions.gas.gamma"),
        (no_nozzle, "conditions.nozzle"),
        (
            conditions(cd_bad_ar, 3.0),
            "conditions.nozzle.round_convergent_divergent.exit_to_throat_area_ratio",
        ),
        (conditions(rect_no_width, 3.0), "conditions.nozzle.rectangular.exit_width_m"),
    ];
    for (cond, field) in jet_cases {
        let e = c.jet_state(jet(cond)).await.unwrap_err();
        assert_field(&e, field);
    }
    let e = c.jet_state(pb::JetStateRequest { conditions: None }).await.unwrap_err();
    assert_field(&e, "conditions");
    // The server is still healthy after all of that.
    let r = c.normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 1.5 }).await;
    assert!(r.is_ok());
    server.stop().await;
}

#[tokio::test]
async fn info_health_and_reflection() {
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let info =
        InfoServiceClient::new(ch.clone()).server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner();
    assert_eq!(info.server_version, env!("CARGO_PKG_VERSION"));
    assert!(info.services.iter().any(|s| s == "jetloop.v1.GasDynamicsService"));
    assert!(info.limits.unwrap().max_request_bytes > 0);
    assert!(info.safety_notice.contains("140 dB"));

    use tonic_health::pb::{
        health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest,
    };
    let mut health = HealthClient::new(ch.clone());
    for svc in ["", "jetloop.v1.GasDynamicsService", "jetloop.v1.InfoService"] {
        let r = health.check(HealthCheckRequest { service: svc.into() }).await.unwrap().into_inner();
        assert_eq!(r.status, ServingStatus::Serving as i32, "service {svc:?}");
    }

    use tonic_reflection::pb::v1::{
        server_reflection_client::ServerReflectionClient, server_reflection_request::MessageRequest,
        server_reflection_response::MessageResponse, ServerReflectionRequest,
    };
    let mut refl = ServerReflectionClient::new(ch);
    let req = ServerReflectionRequest {
        host: String::new(),
        message_request: Some(MessageRequest::ListServices(String::new())),
    };
    let mut stream = refl.server_reflection_info(tokio_stream::iter(vec![req])).await.unwrap().into_inner();
    let resp = stream.message().await.unwrap().unwrap();
    let Some(MessageResponse::ListServicesResponse(list)) = resp.message_response else {
        panic!("unexpected reflection answer");
    };
    let names: Vec<_> = list.service.iter().map(|s| s.name.as_str()).collect();
    for want in ["jetloop.v1.GasDynamicsService", "jetloop.v1.InfoService", "grpc.health.v1.Health"] {
        assert!(names.contains(&want), "{want} missing from {names:?}");
    }
    server.stop().await;
}

#[tokio::test]
async fn graceful_shutdown_refuses_new_connections() {
    let server = TestServer::start().await;
    let url = server.url();
    server.stop().await;
    let r = tonic::transport::Endpoint::from_shared(url).unwrap().connect().await;
    assert!(r.is_err(), "server still accepts connections after shutdown");
}

#[tokio::test]
async fn a_gauge_reservoir_pressure_is_added_to_the_ambient_pressure() {
    // Absolute = gauge + ambient (definition of gauge pressure; common practice). 2.5 bar gauge
    // on a 0.95 bar day is NPR 3.45/0.95; the state equals the one asked by that NPR, and Mj the
    // isentropic closed form Mj = sqrt(2/(g-1) (NPR^((g-1)/g) - 1)) (NACA Report 1135, eq. 44).
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    let (gauge, amb) = (250_000.0, 95_000.0);
    let mut by_gauge = conditions(round(0.0254), 1.0);
    by_gauge.operating_point = Some(pb::OperatingPoint {
        pressure: Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
            reservoir_gauge_pressure_pa: gauge,
            ambient_pressure_pa: amb,
        })),
        ..Default::default()
    });
    let mut by_npr = conditions(round(0.0254), (gauge + amb) / amb);
    by_npr.operating_point.as_mut().unwrap().ambient_pressure_pa = Some(amb);
    let a = c.jet_state(pb::JetStateRequest { conditions: Some(by_gauge) }).await.unwrap().into_inner();
    let b = c.jet_state(pb::JetStateRequest { conditions: Some(by_npr) }).await.unwrap().into_inner();
    let (sa, sb) = (a.state.unwrap(), b.state.unwrap());
    let npr = (gauge + amb) / amb;
    assert!(rel(sa.nozzle_pressure_ratio, npr) < 1e-15);
    assert_eq!(sa.fully_expanded_mach_number, sb.fully_expanded_mach_number);
    let mj = (2.0 / 0.4 * (npr.powf(0.4 / 1.4) - 1.0)).sqrt();
    assert!(rel(sa.fully_expanded_mach_number.unwrap(), mj) < 1e-12);
    // A negative gauge pressure (vacuum reservoir) is refused, naming the field.
    let mut bad = by_gauge;
    bad.operating_point.as_mut().unwrap().pressure = Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
        reservoir_gauge_pressure_pa: -1000.0,
        ambient_pressure_pa: amb,
    }));
    let e = c.jet_state(pb::JetStateRequest { conditions: Some(bad) }).await.unwrap_err();
    assert_field(&e, "conditions.operating_point.gauge.reservoir_gauge_pressure_pa");
    server.stop().await;
}
