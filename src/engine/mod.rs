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
//! - [`Engine::next_due`]: the feed time at which `advance` next has work
//!   (the open batch's end, the next timeout check), for a live driver;
//! - [`Engine::finish`] at the end of a feed, to process what is held back;
//! - [`Engine::picture`]: the latest record of every live track.
//!
//! ## How a scan is processed
//! Plots of one radar are gathered into small batches: consecutive plots of
//! the same sensor within `tracking.batch_scan_fraction` of its scan
//! period (default 1/16: a sector of about 22°).
//! A batch closes when a record of another sensor or a later time arrives,
//! on the sensor's `scan_end`, or when [`Engine::advance`] passes its end.
//! Each batch is associated by global nearest neighbour: every plot is
//! gated against the tracks near it (a grid finds them), the pairs are
//! costed by their log-likelihood ratio against a miss and a new track,
//! and the independent clusters are solved exactly. Each plot updates its
//! track at the plot's own timestamp. A track takes at most one plot per
//! sensor per scan; a plot no track takes may start a tentative track,
//! unless it fell inside the gate of a firm track (a split plot or a
//! multipath echo of a vessel already held: common practice). By default
//! it needs a second plot to do so (`tracking.plots_to_start`,
//! initiate.rs): a lone plot is held for a scan and then forgotten.
//!
//! With `tracking.association = "jpda"` a batch is associated by joint
//! probabilistic data association instead (jpda_batch.rs: clusters,
//! JPDA* marginals, IMM-PDA updates); transponder reports are handled the
//! same way in both modes (identity.rs).
//!
//! Track timeouts are checked at every whole second of feed time, so the
//! result does not depend on when the daemon's clock ticks or calls
//! `advance`.
//!
//! Two overload limits bound a batch's work however heavy the clutter,
//! each drop counted ([`Engine::dropped`]): `tracking.max_plots_per_batch`
//! (later plots of a full batch are dropped) and
//! `tracking.max_new_tracks_per_batch` (tentative-track starts). GNN's
//! assignment problem is pruned exactly (bound.rs).

pub mod assign;
mod bound;
mod cells;
pub mod filter;
pub mod imm;
pub mod jpda;
mod identity;
mod initiate;
mod jpda_batch;
pub mod jpda_cluster;
pub mod pda;

pub use jpda_batch::JpdaCounters;
pub mod measure;
pub mod sensors;
pub mod snapshot;
pub mod track;

pub use initiate::Candidate;
pub use snapshot::{EngineState, StateError};

use crate::config::{Association, Config, MotionChoice};
use crate::feed::tracks::speed_course;
use crate::feed::{Detection, Record, Report, ScanEnd, SensorId, SensorKind, SensorTable, TrackRecord, TrackStatus};
use crate::geo::{Geodetic, LocalFrame, radii_of_curvature};
use crate::time::Timestamp;
use assign::SparseAssigner;
use filter::{Gaussian, Motion, StateCov, StateVec, innovation};
use imm::{Imm, Switching};
use nalgebra::{Matrix2, Vector2};
use sensors::SensorModel;
use std::collections::HashMap;
use std::sync::Arc;
use track::{Lifecycle, LookOutcome, Track};

#[derive(Debug, thiserror::Error)]
pub enum EngineError {
    #[error("`{key}`: {message}")]
    Setup { key: String, message: String },
}

/// Live-track counts and work done, for health reporting.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct EngineStats {
    pub tentative: usize,
    pub confirmed: usize,
    pub coasting: usize,
    pub tracks_started: u64,
    pub tracks_ended: u64,
    pub plots: u64,
    pub plots_associated: u64,
    pub reports: u64,
    pub identity_conflicts: u64,
    pub batches: u64,
    /// Plots that would have started a tentative track but found the
    /// batch's `tracking.max_new_tracks_per_batch` spent.
    pub starts_dropped: u64,
    /// Plots dropped because their batch held `tracking.max_plots_per_batch`.
    pub plots_dropped: u64,
}

/// What one sensor's overload limits dropped (`tracking.max_plots_per_batch`,
/// `tracking.max_new_tracks_per_batch`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Dropped {
    pub plots: u64,
    pub starts: u64,
}

/// Grid cell edge (m). A track is found for any plot within one cell of
/// the cell it is filed under; a track whose gate could reach further is
/// checked against every plot instead (see `Engine::sweep`). Smaller
/// cells give each plot fewer neighbours to bound but make more tracks
/// wide: on the busy demo 0.7–1 km was quickest (2 km cost 6 % more
/// instructions, 0.5 km 15 %); the tracks found are the same at any size.
const CELL_M: f64 = 1000.0;

/// The manoeuvre gate of a coasting track, as a multiple of the normal
/// gate's squared distance (2× the distance).
const SECOND_CHANCE_SCALE: f64 = 4.0;

/// The fastest turn the gating bound allows for (rad/s): 6°/s, twice a
/// fast boat's hard turn (common practice).
const MAX_TURN_RATE: f64 = 6.0 * std::f64::consts::PI / 180.0;


/// Initial turn-rate uncertainty of a new track: 1.5°/s (1 sigma), about
/// half the rate of a fast boat's hard turn (common practice).
const INIT_TURN_SIGMA: f64 = 1.5 * std::f64::consts::PI / 180.0;

struct PendingPlot {
    det: Detection,
    z: Vector2<f64>,
    r: Matrix2<f64>,
}

#[derive(Default)]
struct Batch {
    sensor: SensorId,
    first: Timestamp,
    plots: Vec<PendingPlot>,
}

#[derive(Clone, Copy, Default)]
struct SensorState {
    last_scan_end: Option<Timestamp>,
}

