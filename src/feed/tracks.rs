//! Track records (CONTRACT.md §2) and truth records (§6).
//!
//! Track records are written by hand, with fixed decimals per field, so
//! that the output is the same to the byte in every run and short:
//! latitude and longitude to 1e-7° (about 1 cm), plane positions to 1 cm,
//! velocities to 1 mm/s, covariances to 0.01 m².

use crate::time::Timestamp;
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

/// Writes `v` with `d` decimals (d ≤ 9), never as `-0.00`: the value is
/// rounded to the nearest multiple of 10⁻ᵈ (ties away from zero, as
/// `f64::round`) and written as integers, which is several times faster
/// than float formatting on the output path.
#[inline]
fn fixed(out: &mut Line<'_>, v: f64, d: u32) {
    let d = d.min(9) as usize;
    let x = v * POW10_U64[d] as f64;
    let a = x.abs();
    // Below 9e15 < 2^53 the integer part and the fraction of `a` are
    // exact, so rounding half away from zero is a comparison (and
    // avoids a libm call: `round` has no instruction in baseline x86-64).
    if a.is_nan() || a >= 9.0e15 {
        return fixed_slow(out, v, d);
    }
    let mut n = a as u64;
    if a - n as f64 >= 0.5 {
        n += 1;
    }
    if n >= 9_000_000_000_000_000 {
        return fixed_slow(out, v, d);
    }
    let neg = x < 0.0 && n != 0;
    // At least one digit before the point.
    let digits = count_digits(n).max(d + 1);
    let width = neg as usize + digits + (d > 0) as usize;
    // Right to left into a fixed buffer, the number left-aligned: the
    // fraction, the point, the integer part, the sign. Every division is
    // by a constant (a multiplication). The whole buffer is appended and
    // the tail cut off: a copy of constant size is a few vector moves,
    // where a copy of the exact size is a `memcpy` call.
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
    let end = out.0.len() + width;
    out.0.extend_from_slice(&buf);
    out.0.truncate(end);
}

/// [`fixed`] for values too large for its integer path, or not finite.
#[cold]
fn fixed_slow(out: &mut Line<'_>, v: f64, d: usize) {
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
/// the text valid UTF-8.
fn push_json_str(out: &mut Line<'_>, s: &str) {
    out.push('"');
    for &b in s.as_bytes() {
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
    out.push('"');
}

/// Appends `v` in decimal with at least `width` digits (zero padded).
fn push_u64(out: &mut Line<'_>, mut v: u64, width: usize) {
    let mut buf = [b'0'; 20];
    let mut i = buf.len();
    while v > 0 {
        i -= 1;
        buf[i] = b'0' + (v % 10) as u8;
        v /= 10;
    }
    let start = (buf.len() - width.min(20)).min(i);
    out.push_ascii(&buf[start..]);
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

    /// Appends the JSON line (without the newline) as UTF-8 bytes: the
    /// output path of `skerry track`, with no check or copy per line.
    pub fn write_json_bytes(&self, out: &mut Vec<u8>) {
        out.reserve(400);
        let out = &mut Line(out);
        out.push_str("{\"type\":\"track\",\"time\":\"");
        self.time.write_rfc3339_bytes(out.0);
        out.push_str("\",\"track\":");
        push_u64(out, self.track, 1);
        out.push_str(",\"status\":\"");
        out.push_str(self.status.as_str());
        out.push_str("\",\"lat_deg\":");
        fixed(out, self.lat_deg, 7);
        out.push_str(",\"lon_deg\":");
        fixed(out, self.lon_deg, 7);
        out.push_str(",\"east_m\":");
        fixed(out, self.east_m, 2);
        out.push_str(",\"north_m\":");
        fixed(out, self.north_m, 2);
        out.push_str(",\"vel_east_mps\":");
        fixed(out, self.vel_east_mps, 3);
        out.push_str(",\"vel_north_mps\":");
        fixed(out, self.vel_north_mps, 3);
        out.push_str(",\"speed_kn\":");
        fixed(out, self.speed_kn, 2);
        out.push_str(",\"course_deg\":");
        // Rounding may carry 359.995 up to 360.00: keep the contract's [0, 360).
        let c = round_half_away(self.course_deg * 100.0) / 100.0;
        fixed(out, if c >= 360.0 { 0.0 } else { c }, 2);
        out.push_str(",\"pos_cov_m2\":[[");
        fixed(out, self.pos_cov_m2[0][0], 2);
        out.push(',');
        let en_at = out.0.len();
        fixed(out, self.pos_cov_m2[0][1], 2);
        let en_end = out.0.len();
        out.push_str("],[");
        if self.pos_cov_m2[1][0].to_bits() == self.pos_cov_m2[0][1].to_bits() {
            // A symmetric covariance (every engine record): the same text.
            out.0.extend_from_within(en_at..en_end);
        } else {
            fixed(out, self.pos_cov_m2[1][0], 2);
        }
        out.push(',');
        fixed(out, self.pos_cov_m2[1][1], 2);
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
            push_u64(out, t as u64, 1);
        }
        // Decimetres: AIS gives whole metres, other sources may not.
        if let Some(v) = self.length_m {
            out.push_str(",\"length_m\":");
            fixed(out, v, 1);
        }
        if let Some(v) = self.beam_m {
            out.push_str(",\"beam_m\":");
            fixed(out, v, 1);
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
        fixed(&mut Line(&mut b), v, d);
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
        for (k, &v) in cases.iter().enumerate() {
            for d in 0..=9 {
                let (a, mut b) = (fixed_string(v, d), String::new());
                fixed_reference(&mut b, v, d);
                assert_eq!(a, b, "case {k}: {v:e} with {d} decimals");
            }
            assert_eq!(round_half_away(v * 100.0).to_bits(), (v * 100.0).round().to_bits(), "{v:e}");
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
