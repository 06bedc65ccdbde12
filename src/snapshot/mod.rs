//! Snapshots of the tracking state and the warm restart that uses them.
//!
//! A snapshot holds everything that shapes future track records: the
//! engine's state ([`crate::engine::snapshot`]), the duplicate screen
//! that runs in front of it, and the feed-order key of the last record
//! handled, so that a restart knows which recorded records come after it.
//! What follows from the configuration (sensor models, the site frame, the
//! grid's cell size, the filters' matrices) is rebuilt on restore.
//!
//! ## Format (version 1)
//!
//! A fixed header of 84 bytes, little-endian, then the body:
//!
//! | bytes | field |
//! |---|---|
//! | 0..8 | magic `SKERRYST` |
//! | 8..12 | format version (u32) |
//! | 12..20 | next track number (u64): readable whatever the version, so that numbers are never reused |
//! | 20..28 | daemon clock when written, Unix ns (i64; `i64::MIN`: none) |
//! | 28..36 | feed time of the last record handled, Unix ns (i64; `i64::MIN`: none) |
//! | 36..44 | record hash probe: the content hash of a fixed record |
//! | 44..68 | fingerprints of the site, the sensor table and `[tracking]` (3 × u64) |
//! | 68..76 | body length (u64) |
//! | 76..84 | FNV-1a 64 checksum of bytes 0..76 followed by the body |
//! | 84.. | body: postcard encoding of the screen, the last key and the engine state |
//!
//! Floats travel as their IEEE 754 bits (postcard writes an `f64` as its
//! eight bytes), so a restored pipeline continues bit for bit.
//!
//! Restore refuses, with a [`SnapshotError`] that says why and never a
//! panic: a file that is not a snapshot, is truncated or fails its
//! checksum; another format version; a build whose record hashes differ
//! (the screen and the last key hold such hashes); a different site,
//! sensor table or `[tracking]` section (the fingerprints); and a state
//! that does not fit the configuration.
//!
//! [`Pipeline`] is what both paths run: the screen, then the engine.
//! [`files`] writes and picks snapshot files; [`warm`] is the warm
//! restart (newest good snapshot, then the recording after it).

pub mod files;
pub mod warm;

use crate::config::{Config, SensorConfig};
use crate::engine::{Engine, EngineError, EngineState, StateError};
use crate::feed::screen::ScreenState;
use crate::feed::{Detection, Record, Reject, Screen, SensorId, TrackRecord};
use crate::time::Timestamp;
use serde::{Deserialize, Serialize};

pub use files::{SnapshotDir, SnapshotFile};
pub use warm::{RestoreReport, WarmStart, replay_recording, warm_start};

pub const MAGIC: [u8; 8] = *b"SKERRYST";
pub const FORMAT_VERSION: u32 = 2;
pub const HEADER_LEN: usize = 84;
const CHECKSUM_AT: usize = 76;
const NONE_TIME: i64 = i64::MIN;

/// FNV-1a, 64 bits (Fowler, Noll, Vo; the offset basis and prime of the
/// IETF draft "The FNV Non-Cryptographic Hash Algorithm"). Each step is a
/// bijection of the state for a given byte, so two inputs of equal length
/// that differ in a single byte always hash differently: any one damaged
/// byte is caught, and a truncation is caught by the stored length.
pub fn fnv1a64(parts: &[&[u8]]) -> u64 {
    const BASIS: u64 = 0xcbf2_9ce4_8422_2325;
    const PRIME: u64 = 0x0000_0100_0000_01b3;
    let mut h = BASIS;
    for part in parts {
        for &b in *part {
            h ^= b as u64;
            h = h.wrapping_mul(PRIME);
        }
    }
    h
}

/// The position of a record in the order both paths process a feed
/// ([`crate::offline::feed_order`]): time, then plots before reports
/// before scan ends, then sensor, then content hash. Ordering keys orders
/// records exactly as `feed_order` does.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct FeedKey {
    pub time: Timestamp,
    pub rank: u8,
    pub sensor: SensorId,
    pub hash: u64,
}

