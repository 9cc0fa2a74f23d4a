//! A ramp block stream (AnalyseRampStream) analysed frame by frame as its samples arrive.

use super::ramp::{ramp_query, RampQuery};
use super::stream::{bad_frames, missing_request, not_first, BlockAnalysis};
use super::*;
use crate::dsp::ramp::RampFrame;

/// A ramp block stream being analysed: the validated question, the part of the recording
/// still needed, and the frames analysed so far (a few numbers each). Each frame is analysed
/// as soon as its last sample arrives and the blocks wholly before the next frame are let go,
/// so a ramp of any length holds about one frame per channel plus the block being read.
#[derive(Debug)]
pub struct RampStream {
    query: RampQuery,
    frames: Vec<RampFrame>,
    next: usize,
    blocks: usize,
    released_bytes: usize,
}

impl RampStream {
    fn push(&mut self, frames: bytes::Bytes) -> Result<(), ApiError> {
        self.blocks += 1;
        self.query.samples.recording.push_block(frames).map_err(|e| bad_frames(self.blocks, e))?;
        let frame = self.query.frame_len();
        while self.next + frame <= self.query.samples.recording.len() {
            self.frames.push(self.query.frame_at(self.next)?);
            self.next += frame;
        }
        self.released_bytes += self.query.samples.recording.release_before(self.next);
        Ok(())
    }
}

impl BlockAnalysis for RampStream {
    type Block = pb::RampBlock;
    type Answer = pb::AnalyseRampResponse;
    const WHAT: &'static str = "ramp analysis";

    fn opening_samples(first: &pb::RampBlock) -> Option<&pb::Samples> {
        first.request.as_ref().and_then(|r| r.samples.as_ref())
    }

    fn frame_bytes(block: &pb::RampBlock) -> usize {
        block.frames.len()
    }

    /// As for AnalyseRamp, with field paths under `request`.
    fn start(first: pb::RampBlock) -> Result<Self, ApiError> {
        let pb::RampBlock { request, frames } = first;
        let Some(request) = request else {
            return missing_request();
        };
        let mut query = ramp_query(request, true).map_err(|e| e.within("request"))?;
        query.samples.field = "frames";
        let mut stream = Self { query, frames: Vec::new(), next: 0, blocks: 0, released_bytes: 0 };
        stream.push(frames)?;
        Ok(stream)
    }

    fn next(&mut self, block: pb::RampBlock) -> Result<(), ApiError> {
        if block.request.is_some() {
            return Err(not_first("request"));
        }
        self.push(block.frames)
    }

    fn finish(self) -> Result<pb::AnalyseRampResponse, ApiError> {
        if self.frames.is_empty() {
            return Err(ApiError::Precondition(crate::api::error::PreconditionViolation::new(
                RECORDING_TOO_SHORT,
                "frames",
                format!(
                    "the stream ended after {} samples per channel, fewer than one frame of {}",
                    self.query.samples.recording.len(),
                    self.query.frame_len()
                ),
            )));
        }
        let q = self.query.restarted();
        Ok(q.answer(&self.frames))
    }

    fn released_bytes(&self) -> usize {
        self.released_bytes
    }

    fn messages(&self) -> usize {
        self.blocks
    }
}
