//! ASTERIX radar input (CONTRACT.md §8): data blocks of categories 048
//! (monoradar target reports, ed. 1.31), 034 (monoradar service messages,
//! ed. 1.29) and 010 (monosensor surface movement data, ed. 1.1), turned
//! into skerry's `detection` and `scan_end` records.
//!
//! # Contract
//!
//! - Input is a byte slice holding one or more data blocks back to back
//!   (a UDP datagram, or a whole recording). Each block is `CAT`, `LEN`
//!   (big-endian, counting the three header octets), then records.
//! - Each record is walked item by item with its category's whole UAP
//!   ([`uap`]), so items skerry does not use are skipped by their kind
//!   (fixed, extended, repetitive, compound, explicit).
//! - A record maps to a sensor by its data source (SAC/SIC) through a
//!   [`SourceTable`] built from the configuration.
//! - Time of day (LSB 1/128 s) becomes a full UTC time on the day that puts
//!   it nearest a reference: the receive clock ([`AsterixDecoder::decode`])
//!   or, for a recording, the previous decoded time, starting from the
//!   recording's date ([`AsterixDecoder::decode_recording`]). This handles
//!   the midnight rollover in both directions.
//! - Every failure is an [`AsterixReject`] with a stable reason key. What
//!   is lost with it depends on what the failure leaves trustworthy:
//!   a record-level fault (unknown source, test target, no position …)
//!   loses that record only; a framing fault inside a record (truncated
//!   item, FSPEC that never ends, a flagged FRN the UAP does not define)
//!   loses the rest of that block, since the next record's start is
//!   unknown, but the next block is still found by `LEN`; a block header
//!   fault (`LEN` < 3 or beyond the input) loses the rest of the input.
//! - Decoding allocates nothing: items are handed to a callback.
//!
//! Scan counting is per sensor and kept here: a category 034 north marker
//! or a category 010 start of update cycle ends scan *n* (its `scan_end`
//! carries *n*) and later plots carry *n* + 1.
//!
//! Sectors: a sector crossing at edge *b* closes `[a, b]`, *a* being the
//! previous edge (a north marker is the edge 0°). A radar that sends no
//! sector crossings gets a full-circle `scan_end` at each north marker.
//! The first crossing after start-up (no previous edge) and a repeated
//! edge close nothing: their [`Service`] has `scan_end: None`.
//!
//! # Wiring (for the daemon and the offline commands)
//!
//! - Build the table once: `SourceTable::from_config(&cfg)?` (radar
//!   sensors with both `asterix_sac` and `asterix_sic`; sensor ids are
//!   configuration indices, as in `Config::sensor_table`). Its errors
//!   (duplicate pair, only one of the two keys, a transponder with a
//!   source) belong in configuration validation.
//! - Live: `decoder.decode(datagram, receive_time, &mut sink)`; offline
//!   (`--asterix FILE --date D`): `decoder.decode_recording(bytes, D, &mut sink)`.
//! - In the sink: `item.record()` is the feed record to screen and track;
//!   `Plot::{amplitude, doppler, run_length_deg}` and
//!   `Service::rotation_period_s` are extras for health and metrics;
//!   rejects count under `AsterixReject::reason.key()`.

mod cat010;
mod cat034;
mod cat048;
pub(crate) mod uap;

use crate::config::Config;
use crate::feed::{Detection, Record, ScanEnd, SensorId, SensorKind};
use crate::time::Timestamp;

/// Nanoseconds in one time-of-day LSB (1/128 s), exactly.
const NANOS_PER_TOD: i64 = 7_812_500;
const NANOS_PER_DAY: i64 = 86_400 * 1_000_000_000;
/// Time-of-day values run from 0 to 24 h exclusive (LSB 1/128 s).
const TOD_PER_DAY: u32 = 86_400 * 128;
/// 1 NM = 1852 m (international nautical mile, exact by definition).
pub const METRES_PER_NM: f64 = 1852.0;

