//! Recordings (CONTRACT.md §7): the pure parts, usable offline.
//!
//! With `[record] dir` set, `skerry serve` writes every record it accepts
//! as a feed line (§1) with one added field, `received`, the RFC 3339 UTC
//! time the daemon received it. One file per UTC hour of `received`,
//! named `YYYY-MM-DDTHH.jsonl`; a file whose name is not exactly of that
//! form (a valid date and hour, nothing before or after) is not a
//! recording file, and nothing here ever reads or deletes it.
//!
//! This module names the files, picks the files retention deletes, lists
//! the recording files of a folder in time order (a folder given to
//! `skerry track`, `check` or `replay` is read as one feed, its files in
//! name order, which is time order), and recognises a torn final line: the
//! last line of a file that does not end in a newline and is not a whole
//! JSON value, as left by a crash or a full disk in the middle of a write.
//! The writer itself is `daemon::record`.

use crate::feed::tracks::DIGIT_PAIRS as PAIRS;
use crate::feed::{Record, SensorTable, encode_record};
use crate::time::Timestamp;
use std::path::{Path, PathBuf};

/// Nanoseconds in an hour.
const HOUR_NS: i64 = 3_600_000_000_000;

/// The suffix of every recording file.
pub const SUFFIX: &str = ".jsonl";

/// Length of `YYYY-MM-DDTHH.jsonl`.
const NAME_LEN: usize = 13 + SUFFIX.len();

/// The UTC hour of `t`, counted from the epoch.
pub fn hour_index(t: Timestamp) -> i64 {
    t.unix_nanos().div_euclid(HOUR_NS)
}

/// The start of hour `h` (see [`hour_index`]).
pub fn hour_start(h: i64) -> Timestamp {
    Timestamp::from_unix_nanos(h.saturating_mul(HOUR_NS))
}

/// The name of the recording file of hour `h`: `YYYY-MM-DDTHH.jsonl`.
pub fn file_name(h: i64) -> String {
    let mut s = String::with_capacity(NAME_LEN);
    hour_start(h).write_rfc3339(&mut s);
    s.truncate(13);
    s.push_str(SUFFIX);
    s
}

/// The hour of a recording file's name, or `None` when the name is not
/// exactly `YYYY-MM-DDTHH.jsonl` with a real date and an hour 00–23.
pub fn parse_file_name(name: &str) -> Option<i64> {
    let stem = name.strip_suffix(SUFFIX)?;
    let b = stem.as_bytes();
    if b.len() != 13 || b[4] != b'-' || b[7] != b'-' || b[10] != b'T' {
        return None;
    }
    if ![0..4, 5..7, 8..10, 11..13].iter().all(|r| b[r.clone()].iter().all(u8::is_ascii_digit)) {
        return None;
    }
    let t = Timestamp::parse_rfc3339(&format!("{stem}:00:00Z")).ok()?;
    let h = hour_index(t);
    // Only the canonical spelling (the parser takes `t` for `T`; the
    // check above already refuses it, this keeps the two in step).
    (file_name(h) == name).then_some(h)
}

/// Appends the recording line of `rec`, received at `received`, with its
/// newline.
pub fn format_line(rec: &Record, sensors: &SensorTable, received: Timestamp, out: &mut String) {
    encode_record(rec, sensors, Some(received), out);
    out.push('\n');
}

/// Writes recording lines byte for byte as [`format_line`] does, at a
/// fraction of the cost, for the writer's hot path: sensor names are
/// escaped once, a timestamp's text is kept for the next record with the
/// same one (the records of a datagram share their `received`) and its
/// date and time of day for the next in the same second, short decimals
/// are written directly (see [`short_decimal`]) and other numbers by
/// serde_json; each line is assembled on the stack with fixed-size copies
/// and appended in one piece. No allocation once `out` has grown.
pub struct LineWriter {
    names: Vec<Text>,
    time: SecondText,
    received: SecondText,
    /// The stack-sized buffer of [`Line`], kept (not zeroed per line).
    buf: Box<[u8; LINE]>,
}

/// Most bytes of a short text kept padded for fixed-size copies.
const PAD: usize = 32;

/// A pre-formatted piece: padded when short, else on the heap.
enum Text {
    Short([u8; PAD], usize),
    Long(Vec<u8>),
}

impl Text {
    fn new(b: &[u8]) -> Text {
        if b.len() <= PAD {
            let mut a = [0u8; PAD];
            a[..b.len()].copy_from_slice(b);
            Text::Short(a, b.len())
        } else {
            Text::Long(b.to_vec())
        }
    }
}