impl FeedKey {
    pub fn of(rec: &Record) -> FeedKey {
        let rank = match rec {
            Record::Detection(_) => 0,
            Record::Report(_) => 1,
            Record::ScanEnd(_) => 2,
        };
        FeedKey { time: rec.time(), rank, sensor: rec.sensor(), hash: rec.content_hash() }
    }

    /// True when `rec` comes after this key in feed order. Cheap for
    /// records of another time (no hash is computed).
    pub fn precedes(&self, rec: &Record) -> bool {
        match rec.time().cmp(&self.time) {
            std::cmp::Ordering::Greater => true,
            std::cmp::Ordering::Less => false,
            std::cmp::Ordering::Equal => FeedKey::of(rec) > *self,
        }
    }
}

/// The content hash of a fixed record: equal in two builds when their
/// record hashes agree.
fn hash_probe() -> u64 {
    Record::Detection(Detection {
        sensor: 3,
        time: Timestamp::from_unix_nanos(1_778_738_402_125_000_000),
        scan: Some(17),
        range_m: 1234.5,
        bearing_deg: 87.25,
        radial_speed_mps: Some(-2.5),
        snr_db: None,
    })
    .content_hash()
}

/// Fingerprints of the tracking-relevant configuration: the site origin,
/// the sensor table (ids, kinds, positions, error models, coverage, scan
/// periods; not the ingest keys such as `allow_from`), and the whole
/// `[tracking]` section.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Fingerprint {
    pub site: u64,
    pub sensors: u64,
    pub tracking: u64,
}

#[derive(Serialize)]
struct SensorPrint<'a> {
    id: &'a str,
    kind: crate::feed::SensorKind,
    lat_deg: Option<f64>,
    lon_deg: Option<f64>,
    height_m: f64,
    range_sigma_m: Option<f64>,
    bearing_sigma_deg: Option<f64>,
    detection_probability: f64,
    clutter_per_scan: f64,
    max_range_m: Option<f64>,
    scan_period_s: Option<f64>,
    position_sigma_m: Option<f64>,
}

impl<'a> From<&'a SensorConfig> for SensorPrint<'a> {
    fn from(s: &'a SensorConfig) -> Self {
        SensorPrint {
            id: &s.id,
            kind: s.kind,
            lat_deg: s.lat_deg,
            lon_deg: s.lon_deg,
            height_m: s.height_m,
            range_sigma_m: s.range_sigma_m,
            bearing_sigma_deg: s.bearing_sigma_deg,
            detection_probability: s.detection_probability,
            clutter_per_scan: s.clutter_per_scan,
            max_range_m: s.max_range_m,
            scan_period_s: s.scan_period_s,
            position_sigma_m: s.position_sigma_m,
        }
    }
}

fn print_of<T: Serialize + ?Sized>(v: &T) -> u64 {
    // Encoding plain config values cannot fail; an empty print would
    // still only make restores stricter.
    fnv1a64(&[&postcard::to_allocvec(v).unwrap_or_default()])
}

impl Fingerprint {
    pub fn of(cfg: &Config) -> Fingerprint {
        let sensors: Vec<SensorPrint> = cfg.sensors.iter().map(SensorPrint::from).collect();
        Fingerprint {
            site: print_of(&(cfg.site.lat_deg, cfg.site.lon_deg, cfg.site.height_m)),
            sensors: print_of(&sensors),
            tracking: print_of(&cfg.tracking),
        }
    }
}