/// Why a block or record was not turned into an item. [`key`](Self::key)
/// gives the stable snake_case name used in counters and metrics.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum AsterixRejectReason {
    /// Fewer than 3 octets left where a block header should start.
    TruncatedBlock,
    /// `LEN` is under 3 or runs past the end of the input.
    BadBlockLength,
    /// A category other than 048, 034, 010 (the block is skipped by `LEN`).
    UnknownCategory,
    /// A record's FSPEC runs to the end of its block.
    FspecUnterminated,
    /// The FSPEC (or a compound item's bitmap) flags an item the UAP does
    /// not define, whose length therefore cannot be known.
    UndefinedItem,
    /// An item runs past the end of its block.
    TruncatedItem,
    /// An explicit-length item (SP, RE) with length 0.
    BadItemLength,
    /// No data source identifier (I0xx/010) in the record.
    MissingSource,
    /// SAC/SIC of no configured radar.
    UnknownSource,
    /// Category 034 or 010 record without its message type (I0xx/000).
    MissingMessageType,
    /// A test target (TST bit of I048/020 or I010/020).
    TestTarget,
    /// Category 048 report type 0: no detection (an extrapolated track).
    NoDetection,
    /// A target report without a measured position.
    NoPosition,
    /// A record that needs a time of day has none.
    NoTime,
    /// Time of day at or beyond 24 h.
    BadTime,
    /// A plot at range 0 (the contract needs range > 0).
    ZeroRange,
    /// A category 034 sector crossing without its sector number.
    MissingSector,
}

impl AsterixRejectReason {
    pub const ALL: [AsterixRejectReason; 17] = [
        Self::TruncatedBlock,
        Self::BadBlockLength,
        Self::UnknownCategory,
        Self::FspecUnterminated,
        Self::UndefinedItem,
        Self::TruncatedItem,
        Self::BadItemLength,
        Self::MissingSource,
        Self::UnknownSource,
        Self::MissingMessageType,
        Self::TestTarget,
        Self::NoDetection,
        Self::NoPosition,
        Self::NoTime,
        Self::BadTime,
        Self::ZeroRange,
        Self::MissingSector,
    ];

    pub fn key(self) -> &'static str {
        match self {
            Self::TruncatedBlock => "truncated_block",
            Self::BadBlockLength => "bad_block_length",
            Self::UnknownCategory => "unknown_category",
            Self::FspecUnterminated => "fspec_unterminated",
            Self::UndefinedItem => "undefined_item",
            Self::TruncatedItem => "truncated_item",
            Self::BadItemLength => "bad_item_length",
            Self::MissingSource => "missing_source",
            Self::UnknownSource => "unknown_source",
            Self::MissingMessageType => "missing_message_type",
            Self::TestTarget => "test_target",
            Self::NoDetection => "no_detection",
            Self::NoPosition => "no_position",
            Self::NoTime => "no_time",
            Self::BadTime => "bad_time",
            Self::ZeroRange => "zero_range",
            Self::MissingSector => "missing_sector",
        }
    }

    /// The key under which the offline counts and the daemon's metrics
    /// count this reason: [`key`](Self::key) with the prefix `asterix_`, so
    /// that trade-input reasons never mix with the JSON feed's.
    pub const fn feed_key(self) -> &'static str {
        match self {
            Self::TruncatedBlock => "asterix_truncated_block",
            Self::BadBlockLength => "asterix_bad_block_length",
            Self::UnknownCategory => "asterix_unknown_category",
            Self::FspecUnterminated => "asterix_fspec_unterminated",
            Self::UndefinedItem => "asterix_undefined_item",
            Self::TruncatedItem => "asterix_truncated_item",
            Self::BadItemLength => "asterix_bad_item_length",
            Self::MissingSource => "asterix_missing_source",
            Self::UnknownSource => "asterix_unknown_source",
            Self::MissingMessageType => "asterix_missing_message_type",
            Self::TestTarget => "asterix_test_target",
            Self::NoDetection => "asterix_no_detection",
            Self::NoPosition => "asterix_no_position",
            Self::NoTime => "asterix_no_time",
            Self::BadTime => "asterix_bad_time",
            Self::ZeroRange => "asterix_zero_range",
            Self::MissingSector => "asterix_missing_sector",
        }
    }

    /// Whether this reason means the input was damaged (rather than a
    /// well-formed record skerry does not use).
    pub fn is_malformed(self) -> bool {
        matches!(
            self,
            Self::TruncatedBlock
                | Self::BadBlockLength
                | Self::FspecUnterminated
                | Self::UndefinedItem
                | Self::TruncatedItem
                | Self::BadItemLength
        )
    }

    fn index(self) -> usize {
        self as usize
    }
}

