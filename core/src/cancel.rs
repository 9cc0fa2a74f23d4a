//! Cooperative cancellation of long computations: a flag the caller's side sets (deadline
//! passed, caller gone) and the computation checks between units of work (a Welch segment, a
//! sweep point, a fit's grid cell). Pure: no async runtime, usable from `physics` and `dsp`.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

/// A cancellation flag shared between a call and its computation. Clones share the flag.
#[derive(Debug, Clone, Default)]
pub struct Cancel(Arc<AtomicBool>);

/// A computation that was stopped before it finished.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("the computation was stopped: its deadline passed or its caller went away")]
pub struct Stopped;

impl Cancel {
    /// A flag that is not set.
    pub fn new() -> Self {
        Self::default()
    }

    /// Sets the flag: computations checking it stop at their next check.
    pub fn cancel(&self) {
        self.0.store(true, Ordering::Relaxed);
    }

    /// True once [`Cancel::cancel`] was called on any clone.
    pub fn is_cancelled(&self) -> bool {
        self.0.load(Ordering::Relaxed)
    }

    /// `Err(Stopped)` once cancelled.
    ///
    /// # Errors
    /// [`Stopped`] when the flag is set.
    pub fn check(&self) -> Result<(), Stopped> {
        if self.is_cancelled() {
            Err(Stopped)
        } else {
            Ok(())
        }
    }
}

/// Sets the flag when dropped: held by the side that waits for a computation, so that a wait
/// abandoned for any reason (deadline, caller gone) stops the work.
#[derive(Debug)]
pub struct CancelOnDrop(pub Cancel);

impl Drop for CancelOnDrop {
    fn drop(&mut self) {
        self.0.cancel();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn clones_share_the_flag_and_a_dropped_guard_sets_it() {
        let c = Cancel::new();
        let seen = c.clone();
        assert_eq!(seen.check(), Ok(()));
        drop(CancelOnDrop(c));
        assert!(seen.is_cancelled());
        assert_eq!(seen.check(), Err(Stopped));
    }
}
