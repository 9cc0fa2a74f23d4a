//! End to end over a real socket: the corrections found by independent re-computation of the
//! gas-dynamics, shock-cell and tone services (ambient gas, over-expanded C-D jets below the
//! critical ratio, Mach disks, ideal-expansion tolerance, the shock-noise singularity, gamma
//! bound, structured precondition failures and error wording). Each check names its source.

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient, isentropic_ratios_request::Given,
    nozzle::Kind, operating_point::Pressure, shock_cell_service_client::ShockCellServiceClient,
    tone_service_client::ToneServiceClient,
};
use jetloop_tests::fixtures::{self, cd, conditions_at, rel, round};
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;
use tonic_types::StatusExt;

fn conditions(kind: Kind, npr: f64, gas: Option<pb::Gas>, t0: f64) -> pb::JetConditions {
    pb::JetConditions { gas, ..conditions_at(kind, npr, t0) }
}

fn input(c: pb::JetConditions) -> Option<pb::JetInput> {
    Some(fixtures::input(c))
}

const HELIUM: pb::Gas = pb::Gas { gamma: Some(5.0 / 3.0), gas_constant_j_per_kg_k: Some(2077.1) };

#[tokio::test]
async fn helium_jet_powell_frequency_uses_the_surrounding_air() {
    // Closed forms (Tam & Tanna 1982; Prandtl-Pack spacing; Powell with Uc = 0.7 Uj and the
    // ambient sound speed of dry air at 288.15 K, 340.2923 m/s), evaluated independently in
    // Python float64: 25.4 mm convergent nozzle, helium at NPR 4, T0 288.15 K -> 6060.2702 Hz.
    // The same jet with helium's own sound speed outside would give 11239.46 Hz.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let r = ToneServiceClient::new(ch.clone())
        .predict_screech(pb::PredictScreechRequest {
            jet: input(conditions(round(0.0254), 4.0, Some(HELIUM), 288.15)),
            options: None,
        })
        .await
        .unwrap()
        .into_inner();
    let powell = &r.predictions[0];
    assert!(rel(powell.fundamental_hz, 6_060.270_226_709_247) < 1e-9, "{}", powell.fundamental_hz);
    assert!(rel(r.jet.as_ref().unwrap().ambient_sound_speed_m_per_s, 340.292_286_865_277_05) < 1e-12);
    let prov = r.provenance.unwrap();
    assert!(
        prov.defaults_applied
            .iter()
            .any(|d| d.field == "jet.conditions.ambient_gas.gamma" && d.value == "1.4"),
        "{:?}",
        prov.defaults_applied
    );
    // The state reports both gases.
    let s = GasDynamicsServiceClient::new(ch)
        .jet_state(pb::JetStateRequest {
            conditions: Some(conditions(round(0.0254), 4.0, Some(HELIUM), 288.15)),
        })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    assert_eq!((s.gamma, s.ambient_gamma), (5.0 / 3.0, 1.4));
    assert_eq!(s.ambient_gas_constant_j_per_kg_k, 287.05);
    server.stop().await;
}

#[tokio::test]
async fn over_expanded_cd_jet_below_critical_is_refused_with_what_the_flow_is() {
    // Md 1.5 at NPR 1.6: between the exit-shock NPR 1.4934 and the critical 1.8929 (NACA 1135
    // tables, closed form): supersonic exit flow, Mj < 1.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let s = GasDynamicsServiceClient::new(ch.clone())
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(cd(0.05, 1.5), 1.6, None, 288.15)) })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    assert_eq!(s.regime, pb::ExpansionRegime::OverExpanded as i32);
    assert!(s.exit_supersonic && !s.supersonic);
    assert_eq!(s.fully_expanded_mach_number, None);
    assert_eq!(s.fully_expanded_diameter_m, None);
    assert_eq!(s.fully_expanded_to_exit_area_ratio, None);
    // Mj = sqrt(5 (1.6^(2/7) - 1)) = 0.8545 (closed form), kept under its own name.
    assert!(rel(s.isentropic_mach_number, (5.0 * (1.6f64.powf(2.0 / 7.0) - 1.0)).sqrt()) < 1e-12);
    assert!(s.mach_disk_expected);
    let e = ShockCellServiceClient::new(ch)
        .cell_spacing(pb::CellSpacingRequest {
            jet: input(conditions(cd(0.05, 1.5), 1.6, None, 288.15)),
            options: None,
        })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition);
    assert!(e.message().contains("leaves the nozzle supersonic"), "{}", e.message());
    let details = e.get_error_details();
    let v = &details.precondition_failure().expect("PreconditionFailure detail").violations[0];
    assert_eq!((v.r#type.as_str(), v.subject.as_str()), ("JET_NOT_SUPERSONIC", "jet.conditions"));
    server.stop().await;
}

#[tokio::test]
async fn shock_in_nozzle_leaves_the_fully_expanded_mach_number_unset() {
    // Md 3 at NPR 2.5 is below the exit-shock NPR 3.5551 (NACA 1135: 36.733 / 10.333).
    let server = TestServer::start().await;
    let s = GasDynamicsServiceClient::new(server.channel().await)
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(cd(0.05, 3.0), 2.5, None, 288.15)) })
        .await
        .unwrap()
        .into_inner()
        .state
        .unwrap();
    assert_eq!(s.regime, pb::ExpansionRegime::ShockInNozzle as i32);
    assert_eq!(s.fully_expanded_mach_number, None);
    assert_eq!(s.fully_expanded_velocity_m_per_s, None);
    assert!(s.isentropic_mach_number > 1.0 && s.exit_mach_number < 1.0);
    server.stop().await;
}

