//! Track records (CONTRACT.md §2) and truth records (§6).
//!
//! Track records are written by hand, with fixed decimals per field, so
//! that the output is the same to the byte in every run and short:
//! latitude and longitude to 1e-7° (about 1 cm), plane positions to 1 cm,
//! velocities to 1 mm/s, covariances to 0.01 m².

use crate::time::{ASCII_ZEROS, Rfc3339Cache, Timestamp, digits8};
use serde::{Deserialize, Serialize};
use std::sync::Arc;

#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TrackStatus {
    Tentative,
    Confirmed,
    Coasting,
    Ended,
}

impl TrackStatus {
    pub fn as_str(self) -> &'static str {
        match self {
            TrackStatus::Tentative => "tentative",
            TrackStatus::Confirmed => "confirmed",
            TrackStatus::Coasting => "coasting",
            TrackStatus::Ended => "ended",
        }
    }
    /// Confirmed or coasting: the firm picture.
    pub fn is_firm(self) -> bool {
        matches!(self, TrackStatus::Confirmed | TrackStatus::Coasting)
    }
}

/// One track record.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrackRecord {
    pub time: Timestamp,
    pub track: u64,
    pub status: TrackStatus,
    pub lat_deg: f64,
    pub lon_deg: f64,
    pub east_m: f64,
    pub north_m: f64,
    pub vel_east_mps: f64,
    pub vel_north_mps: f64,
    pub speed_kn: f64,
    pub course_deg: f64,
    pub pos_cov_m2: [[f64; 2]; 2],
    pub sensors: Vec<Arc<str>>,
    pub identity: Option<Arc<str>>,
    /// The static data of that identity (the `vessel` of its reports),
    /// when known: name, type of ship and cargo, length and beam (m).
    /// Optional fields (contract version 1.1), written only when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<Arc<str>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ship_type: Option<u8>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub length_m: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub beam_m: Option<f64>,
    /// A transponder report with this track's identity was inconsistent
    /// with the track (outside `tracking.identity_gate_m`). Optional: the
    /// field is written only when true, so records without a conflict are
    /// as before.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub identity_conflict: bool,
}

/// Metres per second in one knot (1852 m per hour, by definition of the
/// international nautical mile).
pub const MPS_PER_KNOT: f64 = 1852.0 / 3600.0;

/// Speed (kn) and course over ground (degrees clockwise from north, in
/// [0, 360)) of a velocity.
pub fn speed_course(vel_east: f64, vel_north: f64) -> (f64, f64) {
    let speed = vel_east.hypot(vel_north) / MPS_PER_KNOT;
    let mut course = vel_east.atan2(vel_north).to_degrees();
    if course < 0.0 {
        course += 360.0;
    }
    if course >= 360.0 {
        course -= 360.0;
    }
    (speed, course)
}

/// Writes `v` with `D` decimals (D ≤ 9), never as `-0.00`: the value is
/// rounded to the nearest multiple of 10⁻ᴰ (ties away from zero, as
/// `f64::round`) and written as integers, which is several times faster
/// than float formatting on the output path. One copy per decimal count,
/// so the scale and every division are constants.
#[inline(always)]
fn fixed<const D: usize>(out: &mut Line<'_>, v: f64) {
    let x = v * POW10_U64[D] as f64;
    let a = x.abs();
    // Below 9e15 < 2^53 the integer part and the fraction of `a` are
    // exact, so rounding half away from zero is a comparison (and
    // avoids a libm call: `round` has no instruction in baseline x86-64).
    // The conversions go through i64, one instruction each way (the
    // u64 ones are several).
    if !(a < 9.0e15) {
        return fixed_slow(out, v, D);
    }
    let t = a as i64;
    let n = t as u64 + (a - t as f64 >= 0.5) as u64;
    let neg = x < 0.0 && n != 0;
    // Eight decimals and more (never asked for on the output path): the
    // digit-by-digit writer.
    if D > 7 {
        return fixed_digits(out, n, neg, D);
    }
    // The digits go in as 8-byte stores into a fixed buffer, each store's
    // extra bytes overwritten by the next or cut off: the text of up to
    // eight digits from one word of digits, of more (up to 16: n ≤ 9e15)
    // from two. The fraction's `D` < 8 digits are the last of the last
    // word. Leading zeros are the low zero bytes of a word.
    let mut buf = [0u8; 32];
    buf[0] = b'-';
    let mut i = neg as usize;
    let last = if n < 100_000_000 {
        let w = digits8(n as u32);
        // At least one digit before the point.
        let cnt = (8 - (w.trailing_zeros() / 8) as usize).max(D + 1);
        let w = w | ASCII_ZEROS;
        buf[i..i + 8].copy_from_slice(&(w >> (8 * (8 - cnt))).to_le_bytes());
        i += cnt - D;
        w
    } else {
        let hi = (n / 100_000_000) as u32;
        let lo = digits8((n - hi as u64 * 100_000_000) as u32) | ASCII_ZEROS;
        let hw = digits8(hi);
        let lead = (hw.trailing_zeros() / 8) as usize;
        buf[i..i + 8].copy_from_slice(&((hw | ASCII_ZEROS) >> (8 * lead)).to_le_bytes());
        i += 8 - lead;
        buf[i..i + 8].copy_from_slice(&lo.to_le_bytes());
        i += 8 - D;
        lo
    };
    if D > 0 {
        buf[i] = b'.';
        // (`% 64` only keeps the shift in range in the copy for D = 0,
        // where this line is never reached.)
        buf[i + 1..i + 9].copy_from_slice(&(last >> (8 * (8 - D) % 64)).to_le_bytes());
        i += 1 + D;
    }
    // The whole buffer is appended and the tail cut off: a copy of
    // constant size is a few vector moves, where a copy of the exact
    // size is a `memcpy` call.
    let end = out.0.len() + i;
    out.0.extend_from_slice(&buf);
    out.0.truncate(end);
}

