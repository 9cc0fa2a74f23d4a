//! `jetloop readers`.

use crate::failure::Failure;
use indicatif::ProgressBar;
use indicatif::ProgressStyle;
use std::io::Read;
use std::path::Path;

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

/// A spinner shown on a terminal while the server works.
pub fn spinner(msg: &str) -> ProgressBar {
    let s = ProgressBar::new_spinner();
    s.set_message(msg.to_string());
    s.enable_steady_tick(std::time::Duration::from_millis(120));
    s
}

/// The rows of a delimited text file: (line index from 0, trimmed cells), skipping blank
/// lines and `#` comments. Cells are separated by commas, semicolons or tabs.
pub fn csv_rows(text: &str) -> impl Iterator<Item = (usize, Vec<&str>)> {
    text.lines().enumerate().filter_map(|(i, line)| {
        let line = line.trim();
        (!line.is_empty() && !line.starts_with('#'))
            .then(|| (i, line.split([',', ';', '\t']).map(str::trim).collect()))
    })
}
