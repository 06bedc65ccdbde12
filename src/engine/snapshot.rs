//! The engine's state as plain data, for snapshots and warm restarts.
//! [`crate::snapshot`] frames it (magic, format version, configuration
//! fingerprint, checksum) and writes the files.
//!
//! Contract:
//! - [`Engine::state`] copies out everything that shapes future output:
//!   the tracks (IMM states, combined estimates, look histories, hit times,
//!   identities and conflicts, grid cells, batch stamps), the grid and the
//!   wide list in their exact order, the identity table, the open batch of
//!   plots, each sensor's last scan end, the next track number, the batch
//!   serial, the sweep clock, the feed time reached, the counters, the
//!   JPDA switches and the track candidates (initiate.rs). Hash maps are written sorted by key, so equal engines
//!   give equal states, and so equal bytes.
//! - [`Engine::from_state`] builds what follows from the configuration
//!   (site frame, sensor models, IMM, lifecycle rules, gate, JPDA limits)
//!   with [`Engine::new`] and puts the state back, after checking every
//!   index in it against the configuration and the track list: a state
//!   that does not fit is refused with [`StateError`], never a panic later.
//! - Scratch space (the assigner's, the batch buffers, the JPDA solver's)
//!   is not kept: it carries nothing from one batch to the next.
//!
//! Floats are carried as they are (the binary encoding writes their bits),
//! so a restored engine continues bit for bit where the saved one stood.

use super::*;
use serde::{Deserialize, Serialize};

/// A plot held in the open batch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
struct PlotState {
    sensor: SensorId,
    time: Timestamp,
    scan: Option<u64>,
    range_m: f64,
    bearing_deg: f64,
    radial_speed_mps: Option<f64>,
    snr_db: Option<f64>,
    z: Vector2<f64>,
    r: Matrix2<f64>,
}

/// Everything of an [`Engine`] that is not rebuilt from the configuration.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct EngineState {
    /// Per configured sensor, its last `scan_end`.
    last_scan_end: Vec<Option<Timestamp>>,
    pending_compact: bool,
    tracks: Vec<Track>,
    /// The grid, sorted by cell; each cell's list in its exact order.
    grid: Vec<((i32, i32), Vec<u32>)>,
    wide: Vec<u32>,
    /// Identity → track index, sorted by identity.
    identities: Vec<(Arc<str>, u32)>,
    next_number: u64,
    batch_sensor: SensorId,
    batch_first: Timestamp,
    batch_plots: Vec<PlotState>,
    batch_serial: u64,
    next_sweep: Option<Timestamp>,
    now: Timestamp,
    stats: EngineStats,
    jpda_prune: bool,
    jpda_pregate: bool,
    jpda_counters: JpdaCounters,
    /// Tentative-track starts made by the open batch (its cap).
    batch_starts: u32,
    /// What the overload limits dropped, by sensor.
    dropped: Vec<Dropped>,
    /// Plots waiting for a second one (initiate.rs), in creation order,
    /// used and expired ones included (they are skipped the same way after
    /// a restore); the grid over them is rebuilt.
    candidates: Vec<Candidate>,
}

/// Why a state does not fit the engine a configuration builds.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum StateError {
    #[error("engine: {0}")]
    Setup(String),
    #[error("the saved state does not fit the configuration: {0}")]
    Inconsistent(String),
}

impl EngineState {
    /// The number the next new track will get.
    pub fn next_track_number(&self) -> u64 {
        self.next_number
    }

    /// The feed time the engine had reached.
    pub fn feed_time(&self) -> Timestamp {
        self.now
    }
}

impl Engine {
    /// The engine's state; see the module docs.
    pub fn state(&self) -> EngineState {
        // Every field is named here, so that a field added to the engine
        // fails to compile until it is either saved below or marked as
        // rebuilt from the configuration or as scratch.
        let Engine {
            site: _,
            radii: _,
            sensor_table: _,
            sensor_names: _,
            models: _,
            sensor_state,
            imm: _,
            mu0: _,
            rules: _,
            gate_d2: _,
            new_track_density: _,
            init_speed_sigma: _,
            max_silence_s: _,
            identified_silence_s: _,
            identity_gate_m: _,
            max_speed_mps: _,
            max_plot_var: _,
            max_accel_psd: _,
            pending_compact,
            tracks,
            grid,
            wide,
            identities,
            next_number,
            batch,
            batch_serial,
            next_sweep,
            now,
            stats,
            assigner: _,
            scratch: _,
            association: _,
            jpda,
            report_cand: _,
            batch_fraction: _,
            max_starts: _,
            batch_starts,
            max_plots: _,
            dropped,
            plots_to_start: _,
            candidates,
        } = self;
        let mut grid: Vec<((i32, i32), Vec<u32>)> = grid.iter().map(|(c, v)| (c, v.clone())).collect();
        grid.sort_unstable_by_key(|(c, _)| *c);
        let mut identities: Vec<(Arc<str>, u32)> = identities.iter().map(|(k, v)| (k.clone(), *v)).collect();
        identities.sort_unstable_by(|a, b| a.0.cmp(&b.0));
        EngineState {
            last_scan_end: sensor_state.iter().map(|s| s.last_scan_end).collect(),
            pending_compact: *pending_compact,
            tracks: tracks.clone(),
            grid,
            wide: wide.clone(),
            identities,
            next_number: *next_number,
            batch_sensor: batch.sensor,
            batch_first: batch.first,
            batch_plots: batch
                .plots
                .iter()
                .map(|p| PlotState {
                    sensor: p.det.sensor,
                    time: p.det.time,
                    scan: p.det.scan,
                    range_m: p.det.range_m,
                    bearing_deg: p.det.bearing_deg,
                    radial_speed_mps: p.det.radial_speed_mps,
                    snr_db: p.det.snr_db,
                    z: p.z,
                    r: p.r,
                })
                .collect(),
            batch_serial: *batch_serial,
            next_sweep: *next_sweep,
            now: *now,
            stats: stats.clone(),
            jpda_prune: jpda.prune,
            jpda_pregate: jpda.pregate,
            jpda_counters: jpda.counters,
            batch_starts: *batch_starts,
            dropped: dropped.clone(),
            candidates: candidates.list.clone(),
        }
    }

