//! End to end over a real socket: StagingService segmentation and fits, and its limits.

use jetloop_proto::pb::{self, staging_service_client::StagingServiceClient};
use jetloop_tests::fixtures::{inch_nozzle, nozzle_only, point, round};
use jetloop_tests::{assert_field, TestServer};
use tonic::Code;

/// The test nozzle (25.4 mm round convergent), its pressure ratio given by the points.
fn jet() -> pb::JetConditions {
    nozzle_only(round(0.0254))
}

/// Reflector lines f_n(d) = n / (tau0 + g d / a) for n = 2, 3, 4, tau0 = 0.25 ms, d = 0..48 mm
/// in 2 mm steps, a = 340.29 m/s (ISA; Powell's loop with a reflector, physics notes sec. 4),
/// each frequency times `ripple(k)`.
fn reflector_lines(g: f64, ripple: impl Fn(u32) -> f64) -> Vec<pb::MeasuredTone> {
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    let mut points = Vec::new();
    for n in [2.0, 3.0, 4.0] {
        for k in 0..25 {
            let d = 0.002 * f64::from(k);
            points.push(point(d, n / (2.5e-4 + g * d / a) * ripple(k)));
        }
    }
    points
}

#[tokio::test]
async fn reflector_sweep_lines_and_model_comparison() {
    // f_n(d) = n / (tau0 + 2 d / a), n = 2, 3, 4, a = 340.29 m/s (ISA), tau0 = 0.25 ms.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    // Deterministic +-0.2 % ripple instead of noise.
    let points = reflector_lines(2.0, |k| 1.0 + 0.002 * if k % 2 == 0 { 1.0 } else { -1.0 });
    let r = c
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::ReflectorDistanceM as i32,
            points,
            jet: None,
            options: None,
            stage_labels: None,
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.stages.len(), 3);
    let mut orders: Vec<u32> = r.stages.iter().map(|s| s.loop_order.unwrap()).collect();
    orders.sort_unstable();
    assert_eq!(orders, vec![2, 3, 4]);
    for s in &r.stages {
        let tau = &s.parameters[0];
        assert_eq!(tau.name, "fixed_delay_s");
        assert!((tau.value - 2.5e-4).abs() < 3.0 * tau.standard_error.unwrap() + 1e-6, "{tau:?}");
        assert!(s.rms_relative_error.unwrap() < 0.005);
    }
    assert_eq!(r.models.len(), 2);
    assert_eq!(r.models.iter().filter(|m| m.preferred).count(), 1);
    assert!(r.points.iter().all(|p| p.loop_order.is_some() && p.residual_hz.is_some()));
    server.stop().await;
}

/// Vortex-sheet cell spacing Ls (m) and Uj (m/s) of the test nozzle at `npr`, from CellSpacing
/// (its spacing is checked against Pack's closed form elsewhere).
async fn spacing_and_velocity(
    cells: &mut pb::shock_cell_service_client::ShockCellServiceClient<tonic::transport::Channel>,
    npr: f64,
) -> (f64, f64) {
    let r = cells
        .cell_spacing(pb::CellSpacingRequest {
            jet: Some(inch_nozzle(npr)),
            options: Some(pb::CellOptions { modes: Some(1), ..Default::default() }),
        })
        .await
        .expect("cell spacing")
        .into_inner();
    (r.modes[0].spacing_m, r.jet.expect("jet summary").fully_expanded_velocity_m_per_s)
}

#[tokio::test]
async fn pressure_sweep_over_npr_with_given_source_cell() {
    // Two stages generated from the loop model itself with n = 1 and 2, N = 4 (given),
    // kappa 0.62 and 0.65, no delay; x is the NPR.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let cells = pb::shock_cell_service_client::ShockCellServiceClient::new(server.channel().await);
    let mut cells = cells;
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    let mut points = Vec::new();
    for k in 0..60 {
        let npr = 2.2 + 0.02 * f64::from(k);
        let (ls, uj) = spacing_and_velocity(&mut cells, npr).await;
        let (n, kappa) = if npr < 2.8 { (1.0, 0.62) } else { (2.0, 0.65) };
        points.push(point(npr, n / (4.0 * ls * (1.0 / (kappa * uj) + 1.0 / a))));
    }
    let r = c
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::NozzlePressureRatio as i32,
            points,
            jet: Some(jet()),
            options: Some(pb::FitOptions { source_cells: Some(4), ..Default::default() }),
            stage_labels: None,
        })
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.stages.len(), 2);
    assert_eq!(r.stages[0].loop_order, Some(1));
    assert_eq!(r.stages[1].loop_order, Some(2));
    let k0 = &r.stages[0].parameters[0];
    assert_eq!(k0.name, "convection_ratio");
    assert!((k0.value - 0.62).abs() < 1e-6, "{k0:?}");
    assert_eq!(r.jumps.len(), 1);
    assert!(r.jumps[0].x_before < 2.8 && r.jumps[0].x_after >= 2.8);
    server.stop().await;
}