/// Why a snapshot was not restored.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SnapshotError {
    #[error("not a skerry snapshot")]
    NotSnapshot,
    #[error("truncated: {got} bytes where {need} were expected")]
    Truncated { got: usize, need: usize },
    #[error("damaged: the checksum does not match")]
    Checksum,
    #[error("written in snapshot format {found}; this build reads format {FORMAT_VERSION}")]
    Version { found: u32 },
    #[error("written by a build whose record hashes differ from this one's")]
    OtherBuild,
    #[error("made with a different {0}: the configuration changed since")]
    ConfigChanged(&'static str),
    #[error("cannot decode the body: {0}")]
    Decode(String),
    #[error("{0}")]
    State(#[from] StateError),
}

impl SnapshotError {
    /// The snapshot is sound but was made under another configuration or
    /// build: its state does not apply here (a cold start follows), but
    /// its track numbering does.
    pub fn is_foreign(&self) -> bool {
        matches!(self, SnapshotError::Version { .. } | SnapshotError::OtherBuild | SnapshotError::ConfigChanged(_))
    }
}

/// The fixed header of a snapshot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Header {
    pub version: u32,
    pub next_track: u64,
    pub written_at: Option<Timestamp>,
    pub feed_time: Option<Timestamp>,
    hash_probe: u64,
    fingerprint: Fingerprint,
    body_len: u64,
    checksum: u64,
}

fn u64_at(b: &[u8], at: usize) -> u64 {
    let mut a = [0u8; 8];
    a.copy_from_slice(&b[at..at + 8]);
    u64::from_le_bytes(a)
}

fn time_of(ns: i64) -> Option<Timestamp> {
    (ns != NONE_TIME).then(|| Timestamp::from_unix_nanos(ns))
}

impl Header {
    /// Reads the header fields without checking the checksum (enough to
    /// order files); [`Header::check`] verifies the whole snapshot.
    pub fn read(bytes: &[u8]) -> Result<Header, SnapshotError> {
        if bytes.len() < MAGIC.len() || bytes[..MAGIC.len()] != MAGIC {
            return Err(if bytes.len() < MAGIC.len() && MAGIC.starts_with(bytes) {
                SnapshotError::Truncated { got: bytes.len(), need: HEADER_LEN }
            } else {
                SnapshotError::NotSnapshot
            });
        }
        if bytes.len() < HEADER_LEN {
            return Err(SnapshotError::Truncated { got: bytes.len(), need: HEADER_LEN });
        }
        let mut v = [0u8; 4];
        v.copy_from_slice(&bytes[8..12]);
        Ok(Header {
            version: u32::from_le_bytes(v),
            next_track: u64_at(bytes, 12),
            written_at: time_of(u64_at(bytes, 20) as i64),
            feed_time: time_of(u64_at(bytes, 28) as i64),
            hash_probe: u64_at(bytes, 36),
            fingerprint: Fingerprint { site: u64_at(bytes, 44), sensors: u64_at(bytes, 52), tracking: u64_at(bytes, 60) },
            body_len: u64_at(bytes, 68),
            checksum: u64_at(bytes, CHECKSUM_AT),
        })
    }

    /// Reads the header and checks the length and the checksum: the
    /// snapshot is whole and undamaged (its version may still differ).
    pub fn check(bytes: &[u8]) -> Result<Header, SnapshotError> {
        let h = Header::read(bytes)?;
        let need = (HEADER_LEN as u64).saturating_add(h.body_len);
        if (bytes.len() as u64) < need {
            return Err(SnapshotError::Truncated { got: bytes.len(), need: usize::try_from(need).unwrap_or(usize::MAX) });
        }
        if (bytes.len() as u64) > need {
            return Err(SnapshotError::Decode(format!("{} bytes after the end of the snapshot", bytes.len() as u64 - need)));
        }
        if fnv1a64(&[&bytes[..CHECKSUM_AT], &bytes[HEADER_LEN..]]) != h.checksum {
            return Err(SnapshotError::Checksum);
        }
        Ok(h)
    }
}

#[derive(Serialize, Deserialize)]
struct Body {
    last: Option<FeedKey>,
    screen: ScreenState,
    engine: EngineState,
}