/// Bytes of a line assembled on the stack before they go to `out`.
const LINE: usize = 512;

/// A line being assembled: fixed-size copies into a stack buffer, which
/// is appended to `out` when full and at the end.
struct Line<'a> {
    buf: &'a mut [u8; LINE],
    n: usize,
    out: &'a mut Vec<u8>,
}

impl Line<'_> {
    /// Makes room for `k` more bytes (k ≤ LINE).
    #[inline(always)]
    fn room(&mut self, k: usize) {
        if self.n + k > LINE {
            self.out.extend_from_slice(&self.buf[..self.n]);
            self.n = 0;
        }
    }

    #[inline(always)]
    fn lit<const N: usize>(&mut self, s: &[u8; N]) {
        self.room(N);
        self.buf[self.n..self.n + N].copy_from_slice(s);
        self.n += N;
    }

    #[inline(always)]
    fn text(&mut self, t: &Text) {
        match t {
            Text::Short(a, len) => {
                self.room(PAD);
                self.buf[self.n..self.n + PAD].copy_from_slice(a);
                self.n += len;
            }
            Text::Long(v) => self.bytes(v),
        }
    }

    fn bytes(&mut self, s: &[u8]) {
        if s.len() > LINE {
            self.out.extend_from_slice(&self.buf[..self.n]);
            self.n = 0;
            self.out.extend_from_slice(s);
            return;
        }
        self.room(s.len());
        self.buf[self.n..self.n + s.len()].copy_from_slice(s);
        self.n += s.len();
    }

    /// The decimal digits of `x`, written in place two at a time.
    #[inline(always)]
    fn u64(&mut self, mut x: u64) {
        self.room(20);
        let len = x.checked_ilog10().map_or(1, |l| l as usize + 1);
        let mut i = self.n + len;
        while x >= 100 {
            let r = (x % 100) as usize * 2;
            x /= 100;
            i -= 2;
            self.buf[i] = PAIRS[r];
            self.buf[i + 1] = PAIRS[r + 1];
        }
        if x >= 10 {
            let r = x as usize * 2;
            self.buf[i - 2] = PAIRS[r];
            self.buf[i - 1] = PAIRS[r + 1];
        } else {
            self.buf[i - 1] = b'0' + x as u8;
        }
        self.n += len;
    }

    fn num(&mut self, v: f64) {
        // Room for every form below: no flush in the middle of a number.
        self.room(PAD);
        if !short_decimal(self, v) {
            // Records are checked finite; serde_json writes `null`
            // otherwise, as encode_record does (at most 24 bytes).
            let mut w: &mut [u8] = &mut self.buf[self.n..self.n + PAD];
            let _ = serde_json::to_writer(&mut w, &v);
            let left = w.len();
            self.n += PAD - left;
        }
    }

    /// A JSON string of any length, escaped by serde_json straight into
    /// `out`.
    fn json_str(&mut self, s: &str) {
        self.out.extend_from_slice(&self.buf[..self.n]);
        self.n = 0;
        let _ = serde_json::to_writer(&mut *self.out, s);
    }

    fn finish(self) {
        self.out.extend_from_slice(&self.buf[..self.n]);
    }
}

/// The text of the last timestamp written, and the date and time of day
/// of the last second.
struct SecondText {
    sec: Option<i64>,
    /// `YYYY-MM-DDTHH:MM:SS` of `sec`.
    prefix: String,
    last: Option<Timestamp>,
    /// The whole text of `last`, as `Timestamp::write_rfc3339` writes it.
    text: Text,
}

impl SecondText {
    fn new() -> Self {
        SecondText { sec: None, prefix: String::with_capacity(32), last: None, text: Text::Short([0; PAD], 0) }
    }

