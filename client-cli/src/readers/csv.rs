//! Recordings in delimited text and the delimited-text rows the other CSV readers share: both
//! read by [`crate::csv_input`] (one delimiter and one decimal mark per file, quoted cells,
//! header names with units, a time column).

use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::Path;

/// The rows of a delimited text file: (line index from 0, trimmed cells), skipping blank
/// lines and `#` comments; one delimiter (comma, semicolon or tab) for the whole file, quoted
/// cells unquoted ([`crate::csv_input::rows`]).
pub fn csv_rows(text: &str) -> Vec<(usize, Vec<String>)> {
    crate::csv_input::rows(text)
}

/// A CSV recording's `bytes` (one column per channel, an optional header row of names, an
/// optional time column) read with `options` ([`crate::csv_input::read`]); `path` names the
/// file in messages.
///
/// # Errors
/// [`Failure::Usage`] naming the row and column of what cannot be read.
pub(crate) fn csv(
    path: &Path,
    bytes: &[u8],
    options: &crate::csv_input::CsvOptions,
    calibration: pb::Calibration,
) -> Result<crate::csv_input::CsvRecording, Failure> {
    crate::csv_input::read(path, bytes, options, calibration)
}
