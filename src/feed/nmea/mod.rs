//! AIS over NMEA 0183 (CONTRACT.md §8): `!--VDM` / `!--VDO` sentences
//! (IEC 61162-1) carrying ITU-R M.1371-5 messages, turned into skerry's
//! `report` records.
//!
//! # Contract
//!
//! - Input is one line at a time ([`AisDecoder::decode_line`]) or a
//!   datagram of lines ([`AisDecoder::decode_datagram`]). A line may start
//!   with an IEC 61162-1 tag block; its `c:` (Unix seconds) is the line's
//!   time. Without one, the time passed in (the receive time) is used; a
//!   line with neither is rejected (`no_time`). Nothing here reads a clock.
//! - The sentence checksum is checked; so is the tag block's.
//! - Multi-sentence messages are reassembled by (VDM/VDO, sequence id,
//!   channel), in any fragment order, with a timeout in sentence time.
//! - Each message's length is checked against its type: short messages
//!   are rejected (`wrong_length`), and so are messages longer than the
//!   type by more than 5 bits (a fill-bit count left out: common
//!   practice). Type 24 part A is accepted at 160 bits (ITU) or 168.
//! - Types 1, 2, 3, 18, 19 with a position become [`AisOutcome::Position`];
//!   without one (181° / 91°, "not available") they are
//!   [`AisOutcome::NoPosition`], which is not a measurement. SOG 1023,
//!   COG ≥ 3600, heading ≥ 360 (511 = not available) become `None`.
//! - Types 5, 19 and 24 (parts A and B) update a per-MMSI static table:
//!   name, call sign, ship type, dimensions. A position is moved from the
//!   GNSS antenna to the centre of the hull when the dimensions place the
//!   antenna (not A = C = 0) and the heading is known, or else the course
//!   over ground at 1 kn or more (the COG of a ship at rest is noise:
//!   common practice). The shift applied is returned with the report.
//! - Static data reaches the tracks on the position reports: once a
//!   vessel's static messages are in, every later `report` of that MMSI
//!   carries them as [`Report::vessel`] (name, ship type, length A + B,
//!   beam C + D; a shared [`VesselInfo`] rebuilt only when a static
//!   message changes it). The engine copies it onto the track that holds
//!   the identity. No new feed record kind is needed, and a JSON feed can
//!   carry the same data in the optional `name`, `ship_type`, `length_m`
//!   and `beam_m` of its `report` lines.
//! - `VDO` sentences (the receiver's own ship) give
//!   [`AisOutcome::OwnShip`], never a report of another vessel.
//! - Identity is the MMSI as 9 digits. The `Arc<str>` is made once per
//!   vessel and kept in the table, so decoding a report does not allocate
//!   once the vessel is known.
//!
//! # Wiring (for the daemon and the offline commands)
//!
//! - One [`AisDecoder`] per transponder sensor (its `nmea_udp` input or
//!   its `--nmea SENSOR=FILE` log), made with that sensor's id.
//! - Live: `decode_datagram(datagram, Some(receive_time), &mut sink)`;
//!   a log: `decode_line(line, None)` (lines need a `c:` tag block), or
//!   pass the previous line's time if the log has none.
//! - `AisOutcome::record()` is the `report` to screen and track. The
//!   hull-centre shift, antenna position, navigational status and UTC
//!   second come with [`AisPosition`]; [`AisDecoder::vessel`] gives the
//!   name, ship type and dimensions for display or identity checks.
//!   [`AisOutcome::OwnShip`] is the receiver's own ship (e.g. for a
//!   shipborne site's own position), never a track update.
//! - Counts: [`AisDecoder::counts`], reject keys from [`AisRejectReason::key`].

mod bits;
mod fragments;
mod sentence;

pub use bits::AisText;

use crate::feed::{Record, Report, SensorId, VesselInfo};
use crate::geo::{WGS84_A, WGS84_E2};
use crate::time::Timestamp;
use bits::Bits;
use fragments::{Lost, Reassembly};
use std::collections::HashMap;
use std::sync::Arc;

