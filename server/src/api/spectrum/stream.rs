//! A block stream analysed segment by segment as its frames arrive.

use super::*;

/// A block stream being analysed: the validated question, the part of the recording still
/// needed, and one Welch accumulator per channel that takes each segment as soon as its last
/// frame arrives. Blocks wholly before the next segment are let go once taken in, so a stream
/// of any length holds about one segment per channel plus the block being read: no limit on
/// the stream's length, only on one message's size.
#[derive(Debug)]
pub struct ToneStream {
    query: ToneQuery,
    welch: Vec<WelchAccumulator>,
    blocks: usize,
    released_bytes: usize,
}

fn not_first(field: &str) -> ApiError {
    ApiError::Invalid(vec![FieldViolation {
        field: field.into(),
        description: format!("{field} belongs in the first message of the stream only"),
    }])
}

impl ToneStream {
    /// The error for a block stream that ended before its first message: INVALID_ARGUMENT
    /// naming `request`, which the first message carries.
    pub fn empty() -> ApiError {
        ApiError::Invalid(vec![FieldViolation {
            field: "request".into(),
            description: "request is required: the block stream ended before its first message, which \
                          carries the question"
                .into(),
        }])
    }

    /// Validates the first message and takes the frames it carries.
    ///
    /// # Errors
    /// As for ExtractTones, with field paths under `request`; a missing `request`; values or
    /// planar channels.
    pub fn start(first: pb::SampleBlock) -> Result<Self, ApiError> {
        let pb::SampleBlock { request, frames, expected_frames } = first;
        let Some(request) = request else {
            let mut check = Check::new();
            check.missing("request", "the first message of a block stream carries the question");
            return check.finish(None);
        };
        let mut query = tone_query(request, Some(expected_frames)).map_err(|e| e.within("request"))?;
        query.samples.field = "frames";
        let (fs, config) = (query.samples.fs, query.welch);
        let welch = (0..query.samples.recording.channel_count())
            .map(|_| WelchAccumulator::new(fs, config))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| welch_error(e, "frames"))?;
        let mut stream = Self { query, welch, blocks: 0, released_bytes: 0 };
        stream.push(frames)?;
        Ok(stream)
    }

    /// Takes a later message.
    ///
    /// # Errors
    /// A `request` or `expected_frames` after the first message; frames that are not whole.
    pub fn next(&mut self, block: pb::SampleBlock) -> Result<(), ApiError> {
        if block.request.is_some() {
            return Err(not_first("request"));
        }
        if block.expected_frames.is_some() {
            return Err(not_first("expected_frames"));
        }
        self.push(block.frames)
    }

    fn push(&mut self, frames: bytes::Bytes) -> Result<(), ApiError> {
        self.blocks += 1;
        let rec = &mut self.query.samples.recording;
        rec.push_block(frames).map_err(|e| {
            ApiError::Invalid(vec![FieldViolation {
                field: "frames".into(),
                description: format!("frames of message {}: {e}", self.blocks),
            }])
        })?;
        for (c, w) in self.welch.iter_mut().enumerate() {
            w.advance(&rec.channel(c));
        }
        // Every channel has the same segments: the frames before the next one are taken in.
        if let Some(next) = self.welch.first().map(WelchAccumulator::next_start) {
            self.released_bytes += rec.release_before(next);
        }
        Ok(())
    }

    /// Sample bytes let go so far (blocks wholly taken in by the analysis).
    pub fn released_bytes(&self) -> usize {
        self.released_bytes
    }

    /// Sample bytes held now.
    pub fn held_bytes(&self) -> usize {
        self.query.samples.recording.held_bytes()
    }

    /// Messages taken so far.
    pub fn messages(&self) -> usize {
        self.blocks
    }

    /// Finishes every channel's estimate and builds the answer.
    ///
    /// # Errors
    /// A stream too short for one segment (FAILED_PRECONDITION); a non-finite sample.
    pub fn finish(self) -> Result<pb::ExtractTonesResponse, ApiError> {
        let t = std::time::Instant::now();
        let q = &self.query;
        let psds = self
            .welch
            .into_iter()
            .enumerate()
            .map(|(c, w)| q.samples.finish_psd(c, w))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(tones_message(q, &psds, t))
    }
}
