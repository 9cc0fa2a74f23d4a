//! The server-wide budget of sample bytes held by calls: requests being analysed and the
//! recordings of block streams. A call that would take the total past it is refused with
//! RESOURCE_EXHAUSTED naming the budget; what a call holds is released when it ends (answered,
//! failed, expired or abandoned).

use crate::api::ApiError;
use std::sync::Arc;
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

/// Bytes per permit (the semaphore counts KiB, so budgets up to terabytes fit).
const UNIT: usize = 1024;

/// The budget, shared by every call.
#[derive(Debug, Clone)]
pub struct SampleBudget {
    units: Arc<Semaphore>,
    bytes: usize,
}

/// Sample bytes a call holds, one entry per take in the order taken; released on drop.
#[derive(Debug, Default)]
pub struct Held {
    permits: std::collections::VecDeque<(OwnedSemaphorePermit, usize)>,
    bytes: usize,
    /// Bytes the call has let go in all (see [`Held::release_front`]).
    let_go: usize,
    /// Of those, bytes not yet matched by a whole take given back.
    credit: usize,
}

impl Held {
    /// Bytes held.
    pub fn bytes(&self) -> usize {
        self.bytes
    }

    /// Gives back the oldest takes once the call has let go of `let_go_total` bytes in all
    /// (a running total, so calling it again with the same figure does nothing): a block
    /// stream lets go of its blocks in the order they came, each one take.
    pub fn release_front(&mut self, let_go_total: usize) {
        self.credit += let_go_total.saturating_sub(self.let_go);
        self.let_go = self.let_go.max(let_go_total);
        while let Some(&(_, b)) = self.permits.front() {
            if b > self.credit {
                break;
            }
            self.credit -= b;
            self.bytes -= b;
            self.permits.pop_front();
        }
    }
}

impl SampleBudget {
    /// A budget of `bytes` (at least one KiB).
    pub fn new(bytes: usize) -> Self {
        let units = (bytes / UNIT).clamp(1, Semaphore::MAX_PERMITS);
        Self { units: Arc::new(Semaphore::new(units)), bytes }
    }

    /// Adds `bytes` to what `held` holds, or refuses naming `field`, the budget and what the
    /// whole server holds now.
    ///
    /// # Errors
    /// [`ApiError::TooLarge`] when the budget has not `bytes` left.
    pub fn take(&self, held: &mut Held, bytes: usize, field: &str) -> Result<(), ApiError> {
        let units = bytes.div_ceil(UNIT);
        let refused = || ApiError::TooLarge {
            field: field.to_string(),
            limit: format!("server-wide sample budget of {} bytes (all calls together)", self.bytes),
            actual: format!(
                "{} more bytes on top of the {} this call holds and {} held by other calls",
                bytes,
                held.bytes,
                self.in_use().saturating_sub(held.bytes)
            ),
        };
        let units = u32::try_from(units).map_err(|_| refused())?;
        match self.units.clone().try_acquire_many_owned(units) {
            Ok(p) => {
                held.permits.push_back((p, bytes));
                held.bytes += bytes;
                Ok(())
            }
            Err(_) => Err(refused()),
        }
    }

    /// Bytes held by all calls now (to the KiB).
    pub fn in_use(&self) -> usize {
        (self.bytes / UNIT).max(1).saturating_sub(self.units.available_permits()) * UNIT
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn takes_up_to_the_budget_and_releases_on_drop() {
        let b = SampleBudget::new(10 * UNIT);
        let mut a = Held::default();
        b.take(&mut a, 6 * UNIT, "samples").unwrap();
        let mut c = Held::default();
        let e = b.take(&mut c, 5 * UNIT, "frames").unwrap_err();
        assert!(matches!(e, ApiError::TooLarge { ref field, .. } if field == "frames"), "{e:?}");
        b.take(&mut c, 4 * UNIT, "frames").unwrap();
        assert_eq!(b.in_use(), 10 * UNIT);
        drop(a);
        assert_eq!(b.in_use(), 4 * UNIT);
        b.take(&mut c, 6 * UNIT, "frames").unwrap();
        assert_eq!(c.bytes(), 10 * UNIT);
    }

    #[test]
    fn gives_back_the_oldest_takes_as_their_bytes_are_let_go() {
        let b = SampleBudget::new(10 * UNIT);
        let mut h = Held::default();
        for _ in 0..3 {
            b.take(&mut h, 3 * UNIT, "frames").unwrap();
        }
        h.release_front(2 * UNIT);
        assert_eq!((h.bytes(), b.in_use()), (9 * UNIT, 9 * UNIT), "a part of a take keeps it");
        h.release_front(2 * UNIT);
        assert_eq!(h.bytes(), 9 * UNIT, "the same running total again gives nothing back");
        h.release_front(7 * UNIT);
        assert_eq!((h.bytes(), b.in_use()), (3 * UNIT, 3 * UNIT));
        b.take(&mut h, 7 * UNIT, "frames").unwrap();
        assert_eq!(b.in_use(), 10 * UNIT);
    }
}