/// Writes `n` / 10ᵈ with `d` decimals (`n` the rounded, scaled magnitude),
/// digit pair by digit pair: [`fixed`] for the values its word-at-a-time
/// path does not cover.
#[cold]
fn fixed_digits(out: &mut Line<'_>, mut n: u64, neg: bool, d: usize) {
    // At least one digit before the point.
    let digits = count_digits(n).max(d + 1);
    let width = neg as usize + digits + (d > 0) as usize;
    // Right to left into a fixed buffer, the number left-aligned: the
    // fraction, the point, the integer part, the sign.
    let mut buf = [b'0'; 32];
    let mut i = width;
    if d > 0 {
        if d % 2 == 1 {
            i -= 1;
            buf[i] = b'0' + (n % 10) as u8;
            n /= 10;
        }
        for _ in 0..d / 2 {
            i -= 2;
            buf[i..i + 2].copy_from_slice(pair(n % 100));
            n /= 100;
        }
        i -= 1;
        buf[i] = b'.';
    }
    while n >= 100 {
        i -= 2;
        buf[i..i + 2].copy_from_slice(pair(n % 100));
        n /= 100;
    }
    if n >= 10 {
        i -= 2;
        buf[i..i + 2].copy_from_slice(pair(n));
    } else {
        i -= 1;
        buf[i] = b'0' + n as u8;
    }
    if neg {
        buf[0] = b'-';
    }
    out.push_ascii(&buf[..width]);
}

/// [`fixed`] for values too large for its integer path, or not finite.
#[cold]
fn fixed_slow(out: &mut Line<'_>, v: f64, d: usize) {
    // `{:.9}` and fewer decimals; more are never asked for.
    out.push_str(&format!("{v:.d$}"));
}

/// Decimal digits of `n` (0 for 0): the bit length times log₁₀ 2 gives
/// the count or one less, and one comparison settles it (the usual
/// bit-twiddling count).
fn count_digits(n: u64) -> usize {
    let bits = 64 - (n | 1).leading_zeros() as usize;
    let t = (bits * 1233) >> 12;
    t + (n >= POW10_U64[t]) as usize
}

/// Powers of ten that fit a u64.
const POW10_U64: [u64; 20] = {
    let mut t = [1u64; 20];
    let mut k = 1;
    while k < 20 {
        t[k] = t[k - 1] * 10;
        k += 1;
    }
    t
};

/// "00", "01", ... "99": the two digits of every number below 100, for
/// writing numbers two digits at a time (here and in the recording's
/// line writer).
pub(crate) const DIGIT_PAIRS: [u8; 200] = {
    let mut t = [0u8; 200];
    let mut k = 0;
    while k < 100 {
        t[2 * k] = b'0' + (k / 10) as u8;
        t[2 * k + 1] = b'0' + (k % 10) as u8;
        k += 1;
    }
    t
};

/// The two decimal digits of `v` (< 100).
fn pair(v: u64) -> &'static [u8] {
    let k = 2 * v as usize;
    &DIGIT_PAIRS[k..k + 2]
}

/// `f64::round` (half away from zero) without the libm call.
fn round_half_away(x: f64) -> f64 {
    let a = x.abs();
    if a.is_nan() || a >= 4.0e15 {
        return x.round();
    }
    let mut n = a as u64;
    if a - n as f64 >= 0.5 {
        n += 1;
    }
    (n as f64).copysign(x)
}