#[tokio::test]
async fn degenerate_input_is_refused_with_the_limit_named() {
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let req = |control: pb::ControlVariable,
               points: Vec<pb::MeasuredTone>,
               jet: Option<pb::JetConditions>,
               options: Option<pb::FitOptions>| {
        pb::FitStagesRequest { control: control as i32, points, jet, options, stage_labels: None }
    };
    let three = || vec![point(2.5, 4000.0), point(2.6, 3900.0), point(2.7, 3800.0)];
    let cases = vec![
        (req(pb::ControlVariable::Plain, vec![point(1.0, 1.0), point(2.0, 2.0)], None, None), "points"),
        (req(pb::ControlVariable::Plain, vec![point(1.0, 100.0); 5], None, None), "points"),
        (
            req(
                pb::ControlVariable::NozzlePressureRatio,
                vec![point(1.5, 4000.0), point(2.6, 3900.0), point(2.7, 3800.0)],
                Some(jet()),
                None,
            ),
            "points[0].x",
        ),
        (
            req(
                pb::ControlVariable::FullyExpandedMachNumber,
                vec![point(0.9, 4000.0), point(1.2, 3900.0), point(1.3, 3800.0)],
                Some(jet()),
                None,
            ),
            "points[0].x",
        ),
        (
            req(
                pb::ControlVariable::ReflectorDistanceM,
                vec![point(-0.1, 4000.0), point(0.0, 3900.0), point(0.1, 3800.0)],
                None,
                None,
            ),
            "points[0].x",
        ),
        (
            req(
                pb::ControlVariable::Plain,
                vec![point(f64::NAN, 1.0), point(2.0, 2.0), point(3.0, 3.0)],
                None,
                None,
            ),
            "points[0].x",
        ),
        (req(pb::ControlVariable::NozzlePressureRatio, three(), None, None), "jet"),
        (
            req(
                pb::ControlVariable::NozzlePressureRatio,
                three(),
                Some(jet()),
                Some(pb::FitOptions { max_loop_order: Some(51), ..Default::default() }),
            ),
            "options.max_loop_order",
        ),
        (req(pb::ControlVariable::Unspecified, three(), None, None), "control"),
    ];
    for (r, field) in cases {
        let e = c.fit_stages(r).await.unwrap_err();
        assert_field(&e, Code::InvalidArgument, field);
    }
    let many: Vec<pb::MeasuredTone> = (0..100_001).map(|i| point(f64::from(i), 1000.0)).collect();
    let e = c.fit_stages(req(pb::ControlVariable::Plain, many, None, None)).await.unwrap_err();
    assert_field(&e, Code::ResourceExhausted, "points");
    assert!(e.message().contains("100000"));
    server.stop().await;
}

#[tokio::test]
async fn npr_sweep_of_another_gas_uses_that_gas_critical_ratio() {
    // Regression: the NPR lower bound used air's critical ratio 1.8929 whatever the gas. For
    // gamma 1.2 the critical ratio is (2.2/2)^(1.2/0.2) = 1.7716 (closed form), so NPR 1.8 is
    // a supersonic jet (Mj = sqrt(10 (1.8^(1/6) - 1)) = 1.0147) and must be accepted. Points
    // follow Powell's loop, n = 1, N = 4, Uc = 0.65 Uj, with the closed forms of Tam & Tanna
    // 1982 and Prandtl-Pack spacing evaluated here.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let (g, r_gas, t0, d) = (1.2f64, 287.05, 288.15, 0.0254);
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    let j01 = 2.404_825_557_695_773;
    let points: Vec<_> = (0..25)
        .map(|k| {
            let npr = 1.8 + 0.05 * f64::from(k);
            let mj = (2.0 / (g - 1.0) * (npr.powf((g - 1.0) / g) - 1.0)).sqrt();
            let tj = t0 / (1.0 + 0.5 * (g - 1.0) * mj * mj);
            let uj = mj * (g * r_gas * tj).sqrt();
            let dj = d
                * ((1.0 + 0.5 * (g - 1.0) * mj * mj) / (1.0 + 0.5 * (g - 1.0)))
                    .powf((g + 1.0) / (4.0 * (g - 1.0)))
                / mj.sqrt();
            let ls = std::f64::consts::PI / j01 * (mj * mj - 1.0).sqrt() * dj;
            point(npr, 1.0 / (4.0 * ls * (1.0 / (0.65 * uj) + 1.0 / a)))
        })
        .collect();
    let mut jet = jet();
    jet.gas = Some(pb::Gas { gamma: Some(g), gas_constant_j_per_kg_k: Some(r_gas) });
    let r = c
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::NozzlePressureRatio as i32,
            points,
            jet: Some(jet),
            options: Some(pb::FitOptions { source_cells: Some(4), ..Default::default() }),
            stage_labels: None,
        })
        .await
        .expect("gamma 1.2 at NPR 1.8 is supersonic")
        .into_inner();
    assert_eq!(r.points.len(), 25);
    server.stop().await;
}