    fn get(&mut self, t: Timestamp) -> &Text {
        const NS: i64 = 1_000_000_000;
        if self.last != Some(t) {
            let sec = t.unix_nanos().div_euclid(NS);
            if self.sec != Some(sec) {
                self.prefix.clear();
                Timestamp::from_unix_nanos(sec * NS).write_rfc3339(&mut self.prefix);
                self.prefix.pop(); // the `Z`
                self.sec = Some(sec);
            }
            let mut a = [0u8; PAD];
            let p = self.prefix.len().min(PAD - 11);
            a[..p].copy_from_slice(&self.prefix.as_bytes()[..p]);
            let mut n = p;
            let mut ns = t.unix_nanos().rem_euclid(NS) as u64;
            if ns != 0 {
                // Nine digits with the leading zeros, less the trailing ones.
                a[n] = b'.';
                for i in (0..4).rev() {
                    let r = (ns % 100) as usize * 2;
                    ns /= 100;
                    a[n + 2 + 2 * i] = PAIRS[r];
                    a[n + 3 + 2 * i] = PAIRS[r + 1];
                }
                a[n + 1] = b'0' + ns as u8;
                n += 10;
                while a[n - 1] == b'0' {
                    n -= 1;
                }
            }
            a[n] = b'Z';
            self.text = Text::Short(a, n + 1);
            self.last = Some(t);
        }
        &self.text
    }
}


/// Writes `v` when it is the double nearest to m / 10^k for an integer
/// m < 10^15 and k ≤ 4 (a radar's range to the decimetre, a bearing to
/// the hundredth...), as the shortest round-trip form serde_json gives:
/// the decimal m / 10^k itself. Why it is the shortest: any other decimal
/// of at most 15 significant digits that rounds to the same double is
/// the same number (15 digits always survive decimal → double →
/// decimal), and the smallest such k leaves no trailing zero. Within
/// 1e-4 ≤ |v| < 1e15 serde_json writes plain decimals, `.0` after a
/// whole number. Returns false, writing nothing, for any other value.
/// The caller has made room for 32 bytes.
fn short_decimal(line: &mut Line<'_>, v: f64) -> bool {
    const P10: [f64; 5] = [1.0, 10.0, 100.0, 1000.0, 10000.0];
    let a = v.abs();
    if !(1e-4..1e15).contains(&a) {
        return false;
    }
    for (k, p) in P10.iter().enumerate() {
        // Nearest integer (a > 0; no libm call on a baseline x86-64).
        let m = (a * p + 0.5) as u64;
        if m >= 1_000_000_000_000_000 {
            return false;
        }
        // Exact operands, one correctly rounded division: the double
        // nearest to m / 10^k.
        if m as f64 / p == a {
            if v < 0.0 {
                line.lit(b"-");
            }
            let len = m.checked_ilog10().map_or(1, |l| l as usize + 1);
            if k == 0 {
                line.u64(m);
                line.lit(b".0");
            } else if len > k {
                line.u64(m);
                // Move the last k digits one place on, for the point.
                let end = line.n;
                for i in (end - k..end).rev() {
                    line.buf[i + 1] = line.buf[i];
                }
                line.buf[end - k] = b'.';
                line.n += 1;
            } else {
                line.lit(b"0.");
                for _ in len..k {
                    line.lit(b"0");
                }
                line.u64(m);
            }
            return true;
        }
    }
    false
}

impl LineWriter {
    pub fn new(sensors: &SensorTable) -> LineWriter {
        let names = sensors.ids().map(|i| Text::new(&serde_json::to_vec(sensors.name(i)).unwrap_or_else(|_| b"\"?\"".to_vec()))).collect();
        LineWriter { names, time: SecondText::new(), received: SecondText::new(), buf: Box::new([0; LINE]) }
    }