/// Appends `s` as a JSON string (RFC 8259 escapes). Bytes of multi-byte
/// characters are all ≥ 0x80, so copying the others byte by byte keeps
/// the text valid UTF-8. A string of eight bytes or more that needs no
/// escape (names and sensors never do) is copied eight bytes at a time,
/// its last bytes as the (overlapping) last eight.
fn push_json_str(out: &mut Line<'_>, s: &str) {
    let b = s.as_bytes();
    out.0.push(b'"');
    if let Some(last) = b.last_chunk::<8>() {
        let chunks = b.chunks_exact(8);
        if !needs_escape(u64::from_le_bytes(*last)) && chunks.clone().all(|c| !needs_escape(word(c))) {
            for c in chunks {
                out.0.extend_from_slice(c);
            }
            let rest = b.len() % 8;
            if rest > 0 {
                // The last eight bytes less the ones already written.
                let at = out.0.len() - (8 - rest);
                out.0.truncate(at);
                out.0.extend_from_slice(last);
            }
            out.0.push(b'"');
            return;
        }
    }
    push_escaped(out, b);
    out.0.push(b'"');
}

/// Eight bytes as a little-endian word.
fn word(c: &[u8]) -> u64 {
    u64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]])
}

/// Whether any byte of `w` is a control character (< 0x20), `"` or `\`.
/// The usual word tests for a zero byte and for a byte below n ≤ 128
/// (common practice: "Bit Twiddling Hacks", Anderson, "Determine if a
/// word has a byte less than n"); exact as a yes/no, and checked against
/// the byte test in the tests.
#[inline]
fn needs_escape(w: u64) -> bool {
    const ONES: u64 = 0x0101_0101_0101_0101;
    const HIGH: u64 = 0x8080_8080_8080_8080;
    let below = |x: u64, n: u64| x.wrapping_sub(ONES * n) & !x & HIGH;
    (below(w, 0x20) | below(w ^ (ONES * b'"' as u64), 1) | below(w ^ (ONES * b'\\' as u64), 1)) != 0
}

/// Appends the bytes of `s`, escaped, without quotes.
fn push_escaped(out: &mut Line<'_>, s: &[u8]) {
    for &b in s {
        match b {
            b'"' => out.push_str("\\\""),
            b'\\' => out.push_str("\\\\"),
            b if b < 0x20 => {
                const HEX: &[u8; 16] = b"0123456789abcdef";
                out.push_ascii(&[b'\\', b'u', b'0', b'0', HEX[(b >> 4) as usize], HEX[(b & 15) as usize]]);
            }
            b => out.0.push(b),
        }
    }
}

/// Appends `v` in decimal.
fn push_u64(out: &mut Line<'_>, v: u64) {
    if v >= 100_000_000 {
        return push_u64_digits(out, v);
    }
    let w = digits8(v as u32);
    let lead = ((w.trailing_zeros() / 8) as usize).min(7);
    let end = out.0.len() + 8 - lead;
    out.0.extend_from_slice(&((w | ASCII_ZEROS) >> (8 * lead)).to_le_bytes());
    out.0.truncate(end);
}

/// [`push_u64`] digit by digit, for any value.
#[cold]
fn push_u64_digits(out: &mut Line<'_>, mut v: u64) {
    let mut buf = [b'0'; 20];
    let mut i = buf.len();
    while v > 0 {
        i -= 1;
        buf[i] = b'0' + (v % 10) as u8;
        v /= 10;
    }
    out.push_ascii(&buf[i.min(19)..]);
}

/// The byte buffer a track line is written into, with `String`'s
/// `push_str` and `push` so that the encoder reads as text. Only whole
/// UTF-8 text and ASCII go in.
struct Line<'a>(&'a mut Vec<u8>);

impl Line<'_> {
    fn push_str(&mut self, s: &str) {
        self.0.extend_from_slice(s.as_bytes());
    }
    fn push(&mut self, c: char) {
        let mut b = [0; 4];
        self.0.extend_from_slice(c.encode_utf8(&mut b).as_bytes());
    }
    /// Digits and signs: byte by byte, which beats a `memcpy` call for a
    /// few bytes.
    fn push_ascii(&mut self, b: &[u8]) {
        self.0.reserve(b.len());
        for &c in b {
            self.0.push(c);
        }
    }
}

impl TrackRecord {
    /// Appends the JSON line (without the newline).
    pub fn write_json(&self, out: &mut String) {
        let mut line = Vec::with_capacity(400);
        self.write_json_bytes(&mut line);
        // The encoder writes only ASCII and whole strings from `self`.
        out.push_str(std::str::from_utf8(&line).unwrap_or_default());
    }

    /// Appends the JSON line (without the newline) as UTF-8 bytes, with
    /// no check or copy per line. For many lines, [`TrackLineWriter`]
    /// writes the same bytes faster.
    pub fn write_json_bytes(&self, out: &mut Vec<u8>) {
        self.write_line(out, &mut Rfc3339Cache::new());
    }

