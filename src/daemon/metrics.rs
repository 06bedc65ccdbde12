//! The daemon's shared figures: counters written by the tasks, read by
//! `/metrics`, `/healthz` and the health stream.
//!
//! Counters are atomics indexed by sensor, so the ingest hot path never
//! takes a lock; the few figures that are whole tables (clock states,
//! rates) sit behind a mutex that only the once-per-tick writers and the
//! readers take.

use crate::config::Config;
use crate::feed::asterix::AsterixRejectReason;
use crate::feed::nmea::AisRejectReason;
use crate::feed::{RejectReason, SensorId, SensorKind, SensorTable};
use crate::reorder::{ClockState, SensorClock};
use crate::time::Timestamp;
use std::fmt::Write;
use std::sync::Mutex;
use std::sync::atomic::{AtomicI64, AtomicU64, AtomicUsize, Ordering::Relaxed};

const N_JSON: usize = crate::feed::RejectReason::ALL_KEYS.len();
const N_ASTERIX: usize = AsterixRejectReason::ALL.len();
const N_NMEA: usize = AisRejectReason::ALL.len();

/// Reject reason keys counted per sensor: the feed's reasons, the
/// daemon's own `not_allowed` (a source address not on the sensor's
/// allow-list), then the trade decoders' reasons (`asterix_…`, `nmea_…`:
/// their `feed_key`s).
pub const REASONS: [&str; N_JSON + 1 + N_ASTERIX + N_NMEA] = {
    let keys = crate::feed::RejectReason::ALL_KEYS;
    let mut out = [""; N_JSON + 1 + N_ASTERIX + N_NMEA];
    let mut i = 0;
    while i < keys.len() {
        out[i] = keys[i];
        i += 1;
    }
    out[i] = "not_allowed";
    i += 1;
    let mut k = 0;
    while k < N_ASTERIX {
        out[i] = AsterixRejectReason::ALL[k].feed_key();
        i += 1;
        k += 1;
    }
    k = 0;
    while k < N_NMEA {
        out[i] = AisRejectReason::ALL[k].feed_key();
        i += 1;
        k += 1;
    }
    out
};

/// The index in [`REASONS`] of an ASTERIX reject reason.
pub fn asterix_reason(r: AsterixRejectReason) -> usize {
    N_JSON + 1 + AsterixRejectReason::ALL.iter().position(|x| *x == r).unwrap_or(0)
}

/// The index in [`REASONS`] of an AIS reject reason.
pub fn nmea_reason(r: AisRejectReason) -> usize {
    N_JSON + 1 + N_ASTERIX + AisRejectReason::ALL.iter().position(|x| *x == r).unwrap_or(0)
}

pub fn reason_index(key: &str) -> usize {
    REASONS.iter().position(|k| *k == key).unwrap_or(1)
}

pub fn reason_of(r: &RejectReason) -> usize {
    reason_index(r.key())
}

/// Upper bounds of the batch-time histogram (s).
pub const BATCH_BUCKETS: [f64; 12] = [0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 1.0];

pub struct SensorCounters {
    /// Records that named this sensor (or, for the extra slot, none).
    pub received: AtomicU64,
    /// Passed the ingest checks and queued for ordering.
    pub accepted: AtomicU64,
    /// Handed to the engine.
    pub processed: AtomicU64,
    pub rejected: [AtomicU64; REASONS.len()],
    /// Daemon clock of the last record, ns since the epoch; 0: never.
    pub last_seen_ns: AtomicI64,
    /// Radars: the antenna rotation period last measured (ASTERIX
    /// I034/041), as f64 bits; 0: none yet.
    pub rotation_period_bits: AtomicU64,
    /// Plots and track starts the engine's overload limits dropped
    /// (`tracking.max_plots_per_batch`, `max_new_tracks_per_batch`), as the
    /// engine task last read them.
    pub plots_dropped: AtomicU64,
    pub starts_dropped: AtomicU64,
}

// Written out: `Default` is derived for arrays of up to 32 only.
impl Default for SensorCounters {
    fn default() -> Self {
        SensorCounters {
            received: AtomicU64::new(0),
            accepted: AtomicU64::new(0),
            processed: AtomicU64::new(0),
            rejected: std::array::from_fn(|_| AtomicU64::new(0)),
            last_seen_ns: AtomicI64::new(0),
            rotation_period_bits: AtomicU64::new(0),
            plots_dropped: AtomicU64::new(0),
            starts_dropped: AtomicU64::new(0),
        }
    }
}

