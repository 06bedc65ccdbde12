//! One track's state and its lifecycle rules.
//!
//! Looks are counted per sensor (CONTRACT.md §1): a radar plot that
//! updates a track is a hit for that sensor's current scan, counted at
//! once; at the sensor's `scan_end`, a track inside the covered sector
//! and range that had no hit from that sensor in that scan counts a miss.
//! A transponder report that updates a track is a hit; transponders have
//! no scans, so they count no misses.
//!
//! - tentative → confirmed: at least `confirm_hits` hits in the last
//!   `confirm_looks` looks;
//! - tentative → ended: even all-hit looks could no longer reach that;
//! - confirmed → coasting on a miss, coasting → confirmed on a hit;
//! - confirmed or coasting → ended: fewer than `end_hits` hits in the last
//!   `end_looks` looks.

use super::filter::Gaussian;
use super::imm::ImmState;
use crate::feed::{SensorId, TrackStatus, VesselInfo};
use crate::time::Timestamp;
use std::sync::Arc;

/// How many sensors' latest hit times a track remembers. A vessel is
/// rarely seen by more; when it is, the oldest entry is dropped, which
/// only relaxes the one-plot-per-scan rule for that sensor.
pub const RECENT_SENSORS: usize = 4;

#[derive(Clone, Debug, serde::Serialize, serde::Deserialize)]
pub struct Track {
    pub number: u64,
    pub status: TrackStatus,
    /// Filter state at `time`.
    pub state: ImmState,
    /// The state's combined (moment-matched) estimate, kept beside it
    /// because gating, coverage and timeout checks read it often.
    pub est: Gaussian,
    pub time: Timestamp,
    pub born: Timestamp,
    /// Look history, newest in bit 0; `n_looks` looks so far.
    pub looks: u32,
    pub n_looks: u32,
    /// Latest hit time per sensor (sensor u16::MAX marks an empty slot).
    pub recent: [(SensorId, Timestamp); RECENT_SENSORS],
    pub identity: Option<Arc<str>>,
    /// A report with this track's identity fell outside the identity gate
    /// and no consistent report has come since.
    pub identity_conflict: bool,
    /// Static data of the identity, from its latest report that had any.
    pub vessel: Option<Arc<VesselInfo>>,
    /// Grid cell the track is filed under.
    pub cell: (i32, i32),
    /// Checked against every plot instead of through the grid.
    pub wide: bool,
    /// Stamp of the last batch that looked at this track, and the track's
    /// column in that batch's assignment problem.
    pub visit: u64,
    pub col: u32,
}

pub const NO_SENSOR: SensorId = SensorId::MAX;

/// What a look did to a track's status.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum LookOutcome {
    Same,
    Changed,
}

/// The lifecycle thresholds.
#[derive(Copy, Clone, Debug)]
pub struct Lifecycle {
    pub confirm_hits: u32,
    pub confirm_looks: u32,
    pub end_hits: u32,
    pub end_looks: u32,
}

fn hits_in_last(looks: u32, n: u32) -> u32 {
    let mask = if n >= 32 { u32::MAX } else { (1u32 << n) - 1 };
    (looks & mask).count_ones()
}

impl Track {
    pub fn new(number: u64, state: ImmState, est: Gaussian, time: Timestamp, sensor: SensorId) -> Self {
        let mut recent = [(NO_SENSOR, Timestamp::default()); RECENT_SENSORS];
        recent[0] = (sensor, time);
        Track {
            number,
            status: TrackStatus::Tentative,
            state,
            est,
            time,
            born: time,
            looks: 0,
            n_looks: 0,
            recent,
            identity: None,
            identity_conflict: false,
            vessel: None,
            cell: (0, 0),
            wide: false,
            visit: 0,
            col: 0,
        }
    }

    /// The latest hit from `sensor`, if remembered.
    pub fn last_hit(&self, sensor: SensorId) -> Option<Timestamp> {
        self.recent.iter().find(|(s, _)| *s == sensor).map(|(_, t)| *t)
    }

    /// Notes a hit from `sensor` at `t`.
    pub fn note_hit(&mut self, sensor: SensorId, t: Timestamp) {
        if let Some(slot) = self.recent.iter_mut().find(|(s, _)| *s == sensor) {
            slot.1 = t;
            return;
        }
        // Replace an empty slot, else the oldest.
        let mut k = 0;
        for i in 0..RECENT_SENSORS {
            if self.recent[i].0 == NO_SENSOR {
                k = i;
                break;
            }
            if self.recent[i].1 < self.recent[k].1 {
                k = i;
            }
        }
        self.recent[k] = (sensor, t);
    }