/// Why a line gave nothing. [`key`](Self::key) is the stable name used
/// in counters and metrics.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum AisRejectReason {
    /// Not an NMEA sentence (no `!` or `$`).
    NotSentence,
    /// No `*hh` checksum at the end.
    MissingChecksum,
    /// The checksum does not match.
    BadChecksum,
    /// A tag block that is unterminated, fails its checksum, or has a `c:`
    /// that is not a number.
    BadTagBlock,
    /// A valid sentence that is not VDM/VDO.
    NotAis,
    /// Fragment count, number, sequence id, channel or fill bits malformed.
    BadField,
    /// A payload character outside the six-bit set.
    BadPayload,
    /// A line or message beyond the longest allowed.
    TooLong,
    /// The message length does not match its type.
    WrongLength,
    /// Neither a tag block time nor a receive time.
    NoTime,
    /// MMSI 0 or above 999 999 999.
    BadMmsi,
    /// Latitude or longitude out of range (and not "not available").
    BadPosition,
    /// Type 24 with a part number other than 0 (A) or 1 (B).
    BadPartNumber,
    /// A multi-sentence message not completed within the timeout.
    FragmentTimeout,
    /// A multi-sentence message replaced by another with the same
    /// sequence id and channel before it was complete.
    FragmentAbandoned,
}

impl AisRejectReason {
    pub const ALL: [AisRejectReason; 15] = [
        Self::NotSentence,
        Self::MissingChecksum,
        Self::BadChecksum,
        Self::BadTagBlock,
        Self::NotAis,
        Self::BadField,
        Self::BadPayload,
        Self::TooLong,
        Self::WrongLength,
        Self::NoTime,
        Self::BadMmsi,
        Self::BadPosition,
        Self::BadPartNumber,
        Self::FragmentTimeout,
        Self::FragmentAbandoned,
    ];

    pub fn key(self) -> &'static str {
        match self {
            Self::NotSentence => "not_a_sentence",
            Self::MissingChecksum => "missing_checksum",
            Self::BadChecksum => "bad_checksum",
            Self::BadTagBlock => "bad_tag_block",
            Self::NotAis => "not_ais",
            Self::BadField => "bad_field",
            Self::BadPayload => "bad_payload",
            Self::TooLong => "too_long",
            Self::WrongLength => "wrong_length",
            Self::NoTime => "no_time",
            Self::BadMmsi => "bad_mmsi",
            Self::BadPosition => "bad_position",
            Self::BadPartNumber => "bad_part_number",
            Self::FragmentTimeout => "fragment_timeout",
            Self::FragmentAbandoned => "fragment_abandoned",
        }
    }

    /// The key under which the offline counts and the daemon's metrics
    /// count this reason: [`key`](Self::key) with the prefix `nmea_`, so
    /// that trade-input reasons never mix with the JSON feed's.
    pub const fn feed_key(self) -> &'static str {
        match self {
            Self::NotSentence => "nmea_not_a_sentence",
            Self::MissingChecksum => "nmea_missing_checksum",
            Self::BadChecksum => "nmea_bad_checksum",
            Self::BadTagBlock => "nmea_bad_tag_block",
            Self::NotAis => "nmea_not_ais",
            Self::BadField => "nmea_bad_field",
            Self::BadPayload => "nmea_bad_payload",
            Self::TooLong => "nmea_too_long",
            Self::WrongLength => "nmea_wrong_length",
            Self::NoTime => "nmea_no_time",
            Self::BadMmsi => "nmea_bad_mmsi",
            Self::BadPosition => "nmea_bad_position",
            Self::BadPartNumber => "nmea_bad_part_number",
            Self::FragmentTimeout => "nmea_fragment_timeout",
            Self::FragmentAbandoned => "nmea_fragment_abandoned",
        }
    }

    fn index(self) -> usize {
        self as usize
    }
}

impl std::fmt::Display for AisRejectReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.key())
    }
}

/// The GNSS antenna's place on the hull, metres (ITU-R M.1371-5 "A, B,
/// C, D": distances from the antenna to bow, stern, port, starboard).
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct Dimensions {
    pub to_bow_m: u16,
    pub to_stern_m: u16,
    pub to_port_m: u8,
    pub to_starboard_m: u8,
}