/// One sensor's figures at an instant.
#[derive(Clone, Debug, PartialEq)]
pub struct SensorSnapshot {
    pub received: u64,
    pub accepted: u64,
    pub processed: u64,
    pub rejected: [u64; REASONS.len()],
    pub last_seen: Option<Timestamp>,
    /// The radar's measured antenna rotation period (s), if reported.
    pub rotation_period_s: Option<f64>,
    pub plots_dropped: u64,
    pub starts_dropped: u64,
}

impl Default for SensorSnapshot {
    fn default() -> Self {
        SensorSnapshot { received: 0, accepted: 0, processed: 0, rejected: [0; REASONS.len()], last_seen: None, rotation_period_s: None, plots_dropped: 0, starts_dropped: 0 }
    }
}

pub struct Metrics {
    pub sensors: SensorTable,
    scan_period_s: Vec<Option<f64>>,
    /// One slot per configured sensor, then one for records whose sensor
    /// is unknown or unreadable.
    counters: Vec<SensorCounters>,
    pub datagrams: AtomicU64,
    pub datagram_bytes: AtomicU64,
    pub grpc_streams: AtomicU64,
    /// Dropped because the ingest queue was full.
    pub dropped_ingest_queue: AtomicU64,
    /// Dropped because the reorder buffer was full.
    pub dropped_reorder_full: AtomicU64,
    pub ingest_queue_depth: AtomicUsize,
    pub ingest_queue_capacity: usize,
    pub engine_queue_depth: AtomicUsize,
    pub engine_queue_capacity: usize,
    pub reorder_held: AtomicUsize,
    pub reorder_capacity: usize,
    /// Release time of the reorder buffer, ns; i64::MIN: none yet.
    pub released_ns: AtomicI64,
    pub tracks: [AtomicU64; 3],
    pub track_records: AtomicU64,
    pub batches: AtomicU64,
    batch_buckets: [AtomicU64; BATCH_BUCKETS.len()],
    batch_sum_ns: AtomicU64,
    pub subscribers: AtomicUsize,
    pub subscriber_skipped: AtomicU64,
    pub subscriber_sent: AtomicU64,
    pub clocks: Mutex<Vec<SensorClock>>,
    /// Accepted records per second per sensor, over the last health period.
    pub rates: Mutex<Vec<f64>>,
    pub started: Timestamp,
    pub silent_scans: f64,
    pub transponder_silent_s: f64,
    pub queue_warn_fraction: f64,
    /// The recording's figures (`[record]`).
    pub record: super::record::RecordStats,
}

impl Metrics {
    pub fn new(cfg: &Config, started: Timestamp) -> Metrics {
        let sensors = cfg.sensor_table();
        let n = sensors.len();
        Metrics {
            scan_period_s: cfg.sensors.iter().map(|s| s.scan_period_s).collect(),
            sensors,
            counters: (0..=n).map(|_| SensorCounters::default()).collect(),
            datagrams: AtomicU64::new(0),
            datagram_bytes: AtomicU64::new(0),
            grpc_streams: AtomicU64::new(0),
            dropped_ingest_queue: AtomicU64::new(0),
            dropped_reorder_full: AtomicU64::new(0),
            ingest_queue_depth: AtomicUsize::new(0),
            ingest_queue_capacity: cfg.serve.ingest_queue,
            engine_queue_depth: AtomicUsize::new(0),
            engine_queue_capacity: cfg.serve.engine_queue,
            reorder_held: AtomicUsize::new(0),
            reorder_capacity: cfg.serve.reorder_max_held,
            released_ns: AtomicI64::new(i64::MIN),
            tracks: Default::default(),
            track_records: AtomicU64::new(0),
            batches: AtomicU64::new(0),
            batch_buckets: Default::default(),
            batch_sum_ns: AtomicU64::new(0),
            subscribers: AtomicUsize::new(0),
            subscriber_skipped: AtomicU64::new(0),
            subscriber_sent: AtomicU64::new(0),
            clocks: Mutex::new(Vec::new()),
            rates: Mutex::new(vec![0.0; n]),
            started,
            silent_scans: cfg.serve.silent_scans,
            transponder_silent_s: cfg.serve.transponder_silent_s,
            queue_warn_fraction: cfg.serve.queue_warn_fraction,
            record: super::record::RecordStats::new(cfg.record.as_ref()),
        }
    }