    /// An engine for `cfg` that continues from `state`.
    pub fn from_state(cfg: &Config, state: EngineState) -> Result<Engine, StateError> {
        let mut e = Engine::new(cfg).map_err(|err| StateError::Setup(err.to_string()))?;
        let bad = |m: String| Err(StateError::Inconsistent(m));
        let n_sensors = e.models.len();
        if state.last_scan_end.len() != n_sensors {
            return bad(format!("{} sensors saved, {} configured", state.last_scan_end.len(), n_sensors));
        }
        let n = state.tracks.len();
        let index_ok = |i: u32| (i as usize) < n;
        for (k, t) in state.tracks.iter().enumerate() {
            if t.recent.iter().any(|(s, _)| *s != track::NO_SENSOR && *s as usize >= n_sensors) {
                return bad(format!("track {} names a sensor that is not configured", t.number));
            }
            if t.number >= state.next_number {
                return bad(format!("track {} is not below the next track number {}", t.number, state.next_number));
            }
            if t.visit > state.batch_serial {
                return bad(format!("track {} was stamped by a batch not yet made", t.number));
            }
            if k > 0 && state.tracks[k - 1].number >= t.number {
                return bad("tracks are not in order of number".into());
            }
        }
        let mut filed = 0usize;
        for (cell, v) in &state.grid {
            for &i in v {
                if !index_ok(i) || state.tracks[i as usize].cell != *cell {
                    return bad(format!("grid cell {cell:?} lists track index {i} filed elsewhere"));
                }
            }
            filed += v.len();
        }
        if filed != n {
            return bad(format!("the grid files {filed} tracks of {n}"));
        }
        if let Some(&i) = state.wide.iter().find(|&&i| !index_ok(i)) {
            return bad(format!("wide list names track index {i} of {n}"));
        }
        for (id, i) in &state.identities {
            if !index_ok(*i) || state.tracks[*i as usize].identity.as_deref() != Some(&**id) {
                return bad(format!("identity {id} points at a track that does not hold it"));
            }
        }
        if !state.batch_plots.is_empty() {
            let s = state.batch_sensor as usize;
            if s >= n_sensors || e.models[s].radar.is_none() {
                return bad("the open batch belongs to no configured radar".into());
            }
            if state.batch_plots.iter().any(|p| p.sensor != state.batch_sensor) {
                return bad("the open batch mixes sensors".into());
            }
        }
        for (s, t) in e.sensor_state.iter_mut().zip(&state.last_scan_end) {
            s.last_scan_end = *t;
        }
        e.pending_compact = state.pending_compact;
        e.tracks = state.tracks;
        e.grid.fill(state.grid);
        e.wide = state.wide;
        e.identities = state.identities.into_iter().collect();
        e.next_number = state.next_number;
        e.batch = Batch {
            sensor: state.batch_sensor,
            first: state.batch_first,
            plots: state
                .batch_plots
                .into_iter()
                .map(|p| PendingPlot {
                    det: Detection {
                        sensor: p.sensor,
                        time: p.time,
                        scan: p.scan,
                        range_m: p.range_m,
                        bearing_deg: p.bearing_deg,
                        radial_speed_mps: p.radial_speed_mps,
                        snr_db: p.snr_db,
                    },
                    z: p.z,
                    r: p.r,
                })
                .collect(),
        };
        e.batch_serial = state.batch_serial;
        e.next_sweep = state.next_sweep;
        e.now = state.now;
        e.stats = state.stats;
        e.jpda.prune = state.jpda_prune;
        e.jpda.pregate = state.jpda_pregate;
        e.jpda.counters = state.jpda_counters;
        if state.dropped.len() != n_sensors {
            return bad(format!("{} sensors in the dropped counts, {} configured", state.dropped.len(), n_sensors));
        }
        e.batch_starts = state.batch_starts;
        e.dropped = state.dropped;
        if let Some(c) = state.candidates.iter().find(|c| c.sensor as usize >= n_sensors || e.models[c.sensor as usize].radar.is_none()) {
            return bad(format!("a track candidate at {} names sensor {}, which is no configured radar", c.time, c.sensor));
        }
        if state.candidates.iter().any(|c| !(c.z.iter().chain(&c.r).all(|v| v.is_finite()))) {
            return bad("a track candidate holds a number that is not finite".into());
        }
        e.candidates.restore(state.candidates);
        Ok(e)
    }

    /// The number the next new track will get.
    pub fn next_track_number(&self) -> u64 {
        self.next_number
    }

    /// Makes sure no track number below `next` is given out: a cold start
    /// after a refused snapshot keeps numbering where the old run stopped.
    pub fn reserve_track_numbers(&mut self, next: u64) {
        self.next_number = self.next_number.max(next);
    }
}
