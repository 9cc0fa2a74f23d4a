//! The short CI slice of the fuzz harness (`fuzz-requests` runs it for as long as asked):
//! 20,000 mutated calls through the handlers of every RPC in process never answer UNKNOWN or
//! INTERNAL nor panic, and 10,000 random recordings decode exactly as a plain reference decode
//! of the same bytes (or are refused exactly when they are not whole frames). Fixed base_calls, so
//! a failure replays.

use jetloop_tests::hostile::{base_calls, in_process, Rng};

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn mutated_calls_through_every_handler_get_proper_answers() {
    let base_calls = base_calls();
    let h = in_process::Handlers::default();
    let mut reached = std::collections::BTreeSet::new();
    for i in 0..20_000u64 {
        let mut rng = Rng::new(0xF0_22 ^ i.wrapping_mul(0x2545_F491_4F6C_DD1D));
        let (path, r) = in_process::one(&h, &base_calls, &mut rng).await;
        if let Err(e) = r {
            panic!("iteration {i}: {e}");
        }
        reached.insert(path);
    }
    let ours = base_calls.iter().filter(|s| s.path.starts_with("/jetloop.v1.")).count();
    assert_eq!(reached.len(), ours, "every jetloop RPC reached");
}

#[test]
fn random_recordings_decode_as_the_reference_decode() {
    for i in 0..10_000u64 {
        let mut rng = Rng::new(0x5A_3D ^ i.wrapping_mul(0x9E37_79B9_7F4A_7C15));
        if let Err(e) = in_process::samples_once(&mut rng) {
            panic!("iteration {i}: {e}");
        }
    }
}