/// Frames a snapshot: the header of the module docs and the body.
/// `written_at` is the daemon clock (None offline); it only bounds which
/// recording files a restart reads.
pub fn encode(fingerprint: &Fingerprint, engine: EngineState, screen: &Screen, last: Option<FeedKey>, written_at: Option<Timestamp>) -> Vec<u8> {
    let next_track = engine.next_track_number();
    let body = Body { last, screen: screen.state(), engine };
    // The body is plain data (numbers, strings, sequences of known
    // length), which postcard always encodes; were it ever to fail, the
    // empty body would make the snapshot refused on restore, not wrong.
    let body = postcard::to_allocvec(&body).unwrap_or_else(|e| {
        tracing::error!(error = %e, "cannot encode a snapshot body");
        Vec::new()
    });
    let mut out = Vec::with_capacity(HEADER_LEN + body.len());
    out.resize(HEADER_LEN, 0);
    out.extend_from_slice(&body);
    let body_len = (out.len() - HEADER_LEN) as u64;
    out[..8].copy_from_slice(&MAGIC);
    out[8..12].copy_from_slice(&FORMAT_VERSION.to_le_bytes());
    out[12..20].copy_from_slice(&next_track.to_le_bytes());
    out[20..28].copy_from_slice(&written_at.map_or(NONE_TIME, |t| t.unix_nanos()).to_le_bytes());
    out[28..36].copy_from_slice(&last.map_or(NONE_TIME, |k| k.time.unix_nanos()).to_le_bytes());
    out[36..44].copy_from_slice(&hash_probe().to_le_bytes());
    out[44..52].copy_from_slice(&fingerprint.site.to_le_bytes());
    out[52..60].copy_from_slice(&fingerprint.sensors.to_le_bytes());
    out[60..68].copy_from_slice(&fingerprint.tracking.to_le_bytes());
    out[68..76].copy_from_slice(&body_len.to_le_bytes());
    let sum = fnv1a64(&[&out[..CHECKSUM_AT], &out[HEADER_LEN..]]);
    out[CHECKSUM_AT..HEADER_LEN].copy_from_slice(&sum.to_le_bytes());
    out
}

/// The screen and the engine, in that order: what `skerry track` and the
/// daemon's engine task run, and what a snapshot saves.
pub struct Pipeline {
    engine: Engine,
    screen: Screen,
    last: Option<FeedKey>,
    fingerprint: Fingerprint,
}

impl Pipeline {
    /// A fresh pipeline; its screen checks duplicates only (the time check
    /// is made before, where the reference time is known).
    pub fn new(cfg: &Config) -> Result<Pipeline, EngineError> {
        Ok(Pipeline { engine: Engine::new(cfg)?, screen: Screen::new(None, cfg.feed.max_time_offset_s), last: None, fingerprint: Fingerprint::of(cfg) })
    }

