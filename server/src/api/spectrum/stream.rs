//! Block streams analysed segment by segment as their frames arrive: [`BlockAnalysis`], what
//! the service's feed loop needs of one, and [`ToneStream`] (ExtractTonesStream).

use super::*;

/// A block stream being analysed as it arrives (ExtractTonesStream, CrossSpectraStream): the
/// first message validated into a question, later messages taken in one by one, and the
/// frames already taken in let go, so a stream of any length holds about one Welch segment per
/// channel plus the block being read.
pub trait BlockAnalysis: Sized + Send + 'static {
    /// One message of the stream.
    type Block: Send + 'static;
    /// The answer.
    type Answer: Send + 'static;
    /// What the analysis is, for errors about its worker ("spectral analysis").
    const WHAT: &'static str;

    /// The error for a stream that ended before its first message: INVALID_ARGUMENT naming
    /// `request`, which the first message carries.
    fn empty() -> ApiError {
        ApiError::Invalid(vec![FieldViolation {
            field: "request".into(),
            description: "request is required: the block stream ended before its first message, which \
                          carries the question"
                .into(),
        }])
    }

    /// The samples of the first message's question (format and first frames), if any.
    fn opening_samples(first: &Self::Block) -> Option<&pb::Samples>;

    /// Bytes of frames a message carries after its question.
    fn frame_bytes(block: &Self::Block) -> usize;

    /// Validates the first message and takes the frames it carries.
    ///
    /// # Errors
    /// As the unary call, with field paths under `request`; a missing `request`; values or
    /// planar channels.
    fn start(first: Self::Block) -> Result<Self, ApiError>;

    /// Takes a later message.
    ///
    /// # Errors
    /// A `request` or `expected_frames` after the first message; frames that are not whole.
    fn next(&mut self, block: Self::Block) -> Result<(), ApiError>;

    /// Finishes the estimates and builds the answer.
    ///
    /// # Errors
    /// A stream too short for one segment (FAILED_PRECONDITION); a non-finite sample.
    fn finish(self) -> Result<Self::Answer, ApiError>;

    /// Sample bytes let go so far (blocks wholly taken in by the analysis).
    fn released_bytes(&self) -> usize;

    /// Messages taken so far.
    fn messages(&self) -> usize;
}

/// The error for `field` set in a message after the first.
pub(super) fn not_first(field: &str) -> ApiError {
    ApiError::Invalid(vec![FieldViolation {
        field: field.into(),
        description: format!("{field} belongs in the first message of the stream only"),
    }])
}

/// The error for the frames of message `block` (counted from 1) that do not decode.
pub(super) fn bad_frames(block: usize, e: DecodeError) -> ApiError {
    ApiError::Invalid(vec![FieldViolation {
        field: "frames".into(),
        description: format!("frames of message {block}: {e}"),
    }])
}

/// The error for a missing question in the first message.
pub(super) fn missing_request<T>() -> Result<T, ApiError> {
    let mut check = Check::new();
    check.missing("request", "the first message of a block stream carries the question");
    check.finish(None)
}

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

impl ToneStream {
    fn push(&mut self, frames: bytes::Bytes) -> Result<(), ApiError> {
        self.blocks += 1;
        let rec = &mut self.query.samples.recording;
        rec.push_block(frames).map_err(|e| bad_frames(self.blocks, e))?;
        for (c, w) in self.welch.iter_mut().enumerate() {
            w.advance(&rec.channel(c));
        }
        // Every channel has the same segments: the frames before the next one are taken in.
        if let Some(next) = self.welch.first().map(WelchAccumulator::next_start) {
            self.released_bytes += rec.release_before(next);
        }
        Ok(())
    }

    /// Sample bytes held now.
    pub fn held_bytes(&self) -> usize {
        self.query.samples.recording.held_bytes()
    }
}

impl BlockAnalysis for ToneStream {
    type Block = pb::SampleBlock;
    type Answer = pb::ExtractTonesResponse;
    const WHAT: &'static str = "spectral analysis";

    fn opening_samples(first: &pb::SampleBlock) -> Option<&pb::Samples> {
        first.request.as_ref().and_then(|r| r.samples.as_ref())
    }

    fn frame_bytes(block: &pb::SampleBlock) -> usize {
        block.frames.len()
    }

    /// As for ExtractTones, with field paths under `request`.
    fn start(first: pb::SampleBlock) -> Result<Self, ApiError> {
        let pb::SampleBlock { request, frames, expected_frames } = first;
        let Some(request) = request else {
            return missing_request();
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

    fn next(&mut self, block: pb::SampleBlock) -> Result<(), ApiError> {
        if block.request.is_some() {
            return Err(not_first("request"));
        }
        if block.expected_frames.is_some() {
            return Err(not_first("expected_frames"));
        }
        self.push(block.frames)
    }

    fn finish(self) -> Result<pb::ExtractTonesResponse, ApiError> {
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

    fn released_bytes(&self) -> usize {
        self.released_bytes
    }

    fn messages(&self) -> usize {
        self.blocks
    }
}
