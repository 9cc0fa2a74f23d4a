//! Progress shown on a terminal (standard error) while the server works; nothing is shown
//! when standard error is not a terminal, so piped output stays the same.

use indicatif::ProgressBar;

/// A spinner with `msg`, ticking until it is finished or dropped.
pub fn spinner(msg: &str) -> ProgressBar {
    let s = ProgressBar::new_spinner();
    s.set_message(msg.to_string());
    s.enable_steady_tick(std::time::Duration::from_millis(120));
    s
}

/// A bar of `total` bytes, `verb` (e.g. "reading") the file at `path`.
pub fn bytes_bar(verb: &str, path: &std::path::Path, total: u64) -> ProgressBar {
    let bar = ProgressBar::new(total);
    bar.set_style(
        indicatif::ProgressStyle::with_template(&format!(
            "{verb} {{msg}} {{bar:30}} {{bytes}}/{{total_bytes}}"
        ))
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    bar.set_message(path.display().to_string());
    bar
}