impl std::fmt::Display for AsterixRejectReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.key())
    }
}

/// A rejected block or record: the reason, the category (0 when the
/// block header itself was unreadable) and the sensor if its source was
/// read and is configured.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct AsterixReject {
    pub reason: AsterixRejectReason,
    pub category: u8,
    pub sensor: Option<SensorId>,
}

/// The plot amplitude as the category gives it.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Amplitude {
    /// I048/130 PAM: amplitude of the primary plot, dBm.
    Dbm(f64),
    /// I010/131: radar-dependent, 0 = the radar's minimum detectable level.
    Raw(u8),
}

/// I048/120 calculated Doppler speed.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Doppler {
    /// Positive away from the radar (the specification's recommendation;
    /// the radar's ICD has the last word).
    pub speed_mps: f64,
    /// The D bit: the radar flags the speed as doubtful. A doubtful speed
    /// is not copied into `Detection::radial_speed_mps`.
    pub doubtful: bool,
}

/// One radar plot, with what ASTERIX says beyond the feed record.
#[derive(Clone, Debug, PartialEq)]
pub struct Plot {
    /// The feed record. `scan` is the decoder's scan count for the sensor;
    /// `radial_speed_mps` is the Doppler speed unless doubtful; `snr_db`
    /// is never set (ASTERIX carries amplitude, not SNR).
    pub detection: Detection,
    /// 48 or 10.
    pub category: u8,
    /// TYP of the target report descriptor (048: 1 = single PSR plot,
    /// 2.. = SSR/Mode S; 010: 3 = PSR), if the descriptor was present.
    pub report_type: Option<u8>,
    /// The SIM bit: a simulated target report.
    pub simulated: bool,
    pub amplitude: Option<Amplitude>,
    /// I048/130 PRL: primary plot run length, degrees.
    pub run_length_deg: Option<f64>,
    pub doppler: Option<Doppler>,
    /// Position taken from I010/042 (Cartesian) because I010/040 was absent.
    pub from_cartesian: bool,
}

/// What a service message says.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum ServiceMessage {
    /// I034/000 = 1.
    NorthMarker,
    /// I034/000 = 2, with the sector's leading edge.
    SectorCrossing { sector_deg: f64 },
    /// I010/000 = 2.
    StartOfUpdateCycle,
    /// Any other message type of category 034 or 010 (status, filters,
    /// jamming strobes …): kept for health, no record.
    Other { message_type: u8 },
}

/// A service message (category 034, or a category 010 message that is not
/// a target report). `scan_end` is the feed record, if the message closed
/// a sector or a scan.
#[derive(Clone, Debug, PartialEq)]
pub struct Service {
    pub sensor: SensorId,
    pub category: u8,
    pub message: ServiceMessage,
    pub time: Option<Timestamp>,
    /// I034/041: the antenna rotation period the radar measured, seconds.
    pub rotation_period_s: Option<f64>,
    pub scan_end: Option<ScanEnd>,
}

/// One decoded record.
#[derive(Clone, Debug, PartialEq)]
pub enum AsterixItem {
    Plot(Plot),
    Service(Service),
}