#[tokio::test]
async fn ideal_expansion_tolerance_is_applied_reported_and_settable() {
    // Design NPR of Md 1.5 is 3.67103 (NACA 1135: 1 / 0.27240); 3.671 is ideally expanded
    // within 0.5 % and over-expanded with a zero tolerance.
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    let r = c
        .jet_state(pb::JetStateRequest { conditions: Some(conditions(cd(0.05, 1.5), 3.671, None, 288.15)) })
        .await
        .unwrap()
        .into_inner();
    let s = r.state.unwrap();
    assert_eq!(s.regime, pb::ExpansionRegime::IdeallyExpanded as i32);
    assert_eq!(s.ideal_expansion_tolerance, 0.005);
    assert!((s.exit_to_ambient_pressure_ratio - 3.671 / 3.671_030_627).abs() < 1e-8);
    assert!(r
        .provenance
        .unwrap()
        .defaults_applied
        .iter()
        .any(|d| d.field == "conditions.ideal_expansion_tolerance"));
    let mut strict = conditions(cd(0.05, 1.5), 3.671, None, 288.15);
    strict.ideal_expansion_tolerance = Some(0.0);
    let s = c.jet_state(pb::JetStateRequest { conditions: Some(strict) }).await.unwrap().into_inner();
    assert_eq!(s.state.unwrap().regime, pb::ExpansionRegime::OverExpanded as i32);
    let mut bad = conditions(cd(0.05, 1.5), 3.671, None, 288.15);
    bad.ideal_expansion_tolerance = Some(0.5);
    let e = c.jet_state(pb::JetStateRequest { conditions: Some(bad) }).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "conditions.ideal_expansion_tolerance");
    server.stop().await;
}

#[tokio::test]
async fn shock_noise_peaks_near_the_singularity_are_flagged() {
    // f_p = Uc / (Ls (1 - Mc cos psi)) (Harper-Bourne & Fisher 1973): Uc = 0.999 a_amb at
    // psi = 0 gives a denominator of 1e-3, a Strouhal number in the hundreds.
    let server = TestServer::start().await;
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    let r = ToneServiceClient::new(server.channel().await)
        .predict_shock_noise(pb::PredictShockNoiseRequest {
            jet: input(conditions(round(0.0254), 4.0, None, 288.15)),
            convection: Some(pb::Convection {
                speed: Some(pb::convection::Speed::ConvectionSpeedMPerS(0.999 * a)),
            }),
            cells: None,
            observer_angles_deg: vec![0.0, 90.0],
        })
        .await
        .unwrap()
        .into_inner();
    assert!(r.peaks[0].beyond_strouhal_limit && r.peaks[0].peak_frequency_hz.is_none());
    assert!(!r.peaks[1].beyond_strouhal_limit && r.peaks[1].peak_frequency_hz.is_some());
    assert!(r.provenance.unwrap().notes.iter().any(|n| n.contains("Strouhal number 10")));
    server.stop().await;
}

#[tokio::test]
async fn error_wording_and_paths() {
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    // gamma above 5/3: no perfect gas (kinetic theory, monatomic limit).
    let e = c
        .jet_state(pb::JetStateRequest {
            conditions: Some(conditions(
                round(0.02),
                3.0,
                Some(pb::Gas { gamma: Some(1.8), gas_constant_j_per_kg_k: None }),
                288.15,
            )),
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "conditions.gas.gamma");
    assert!(e.message().contains("5/3"), "{}", e.message());
    let mut amb = conditions(round(0.02), 3.0, None, 288.15);
    amb.ambient_gas = Some(pb::Gas { gamma: Some(0.9), gas_constant_j_per_kg_k: None });
    let e = c.jet_state(pb::JetStateRequest { conditions: Some(amb) }).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "conditions.ambient_gas.gamma");
    // An empty NormalShock request: the Mach number is required, not "0 is outside".
    let e =
        c.normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 0.0 }).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "upstream_mach_number");
    assert!(e.message().contains("required"), "{}", e.message());
    // Reservoir below ambient: the allowed pressures in pascals.
    let mut low = conditions(round(0.02), 3.0, None, 288.15);
    low.operating_point = Some(pb::OperatingPoint {
        pressure: Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
            total_pressure_pa: 50_000.0,
            ambient_pressure_pa: 101_325.0,
        })),
        ..Default::default()
    });
    let e = c.jet_state(pb::JetStateRequest { conditions: Some(low) }).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "conditions.operating_point.pressures.total_pressure_pa");
    assert!(e.message().contains("[101325, 101325000] Pa"), "{}", e.message());
    // A branch that contradicts a unique Mach number is refused; a consistent one is noted.
    let iso = |given, branch: pb::MachBranch| pb::IsentropicRatiosRequest {
        gamma: None,
        given: Some(given),
        branch: branch as i32,
    };
    let e = c.isentropic_ratios(iso(Given::MachNumber(2.0), pb::MachBranch::Subsonic)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "branch");
    // p/p0 = 0.12780 is M = 2 (NACA 1135): supersonic, so the subsonic branch contradicts it.
    let e =
        c.isentropic_ratios(iso(Given::PressureRatio(0.1278), pb::MachBranch::Subsonic)).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "branch");
    let r = c
        .isentropic_ratios(iso(Given::MachNumber(2.0), pb::MachBranch::Supersonic))
        .await
        .unwrap()
        .into_inner();
    assert!(r.provenance.unwrap().notes.iter().any(|n| n.contains("has no effect")));
    server.stop().await;
}