    fn write_line(&self, out: &mut Vec<u8>, time: &mut Rfc3339Cache) {
        out.reserve(400);
        let out = &mut Line(out);
        out.push_str("{\"type\":\"track\",\"time\":\"");
        self.time.write_rfc3339_cached(time, out.0);
        out.push_str("\",\"track\":");
        push_u64(out, self.track);
        out.push_str(",\"status\":\"");
        out.push_str(self.status.as_str());
        out.push_str("\",\"lat_deg\":");
        fixed::<7>(out, self.lat_deg);
        out.push_str(",\"lon_deg\":");
        fixed::<7>(out, self.lon_deg);
        out.push_str(",\"east_m\":");
        fixed::<2>(out, self.east_m);
        out.push_str(",\"north_m\":");
        fixed::<2>(out, self.north_m);
        out.push_str(",\"vel_east_mps\":");
        fixed::<3>(out, self.vel_east_mps);
        out.push_str(",\"vel_north_mps\":");
        fixed::<3>(out, self.vel_north_mps);
        out.push_str(",\"speed_kn\":");
        fixed::<2>(out, self.speed_kn);
        out.push_str(",\"course_deg\":");
        // Rounding may carry 359.995 up to 360.00: keep the contract's [0, 360).
        let c = round_half_away(self.course_deg * 100.0) / 100.0;
        fixed::<2>(out, if c >= 360.0 { 0.0 } else { c });
        out.push_str(",\"pos_cov_m2\":[[");
        fixed::<2>(out, self.pos_cov_m2[0][0]);
        out.push(',');
        let en_at = out.0.len();
        fixed::<2>(out, self.pos_cov_m2[0][1]);
        let en_end = out.0.len();
        out.push_str("],[");
        if self.pos_cov_m2[1][0].to_bits() == self.pos_cov_m2[0][1].to_bits() {
            // A symmetric covariance (every engine record): the same text.
            out.0.extend_from_within(en_at..en_end);
        } else {
            fixed::<2>(out, self.pos_cov_m2[1][0]);
        }
        out.push(',');
        fixed::<2>(out, self.pos_cov_m2[1][1]);
        out.push_str("]],\"sensors\":[");
        for (i, s) in self.sensors.iter().enumerate() {
            if i > 0 {
                out.push(',');
            }
            push_json_str(out, s);
        }
        out.push_str("],\"identity\":");
        match &self.identity {
            Some(id) => push_json_str(out, id),
            None => out.push_str("null"),
        }
        if let Some(n) = &self.name {
            out.push_str(",\"name\":");
            push_json_str(out, n);
        }
        if let Some(t) = self.ship_type {
            out.push_str(",\"ship_type\":");
            push_u64(out, t as u64);
        }
        // Decimetres: AIS gives whole metres, other sources may not.
        if let Some(v) = self.length_m {
            out.push_str(",\"length_m\":");
            fixed::<1>(out, v);
        }
        if let Some(v) = self.beam_m {
            out.push_str(",\"beam_m\":");
            fixed::<1>(out, v);
        }
        if self.identity_conflict {
            out.push_str(",\"identity_conflict\":true");
        }
        out.push('}');
    }

    pub fn to_json(&self) -> String {
        let mut s = String::with_capacity(320);
        self.write_json(&mut s);
        s
    }

    /// Reads a track line; `None` for a line of another `type`.
    pub fn from_json(line: &str) -> Result<Option<TrackRecord>, serde_json::Error> {
        #[derive(Deserialize)]
        struct Probe<'a> {
            #[serde(rename = "type", borrow)]
            kind: std::borrow::Cow<'a, str>,
        }
        let p: Probe = serde_json::from_str(line)?;
        if p.kind != "track" {
            return Ok(None);
        }
        serde_json::from_str(line).map(Some)
    }
}

/// Writes track lines one after another, keeping the date-and-time text
/// between them ([`Rfc3339Cache`]): the output path of `skerry track`.
/// Each line is byte for byte [`TrackRecord::write_json_bytes`]'s, in any
/// order of times.
#[derive(Clone, Debug, Default)]
pub struct TrackLineWriter {
    time: Rfc3339Cache,
}

impl TrackLineWriter {
    pub fn new() -> Self {
        Self::default()
    }

    /// Appends the JSON line of `r` (without the newline).
    pub fn write(&mut self, r: &TrackRecord, out: &mut Vec<u8>) {
        r.write_line(out, &mut self.time);
    }
}

/// A truth record: where a vessel really was.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TruthRecord {
    pub time: Timestamp,
    /// The vessel's own label (a string or an integer in the file).
    pub vessel: VesselLabel,
    pub lat_deg: f64,
    pub lon_deg: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vel_east_mps: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vel_north_mps: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(untagged)]
pub enum VesselLabel {
    Number(i64),
    Text(String),
}

