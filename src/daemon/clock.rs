//! The daemon's clock: UTC read once at start, then advanced by the
//! monotonic clock, so that a wall-clock step (NTP) never makes arrival
//! times go backwards inside one run.

use crate::time::Timestamp;
use std::time::{Instant, SystemTime, UNIX_EPOCH};

#[derive(Copy, Clone, Debug)]
pub struct DaemonClock {
    wall: Timestamp,
    base: Instant,
}

impl DaemonClock {
    pub fn start() -> Self {
        let ns = SystemTime::now().duration_since(UNIX_EPOCH).map(|d| d.as_nanos() as i64).unwrap_or(0);
        DaemonClock { wall: Timestamp::from_unix_nanos(ns), base: Instant::now() }
    }

    pub fn now(&self) -> Timestamp {
        Timestamp::from_unix_nanos(self.wall.unix_nanos() + self.base.elapsed().as_nanos() as i64)
    }

    /// The monotonic instant at which [`DaemonClock::now`] reads `t`
    /// (the start instant for a `t` before the start).
    pub fn instant_of(&self, t: Timestamp) -> Instant {
        let ns = t.unix_nanos().saturating_sub(self.wall.unix_nanos()).max(0);
        self.base + std::time::Duration::from_nanos(ns as u64)
    }
}
