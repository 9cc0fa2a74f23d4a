//! `jetloop completions SHELL`: shell completions on standard output.

use crate::failure::Failure;
use crate::render::report::Report;

/// Writes the completion script of `cmd` (the whole argument tree) for `shell`.
pub(crate) fn run(shell: clap_complete::Shell, mut cmd: clap::Command) -> Result<Report, Failure> {
    use std::io::Write;
    let mut buf = Vec::new();
    clap_complete::generate(shell, &mut cmd, "jetloop", &mut buf);
    // A closed pipe (`| head`) is not an error worth a panic.
    let _ = std::io::stdout().write_all(&buf);
    Ok(Report::new("").quiet())
}