/// Scratch space reused by every batch, so the hot path does not allocate
/// once warmed up.
#[derive(Default)]
struct Scratch {
    cand: Vec<u32>,
    /// Per column: the track's IMM prediction to the time of the first
    /// plot of the batch that reached it (`gate_at`), and whether the
    /// track is still as it was when that prediction was made. The
    /// predictions past the batch's columns are stale buffers, kept for
    /// reuse.
    gate_pred: Vec<imm::ImmState>,
    gate_at: Vec<Timestamp>,
    gate_fresh: Vec<bool>,
    col_track: Vec<u32>,
    pairs: Vec<(u32, u32, f64)>,
    row_alone: Vec<f64>,
    col_alone: Vec<f64>,
    row_to_col: Vec<Option<u32>>,
    near_firm: Vec<bool>,
    col_taken: Vec<bool>,
    /// Scratch of `bound::prune_pairs`.
    prune: bound::PruneScratch,
}


pub struct Engine {
    site: LocalFrame,
    radii: (f64, f64),
    sensor_table: SensorTable,
    sensor_names: Vec<Arc<str>>,
    models: Vec<SensorModel>,
    sensor_state: Vec<SensorState>,
    imm: Imm,
    /// Initial model probabilities of a new track.
    mu0: Vec<f64>,
    rules: Lifecycle,
    gate_d2: f64,
    new_track_density: f64,
    init_speed_sigma: f64,
    max_silence_s: f64,
    identified_silence_s: f64,
    identity_gate_m: f64,
    max_speed_mps: f64,
    /// The largest plot error variance (trace of R) of any sensor, at its
    /// maximum range, for the grid's reach bound.
    max_plot_var: f64,
    /// The largest acceleration spectral density of any motion model.
    max_accel_psd: f64,
    /// Some track ended outside a scan end or sweep. Compaction now
    /// counts the ended tracks in the table itself (`compact_if_worth_it`);
    /// the flag is kept for the paths that set it.
    pending_compact: bool,
    /// Live tracks, in order of creation (so of track number).
    tracks: Vec<Track>,
    /// Grid cell → indices into `tracks`.
    grid: cells::TrackCells,
    wide: Vec<u32>,
    /// Identity → index into `tracks`.
    identities: HashMap<Arc<str>, u32>,
    next_number: u64,
    batch: Batch,
    batch_serial: u64,
    next_sweep: Option<Timestamp>,
    now: Timestamp,
    stats: EngineStats,
    assigner: SparseAssigner,
    scratch: Scratch,
    /// `tracking.association`: which `close_batch` runs.
    association: Association,
    /// `tracking.batch_scan_fraction`: a batch spans at most this fraction
    /// of its sensor's scan period.
    batch_fraction: f64,
    /// `tracking.max_new_tracks_per_batch`, and the starts made in the
    /// batch being closed.
    max_starts: u32,
    batch_starts: u32,
    /// `tracking.max_plots_per_batch`.
    max_plots: usize,
    /// What the two caps dropped, by sensor.
    dropped: Vec<Dropped>,
    /// JPDA settings and scratch (jpda_batch.rs).
    jpda: jpda_batch::Jpda,
    /// Candidate tracks of a transponder report (identity.rs).
    report_cand: Vec<u32>,
    /// `tracking.plots_to_start`: 2, a track starts on a pair of plots
    /// (initiate.rs); 1, on any plot no track takes.
    plots_to_start: u32,
    /// Plots waiting for a second one (initiate.rs).
    candidates: initiate::Candidates,
}

/// Gates a plot against an IMM prediction made `lead` seconds before the
/// plot: the plot is inside if it is inside any model's gate (the widest
/// model decides at the onset of a manoeuvre, while the quiet model still
/// holds most of the probability: common IMM practice). Returns the
/// mixture log-likelihood ln Σ μ_j N_j(z).
pub(crate) fn imm_gate(n_models: usize, pred: &imm::ImmState, lead: f64, z: &Vector2<f64>, r: &Matrix2<f64>, gate_d2: f64) -> Option<f64> {
    let mut inside = false;
    let mut terms = [f64::NEG_INFINITY; imm::MAX_MODELS];
    for j in 0..n_models {
        let mu = pred.mu[j];
        if !(mu > 0.0) {
            continue;
        }
        let mut g = pred.comps[j];
        g.x[0] += g.x[2] * lead;
        g.x[1] += g.x[3] * lead;
        let Some(inn) = innovation(&g, z, r) else { continue };
        inside |= inn.d2 <= gate_d2;
        terms[j] = mu.ln() + inn.log_likelihood();
    }
    if !inside {
        return None;
    }
    let m = terms.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(m + terms.iter().map(|t| (t - m).exp()).sum::<f64>().ln())
}

/// Fibonacci-style hashing of a grid cell's two coordinates (the Fx
/// hash's step, common practice), for the cells outside the track grid's
/// dense part (cells.rs). The key is two small integers that the engine
/// makes itself, so a multiplicative hash does: the standard library's
/// SipHash (made to resist chosen keys) was a tenth of the engine's time
/// in the busy demo.
#[derive(Default)]
struct CellHasher(u64);

impl std::hash::Hasher for CellHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.write_u64(b as u64);
        }
    }
    fn write_i32(&mut self, v: i32) {
        self.write_u64(v as u32 as u64);
    }
    fn write_u64(&mut self, v: u64) {
        self.0 = (self.0.rotate_left(5) ^ v).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
}

/// [`imm_gate`] on the position part of a prediction (what the GNN path
/// keeps per track and batch): the same arithmetic, so the same result.
fn imm_gate_position(n_models: usize, pred: &imm::PositionPrediction, lead: f64, z: &Vector2<f64>, r: &Matrix2<f64>, gate_d2: f64) -> Option<f64> {
    // The distances first: most pairs that reach this far are outside
    // every gate, and need no logarithms.
    let mut inside = false;
    let mut inns = [None; imm::MAX_MODELS];
    for (j, inn) in inns.iter_mut().enumerate().take(n_models) {
        // A model of probability 0 (or NaN) takes no part.
        if pred.mu[j] > 0.0 {
            let (x, p) = (&pred.x[j], &pred.p[j]);
            let pos = Vector2::new(x[0] + x[2] * lead, x[1] + x[3] * lead);
            *inn = filter::innovation_of_position(&pos, &Matrix2::new(p[0], p[1], p[1], p[2]), z, r);
            inside |= inn.is_some_and(|i| i.d2 <= gate_d2);
        }
    }
    if !inside {
        return None;
    }
    let mut terms = [f64::NEG_INFINITY; imm::MAX_MODELS];
    for ((term, inn), mu) in terms.iter_mut().zip(&inns).zip(&pred.mu).take(n_models) {
        if let Some(inn) = inn {
            *term = mu.ln() + inn.log_likelihood();
        }
    }
    let m = terms.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(m + terms.iter().map(|t| (t - m).exp()).sum::<f64>().ln())
}

