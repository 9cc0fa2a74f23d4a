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