impl Dimensions {
    fn new(a: u32, b: u32, c: u32, d: u32) -> Option<Self> {
        // A = B = C = D = 0: neither dimensions nor reference point.
        if a == 0 && b == 0 && c == 0 && d == 0 {
            return None;
        }
        Some(Dimensions { to_bow_m: a as u16, to_stern_m: b as u16, to_port_m: c as u8, to_starboard_m: d as u8 })
    }
    pub fn length_m(&self) -> u32 {
        self.to_bow_m as u32 + self.to_stern_m as u32
    }
    pub fn beam_m(&self) -> u32 {
        self.to_port_m as u32 + self.to_starboard_m as u32
    }
    /// Whether the antenna's place is given: A = C = 0 means "dimensions
    /// only, reference point not available" (ITU-R M.1371-5, Fig. 42
    /// note; IMO guidelines on AIS installation).
    pub fn places_antenna(&self) -> bool {
        !(self.to_bow_m == 0 && self.to_port_m == 0) && self.length_m() > 0 && self.beam_m() > 0
    }
    /// The hull centre seen from the antenna: (forward, starboard) metres.
    pub fn centre_from_antenna_m(&self) -> (f64, f64) {
        (
            (self.to_bow_m as f64 - self.to_stern_m as f64) / 2.0,
            (self.to_starboard_m as f64 - self.to_port_m as f64) / 2.0,
        )
    }
}

/// What the static messages (types 5, 19, 24) say about a vessel.
#[derive(Copy, Clone, Debug, Default, PartialEq)]
pub struct StaticData {
    pub name: Option<AisText<20>>,
    pub callsign: Option<AisText<7>>,
    /// Type of ship and cargo (1..=99 per ITU; 0 = not available → None).
    pub ship_type: Option<u8>,
    pub dimensions: Option<Dimensions>,
    /// Type 5 only.
    pub draught_m: Option<f64>,
    pub destination: Option<AisText<20>>,
    pub imo: Option<u32>,
    /// Type 24 part B of an auxiliary craft (MMSI 98XXXYYYY): the parent
    /// ship's MMSI, sent instead of dimensions.
    pub mothership_mmsi: Option<u32>,
}

/// One vessel in the decoder's table.
#[derive(Clone, Debug)]
pub struct Vessel {
    /// The MMSI as 9 digits, shared by every report of this vessel.
    pub id: Arc<str>,
    pub statics: StaticData,
    /// What reports of this vessel carry: made from `statics` after each
    /// static message, `None` while nothing is known.
    pub info: Option<Arc<VesselInfo>>,
    pub last_seen: Timestamp,
}

impl StaticData {
    /// The part of the static data that track records show.
    pub fn vessel_info(&self) -> VesselInfo {
        let dims = self.dimensions;
        VesselInfo {
            name: self.name.map(|n| Arc::from(n.as_str())),
            ship_type: self.ship_type,
            length_m: dims.map(|d| d.length_m()).filter(|&l| l > 0).map(f64::from),
            beam_m: dims.map(|d| d.beam_m()).filter(|&b| b > 0).map(f64::from),
        }
    }
}

/// The shift applied to a reported position: from the GNSS antenna to
/// the hull centre.
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct AntennaShift {
    /// Ship's frame: the centre is this far ahead of / to starboard of
    /// the antenna.
    pub forward_m: f64,
    pub starboard_m: f64,
    /// The same displacement, east and north.
    pub east_m: f64,
    pub north_m: f64,
    /// The ship's orientation used, degrees.
    pub orientation_deg: f64,
    /// `true` if that was the heading, `false` if the COG.
    pub from_heading: bool,
}

/// A position message, decoded.
#[derive(Clone, Debug, PartialEq)]
pub struct AisPosition {
    /// The feed record; `lat_deg`/`lon_deg` are the hull centre when
    /// `shift` is set, the antenna otherwise.
    pub report: Report,
    pub mmsi: u32,
    pub msg_type: u8,
    /// The position as transmitted (the GNSS antenna).
    pub antenna_lat_deg: f64,
    pub antenna_lon_deg: f64,
    pub shift: Option<AntennaShift>,
    /// Navigational status (types 1–3; 15 = not available → None).
    pub nav_status: Option<u8>,
    /// Position accuracy flag: 1 = high (≤ 10 m).
    pub high_accuracy: bool,
    /// UTC second of the position fix (0..=59), if given.
    pub utc_second: Option<u8>,
}

/// What one line gave.
#[derive(Clone, Debug, PartialEq)]
pub enum AisOutcome {
    /// Another vessel's position: a measurement.
    Position(AisPosition),
    /// The receiver's own ship (`VDO`): not a report of another vessel.
    OwnShip(AisPosition),
    /// A position message with the position "not available": no
    /// measurement.
    NoPosition { mmsi: u32, msg_type: u8, own_ship: bool },
    /// Static data stored (see [`AisDecoder::vessel`]).
    Static { mmsi: u32, msg_type: u8, own_ship: bool },
    /// One fragment of a multi-sentence message; more to come.
    Fragment,
    /// A well-formed message of a type skerry does not use.
    Other { msg_type: u8 },
    Rejected(AisRejectReason),
}