impl AsterixItem {
    /// The feed record this item carries, if any.
    pub fn record(&self) -> Option<Record> {
        match self {
            AsterixItem::Plot(p) => Some(Record::Detection(p.detection.clone())),
            AsterixItem::Service(s) => s.scan_end.clone().map(Record::ScanEnd),
        }
    }
    pub fn sensor(&self) -> SensorId {
        match self {
            AsterixItem::Plot(p) => p.detection.sensor,
            AsterixItem::Service(s) => s.sensor,
        }
    }
}

/// Why a [`SourceTable`] could not be built.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum SourceTableError {
    #[error("sensors[{second}]: ASTERIX source SAC {sac} / SIC {sic} is already used by sensors[{first}]")]
    Duplicate { sac: u8, sic: u8, first: SensorId, second: SensorId },
    #[error("sensors[{0}]: `asterix_sac` and `asterix_sic` must be given together")]
    Incomplete(SensorId),
    #[error("sensors[{0}]: only a radar sensor can have an ASTERIX source")]
    NotRadar(SensorId),
}

/// `(SAC, SIC) → sensor`, built once from the configuration.
#[derive(Clone, Debug, Default)]
pub struct SourceTable {
    /// Sorted by key `SAC << 8 | SIC`; a handful of entries, so a binary
    /// search beats hashing.
    entries: Vec<(u16, SensorId)>,
}

impl SourceTable {
    pub fn new(sources: impl IntoIterator<Item = (u8, u8, SensorId)>) -> Result<Self, SourceTableError> {
        let mut entries: Vec<(u16, SensorId)> = Vec::new();
        for (sac, sic, id) in sources {
            let key = (sac as u16) << 8 | sic as u16;
            if let Some(&(_, first)) = entries.iter().find(|(k, _)| *k == key) {
                return Err(SourceTableError::Duplicate { sac, sic, first, second: id });
            }
            entries.push((key, id));
        }
        entries.sort_unstable();
        Ok(SourceTable { entries })
    }

    /// Every `[[sensors]]` entry with `asterix_sac` and `asterix_sic`; the
    /// sensor id is its index in the configuration (as in
    /// [`Config::sensor_table`]).
    pub fn from_config(cfg: &Config) -> Result<Self, SourceTableError> {
        let mut pairs = Vec::new();
        for (i, s) in cfg.sensors.iter().enumerate() {
            let id = i as SensorId;
            match (s.asterix_sac, s.asterix_sic) {
                (Some(sac), Some(sic)) => {
                    if s.kind != SensorKind::Radar {
                        return Err(SourceTableError::NotRadar(id));
                    }
                    pairs.push((sac, sic, id));
                }
                (None, None) => {}
                _ => return Err(SourceTableError::Incomplete(id)),
            }
        }
        Self::new(pairs)
    }

    #[inline]
    pub fn lookup(&self, sac: u8, sic: u8) -> Option<SensorId> {
        let key = (sac as u16) << 8 | sic as u16;
        self.entries.binary_search_by_key(&key, |e| e.0).ok().map(|i| self.entries[i].1)
    }

    pub fn len(&self) -> usize {
        self.entries.len()
    }
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }
}

/// Items and rejects counted by the decoder since it was made.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct AsterixCounts {
    pub plots: u64,
    pub services: u64,
    pub scan_ends: u64,
    rejected: [u64; AsterixRejectReason::ALL.len()],
}

