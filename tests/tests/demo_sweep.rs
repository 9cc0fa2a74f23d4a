//! The committed demo sweep `sample-data/npr-sweep-up-down.csv` lies on its stated loop model:
//! every point within 4 % (four standard deviations of the stated 1 % noise) of
//! `jetloop_tests::demo_sweep::model_hz` for its stage and direction, and the model itself is
//! in the range the server predicts for this nozzle (Powell's fundamental within 25 %).

use jetloop_tests::demo_sweep::{model_hz, stage_at, NOISE};

#[test]
fn demo_sweep_points_lie_on_the_loop_model() {
    let text = include_str!("../../sample-data/npr-sweep-up-down.csv");
    let mut n = 0;
    for line in text.lines().filter(|l| !l.starts_with('#')).skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let (npr, hz): (f64, f64) = (f[0].parse().unwrap(), f[1].parse().unwrap());
        let rising = f[3] == "up";
        let model = model_hz(stage_at(npr, rising), npr);
        assert!(
            ((hz - model) / model).abs() <= 4.0 * NOISE,
            "NPR {npr} {}: {hz} Hz vs model {model} Hz",
            f[3]
        );
        n += 1;
    }
    assert_eq!(n, 90);
}

#[test]
fn demo_sweep_model_is_near_the_powell_fundamental() {
    // Powell's fundamental with Uc = 0.7 Uj and the vortex-sheet spacing (the server's
    // PredictScreech, physics::tones::powell_fundamental), at three NPRs.
    use jetloop_server::physics::{
        cells,
        gas::Gas,
        jet::{jet_state, ExpandedJet, Nozzle, OperatingPoint},
        tones::powell_fundamental,
    };
    for (npr, stage) in [(2.5, 0), (3.5, 1), (4.3, 2)] {
        let s = jet_state(
            &Gas::AIR,
            &Nozzle::round_convergent(0.0254).unwrap(),
            &OperatingPoint::new(npr, 101_325.0, 288.15, 288.15).unwrap(),
        );
        let j = ExpandedJet::from_state(&s).unwrap();
        let powell =
            powell_fundamental(0.7 * j.uj_m_s, Gas::AIR.sound_speed(288.15), cells::spacing(&j, 1.0));
        let m = model_hz(stage, npr);
        assert!((m / powell - 1.0).abs() < 0.25, "NPR {npr}: model {m} Hz, Powell {powell} Hz");
    }
}

/// The committed demo reflector sweep `sample-data/reflector-sweep.csv` lies on its stated loop
/// model `f = n / (tau0 + 2 d / a)` (the reflector loop of physics/staging, g = 2: twice the
/// displacement, common practice): every point within 4 standard deviations of the stated
/// 0.5 % noise, at every displacement of the sweep.
#[test]
fn demo_reflector_points_lie_on_the_loop_model() {
    use jetloop_tests::demo_reflector::{displacements, model_hz, NOISE};
    let text = include_str!("../../sample-data/reflector-sweep.csv");
    let rows: Vec<(f64, f64)> = text
        .lines()
        .filter(|l| !l.starts_with('#'))
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[0].parse().unwrap(), f[1].parse().unwrap())
        })
        .collect();
    assert_eq!(rows.len(), displacements().len());
    for (d, hz) in rows {
        let model = model_hz(d);
        assert!(((hz - model) / model).abs() <= 4.0 * NOISE, "d = {d} m: {hz} Hz vs model {model} Hz");
    }
    // The model itself: order 4 at 5 kHz at the lip, as the constants state.
    assert!((model_hz(0.0) - 5000.0).abs() < 1e-9);
}