impl AisOutcome {
    /// The feed record, for [`AisOutcome::Position`] only.
    pub fn record(&self) -> Option<Record> {
        match self {
            AisOutcome::Position(p) => Some(Record::Report(p.report.clone())),
            _ => None,
        }
    }
}

/// Counts since the decoder was made.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct AisCounts {
    pub positions: u64,
    pub own_ship: u64,
    pub no_position: u64,
    pub statics: u64,
    pub fragments: u64,
    pub other: u64,
    rejected: [u64; AisRejectReason::ALL.len()],
}

impl AisCounts {
    pub fn rejected(&self, reason: AisRejectReason) -> u64 {
        self.rejected[reason.index()]
    }
    pub fn total_rejected(&self) -> u64 {
        self.rejected.iter().sum()
    }
    pub fn rejected_by_key(&self) -> impl Iterator<Item = (&'static str, u64)> + '_ {
        AisRejectReason::ALL.iter().map(|r| (r.key(), self.rejected[r.index()]))
    }
}

/// Default fragment timeout: fragments of one message go out in
/// consecutive slots and receivers pass them on together (common
/// practice), so a few seconds is generous.
pub const DEFAULT_FRAGMENT_TIMEOUT_S: f64 = 5.0;
/// Default bound on the vessel table.
pub const DEFAULT_MAX_VESSELS: usize = 50_000;

/// Decoder state for one transponder sensor (one NMEA input).
pub struct AisDecoder {
    sensor: SensorId,
    reassembly: Reassembly,
    vessels: HashMap<u32, Vessel>,
    max_vessels: usize,
    counts: AisCounts,
}

/// (min, max) bits accepted per message kind; see the module docs.
const SLACK: usize = 5;
const LEN_POSITION_A: usize = 168;
const LEN_POSITION_B: usize = 168;
const LEN_TYPE_19: usize = 312;
const LEN_TYPE_5: usize = 424;
const LEN_24A_ITU: usize = 160;
const LEN_24B: usize = 168;

/// Raw values for "not available" (ITU-R M.1371-5 Table 48).
const LON_NA: i32 = 181 * 600_000;
const LAT_NA: i32 = 91 * 600_000;
const SOG_NA: u32 = 1023;
const COG_NA: u32 = 3600;
/// COG is trusted for the antenna shift only at or above this speed.
const MIN_SOG_FOR_COG_KN: f64 = 1.0;

impl AisDecoder {
    pub fn new(sensor: SensorId) -> Self {
        Self::with_limits(sensor, DEFAULT_FRAGMENT_TIMEOUT_S, DEFAULT_MAX_VESSELS)
    }

    pub fn with_limits(sensor: SensorId, fragment_timeout_s: f64, max_vessels: usize) -> Self {
        AisDecoder {
            sensor,
            reassembly: Reassembly::new(fragment_timeout_s),
            vessels: HashMap::new(),
            max_vessels: max_vessels.max(1),
            counts: AisCounts::default(),
        }
    }

    pub fn sensor(&self) -> SensorId {
        self.sensor
    }
    pub fn counts(&self) -> &AisCounts {
        &self.counts
    }
    pub fn vessel(&self, mmsi: u32) -> Option<&Vessel> {
        self.vessels.get(&mmsi)
    }
    pub fn vessels(&self) -> impl Iterator<Item = (u32, &Vessel)> {
        self.vessels.iter().map(|(k, v)| (*k, v))
    }
    /// Multi-sentence messages waiting for fragments.
    pub fn pending_fragments(&self) -> usize {
        self.reassembly.pending()
    }

    /// Drops fragment sets older than the timeout at `now` (also done on
    /// every fragment received). Returns how many were dropped.
    pub fn expire(&mut self, now: Timestamp) -> u64 {
        let mut lost = Lost::default();
        self.reassembly.expire(now, &mut lost);
        self.count_lost(lost);
        lost.timed_out
    }

    /// Decodes every line of a datagram (lines end in LF or CR LF; blank
    /// lines are skipped).
    pub fn decode_datagram(&mut self, datagram: &[u8], received: Option<Timestamp>, sink: &mut impl FnMut(AisOutcome)) {
        for line in datagram.split(|&b| b == b'\n') {
            if line.trim_ascii().is_empty() {
                continue;
            }
            sink(self.decode_line(line, received));
        }
    }