#[tokio::test]
async fn a_bad_point_field_is_named_with_its_full_path() {
    // Regression: a negative frequency was reported at points[2] instead of
    // points[2].frequency_hz.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let e = c
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::Plain as i32,
            points: vec![point(1.0, 100.0), point(2.0, 110.0), point(3.0, -5.0)],
            jet: None,
            options: None,
            stage_labels: None,
        })
        .await
        .unwrap_err();
    assert_field(&e, Code::InvalidArgument, "points[2].frequency_hz");
    server.stop().await;
}

#[tokio::test]
async fn the_shared_loop_keeps_a_given_source_cell_and_whole_cells() {
    // Reproduces: the shared-loop model fitted N as a free real number, ignored a given source
    // cell and could return a non-integer number of cells. Synthetic sweep from Powell's loop
    // n / f = N Ls (1/(kappa Uj) + 1/a) (physics notes, sec. 4) with one kappa = 0.65 and
    // N = 4 for three stages n = 1, 2, 3, no delay; Ls and Uj of each point from CellSpacing.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let mut cells = pb::shock_cell_service_client::ShockCellServiceClient::new(server.channel().await);
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    let mut points = Vec::new();
    for k in 0..90 {
        let npr = 2.2 + 0.02 * f64::from(k);
        let (ls, uj) = spacing_and_velocity(&mut cells, npr).await;
        let n = if npr < 2.8 {
            1.0
        } else if npr < 3.4 {
            2.0
        } else {
            3.0
        };
        points.push(point(npr, n / (4.0 * ls * (1.0 / (0.65 * uj) + 1.0 / a))));
    }
    for given in [Some(4), None] {
        let r = c
            .fit_stages(pb::FitStagesRequest {
                control: pb::ControlVariable::NozzlePressureRatio as i32,
                points: points.clone(),
                jet: Some(jet()),
                options: Some(pb::FitOptions {
                    source_cells: given,
                    fit_fixed_delay: Some(false),
                    ..Default::default()
                }),
                stage_labels: None,
            })
            .await
            .unwrap()
            .into_inner();
        assert_eq!(r.stages.len(), 3, "given {given:?}");
        let shared = r.shared_loop.as_ref().expect("a shared loop for three fitted stages");
        assert_eq!(shared.loop_orders, vec![1, 2, 3], "given {given:?}");
        let get = |name: &str| shared.parameters.iter().find(|p| p.name == name).unwrap();
        let n = get("source_cells");
        assert_eq!(n.value, 4.0, "given {given:?}: {n:?}");
        assert!(n.fixed && n.value.fract() == 0.0);
        let kappa = get("convection_ratio");
        assert!((kappa.value - 0.65).abs() < 1e-6, "given {given:?}: {kappa:?}");
    }
    server.stop().await;
}

#[tokio::test]
async fn a_free_path_factor_stays_within_its_bounds_in_the_shared_model() {
    // Reproduces: with the path factor free, the shared reflector model returned a factor
    // outside the documented bounds [1.5, 2.5]. Synthetic lines f_n(d) = n / (tau0 + g d / a)
    // (Powell's loop with a reflector, physics notes sec. 4) with g = 3.2, beyond the bound.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let points = reflector_lines(3.2, |_| 1.0);
    let r = c
        .fit_stages(pb::FitStagesRequest {
            control: pb::ControlVariable::ReflectorDistanceM as i32,
            points,
            jet: None,
            options: Some(pb::FitOptions { fit_reflector_path_factor: true, ..Default::default() }),
            stage_labels: None,
        })
        .await
        .unwrap()
        .into_inner();
    let shared = r.shared_loop.as_ref().expect("a shared loop");
    let g = shared.parameters.iter().find(|p| p.name == "reflector_path_factor").unwrap();
    assert!((1.5..=2.5).contains(&g.value), "{g:?}");
    assert!(g.at_bound, "{g:?}");
    server.stop().await;
}

