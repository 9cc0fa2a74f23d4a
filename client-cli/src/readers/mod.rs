//! File readers: recordings (WAV, CSV, raw little-endian binary) into `Samples` messages,
//! response-correction curves and measured sweeps (CSV), and the delimited-text rows they
//! share. Which reader runs, with which sample rate and calibration, is decided by the
//! recording arguments (`args::input`).

use crate::failure::Failure;
use indicatif::ProgressBar;
use indicatif::ProgressStyle;
use std::io::Read;
use std::path::Path;

mod csv;
pub(crate) mod disk;
pub(crate) mod raw;
mod tables;
pub(crate) mod wav;

pub(crate) use csv::csv;
// The paths of the single-file reader module stay valid; `csv_rows` and `direction` have no
// caller outside their own files today.
#[allow(unused_imports)]
pub use csv::csv_rows;
#[allow(unused_imports)]
pub(crate) use tables::direction;
pub(crate) use tables::{read_curve, read_points};

/// The bytes of the file at `path`, with a progress bar on a terminal.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be opened or read.
pub(crate) fn read_with_progress(path: &Path) -> Result<Vec<u8>, Failure> {
    let mut f = std::fs::File::open(path)
        .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", path.display())))?;
    let len = f.metadata().map(|m| m.len()).unwrap_or(0);
    let bar = ProgressBar::new(len);
    bar.set_style(
        ProgressStyle::with_template("reading {msg} {bar:30} {bytes}/{total_bytes}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    bar.set_message(path.display().to_string());
    let mut out = Vec::with_capacity(len as usize);
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n =
            f.read(&mut buf).map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
        if n == 0 {
            break;
        }
        out.extend_from_slice(&buf[..n]);
        bar.inc(n as u64);
    }
    bar.finish_and_clear();
    Ok(out)
}