    /// The counters of a sensor, or of the unknown-sensor slot.
    pub fn sensor(&self, s: Option<SensorId>) -> &SensorCounters {
        let unknown = self.counters.len() - 1;
        let i = s.map(|s| s as usize).filter(|&i| i < unknown).unwrap_or(unknown);
        &self.counters[i]
    }

    pub fn reject(&self, s: Option<SensorId>, reason: usize) {
        self.sensor(s).rejected[reason.min(REASONS.len() - 1)].fetch_add(1, Relaxed);
    }

    pub fn observe_batch(&self, secs: f64) {
        self.batches.fetch_add(1, Relaxed);
        self.batch_sum_ns.fetch_add((secs * 1e9) as u64, Relaxed);
        if let Some(i) = BATCH_BUCKETS.iter().position(|b| secs <= *b) {
            self.batch_buckets[i].fetch_add(1, Relaxed);
        }
    }

    pub fn snapshot(&self, s: Option<SensorId>) -> SensorSnapshot {
        let c = self.sensor(s);
        let ns = c.last_seen_ns.load(Relaxed);
        SensorSnapshot {
            received: c.received.load(Relaxed),
            accepted: c.accepted.load(Relaxed),
            processed: c.processed.load(Relaxed),
            rejected: std::array::from_fn(|i| c.rejected[i].load(Relaxed)),
            last_seen: (ns != 0).then(|| Timestamp::from_unix_nanos(ns)),
            plots_dropped: c.plots_dropped.load(Relaxed),
            starts_dropped: c.starts_dropped.load(Relaxed),
            rotation_period_s: match c.rotation_period_bits.load(Relaxed) {
                0 => None,
                b => Some(f64::from_bits(b)),
            },
        }
    }

    /// A radar's measured antenna rotation period (s).
    pub fn set_rotation_period(&self, s: SensorId, period_s: f64) {
        if period_s.is_finite() && period_s > 0.0 {
            self.sensor(Some(s)).rotation_period_bits.store(period_s.to_bits(), Relaxed);
        }
    }

    /// Sums over every sensor slot.
    pub fn totals(&self) -> SensorSnapshot {
        let mut t = SensorSnapshot::default();
        for i in 0..self.counters.len() {
            let s = self.snapshot(if i < self.sensors.len() { Some(i as SensorId) } else { None });
            t.received += s.received;
            t.accepted += s.accepted;
            t.processed += s.processed;
            t.plots_dropped += s.plots_dropped;
            t.starts_dropped += s.starts_dropped;
            for (a, b) in t.rejected.iter_mut().zip(s.rejected) {
                *a += b;
            }
        }
        t
    }

    pub fn clock(&self, s: SensorId) -> Option<SensorClock> {
        self.clocks.lock().ok()?.iter().find(|c| c.sensor == s).cloned()
    }

    pub fn released(&self) -> Option<Timestamp> {
        let ns = self.released_ns.load(Relaxed);
        (ns != i64::MIN).then(|| Timestamp::from_unix_nanos(ns))
    }

    /// Why the daemon is degraded at `now` (empty: healthy).
    pub fn degraded_reasons(&self, now: Timestamp) -> Vec<String> {
        let mut out = Vec::new();
        for id in self.sensors.ids() {
            let name = self.sensors.name(id);
            let since = self.snapshot(Some(id)).last_seen.unwrap_or(self.started);
            let silent = now.secs_since(since).max(0.0);
            let limit = match (self.sensors.kind(id), self.scan_period_s.get(id as usize).copied().flatten()) {
                (Some(SensorKind::Radar), Some(p)) => Some((self.silent_scans * p, format!("more than {} scans of {} s", self.silent_scans, p))),
                _ => Some((self.transponder_silent_s, format!("more than {} s", self.transponder_silent_s))),
            };
            if let Some((lim, why)) = limit
                && silent > lim {
                    out.push(format!("sensor {name} silent for {silent:.1} s ({why})"));
                }
            if let Some(c) = self.clock(id) {
                match c.state {
                    ClockState::Ahead | ClockState::Behind => {
                        out.push(format!("sensor {name} clock is {} the other sensors (offset {:.1} s)", if c.state == ClockState::Ahead { "ahead of" } else { "behind" }, c.offset_s.unwrap_or(0.0)))
                    }
                    _ => {}
                }
            }
        }
        let frac = self.queue_warn_fraction;
        for (name, depth, cap) in [
            ("ingest queue", self.ingest_queue_depth.load(Relaxed), self.ingest_queue_capacity),
            ("engine queue", self.engine_queue_depth.load(Relaxed), self.engine_queue_capacity),
            ("reorder buffer", self.reorder_held.load(Relaxed), self.reorder_capacity),
        ] {
            if cap > 0 && depth as f64 > frac * cap as f64 {
                out.push(format!("{name} near full ({depth} of {cap})"));
            }
        }
        out.extend(self.record.degraded_reason());
        out
    }

