//! The record vocabulary (CONTRACT.md §1, §2, §6), validation, and the
//! codecs.
//!
//! Feed records name their sensor by its configured id; once decoded, a
//! record carries the sensor's index in the configuration
//! ([`SensorId`]), so the engine never compares strings on its hot path.

pub mod asterix;
pub mod json;
pub mod nmea;
pub mod screen;
pub mod tracks;

use crate::time::Timestamp;
use std::collections::HashMap;
use std::sync::Arc;

pub use json::{decode_line, encode_record};
pub use screen::Screen;
pub use tracks::{TrackRecord, TrackStatus, TruthRecord};

/// Index of a sensor in the configuration's `[[sensors]]` list.
pub type SensorId = u16;

/// What kind of sensor a configured id is.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SensorKind {
    Radar,
    Transponder,
}

impl SensorKind {
    pub fn as_str(self) -> &'static str {
        match self {
            SensorKind::Radar => "radar",
            SensorKind::Transponder => "transponder",
        }
    }
}

/// Sensor names and kinds, in configuration order, for decoding and for
/// writing names back out.
#[derive(Clone, Debug, Default)]
pub struct SensorTable {
    names: Vec<Arc<str>>,
    kinds: Vec<SensorKind>,
    index: HashMap<Arc<str>, SensorId>,
}

impl SensorTable {
    pub fn new<'a>(sensors: impl IntoIterator<Item = (&'a str, SensorKind)>) -> Self {
        let mut t = SensorTable::default();
        for (name, kind) in sensors {
            let name: Arc<str> = Arc::from(name);
            let id = t.names.len() as SensorId;
            t.index.entry(name.clone()).or_insert(id);
            t.names.push(name);
            t.kinds.push(kind);
        }
        t
    }
    pub fn lookup(&self, name: &str) -> Option<SensorId> {
        self.index.get(name).copied()
    }
    pub fn name(&self, id: SensorId) -> &str {
        self.names.get(id as usize).map(|s| &**s).unwrap_or("?")
    }
    pub fn kind(&self, id: SensorId) -> Option<SensorKind> {
        self.kinds.get(id as usize).copied()
    }
    pub fn len(&self) -> usize {
        self.names.len()
    }
    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }
    pub fn ids(&self) -> impl Iterator<Item = SensorId> + '_ {
        (0..self.names.len()).map(|i| i as SensorId)
    }
}

/// One radar plot.
#[derive(Clone, Debug, PartialEq)]
pub struct Detection {
    pub sensor: SensorId,
    pub time: Timestamp,
    pub scan: Option<u64>,
    pub range_m: f64,
    pub bearing_deg: f64,
    pub radial_speed_mps: Option<f64>,
    pub snr_db: Option<f64>,
}

/// A radar finished looking at a sector (absent: the full circle).
#[derive(Clone, Debug, PartialEq)]
pub struct ScanEnd {
    pub sensor: SensorId,
    pub time: Timestamp,
    pub scan: u64,
    pub sector_deg: Option<[f64; 2]>,
}

/// A cooperative position report.
#[derive(Clone, Debug, PartialEq)]
pub struct Report {
    pub sensor: SensorId,
    pub time: Timestamp,
    pub id: Arc<str>,
    pub lat_deg: f64,
    pub lon_deg: f64,
    pub sog_kn: Option<f64>,
    pub cog_deg: Option<f64>,
    pub heading_deg: Option<f64>,
    /// What the vessel says about itself, if known when the report was
    /// made (the optional `name`, `ship_type`, `length_m`, `beam_m` of a
    /// `report` line; the AIS decoder fills it from the MMSI's static
    /// messages). Shared, so a decoder hands it to every report of the
    /// vessel without allocating.
    pub vessel: Option<Arc<VesselInfo>>,
}

/// A vessel's static data (AIS types 5, 19 and 24: ITU-R M.1371-5), as
/// carried on `report` records and copied onto the track records of the
/// track that holds the identity.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct VesselInfo {
    /// The vessel's name, trailing spaces and '@' padding removed.
    pub name: Option<Arc<str>>,
    /// Type of ship and cargo, 0..=255 (ITU-R M.1371-5 Table 53; the AIS
    /// decoder leaves out 0, "not available").
    pub ship_type: Option<u8>,
    /// Overall length and beam, metres (AIS: A + B and C + D).
    pub length_m: Option<f64>,
    pub beam_m: Option<f64>,
}

impl VesselInfo {
    pub fn is_empty(&self) -> bool {
        self.name.is_none() && self.ship_type.is_none() && self.length_m.is_none() && self.beam_m.is_none()
    }
    /// `None` when nothing is known, so records stay as before.
    pub fn shared(self) -> Option<Arc<VesselInfo>> {
        (!self.is_empty()).then(|| Arc::new(self))
    }
}

/// A validated feed record.
#[derive(Clone, Debug, PartialEq)]
pub enum Record {
    Detection(Detection),
    ScanEnd(ScanEnd),
    Report(Report),
}