impl std::fmt::Display for VesselLabel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            VesselLabel::Number(n) => write!(f, "{n}"),
            VesselLabel::Text(s) => f.write_str(s),
        }
    }
}

impl TruthRecord {
    pub fn to_json(&self) -> String {
        #[derive(Serialize)]
        struct Out<'a> {
            #[serde(rename = "type")]
            kind: &'static str,
            #[serde(flatten)]
            rec: &'a TruthRecord,
        }
        serde_json::to_string(&Out { kind: "truth", rec: self }).unwrap_or_default()
    }
    /// Reads a truth line; `None` for a line of another `type`.
    pub fn from_json(line: &str) -> Result<Option<TruthRecord>, serde_json::Error> {
        let v: serde_json::Value = serde_json::from_str(line)?;
        if v.get("type").and_then(|t| t.as_str()) != Some("truth") {
            return Ok(None);
        }
        serde_json::from_value(v).map(Some)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::fmt::Write;

    #[test]
    fn track_line_round_trips_and_is_fixed_precision() {
        let r = TrackRecord {
            time: Timestamp::parse_rfc3339("2026-05-14T06:00:02.125Z").unwrap(),
            track: 12,
            status: TrackStatus::Confirmed,
            lat_deg: 56.4512345678,
            lon_deg: 7.35,
            east_m: -0.001,
            north_m: 1234.5678,
            vel_east_mps: 3.0,
            vel_north_mps: -4.0,
            speed_kn: 9.719,
            course_deg: 143.13,
            pos_cov_m2: [[100.0, 2.5], [2.5, 80.0]],
            sensors: vec!["north-mast".into()],
            identity: None,
            name: None,
            ship_type: None,
            length_m: None,
            beam_m: None,
            identity_conflict: false,
        };
        let s = r.to_json();
        assert!(s.contains("\"east_m\":0.00,"), "{s}");
        assert!(s.contains("\"lat_deg\":56.4512346,"), "{s}");
        assert!(s.contains("\"north_m\":1234.57,") && s.contains("\"vel_north_mps\":-4.000,"), "{s}");
        // Brute force against the standard formatter away from ties.
        for i in -2000..2000 {
            let v = i as f64 * 0.37 + 0.001;
            let a = fixed_string(v, 2);
            let b = format!("{:.2}", v);
            assert_eq!(a, if b == "-0.00" { "0.00".to_string() } else { b });
        }
        let back = TrackRecord::from_json(&s).unwrap().unwrap();
        let mut odd = r.clone();
        odd.identity = Some("a\"b\\c\u{1}é".into());
        let back_odd = TrackRecord::from_json(&odd.to_json()).unwrap().unwrap();
        assert_eq!(back_odd.identity, odd.identity);
        assert_eq!(back.track, 12);
        assert_eq!(back.status, TrackStatus::Confirmed);
        assert_eq!(back.sensors, r.sensors);
        assert!(!s.contains("identity_conflict"), "{s}");
        let flagged = TrackRecord { identity_conflict: true, ..r.clone() };
        let f = flagged.to_json();
        assert_eq!(f, format!("{},\"identity_conflict\":true}}", &s[..s.len() - 1]));
        assert!(TrackRecord::from_json(&f).unwrap().unwrap().identity_conflict);
        // Static data: written after the identity, omitted when unknown,
        // and read back (serde_json is the reference reader).
        let named = TrackRecord { identity: Some("235000101".into()), name: Some("SKERRY \"ONE\"".into()), ship_type: Some(52), length_m: Some(31.0), beam_m: Some(9.25), ..r.clone() };
        let n = named.to_json();
        assert!(n.ends_with(r#","identity":"235000101","name":"SKERRY \"ONE\"","ship_type":52,"length_m":31.0,"beam_m":9.3}"#), "{n}");
        let back = TrackRecord::from_json(&n).unwrap().unwrap();
        assert_eq!((back.name, back.ship_type, back.length_m, back.beam_m), (named.name.clone(), Some(52), Some(31.0), Some(9.3)));
        let only_type = TrackRecord { ship_type: Some(0), ..r.clone() }.to_json();
        assert_eq!(only_type, format!("{},\"ship_type\":0}}", &s[..s.len() - 1]));
    }

    fn fixed_string(v: f64, d: u32) -> String {
        let mut b = Vec::new();
        let out = &mut Line(&mut b);
        match d {
            0 => fixed::<0>(out, v),
            1 => fixed::<1>(out, v),
            2 => fixed::<2>(out, v),
            3 => fixed::<3>(out, v),
            4 => fixed::<4>(out, v),
            5 => fixed::<5>(out, v),
            6 => fixed::<6>(out, v),
            7 => fixed::<7>(out, v),
            8 => fixed::<8>(out, v),
            _ => fixed::<9>(out, v),
        }
        String::from_utf8(b).unwrap()
    }

    /// The fixed-decimal writer as it was first written, through
    /// `f64::round`: the reference for the faster one.
    fn fixed_reference(out: &mut String, v: f64, d: u32) {
        let scale = 10u64.pow(d);
        let scaled = (v * scale as f64).round();
        if !scaled.is_finite() || scaled.abs() >= 9.0e15 {
            let _ = write!(out, "{:.*}", d as usize, v);
            return;
        }
        let neg = scaled < 0.0;
        let a = scaled.abs() as u64;
        if neg && a != 0 {
            out.push('-');
        }
        let _ = write!(out, "{}", a / scale);
        if d > 0 {
            let _ = write!(out, ".{:0w$}", a % scale, w = d as usize);
        }
    }

    #[test]
    fn fixed_matches_its_reference_to_the_byte() {
        // Random values of every magnitude, exact ties (k + 0.5 at the
        // scale), signed zeros, tiny negatives, the 9e15 switch-over and
        // non-finite values, at every decimal count.
        let mut x: u64 = 0x2545_f491_4f6c_dd1d;
        let mut next = || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        };
        let mut cases = vec![0.0, -0.0, -0.004, 0.005, -0.005, 0.015, 2.675, 1e300, -1e300, f64::NAN, f64::INFINITY, f64::NEG_INFINITY, 8.999_999_999_999_99e15, 9.0e15, 4503599627370495.5, 0.49999999999999994];
        for _ in 0..50_000 {
            let r = next();
            let mant = (r >> 11) as f64 / (1u64 << 53) as f64;
            let exp = (r % 40) as i32 - 12;
            let sign = if r & 1 == 0 { 1.0 } else { -1.0 };
            cases.push(sign * mant * 10f64.powi(exp));
            let d = (r >> 8) % 10;
            cases.push(sign * ((r >> 20) % 1_000_000) as f64 / 10f64.powi(d as i32) + sign * 0.5 / 10f64.powi(d as i32));
        }
        // Either side of the switch from one word of digits to two (a
        // scaled magnitude of 10^8), of the whole part's digit counts,
        // and the largest magnitudes of the word path, at each scale.
        for d in 0..=9 {
            let s = 10f64.powi(d);
            for n in [1e8, 1e7, 1e9, 1e15, 9e15 - 1.0] {
                for k in [-3.0, -1.5, -1.0, -0.5, 0.0, 0.5, 1.0, 2.5] {
                    cases.extend([(n + k) / s, -(n + k) / s]);
                }
            }
        }
        for (k, &v) in cases.iter().enumerate() {
            for d in 0..=9 {
                let (a, mut b) = (fixed_string(v, d), String::new());
                fixed_reference(&mut b, v, d);
                assert_eq!(a, b, "case {k}: {v:e} with {d} decimals");
            }
            assert_eq!(round_half_away(v * 100.0).to_bits(), (v * 100.0).round().to_bits(), "{v:e}");
        }
    }

    /// The JSON string writer as it was first written, byte by byte: the
    /// reference for the word-at-a-time one.
    fn json_str_reference(out: &mut Vec<u8>, s: &str) {
        out.push(b'"');
        for &b in s.as_bytes() {
            match b {
                b'"' => out.extend_from_slice(b"\\\""),
                b'\\' => out.extend_from_slice(b"\\\\"),
                b if b < 0x20 => out.extend_from_slice(format!("\\u{:04x}", b).as_bytes()),
                b => out.push(b),
            }
        }
        out.push(b'"');
    }

    #[test]
    fn escape_test_by_brute_force() {
        // The word test against the byte test: every byte value at every
        // position of a word of otherwise plain bytes, then random words.
        let plain = |b: u8| b >= 0x20 && b != b'"' && b != b'\\';
        for pos in 0..8 {
            for b in 0..=255u8 {
                let mut w = *b"plain-ok";
                w[pos] = b;
                assert_eq!(needs_escape(u64::from_le_bytes(w)), !plain(b), "byte {b:#x} at {pos}");
            }
        }
        let mut x: u64 = 0x1234_5678_9abc_def1;
        for _ in 0..200_000 {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            // Bytes biased towards the interesting values.
            let w = x & 0x7f7f_7f7f_7f7f_7f7f ^ (x >> 1 & 0x8080_8080_8080_8080);
            assert_eq!(needs_escape(w), !w.to_le_bytes().iter().all(|&b| plain(b)), "{w:#x}");
        }
    }

    #[test]
    fn json_strings_match_the_byte_writer() {
        // Against the byte-by-byte writer, and read back by serde_json
        // (the reference reader): strings of every length 0..40 with an
        // escape (or a multi-byte character) at every position.
        let mut cases: Vec<String> = vec![String::new(), "gullhead".into(), "sound-ais".into(), "235000101".into()];
        for len in 0..40 {
            let base: String = (0..len).map(|i| (b'a' + (i % 26) as u8) as char).collect();
            cases.push(base.clone());
            for at in 0..len {
                for ins in ["\"", "\\", "\u{1}", "\n", "\u{1f}", "é", "\u{7f}", " "] {
                    let mut t = base.clone();
                    t.replace_range(at..at + 1, ins);
                    cases.push(t);
                }
            }
        }
        for s in &cases {
            let (mut got, mut want) = (Vec::new(), Vec::new());
            push_json_str(&mut Line(&mut got), s);
            json_str_reference(&mut want, s);
            assert_eq!(got, want, "{s:?}");
            let back: String = serde_json::from_slice(&got).unwrap();
            assert_eq!(&back, s);
        }
    }

    #[test]
    fn integers_match_the_formatter() {
        let mut cases: Vec<u64> = (0..1000).collect();
        for k in 1..20 {
            let p = 10u64.pow(k);
            cases.extend([p - 1, p, p + 1]);
        }
        cases.push(u64::MAX);
        let mut x: u64 = 0xdead_beef_cafe_f00d;
        for _ in 0..20_000 {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            cases.extend([x, x >> (x % 64)]);
        }
        for n in cases {
            let mut b = Vec::new();
            push_u64(&mut Line(&mut b), n);
            assert_eq!(String::from_utf8(b).unwrap(), n.to_string());
        }
    }

    /// A track line built from the reference writers above, the standard
    /// formatter and `Timestamp::to_rfc3339`.
    fn reference_line(r: &TrackRecord) -> String {
        let f = |v: f64, d: u32| {
            let mut s = String::new();
            fixed_reference(&mut s, v, d);
            s
        };
        let js = |s: &str| {
            let mut b = Vec::new();
            json_str_reference(&mut b, s);
            String::from_utf8(b).unwrap()
        };
        let c = (r.course_deg * 100.0).round() / 100.0;
        let p = &r.pos_cov_m2;
        let mut s = format!(
            "{{\"type\":\"track\",\"time\":\"{}\",\"track\":{},\"status\":\"{}\",\"lat_deg\":{},\"lon_deg\":{},\"east_m\":{},\"north_m\":{},\"vel_east_mps\":{},\"vel_north_mps\":{},\"speed_kn\":{},\"course_deg\":{},\"pos_cov_m2\":[[{},{}],[{},{}]],\"sensors\":[{}],\"identity\":{}",
            r.time.to_rfc3339(),
            r.track,
            r.status.as_str(),
            f(r.lat_deg, 7),
            f(r.lon_deg, 7),
            f(r.east_m, 2),
            f(r.north_m, 2),
            f(r.vel_east_mps, 3),
            f(r.vel_north_mps, 3),
            f(r.speed_kn, 2),
            f(if c >= 360.0 { 0.0 } else { c }, 2),
            f(p[0][0], 2),
            f(p[0][1], 2),
            f(p[1][0], 2),
            f(p[1][1], 2),
            r.sensors.iter().map(|s| js(s)).collect::<Vec<_>>().join(","),
            r.identity.as_deref().map(js).unwrap_or("null".into()),
        );
        if let Some(n) = &r.name {
            s += &format!(",\"name\":{}", js(n));
        }
        if let Some(t) = r.ship_type {
            s += &format!(",\"ship_type\":{t}");
        }
        if let Some(v) = r.length_m {
            s += &format!(",\"length_m\":{}", f(v, 1));
        }
        if let Some(v) = r.beam_m {
            s += &format!(",\"beam_m\":{}", f(v, 1));
        }
        if r.identity_conflict {
            s += ",\"identity_conflict\":true";
        }
        s + "}"
    }

    #[test]
    fn line_writer_matches_the_reference_lines() {
        // Random records, their times mostly forward in small steps (as
        // the engine writes them) with jumps back and across days, through
        // one writer: every line as the reference builds it, and as
        // `write_json_bytes` (no carried state) writes it.
        let mut x: u64 = 0x0bad_cafe_1234_5678;
        let mut next = move || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        };
        let mut unit = move || (next() >> 11) as f64 / (1u64 << 53) as f64;
        let mut t = Timestamp::parse_rfc3339("2024-02-28T23:59:30Z").unwrap().unix_nanos();
        let mut writer = TrackLineWriter::new();
        let (mut got, mut plain) = (Vec::new(), Vec::new());
        for k in 0..20_000u64 {
            let u = unit();
            t += match k % 50 {
                0 => -(u * 2.0e14) as i64,
                1 => (u * 3.0e14) as i64,
                _ => (u * 4.0e8) as i64,
            };
            let sym = unit() < 0.9;
            let cov = (unit() - 0.5) * 2000.0;
            let r = TrackRecord {
                time: Timestamp::from_unix_nanos(if k % 7 == 0 { t - t % 1_000_000_000 } else { t }),
                track: (unit() * 1e4) as u64,
                status: [TrackStatus::Tentative, TrackStatus::Confirmed, TrackStatus::Coasting, TrackStatus::Ended][k as usize % 4],
                lat_deg: (unit() - 0.5) * 180.0,
                lon_deg: (unit() - 0.5) * 360.0,
                east_m: (unit() - 0.5) * 1e5,
                north_m: if k % 11 == 0 { -0.0 } else { (unit() - 0.5) * 1e5 },
                vel_east_mps: (unit() - 0.5) * 30.0,
                vel_north_mps: (unit() - 0.5) * 30.0,
                speed_kn: unit() * 40.0,
                course_deg: if k % 13 == 0 { 359.996 } else { unit() * 360.0 },
                pos_cov_m2: [[unit() * 5e4, cov], [if sym { cov } else { cov + 1.0 }, unit() * 5e4]],
                sensors: (0..k % 3).map(|i| Arc::<str>::from(["north-mast", "gullhead", "sound-ais"][i as usize])).collect(),
                identity: (k % 2 == 0).then(|| Arc::<str>::from(format!("2350{k:05}"))),
                name: (k % 5 == 0).then(|| Arc::<str>::from("SKERRY \"ONE\"\t")),
                ship_type: (k % 5 == 0).then_some((k % 100) as u8),
                length_m: (k % 5 == 0).then(|| unit() * 300.0),
                beam_m: (k % 10 == 0).then(|| unit() * 40.0),
                identity_conflict: k % 17 == 0,
            };
            got.clear();
            plain.clear();
            writer.write(&r, &mut got);
            r.write_json_bytes(&mut plain);
            let want = reference_line(&r);
            assert_eq!(std::str::from_utf8(&got).unwrap(), want, "record {k}");
            assert_eq!(got, plain, "record {k}");
        }
    }

    #[test]
    fn digit_count_by_brute_force() {
        // Against the length of the standard formatter's decimal text.
        let mut cases: Vec<u64> = (0..2000).collect();
        for k in 1..20 {
            let p = 10u64.pow(k);
            cases.extend([p - 1, p, p + 1]);
        }
        cases.push(u64::MAX);
        for n in cases {
            let want = if n == 0 { 0 } else { n.to_string().len() };
            assert_eq!(count_digits(n), want, "{n}");
        }
    }

    #[test]
    fn long_strings_and_huge_numbers() {
        // Long strings, many sensors, numbers past the integer path.
        let mut r = TrackRecord::from_json(r#"{"type":"track","time":"2026-05-14T06:00:02Z","track":1,"status":"tentative","lat_deg":56.0,"lon_deg":7.0,"east_m":0.0,"north_m":0.0,"vel_east_mps":0.0,"vel_north_mps":0.0,"speed_kn":0.0,"course_deg":0.0,"pos_cov_m2":[[1.0,0.0],[0.0,1.0]],"sensors":[],"identity":null}"#).unwrap().unwrap();
        r.identity = Some("é\"x".repeat(300).into());
        r.sensors = (0..40).map(|i| Arc::<str>::from(format!("sensor-{i}-{}", "n".repeat(i * 7)))).collect();
        r.pos_cov_m2[0][0] = 1.5e300;
        r.east_m = -2.5e17;
        let back = TrackRecord::from_json(&r.to_json()).unwrap().unwrap();
        assert_eq!(back.identity, r.identity);
        assert_eq!(back.sensors, r.sensors);
        assert_eq!(back.pos_cov_m2[0][0], 1.5e300);
        assert_eq!(back.east_m, -2.5e17);
        let mut bytes = Vec::new();
        r.write_json_bytes(&mut bytes);
        assert_eq!(String::from_utf8(bytes).unwrap(), r.to_json());
    }

    #[test]
    fn speed_and_course() {
        // 1 kn = 1852/3600 m/s (definition of the nautical mile).
        let (s, c) = speed_course(0.0, 1852.0 / 3600.0);
        assert!((s - 1.0).abs() < 1e-12 && c == 0.0);
        let (_, c) = speed_course(-1.0, 0.0);
        assert!((c - 270.0).abs() < 1e-12);
        let (_, c) = speed_course(1.0, -1.0);
        assert!((c - 135.0).abs() < 1e-12);
    }

    #[test]
    fn truth_labels() {
        let a = TruthRecord::from_json(r#"{"type":"truth","time":"2026-05-14T06:00:00Z","vessel":3,"lat_deg":56.0,"lon_deg":7.0}"#).unwrap().unwrap();
        assert_eq!(a.vessel, VesselLabel::Number(3));
        let b = TruthRecord::from_json(&a.to_json()).unwrap().unwrap();
        assert_eq!(a, b);
    }
}