impl AsterixCounts {
    pub fn rejected(&self, reason: AsterixRejectReason) -> u64 {
        self.rejected[reason.index()]
    }
    pub fn total_rejected(&self) -> u64 {
        self.rejected.iter().sum()
    }
    /// `(key, count)` for every reason, in [`AsterixRejectReason::ALL`] order.
    pub fn rejected_by_key(&self) -> impl Iterator<Item = (&'static str, u64)> + '_ {
        AsterixRejectReason::ALL.iter().map(|r| (r.key(), self.rejected[r.index()]))
    }
}

/// Per-radar state: the scan count and the last sector edge seen.
#[derive(Clone, Debug, Default)]
struct SensorState {
    scan: u64,
    /// Leading edge (I034/020 raw, 360/256 °) of the last sector that
    /// ended; `None` until the first north marker or sector crossing.
    last_edge: Option<u8>,
    /// The radar sends sector crossings, so a north marker closes only
    /// the last sector, not the whole circle.
    uses_sectors: bool,
}

/// Decoder state: the source table, the per-radar scan state, the counts
/// and (for recordings) the running day reference.
#[derive(Clone, Debug)]
pub struct AsterixDecoder {
    sources: SourceTable,
    sensors: Vec<SensorState>,
    counts: AsterixCounts,
    /// Recording mode: the last decoded time, the reference for the next.
    follow: Option<Timestamp>,
}

pub(crate) type Sink<'s> = dyn FnMut(Result<AsterixItem, AsterixReject>) + 's;

/// A record-level outcome: the item, or why this one record is dropped.
pub(crate) type RecordOutcome = Result<AsterixItem, AsterixRejectReason>;

/// Time context for one decode call.
#[derive(Copy, Clone)]
pub(crate) enum Reference {
    Clock(Timestamp),
    Follow,
}

impl AsterixDecoder {
    pub fn new(sources: SourceTable) -> Self {
        let n = sources.entries.iter().map(|e| e.1 as usize + 1).max().unwrap_or(0);
        AsterixDecoder { sources, sensors: vec![SensorState::default(); n], counts: AsterixCounts::default(), follow: None }
    }

    /// Live input: decodes one datagram received at `now`.
    pub fn decode(&mut self, datagram: &[u8], now: Timestamp, sink: &mut impl FnMut(Result<AsterixItem, AsterixReject>)) {
        self.run(datagram, Reference::Clock(now), sink);
    }

    /// Recorded input: blocks back to back, recorded on `date` (any time
    /// of that UTC day). The first time of day is placed on `date`; each
    /// later one on the day nearest the previous decoded time, so a
    /// recording may run across midnight. Call repeatedly for a recording
    /// read in pieces (whole blocks per piece): `date` is used only on the
    /// first call.
    pub fn decode_recording(&mut self, bytes: &[u8], date: Timestamp, sink: &mut impl FnMut(Result<AsterixItem, AsterixReject>)) {
        if self.follow.is_none() {
            self.follow = Some(Timestamp::from_unix_nanos(date.midnight().unix_nanos() + NANOS_PER_DAY / 2));
        }
        self.run(bytes, Reference::Follow, sink);
    }

    pub fn counts(&self) -> &AsterixCounts {
        &self.counts
    }

    /// The sensor's current scan count (the scan its next plots belong to).
    pub fn scan(&self, sensor: SensorId) -> u64 {
        self.sensors.get(sensor as usize).map(|s| s.scan).unwrap_or(0)
    }

    pub fn sources(&self) -> &SourceTable {
        &self.sources
    }

    fn run(&mut self, buf: &[u8], reference: Reference, sink: &mut Sink<'_>) {
        let mut pos = 0usize;
        while pos < buf.len() {
            let rest = &buf[pos..];
            if rest.len() < 3 {
                self.reject(sink, AsterixRejectReason::TruncatedBlock, rest[0], None);
                return;
            }
            let cat = rest[0];
            let len = u16::from_be_bytes([rest[1], rest[2]]) as usize;
            if len < 3 || len > rest.len() {
                self.reject(sink, AsterixRejectReason::BadBlockLength, cat, None);
                return;
            }
            let body = &rest[3..len];
            match cat {
                48 | 34 | 10 => self.block(cat, body, reference, sink),
                _ => self.reject(sink, AsterixRejectReason::UnknownCategory, cat, None),
            }
            pos += len;
        }
    }