    /// The Prometheus text exposition format (version 0.0.4).
    pub fn render(&self, now: Timestamp) -> String {
        let mut o = String::with_capacity(8192);
        let names: Vec<(Option<SensorId>, String)> = self.sensors.ids().map(|i| (Some(i), label(self.sensors.name(i)))).chain([(None, "(unknown)".to_string())]).collect();
        let snaps: Vec<SensorSnapshot> = names.iter().map(|(s, _)| self.snapshot(*s)).collect();
        let counter = |o: &mut String, name: &str, help: &str, f: &dyn Fn(&SensorSnapshot) -> u64| {
            let _ = writeln!(o, "# HELP {name} {help}\n# TYPE {name} counter");
            for ((_, n), s) in names.iter().zip(&snaps) {
                let _ = writeln!(o, "{name}{{sensor=\"{n}\"}} {}", f(s));
            }
        };
        counter(&mut o, "skerry_records_received_total", "Feed records received, by the sensor they named.", &|s| s.received);
        counter(&mut o, "skerry_records_accepted_total", "Records that passed the ingest checks.", &|s| s.accepted);
        counter(&mut o, "skerry_records_processed_total", "Records handed to the tracking engine.", &|s| s.processed);
        counter(&mut o, "skerry_plots_dropped_total", "Plots the engine dropped because their batch already held tracking.max_plots_per_batch plots.", &|s| s.plots_dropped);
        counter(&mut o, "skerry_track_starts_dropped_total", "Plots that would have started a tentative track, dropped because their batch had started tracking.max_new_tracks_per_batch already.", &|s| s.starts_dropped);
        let _ = writeln!(o, "# HELP skerry_records_rejected_total Records rejected, by sensor and reason.\n# TYPE skerry_records_rejected_total counter");
        for ((_, n), s) in names.iter().zip(&snaps) {
            for (k, v) in REASONS.iter().zip(s.rejected) {
                let _ = writeln!(o, "skerry_records_rejected_total{{sensor=\"{n}\",reason=\"{k}\"}} {v}");
            }
        }
        let configured = &names[..names.len() - 1];
        let _ = writeln!(o, "# HELP skerry_sensor_last_seen_timestamp_seconds Daemon clock when the sensor's last record arrived (absent: never).\n# TYPE skerry_sensor_last_seen_timestamp_seconds gauge");
        for ((_, n), s) in configured.iter().zip(&snaps) {
            if let Some(t) = s.last_seen {
                let _ = writeln!(o, "skerry_sensor_last_seen_timestamp_seconds{{sensor=\"{n}\"}} {}", t.unix_secs_f64());
            }
        }
        let _ = writeln!(o, "# HELP skerry_sensor_silence_seconds Time since the sensor's last record (or since start).\n# TYPE skerry_sensor_silence_seconds gauge");
        for ((_, n), s) in configured.iter().zip(&snaps) {
            let since = s.last_seen.unwrap_or(self.started);
            let _ = writeln!(o, "skerry_sensor_silence_seconds{{sensor=\"{n}\"}} {}", num(now.secs_since(since).max(0.0)));
        }
        let rates = self.rates.lock().map(|r| r.clone()).unwrap_or_default();
        let _ = writeln!(o, "# HELP skerry_sensor_records_per_second Accepted records per second over the last health period.\n# TYPE skerry_sensor_records_per_second gauge");
        for (i, (_, n)) in configured.iter().enumerate() {
            let _ = writeln!(o, "skerry_sensor_records_per_second{{sensor=\"{n}\"}} {}", num(rates.get(i).copied().unwrap_or(0.0)));
        }
        let _ = writeln!(o, "# HELP skerry_radar_rotation_period_seconds Antenna rotation period the radar measured (ASTERIX I034/041; absent: not reported).\n# TYPE skerry_radar_rotation_period_seconds gauge");
        for ((_, n), s) in configured.iter().zip(&snaps) {
            if let Some(p) = s.rotation_period_s {
                let _ = writeln!(o, "skerry_radar_rotation_period_seconds{{sensor=\"{n}\"}} {}", num(p));
            }
        }
        let clocks = self.clocks.lock().map(|c| c.clone()).unwrap_or_default();
        let _ = writeln!(o, "# HELP skerry_sensor_clock_offset_seconds Daemon clock minus the sensor's record times, smoothed (positive: the sensor is behind).\n# TYPE skerry_sensor_clock_offset_seconds gauge");
        for c in &clocks {
            if let (Some(off), Some((_, n))) = (c.offset_s, configured.get(c.sensor as usize)) {
                let _ = writeln!(o, "skerry_sensor_clock_offset_seconds{{sensor=\"{n}\"}} {}", num(off));
            }
        }
        let _ = writeln!(o, "# HELP skerry_sensor_clock_state How the sensor's clock stands against the other sensors (1 for its state).\n# TYPE skerry_sensor_clock_state gauge");
        for (i, (_, n)) in configured.iter().enumerate() {
            let st = clocks.iter().find(|c| c.sensor as usize == i).map(|c| c.state).unwrap_or(ClockState::Never);
            for s in [ClockState::Never, ClockState::Silent, ClockState::Agrees, ClockState::Ahead, ClockState::Behind] {
                let _ = writeln!(o, "skerry_sensor_clock_state{{sensor=\"{n}\",state=\"{}\"}} {}", s.as_str(), u8::from(s == st));
            }
        }
        let _ = writeln!(o, "# HELP skerry_tracks Live tracks by status.\n# TYPE skerry_tracks gauge");
        for (i, st) in ["tentative", "confirmed", "coasting"].iter().enumerate() {
            let _ = writeln!(o, "skerry_tracks{{status=\"{st}\"}} {}", self.tracks[i].load(Relaxed));
        }
        let simple = |o: &mut String, name: &str, kind: &str, help: &str, v: String| {
            let _ = writeln!(o, "# HELP {name} {help}\n# TYPE {name} {kind}\n{name} {v}");
        };
        simple(&mut o, "skerry_track_records_total", "counter", "Track records made by the engine.", self.track_records.load(Relaxed).to_string());
        let _ = writeln!(o, "# HELP skerry_batch_seconds Engine time per ordered batch.\n# TYPE skerry_batch_seconds histogram");
        let mut cum = 0;
        for (b, c) in BATCH_BUCKETS.iter().zip(&self.batch_buckets) {
            cum += c.load(Relaxed);
            let _ = writeln!(o, "skerry_batch_seconds_bucket{{le=\"{b}\"}} {cum}");
        }
        let count = self.batches.load(Relaxed);
        let _ = writeln!(o, "skerry_batch_seconds_bucket{{le=\"+Inf\"}} {count}");
        let _ = writeln!(o, "skerry_batch_seconds_sum {}", num(self.batch_sum_ns.load(Relaxed) as f64 * 1e-9));
        let _ = writeln!(o, "skerry_batch_seconds_count {count}");
        simple(&mut o, "skerry_subscribers", "gauge", "Picture subscribers connected.", self.subscribers.load(Relaxed).to_string());
        simple(&mut o, "skerry_subscriber_updates_total", "counter", "Track updates queued to subscribers.", self.subscriber_sent.load(Relaxed).to_string());
        simple(&mut o, "skerry_subscriber_skipped_total", "counter", "Track updates subscribers skipped because they read too slowly.", self.subscriber_skipped.load(Relaxed).to_string());
        let _ = writeln!(o, "# HELP skerry_queue_depth Items waiting in each queue.\n# TYPE skerry_queue_depth gauge");
        let _ = writeln!(o, "skerry_queue_depth{{queue=\"ingest\"}} {}", self.ingest_queue_depth.load(Relaxed));
        let _ = writeln!(o, "skerry_queue_depth{{queue=\"engine\"}} {}", self.engine_queue_depth.load(Relaxed));
        let _ = writeln!(o, "skerry_queue_depth{{queue=\"reorder\"}} {}", self.reorder_held.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_queue_capacity Capacity of each queue.\n# TYPE skerry_queue_capacity gauge");
        let _ = writeln!(o, "skerry_queue_capacity{{queue=\"ingest\"}} {}", self.ingest_queue_capacity);
        let _ = writeln!(o, "skerry_queue_capacity{{queue=\"engine\"}} {}", self.engine_queue_capacity);
        let _ = writeln!(o, "skerry_queue_capacity{{queue=\"reorder\"}} {}", self.reorder_capacity);
        let _ = writeln!(o, "# HELP skerry_dropped_total Records dropped because a queue was full.\n# TYPE skerry_dropped_total counter");
        let _ = writeln!(o, "skerry_dropped_total{{stage=\"ingest_queue\"}} {}", self.dropped_ingest_queue.load(Relaxed));
        let _ = writeln!(o, "skerry_dropped_total{{stage=\"reorder_full\"}} {}", self.dropped_reorder_full.load(Relaxed));
        simple(&mut o, "skerry_udp_datagrams_total", "counter", "UDP datagrams received.", self.datagrams.load(Relaxed).to_string());
        simple(&mut o, "skerry_udp_bytes_total", "counter", "UDP payload bytes received.", self.datagram_bytes.load(Relaxed).to_string());
        simple(&mut o, "skerry_grpc_ingest_streams_total", "counter", "gRPC ingest streams opened.", self.grpc_streams.load(Relaxed).to_string());
        if let Some(r) = self.released() {
            simple(&mut o, "skerry_feed_time_seconds", "gauge", "Feed time released to the engine (s since the epoch).", num(r.unix_secs_f64()));
        }
        self.record.render(&mut o);
        let reasons = self.degraded_reasons(now);
        simple(&mut o, "skerry_healthy", "gauge", "1 when /healthz says ok, 0 when degraded.", u8::from(reasons.is_empty()).to_string());
        simple(&mut o, "skerry_start_time_seconds", "gauge", "When the daemon started (s since the epoch).", num(self.started.unix_secs_f64()));
        o
    }
}

/// A label value escaped for the text format.
fn label(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '\\' => o.push_str("\\\\"),
            '"' => o.push_str("\\\""),
            '\n' => o.push_str("\\n"),
            c => o.push(c),
        }
    }
    o
}