impl Record {
    /// Whether `self` and `other` are the same record, each number to
    /// within one unit in the last place: a decoder's records, written as
    /// feed lines and read back, must come back so (the fuzz targets and
    /// their smoke test check it). One ulp, not bit equality, so that the
    /// check does not depend on the JSON number parser's last bit.
    pub fn same_within_ulp(&self, other: &Record) -> bool {
        fn f(x: f64, y: f64) -> bool {
            x == y || (x.is_finite() && y.is_finite() && x.signum() == y.signum() && x.to_bits().abs_diff(y.to_bits()) <= 1)
        }
        fn o(x: Option<f64>, y: Option<f64>) -> bool {
            match (x, y) {
                (Some(x), Some(y)) => f(x, y),
                (None, None) => true,
                _ => false,
            }
        }
        match (self, other) {
            (Record::Detection(x), Record::Detection(y)) => {
                (x.sensor, x.time, x.scan) == (y.sensor, y.time, y.scan) && f(x.range_m, y.range_m) && f(x.bearing_deg, y.bearing_deg) && o(x.radial_speed_mps, y.radial_speed_mps) && o(x.snr_db, y.snr_db)
            }
            (Record::ScanEnd(x), Record::ScanEnd(y)) => {
                (x.sensor, x.time, x.scan) == (y.sensor, y.time, y.scan)
                    && match (x.sector_deg, y.sector_deg) {
                        (Some([p, q]), Some([r, s])) => f(p, r) && f(q, s),
                        (None, None) => true,
                        _ => false,
                    }
            }
            (Record::Report(x), Record::Report(y)) => {
                let v = |r: &Report| r.vessel.as_deref().map(|v| (v.name.clone(), v.ship_type, v.length_m, v.beam_m));
                (x.sensor, x.time, &x.id) == (y.sensor, y.time, &y.id)
                    && f(x.lat_deg, y.lat_deg)
                    && f(x.lon_deg, y.lon_deg)
                    && o(x.sog_kn, y.sog_kn)
                    && o(x.cog_deg, y.cog_deg)
                    && o(x.heading_deg, y.heading_deg)
                    && match (v(x), v(y)) {
                        (Some((n1, t1, l1, b1)), Some((n2, t2, l2, b2))) => n1 == n2 && t1 == t2 && o(l1, l2) && o(b1, b2),
                        (None, None) => true,
                        _ => false,
                    }
            }
            _ => false,
        }

    }

    pub fn time(&self) -> Timestamp {
        match self {
            Record::Detection(d) => d.time,
            Record::ScanEnd(s) => s.time,
            Record::Report(r) => r.time,
        }
    }
    pub fn sensor(&self) -> SensorId {
        match self {
            Record::Detection(d) => d.sensor,
            Record::ScanEnd(s) => s.sensor,
            Record::Report(r) => r.sensor,
        }
    }
    /// The contract's `type` string.
    pub fn type_name(&self) -> &'static str {
        match self {
            Record::Detection(_) => "detection",
            Record::ScanEnd(_) => "scan_end",
            Record::Report(_) => "report",
        }
    }
    /// A hash of the whole content, for duplicate detection. Uses a fixed
    /// hasher so that it is the same in every run.
    pub fn content_hash(&self) -> u64 {
        use std::hash::{Hash, Hasher};
        let mut h = std::hash::DefaultHasher::new();
        let f = |h: &mut std::hash::DefaultHasher, x: f64| x.to_bits().hash(h);
        let o = |h: &mut std::hash::DefaultHasher, x: Option<f64>| x.map(f64::to_bits).hash(h);
        match self {
            Record::Detection(d) => {
                0u8.hash(&mut h);
                d.sensor.hash(&mut h);
                d.time.hash(&mut h);
                d.scan.hash(&mut h);
                f(&mut h, d.range_m);
                f(&mut h, d.bearing_deg);
                o(&mut h, d.radial_speed_mps);
                o(&mut h, d.snr_db);
            }
            Record::ScanEnd(s) => {
                1u8.hash(&mut h);
                s.sensor.hash(&mut h);
                s.time.hash(&mut h);
                s.scan.hash(&mut h);
                s.sector_deg.map(|[a, b]| (a.to_bits(), b.to_bits())).hash(&mut h);
            }
            Record::Report(r) => {
                2u8.hash(&mut h);
                r.sensor.hash(&mut h);
                r.time.hash(&mut h);
                r.id.hash(&mut h);
                f(&mut h, r.lat_deg);
                f(&mut h, r.lon_deg);
                o(&mut h, r.sog_kn);
                o(&mut h, r.cog_deg);
                o(&mut h, r.heading_deg);
                if let Some(v) = &r.vessel {
                    v.name.hash(&mut h);
                    v.ship_type.hash(&mut h);
                    o(&mut h, v.length_m);
                    o(&mut h, v.beam_m);
                }
            }
        }
        h.finish()
    }
}

