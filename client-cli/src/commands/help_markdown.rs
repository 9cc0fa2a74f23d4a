//! `jetloop help-markdown`: every command's --help as one Markdown document (the source of
//! docs/cli.md).

use crate::failure::Failure;
use crate::render::report::Report;

/// Writes `markdown` (clap-markdown's rendering of the argument tree) to standard output.
pub(crate) fn run(markdown: String) -> Result<Report, Failure> {
    use std::io::Write;
    let _ = std::io::stdout().write_all(markdown.as_bytes());
    Ok(Report::new("").quiet())
}