/// A sample value: the text format spells non-finite values its own way.
fn num(v: f64) -> String {
    if v.is_nan() {
        "NaN".into()
    } else if v.is_infinite() {
        if v > 0.0 { "+Inf".into() } else { "-Inf".into() }
    } else {
        format!("{v}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reasons_cover_the_feed_keys() {
        for k in RejectReason::ALL_KEYS {
            assert_eq!(REASONS[reason_index(k)], k);
        }
    }

    #[test]
    fn trade_reasons_follow_the_feed_keys() {
        assert_eq!(REASONS[reason_index("not_allowed")], "not_allowed");
        for r in AsterixRejectReason::ALL {
            assert_eq!(REASONS[asterix_reason(r)], r.feed_key());
        }
        for r in AisRejectReason::ALL {
            assert_eq!(REASONS[nmea_reason(r)], r.feed_key());
        }
        let mut keys = REASONS.to_vec();
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), REASONS.len(), "reason keys clash");
    }

    #[test]
    fn labels_are_escaped() {
        assert_eq!(label("a\"b\\c\nd"), "a\\\"b\\\\c\\nd");
    }

    #[test]
    fn silent_sensor_degrades() {
        let cfg = Config::load(None, &Default::default()).unwrap();
        let t0 = Timestamp::from_unix_nanos(1_000_000_000_000);
        let m = Metrics::new(&cfg, t0);
        // The demo radars scan every 2.5 s and 3 s: degraded after 7.5 s
        // and 9 s without a record.
        assert!(m.degraded_reasons(t0.plus_secs(7.0)).is_empty());
        let r = m.degraded_reasons(t0.plus_secs(8.0));
        assert_eq!(r.len(), 1, "{r:?}");
        assert!(r[0].contains("kestrel-point"), "{r:?}");
        m.sensor(Some(0)).last_seen_ns.store(t0.plus_secs(8.0).unix_nanos(), Relaxed);
        assert!(m.degraded_reasons(t0.plus_secs(8.5)).is_empty());
        m.ingest_queue_depth.store(cfg.serve.ingest_queue, Relaxed);
        assert!(m.degraded_reasons(t0.plus_secs(8.5))[0].contains("ingest queue near full"));
    }
}