    /// Appends the recording line of `rec`, received at `received`, with
    /// its newline.
    pub fn line(&mut self, rec: &Record, received: Timestamp, out: &mut Vec<u8>) {
        let mut l = Line { buf: &mut self.buf, n: 0, out };
        l.lit(b"{\"type\":\"");
        match rec {
            Record::Detection(_) => l.lit(b"detection"),
            Record::ScanEnd(_) => l.lit(b"scan_end"),
            Record::Report(_) => l.lit(b"report"),
        }
        l.lit(b"\",\"sensor\":");
        match self.names.get(rec.sensor() as usize) {
            Some(n) => l.text(n),
            None => l.lit(b"\"?\""),
        }
        l.lit(b",\"time\":\"");
        l.text(self.time.get(rec.time()));
        l.lit(b"\"");
        match rec {
            Record::Detection(d) => {
                if let Some(scan) = d.scan {
                    l.lit(b",\"scan\":");
                    l.u64(scan);
                }
                l.lit(b",\"range_m\":");
                l.num(d.range_m);
                l.lit(b",\"bearing_deg\":");
                l.num(d.bearing_deg);
                if let Some(v) = d.radial_speed_mps {
                    l.lit(b",\"radial_speed_mps\":");
                    l.num(v);
                }
                if let Some(v) = d.snr_db {
                    l.lit(b",\"snr_db\":");
                    l.num(v);
                }
            }
            Record::ScanEnd(e) => {
                l.lit(b",\"scan\":");
                l.u64(e.scan);
                if let Some([a, b]) = e.sector_deg {
                    l.lit(b",\"sector_deg\":[");
                    l.num(a);
                    l.lit(b",");
                    l.num(b);
                    l.lit(b"]");
                }
            }
            Record::Report(r) => {
                l.lit(b",\"id\":");
                l.json_str(&r.id);
                l.lit(b",\"lat_deg\":");
                l.num(r.lat_deg);
                l.lit(b",\"lon_deg\":");
                l.num(r.lon_deg);
                if let Some(v) = r.sog_kn {
                    l.lit(b",\"sog_kn\":");
                    l.num(v);
                }
                if let Some(v) = r.cog_deg {
                    l.lit(b",\"cog_deg\":");
                    l.num(v);
                }
                if let Some(v) = r.heading_deg {
                    l.lit(b",\"heading_deg\":");
                    l.num(v);
                }
                if let Some(v) = &r.vessel {
                    if let Some(n) = &v.name {
                        l.lit(b",\"name\":");
                        l.json_str(n);
                    }
                    if let Some(t) = v.ship_type {
                        l.lit(b",\"ship_type\":");
                        l.u64(u64::from(t));
                    }
                    if let Some(x) = v.length_m {
                        l.lit(b",\"length_m\":");
                        l.num(x);
                    }
                    if let Some(x) = v.beam_m {
                        l.lit(b",\"beam_m\":");
                        l.num(x);
                    }
                }
            }
        }
        l.lit(b",\"received\":\"");
        l.text(self.received.get(received));
        l.lit(b"\"}\n");
        l.finish();
    }
}

/// A recording file found in a folder.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RecordingFile {
    pub name: String,
    /// Its hour (see [`hour_index`]).
    pub hour: i64,
    pub bytes: u64,
}

impl RecordingFile {
    /// `None` when `name` is not a recording file's name.
    pub fn new(name: &str, bytes: u64) -> Option<RecordingFile> {
        Some(RecordingFile { name: name.to_string(), hour: parse_file_name(name)?, bytes })
    }
}

/// The recording files retention deletes at `now`, oldest first:
/// - every file whose hour ended more than `keep_hours` before `now`;
/// - then, if `max_bytes` is set and the files left (the protected one
///   included) take more than that, the oldest of them until the rest
///   fits.
///
/// `protect` (the open file) is never chosen, even when it alone is over
/// the limit. `files` may hold any names: those that are not recording
/// files are never chosen and do not count toward the total.
pub fn to_delete(files: &[RecordingFile], now: Timestamp, keep_hours: f64, max_bytes: Option<u64>, protect: Option<&str>) -> Vec<String> {
    let mut files: Vec<&RecordingFile> = files.iter().filter(|f| parse_file_name(&f.name) == Some(f.hour)).collect();
    files.sort_by(|a, b| a.hour.cmp(&b.hour).then_with(|| a.name.cmp(&b.name)));
    let keep_s = keep_hours * 3600.0;
    let mut out = Vec::new();
    let mut left = Vec::with_capacity(files.len());
    for f in files {
        let ended = hour_start(f.hour.saturating_add(1));
        if Some(f.name.as_str()) != protect && now.secs_since(ended) > keep_s {
            out.push(f.name.clone());
        } else {
            left.push(f);
        }
    }
    if let Some(max) = max_bytes {
        let mut total: u64 = left.iter().map(|f| f.bytes).sum();
        for f in left {
            if total <= max {
                break;
            }
            if Some(f.name.as_str()) == protect {
                continue;
            }
            total -= f.bytes;
            out.push(f.name.clone());
        }
    }
    out
}

/// Why a path could not be read as a feed.
#[derive(Debug, thiserror::Error)]
pub enum FeedPathError {
    #[error("{path}: cannot read: {source}")]
    Io { path: String, source: std::io::Error },
    #[error("{path}: a folder without recording files (YYYY-MM-DDTHH.jsonl)")]
    EmptyFolder { path: String },
}

