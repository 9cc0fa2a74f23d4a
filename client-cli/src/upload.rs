//! Getting a recording to the server: one request when it fits the server's limit on samples
//! per request (asked with ServerInfo), else the block streams `ExtractTonesStream` and
//! `CrossSpectraStream`, read from disk a block at a time so the client holds a few blocks,
//! not the recording. Commands without a streaming RPC refuse a recording over the limit
//! before anything is sent.

use crate::args::input::Recording;
use crate::connect::Conn;
use crate::failure::Failure;
use crate::readers::disk::DiskRecording;
use jetloop_proto::pb;
use jetloop_proto::pb::info_service_client::InfoServiceClient;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::sync::Arc;
use std::sync::Mutex;

/// Samples (all channels) one unary request may carry when the server does not say
/// (ServerLimits.max_request_samples of the servers this client was built with: 2^25).
pub(crate) const DEFAULT_MAX_REQUEST_SAMPLES: u64 = 1 << 25;

/// Smallest and largest `--block-bytes`, in bytes: 1 KiB to 32 MiB (half the server's
/// default 64 MiB request limit, so a block and its framing always fit).
pub(crate) const BLOCK_BYTES_RANGE: (u64, u64) = (1 << 10, 32 << 20);

/// Parses `--block-bytes`, refusing values outside [`BLOCK_BYTES_RANGE`] with the range named.
///
/// # Errors
/// Text for clap's message when `s` is not a whole number in range.
pub(crate) fn parse_block_bytes(s: &str) -> Result<usize, String> {
    let (lo, hi) = BLOCK_BYTES_RANGE;
    let n: u64 = s.parse().map_err(|_| format!("expected a whole number of bytes from {lo} to {hi}"))?;
    if !(lo..=hi).contains(&n) {
        return Err(format!(
            "{n} bytes is outside the allowed range {lo} to {hi} bytes (1 KiB to 32 MiB); leave the flag out to let \
             the client choose one request or blocks of 1 MiB"
        ));
    }
    usize::try_from(n).map_err(|_| format!("{n} bytes does not fit this machine"))
}

/// The server's limit on samples per unary request (ServerInfo's
/// `limits.max_request_samples`), or [`DEFAULT_MAX_REQUEST_SAMPLES`] when the call fails or
/// the server does not say.
pub(crate) async fn max_request_samples(ch: Conn) -> u64 {
    InfoServiceClient::new(ch)
        .server_info(pb::ServerInfoRequest {})
        .await
        .ok()
        .and_then(|r| r.into_inner().limits)
        .map(|l| l.max_request_samples)
        .filter(|n| *n > 0)
        .unwrap_or(DEFAULT_MAX_REQUEST_SAMPLES)
}

/// Refuses a recording over `limit` samples for `rpc`, which has no streaming form, before
/// anything is uploaded.
///
/// # Errors
/// [`Failure::Usage`] naming the file, its sample count and the limit.
pub(crate) fn fits_one_request(
    rec: &Recording,
    file: &std::path::Path,
    limit: u64,
    rpc: &str,
) -> Result<(), Failure> {
    let n = rec.sample_count();
    if n <= limit {
        return Ok(());
    }
    let channels = u64::from(rec.samples.channel_count.max(1));
    Err(Failure::Usage(format!(
        "{}: {n} samples ({} frames x {channels} channels) exceed the server's limit of {limit} samples per request \
         (ServerLimits.max_request_samples) for {rpc}, which has no block stream; nothing was sent. `jetloop tones` \
         streams recordings of any length; cut the recording for this analysis",
        file.display(),
        n / channels
    )))
}

/// Raw interleaved samples cut into blocks of whole frames of about `block` bytes; `None` when
/// the samples are values or planar.
pub(crate) fn blocks_of(samples: &pb::Samples, block: usize) -> Option<Vec<bytes::Bytes>> {
    let Some(pb::samples::Data::Raw(raw)) = &samples.data else {
        return None;
    };
    if samples.layout == pb::ChannelLayout::Planar as i32 {
        return None;
    }
    let width = crate::readers::disk::wire_width(pb::SampleFormat::try_from(raw.format).ok()?);
    if width == 0 {
        return None;
    }
    let frame = width * samples.channel_count.max(1) as usize;
    let step = (block / frame).max(1) * frame;
    Some(
        (0..raw.data.len())
            .step_by(step)
            .map(|a| raw.data.slice(a..(a + step).min(raw.data.len())))
            .collect(),
    )
}

