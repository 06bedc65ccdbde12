//! Settings: embedded defaults, then a TOML file, then `SKERRY__*`
//! environment variables (CONTRACT.md §3).
//!
//! Loading checks every value and names the offending key
//! (`sensors[1].range_sigma_m`), so a bad configuration stops start-up with
//! a message an operator can act on.

use crate::feed::{SensorKind, SensorTable};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::path::Path;

/// The defaults every configuration starts from (all keys but the site
/// and the sensors).
pub const DEFAULTS_TOML: &str = include_str!("defaults.toml");

/// An embedded configuration for trying skerry without writing one: the
/// invented harbour of the demo feeds.
pub const DEMO_TOML: &str = include_str!("../demo-feeds/demo-site.toml");

#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("{file}: {message}")]
    Load { file: String, message: String },
    #[error("{file}: `{key}`: {message}")]
    Invalid { file: String, key: String, message: String },
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Config {
    pub site: Site,
    #[serde(default)]
    pub sensors: Vec<SensorConfig>,
    pub tracking: TrackingConfig,
    pub feed: FeedConfig,
    pub serve: ServeConfig,
    #[serde(default)]
    pub record: Option<RecordConfig>,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Site {
    #[serde(default)]
    pub name: String,
    pub lat_deg: f64,
    pub lon_deg: f64,
    /// Ellipsoidal height of the site origin; the plane is tangent there.
    #[serde(default)]
    pub height_m: f64,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SensorConfig {
    pub id: String,
    pub kind: SensorKind,
    pub lat_deg: Option<f64>,
    pub lon_deg: Option<f64>,
    /// Antenna height above the ellipsoid (taken as above sea level).
    #[serde(default)]
    pub height_m: f64,
    pub range_sigma_m: Option<f64>,
    pub bearing_sigma_deg: Option<f64>,
    #[serde(default = "default_pd")]
    pub detection_probability: f64,
    #[serde(default = "default_clutter")]
    pub clutter_per_scan: f64,
    pub max_range_m: Option<f64>,
    pub scan_period_s: Option<f64>,
    /// Transponders: 1-sigma position error of a report.
    pub position_sigma_m: Option<f64>,
    /// ASTERIX data source identifier (CONTRACT.md §8).
    pub asterix_sac: Option<u8>,
    pub asterix_sic: Option<u8>,
    /// Transponders: a UDP address for NMEA 0183 sentences (§8).
    pub nmea_udp: Option<String>,
    /// Source addresses allowed to send for this sensor (empty: any).
    #[serde(default)]
    pub allow_from: Vec<String>,
}

fn default_pd() -> f64 {
    0.9
}
fn default_clutter() -> f64 {
    10.0
}

/// Association method.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Association {
    Gnn,
    Jpda,
}

/// Motion model set.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MotionChoice {
    /// The vessel IMM: quiet straight running, manoeuvres, speed changes.
    Imm,
    /// A single nearly-constant-velocity model.
    Cv,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TrackingConfig {
    pub association: Association,
    pub motion: MotionChoice,
    /// Probability that a true plot falls inside its track's gate.
    pub gate_probability: f64,
    /// A tentative track is confirmed after `confirm_hits` hits in its
    /// last `confirm_looks` looks.
    pub confirm_hits: u32,
    pub confirm_looks: u32,
    /// A firm track ends with fewer than `end_hits` hits in its last
    /// `end_looks` looks.
    pub end_hits: u32,
    pub end_looks: u32,
    /// A track with no update for this long while outside every sensor's
    /// coverage ends (s).
    pub max_silence_s: f64,
    /// A track that holds a transponder identity is kept this long without
    /// an update (s): reports at anchor come every 3 minutes.
    pub identified_silence_s: f64,
    /// 1-sigma speed of a new track on each axis (m/s).
    pub init_speed_sigma_mps: f64,
    /// A tentative track estimated faster than this is ended, not
    /// confirmed (kn).
    pub max_speed_kn: f64,
    /// Expected new vessels per km² per scan, for the cost of starting a
    /// track.
    pub new_track_density_per_km2: f64,
    /// IMM: accel PSD of the quiet straight-running model (m²/s³).
    pub quiet_accel_psd: f64,
    /// IMM: accel PSD of the manoeuvring straight-running model, and of
    /// the single model of `motion = "cv"` (m²/s³).
    pub manoeuvre_accel_psd: f64,
    /// IMM: accel PSD on the linear axes of the coordinated-turn model (m²/s³).
    pub turn_accel_psd: f64,
    /// IMM: turn-rate PSD of the coordinated-turn model (rad²/s³).
    pub turn_rate_psd: f64,
    /// IMM: mean time spent in each model before switching (s).
    pub model_sojourn_s: [f64; 3],
    /// JPDA: clusters with more joint events than this use the
    /// approximation.
    pub jpda_max_events: u64,
    /// JPDA: exact enumeration keeps only the most probable of the joint
    /// events that differ by a permutation of the same plots among the
    /// same tracks (JPDA*, against track coalescence); false: plain JPDA.
    pub jpda_pruning: bool,
    /// Plots of one radar are associated together while they lie within
    /// this fraction of its scan period of the batch's first plot. Smaller
    /// batches leave the engine sooner (a batch is held until feed time
    /// passes its span) at some cost in joint association; 0 batches only
    /// plots of the same time.
    pub batch_scan_fraction: f64,
    /// Most tentative tracks one batch may start; further plots that would
    /// start one are dropped and counted (`skerry_track_starts_dropped_total`),
    /// so heavy clutter cannot make a batch, or the scans after it, slow.
    pub max_new_tracks_per_batch: u32,
    /// Plots needed to start a tentative track: 2 (a plot no track takes
    /// waits up to 1.5 scans for a second one in its gate), or 1 (every
    /// such plot starts one). Never more than `confirm_hits`: with
    /// `confirm_hits = 1` a track starts on one plot.
    pub plots_to_start: u32,
    /// Most plots one batch takes; the later plots of a full batch are
    /// dropped and counted (`skerry_plots_dropped_total`). Overload
    /// protection for a radar swamped by clutter or interference: it
    /// bounds a batch's gating and association work.
    pub max_plots_per_batch: u32,
    /// A report whose identity a track holds must fall within this many
    /// metres of it, or it raises an identity conflict.
    pub identity_gate_m: f64,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FeedConfig {
    /// Records further than this from the feed's median time (offline) or
    /// the clock (live) are rejected as implausible (s).
    pub max_time_offset_s: f64,
    /// Longest accepted line or datagram (bytes).
    pub max_record_bytes: usize,
}

#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ServeConfig {
    pub udp_addr: String,
    pub grpc_addr: String,
    pub http_addr: String,
    /// ASTERIX data blocks (CONTRACT.md §8); absent: not listened for.
    #[serde(default)]
    pub asterix_udp: Option<String>,
    /// Requested receive buffer of the UDP socket (bytes, SO_RCVBUF); the
    /// kernel may grant less (net.core.rmem_max).
    #[serde(default = "serve_default::udp_recv_buffer_bytes")]
    pub udp_recv_buffer_bytes: usize,
    /// How far out of order records may arrive (feed seconds), and how long
    /// a quiet feed is waited for before what it sent is released.
    #[serde(default = "serve_default::reorder_window_s")]
    pub reorder_window_s: f64,
    /// A sensor that sends nothing for this long (s) no longer holds the
    /// reorder buffer or takes part in the clock comparison.
    #[serde(default = "serve_default::reorder_idle_s")]
    pub reorder_idle_s: f64,
    /// Sensor clocks further apart than this (s) disagree: the odd one out
    /// is reported ahead or behind, and does not hold the others back.
    #[serde(default = "serve_default::reorder_max_skew_s")]
    pub reorder_max_skew_s: f64,
    /// Most records held in the reorder buffer at once.
    #[serde(default = "serve_default::reorder_max_held")]
    pub reorder_max_held: usize,
    /// Release a radar's scan at its scan_end without waiting for the
    /// window, while that radar's records come in order.
    #[serde(default)]
    pub reorder_scan_end_closes: bool,
    /// Records queued between the ingest tasks and the reorder buffer; a
    /// full queue drops and counts.
    #[serde(default = "serve_default::ingest_queue")]
    pub ingest_queue: usize,
    /// Ordered batches queued for the engine task.
    #[serde(default = "serve_default::engine_queue")]
    pub engine_queue: usize,
    /// Updates queued per subscriber; a subscriber further behind skips.
    #[serde(default = "serve_default::subscriber_queue")]
    pub subscriber_queue: usize,
    /// Most picture subscribers at once.
    #[serde(default = "serve_default::max_subscribers")]
    pub max_subscribers: usize,
    /// Period of the health figures (rates, the health stream), seconds.
    #[serde(default = "serve_default::health_interval_s")]
    pub health_interval_s: f64,
    /// A radar silent for more than this many of its scan periods makes
    /// the daemon degraded.
    #[serde(default = "serve_default::silent_scans")]
    pub silent_scans: f64,
    /// A transponder silent for longer than this (s) makes the daemon
    /// degraded.
    #[serde(default = "serve_default::transponder_silent_s")]
    pub transponder_silent_s: f64,
    /// A queue fuller than this fraction makes the daemon degraded.
    #[serde(default = "serve_default::queue_warn_fraction")]
    pub queue_warn_fraction: f64,
    /// At shutdown, how long subscribers get to read what is queued for
    /// them (s).
    #[serde(default = "serve_default::shutdown_flush_s")]
    pub shutdown_flush_s: f64,
    /// Bad input is logged at most once per sensor and reason per this
    /// many seconds, with the count of lines suppressed.
    #[serde(default = "serve_default::bad_input_log_interval_s")]
    pub bad_input_log_interval_s: f64,
    /// Log lines as JSON objects instead of text.
    #[serde(default)]
    pub log_json: bool,
}

/// Defaults of the [serve] keys (also written in defaults.toml).
mod serve_default {
    pub fn udp_recv_buffer_bytes() -> usize {
        8 << 20
    }
    pub fn reorder_window_s() -> f64 {
        1.0
    }
    pub fn reorder_idle_s() -> f64 {
        10.0
    }
    pub fn reorder_max_skew_s() -> f64 {
        30.0
    }
    pub fn reorder_max_held() -> usize {
        500_000
    }
    pub fn ingest_queue() -> usize {
        65_536
    }
    pub fn engine_queue() -> usize {
        64
    }
    pub fn subscriber_queue() -> usize {
        4096
    }
    pub fn max_subscribers() -> usize {
        256
    }
    pub fn health_interval_s() -> f64 {
        1.0
    }
    pub fn silent_scans() -> f64 {
        3.0
    }
    pub fn transponder_silent_s() -> f64 {
        600.0
    }
    pub fn queue_warn_fraction() -> f64 {
        0.8
    }
    pub fn shutdown_flush_s() -> f64 {
        2.0
    }
    pub fn bad_input_log_interval_s() -> f64 {
        10.0
    }
}

/// `[record]`: recording of every accepted record, and the engine
/// snapshots that make a warm restart possible (CONTRACT.md §7). The
/// section is absent by default: nothing is recorded.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RecordConfig {
    /// Folder of the hourly recording files `YYYY-MM-DDTHH.jsonl` and of
    /// the snapshots.
    pub dir: String,
    /// Seconds between fsyncs of the open recording file (lines are
    /// flushed to the operating system after every batch).
    #[serde(default = "RecordConfig::fsync_interval_s")]
    pub fsync_interval_s: f64,
    /// Records held for the writer; when it is full (slow or failing
    /// disk), records are not recorded and are counted, and tracking goes
    /// on.
    #[serde(default = "RecordConfig::queue")]
    pub queue: usize,
    /// Recording files whose hour ended more than this many hours ago are
    /// deleted, oldest first.
    #[serde(default = "RecordConfig::keep_hours")]
    pub keep_hours: f64,
    /// Most bytes the recording files may take together; beyond it the
    /// oldest closed files are deleted. Absent: no limit.
    #[serde(default)]
    pub max_bytes: Option<u64>,
    /// Seconds of wall-clock time between engine snapshots; 0 turns them
    /// off.
    #[serde(default = "RecordConfig::snapshot_interval_s")]
    pub snapshot_interval_s: f64,
    /// How many of the newest snapshots are kept.
    #[serde(default = "RecordConfig::snapshot_keep")]
    pub snapshot_keep: usize,
    /// Restore the newest snapshot and the recording after it on start.
    #[serde(default = "RecordConfig::restore")]
    pub restore: bool,
}

