//! The IEC 61162-1 sentence layer: tag block, `!--VDM`/`!--VDO` fields,
//! checksum.

use super::AisRejectReason as R;
use crate::time::Timestamp;

/// Longest line accepted, tag block included (IEC 61162-1 limits a
/// sentence to 82 characters; tag blocks and loggers add some).
pub(crate) const MAX_LINE: usize = 512;

/// One parsed VDM/VDO sentence, borrowing its payload from the line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Sentence<'a> {
    /// The tag block's `c:` time, if any.
    pub tag_time: Option<Timestamp>,
    /// `VDO`: the receiver's own ship.
    pub own: bool,
    pub count: u8,
    pub number: u8,
    /// Sequential message id, 0..=9, for multi-sentence messages.
    pub seq: Option<u8>,
    /// Radio channel character (`A`, `B`, `1`, `2` …), 0 when empty.
    pub channel: u8,
    pub payload: &'a [u8],
    pub fill: u8,
}

fn xor(bytes: &[u8]) -> u8 {
    bytes.iter().fold(0, |a, b| a ^ b)
}

fn hex(b: u8) -> Option<u8> {
    match b {
        b'0'..=b'9' => Some(b - b'0'),
        b'A'..=b'F' => Some(b - b'A' + 10),
        b'a'..=b'f' => Some(b - b'a' + 10),
        _ => None,
    }
}

fn digit(field: &[u8]) -> Option<u8> {
    match field {
        [d @ b'0'..=b'9'] => Some(d - b'0'),
        _ => None,
    }
}

/// Whether a payload character is in the six-bit armouring set
/// ('0'..='W' and '`'..='w').
#[inline]
pub(crate) fn valid_armour(c: u8) -> bool {
    matches!(c, 48..=87 | 96..=119)
}

/// Parses a tag block's content (between the backslashes).
fn tag_block(tag: &[u8]) -> Result<Option<Timestamp>, R> {
    let star = tag.iter().rposition(|&b| b == b'*').ok_or(R::BadTagBlock)?;
    let (body, cs) = (&tag[..star], &tag[star + 1..]);
    // Two hex digits per IEC 61162-1; one is accepted because some
    // writers drop a leading zero (common practice).
    let expected = match cs {
        [a] => hex(*a),
        [a, b] => hex(*a).zip(hex(*b)).map(|(a, b)| a << 4 | b),
        _ => None,
    }
    .ok_or(R::BadTagBlock)?;
    if xor(body) != expected {
        return Err(R::BadTagBlock);
    }
    let mut time = None;
    for field in body.split(|&b| b == b',') {
        if let [b'c', b':', v @ ..] = field {
            if v.is_empty() || v.len() > 13 || !v.iter().all(u8::is_ascii_digit) {
                return Err(R::BadTagBlock);
            }
            let n = v.iter().fold(0i64, |a, &d| a * 10 + (d - b'0') as i64);
            // IEC 61162-1 gives c: in seconds; some receivers write
            // milliseconds (13 digits; common practice).
            let ns = if n >= 100_000_000_000 { n.checked_mul(1_000_000) } else { n.checked_mul(1_000_000_000) };
            // Beyond the nanosecond clock's range (after 2262): not a time.
            time = Some(Timestamp::from_unix_nanos(ns.ok_or(R::BadTagBlock)?));
        }
    }
    Ok(time)
}