/// Blocks to send after the question: already in memory, or read from disk as they go.
pub(crate) enum Blocks {
    /// Cut from samples in memory.
    Memory(Vec<bytes::Bytes>),
    /// Read from the file, `block` bytes of wire frames at a time.
    Disk(DiskRecording, usize),
}

/// The messages of a block stream as they go out.
pub(crate) type BlockStream<M> = std::pin::Pin<Box<dyn tokio_stream::Stream<Item = M> + Send + 'static>>;

/// Empties the raw sample bytes of a question sent as the first message of a block stream
/// (the frames follow in blocks).
fn without_frames(samples: Option<&mut pb::Samples>) {
    if let Some(pb::samples::Data::Raw(raw)) = samples.and_then(|s| s.data.as_mut()) {
        raw.data = bytes::Bytes::new();
    }
}

/// Sends ExtractTones' question (its sample bytes emptied) and then the blocks through
/// `ExtractTonesStream`, as [`send_in_blocks`].
///
/// # Errors
/// As [`send_in_blocks`].
pub(crate) async fn extract_in_blocks(
    client: &mut SpectrumServiceClient<Conn>,
    mut req: pb::ExtractTonesRequest,
    blocks: Blocks,
) -> Result<(pb::ExtractTonesResponse, usize), Failure> {
    without_frames(req.samples.as_mut());
    send_in_blocks(
        blocks,
        |expected_frames| pb::SampleBlock { request: Some(req), expected_frames, ..Default::default() },
        |frames| pb::SampleBlock { frames, ..Default::default() },
        |s| client.extract_tones_stream(s),
    )
    .await
}

/// Sends CrossSpectra's question (its sample bytes emptied) and then the blocks through
/// `CrossSpectraStream`, as [`send_in_blocks`].
///
/// # Errors
/// As [`send_in_blocks`].
pub(crate) async fn cross_in_blocks(
    client: &mut SpectrumServiceClient<Conn>,
    mut req: pb::CrossSpectraRequest,
    blocks: Blocks,
) -> Result<(pb::CrossSpectraResponse, usize), Failure> {
    without_frames(req.samples.as_mut());
    send_in_blocks(
        blocks,
        |expected_frames| pb::CrossSpectraBlock { request: Some(req), expected_frames, ..Default::default() },
        |frames| pb::CrossSpectraBlock { frames, ..Default::default() },
        |s| client.cross_spectra_stream(s),
    )
    .await
}

/// Sends AnalyseRamp's question (its sample bytes emptied) and then the blocks through
/// `AnalyseRampStream`, as [`send_in_blocks`].
///
/// # Errors
/// As [`send_in_blocks`].
pub(crate) async fn ramp_in_blocks(
    client: &mut SpectrumServiceClient<Conn>,
    mut req: pb::AnalyseRampRequest,
    blocks: Blocks,
) -> Result<(pb::AnalyseRampResponse, usize), Failure> {
    without_frames(req.samples.as_mut());
    send_in_blocks(
        blocks,
        |_| pb::RampBlock { request: Some(req), ..Default::default() },
        |frames| pb::RampBlock { frames, ..Default::default() },
        |s| client.analyse_ramp_stream(s),
    )
    .await
}