/// [`imm_gate`] for the GNN path, which keeps one whole predicted state
/// per track and batch: the same gate and, to rounding, the same
/// log-likelihood, with fewer logarithms. Each model's innovation
/// covariance S is formed as in [`filter::innovation_of_position`];
/// its d² comes from the closed-form inverse, and the mixture is summed
/// as `ln Σ μ_j e^{−(d²_j − d²_min)/2} / √det S_j − d²_min/2 − ln 2π`
/// (one exponential per model and one logarithm in all, where the
/// reference takes three logarithms per model). A model whose S is not
/// positive definite takes no part, as there; should the sum not be a
/// positive finite number, the reference decides.
fn imm_gate_state(n_models: usize, pred: &imm::ImmState, lead: f64, z: &Vector2<f64>, r: &Matrix2<f64>, gate_d2: f64) -> Option<f64> {
    let mut inside = false;
    let mut d2s = [f64::INFINITY; imm::MAX_MODELS];
    let mut dets = [0.0; imm::MAX_MODELS];
    let mut d2_min = f64::INFINITY;
    for j in 0..n_models {
        if !(pred.mu[j] > 0.0) {
            continue;
        }
        let c = &pred.comps[j];
        let n0 = z.x - (c.x[0] + c.x[2] * lead);
        let n1 = z.y - (c.x[1] + c.x[3] * lead);
        let a = c.p[(0, 0)] + r[(0, 0)];
        let b = 0.5 * ((c.p[(0, 1)] + r[(0, 1)]) + (c.p[(0, 1)] + r[(1, 0)]));
        let d = c.p[(1, 1)] + r[(1, 1)];
        let det = a * d - b * b;
        if !(a > 0.0 && det > 0.0 && det.is_finite()) {
            continue;
        }
        let d2 = (d * n0 * n0 - 2.0 * b * n0 * n1 + a * n1 * n1) / det;
        if !d2.is_finite() {
            continue;
        }
        inside |= d2 <= gate_d2;
        d2s[j] = d2;
        dets[j] = det;
        d2_min = d2_min.min(d2);
    }
    if !inside {
        return None;
    }
    let mut sum = 0.0;
    for j in 0..n_models {
        if d2s[j].is_finite() {
            sum += pred.mu[j] * (-0.5 * (d2s[j] - d2_min)).exp() / dets[j].sqrt();
        }
    }
    if sum > 0.0 && sum.is_finite() {
        Some(sum.ln() - 0.5 * d2_min - LN_2PI)
    } else {
        imm_gate(n_models, pred, lead, z, r, gate_d2)
    }
}

/// ln 2π (the double nearest it).
const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// A Gaussian holding only the position and velocity `x` and the
/// position covariance `p` of a [`imm::PositionPrediction::combine`], the
/// parts a track record reads.
fn position_gaussian(x: [f64; 4], p: [f64; 3]) -> Gaussian {
    let mut g = Gaussian { x: StateVec::new(x[0], x[1], x[2], x[3], 0.0), p: StateCov::zeros() };
    g.p[(0, 0)] = p[0];
    g.p[(0, 1)] = p[1];
    g.p[(1, 0)] = p[1];
    g.p[(1, 1)] = p[2];
    g
}

fn cell_of(p: &Vector2<f64>) -> (i32, i32) {
    ((p.x / CELL_M).floor() as i32, (p.y / CELL_M).floor() as i32)
}

impl Engine {
    pub fn new(cfg: &Config) -> Result<Engine, EngineError> {
        if cfg.sensors.len() >= track::NO_SENSOR as usize {
            return Err(EngineError::Setup { key: "sensors".into(), message: "too many sensors".into() });
        }
        let site = LocalFrame::new(Geodetic::new(cfg.site.lat_deg, cfg.site.lon_deg, cfg.site.height_m));
        let t = &cfg.tracking;
        let imm = match t.motion {
            MotionChoice::Imm => Imm::new(
                &[
                    Motion::ConstantVelocity { accel_psd: t.quiet_accel_psd },
                    Motion::CoordinatedTurn { accel_psd: t.turn_accel_psd, turn_psd: t.turn_rate_psd },
                    Motion::ConstantVelocity { accel_psd: t.manoeuvre_accel_psd },
                ],
                Switching::Sojourn(t.model_sojourn_s),
            ),
            MotionChoice::Cv => Imm::new(&[Motion::ConstantVelocity { accel_psd: t.manoeuvre_accel_psd }], Switching::Sojourn(t.model_sojourn_s)),
        }
        .map_err(|e| EngineError::Setup { key: "tracking.model_sojourn_s".into(), message: e.to_string() })?;
        let mu0 = match t.motion {
            MotionChoice::Imm => imm::VESSEL_MU0.to_vec(),
            MotionChoice::Cv => vec![1.0],
        };
        let sensor_table = cfg.sensor_table();
        let sensor_names = cfg.sensors.iter().map(|s| Arc::<str>::from(s.id.as_str())).collect();
        let models = SensorModel::all(cfg, &site);
        let max_plot_var = models
            .iter()
            .map(|m| match m.kind {
                SensorKind::Radar => m.sigma_r_m * m.sigma_r_m + (m.sigma_b_rad * m.max_range_m).powi(2),
                SensorKind::Transponder => 2.0 * m.position_sigma_m * m.position_sigma_m,
            })
            .fold(0.0, f64::max);
        let mut e = Engine {
            radii: radii_of_curvature(cfg.site.lat_deg.to_radians()),
            site,
            sensor_state: vec![SensorState::default(); models.len()],
            models,
            sensor_table,
            sensor_names,
            imm,
            mu0,
            rules: Lifecycle { confirm_hits: t.confirm_hits, confirm_looks: t.confirm_looks, end_hits: t.end_hits, end_looks: t.end_looks },
            // Chi-square quantile with 2 degrees of freedom in closed form:
            // F(x) = 1 - exp(-x/2), so x = -2 ln(1 - p).
            gate_d2: -2.0 * (1.0 - t.gate_probability).ln(),
            new_track_density: t.new_track_density_per_km2 * 1e-6,
            init_speed_sigma: t.init_speed_sigma_mps,
            max_silence_s: t.max_silence_s,
            identified_silence_s: t.identified_silence_s,
            identity_gate_m: t.identity_gate_m,
            max_speed_mps: t.max_speed_kn * crate::feed::tracks::MPS_PER_KNOT,
            pending_compact: false,
            max_plot_var,
            max_accel_psd: t.quiet_accel_psd.max(t.manoeuvre_accel_psd).max(t.turn_accel_psd),
            tracks: Vec::new(),
            grid: cells::TrackCells::default(),
            wide: Vec::new(),
            identities: HashMap::new(),
            next_number: 1,
            batch: Batch::default(),
            batch_serial: 0,
            next_sweep: None,
            now: Timestamp::default(),
            stats: EngineStats::default(),
            assigner: SparseAssigner::new(),
            scratch: Scratch::default(),
            association: t.association,
            batch_fraction: t.batch_scan_fraction,
            max_starts: t.max_new_tracks_per_batch,
            batch_starts: 0,
            max_plots: t.max_plots_per_batch as usize,
            dropped: vec![Dropped::default(); cfg.sensors.len()],
            jpda: jpda_batch::Jpda::new(t.jpda_max_events, t.jpda_pruning),
            report_cand: Vec::new(),
            plots_to_start: t.plots_to_start.min(t.confirm_hits),
            candidates: initiate::Candidates::default(),
        };
        e.candidates = initiate::Candidates::new(&e.models, e.candidate_reach_m());
        e.grid = cells::TrackCells::over(&e.models, CELL_M);
        Ok(e)
    }