    /// Adds one look and applies the lifecycle rules.
    pub fn look(&mut self, hit: bool, rules: &Lifecycle) -> LookOutcome {
        self.looks = (self.looks << 1) | hit as u32;
        self.n_looks = self.n_looks.saturating_add(1);
        let before = self.status;
        self.status = match self.status {
            TrackStatus::Tentative => {
                let hits = hits_in_last(self.looks, rules.confirm_looks);
                let still_to_come = rules.confirm_looks.saturating_sub(self.n_looks);
                if hits >= rules.confirm_hits {
                    TrackStatus::Confirmed
                } else if hits + still_to_come < rules.confirm_hits {
                    TrackStatus::Ended
                } else {
                    TrackStatus::Tentative
                }
            }
            TrackStatus::Confirmed | TrackStatus::Coasting => {
                if self.n_looks >= rules.end_looks && hits_in_last(self.looks, rules.end_looks) < rules.end_hits {
                    TrackStatus::Ended
                } else if hit {
                    TrackStatus::Confirmed
                } else {
                    TrackStatus::Coasting
                }
            }
            TrackStatus::Ended => TrackStatus::Ended,
        };
        if self.status == before { LookOutcome::Same } else { LookOutcome::Changed }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::imm::MAX_MODELS;

    fn track() -> Track {
        let g = Gaussian { x: Default::default(), p: Default::default() };
        let state = ImmState { comps: [g; MAX_MODELS], mu: [1.0, 0.0, 0.0] };
        Track::new(1, state, g, Timestamp::default(), 0)
    }

    const RULES: Lifecycle = Lifecycle { confirm_hits: 3, confirm_looks: 4, end_hits: 1, end_looks: 5 };

    /// Runs a hit/miss pattern and returns the status after each look.
    fn run(pattern: &str) -> Vec<TrackStatus> {
        let mut t = track();
        pattern.chars().map(|c| {
            t.look(c == 'H', &RULES);
            t.status
        }).collect()
    }

    #[test]
    fn m_of_n_confirmation_by_brute_force() {
        use TrackStatus::*;
        // Definition check: over every pattern of 4 looks, the track is
        // confirmed at the first look where the last 4 looks hold 3 hits,
        // and ended at the first look where 3 hits in 4 became impossible.
        for bits in 0u32..16 {
            let pattern: String = (0..4).map(|i| if bits >> i & 1 == 1 { 'H' } else { 'M' }).collect();
            let statuses = run(&pattern);
            let mut expected = Tentative;
            for k in 0..4 {
                if expected == Tentative {
                    let hits = pattern[..=k].chars().filter(|&c| c == 'H').count() as u32;
                    let left = 3 - k as u32;
                    if hits >= 3 {
                        expected = Confirmed;
                    } else if hits + left < 3 {
                        expected = Ended;
                    }
                } else if expected != Ended {
                    expected = if pattern.as_bytes()[k] == b'H' { Confirmed } else { Coasting };
                }
                assert_eq!(statuses[k], expected, "{pattern} look {k}");
            }
        }
    }

    #[test]
    fn coasting_and_ending() {
        use TrackStatus::*;
        let s = run("HHHMHMMMMM");
        assert_eq!(&s[..6], &[Tentative, Tentative, Confirmed, Coasting, Confirmed, Coasting]);
        // Fewer than 1 hit in the last 5 looks: ended at the 5th miss in a row.
        assert_eq!(&s[6..], &[Coasting, Coasting, Coasting, Ended]);
    }

    #[test]
    fn remembers_recent_sensors() {
        let mut t = track();
        for s in 1..6u16 {
            t.note_hit(s, Timestamp::from_unix_nanos(s as i64));
        }
        assert_eq!(t.last_hit(0), None);
        assert_eq!(t.last_hit(5), Some(Timestamp::from_unix_nanos(5)));
        assert_eq!(t.last_hit(2), Some(Timestamp::from_unix_nanos(2)));
    }
}

#[cfg(test)]
mod size {
    /// The memory budget is under 2 KiB per live track; the track
    /// itself must leave room for the grid and identity entries.
    #[test]
    fn a_track_fits_its_budget() {
        let bytes = std::mem::size_of::<super::Track>();
        assert!(bytes < 1536, "Track is {bytes} bytes");
    }
}