    /// Decodes one line; `received` is the receive time, used when the
    /// line has no tag block time.
    pub fn decode_line(&mut self, line: &[u8], received: Option<Timestamp>) -> AisOutcome {
        let out = self.line(line, received).unwrap_or_else(AisOutcome::Rejected);
        match &out {
            AisOutcome::Position(_) => self.counts.positions += 1,
            AisOutcome::OwnShip(_) => self.counts.own_ship += 1,
            AisOutcome::NoPosition { .. } => self.counts.no_position += 1,
            AisOutcome::Static { .. } => self.counts.statics += 1,
            AisOutcome::Fragment => self.counts.fragments += 1,
            AisOutcome::Other { .. } => self.counts.other += 1,
            AisOutcome::Rejected(r) => self.counts.rejected[r.index()] += 1,
        }
        out
    }

    fn count_lost(&mut self, lost: Lost) {
        self.counts.rejected[AisRejectReason::FragmentTimeout.index()] += lost.timed_out;
        self.counts.rejected[AisRejectReason::FragmentAbandoned.index()] += lost.abandoned;
    }

    fn line(&mut self, line: &[u8], received: Option<Timestamp>) -> Result<AisOutcome, AisRejectReason> {
        let s = sentence::parse(line)?;
        let time = s.tag_time.or(received).ok_or(AisRejectReason::NoTime)?;
        let bits = if s.count == 1 {
            let mut b = Bits::new();
            b.push_armoured(s.payload)?;
            b.drop_fill(s.fill);
            b
        } else {
            let mut lost = Lost::default();
            let done = self.reassembly.add(&s, time, &mut lost);
            self.count_lost(lost);
            match done? {
                Some(b) => b,
                None => return Ok(AisOutcome::Fragment),
            }
        };
        self.message(&bits, s.own, time)
    }

    fn message(&mut self, b: &Bits, own: bool, time: Timestamp) -> Result<AisOutcome, AisRejectReason> {
        use AisRejectReason as R;
        let n = b.len();
        if n < 6 {
            return Err(R::WrongLength);
        }
        let msg_type = b.u(0, 6) as u8;
        let check = |min: usize, max: usize| if n < min || n > max { Err(R::WrongLength) } else { Ok(()) };
        match msg_type {
            1..=3 => check(LEN_POSITION_A, LEN_POSITION_A + SLACK)?,
            18 => check(LEN_POSITION_B, LEN_POSITION_B + SLACK)?,
            19 => check(LEN_TYPE_19, LEN_TYPE_19 + SLACK)?,
            5 => check(LEN_TYPE_5, LEN_TYPE_5 + SLACK)?,
            24 => {
                check(40, usize::MAX)?;
                match b.u(38, 2) {
                    0 => check(LEN_24A_ITU, LEN_24B + SLACK)?,
                    1 => check(LEN_24B, LEN_24B + SLACK)?,
                    _ => return Err(R::BadPartNumber),
                }
            }
            _ => return Ok(AisOutcome::Other { msg_type }),
        }
        let mmsi = b.u(8, 30);
        if mmsi == 0 || mmsi > 999_999_999 {
            return Err(R::BadMmsi);
        }
        match msg_type {
            1..=3 => self.position(b, mmsi, msg_type, own, time, PositionLayout::CLASS_A),
            18 => self.position(b, mmsi, msg_type, own, time, PositionLayout::CLASS_B),
            19 => {
                let st = self.vessel_mut(mmsi, time);
                st.name = nonempty(b.text::<20>(143));
                st.ship_type = nonzero(b.u(263, 8)).map(|t| t as u8);
                st.dimensions = Dimensions::new(b.u(271, 9), b.u(280, 9), b.u(289, 6), b.u(295, 6));
                self.statics_changed(mmsi);
                self.position(b, mmsi, msg_type, own, time, PositionLayout::CLASS_B)
            }
            5 => {
                let st = self.vessel_mut(mmsi, time);
                st.imo = nonzero(b.u(40, 30));
                st.callsign = nonempty(b.text::<7>(70));
                st.name = nonempty(b.text::<20>(112));
                st.ship_type = nonzero(b.u(232, 8)).map(|t| t as u8);
                st.dimensions = Dimensions::new(b.u(240, 9), b.u(249, 9), b.u(258, 6), b.u(264, 6));
                st.draught_m = nonzero(b.u(294, 8)).map(|d| d as f64 / 10.0);
                st.destination = nonempty(b.text::<20>(302));
                self.statics_changed(mmsi);
                Ok(AisOutcome::Static { mmsi, msg_type, own_ship: own })
            }
            _ => {
                // Type 24: part A carries the name, part B the rest.
                let part_b = b.u(38, 2) == 1;
                let st = self.vessel_mut(mmsi, time);
                if part_b {
                    st.ship_type = nonzero(b.u(40, 8)).map(|t| t as u8);
                    st.callsign = nonempty(b.text::<7>(90));
                    if mmsi / 10_000_000 == 98 {
                        st.mothership_mmsi = nonzero(b.u(132, 30));
                        st.dimensions = None;
                    } else {
                        st.dimensions = Dimensions::new(b.u(132, 9), b.u(141, 9), b.u(150, 6), b.u(156, 6));
                    }
                } else {
                    st.name = nonempty(b.text::<20>(40));
                }
                self.statics_changed(mmsi);
                Ok(AisOutcome::Static { mmsi, msg_type, own_ship: own })
            }
        }
    }