/// The recording files of folder `dir`, in name (= time) order. Other
/// names, and folders, are left out.
pub fn recording_files(dir: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut names = Vec::new();
    for e in std::fs::read_dir(dir)? {
        let e = e?;
        let Some(name) = e.file_name().to_str().map(str::to_string) else { continue };
        if parse_file_name(&name).is_some() && e.file_type()?.is_file() {
            names.push(name);
        }
    }
    names.sort();
    Ok(names.into_iter().map(|n| dir.join(n)).collect())
}

/// Feed paths with each folder replaced by its recording files in name
/// order; files are kept as they are, in the order given.
pub fn expand_feed_paths(paths: &[PathBuf]) -> Result<Vec<PathBuf>, FeedPathError> {
    let mut out = Vec::with_capacity(paths.len());
    for p in paths {
        let io = |source| FeedPathError::Io { path: p.display().to_string(), source };
        if std::fs::metadata(p).map_err(io)?.is_dir() {
            let files = recording_files(p).map_err(io)?;
            if files.is_empty() {
                return Err(FeedPathError::EmptyFolder { path: p.display().to_string() });
            }
            out.extend(files);
        } else {
            out.push(p.clone());
        }
    }
    Ok(out)
}

/// True when `line` (the last line of a file that lacks its final
/// newline) is torn: not one whole JSON value. A line cut anywhere before
/// its closing brace is never valid JSON, and a cut inside a multi-byte
/// character is not even UTF-8; a line that is whole JSON but a bad
/// record is an ordinary bad line, not a torn one.
pub fn is_torn(line: &[u8]) -> bool {
    serde_json::from_slice::<serde::de::IgnoredAny>(line).is_err()
}