/// Why a record was rejected. Every variant has a stable snake_case key
/// ([`RejectReason::key`]) used in counters and metrics.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum RejectReason {
    /// Not valid UTF-8.
    BadUtf8,
    /// Not a JSON object.
    BadJson,
    /// `type` is not one skerry knows.
    UnknownType,
    MissingField(&'static str),
    WrongType(&'static str),
    NonFinite(&'static str),
    OutOfRange(&'static str),
    UnknownSensor,
    WrongSensorKind,
    BadTime,
    Duplicate,
    /// Far from the rest of the feed (offline) or from the clock (live).
    ImplausibleTime,
    /// Arrived after records later than it were already released.
    Late,
    /// Longer than the configured maximum (a datagram or a line).
    Oversize,
}

impl RejectReason {
    pub fn key(&self) -> &'static str {
        match self {
            RejectReason::BadUtf8 => "bad_utf8",
            RejectReason::BadJson => "bad_json",
            RejectReason::UnknownType => "unknown_type",
            RejectReason::MissingField(_) => "missing_field",
            RejectReason::WrongType(_) => "wrong_type",
            RejectReason::NonFinite(_) => "non_finite",
            RejectReason::OutOfRange(_) => "out_of_range",
            RejectReason::UnknownSensor => "unknown_sensor",
            RejectReason::WrongSensorKind => "wrong_sensor_kind",
            RejectReason::BadTime => "bad_time",
            RejectReason::Duplicate => "duplicate",
            RejectReason::ImplausibleTime => "implausible_time",
            RejectReason::Late => "late",
            RejectReason::Oversize => "oversize",
        }
    }
    /// Every key, in a fixed order (for tables and metrics).
    pub const ALL_KEYS: [&'static str; 14] = [
        "bad_utf8",
        "bad_json",
        "unknown_type",
        "missing_field",
        "wrong_type",
        "non_finite",
        "out_of_range",
        "unknown_sensor",
        "wrong_sensor_kind",
        "bad_time",
        "duplicate",
        "implausible_time",
        "late",
        "oversize",
    ];
}

impl std::fmt::Display for RejectReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RejectReason::MissingField(k) => write!(f, "missing field `{k}`"),
            RejectReason::WrongType(k) => write!(f, "field `{k}` has the wrong type"),
            RejectReason::NonFinite(k) => write!(f, "field `{k}` is not a finite number"),
            RejectReason::OutOfRange(k) => write!(f, "field `{k}` is out of range"),
            RejectReason::BadUtf8 => f.write_str("not valid UTF-8"),
            RejectReason::BadJson => f.write_str("not a JSON object"),
            RejectReason::UnknownType => f.write_str("unknown record type"),
            RejectReason::UnknownSensor => f.write_str("sensor is not configured"),
            RejectReason::WrongSensorKind => f.write_str("sensor is of the wrong kind for this record"),
            RejectReason::BadTime => f.write_str("`time` is not an RFC 3339 UTC time"),
            RejectReason::Duplicate => f.write_str("exact duplicate of an earlier record"),
            RejectReason::ImplausibleTime => f.write_str("time is implausibly far from the rest of the feed"),
            RejectReason::Late => f.write_str("arrived after later records were released"),
            RejectReason::Oversize => f.write_str("larger than the configured maximum"),
        }
    }
}

/// A rejected record: the reason, and the sensor it named if that sensor
/// is configured.
#[derive(Clone, Debug, PartialEq)]
pub struct Reject {
    pub reason: RejectReason,
    pub sensor: Option<SensorId>,
}

/// Counts of accepted and rejected records per sensor and reason.
/// Records whose sensor is not known are counted under `None`.
#[derive(Clone, Debug, Default)]
pub struct FeedCounts {
    pub accepted: std::collections::BTreeMap<Option<SensorId>, u64>,
    pub rejected: std::collections::BTreeMap<(Option<SensorId>, &'static str), u64>,
}

impl FeedCounts {
    pub fn accept(&mut self, sensor: SensorId) {
        *self.accepted.entry(Some(sensor)).or_default() += 1;
    }
    pub fn reject(&mut self, r: &Reject) {
        *self.rejected.entry((r.sensor, r.reason.key())).or_default() += 1;
    }
    pub fn total_accepted(&self) -> u64 {
        self.accepted.values().sum()
    }
    pub fn total_rejected(&self) -> u64 {
        self.rejected.values().sum()
    }
    /// A plain-text table, one line per sensor and reason.
    pub fn table(&self, sensors: &SensorTable) -> String {
        use std::fmt::Write;
        let name = |s: &Option<SensorId>| s.map(|i| sensors.name(i).to_string()).unwrap_or_else(|| "(unknown sensor)".into());
        let mut out = String::new();
        let _ = writeln!(out, "{:<24} {:<34} {:>10}", "sensor", "outcome", "records");
        for (s, n) in &self.accepted {
            let _ = writeln!(out, "{:<24} {:<34} {:>10}", name(s), "accepted", n);
        }
        for ((s, k), n) in &self.rejected {
            let _ = writeln!(out, "{:<24} {:<34} {:>10}", name(s), format!("rejected:{k}"), n);
        }
        let _ = writeln!(out, "{:<24} {:<34} {:>10}", "total", "accepted", self.total_accepted());
        let _ = writeln!(out, "{:<24} {:<34} {:>10}", "total", "rejected", self.total_rejected());
        out
    }
}
