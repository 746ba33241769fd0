//! Where record times come from: the system clock, or a fixed clock injected by tests.

use crate::Timestamp;
use std::sync::atomic::{AtomicI64, Ordering};

/// A source of the current UTC time.
pub trait Clock: Send + Sync {
    /// The current instant.
    fn now(&self) -> Timestamp;
}

/// The operating system's clock.
#[derive(Debug, Default, Clone, Copy)]
pub struct SystemClock;

impl Clock for SystemClock {
    fn now(&self) -> Timestamp {
        Timestamp::from_datetime(chrono::Utc::now())
    }
}

/// A clock that starts at a given instant and advances a fixed step on every reading.
#[derive(Debug)]
pub struct FixedClock {
    next: AtomicI64,
    step_micros: i64,
}

impl FixedClock {
    /// A clock reading `start`, then `start + step`, and so on.
    pub fn new(start: Timestamp, step_micros: i64) -> Self {
        FixedClock {
            next: AtomicI64::new(start.0),
            step_micros,
        }
    }

    /// Sets the next reading.
    pub fn set(&self, at: Timestamp) {
        self.next.store(at.0, Ordering::SeqCst);
    }
}

impl Clock for FixedClock {
    fn now(&self) -> Timestamp {
        Timestamp(self.next.fetch_add(self.step_micros, Ordering::SeqCst))
    }
}
