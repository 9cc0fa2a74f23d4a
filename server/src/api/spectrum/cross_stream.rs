//! A cross-channel block stream (CrossSpectraStream) analysed segment by segment as its
//! frames arrive.

use super::cross::cross_query;
use super::stream::{bad_frames, missing_request, not_first, BlockAnalysis};
use super::*;
use crate::dsp::cross::CrossAccumulator;

/// A cross-channel block stream being analysed: the validated question, the part of the
/// recording still needed, the cross-spectra of every channel against the reference, and the
/// reference channel's own Welch estimate (its tones), each taking a segment as soon as its
/// last frame arrives. Blocks wholly before the next segment are let go once taken in, so a
/// stream of any length holds about one segment per channel plus the block being read.
#[derive(Debug)]
pub struct CrossStream {
    query: CrossQuery,
    cross: CrossAccumulator,
    reference: WelchAccumulator,
    blocks: usize,
    released_bytes: usize,
}

impl CrossStream {
    fn push(&mut self, frames: bytes::Bytes) -> Result<(), ApiError> {
        self.blocks += 1;
        let rec = &mut self.query.samples.recording;
        rec.push_block(frames).map_err(|e| bad_frames(self.blocks, e))?;
        let views: Vec<ChannelView<'_>> = (0..rec.channel_count()).map(|c| rec.channel(c)).collect();
        self.cross.advance(&views);
        self.reference.advance(&rec.channel(self.query.reference));
        // Both estimates have the same segments: the frames before the next one are taken in.
        let next = self.cross.next_start().min(self.reference.next_start());
        self.released_bytes += rec.release_before(next);
        Ok(())
    }

    /// Sample bytes held now.
    pub fn held_bytes(&self) -> usize {
        self.query.samples.recording.held_bytes()
    }
}

impl BlockAnalysis for CrossStream {
    type Block = pb::CrossSpectraBlock;
    type Answer = pb::CrossSpectraResponse;
    const WHAT: &'static str = "cross-channel analysis";

    fn opening_samples(first: &pb::CrossSpectraBlock) -> Option<&pb::Samples> {
        first.request.as_ref().and_then(|r| r.samples.as_ref())
    }

    fn frame_bytes(block: &pb::CrossSpectraBlock) -> usize {
        block.frames.len()
    }

    /// As for CrossSpectra, with field paths under `request`.
    fn start(first: pb::CrossSpectraBlock) -> Result<Self, ApiError> {
        let pb::CrossSpectraBlock { request, frames, expected_frames } = first;
        let Some(request) = request else {
            return missing_request();
        };
        let mut query = cross_query(request, Some(expected_frames)).map_err(|e| e.within("request"))?;
        query.samples.field = "frames";
        let cross = query.accumulator()?;
        let reference =
            WelchAccumulator::new(query.samples.fs, query.welch).map_err(|e| welch_error(e, "frames"))?;
        let mut stream = Self { query, cross, reference, blocks: 0, released_bytes: 0 };
        stream.push(frames)?;
        Ok(stream)
    }

    fn next(&mut self, block: pb::CrossSpectraBlock) -> Result<(), ApiError> {
        if block.request.is_some() {
            return Err(not_first("request"));
        }
        if block.expected_frames.is_some() {
            return Err(not_first("expected_frames"));
        }
        self.push(block.frames)
    }

    fn finish(mut self) -> Result<pb::CrossSpectraResponse, ApiError> {
        // The answer's compute time is what the stream's end still cost, as for ToneStream.
        self.query.started = std::time::Instant::now();
        let q = &self.query;
        let rec = &q.samples.recording;
        let views: Vec<ChannelView<'_>> = (0..rec.channel_count()).map(|c| rec.channel(c)).collect();
        let cs = self.cross.finish(&views).map_err(|e| q.cross_error(e))?;
        let psd = q.samples.finish_psd(q.reference, self.reference)?;
        Ok(q.answer(&cs, &psd))
    }

    fn released_bytes(&self) -> usize {
        self.released_bytes
    }

    fn messages(&self) -> usize {
        self.blocks
    }
}