    /// Passes `rec` (in feed order) through the screen and, if admitted,
    /// into the engine.
    pub fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) -> Result<(), Reject> {
        let key = FeedKey::of(rec);
        if self.last.is_none_or(|l| key > l) {
            self.last = Some(key);
        }
        self.screen.admit(rec)?;
        self.engine.handle(rec, out);
        Ok(())
    }

    pub fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>) {
        self.engine.advance(now, out);
    }

    pub fn finish(&mut self, out: &mut Vec<TrackRecord>) {
        self.engine.finish(out);
    }

    pub fn engine(&self) -> &Engine {
        &self.engine
    }

    pub fn engine_mut(&mut self) -> &mut Engine {
        &mut self.engine
    }

    pub fn screen(&self) -> &Screen {
        &self.screen
    }

    /// The greatest feed-order key of the records handled (admitted or
    /// screened out).
    pub fn last_key(&self) -> Option<FeedKey> {
        self.last
    }

    pub fn into_parts(self) -> (Engine, Screen, Option<FeedKey>) {
        (self.engine, self.screen, self.last)
    }

    /// The snapshot bytes (offline: no clock time in them).
    pub fn snapshot(&self) -> Vec<u8> {
        encode(&self.fingerprint, self.engine.state(), &self.screen, self.last, None)
    }

    /// The snapshot bytes, stamped with the daemon clock `written_at`.
    pub fn snapshot_at(&self, written_at: Timestamp) -> Vec<u8> {
        encode(&self.fingerprint, self.engine.state(), &self.screen, self.last, Some(written_at))
    }

    /// A pipeline that continues from `bytes` under `cfg`.
    pub fn restore(cfg: &Config, bytes: &[u8]) -> Result<Pipeline, SnapshotError> {
        let h = Header::check(bytes)?;
        if h.version != FORMAT_VERSION {
            return Err(SnapshotError::Version { found: h.version });
        }
        if h.hash_probe != hash_probe() {
            return Err(SnapshotError::OtherBuild);
        }
        let fp = Fingerprint::of(cfg);
        if h.fingerprint.site != fp.site {
            return Err(SnapshotError::ConfigChanged("site origin"));
        }
        if h.fingerprint.sensors != fp.sensors {
            return Err(SnapshotError::ConfigChanged("sensor table"));
        }
        if h.fingerprint.tracking != fp.tracking {
            return Err(SnapshotError::ConfigChanged("[tracking] section"));
        }
        let body: Body = postcard::from_bytes(&bytes[HEADER_LEN..]).map_err(|e| SnapshotError::Decode(e.to_string()))?;
        if body.engine.next_track_number() != h.next_track || body.last.map(|k| k.time) != h.feed_time {
            return Err(SnapshotError::Decode("the header and the body disagree".into()));
        }
        let engine = Engine::from_state(cfg, body.engine)?;
        Ok(Pipeline { engine, screen: Screen::from_state(body.screen, cfg.feed.max_time_offset_s), last: body.last, fingerprint: fp })
    }

    /// A cold pipeline that gives out no track number below `next`.
    pub fn reserve_track_numbers(&mut self, next: u64) {
        self.engine.reserve_track_numbers(next);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// FNV-1a 64 test vectors from the appendix of the IETF FNV draft
    /// (draft-eastlake-fnv; from memory): "" → cbf29ce484222325,
    /// "a" → af63dc4c8601ec8c, "foobar" → 85944171f73967e8.
    #[test]
    fn fnv1a64_vectors() {
        assert_eq!(fnv1a64(&[b""]), 0xcbf29ce484222325);
        assert_eq!(fnv1a64(&[b"a"]), 0xaf63dc4c8601ec8c);
        assert_eq!(fnv1a64(&[b"foobar"]), 0x85944171f73967e8);
        assert_eq!(fnv1a64(&[b"foo", b"bar"]), 0x85944171f73967e8);
    }

    #[test]
    fn keys_order_as_feed_order() {
        use crate::feed::{Report, ScanEnd};
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let recs: Vec<Record> = (0..400)
            .map(|_| {
                let sensor = rng.random_range(0..3u16);
                let time = Timestamp::from_unix_nanos(rng.random_range(0..4i64) * 1_000_000);
                match rng.random_range(0..3) {
                    0 => Record::Detection(Detection { sensor, time, scan: None, range_m: rng.random_range(1..5) as f64, bearing_deg: 1.0, radial_speed_mps: None, snr_db: None }),
                    1 => Record::Report(Report { sensor, time, id: "200100001".into(), lat_deg: rng.random_range(0..3) as f64, lon_deg: 7.0, sog_kn: None, cog_deg: None, heading_deg: None, vessel: None }),
                    _ => Record::ScanEnd(ScanEnd { sensor, time, scan: rng.random_range(0..3), sector_deg: None }),
                }
            })
            .collect();
        // Definition check against every pair.
        for a in &recs {
            for b in &recs {
                assert_eq!(FeedKey::of(a).cmp(&FeedKey::of(b)), crate::offline::feed_order(a, b));
                assert_eq!(FeedKey::of(a).precedes(b), crate::offline::feed_order(b, a).is_gt());
            }
        }
    }
}