    fn block(&mut self, cat: u8, body: &[u8], reference: Reference, sink: &mut Sink<'_>) {
        let mut pos = 0usize;
        while pos < body.len() {
            let rec = &body[pos..];
            let step = match cat {
                48 => cat048::record(self, rec, reference, sink),
                34 => cat034::record(self, rec, reference, sink),
                _ => cat010::record(self, rec, reference, sink),
            };
            match step {
                Ok(len) => pos += len,
                Err((reason, sensor)) => {
                    self.reject(sink, reason, cat, sensor);
                    return;
                }
            }
        }
    }

    /// Hands a record's outcome to the sink, counting it.
    #[inline(always)]
    pub(crate) fn emit(&mut self, sink: &mut Sink<'_>, category: u8, sensor: Option<SensorId>, outcome: RecordOutcome) {
        match outcome {
            Ok(item) => {
                match &item {
                    AsterixItem::Plot(_) => self.counts.plots += 1,
                    AsterixItem::Service(s) => {
                        self.counts.services += 1;
                        if s.scan_end.is_some() {
                            self.counts.scan_ends += 1;
                        }
                    }
                }
                sink(Ok(item));
            }
            Err(reason) => self.reject(sink, reason, category, sensor),
        }
    }

    fn reject(&mut self, sink: &mut Sink<'_>, reason: AsterixRejectReason, category: u8, sensor: Option<SensorId>) {
        self.counts.rejected[reason.index()] += 1;
        sink(Err(AsterixReject { reason, category, sensor }));
    }

    /// The configured sensor for a data source, if any.
    #[inline]
    pub(crate) fn lookup(&self, src: Option<[u8; 2]>) -> Result<SensorId, AsterixRejectReason> {
        let [sac, sic] = src.ok_or(AsterixRejectReason::MissingSource)?;
        self.sources.lookup(sac, sic).ok_or(AsterixRejectReason::UnknownSource)
    }

    fn state(&mut self, sensor: SensorId) -> &mut SensorState {
        let i = sensor as usize;
        if i >= self.sensors.len() {
            // Only reachable if the table and state disagree; stay safe.
            self.sensors.resize(i + 1, SensorState::default());
        }
        &mut self.sensors[i]
    }

    pub(crate) fn current_scan(&mut self, sensor: SensorId) -> u64 {
        self.state(sensor).scan
    }

    /// A 24-bit time of day (1/128 s) as a full UTC time.
    #[inline]
    pub(crate) fn time_of_day(&mut self, tod: u32, reference: Reference) -> Result<Timestamp, AsterixRejectReason> {
        if tod >= TOD_PER_DAY {
            return Err(AsterixRejectReason::BadTime);
        }
        let r = match reference {
            Reference::Clock(t) => t,
            // Set by decode_recording before any record is read.
            Reference::Follow => self.follow.unwrap_or_default(),
        };
        let t = nearest_day(tod, r);
        if let Reference::Follow = reference {
            self.follow = Some(t);
        }
        Ok(t)
    }

    /// A north marker or sector crossing at `edge` (360/256 °); `north`
    /// for the north marker. Returns the sector covered since the last
    /// edge (`Some(None)` = full circle) or `None` if this message closes
    /// nothing new, and the scan it belongs to; a north marker then starts
    /// the next scan.
    pub(crate) fn sector_edge(&mut self, sensor: SensorId, edge: u8, north: bool) -> (Option<Option<[f64; 2]>>, u64) {
        let st = self.state(sensor);
        let scan = st.scan;
        let deg = |e: u8| e as f64 * (360.0 / 256.0);
        let covered = if north && !st.uses_sectors {
            Some(None)
        } else {
            match st.last_edge {
                Some(prev) if prev != edge => Some(Some([deg(prev), deg(edge)])),
                _ => None,
            }
        };
        if !north {
            st.uses_sectors = true;
        }
        st.last_edge = Some(edge);
        if north {
            st.scan += 1;
        }
        (covered, scan)
    }

