//! Long fuzzing runs on the stable toolchain: mutated requests through the handlers of every
//! RPC in process (decoding, validation and the computation behind it), and random recordings
//! through the sample decoders against a plain reference decode. Stops at the first failure
//! and prints how to replay it.
//!
//! Usage: `cargo run --release -p jetloop-bench --bin fuzz-requests -- [SECONDS] [SEED]`
//! (default 60 s, a seed from the clock). CI runs a short fixed-seed slice of the same code
//! (`tests/tests/fuzz_short.rs`).
#![forbid(unsafe_code)]

use jetloop_tests::hostile::{base_calls, in_process, Rng};
use std::collections::BTreeMap;
use std::time::{Duration, Instant};

#[tokio::main]
async fn main() {
    let secs: f64 = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(60.0);
    let seed: u64 = std::env::args().nth(2).and_then(|s| s.parse().ok()).unwrap_or_else(|| {
        std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(1, |d| d.as_nanos() as u64)
    });
    let base_calls = base_calls();
    let h = in_process::Handlers::default();
    let end = Instant::now() + Duration::from_secs_f64(secs);
    let (mut calls, mut recordings) = (0u64, 0u64);
    let mut codes: BTreeMap<String, u64> = BTreeMap::new();
    let started = Instant::now();
    while Instant::now() < end {
        let i = calls + recordings;
        let mut rng = Rng::new(seed ^ i.wrapping_mul(0x2545_F491_4F6C_DD1D));
        if i % 4 == 3 {
            recordings += 1;
            if let Err(e) = in_process::samples_once(&mut rng) {
                eprintln!("FAIL sample decoders, iteration {i} (seed {seed}): {e}");
                std::process::exit(1);
            }
            continue;
        }
        calls += 1;
        let (path, r) = in_process::one(&h, &base_calls, &mut rng).await;
        match r {
            Ok(code) => {
                *codes.entry(code.map_or("not decoded".into(), |c| format!("{c:?}"))).or_default() += 1
            }
            Err(e) => {
                eprintln!("FAIL {path}, iteration {i} (seed {seed}): {e}");
                std::process::exit(1);
            }
        }
    }
    println!(
        "seed {seed}: {calls} mutated calls and {recordings} random recordings in {:.1} s, no failure; answers: {codes:?}",
        started.elapsed().as_secs_f64()
    );
}