    fn vessel_entry(&mut self, mmsi: u32, time: Timestamp) -> &mut Vessel {
        if !self.vessels.contains_key(&mmsi) && self.vessels.len() >= self.max_vessels {
            self.prune();
        }
        let v = self.vessels.entry(mmsi).or_insert_with(|| Vessel {
            id: Arc::from(format!("{mmsi:09}")),
            statics: StaticData::default(),
            info: None,
            last_seen: time,
        });
        if time > v.last_seen {
            v.last_seen = time;
        }
        v
    }

    fn vessel_mut(&mut self, mmsi: u32, time: Timestamp) -> &mut StaticData {
        &mut self.vessel_entry(mmsi, time).statics
    }

    /// Rebuilds what the vessel's reports carry after a static message.
    fn statics_changed(&mut self, mmsi: u32) {
        if let Some(v) = self.vessels.get_mut(&mmsi) {
            let info = v.statics.vessel_info();
            if v.info.as_deref() != Some(&info) {
                v.info = info.shared();
            }
        }
    }

    /// Keeps the more recently seen half of the table (amortised O(1)
    /// per new vessel).
    fn prune(&mut self) {
        let mut seen: Vec<Timestamp> = self.vessels.values().map(|v| v.last_seen).collect();
        let mid = seen.len() / 2;
        let (_, cut, _) = seen.select_nth_unstable(mid);
        let cut = *cut;
        self.vessels.retain(|_, v| v.last_seen > cut);
    }