    /// A category 010 start of update cycle: ends the current scan.
    pub(crate) fn update_cycle(&mut self, sensor: SensorId) -> u64 {
        let st = self.state(sensor);
        let scan = st.scan;
        st.scan += 1;
        scan
    }
}

/// The instant with time of day `tod` (1/128 s) nearest `reference`: on
/// the reference's day, the day before, or the day after.
pub fn nearest_day(tod: u32, reference: Timestamp) -> Timestamp {
    let r = reference.unix_nanos();
    let t = reference.midnight().unix_nanos() + tod as i64 * NANOS_PER_TOD;
    let d = t - r;
    let t = if d > NANOS_PER_DAY / 2 {
        t - NANOS_PER_DAY
    } else if d < -NANOS_PER_DAY / 2 {
        t + NANOS_PER_DAY
    } else {
        t
    };
    Timestamp::from_unix_nanos(t)
}

/// A record walked by its UAP (its outcome already handed to the sink):
/// the octets it spans, or the framing fault with the sensor if the
/// source was already read.
pub(crate) type Walked = Result<usize, (AsterixRejectReason, Option<SensorId>)>;

/// Walks one record: FSPEC, then each present item in UAP order, handing
/// `(frn_index, item_octets)` to `f`. Returns the record's length.
#[inline]
pub(crate) fn walk<'a>(uap_table: &'static [uap::Item], rec: &'a [u8], mut f: impl FnMut(usize, &'a [u8])) -> Result<usize, AsterixRejectReason> {
    let (mut flags, mut pos) = uap::read_bitmap(rec, uap_table.len(), AsterixRejectReason::FspecUnterminated)?;
    while flags != 0 {
        let i = flags.trailing_zeros() as usize;
        flags &= flags - 1;
        let rest = &rec[pos..];
        let len = uap::item_len(uap_table[i], rest)?;
        f(i, &rest[..len]);
        pos += len;
    }
    Ok(pos)
}

#[inline]
pub(crate) fn u16_at(b: &[u8], i: usize) -> u16 {
    u16::from_be_bytes([b[i], b[i + 1]])
}
#[inline]
pub(crate) fn u24(b: &[u8]) -> u32 {
    (b[0] as u32) << 16 | (b[1] as u32) << 8 | b[2] as u32
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ts(s: &str) -> Timestamp {
        Timestamp::parse_rfc3339(s).unwrap()
    }

    #[test]
    fn time_of_day_rolls_over_both_ways() {
        // 00:00:05 seen just before midnight belongs to the next day, and
        // 23:59:58 seen just after midnight to the day before (definition:
        // the nearest instant with that time of day).
        assert_eq!(nearest_day(5 * 128, ts("2026-05-14T23:59:50Z")), ts("2026-05-15T00:00:05Z"));
        assert_eq!(nearest_day((86_398) * 128, ts("2026-05-15T00:00:03Z")), ts("2026-05-14T23:59:58Z"));
        assert_eq!(nearest_day(6 * 3600 * 128 + 16, ts("2026-05-14T06:00:01Z")), ts("2026-05-14T06:00:00.125Z"));
    }

    #[test]
    fn source_table_rejects_duplicates() {
        let e = SourceTable::new([(25, 201, 0), (25, 202, 1), (25, 201, 3)]).unwrap_err();
        assert_eq!(e, SourceTableError::Duplicate { sac: 25, sic: 201, first: 0, second: 3 });
        let t = SourceTable::new([(25, 202, 1), (25, 201, 0), (3, 9, 4)]).unwrap();
        assert_eq!(t.lookup(25, 201), Some(0));
        assert_eq!(t.lookup(3, 9), Some(4));
        assert_eq!(t.lookup(9, 3), None);
    }

    #[test]
    fn reason_keys_are_unique() {
        let mut keys: Vec<_> = AsterixRejectReason::ALL.iter().map(|r| r.key()).collect();
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), AsterixRejectReason::ALL.len());
        for (i, r) in AsterixRejectReason::ALL.iter().enumerate() {
            assert_eq!(r.index(), i);
        }
        for r in AsterixRejectReason::ALL {
            assert_eq!(r.feed_key(), format!("asterix_{}", r.key()));
        }
    }
}
