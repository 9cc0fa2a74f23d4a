//! Hostile input at scale over a real socket (raw HTTP/2, so framing itself can be broken):
//! over-limit messages and a length prefix declaring 1 GiB are RESOURCE_EXHAUSTED; then at
//! least 100,000 randomly mutated requests across every RPC (bit flips, truncation, huge length
//! prefixes, wrong wire types, extreme numbers...) each get a proper gRPC status, never UNKNOWN
//! or INTERNAL (what a panic or an unmapped error becomes) and never a missing one; the server
//! still answers its health check; and this process (server and clients) stays under 256 MiB
//! resident at its peak (from /proc/self/status).
//!
//! One test in this file, so the memory figure is this test's alone. The count can be raised
//! with JETLOOP_MUTATED_REQUESTS (and the seed changed with JETLOOP_MUTATION_SEED).

use jetloop_server::config::{Limits, ServeOptions};
use jetloop_tests::hostile::{self, Outcome, Rng};
use jetloop_tests::TestServer;
use std::collections::BTreeMap;
use std::time::{Duration, Instant};

const MIB: u64 = 1 << 20;

fn env_or(name: &str, default: u64) -> u64 {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn oversize_and_100k_mutated_requests_get_proper_statuses_in_bounded_memory() {
    let limits = Limits { max_request_bytes: MIB as usize, ..Limits::default() };
    let server = TestServer::start_with_options(ServeOptions {
        limits,
        drain_notice: Duration::ZERO,
        ..ServeOptions::default()
    })
    .await;
    let mut c = hostile::connect(server.addr).await.expect("connect");
    let path = "/jetloop.v1.SpectrumService/ExtractTones";

    // Over the 1 MiB limit: a 2 MiB message.
    let big = hostile::frame(&vec![0u8; 2 * MIB as usize]);
    assert_eq!(hostile::send(&mut c, path, big).await, Outcome::Status(8), "2 MiB message");
    // A length prefix declaring 1 GiB with 16 bytes behind it, and one followed by 8 MiB that
    // the server must not keep.
    let mut liar = hostile::frame(&[0u8; 16]);
    liar[1..5].copy_from_slice(&(1u32 << 30).to_be_bytes());
    assert_eq!(hostile::send(&mut c, path, liar.clone()).await, Outcome::Status(8), "1 GiB prefix");
    liar.extend(vec![7u8; 8 * MIB as usize]);
    assert_eq!(hostile::send(&mut c, path, liar).await, Outcome::Status(8), "1 GiB prefix, 8 MiB sent");

    // The mutated requests: 4 connections, 16 calls in flight on each.
    let total = env_or("JETLOOP_MUTATED_REQUESTS", 100_000);
    let seed = env_or("JETLOOP_MUTATION_SEED", 0x0005_EED0_F4A7);
    let base_calls = std::sync::Arc::new(hostile::base_calls());
    let next = std::sync::Arc::new(std::sync::atomic::AtomicU64::new(0));
    let started = Instant::now();
    let mut workers = Vec::new();
    for _ in 0..4 {
        let client = hostile::connect(server.addr).await.expect("connect");
        for _ in 0..16 {
            let (mut client, base_calls, next) = (client.clone(), base_calls.clone(), next.clone());
            workers.push(tokio::spawn(async move {
                let mut tally: BTreeMap<(String, String), u64> = BTreeMap::new();
                let mut bad = Vec::new();
                loop {
                    let i = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                    if i >= total {
                        break;
                    }
                    let mut rng = Rng::new(seed ^ i.wrapping_mul(0x2545_F491_4F6C_DD1D));
                    let s = hostile::pick(&mut rng, &base_calls);
                    let body = hostile::mutate_body(&mut rng, s);
                    let out = hostile::send(&mut client, s.path, body).await;
                    let key = match &out {
                        Outcome::Status(code) => code.to_string(),
                        Outcome::NoStatus(_) => "none".to_string(),
                    };
                    *tally.entry((s.path.to_string(), key)).or_default() += 1;
                    if matches!(out, Outcome::Status(2) | Outcome::Status(13) | Outcome::NoStatus(_))
                        && bad.len() < 5
                    {
                        bad.push(format!("{} iteration {i}: {out:?}", s.path));
                    }
                }
                (tally, bad)
            }));
        }
    }
    let mut tally: BTreeMap<(String, String), u64> = BTreeMap::new();
    let mut bad = Vec::new();
    for w in workers {
        let (t, b) = w.await.expect("worker");
        for (k, v) in t {
            *tally.entry(k).or_default() += v;
        }
        bad.extend(b);
    }
    let elapsed = started.elapsed();
    let mut by_code: BTreeMap<String, u64> = BTreeMap::new();
    for ((_, code), n) in &tally {
        *by_code.entry(code.clone()).or_default() += n;
    }
    eprintln!(
        "{total} mutated requests in {:.1} s ({:.0}/s); answers by gRPC code: {by_code:?}",
        elapsed.as_secs_f64(),
        total as f64 / elapsed.as_secs_f64()
    );
    assert_eq!(by_code.values().sum::<u64>(), total);
    assert!(bad.is_empty(), "improper answers (replay with JETLOOP_MUTATION_SEED={seed}): {bad:#?}");
    // Every method was reached, and mutations were not all refused at the door: some were
    // still valid requests and answered OK.
    for s in base_calls.iter() {
        assert!(tally.keys().any(|(p, _)| p == s.path), "{} never called", s.path);
    }
    assert!(by_code.get("0").copied().unwrap_or(0) > total / 100, "{by_code:?}");
    assert!(by_code.get("3").copied().unwrap_or(0) > total / 10, "{by_code:?}");

    // Still healthy, and memory stayed bounded.
    let mut health = tonic_health::pb::health_client::HealthClient::new(server.channel().await);
    let h = health
        .check(tonic_health::pb::HealthCheckRequest { service: String::new() })
        .await
        .expect("health after the storm")
        .into_inner();
    assert_eq!(h.status, tonic_health::pb::health_check_response::ServingStatus::Serving as i32);
    let (peak, now) = hostile::memory().expect("/proc/self/status");
    eprintln!("resident memory: peak {} MiB, now {} MiB", peak / MIB, now / MIB);
    assert!(peak < 256 * MIB, "peak resident memory {} MiB", peak / MIB);
    server.stop().await;
}