/// The `received` time of a recording line, read without decoding the
/// rest; `None` when absent or not an RFC 3339 time.
pub fn line_received(line: &str) -> Option<Timestamp> {
    #[derive(serde::Deserialize)]
    struct R<'a> {
        #[serde(borrow)]
        received: Option<std::borrow::Cow<'a, str>>,
    }
    let r: R = serde_json::from_str(line).ok()?;
    Timestamp::parse_rfc3339(&r.received?).ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        // 2026-05-14T06:00:00Z is 1778738400 s after the epoch (GNU date
        // `date -u -d 2026-05-14T06:00:00Z +%s`), hour 494094.
        let t = Timestamp::parse_rfc3339("2026-05-14T06:59:59.999Z").unwrap();
        assert_eq!(hour_index(t), 1_778_738_400 / 3600);
        assert_eq!(file_name(hour_index(t)), "2026-05-14T06.jsonl");
        assert_eq!(parse_file_name("2026-05-14T06.jsonl"), Some(hour_index(t)));
        for bad in ["2026-05-14T6.jsonl", "2026-05-14T24.jsonl", "2026-02-30T01.jsonl", "2026-05-14t06.jsonl", "x2026-05-14T06.jsonl", "2026-05-14T06.jsonl.bak", "2026-05-14T06.json", "2026-05-14 06.jsonl", "+026-05-14T06.jsonl"] {
            assert_eq!(parse_file_name(bad), None, "{bad}");
        }
        // Hours before the epoch are named too (div_euclid, not /).
        assert_eq!(file_name(-1), "1969-12-31T23.jsonl");
    }

    /// The fast writer gives the bytes of `format_line` (encode_record,
    /// whose numbers serde_json formats), over random records: numbers of
    /// every magnitude (the exponent forms included), times to the
    /// nanosecond, ids and sensor names that need escaping.
    #[test]
    fn line_writer_matches_format_line() {
        use crate::feed::{Detection, Report, ScanEnd, SensorKind};
        use rand::{Rng, SeedableRng};
        let sensors = SensorTable::new([("north \"mast\"", SensorKind::Radar), ("ais\\1 on the long breakwater, \"east\" end", SensorKind::Transponder)]);
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let mut w = LineWriter::new(&sensors);
        let num = |rng: &mut rand_chacha::ChaCha8Rng| -> f64 {
            match rng.random_range(0..7) {
                0 => rng.random_range(-1e5..1e5),
                // Short decimals of every size, the fast path's domain and
                // its edges.
                4 | 5 => {
                    let k = rng.random_range(0..6);
                    let x = rng.random_range(-1.0..1.0) * 10f64.powi(rng.random_range(-6..17));
                    (x * 10f64.powi(k)).round() / 10f64.powi(k)
                }
                6 => [0.0, -0.0, 1e-4, 9.9999e-5, 1e-5, 0.0001, 0.00015, 1e15, 999999999999999.9, 1e15 - 1.0, 0.1, 0.2, 0.3, 2.675, 1.005, 5e-5][rng.random_range(0..16)],
                1 => (rng.random_range(-30.0..30.0f64)).exp2() * 10f64.powi(rng.random_range(-12..25)),
                2 => rng.random_range(-1000i64..1000) as f64,
                _ => f64::from_bits(rng.random::<u64>() >> 2),
            }
        };
        let t0 = Timestamp::parse_rfc3339("2026-05-14T06:59:59Z").unwrap();
        for i in 0..20_000u64 {
            let time = t0.plus_secs(rng.random_range(-5.0..5.0));
            let received = Timestamp::from_unix_nanos(time.unix_nanos() + rng.random_range(0..3_000_000_000i64) / [1, 1000, 1_000_000][i as usize % 3] * [1, 1000, 1_000_000][i as usize % 3]);
            let rec = match i % 3 {
                0 => Record::Detection(Detection { sensor: 0, time, scan: rng.random_bool(0.5).then(|| rng.random()), range_m: num(&mut rng), bearing_deg: num(&mut rng), radial_speed_mps: rng.random_bool(0.5).then(|| num(&mut rng)), snr_db: rng.random_bool(0.5).then(|| num(&mut rng)) }),
                1 => Record::ScanEnd(ScanEnd { sensor: 0, time, scan: rng.random(), sector_deg: rng.random_bool(0.5).then(|| [num(&mut rng), num(&mut rng)]) }),
                _ => Record::Report(Report { sensor: 1, time, id: if i % 97 == 2 { "ø\"".repeat(300).into() } else { format!("23{}\"ø\\\u{1}", rng.random::<u32>()).into() }, lat_deg: num(&mut rng), lon_deg: num(&mut rng), sog_kn: rng.random_bool(0.5).then(|| num(&mut rng)), cog_deg: rng.random_bool(0.5).then(|| num(&mut rng)), heading_deg: None, vessel: rng.random_bool(0.5).then(|| crate::feed::VesselInfo { name: rng.random_bool(0.7).then(|| format!("SELKIE \"{}\" ø", rng.random::<u16>()).into()), ship_type: rng.random_bool(0.7).then(|| rng.random()), length_m: rng.random_bool(0.7).then(|| num(&mut rng)), beam_m: rng.random_bool(0.7).then(|| num(&mut rng)) }.into()) }),
            };
            let mut want = String::new();
            format_line(&rec, &sensors, received, &mut want);
            let mut got = Vec::new();
            w.line(&rec, received, &mut got);
            assert_eq!(std::str::from_utf8(&got).unwrap(), want);
        }
        // The fast path on its own against serde_json, over many short
        // decimals.
        let mut taken = 0;
        for _ in 0..200_000 {
            let k = rng.random_range(0..5);
            let v = (rng.random_range(-1.0..1.0) * 10f64.powi(rng.random_range(-4..16)) * 10f64.powi(k)).round() / 10f64.powi(k);
            let mut got = Vec::new();
            let mut b = [0; LINE];
            let mut l = Line { buf: &mut b, n: 0, out: &mut got };
            let hit = short_decimal(&mut l, v);
            l.finish();
            if hit {
                taken += 1;
                assert_eq!(std::str::from_utf8(&got).unwrap(), serde_json::to_string(&v).unwrap(), "{v:e}");
            }
        }
        assert!(taken > 100_000, "the fast path was taken {taken} times");
        let mut hit = Vec::new();
        let mut b = [0; LINE];
        let mut l = Line { buf: &mut b, n: 0, out: &mut hit };
        assert!(short_decimal(&mut l, 12345.6) && short_decimal(&mut l, -0.05) && short_decimal(&mut l, 2000.0));
        l.finish();
        assert_eq!(hit, b"12345.6-0.052000.0");
    }

    #[test]
    fn torn_lines() {
        let line = br#"{"type":"detection","sensor":"a","time":"2026-05-14T06:00:00Z","range_m":1.0,"bearing_deg":2.0}"#;
        assert!(!is_torn(line));
        for cut in 1..line.len() {
            assert!(is_torn(&line[..cut]), "cut at {cut}");
        }
        let utf8 = "{\"id\":\"Skær\"}".as_bytes();
        assert!(is_torn(&utf8[..10]), "cut inside a two-byte character");
        assert!(!is_torn(br#"{"type":"plot"}"#), "whole JSON is not torn, only bad");
    }
}
