//! End to end over a real socket: values possible but far from what laboratories use (a
//! nozzle in millimetres typed as metres, degrees Celsius typed as kelvin, kilopascals typed as
//! pascals, a stage fit missing by orders of magnitude because of such a size) draw a caution
//! in the answer's provenance notes, and the nominal one-inch cold jet at sea level draws none.

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient,
    staging_service_client::StagingServiceClient, tone_service_client::ToneServiceClient,
};
use jetloop_tests::fixtures::{conditions, direct, input, nozzle_only, round};
use jetloop_tests::TestServer;

/// Notes that are unit-slip cautions (the safety caution about pressurised air is always there
/// for reservoir conditions and is not one).
fn slips(p: Option<&pb::Provenance>) -> Vec<String> {
    p.map(|p| {
        p.notes
            .iter()
            .filter(|n| n.contains("did you mean") || n.contains("check the unit"))
            .cloned()
            .collect()
    })
    .unwrap_or_default()
}

#[tokio::test]
async fn each_unit_slip_draws_its_caution_and_the_one_inch_jet_none() {
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let gas = GasDynamicsServiceClient::new(ch.clone());
    let state = |c: pb::JetConditions| {
        let mut gas = gas.clone();
        async move {
            let r = gas.jet_state(pb::JetStateRequest { conditions: Some(c) }).await.unwrap().into_inner();
            slips(r.provenance.as_ref())
        }
    };
    // Nominal: 25.4 mm, ISA sea level (defaults), and the same given explicitly.
    assert!(state(conditions(round(0.0254), 3.5)).await.is_empty());
    let mut nominal = conditions(round(0.0254), 3.5);
    let op = nominal.operating_point.as_mut().unwrap();
    (op.ambient_temperature_k, op.total_temperature_k, op.ambient_pressure_pa) =
        (Some(288.15), Some(293.0), Some(101_325.0));
    assert!(state(nominal).await.is_empty());

    // 25.4 "m": millimetres typed as metres, named by its field.
    let n = state(conditions(round(25.4), 3.5)).await;
    assert_eq!(n.len(), 1, "{n:?}");
    assert!(n[0].contains("conditions.nozzle.round_convergent.exit_diameter_m = 25.4 m"), "{}", n[0]);
    assert!(n[0].contains("millimetres (0.0254 m)"), "{}", n[0]);

    // 15 "K" ambient and 20 "K" reservoir: degrees Celsius typed as kelvin.
    let mut c = nominal;
    let op = c.operating_point.as_mut().unwrap();
    (op.ambient_temperature_k, op.total_temperature_k) = (Some(15.0), Some(293.0));
    let n = state(c).await;
    assert_eq!(n.len(), 1, "{n:?}");
    assert!(n[0].contains("conditions.operating_point.ambient_temperature_k = 15 K"), "{}", n[0]);
    assert!(n[0].contains("15 degrees Celsius (288.15 K)"), "{}", n[0]);
    let mut c = nominal;
    c.operating_point.as_mut().unwrap().total_temperature_k = Some(20.0);
    let n = state(c).await;
    assert!(
        n.len() == 1 && n[0].contains("total_temperature_k = 20 K") && n[0].contains("293.15 K"),
        "{n:?}"
    );

    // 101.325 "Pa" ambient: kilopascals typed as pascals.
    let mut c = nominal;
    c.operating_point.as_mut().unwrap().ambient_pressure_pa = Some(101.325);
    let n = state(c).await;
    assert!(n.len() == 1 && n[0].contains("kilopascals (101325 Pa)"), "{n:?}");

    // A jet given directly with its diameter in millimetres: named by the field sent.
    let mut tones = ToneServiceClient::new(ch.clone());
    let r = tones
        .predict_screech(pb::PredictScreechRequest { jet: Some(direct(1.4, 25.4)), options: None })
        .await
        .unwrap()
        .into_inner();
    let n = slips(r.provenance.as_ref());
    assert!(n.len() == 1 && n[0].contains("jet.fully_expanded.fully_expanded_diameter_m = 25.4 m"), "{n:?}");
    let r = tones
        .predict_screech(pb::PredictScreechRequest { jet: Some(direct(1.4, 0.0254)), options: None })
        .await
        .unwrap()
        .into_inner();
    assert!(slips(r.provenance.as_ref()).is_empty());
    let r = tones
        .predict_screech(pb::PredictScreechRequest {
            jet: Some(input(conditions(round(0.0254), 3.5))),
            options: None,
        })
        .await
        .unwrap()
        .into_inner();
    assert!(slips(r.provenance.as_ref()).is_empty());
    server.stop().await;
}

#[tokio::test]
async fn a_stage_fit_missing_by_orders_of_magnitude_names_the_nozzle_size() {
    // Points on the server's own Powell prediction for the 25.4 mm nozzle at NPR 3.0-4.0
    // (one stage, loop order 1 in the model), with a 0.5 % frequency uncertainty; fitted with
    // the nozzle given as 25.4 m the loop is 1000 times too slow for any loop order.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut tones = ToneServiceClient::new(ch.clone());
    let mut points = Vec::new();
    for k in 0..8 {
        let npr = 3.0 + 0.125 * f64::from(k);
        let r = tones
            .predict_screech(pb::PredictScreechRequest {
                jet: Some(input(conditions(round(0.0254), npr))),
                options: None,
            })
            .await
            .unwrap()
            .into_inner();
        let f = r.predictions[0].fundamental_hz;
        points.push(pb::MeasuredTone {
            x: npr,
            frequency_hz: f,
            frequency_uncertainty_hz: Some(0.005 * f),
            ..Default::default()
        });
    }
    let staging = StagingServiceClient::new(ch);
    let fit = |d: f64| {
        let (mut staging, points) = (staging.clone(), points.clone());
        async move {
            let r = staging
                .fit_stages(pb::FitStagesRequest {
                    control: pb::ControlVariable::NozzlePressureRatio as i32,
                    points,
                    jet: Some(nozzle_only(round(d))),
                    options: None,
                    stage_labels: None,
                })
                .await
                .unwrap()
                .into_inner();
            slips(r.provenance.as_ref())
        }
    };
    assert!(fit(0.0254).await.is_empty());
    let n = fit(25.4).await;
    assert!(n.iter().any(|c| c.contains("check the unit of jet.nozzle's exit size (25.4 m)")), "{n:?}");
    assert!(n.iter().any(|c| c.contains("millimetres (0.0254 m)")), "{n:?}");
    drop(staging);
    server.stop().await;
}
