//! Writes the demo NPR sweep (invented) to standard output: NPR 2.30 -> 4.50 -> 2.30 in steps
//! of 0.05 from the loop model in `jetloop_tests::demo_sweep`, with 1 % seeded Gaussian
//! frequency noise. `tests/tests/demo_sweep.rs` checks the committed file against the model.
//!
//! Run with `cargo run -q -p jetloop-bench --bin make-demo-sweep > sample-data/npr-sweep-up-down.csv`.
//! With the argument `reflector` it writes the demo reflector sweep of
//! `jetloop_tests::demo_reflector` instead (`> sample-data/reflector-sweep.csv`), checked by the
//! same test file.
#![forbid(unsafe_code)]

use jetloop_tests::demo_reflector;
use jetloop_tests::demo_sweep::{model_hz, stage_at, CELLS, DOWN, KAPPA, NOISE, ORDER, UP};
use jetloop_tests::signals::Lcg;

/// A seeded standard normal deviate source.
fn gauss(seed: u64) -> impl FnMut() -> f64 {
    let mut rng = Lcg::new(seed);
    move || rng.normal(1.0)
}

fn reflector() {
    let mut g = gauss(2027);
    println!("# Demo data (invented): a flat reflector moved away from the lip of an imagined rig's nozzle.");
    println!(
        "# Made from the loop f = n / (tau0 + 2 d / a), tau0 = {} s, n = {:?} (jump above d = {} m), a at \
         288.15 K, {} % frequency noise (make-demo-sweep reflector).",
        demo_reflector::TAU0_S,
        demo_reflector::ORDERS,
        demo_reflector::JUMP_M,
        100.0 * demo_reflector::NOISE
    );
    println!("reflector_m,frequency_hz");
    for d in demo_reflector::displacements() {
        let f = demo_reflector::model_hz(d) * (1.0 + demo_reflector::NOISE * g());
        println!("{d:.3},{f:.1}");
    }
}

fn main() {
    if std::env::args().nth(1).as_deref() == Some("reflector") {
        return reflector();
    }
    let mut g = gauss(2026);
    println!(
        "# Demo data (invented): cold 25.4 mm convergent nozzle on an imagined rig, NPR swept up then down."
    );
    println!(
        "# Made from Powell's loop f = n / (N Ls (1/(kappa Uj) + 1/a)) with the server's jet model, n = {ORDER}, \
         N = {CELLS}, kappa {:?} (stages A2, B, C), up-sweep jumps at NPR {:?}, down-sweep at {:?}, \
         {} % frequency noise (make-demo-sweep).",
        KAPPA,
        UP,
        DOWN,
        100.0 * NOISE
    );
    println!("npr,frequency_hz,level_db,direction");
    let steps = 44;
    let grid: Vec<f64> = (0..=steps).map(|k| 2.30 + 0.05 * f64::from(k)).collect();
    for (rising, xs) in [(true, grid.clone()), (false, grid.iter().rev().copied().collect::<Vec<_>>())] {
        for x in xs {
            let f = model_hz(stage_at(x, rising), x) * (1.0 + NOISE * g());
            println!("{x:.2},{f:.1},,{}", if rising { "up" } else { "down" });
        }
    }
}