impl RecordConfig {
    pub fn fsync_interval_s() -> f64 {
        1.0
    }
    pub fn queue() -> usize {
        65_536
    }
    /// 30 days: a common retention period for surveillance recordings
    /// (common practice; the local authority sets the real figure).
    pub fn keep_hours() -> f64 {
        720.0
    }
    pub fn snapshot_interval_s() -> f64 {
        60.0
    }
    pub fn snapshot_keep() -> usize {
        3
    }
    pub fn restore() -> bool {
        true
    }
}

/// A listening address as `host:port` with a numeric host
/// (`127.0.0.1:4103`, `[::]:4104`): the daemon binds it as given, without
/// name lookup.
fn socket_addr(s: &str) -> Result<std::net::SocketAddr, String> {
    s.trim().parse().map_err(|_| format!("`{s}` is not a socket address like 127.0.0.1:4103"))
}

impl Config {
    /// Loads the defaults, then `file` (if any), then the environment
    /// overrides in `env` (pairs like `SKERRY__SERVE__UDP_ADDR`).
    pub fn load(file: Option<&Path>, env: &HashMap<String, String>) -> Result<Config, ConfigError> {
        let name = file.map(|p| p.display().to_string()).unwrap_or_else(|| "(embedded demo configuration)".into());
        let text = match file {
            Some(p) => std::fs::read_to_string(p).map_err(|e| ConfigError::Load { file: name.clone(), message: format!("cannot read: {e}") })?,
            None => DEMO_TOML.to_string(),
        };
        Self::from_toml_str(&text, &name, env)
    }