    fn position(&mut self, b: &Bits, mmsi: u32, msg_type: u8, own: bool, time: Timestamp, at: PositionLayout) -> Result<AisOutcome, AisRejectReason> {
        let lon_raw = b.i(at.lon, 28);
        let lat_raw = b.i(at.lat, 27);
        if lon_raw == LON_NA || lat_raw == LAT_NA {
            return Ok(AisOutcome::NoPosition { mmsi, msg_type, own_ship: own });
        }
        // 1/10 000 minute = 1/600 000 degree.
        let lon = lon_raw as f64 / 600_000.0;
        let lat = lat_raw as f64 / 600_000.0;
        if !(-180.0..=180.0).contains(&lon) || !(-90.0..=90.0).contains(&lat) {
            return Err(AisRejectReason::BadPosition);
        }
        let sog = b.u(at.sog, 10);
        let sog_kn = (sog != SOG_NA).then(|| sog as f64 / 10.0);
        let cog = b.u(at.cog, 12);
        let cog_deg = (cog < COG_NA).then(|| cog as f64 / 10.0);
        let hdg = b.u(at.heading, 9);
        // 511 = not available; 360..=510 are not used.
        let heading_deg = (hdg < 360).then_some(hdg as f64);
        let second = b.u(at.second, 6);
        let nav_status = at.nav_status.map(|i| b.u(i, 4) as u8).filter(|s| *s != 15);
        let high_accuracy = b.flag(at.accuracy);

        let sensor = self.sensor;
        let v = self.vessel_entry(mmsi, time);
        let orientation = match (heading_deg, cog_deg, sog_kn) {
            (Some(h), _, _) => Some((h, true)),
            (None, Some(c), Some(s)) if s >= MIN_SOG_FOR_COG_KN => Some((c, false)),
            _ => None,
        };
        let shift = match (v.statics.dimensions, orientation) {
            (Some(d), Some((h, from_heading))) if d.places_antenna() && lat.abs() < 89.9 => {
                let (forward_m, starboard_m) = d.centre_from_antenna_m();
                let (sh, ch) = h.to_radians().sin_cos();
                Some(AntennaShift {
                    forward_m,
                    starboard_m,
                    east_m: forward_m * sh + starboard_m * ch,
                    north_m: forward_m * ch - starboard_m * sh,
                    orientation_deg: h,
                    from_heading,
                })
            }
            _ => None,
        };
        let (lat_deg, lon_deg) = match shift {
            Some(s) => offset_position(lat, lon, s.east_m, s.north_m),
            None => (lat, lon),
        };
        let report = Report { sensor, time, id: v.id.clone(), lat_deg, lon_deg, sog_kn, cog_deg, heading_deg, vessel: v.info.clone() };
        let p = AisPosition {
            report,
            mmsi,
            msg_type,
            antenna_lat_deg: lat,
            antenna_lon_deg: lon,
            shift,
            nav_status,
            high_accuracy,
            utc_second: (second < 60).then_some(second as u8),
        };
        Ok(if own { AisOutcome::OwnShip(p) } else { AisOutcome::Position(p) })
    }
}

/// Bit offsets of the position fields (ITU-R M.1371-5 Tables 45 and 49).
#[derive(Copy, Clone)]
struct PositionLayout {
    nav_status: Option<usize>,
    sog: usize,
    accuracy: usize,
    lon: usize,
    lat: usize,
    cog: usize,
    heading: usize,
    second: usize,
}

impl PositionLayout {
    const CLASS_A: Self = PositionLayout { nav_status: Some(38), sog: 50, accuracy: 60, lon: 61, lat: 89, cog: 116, heading: 128, second: 137 };
    /// Types 18 and 19 share the layout up to the time stamp.
    const CLASS_B: Self = PositionLayout { nav_status: None, sog: 46, accuracy: 56, lon: 57, lat: 85, cog: 112, heading: 124, second: 133 };
}

fn nonzero(v: u32) -> Option<u32> {
    (v != 0).then_some(v)
}

fn nonempty<const N: usize>(t: AisText<N>) -> Option<AisText<N>> {
    (!t.is_empty()).then_some(t)
}

/// Moves a WGS-84 position by a small east/north displacement (metres),
/// with the ellipsoid's meridian and prime-vertical radii of curvature at
/// the point. For the tens of metres of a hull, the error of this local
/// step is far below a millimetre.
pub fn offset_position(lat_deg: f64, lon_deg: f64, east_m: f64, north_m: f64) -> (f64, f64) {
    let (s, c) = lat_deg.to_radians().sin_cos();
    let w = (1.0 - WGS84_E2 * s * s).sqrt();
    let n = WGS84_A / w;
    let m = WGS84_A * (1.0 - WGS84_E2) / (w * w * w);
    let lat = lat_deg + (north_m / m).to_degrees();
    let mut lon = lon_deg + (east_m / (n * c)).to_degrees();
    if lon > 180.0 {
        lon -= 360.0;
    } else if lon < -180.0 {
        lon += 360.0;
    }
    (lat, lon)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reason_keys_are_unique() {
        let mut keys: Vec<_> = AisRejectReason::ALL.iter().map(|r| r.key()).collect();
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), AisRejectReason::ALL.len());
        for (i, r) in AisRejectReason::ALL.iter().enumerate() {
            assert_eq!(r.index(), i);
        }
        for r in AisRejectReason::ALL {
            assert_eq!(r.feed_key(), format!("nmea_{}", r.key()));
        }
    }

    #[test]
    fn reference_point_rules() {
        // ITU-R M.1371-5 Fig. 42 note: A = C = 0 with B, D ≠ 0 gives the
        // dimensions without the reference point.
        assert!(!Dimensions::new(0, 40, 0, 8).unwrap().places_antenna());
        assert!(Dimensions::new(30, 10, 4, 6).unwrap().places_antenna());
        assert!(Dimensions::new(0, 0, 0, 0).is_none());
        assert_eq!(Dimensions::new(30, 10, 4, 6).unwrap().centre_from_antenna_m(), (10.0, 1.0));
    }
}
