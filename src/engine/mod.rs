//! The tracking engine: sans-IO and deterministic.
//!
//! Records go in, in time order; track records come out. The engine never
//! reads a clock, opens a socket or spawns a task: time comes from the
//! records, so the offline and live paths give the same tracks.
//!
//! API (the daemon and the offline command drive it the same way):
//! - [`Engine::new`] from a validated [`Config`];
//! - [`Engine::handle`] for each record, in non-decreasing time order;
//! - [`Engine::advance`] when the feed is quiet: feed time has reached
//!   `now` and no record earlier than `now` will follow;
//! - [`Engine::finish`] at the end of a feed, to process what is held back;
//! - [`Engine::picture`]: the latest record of every live track.

pub mod assign;
pub mod filter;
pub mod imm;
pub mod measure;

use crate::config::Config;
use crate::feed::{Record, SensorTable, TrackRecord, TrackStatus};
use crate::time::Timestamp;

#[derive(Debug, thiserror::Error)]
pub enum EngineError {
    #[error("`{key}`: {message}")]
    Setup { key: String, message: String },
}

/// Live-track counts and work done, for health reporting.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct EngineStats {
    pub tentative: usize,
    pub confirmed: usize,
    pub coasting: usize,
    pub tracks_started: u64,
    pub tracks_ended: u64,
    pub plots: u64,
    pub plots_associated: u64,
    pub reports: u64,
    pub batches: u64,
}

pub struct Engine {
    sensors: SensorTable,
    stats: EngineStats,
}

impl Engine {
    pub fn new(cfg: &Config) -> Result<Engine, EngineError> {
        Ok(Engine { sensors: cfg.sensor_table(), stats: EngineStats::default() })
    }
    pub fn sensors(&self) -> &SensorTable {
        &self.sensors
    }
    /// Takes one record (in time order) and appends the track records it
    /// produced.
    pub fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) {
        let _ = (rec, out);
    }
    /// Feed time has reached `now`: process what is due.
    pub fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>) {
        let _ = (now, out);
    }
    /// End of the feed: process everything held back.
    pub fn finish(&mut self, out: &mut Vec<TrackRecord>) {
        let _ = out;
    }
    /// The latest record of every live track, by track number.
    pub fn picture(&self) -> Vec<TrackRecord> {
        Vec::new()
    }
    pub fn stats(&self) -> EngineStats {
        self.stats.clone()
    }
}

#[allow(dead_code)]
fn _status_used(_: TrackStatus) {}