    /// Reads the process environment's `SKERRY__*` variables.
    pub fn env_overrides() -> HashMap<String, String> {
        std::env::vars().filter(|(k, _)| k.starts_with("SKERRY__")).collect()
    }

    pub fn from_toml_str(text: &str, name: &str, env: &HashMap<String, String>) -> Result<Config, ConfigError> {
        use config::{Environment, File, FileFormat};
        // Parse the file on its own first: the toml crate's errors carry
        // the line and column, which the layered loader loses.
        if let Err(e) = toml::from_str::<toml::Table>(text) {
            return Err(ConfigError::Load { file: name.into(), message: e.to_string().trim().to_string() });
        }
        let built = config::Config::builder()
            .add_source(File::from_str(DEFAULTS_TOML, FileFormat::Toml))
            .add_source(File::from_str(text, FileFormat::Toml))
            .add_source(Environment::with_prefix("SKERRY").prefix_separator("__").separator("__").try_parsing(true).source(Some(env.clone())))
            .build()
            .map_err(|e| ConfigError::Load { file: name.into(), message: e.to_string() })?;
        let cfg: Config = built.try_deserialize().map_err(|e| ConfigError::Load { file: name.into(), message: e.to_string() })?;
        cfg.validate().map_err(|(key, message)| ConfigError::Invalid { file: name.into(), key, message })?;
        Ok(cfg)
    }