/// Parses one line: optional `\tag block\`, then the sentence.
pub(crate) fn parse(line: &[u8]) -> Result<Sentence<'_>, R> {
    if line.len() > MAX_LINE {
        return Err(R::TooLong);
    }
    let line = line.trim_ascii();
    let (tag_time, rest) = match line.split_first() {
        Some((b'\\', after)) => {
            let end = after.iter().position(|&b| b == b'\\').ok_or(R::BadTagBlock)?;
            (tag_block(&after[..end])?, &after[end + 1..])
        }
        _ => (None, line),
    };
    let body_and_cs = match rest.split_first() {
        Some((b'!' | b'$', r)) => r,
        _ => return Err(R::NotSentence),
    };
    let star = body_and_cs.iter().rposition(|&b| b == b'*').ok_or(R::MissingChecksum)?;
    let (body, cs) = (&body_and_cs[..star], &body_and_cs[star + 1..]);
    let expected = match cs {
        [a, b] => hex(*a).zip(hex(*b)).map(|(a, b)| a << 4 | b),
        _ => None,
    }
    .ok_or(R::MissingChecksum)?;
    if xor(body) != expected {
        return Err(R::BadChecksum);
    }
    let mut fields = body.split(|&b| b == b',');
    let address = fields.next().unwrap_or_default();
    let own = match address {
        [_, _, b'V', b'D', b'M'] => false,
        [_, _, b'V', b'D', b'O'] => true,
        _ => return Err(R::NotAis),
    };
    let (Some(count), Some(number), Some(seq), Some(channel), Some(payload), Some(fill), None) =
        (fields.next(), fields.next(), fields.next(), fields.next(), fields.next(), fields.next(), fields.next())
    else {
        return Err(R::BadField);
    };
    let count = digit(count).filter(|c| *c >= 1).ok_or(R::BadField)?;
    let number = digit(number).filter(|n| (1..=count).contains(n)).ok_or(R::BadField)?;
    let seq = match seq {
        [] => None,
        s => Some(digit(s).ok_or(R::BadField)?),
    };
    let channel = match channel {
        [] => 0,
        [c] if c.is_ascii_alphanumeric() => *c,
        _ => return Err(R::BadField),
    };
    // An empty fill field counts as 0 (some receivers leave it out on
    // fragments that are not the last; common practice).
    let fill = match fill {
        [] => 0,
        f => digit(f).filter(|f| *f <= 5).ok_or(R::BadField)?,
    };
    if fill != 0 && number != count {
        // Fill bits only make sense at the end of the whole message.
        return Err(R::BadField);
    }
    if payload.is_empty() || !payload.iter().all(|&c| valid_armour(c)) {
        return Err(R::BadPayload);
    }
    if fill != 0 && payload.len() * 6 < fill as usize {
        return Err(R::BadField);
    }
    Ok(Sentence { tag_time, own, count, number, seq, channel, payload, fill })
}

#[cfg(test)]
mod tests {
    use super::*;

    // The sentence and tag block below were made by pyais 3.3.1
    // (encode_dict of an invented type 1 report, MMSI 235000101;
    // TagBlock.create_str), so the checksums are pyais's.
    const LINE: &[u8] = b"!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0*72";

    #[test]
    fn checksum_is_the_xor_between_bang_and_star() {
        let s = parse(LINE).unwrap();
        assert_eq!((s.count, s.number, s.seq, s.channel, s.fill, s.own), (1, 1, None, b'B', 0, false));
        assert_eq!(s.payload, b"13P7A9OP0l0QaDPPC@d3Jjh1P000");
        assert_eq!(parse(b"!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0*73"), Err(R::BadChecksum));
        assert_eq!(parse(b"!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0"), Err(R::MissingChecksum));
    }

    #[test]
    fn tag_block_time() {
        let s = parse(b"\\s:skerry1,c:1778738400*8\\!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0*72").unwrap();
        assert_eq!(s.tag_time, Some(Timestamp::from_unix_nanos(1_778_738_400_000_000_000)));
        assert_eq!(parse(b"\\s:skerry1,c:1778738400*9\\!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0*72"), Err(R::BadTagBlock));
    }

    #[test]
    fn tag_block_times_past_the_clock_range_are_refused() {
        // Found by the nmea fuzz target: a c: of 12 or 13 digits overflowed
        // i64 nanoseconds. The largest i64 is 9 223 372 036 854 775 807 ns,
        // 2262-04-11; seconds or milliseconds past it are no time.
        let line = |c: &str| {
            let body = format!("c:{c}");
            let cs = body.bytes().fold(0u8, |a, b| a ^ b);
            format!("\\{body}*{cs:02X}\\!AIVDM,1,1,,B,13P7A9OP0l0QaDPPC@d3Jjh1P000,0*72")
        };
        assert_eq!(parse(line("9999999999999").as_bytes()), Err(R::BadTagBlock));
        assert_eq!(parse(line("99999999999").as_bytes()), Err(R::BadTagBlock));
        assert_eq!(parse(line("9223372036854").as_bytes()).unwrap().tag_time, Some(Timestamp::from_unix_nanos(9_223_372_036_854_000_000)));
        assert_eq!(parse(line("9223372036").as_bytes()).unwrap().tag_time, Some(Timestamp::from_unix_nanos(9_223_372_036_000_000_000)));
        assert_eq!(parse(line("9223372037").as_bytes()), Err(R::BadTagBlock));
    }
}
