//! End to end over a real socket: the server-wide budget of sample bytes against stalled block
//! streams (its own test binary, so that the process's resident memory measures this test
//! alone).

use jetloop_proto::pb;
use jetloop_tests::samples::{opening_block, pascals_per_unit, raw};
use jetloop_tests::{tones_request, TestServer};
use std::time::Duration;
use tonic::Code;

/// The first message of a one-channel f32 block stream carrying `bytes` bytes of frames.
fn stream_opening(bytes: usize) -> pb::SampleBlock {
    let samples = raw(vec![0u8; bytes], pb::SampleFormat::F32Le, 51_200.0, 1, Some(pascals_per_unit(1.0)));
    opening_block(tones_request(samples))
}

/// Resident memory of this process in bytes (Linux /proc/self/status).
fn rss_bytes() -> u64 {
    jetloop_tests::hostile::memory().map_or(0, |(_peak, now)| now)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn stalled_streams_stay_within_the_sample_budget_and_release_it_at_their_deadline() {
    // Reproduces: each stream could hold up to 2^25 samples until its timeout, with no
    // server-wide bound. Now: a 16 MiB budget; streams that open with 6 MiB each and stall take
    // 6 and 12 MiB, the third is refused with RESOURCE_EXHAUSTED naming the budget, and at
    // their 1 s deadline the stalled streams let go of everything.
    use jetloop_proto::pb::{
        info_service_client::InfoServiceClient, spectrum_service_client::SpectrumServiceClient,
    };
    const MIB: usize = 1 << 20;
    let budget = 16 * MIB;
    let server = TestServer::start_with(jetloop_server::config::Limits {
        sample_budget_bytes: budget,
        request_timeout: Duration::from_secs(1),
        ..Default::default()
    })
    .await;
    let ch = server.channel().await;
    let mut info = InfoServiceClient::new(ch.clone());
    let limits = info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().limits.unwrap();
    assert_eq!(limits.sample_budget_bytes, budget as u64);
    let rss_before = rss_bytes();
    let held_at = |want: u64| {
        let mut info = info.clone();
        async move {
            for _ in 0..100_000 {
                let held =
                    info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().sample_bytes_held;
                if held == want {
                    return held;
                }
                assert!(held <= budget as u64, "held {held} past the budget");
                tokio::task::yield_now().await;
            }
            panic!("the server never held {want} bytes");
        }
    };
    let mut open = Vec::new();
    for k in 1..=2u64 {
        let (tx, rx) = tokio::sync::mpsc::channel::<pb::SampleBlock>(2);
        tx.send(stream_opening(6 * MIB)).await.unwrap();
        let mut c = SpectrumServiceClient::new(ch.clone()).max_decoding_message_size(64 << 20);
        let call = tokio::spawn(async move {
            c.extract_tones_stream(tokio_stream::wrappers::ReceiverStream::new(rx)).await
        });
        held_at(k * 6 * MIB as u64).await;
        open.push((tx, call));
    }
    // The third stream would take the total to 18 MiB.
    let mut c = SpectrumServiceClient::new(ch.clone()).max_decoding_message_size(64 << 20);
    let e = c.extract_tones_stream(tokio_stream::iter(vec![stream_opening(6 * MIB)])).await.unwrap_err();
    assert_eq!(e.code(), Code::ResourceExhausted, "{e:?}");
    assert!(e.message().contains("sample budget of 16777216 bytes"), "{}", e.message());
    // The stalled streams are answered at their deadline and let go of their samples.
    for (tx, call) in open {
        let e = call.await.unwrap().unwrap_err();
        assert_eq!(e.code(), Code::DeadlineExceeded, "{e:?}");
        drop(tx);
    }
    held_at(0).await;
    // Memory stayed near the budget: the stated margin (64 MiB) covers the client's own copies
    // of what it sent and the allocator.
    let grew = rss_bytes().saturating_sub(rss_before);
    assert!(grew < (budget + 64 * MIB) as u64, "RSS grew by {grew} bytes");
    server.stop().await;
}