    /// Range and consistency checks; the error names the key.
    pub fn validate(&self) -> Result<(), (String, String)> {
        fn bad(key: impl Into<String>, msg: impl Into<String>) -> Result<(), (String, String)> {
            Err((key.into(), msg.into()))
        }
        let lat_ok = |v: f64| v.is_finite() && (-90.0..=90.0).contains(&v);
        let lon_ok = |v: f64| v.is_finite() && (-180.0..=180.0).contains(&v);
        if !lat_ok(self.site.lat_deg) {
            return bad("site.lat_deg", "must be a latitude in [-90, 90]");
        }
        if !lon_ok(self.site.lon_deg) {
            return bad("site.lon_deg", "must be a longitude in [-180, 180]");
        }
        if self.sensors.len() > u16::MAX as usize {
            return bad("sensors", "too many sensors");
        }
        let mut seen = std::collections::HashSet::new();
        let mut sources: HashMap<(u8, u8), usize> = HashMap::new();
        for (i, s) in self.sensors.iter().enumerate() {
            let k = |f: &str| format!("sensors[{i}].{f}");
            if s.id.is_empty() {
                return bad(k("id"), "must not be empty");
            }
            if !seen.insert(s.id.as_str()) {
                return bad(k("id"), format!("`{}` is used by an earlier sensor", s.id));
            }
            let positive = |v: Option<f64>, f: &str| -> Result<(), (String, String)> {
                match v {
                    None => bad(k(f), format!("is required for a {} sensor", s.kind.as_str())),
                    Some(x) if !(x.is_finite() && x > 0.0) => bad(k(f), format!("must be a positive number (got {x})")),
                    _ => Ok(()),
                }
            };
            match s.kind {
                SensorKind::Radar => {
                    match s.lat_deg {
                        Some(v) if lat_ok(v) => {}
                        Some(_) => return bad(k("lat_deg"), "must be a latitude in [-90, 90]"),
                        None => return bad(k("lat_deg"), "is required for a radar"),
                    }
                    match s.lon_deg {
                        Some(v) if lon_ok(v) => {}
                        Some(_) => return bad(k("lon_deg"), "must be a longitude in [-180, 180]"),
                        None => return bad(k("lon_deg"), "is required for a radar"),
                    }
                    positive(s.range_sigma_m, "range_sigma_m")?;
                    positive(s.bearing_sigma_deg, "bearing_sigma_deg")?;
                    positive(s.max_range_m, "max_range_m")?;
                    positive(s.scan_period_s, "scan_period_s")?;
                    if !(s.height_m.is_finite() && (-100.0..10_000.0).contains(&s.height_m)) {
                        return bad(k("height_m"), "must be between -100 and 10000 m");
                    }
                    if !(s.detection_probability > 0.0 && s.detection_probability < 1.0) {
                        return bad(k("detection_probability"), "must be in (0, 1)");
                    }
                    if !(s.clutter_per_scan.is_finite() && s.clutter_per_scan >= 0.0) {
                        return bad(k("clutter_per_scan"), "must be ≥ 0");
                    }
                }
                SensorKind::Transponder => positive(s.position_sigma_m, "position_sigma_m")?,
            }
            // Trade inputs (CONTRACT.md §8): an ASTERIX source names a
            // radar, an NMEA listener belongs to a transponder.
            match (s.asterix_sac, s.asterix_sic) {
                (Some(_), None) => return bad(k("asterix_sic"), "must be given with asterix_sac"),
                (None, Some(_)) => return bad(k("asterix_sac"), "must be given with asterix_sic"),
                (Some(sac), Some(sic)) => {
                    if s.kind != SensorKind::Radar {
                        return bad(k("asterix_sac"), format!("only a radar sensor has an ASTERIX source (this one is a {})", s.kind.as_str()));
                    }
                    if let Some(first) = sources.get(&(sac, sic)) {
                        return bad(k("asterix_sic"), format!("SAC {sac} / SIC {sic} is already used by sensors[{first}]"));
                    }
                    sources.insert((sac, sic), i);
                }
                (None, None) => {}
            }
            if let Some(addr) = &s.nmea_udp {
                if s.kind != SensorKind::Transponder {
                    return bad(k("nmea_udp"), format!("only a transponder sensor has an NMEA listener (this one is a {})", s.kind.as_str()));
                }
                socket_addr(addr).map_err(|m| (k("nmea_udp"), m))?;
            }
        }
        if let Some(addr) = &self.serve.asterix_udp {
            socket_addr(addr).map_err(|m| ("serve.asterix_udp".to_string(), m))?;
        }
        let t = &self.tracking;
        if !(t.gate_probability > 0.0 && t.gate_probability < 1.0) {
            return bad("tracking.gate_probability", "must be in (0, 1)");
        }
        if t.confirm_hits == 0 || t.confirm_hits > t.confirm_looks || t.confirm_looks > 32 {
            return bad("tracking.confirm_hits", "need 1 ≤ confirm_hits ≤ confirm_looks ≤ 32");
        }
        if t.end_hits == 0 || t.end_hits > t.end_looks || t.end_looks > 32 {
            return bad("tracking.end_hits", "need 1 ≤ end_hits ≤ end_looks ≤ 32");
        }
        for (key, v) in [
            ("tracking.max_silence_s", t.max_silence_s),
            ("tracking.identified_silence_s", t.identified_silence_s),
            ("tracking.init_speed_sigma_mps", t.init_speed_sigma_mps),
            ("tracking.max_speed_kn", t.max_speed_kn),
            ("tracking.quiet_accel_psd", t.quiet_accel_psd),
            ("tracking.manoeuvre_accel_psd", t.manoeuvre_accel_psd),
            ("tracking.turn_accel_psd", t.turn_accel_psd),
            ("tracking.turn_rate_psd", t.turn_rate_psd),
            ("tracking.identity_gate_m", t.identity_gate_m),
            ("feed.max_time_offset_s", self.feed.max_time_offset_s),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return bad(key, format!("must be a positive number (got {v})"));
            }
        }
        if !(t.new_track_density_per_km2.is_finite() && t.new_track_density_per_km2 >= 0.0) {
            return bad("tracking.new_track_density_per_km2", "must be ≥ 0");
        }
        if !(t.batch_scan_fraction.is_finite() && (0.0..=0.5).contains(&t.batch_scan_fraction)) {
            return bad("tracking.batch_scan_fraction", format!("must be in [0, 0.5] (got {})", t.batch_scan_fraction));
        }
        if t.max_new_tracks_per_batch == 0 {
            return bad("tracking.max_new_tracks_per_batch", "must be at least 1");
        }
        if !(1..=2).contains(&t.plots_to_start) {
            return bad("tracking.plots_to_start", format!("must be 1 or 2 (got {})", t.plots_to_start));
        }
        if t.max_plots_per_batch == 0 {
            return bad("tracking.max_plots_per_batch", "must be at least 1");
        }
        if t.model_sojourn_s.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
            return bad("tracking.model_sojourn_s", "each must be a positive number of seconds");
        }
        if let Some(r) = &self.record {
            if r.dir.trim().is_empty() {
                return bad("record.dir", "must name a folder");
            }
            if !(r.fsync_interval_s.is_finite() && r.fsync_interval_s > 0.0) {
                return bad("record.fsync_interval_s", format!("must be a positive number of seconds (got {})", r.fsync_interval_s));
            }
            if r.queue == 0 {
                return bad("record.queue", "must be at least 1");
            }
            if !(r.keep_hours.is_finite() && r.keep_hours > 0.0) {
                return bad("record.keep_hours", format!("must be a positive number of hours (got {})", r.keep_hours));
            }
            if r.max_bytes == Some(0) {
                return bad("record.max_bytes", "must be at least 1 (leave it out for no limit)");
            }
            if !(r.snapshot_interval_s.is_finite() && r.snapshot_interval_s >= 0.0) {
                return bad("record.snapshot_interval_s", format!("must be ≥ 0 seconds, 0 for no snapshots (got {})", r.snapshot_interval_s));
            }
            if r.snapshot_keep == 0 {
                return bad("record.snapshot_keep", "must be at least 1");
            }
        }
        Ok(())
    }

    pub fn sensor_table(&self) -> SensorTable {
        SensorTable::new(self.sensors.iter().map(|s| (s.id.as_str(), s.kind)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn load(text: &str) -> Result<Config, ConfigError> {
        Config::from_toml_str(text, "test.toml", &HashMap::new())
    }

    const GOOD: &str = r#"
[site]
name = "Test"
lat_deg = 56.45
lon_deg = 7.35

[[sensors]]
id = "north-mast"
kind = "radar"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 12.0
bearing_sigma_deg = 0.3
detection_probability = 0.9
clutter_per_scan = 40.0
max_range_m = 18000.0
scan_period_s = 2.5

[[sensors]]
id = "shore-transponders"
kind = "transponder"
position_sigma_m = 10.0

[tracking]
association = "gnn"
"#;

    #[test]
    fn contract_example_loads_with_defaults() {
        let c = load(GOOD).unwrap();
        assert_eq!(c.sensors.len(), 2);
        assert_eq!(c.tracking.association, Association::Gnn);
        assert_eq!(c.tracking.confirm_hits, 4);
        assert_eq!(c.serve.udp_addr, "127.0.0.1:4100");
    }

    #[test]
    fn errors_name_the_key() {
        let e = load(&GOOD.replace("range_sigma_m = 12.0", "range_sigma_m = -12.0")).unwrap_err().to_string();
        assert!(e.contains("sensors[0].range_sigma_m"), "{e}");
        let e = load(&GOOD.replace("position_sigma_m = 10.0", "")).unwrap_err().to_string();
        assert!(e.contains("sensors[1].position_sigma_m"), "{e}");
        let e = load(&GOOD.replace("association = \"gnn\"", "association = \"nearest\"")).unwrap_err().to_string();
        assert!(e.contains("association") || e.contains("nearest"), "{e}");
        let e = load(&GOOD.replace("scan_period_s = 2.5", "scan_period_s = 2.5\nscan_perod_s = 3")).unwrap_err().to_string();
        assert!(e.contains("scan_perod_s"), "{e}");
        let e = load("[site\nlat_deg = 1").unwrap_err().to_string();
        assert!(e.contains("line 1"), "{e}");
        let e = load(&GOOD.replace("kind = \"transponder\"", "kind = \"radar\"\nlat_deg = 56.4")).unwrap_err().to_string();
        assert!(e.contains("sensors[1].lon_deg"), "{e}");
    }

    #[test]
    fn environment_overrides_file() {
        let mut env = HashMap::new();
        env.insert("SKERRY__SERVE__UDP_ADDR".to_string(), "127.0.0.1:5000".to_string());
        env.insert("SKERRY__TRACKING__CONFIRM_HITS".to_string(), "2".to_string());
        let c = Config::from_toml_str(GOOD, "t", &env).unwrap();
        assert_eq!(c.serve.udp_addr, "127.0.0.1:5000");
        assert_eq!(c.tracking.confirm_hits, 2);
    }

    #[test]
    fn record_section_defaults_and_checks() {
        let c = load(GOOD).unwrap();
        assert!(c.record.is_none(), "no [record]: nothing is recorded");
        let c = load(&format!("{GOOD}\n[record]\ndir = \"/tmp/rec\"\n")).unwrap();
        let r = c.record.unwrap();
        assert_eq!((r.fsync_interval_s, r.keep_hours, r.max_bytes, r.snapshot_keep), (1.0, 720.0, None, 3));
        for (line, key) in [
            ("fsync_interval_s = 0.0", "record.fsync_interval_s"),
            ("keep_hours = -1.0", "record.keep_hours"),
            ("max_bytes = 0", "record.max_bytes"),
            ("snapshot_keep = 0", "record.snapshot_keep"),
            ("queue = 0", "record.queue"),
            ("snapshot_interval_s = -5.0", "record.snapshot_interval_s"),
            ("keep_hour = 3.0", "keep_hour"),
        ] {
            let e = load(&format!("{GOOD}\n[record]\ndir = \"/tmp/rec\"\n{line}\n")).unwrap_err().to_string();
            assert!(e.contains(key), "{line}: {e}");
        }
        let e = load(&format!("{GOOD}\n[record]\ndir = \"\"\n")).unwrap_err().to_string();
        assert!(e.contains("record.dir"), "{e}");
    }

    #[test]
    fn trade_keys_are_checked_and_named() {
        // CONTRACT.md §8: the SAC/SIC pair of a radar, an NMEA listener of
        // a transponder, the ASTERIX listener of [serve].
        let radar = "scan_period_s = 2.5";
        let transponder = "position_sigma_m = 10.0";
        let ok = load(&GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sac = 25\nasterix_sic = 201").replace(transponder, "position_sigma_m = 10.0\nnmea_udp = \"127.0.0.1:4103\"")).unwrap();
        assert_eq!((ok.sensors[0].asterix_sac, ok.sensors[0].asterix_sic), (Some(25), Some(201)));
        assert_eq!(ok.sensors[1].nmea_udp.as_deref(), Some("127.0.0.1:4103"));
        let ok = load(&format!("{GOOD}\n[serve]\nasterix_udp = \"[::1]:4104\"\n")).unwrap();
        assert_eq!(ok.serve.asterix_udp.as_deref(), Some("[::1]:4104"));

        let second_radar = "\n[[sensors]]\nid = \"south-quay\"\nkind = \"radar\"\nlat_deg = 56.44\nlon_deg = 7.36\nrange_sigma_m = 10.0\nbearing_sigma_deg = 0.3\nmax_range_m = 9000.0\nscan_period_s = 2.0\n";
        for (text, key, words) in [
            (GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sac = 25"), "sensors[0].asterix_sic", "with asterix_sac"),
            (GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sic = 201"), "sensors[0].asterix_sac", "with asterix_sic"),
            (GOOD.replace(transponder, "position_sigma_m = 10.0\nasterix_sac = 25\nasterix_sic = 7"), "sensors[1].asterix_sac", "only a radar"),
            (
                format!("{}{second_radar}asterix_sac = 25\nasterix_sic = 201\n", GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sac = 25\nasterix_sic = 201")),
                "sensors[2].asterix_sic",
                "already used by sensors[0]",
            ),
            (GOOD.replace(radar, "scan_period_s = 2.5\nnmea_udp = \"127.0.0.1:4103\""), "sensors[0].nmea_udp", "only a transponder"),
            (GOOD.replace(transponder, "position_sigma_m = 10.0\nnmea_udp = \"harbour-ais:4103\""), "sensors[1].nmea_udp", "not a socket address"),
            (GOOD.replace(transponder, "position_sigma_m = 10.0\nnmea_udp = \"127.0.0.1\""), "sensors[1].nmea_udp", "not a socket address"),
            (format!("{GOOD}\n[serve]\nasterix_udp = \"127.0.0.1:99999\"\n"), "serve.asterix_udp", "not a socket address"),
            // Out of the u8 range: refused by the loader, naming the key.
            (GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sac = 256\nasterix_sic = 1"), "asterix_sac", ""),
        ] {
            let e = load(&text).unwrap_err().to_string();
            assert!(e.contains(key) && e.contains(words), "{key}: {e}");
        }
        // The same pair on two radars is fine once one SIC differs.
        load(&format!("{}{second_radar}asterix_sac = 25\nasterix_sic = 202\n", GOOD.replace(radar, "scan_period_s = 2.5\nasterix_sac = 25\nasterix_sic = 201"))).unwrap();
    }

    #[test]
    fn batching_start_cap_and_pruning_keys() {
        let c = load(GOOD).unwrap();
        assert_eq!((c.tracking.batch_scan_fraction, c.tracking.max_new_tracks_per_batch, c.tracking.jpda_pruning), (0.0625, 500, true));
        let c = load(&format!("{GOOD}batch_scan_fraction = 0.0\nmax_new_tracks_per_batch = 1\njpda_pruning = false\n")).unwrap();
        assert_eq!((c.tracking.batch_scan_fraction, c.tracking.max_new_tracks_per_batch, c.tracking.jpda_pruning), (0.0, 1, false));
        for (line, key) in [
            ("batch_scan_fraction = -0.01", "tracking.batch_scan_fraction"),
            ("batch_scan_fraction = 0.75", "tracking.batch_scan_fraction"),
            ("batch_scan_fraction = nan", "tracking.batch_scan_fraction"),
            ("max_new_tracks_per_batch = 0", "tracking.max_new_tracks_per_batch"),
            ("max_new_tracks_per_batch = -5", "max_new_tracks_per_batch"),
            ("max_plots_per_batch = 0", "tracking.max_plots_per_batch"),
            ("plots_to_start = 3", "tracking.plots_to_start"),
            ("plots_to_start = 0", "tracking.plots_to_start"),
            // (The layered loader reads "yes", "on" and the like as true.)
            ("jpda_pruning = [1]", "jpda_pruning"),
        ] {
            let Err(e) = load(&format!("{GOOD}{line}\n")) else { panic!("`{line}` was accepted") };
            let e = e.to_string();
            assert!(e.contains(key), "{line}: {e}");
        }
    }

    #[test]
    fn embedded_demo_config_is_valid() {
        Config::load(None, &HashMap::new()).unwrap();
    }
}