#[tokio::test]
async fn fit_verdicts_and_noise_warnings_reach_the_answer() {
    // Reflector lines (Powell's loop with a reflector, physics notes sec. 4) with a +-0.2 %
    // ripple against the default 1 % uncertainty: every fit consistent with the noise, no
    // warning. Two lines forced into one stage by a jump fraction of 0.9: the fit is flagged
    // and a warning names the stage. A stated 5 % uncertainty raises the jump threshold to
    // 20 % (four standard deviations) and says that closer stages cannot be separated.
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let ripple = |k: u32| 1.0 + 0.002 * if k % 2 == 0 { 1.0 } else { -1.0 };
    let ask = |points: Vec<pb::MeasuredTone>, options: pb::FitOptions| pb::FitStagesRequest {
        control: pb::ControlVariable::ReflectorDistanceM as i32,
        points,
        jet: None,
        options: Some(options),
        stage_labels: None,
    };
    let r = c
        .fit_stages(ask(reflector_lines(2.0, ripple), pb::FitOptions::default()))
        .await
        .unwrap()
        .into_inner();
    assert_eq!(r.stages.len(), 3);
    for s in &r.stages {
        assert_eq!(s.fit_verdict, pb::FitVerdict::Consistent as i32, "{s:?}");
        assert!(s.fit_p_value.unwrap() > 1e-3 && s.reduced_chi_square.unwrap() < 1.0);
    }
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);

    // The n = 2 and n = 3 lines (the first 50 points).
    let first_two: Vec<pb::MeasuredTone> = reflector_lines(2.0, ripple)[..50].to_vec();
    let merged = pb::FitOptions { jump_fraction: Some(0.9), ..Default::default() };
    let r = c.fit_stages(ask(first_two, merged)).await.unwrap().into_inner();
    assert_eq!(r.stages.len(), 1);
    assert_eq!(r.stages[0].fit_verdict, pb::FitVerdict::ResidualsAboveNoise as i32);
    assert!(r.warnings.iter().any(|w| w.starts_with("stage 0:")), "{:?}", r.warnings);

    let noisy = pb::FitOptions { default_relative_uncertainty: Some(0.05), ..Default::default() };
    let r = c.fit_stages(ask(reflector_lines(2.0, ripple), noisy)).await.unwrap().into_inner();
    assert!(
        r.warnings.iter().any(|w| w.contains("cannot be separated") && w.contains("20.0 %")),
        "{:?}",
        r.warnings
    );
    server.stop().await;
}

#[tokio::test]
async fn a_non_finite_path_factor_is_refused_whatever_the_sweep() {
    // Regression: options.reflector_path_factor was range-checked only on reflector sweeps, so
    // NaN and infinities passed on NPR, Mj and plain sweeps. staging.proto documents the field
    // as "Allowed (0, 10]" for every sweep; NaN and +-inf lie in no real interval (IEEE 754:
    // every ordered comparison with NaN is false, and inf > 10).
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await);
    let sweeps = [
        (pb::ControlVariable::Plain, [1.0, 2.0, 3.0, 4.0], None),
        (pb::ControlVariable::NozzlePressureRatio, [2.5, 2.6, 2.7, 2.8], Some(jet())),
        (pb::ControlVariable::FullyExpandedMachNumber, [1.2, 1.25, 1.3, 1.35], Some(jet())),
        (pb::ControlVariable::ReflectorDistanceM, [0.01, 0.02, 0.03, 0.04], None),
    ];
    let req = |control: pb::ControlVariable, x: [f64; 4], jet: Option<pb::JetConditions>, g: f64| {
        pb::FitStagesRequest {
            control: control as i32,
            points: x.iter().zip([4000.0, 3950.0, 3900.0, 3850.0]).map(|(&x, f)| point(x, f)).collect(),
            jet,
            options: Some(pb::FitOptions { reflector_path_factor: Some(g), ..Default::default() }),
            stage_labels: None,
        }
    };
    for (control, x, jet) in sweeps {
        for g in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            let e = c.fit_stages(req(control, x, jet, g)).await.unwrap_err();
            assert_field(&e, Code::InvalidArgument, "options.reflector_path_factor");
            assert!(e.message().contains("reflector_path_factor"), "{control:?} g = {g}: {}", e.message());
        }
        // The same sweep with g = 2 (inside (0, 10], staging.proto) draws no complaint about g.
        if let Err(e) = c.fit_stages(req(control, x, jet, 2.0)).await {
            assert!(!e.message().contains("reflector_path_factor"), "{control:?}: {e:?}");
        }
    }
    server.stop().await;
}
