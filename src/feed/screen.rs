//! The stateful checks that need more than one record: exact duplicates
//! and implausible times.
//!
//! The screen sees records in time order (the offline command sorts the
//! feed first; the daemon's reorder buffer releases in order), so an exact
//! duplicate always shares its timestamp with the original: the screen
//! keeps the content hashes of the records at the current timestamp only,
//! which bounds its memory by the largest group of equal-time records.

use super::{Record, Reject, RejectReason};
use crate::time::Timestamp;
use std::collections::HashSet;

#[derive(Debug, Clone)]
pub struct Screen {
    /// The time that records must lie near, and how near (s).
    reference: Option<Timestamp>,
    max_offset_s: f64,
    current: Option<Timestamp>,
    seen: HashSet<u64>,
}

/// What a [`Screen`] holds between records, for snapshots: the content
/// hashes are sorted, so equal screens give equal states.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ScreenState {
    reference: Option<Timestamp>,
    current: Option<Timestamp>,
    seen: Vec<u64>,
}

impl Screen {
    /// `reference`: the time against which a record's time is judged
    /// plausible (offline: the feed's median time); `max_offset_s`: how far
    /// from it a record may lie.
    pub fn new(reference: Option<Timestamp>, max_offset_s: f64) -> Self {
        Screen { reference, max_offset_s, current: None, seen: HashSet::new() }
    }

    /// Moves the plausibility reference (live: the daemon's clock).
    pub fn set_reference(&mut self, t: Timestamp) {
        self.reference = Some(t);
    }

    /// The state to carry over a restart (the offset limit is
    /// configuration and is given again to [`Screen::from_state`]).
    pub fn state(&self) -> ScreenState {
        let mut seen: Vec<u64> = self.seen.iter().copied().collect();
        seen.sort_unstable();
        ScreenState { reference: self.reference, current: self.current, seen }
    }

    /// A screen that continues from `state`.
    pub fn from_state(state: ScreenState, max_offset_s: f64) -> Self {
        Screen { reference: state.reference, max_offset_s, current: state.current, seen: state.seen.into_iter().collect() }
    }

    /// Only the time check, for use before records are ordered.
    pub fn plausible(&self, rec: &Record) -> Result<(), Reject> {
        if let Some(r) = self.reference {
            if rec.time().secs_since(r).abs() > self.max_offset_s {
                return Err(Reject { reason: RejectReason::ImplausibleTime, sensor: Some(rec.sensor()) });
            }
        }
        Ok(())
    }

    /// Checks a record that comes in time order.
    pub fn admit(&mut self, rec: &Record) -> Result<(), Reject> {
        self.plausible(rec)?;
        let t = rec.time();
        if self.current != Some(t) {
            self.current = Some(t);
            self.seen.clear();
        }
        if !self.seen.insert(rec.content_hash()) {
            return Err(Reject { reason: RejectReason::Duplicate, sensor: Some(rec.sensor()) });
        }
        Ok(())
    }
}

/// The median of the times of `records`, the offline plausibility
/// reference: robust to a minority of wild times.
pub fn median_time(times: &mut [Timestamp]) -> Option<Timestamp> {
    if times.is_empty() {
        return None;
    }
    let mid = times.len() / 2;
    let (_, m, _) = times.select_nth_unstable(mid);
    Some(*m)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::feed::{Detection, Record};

    fn det(t: i64, r: f64) -> Record {
        Record::Detection(Detection {
            sensor: 0,
            time: Timestamp::from_unix_nanos(t),
            scan: None,
            range_m: r,
            bearing_deg: 1.0,
            radial_speed_mps: None,
            snr_db: None,
        })
    }

    #[test]
    fn duplicates_and_implausible() {
        let mut s = Screen::new(Some(Timestamp::from_unix_nanos(0)), 3600.0);
        assert!(s.admit(&det(5, 100.0)).is_ok());
        assert!(s.admit(&det(5, 101.0)).is_ok());
        assert_eq!(s.admit(&det(5, 100.0)).unwrap_err().reason, RejectReason::Duplicate);
        assert!(s.admit(&det(6, 100.0)).is_ok());
        let far = 3601 * 1_000_000_000;
        assert_eq!(s.admit(&det(far, 100.0)).unwrap_err().reason, RejectReason::ImplausibleTime);
    }

    #[test]
    fn median() {
        let mut v: Vec<_> = [9, 1, 5, 1_000_000, 3].iter().map(|&x| Timestamp::from_unix_nanos(x)).collect();
        assert_eq!(median_time(&mut v), Some(Timestamp::from_unix_nanos(5)));
    }
}