    pub fn sensors(&self) -> &SensorTable {
        &self.sensor_table
    }

    pub fn site(&self) -> &LocalFrame {
        &self.site
    }

    /// Takes one record (in time order) and appends the track records it
    /// produced.
    pub fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) {
        let t = rec.time();
        let sensor = rec.sensor() as usize;
        if sensor >= self.models.len() {
            return;
        }
        // Close the open batch if this record does not belong to it.
        if !self.batch.plots.is_empty() {
            let joins = match rec {
                Record::Detection(d) => d.sensor == self.batch.sensor && t.secs_since(self.batch.first) <= self.batch_span(d.sensor),
                _ => false,
            };
            if !joins {
                self.close_batch(out);
            }
        }
        if t > self.now {
            self.now = t;
        }
        self.sweep_until(t, out);
        match rec {
            Record::Detection(d) => self.add_plot(d),
            Record::ScanEnd(s) => self.scan_end(s, out),
            Record::Report(r) => self.report(r, out),
        }
    }

    /// Feed time has reached `now`, and no record earlier than `now` will
    /// follow: close what is due.
    pub fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>) {
        if !self.batch.plots.is_empty() {
            if now.secs_since(self.batch.first) <= self.batch_span(self.batch.sensor) {
                return;
            }
            self.close_batch(out);
        }
        if now > self.now {
            self.now = now;
        }
        self.sweep_until(now, out);
    }

    /// The earliest feed time `t` at which [`Engine::advance`]`(t)` has
    /// work to do: just past the open batch's span (it closes then), or
    /// else the next whole second of the timeout checks. A live driver
    /// can advance the engine as soon as its feed reaches that time
    /// instead of polling; the result is the same either way.
    pub fn next_due(&self) -> Option<Timestamp> {
        if !self.batch.plots.is_empty() {
            // advance closes once `now - first > span` in seconds: one
            // nanosecond past the span, rounded up.
            let span_ns = (self.batch_span(self.batch.sensor) * 1e9).ceil() as i64;
            return Some(Timestamp::from_unix_nanos(self.batch.first.unix_nanos() + span_ns + 1));
        }
        self.next_sweep
    }

    /// End of the feed: process everything held back.
    pub fn finish(&mut self, out: &mut Vec<TrackRecord>) {
        if !self.batch.plots.is_empty() {
            self.close_batch(out);
        }
    }

    /// The latest state of every live track, by track number.
    pub fn picture(&self) -> Vec<TrackRecord> {
        self.tracks.iter().filter(|t| t.status != TrackStatus::Ended).map(|t| self.record_of(t, t.time, &t.est, None)).collect()
    }

    pub fn stats(&self) -> EngineStats {
        let mut s = self.stats.clone();
        s.tentative = self.tracks.iter().filter(|t| t.status == TrackStatus::Tentative).count();
        s.confirmed = self.tracks.iter().filter(|t| t.status == TrackStatus::Confirmed).count();
        s.coasting = self.tracks.iter().filter(|t| t.status == TrackStatus::Coasting).count();
        // Ended tracks not compacted away yet have ended all the same.
        s.tracks_ended += self.tracks.iter().filter(|t| t.status == TrackStatus::Ended).count() as u64;
        s
    }

    /// What the overload limits dropped so far, by sensor (indexed as the
    /// configuration's sensors).
    pub fn dropped(&self) -> &[Dropped] {
        &self.dropped
    }

    /// Whether the batch being closed may start one more tentative track
    /// (`tracking.max_new_tracks_per_batch`); a refusal is counted. The
    /// cap bounds a batch's work however heavy the clutter: each start
    /// costs a filter, a track-table entry and a track record now, and
    /// gating work in every later scan.
    fn may_start(&mut self, sensor: SensorId) -> bool {
        if self.batch_starts < self.max_starts {
            self.batch_starts += 1;
            return true;
        }
        self.stats.starts_dropped += 1;
        if let Some(d) = self.dropped.get_mut(sensor as usize) {
            d.starts += 1;
        }
        false
    }

    /// Number of live tracks.
    pub fn live_tracks(&self) -> usize {
        self.tracks.iter().filter(|t| t.status != TrackStatus::Ended).count()
    }

    fn batch_span(&self, sensor: SensorId) -> f64 {
        self.models[sensor as usize].scan_period_s * self.batch_fraction
    }

    fn add_plot(&mut self, d: &Detection) {
        let m = &self.models[d.sensor as usize];
        let Some(radar) = &m.radar else { return };
        // Overload protection: a batch holds at most max_plots plots, so
        // its gating and association work stay bounded however heavy the
        // clutter (the later plots of a full batch are dropped, counted).
        if self.batch.plots.len() >= self.max_plots {
            self.stats.plots_dropped += 1;
            if let Some(x) = self.dropped.get_mut(d.sensor as usize) {
                x.plots += 1;
            }
            return;
        }
        let (z, r) = radar.convert_with(d.range_m, d.bearing_deg.to_radians(), m.sigma_r_m, &m.bearing_noise);
        if !(z.x.is_finite() && z.y.is_finite()) {
            return;
        }
        self.stats.plots += 1;
        if self.batch.plots.is_empty() {
            self.batch.sensor = d.sensor;
            self.batch.first = d.time;
        }
        self.batch.plots.push(PendingPlot { det: d.clone(), z, r });
    }

    /// Track record for track `t` at `time` from the Gaussian `g`.
    fn record_of(&self, t: &Track, time: Timestamp, g: &Gaussian, sensor: Option<SensorId>) -> TrackRecord {
        let en = Vector2::new(g.x[0], g.x[1]);
        let (lat_deg, lon_deg) = self.site.plane_to_lat_lon_fast(en, self.radii);
        let (speed_kn, course_deg) = speed_course(g.x[2], g.x[3]);
        TrackRecord {
            time,
            track: t.number,
            status: t.status,
            lat_deg,
            lon_deg,
            east_m: g.x[0],
            north_m: g.x[1],
            vel_east_mps: g.x[2],
            vel_north_mps: g.x[3],
            speed_kn,
            course_deg,
            pos_cov_m2: [[g.p[(0, 0)], g.p[(0, 1)]], [g.p[(1, 0)], g.p[(1, 1)]]],
            sensors: sensor.map(|s| vec![self.sensor_names[s as usize].clone()]).unwrap_or_default(),
            identity: t.identity.clone(),
            name: t.vessel.as_ref().and_then(|v| v.name.clone()),
            ship_type: t.vessel.as_ref().and_then(|v| v.ship_type),
            length_m: t.vessel.as_ref().and_then(|v| v.length_m),
            beam_m: t.vessel.as_ref().and_then(|v| v.beam_m),
            identity_conflict: t.identity_conflict,
        }
    }

    /// A status-change record: the track's state moved to `time` without
    /// a measurement.
    fn status_record(&self, t: &Track, time: Timestamp) -> TrackRecord {
        let dt = time.secs_since(t.time).max(0.0);
        let g = if dt > 0.0 {
            let (x, p) = self.imm.predict_position(&t.state, dt).combine(self.imm.n_models());
            position_gaussian(x, p)
        } else {
            t.est
        };
        self.record_of(t, time, &g, None)
    }

    fn new_track(&mut self, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId) -> u32 {
        let g = self.start_gaussian(z, r);
        let state = self.imm.init(g, Some(&self.mu0));
        // Every model starts from `g`, so the combined estimate is `g`
        // (what `combine_fast` gives for such a state).
        let idx = self.tracks.len() as u32;
        let cell = cell_of(z);
        // Built in place in the table: a track is over a kilobyte.
        self.tracks.push(Track::new(self.next_number, state, g, time, sensor));
        self.next_number += 1;
        self.stats.tracks_started += 1;
        let rules = self.rules;
        if let Some(t) = self.tracks.last_mut() {
            t.look(true, &rules);
            t.cell = cell;
        }
        self.grid.push(cell, idx);
        idx
    }

    /// Files track `idx` under the cell of its current position.
    fn refile(&mut self, idx: u32) {
        let t = &self.tracks[idx as usize];
        let cell = cell_of(&Vector2::new(t.est.x[0], t.est.x[1]));
        if cell == t.cell {
            return;
        }
        let old = t.cell;
        self.grid.take_out(old, idx);
        self.grid.push(cell, idx);
        self.tracks[idx as usize].cell = cell;
    }

    /// Updates track `idx` with a position measurement at `time`.
    /// Returns false if the filter refused it.
    fn update_track(&mut self, idx: u32, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId, out: &mut Vec<TrackRecord>) -> bool {
        self.update_track_from(idx, None, z, r, time, sensor, out)
    }

    /// [`Engine::update_track`], given the track's prediction to `time`
    /// if the caller already has it (`predicted`: what `predict_fast`
    /// of the track's state over `time − t.time` gives, made from the
    /// track as it is now), which saves a second prediction.
    #[allow(clippy::too_many_arguments)]
    fn update_track_from(&mut self, idx: u32, predicted: Option<&imm::ImmState>, z: &Vector2<f64>, r: &Matrix2<f64>, time: Timestamp, sensor: SensorId, out: &mut Vec<TrackRecord>) -> bool {
        let t = &self.tracks[idx as usize];
        let fresh;
        let pred = match predicted {
            Some(p) => p,
            None => {
                let dt = time.secs_since(t.time).max(0.0);
                fresh = if dt > 0.0 { self.imm.predict_fast(&t.state, dt) } else { t.state };
                &fresh
            }
        };
        let Some((state, _ll)) = self.imm.update_fast(pred, z, r) else { return false };
        let first_hit_this_scan = match (self.models[sensor as usize].kind, self.sensor_state[sensor as usize].last_scan_end) {
            (SensorKind::Transponder, _) => true,
            (_, last_end) => t.last_hit(sensor).is_none_or(|h| Some(h) <= last_end),
        };
        let rules = self.rules;
        let max_speed = self.max_speed_mps;
        let est = self.imm.combine_fast(&state);
        let t = &mut self.tracks[idx as usize];
        t.state = state;
        t.est = est;
        t.time = time;
        t.note_hit(sensor, time);
        if t.status == TrackStatus::Tentative {
            // A tentative track faster than any vessel here is clutter
            // strung together: end it rather than confirm it.
            if est.x[2].hypot(est.x[3]) > max_speed {
                t.status = TrackStatus::Ended;
                self.pending_compact = true;
                out.push(self.record_of(&self.tracks[idx as usize], time, &est, Some(sensor)));
                return true;
            }
        }
        let t = &mut self.tracks[idx as usize];
        if first_hit_this_scan {
            t.look(true, &rules);
        }
        out.push(self.record_of(&self.tracks[idx as usize], time, &est, Some(sensor)));
        self.refile(idx);
        true
    }

    fn close_batch(&mut self, out: &mut Vec<TrackRecord>) {
        match self.association {
            Association::Gnn => {}
            Association::Jpda => return self.close_batch_jpda(out),
        }
        let batch = std::mem::take(&mut self.batch);
        self.batch_serial += 1;
        self.stats.batches += 1;
        self.batch_starts = 0;
        let serial = self.batch_serial;
        let sensor = batch.sensor;
        let model = &self.models[sensor as usize];
        let pd = model.pd;
        let min_gap = 0.5 * model.scan_period_s;
        // ln of the density of plots that are not this track's: clutter
        // plus new vessels, per m².
        let beta = (model.clutter_density + self.new_track_density).max(1e-15);
        let miss_ln = (1.0 - pd).ln();
        let mut sc = std::mem::take(&mut self.scratch);
        sc.col_track.clear();
        sc.gate_at.clear();
        sc.gate_fresh.clear();
        sc.pairs.clear();
        sc.near_firm.clear();
        sc.near_firm.resize(batch.plots.len(), false);
        for (row, plot) in batch.plots.iter().enumerate() {
            let (cx, cy) = cell_of(&plot.z);
            sc.cand.clear();
            self.grid.gather_around(cx, cy, &mut sc.cand);
            sc.cand.extend(self.wide.iter().copied());
            // Fixed order, whatever the grid's layout. A wide track filed
            // in a nearby cell comes twice: dropping the repeat here costs
            // less than reading every neighbour's flag.
            sc.cand.sort_unstable();
            sc.cand.dedup();
            for &idx in &sc.cand {
                let t = &mut self.tracks[idx as usize];
                if t.status == TrackStatus::Ended {
                    continue;
                }
                // Cheap bound first: the combined estimate moved on by its
                // velocity, with a radius no model's gate (nor the
                // manoeuvre gate) can exceed. Most neighbours of a plot
                // fail it without an IMM prediction.
                {
                    let e = &t.est;
                    let dt = plot.det.time.secs_since(t.time).max(0.0);
                    let de = plot.z.x - (e.x[0] + e.x[2] * dt);
                    let dn = plot.z.y - (e.x[1] + e.x[3] * dt);
                    // A plain square root: `hypot`'s overflow care costs a
                    // libm call per neighbour, and speeds are small.
                    let turn_drift = (e.x[2] * e.x[2] + e.x[3] * e.x[3]).sqrt() * MAX_TURN_RATE * dt * dt * 0.5;
                    let var = e.p[(0, 0)] + e.p[(1, 1)] + dt * dt * (e.p[(2, 2)] + e.p[(3, 3)]) + 2.0 * self.max_accel_psd * dt * dt * dt / 3.0 + plot.r[(0, 0)] + plot.r[(1, 1)];
                    let reach = (SECOND_CHANCE_SCALE * self.gate_d2 * var).sqrt() + turn_drift;
                    if de * de + dn * dn > reach * reach {
                        continue;
                    }
                }
                if t.visit != serial {
                    // First plot of this batch to look at this track: give
                    // it a column and its prediction to this plot's time,
                    // the whole state, as the update wants it: most
                    // tracks that get this far take this very plot, and
                    // then the update reuses it.
                    t.visit = serial;
                    t.col = sc.col_track.len() as u32;
                    let dt = plot.det.time.secs_since(t.time).max(0.0);
                    // In place at the end of the table, its buffer reused
                    // from batch to batch.
                    let col = sc.col_track.len();
                    if sc.gate_pred.len() <= col {
                        sc.gate_pred.push(t.state);
                    }
                    if dt > 0.0 {
                        self.imm.predict_fast_into(&t.state, dt, &mut sc.gate_pred[col]);
                    } else {
                        sc.gate_pred[col] = t.state;
                    }
                    sc.col_track.push(idx);
                    sc.gate_at.push(plot.det.time);
                    sc.gate_fresh.push(true);
                }
                let t = &self.tracks[idx as usize];
                if t.last_hit(sensor).is_some_and(|h| plot.det.time.secs_since(h) < min_gap) {
                    continue;
                }
                let col = t.col as usize;
                let lead = plot.det.time.secs_since(sc.gate_at[col]);
                let Some(ll) = imm_gate_state(self.imm.n_models(), &sc.gate_pred[col], lead, &plot.z, &plot.r, self.gate_d2) else { continue };
                if t.status.is_firm() {
                    sc.near_firm[row] = true;
                }
                // Cost: minus the log-likelihood ratio of "this plot is
                // this track's" against "the track missed and the plot is
                // clutter or a new vessel".
                let cost = -(pd.ln() + ll - miss_ln - beta.ln());
                sc.pairs.push((row as u32, col as u32, cost));
            }
        }
        bound::prune_pairs(&mut sc.pairs, sc.col_track.len(), &mut sc.prune);
        sc.row_alone.clear();
        sc.row_alone.resize(batch.plots.len(), 0.0);
        sc.col_alone.clear();
        sc.col_alone.resize(sc.col_track.len(), 0.0);
        self.assigner.solve(&sc.row_alone, &sc.col_alone, &sc.pairs, &mut sc.row_to_col);
        sc.col_taken.clear();
        sc.col_taken.resize(sc.col_track.len(), false);
        for c in sc.row_to_col.iter().flatten() {
            sc.col_taken[*c as usize] = true;
        }
        for (row, plot) in batch.plots.iter().enumerate() {
            let assigned = sc.row_to_col.get(row).copied().flatten();
            let done = match assigned {
                Some(col) => {
                    let col = col as usize;
                    let idx = sc.col_track[col];
                    let ok = self.update_gated(&mut sc, col, idx, plot, sensor, out);
                    if ok {
                        self.stats.plots_associated += 1;
                    }
                    ok
                }
                None => false,
            };
            if !done && !sc.near_firm[row] {
                // Second chance before a new track: a coasting track (it
                // missed its last look) left without a plot in this batch
                // takes a plot inside its manoeuvre gate (twice the
                // gate distance), so a vessel that turns harder than its
                // filter foresaw keeps its number (common practice).
                let mut best: Option<(f64, usize)> = None;
                for (col, &idx) in sc.col_track.iter().enumerate() {
                    let t = &self.tracks[idx as usize];
                    if t.status != TrackStatus::Coasting || sc.col_taken.get(col).copied().unwrap_or(false) {
                        continue;
                    }
                    if t.last_hit(sensor).is_some_and(|h| plot.det.time.secs_since(h) < min_gap) {
                        continue;
                    }
                    let lead = plot.det.time.secs_since(sc.gate_at[col]);
                    if let Some(ll) = imm_gate_state(self.imm.n_models(), &sc.gate_pred[col], lead, &plot.z, &plot.r, SECOND_CHANCE_SCALE * self.gate_d2)
                        && best.is_none_or(|(b, _)| ll > b)
                    {
                        best = Some((ll, col));
                    }
                }
                if let Some((_, col)) = best {
                    sc.col_taken[col] = true;
                    let idx = sc.col_track[col];
                    if self.update_gated(&mut sc, col, idx, plot, sensor, out) {
                        self.stats.plots_associated += 1;
                        continue;
                    }
                }
                self.start_or_hold(&plot.z, &plot.r, plot.det.time, sensor, min_gap, out);
            }
        }
        self.scratch = sc;
        // Give the plot buffer back for reuse.
        let mut plots = batch.plots;
        plots.clear();
        self.batch.plots = plots;
    }

    /// Updates column `col`'s track `idx` with `plot`, reusing the
    /// column's gating prediction when it was made to this plot's time
    /// from the track as it still is.
    fn update_gated(&mut self, sc: &mut Scratch, col: usize, idx: u32, plot: &PendingPlot, sensor: SensorId, out: &mut Vec<TrackRecord>) -> bool {
        let reuse = sc.gate_fresh[col] && sc.gate_at[col] == plot.det.time;
        sc.gate_fresh[col] = false;
        let pred = if reuse { Some(&sc.gate_pred[col]) } else { None };
        self.update_track_from(idx, pred, &plot.z, &plot.r, plot.det.time, sensor, out)
    }

    fn scan_end(&mut self, s: &ScanEnd, out: &mut Vec<TrackRecord>) {
        let sensor = s.sensor as usize;
        let model = &self.models[sensor];
        if model.radar.is_none() {
            return;
        }
        let prev_end = self.sensor_state[sensor].last_scan_end;
        let scan_start = prev_end.unwrap_or_else(|| s.time.plus_secs(-model.scan_period_s));
        let mut ended = 0;
        for i in 0..self.tracks.len() {
            let t = &self.tracks[i];
            if t.status == TrackStatus::Ended {
                ended += 1;
                continue;
            }
            if t.born >= scan_start {
                continue;
            }
            if t.last_hit(s.sensor).is_some_and(|h| Some(h) > prev_end) {
                continue; // hit already counted in this scan
            }
            let dt = s.time.secs_since(t.time).max(0.0);
            let g = t.est;
            let at = Vector2::new(g.x[0] + g.x[2] * dt, g.x[1] + g.x[3] * dt);
            if !self.models[sensor].covers(&at, s.sector_deg) {
                continue;
            }
            let rules = self.rules;
            let t = &mut self.tracks[i];
            if t.look(false, &rules) == LookOutcome::Changed {
                ended += (t.status == TrackStatus::Ended) as usize;
                let rec = self.status_record(&self.tracks[i], s.time);
                out.push(rec);
            }
        }
        self.sensor_state[sensor].last_scan_end = Some(s.time);
        self.compact_if_worth_it(ended);
    }

    /// Runs the one-second timeout checks for every whole second of feed
    /// time up to `t`.
    fn sweep_until(&mut self, t: Timestamp, out: &mut Vec<TrackRecord>) {
        const SEC: i64 = 1_000_000_000;
        let next = match self.next_sweep {
            Some(n) => n,
            None => {
                let first = Timestamp::from_unix_nanos((t.unix_nanos().div_euclid(SEC) + 1) * SEC);
                self.next_sweep = Some(first);
                return;
            }
        };
        if t < next {
            return;
        }
        // Every whole second in turn, not only the latest reached: a track
        // that times out in a gap between records ends at the first second
        // past its limit, however the gap is crossed (by the next record
        // offline, by `advance` calls live). With no track left there is
        // nothing to check and the gap is skipped.
        let last = t.unix_nanos().div_euclid(SEC) * SEC;
        let mut at = next.unix_nanos();
        while at <= last {
            self.sweep(Timestamp::from_unix_nanos(at), out);
            if self.tracks.is_empty() {
                break;
            }
            at += SEC;
        }
        self.next_sweep = Some(Timestamp::from_unix_nanos(last + SEC));
    }

    fn sweep(&mut self, at: Timestamp, out: &mut Vec<TrackRecord>) {
        let mut ended = 0;
        self.wide.clear();
        for i in 0..self.tracks.len() {
            let t = &self.tracks[i];
            if t.status == TrackStatus::Ended {
                ended += 1;
                continue;
            }
            let silence = at.secs_since(t.time);
            let limit = if t.identity.is_some() { self.identified_silence_s } else { self.max_silence_s };
            let g = t.est;
            let dt = silence.max(0.0);
            let at_pos = Vector2::new(g.x[0] + g.x[2] * dt, g.x[1] + g.x[3] * dt);
            if silence > limit {
                let covered = self.models.iter().any(|m| m.covers(&at_pos, None));
                // Inside coverage the look rules end a track; the 4× limit
                // is a backstop for a radar that has stopped sending.
                if !covered || silence > 4.0 * limit {
                    let rec = {
                        let t = &mut self.tracks[i];
                        t.status = TrackStatus::Ended;
                        self.status_record(&self.tracks[i], at)
                    };
                    out.push(rec);
                    ended += 1;
                    continue;
                }
            }
            // Reach over the next second: drift plus a generous gate on
            // the grown position uncertainty and the widest plot error.
            let horizon = dt + 1.0;
            let speed = (g.x[2] * g.x[2] + g.x[3] * g.x[3]).sqrt() + 3.0 * (g.p[(2, 2)] + g.p[(3, 3)]).sqrt();
            let pos_var = g.p[(0, 0)] + g.p[(1, 1)] + horizon * horizon * (g.p[(2, 2)] + g.p[(3, 3)]) + self.max_plot_var;
            let reach = speed * horizon + (self.gate_d2 * pos_var).sqrt();
            let wide = reach > CELL_M;
            self.tracks[i].wide = wide;
            if wide {
                self.wide.push(i as u32);
            }
        }
        self.compact_if_worth_it(ended);
    }

    /// Compacts once the `ended` tracks still in the table are a third of
    /// it. Until then they stay where they are, skipped by every loop and
    /// by gating (and `identities` entries pointing at them are ignored):
    /// moving every later track down after each scan end was a tenth of
    /// the engine's time on the busy demo. The order of the live tracks,
    /// and so every result, is the same either way.
    fn compact_if_worth_it(&mut self, ended: usize) {
        if ended > 0 && 3 * ended >= self.tracks.len() {
            self.compact();
        }
    }

    /// Drops ended tracks and refiles the rest.
    fn compact(&mut self) {
        self.pending_compact = false;
        let before = self.tracks.len();
        // Every track, ended or not, is filed in its cell: emptying those
        // cells empties the grid, at a cost in tracks rather than in
        // cells. They are refilled in place: most keep their tracks from
        // one scan to the next, so their buffers are reused.
        for t in &self.tracks {
            self.grid.empty(t.cell);
        }
        self.tracks.retain(|t| t.status != TrackStatus::Ended);
        self.stats.tracks_ended += (before - self.tracks.len()) as u64;
        self.wide.clear();
        self.identities.clear();
        for (i, t) in self.tracks.iter().enumerate() {
            self.grid.push(t.cell, i as u32);
            if t.wide {
                self.wide.push(i as u32);
            }
            if let Some(id) = &t.identity {
                self.identities.insert(id.clone(), i as u32);
            }
        }
        self.grid.drop_empty();
    }
}

