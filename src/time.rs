//! UTC timestamps at nanosecond resolution, RFC 3339 in and out.
//!
//! A [`Timestamp`] is a count of nanoseconds since 1970-01-01T00:00:00Z,
//! ignoring leap seconds (as Unix time does). Feed times are parsed with
//! [`Timestamp::parse_rfc3339`] and written with [`Timestamp::write_rfc3339`],
//! which always writes `Z` and the shortest fraction that is exact, so the
//! same instant always prints the same way (the track output is compared
//! byte for byte).

use std::fmt;

/// Nanoseconds since the Unix epoch, UTC.
#[derive(Copy, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Debug, Default)]
pub struct Timestamp(i64);

/// Why a time string was not accepted.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum TimeError {
    #[error("not an RFC 3339 date-time (expected YYYY-MM-DDTHH:MM:SS[.fff]Z)")]
    Syntax,
    #[error("a date or time field is out of range")]
    FieldRange,
    #[error("outside the years 1970..9999")]
    OutOfSpan,
}

const NANOS_PER_SEC: i64 = 1_000_000_000;

/// Days from 1970-01-01 to the given proleptic Gregorian date
/// (Howard Hinnant's `days_from_civil`, public domain algorithm).
fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let m = m as i64;
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + d as i64 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`].
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = if z >= 0 { z } else { z - 146_096 } / 146_097;
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

fn days_in_month(y: i64, m: u32) -> u32 {
    match m {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        _ => {
            if (y % 4 == 0 && y % 100 != 0) || y % 400 == 0 {
                29
            } else {
                28
            }
        }
    }
}

fn digits(b: &[u8]) -> Option<u32> {
    let mut v: u32 = 0;
    for &c in b {
        if !c.is_ascii_digit() {
            return None;
        }
        v = v * 10 + (c - b'0') as u32;
    }
    Some(v)
}

impl Timestamp {
    pub const fn from_unix_nanos(ns: i64) -> Self {
        Timestamp(ns)
    }
    pub const fn unix_nanos(self) -> i64 {
        self.0
    }
    /// From seconds since the epoch, rounded to the nearest nanosecond.
    pub fn from_unix_secs_f64(s: f64) -> Self {
        Timestamp((s * 1e9).round() as i64)
    }
    pub fn unix_secs_f64(self) -> f64 {
        // Split so that large epochs keep their sub-microsecond part.
        (self.0.div_euclid(NANOS_PER_SEC)) as f64 + (self.0.rem_euclid(NANOS_PER_SEC)) as f64 * 1e-9
    }
    /// `self - earlier` in seconds.
    pub fn secs_since(self, earlier: Timestamp) -> f64 {
        (self.0 - earlier.0) as f64 * 1e-9
    }
    /// This instant moved by `s` seconds.
    pub fn plus_secs(self, s: f64) -> Timestamp {
        Timestamp(self.0 + (s * 1e9).round() as i64)
    }
    pub fn from_ymd_hms_nanos(y: i64, mo: u32, d: u32, h: u32, mi: u32, s: u32, ns: u32) -> Result<Self, TimeError> {
        if !(1970..=9999).contains(&y) {
            return Err(TimeError::OutOfSpan);
        }
        if !(1..=12).contains(&mo) || d == 0 || d > days_in_month(y, mo) || h > 23 || mi > 59 || s > 60 || ns >= 1_000_000_000 {
            return Err(TimeError::FieldRange);
        }
        let days = days_from_civil(y, mo, d);
        // A leap second (:60) is folded onto the next second, as Unix time does.
        let secs = days * 86_400 + (h as i64) * 3600 + (mi as i64) * 60 + s as i64;
        // Years after 2262 do not fit in i64 nanoseconds.
        secs.checked_mul(NANOS_PER_SEC).and_then(|v| v.checked_add(ns as i64)).map(Timestamp).ok_or(TimeError::OutOfSpan)
    }

    /// Midnight UTC of the given date.
    pub fn from_date(y: i64, mo: u32, d: u32) -> Result<Self, TimeError> {
        Self::from_ymd_hms_nanos(y, mo, d, 0, 0, 0, 0)
    }

    /// Parses `YYYY-MM-DD` into midnight UTC of that day.
    pub fn parse_date(s: &str) -> Result<Self, TimeError> {
        let b = s.as_bytes();
        if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
            return Err(TimeError::Syntax);
        }
        let y = digits(&b[0..4]).ok_or(TimeError::Syntax)? as i64;
        let mo = digits(&b[5..7]).ok_or(TimeError::Syntax)?;
        let d = digits(&b[8..10]).ok_or(TimeError::Syntax)?;
        Self::from_date(y, mo, d)
    }

    /// Parses an RFC 3339 date-time. `T` or `t` or a space separates date
    /// and time; the zone is `Z`, `z` or a numeric offset, which is applied
    /// so the result is UTC. Up to nine fractional digits are kept; more
    /// are accepted and truncated.
    pub fn parse_rfc3339(s: &str) -> Result<Self, TimeError> {
        let b = s.as_bytes();
        if b.len() < 20 {
            return Err(TimeError::Syntax);
        }
        if b[4] != b'-' || b[7] != b'-' || !matches!(b[10], b'T' | b't' | b' ') || b[13] != b':' || b[16] != b':' {
            return Err(TimeError::Syntax);
        }
        let y = digits(&b[0..4]).ok_or(TimeError::Syntax)? as i64;
        let mo = digits(&b[5..7]).ok_or(TimeError::Syntax)?;
        let d = digits(&b[8..10]).ok_or(TimeError::Syntax)?;
        let h = digits(&b[11..13]).ok_or(TimeError::Syntax)?;
        let mi = digits(&b[14..16]).ok_or(TimeError::Syntax)?;
        let sec = digits(&b[17..19]).ok_or(TimeError::Syntax)?;
        let mut i = 19;
        let mut ns: u32 = 0;
        if b[i] == b'.' {
            i += 1;
            let start = i;
            while i < b.len() && b[i].is_ascii_digit() {
                if i - start < 9 {
                    ns = ns * 10 + (b[i] - b'0') as u32;
                }
                i += 1;
            }
            let n = i - start;
            if n == 0 {
                return Err(TimeError::Syntax);
            }
            for _ in n..9 {
                ns *= 10;
            }
        }
        let offset_s: i64 = match b.get(i) {
            Some(b'Z') | Some(b'z') if i + 1 == b.len() => 0,
            Some(&sign @ (b'+' | b'-')) if i + 6 == b.len() && b[i + 3] == b':' => {
                let oh = digits(&b[i + 1..i + 3]).ok_or(TimeError::Syntax)? as i64;
                let om = digits(&b[i + 4..i + 6]).ok_or(TimeError::Syntax)? as i64;
                if oh > 23 || om > 59 {
                    return Err(TimeError::FieldRange);
                }
                let o = oh * 3600 + om * 60;
                if sign == b'+' { o } else { -o }
            }
            _ => return Err(TimeError::Syntax),
        };
        let t = Self::from_ymd_hms_nanos(y, mo, d, h, mi, sec, ns)?;
        t.0.checked_sub(offset_s * NANOS_PER_SEC).map(Timestamp).ok_or(TimeError::OutOfSpan)
    }

    /// Appends the RFC 3339 form: `YYYY-MM-DDTHH:MM:SS[.f]Z`, with the
    /// fraction in the fewest digits that represent it exactly.
    pub fn write_rfc3339(self, out: &mut String) {
        match self.rfc3339_ascii() {
            // The buffer holds ASCII only.
            Some((b, len)) => out.push_str(std::str::from_utf8(&b[..len]).unwrap_or("")),
            None => self.write_rfc3339_fmt(out),
        }
    }

    /// [`Timestamp::write_rfc3339`] into a byte buffer (for writers that
    /// build whole lines as bytes).
    pub fn write_rfc3339_bytes(self, out: &mut Vec<u8>) {
        match self.rfc3339_ascii() {
            Some((b, len)) => out.extend_from_slice(&b[..len]),
            None => {
                let mut s = String::new();
                self.write_rfc3339_fmt(&mut s);
                out.extend_from_slice(s.as_bytes());
            }
        }
    }

    /// The RFC 3339 text and its length, written digit by digit: track
    /// output writes one time per record, and the formatting machinery
    /// was most of their cost. `None` for years outside 0000–9999, which
    /// take [`Timestamp::write_rfc3339_fmt`].
    fn rfc3339_ascii(self) -> Option<([u8; 30], usize)> {
        let secs = self.0.div_euclid(NANOS_PER_SEC);
        let ns = self.0.rem_euclid(NANOS_PER_SEC) as u32;
        let days = secs.div_euclid(86_400);
        let sod = secs.rem_euclid(86_400) as u32;
        let (y, m, d) = civil_from_days(days);
        if !(0..=9999).contains(&y) {
            return None;
        }
        let mut b = *b"0000-00-00T00:00:00.000000000Z";
        let two = |b: &mut [u8], at: usize, v: u32| {
            b[at] = b'0' + (v / 10) as u8;
            b[at + 1] = b'0' + (v % 10) as u8;
        };
        let y = y as u32;
        two(&mut b, 0, y / 100);
        two(&mut b, 2, y % 100);
        two(&mut b, 5, m);
        two(&mut b, 8, d);
        two(&mut b, 11, sod / 3600);
        two(&mut b, 14, sod / 60 % 60);
        two(&mut b, 17, sod % 60);
        let mut len = 19;
        if ns != 0 {
            let mut frac = ns;
            for k in (20..29).rev() {
                b[k] = b'0' + (frac % 10) as u8;
                frac /= 10;
            }
            // The fewest digits that represent the fraction exactly.
            len = 29;
            while b[len - 1] == b'0' {
                len -= 1;
            }
        }
        b[len] = b'Z';
        Some((b, len + 1))
    }

    /// [`Timestamp::write_rfc3339_bytes`] through `cache`, which keeps
    /// the text of the last second written: track records come in time
    /// order, so most share the second (and nearly all the day) of the
    /// record before. The bytes are those of the uncached writer.
    pub fn write_rfc3339_cached(self, cache: &mut Rfc3339Cache, out: &mut Vec<u8>) {
        let secs = self.0.div_euclid(NANOS_PER_SEC);
        let ns = self.0.rem_euclid(NANOS_PER_SEC) as u32;
        if secs != cache.secs && !cache.set_second(secs) {
            return self.write_rfc3339_bytes(out);
        }
        let b = &mut cache.text;
        let mut len = 19;
        if ns != 0 {
            b[19] = b'.';
            let head = ns / 100_000_000;
            b[20] = b'0' + head as u8;
            let rest = digits8(ns - head * 100_000_000);
            b[21..29].copy_from_slice(&(rest | ASCII_ZEROS).to_le_bytes());
            // The fewest digits that represent the fraction exactly: the
            // last digits sit in the high bytes, so the zero bytes at the
            // top are the trailing zeros (all eight when `rest` is 0).
            len = 29 - (rest.leading_zeros() / 8) as usize;
        }
        b[len] = b'Z';
        // The whole buffer, then the tail cut: a copy of constant size.
        let end = out.len() + len + 1;
        out.extend_from_slice(b);
        out.truncate(end);
    }

    /// [`Timestamp::write_rfc3339`] through the standard formatter: the
    /// path for any year, and the reference the fast path is tested
    /// against.
    fn write_rfc3339_fmt(self, out: &mut String) {
        use std::fmt::Write;
        let secs = self.0.div_euclid(NANOS_PER_SEC);
        let ns = self.0.rem_euclid(NANOS_PER_SEC) as u32;
        let days = secs.div_euclid(86_400);
        let sod = secs.rem_euclid(86_400);
        let (y, m, d) = civil_from_days(days);
        let _ = write!(out, "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}", y, m, d, sod / 3600, (sod / 60) % 60, sod % 60);
        if ns != 0 {
            let mut frac = ns;
            let mut width = 9;
            while frac % 10 == 0 {
                frac /= 10;
                width -= 1;
            }
            let _ = write!(out, ".{:0width$}", frac, width = width);
        }
        out.push('Z');
    }

    pub fn to_rfc3339(self) -> String {
        let mut s = String::with_capacity(30);
        self.write_rfc3339(&mut s);
        s
    }

    /// Seconds since midnight UTC of this instant's day.
    pub fn secs_of_day(self) -> f64 {
        self.0.rem_euclid(86_400 * NANOS_PER_SEC) as f64 * 1e-9
    }

    /// Midnight UTC of this instant's day.
    pub fn midnight(self) -> Timestamp {
        Timestamp(self.0 - self.0.rem_euclid(86_400 * NANOS_PER_SEC))
    }
}

/// The date-and-time text of one second, `YYYY-MM-DDTHH:MM:SS`, kept by
/// [`Timestamp::write_rfc3339_cached`] between calls. Any time may follow
/// any other (earlier, later, another day): the text is rebuilt from the
/// day and the second whenever they differ from the cached ones.
#[derive(Clone, Debug)]
pub struct Rfc3339Cache {
    /// The second (since the epoch) whose text is in `text[..19]`;
    /// `i64::MIN` (no instant's second) when empty.
    secs: i64,
    /// The day whose date is in `text[..10]`; `i64::MIN` when empty.
    day: i64,
    /// The text, with room behind it for the fraction and the `Z`.
    text: [u8; 32],
}

impl Default for Rfc3339Cache {
    fn default() -> Self {
        Self::new()
    }
}

impl Rfc3339Cache {
    pub const fn new() -> Self {
        Rfc3339Cache { secs: i64::MIN, day: i64::MIN, text: *b"0000-00-00T00:00:00.000000000Z\0\0" }
    }

    /// Makes `text[..19]` the text of second `secs`; false (and the cache
    /// unchanged) for years outside 0000–9999, which are not cached.
    fn set_second(&mut self, secs: i64) -> bool {
        let day = secs.div_euclid(86_400);
        let sod = secs.rem_euclid(86_400) as u32;
        let b = &mut self.text;
        if day != self.day {
            let (y, m, d) = civil_from_days(day);
            if !(0..=9999).contains(&y) {
                return false;
            }
            let y = y as u32;
            b[0..2].copy_from_slice(two_digits(y / 100));
            b[2..4].copy_from_slice(two_digits(y % 100));
            b[5..7].copy_from_slice(two_digits(m));
            b[8..10].copy_from_slice(two_digits(d));
            self.day = day;
        }
        b[11..13].copy_from_slice(two_digits(sod / 3600));
        b[14..16].copy_from_slice(two_digits(sod / 60 % 60));
        b[17..19].copy_from_slice(two_digits(sod % 60));
        self.secs = secs;
        true
    }
}

/// The two decimal digits of `v` (< 100).
fn two_digits(v: u32) -> &'static [u8] {
    let k = 2 * v as usize;
    &crate::feed::tracks::DIGIT_PAIRS[k..k + 2]
}

/// `'0'` in every byte: added to [`digits8`] it gives ASCII.
pub(crate) const ASCII_ZEROS: u64 = 0x3030_3030_3030_3030;

/// The eight decimal digits of `x` (< 10⁸, zero padded), one a byte, the
/// most significant in the lowest byte (so `to_le_bytes` gives them in
/// reading order), as digit values 0–9 (add [`ASCII_ZEROS`] for text).
/// Done in all lanes at once (SWAR): two halves of four digits in 32-bit
/// lanes, split into pairs in 16-bit lanes, then into digits in bytes.
/// Each step divides by a constant as a multiply and shift that is exact
/// in its range (x·5243 >> 19 = ⌊x/100⌋ for x < 10⁴, x·103 >> 10 = ⌊x/10⌋
/// for x < 100, common practice; checked lane by lane in the tests), and
/// no lane's product reaches the next lane.
#[inline]
pub(crate) fn digits8(x: u32) -> u64 {
    debug_assert!(x < 100_000_000);
    let hi = x / 10_000;
    let lo = x - hi * 10_000;
    let v = hi as u64 | (lo as u64) << 32;
    let hundreds = ((v * 5243) >> 19) & 0x0000_007f_0000_007f;
    let v = hundreds | (v - hundreds * 100) << 16;
    let tens = ((v * 103) >> 10) & 0x000f_000f_000f_000f;
    tens | (v - tens * 10) << 8
}

impl fmt::Display for Timestamp {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.to_rfc3339())
    }
}

impl std::str::FromStr for Timestamp {
    type Err = TimeError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Self::parse_rfc3339(s)
    }
}

impl serde::Serialize for Timestamp {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.to_rfc3339())
    }
}

impl<'de> serde::Deserialize<'de> for Timestamp {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let s = <std::borrow::Cow<'de, str>>::deserialize(d)?;
        Timestamp::parse_rfc3339(&s).map_err(serde::de::Error::custom)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_epochs() {
        // Unix times of these instants are checked with GNU date
        // (`date -u -d 2026-05-14T06:00:02Z +%s` gives 1778738402).
        assert_eq!(Timestamp::parse_rfc3339("1970-01-01T00:00:00Z").unwrap().unix_nanos(), 0);
        assert_eq!(Timestamp::parse_rfc3339("2026-05-14T06:00:02Z").unwrap().unix_nanos(), 1_778_738_402 * NANOS_PER_SEC);
        // 2000-02-29 is a leap day (divisible by 400): 951782400 (GNU date).
        assert_eq!(Timestamp::parse_rfc3339("2000-02-29T00:00:00Z").unwrap().unix_nanos(), 951_782_400 * NANOS_PER_SEC);
        assert_eq!(Timestamp::parse_rfc3339("1900-02-28T00:00:00Z"), Err(TimeError::OutOfSpan));
        // Past the i64 nanosecond range (2262-04-11T23:47:16.854775807Z): refused, not overflowed.
        assert_eq!(Timestamp::parse_rfc3339("2300-01-01T00:00:00Z"), Err(TimeError::OutOfSpan));
        assert_eq!(Timestamp::parse_rfc3339("2262-04-11T23:47:16.854775807Z"), Ok(Timestamp::from_unix_nanos(i64::MAX)));
        assert_eq!(Timestamp::parse_rfc3339("2262-04-11T23:47:16.854775807-00:01"), Err(TimeError::OutOfSpan));
        assert_eq!(Timestamp::parse_rfc3339("2100-02-29T00:00:00Z"), Err(TimeError::FieldRange));
    }

    #[test]
    fn fraction_and_offsets() {
        let t = Timestamp::parse_rfc3339("2026-05-14T06:00:02.125Z").unwrap();
        assert_eq!(t.unix_nanos() % NANOS_PER_SEC, 125_000_000);
        assert_eq!(t.to_rfc3339(), "2026-05-14T06:00:02.125Z");
        let u = Timestamp::parse_rfc3339("2026-05-14T08:00:02.125+02:00").unwrap();
        assert_eq!(t, u);
        let n = Timestamp::parse_rfc3339("2026-05-14T06:00:02.000000001Z").unwrap();
        assert_eq!(n.to_rfc3339(), "2026-05-14T06:00:02.000000001Z");
        assert_eq!(Timestamp::parse_rfc3339("2026-05-14T06:00:02.Z"), Err(TimeError::Syntax));
        assert_eq!(Timestamp::parse_rfc3339("2026-05-14T06:00:02"), Err(TimeError::Syntax));
        assert_eq!(Timestamp::parse_rfc3339("2026-13-14T06:00:02Z"), Err(TimeError::FieldRange));
        assert_eq!(Timestamp::parse_rfc3339("2026-05-14T24:00:02Z"), Err(TimeError::FieldRange));
        assert!(Timestamp::parse_rfc3339("２026-05-14T06:00:02Z").is_err());
    }

    #[test]
    fn fast_rfc3339_is_the_formatter_output() {
        // Against the standard formatter's rendering of the same fields
        // (`write_rfc3339_fmt`): every day from 1970 to 2100 at a few
        // times of day, and fractions of every length.
        let fmt = |t: Timestamp| {
            let mut s = String::new();
            t.write_rfc3339_fmt(&mut s);
            s
        };
        let mut x: u64 = 0x9e37_79b9_7f4a_7c15;
        for z in 0..(131 * 366) {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            let sod = (x % 86_400) as i64;
            let ns = [0, 1, 10, 120_000_000, 999_999_999, (x >> 20) as i64 % NANOS_PER_SEC, 500_000][z as usize % 7];
            let t = Timestamp((z * 86_400 + sod) * NANOS_PER_SEC + ns);
            assert_eq!(t.to_rfc3339(), fmt(t));
            let mut b = Vec::new();
            t.write_rfc3339_bytes(&mut b);
            assert_eq!(b, fmt(t).into_bytes());
        }
        for t in [Timestamp(0), Timestamp(-1), Timestamp(i64::MIN), Timestamp(i64::MAX), Timestamp(i64::MAX - 999_999_999)] {
            assert_eq!(t.to_rfc3339(), fmt(t));
        }
    }

    /// xorshift64: reproducible pseudo-random test inputs.
    fn xorshift(mut x: u64) -> impl FnMut() -> u64 {
        move || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        }
    }

    #[test]
    fn eight_digits_against_the_formatter() {
        // Against `format!("{:08}")`. The two four-digit halves are done
        // in separate lanes, so every value of each half (with the other
        // half random) covers every lane input; then random values and
        // the powers of ten either side.
        let mut next = xorshift(0x2545_f491_4f6c_dd1d);
        let mut cases: Vec<u32> = Vec::new();
        for k in 0..10_000u32 {
            let other = (next() % 10_000) as u32;
            cases.extend([k * 10_000 + other, other * 10_000 + k]);
        }
        cases.extend((0..20_000).map(|_| (next() % 100_000_000) as u32));
        for p in [1u32, 10, 100, 1000, 10_000, 100_000, 1_000_000, 10_000_000] {
            cases.extend([p - 1, p, p + 1]);
        }
        cases.push(99_999_999);
        for x in cases {
            let text = (digits8(x) | ASCII_ZEROS).to_le_bytes();
            assert_eq!(std::str::from_utf8(&text).unwrap(), format!("{x:08}"), "{x}");
        }
    }

    #[test]
    fn cached_rfc3339_is_the_uncached_text() {
        // One cache through a sequence of times, each compared with the
        // uncached writer (itself checked against the formatter above):
        // steps within a second, to the next second, across midnight and
        // the ends of months, years and leap days, far jumps back and
        // forth, and the fraction at 0, 1 ns and 999 999 999 ns.
        let at = |s: &str| Timestamp::parse_rfc3339(s).unwrap().unix_nanos();
        let mut times: Vec<i64> = Vec::new();
        for base in [
            "2026-05-14T06:00:02Z",
            "2026-05-14T23:59:59Z",
            "2026-12-31T23:59:59Z",
            "2024-02-28T23:59:59Z",
            "2024-02-29T23:59:59Z",
            "2100-02-28T23:59:59Z",
            "2000-02-29T23:59:59Z",
            "1999-12-31T23:59:59Z",
            "1970-01-01T00:00:00Z",
        ] {
            let b = at(base);
            for ns in [0, 1, 10, 999_999_999, 500_000_000, 123_456_789, 0] {
                times.push(b + ns);
            }
            // Into the next second, minute, day (and back again).
            for ns in [1_000_000_000, 1_000_000_001, 1_999_999_999, 2_000_000_000, 999_999_999, 0, -1, -1_000_000_000] {
                times.push(b + ns);
            }
        }
        // Forward in small steps over a midnight, then back over it.
        let m = at("2026-05-14T23:59:58Z");
        times.extend((0..400).map(|k| m + k * 13_000_001));
        times.extend((0..400).rev().map(|k| m + k * 13_000_001));
        // Random jumps, large and small, both ways, and the i64 ends.
        let mut next = xorshift(0x9e37_79b9_7f4a_7c15);
        let mut t = m;
        for _ in 0..20_000 {
            let r = next();
            let step = match r % 4 {
                0 => (r >> 8) as i64 % 1_000_000_000,
                1 => (r >> 8) as i64 % (3 * 86_400 * NANOS_PER_SEC),
                2 => -((r >> 8) as i64 % (2 * 86_400 * NANOS_PER_SEC)),
                _ => (r >> 8) as i64 % (200 * 365 * 86_400 * NANOS_PER_SEC) - 100 * 365 * 86_400 * NANOS_PER_SEC,
            };
            // Kept a few seconds inside the i64 range (its ends are below).
            t = t.saturating_add(step).clamp(i64::MIN + 2 * NANOS_PER_SEC, i64::MAX - 2 * NANOS_PER_SEC);
            times.push(t);
            // Often the same second again, with another fraction.
            times.push(t - t.rem_euclid(NANOS_PER_SEC) + (r >> 34) as i64 % NANOS_PER_SEC);
        }
        times.extend([i64::MIN, i64::MIN + 1, 0, -1, i64::MAX, i64::MAX - 999_999_999, 0]);
        let mut cache = Rfc3339Cache::new();
        let (mut got, mut want) = (Vec::new(), Vec::new());
        for &ns in &times {
            let t = Timestamp(ns);
            got.clear();
            want.clear();
            got.extend_from_slice(b"prefix");
            want.extend_from_slice(b"prefix");
            t.write_rfc3339_cached(&mut cache, &mut got);
            t.write_rfc3339_bytes(&mut want);
            assert_eq!(String::from_utf8_lossy(&got), String::from_utf8_lossy(&want), "{ns}");
        }
    }

    #[test]
    fn round_trip_brute_force_days() {
        // Every day from 1970 to 2100 survives civil -> days -> civil.
        for z in 0..(131 * 366) {
            let (y, m, d) = civil_from_days(z);
            assert_eq!(days_from_civil(y, m, d), z);
            let t = Timestamp::from_date(y, m, d).unwrap().plus_secs(3723.5);
            assert_eq!(Timestamp::parse_rfc3339(&t.to_rfc3339()).unwrap(), t);
        }
    }
}