/// Sends the first message (`first`, given the frames per channel when known) and then the
/// blocks (each wrapped by `later`) through `call`, with a progress bar of bytes sent on a
/// terminal; answers the reply and the blocks sent. From disk, a reader thread keeps at most
/// four blocks ahead of the upload; a read error stops the upload and is returned instead of
/// the answer.
///
/// # Errors
/// [`Failure::Server`] for the server's answer, [`Failure::Usage`] for a read error.
pub(crate) async fn send_in_blocks<M, R, Fut>(
    blocks: Blocks,
    first: impl FnOnce(Option<u64>) -> M,
    later: fn(bytes::Bytes) -> M,
    call: impl FnOnce(BlockStream<M>) -> Fut,
) -> Result<(R, usize), Failure>
where
    M: Send + 'static,
    Fut: std::future::Future<Output = Result<tonic::Response<R>, tonic::Status>>,
{
    use tokio_stream::StreamExt;
    let (tx, rx) = tokio::sync::mpsc::channel::<bytes::Bytes>(4);
    let failed: Arc<Mutex<Option<Failure>>> = Arc::default();
    let (total, expected_frames) = match blocks {
        Blocks::Memory(blocks) => {
            let total: u64 = blocks.iter().map(|b| b.len() as u64).sum();
            tokio::spawn(async move {
                for b in blocks {
                    if tx.send(b).await.is_err() {
                        return;
                    }
                }
            });
            (total, None)
        }
        Blocks::Disk(rec, block) => {
            let frames = (block / rec.wire_frame_bytes().max(1)).max(1) as u64;
            let total = rec.frames * rec.wire_frame_bytes() as u64;
            let expected = rec.frames;
            let failed = failed.clone();
            tokio::task::spawn_blocking(move || {
                let mut r = match rec.open() {
                    Ok(r) => r,
                    Err(e) => return set(&failed, e),
                };
                loop {
                    match r.next_block(frames) {
                        Ok(Some(b)) => {
                            if tx.blocking_send(b.into()).is_err() {
                                return;
                            }
                        }
                        Ok(None) => return,
                        Err(e) => return set(&failed, e),
                    }
                }
            });
            (total, Some(expected))
        }
    };
    let bar = indicatif::ProgressBar::new(total);
    bar.set_style(
        indicatif::ProgressStyle::with_template("sending {bar:30} {bytes}/{total_bytes} ({bytes_per_sec})")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let shown = bar.clone();
    let first = first(expected_frames);
    let sent = Arc::new(std::sync::atomic::AtomicUsize::new(0));
    let counted = sent.clone();
    let rest = tokio_stream::wrappers::ReceiverStream::new(rx).map(move |frames| {
        counted.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        shown.inc(frames.len() as u64);
        if shown.position() >= total {
            shown.set_style(
                indicatif::ProgressStyle::with_template("{spinner} last block sent; finishing the analysis")
                    .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner()),
            );
            shown.enable_steady_tick(std::time::Duration::from_millis(120));
        }
        later(frames)
    });
    let r = call(Box::pin(tokio_stream::once(first).chain(rest))).await;
    bar.finish_and_clear();
    if let Some(e) = failed.lock().ok().and_then(|mut f| f.take()) {
        return Err(e);
    }
    Ok((r?.into_inner(), sent.load(std::sync::atomic::Ordering::Relaxed)))
}

/// Keeps the first read error for the caller.
fn set(slot: &Mutex<Option<Failure>>, e: Failure) {
    if let Ok(mut s) = slot.lock() {
        s.get_or_insert(e);
    }
}

#[cfg(test)]
mod tests {
    //! Blocks and limits, without a server.

    use super::*;

    #[test]
    fn interleaved_raw_samples_are_cut_into_whole_frames() {
        let s = pb::Samples {
            channel_count: 4,
            data: Some(pb::samples::Data::Raw(pb::RawSamples {
                data: vec![0u8; 100].into(),
                format: pb::SampleFormat::I16Le as i32,
            })),
            ..Default::default()
        };
        // Frames of 4 x 2 bytes: a 30-byte block holds 3 whole frames (24 bytes).
        let b = blocks_of(&s, 30).expect("blocks");
        assert_eq!(b.iter().map(bytes::Bytes::len).collect::<Vec<_>>(), vec![24, 24, 24, 24, 4]);
        let planar = pb::Samples { layout: pb::ChannelLayout::Planar as i32, ..s };
        assert!(blocks_of(&planar, 30).is_none(), "planar samples go in one request");
    }

    #[test]
    fn block_sizes_outside_the_range_are_refused_naming_it() {
        assert_eq!(parse_block_bytes("65536"), Ok(65_536));
        for bad in ["0", "1023", "33554433", "-5", "lots"] {
            let e = parse_block_bytes(bad).unwrap_err();
            assert!(e.contains("1024 to 33554432"), "{bad}: {e}");
        }
    }
}