#[cfg(test)]
mod gate_tests {
    //! The GNN path's gate ([`imm_gate_state`]) against the reference
    //! [`imm_gate`], which forms each model's innovation by
    //! [`filter::innovation`] (the path the filterpy fixtures pin).
    use super::*;
    use crate::engine::filter::fast_path_tests::random_gaussian;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    #[test]
    fn fast_gate_is_the_reference_gate() {
        let mut rng = ChaCha8Rng::seed_from_u64(0x9a7e);
        let imm = Imm::vessel_default();
        let n = imm.n_models();
        let gate_d2 = 13.8155; // χ²(2) at 0.999 (see the gating tests).
        let (mut inside, mut outside, mut worst) = (0, 0, 0.0f64);
        for trial in 0..20_000 {
            let mut s = imm.init(random_gaussian(&mut rng), Some(&imm::VESSEL_MU0));
            for c in s.comps.iter_mut().skip(1) {
                *c = random_gaussian(&mut rng);
            }
            let mut mu = [rng.random::<f64>(), rng.random::<f64>(), rng.random::<f64>()];
            if trial % 4 == 0 {
                mu[trial % 3] = 0.0;
            }
            if trial % 7 == 0 {
                // A model of tiny weight: the reference keeps it in logs.
                mu[(trial + 1) % 3] = 1e-300;
            }
            let total: f64 = mu.iter().sum();
            s.mu = mu.map(|m| m / total);
            let lead = if trial % 2 == 0 { 0.0 } else { rng.random_range(0.0..0.2) };
            let k = trial % 3;
            let c = &s.comps[k];
            // Plots near one model's predicted position, at 0–6 sigma.
            let sig = (c.p[(0, 0)] + c.p[(1, 1)]).sqrt();
            let z = Vector2::new(c.x[0] + c.x[2] * lead, c.x[1] + c.x[3] * lead) + Vector2::new(rng.random_range(-3.0..3.0), rng.random_range(-3.0..3.0)) * sig;
            let rr = Matrix2::new(144.0, 3.0, 3.0, 400.0);
            let want = imm_gate(n, &s, lead, &z, &rr, gate_d2);
            let got = imm_gate_state(n, &s, lead, &z, &rr, gate_d2);
            match (want, got) {
                (Some(w), Some(g)) => {
                    inside += 1;
                    let err = (g - w).abs() / w.abs().max(1.0);
                    worst = worst.max(err);
                    assert!(err < 1e-9, "trial {trial}: ll {g} vs reference {w}");
                }
                (None, None) => outside += 1,
                _ => {
                    // Only a d² within rounding of the gate may differ.
                    let d2 = (0..n)
                        .filter(|&j| s.mu[j] > 0.0)
                        .filter_map(|j| {
                            let mut g = s.comps[j];
                            g.x[0] += g.x[2] * lead;
                            g.x[1] += g.x[3] * lead;
                            filter::innovation(&g, &z, &rr).map(|i| i.d2)
                        })
                        .fold(f64::INFINITY, f64::min);
                    assert!((d2 - gate_d2).abs() < 1e-9 * gate_d2, "trial {trial}: gate decisions differ at d² {d2}");
                }
            }
        }
        assert!(inside > 2_000 && outside > 2_000, "both sides of the gate tried: {inside} in, {outside} out");
        assert!(worst < 1e-9, "worst relative ll error {worst}");
    }
}
