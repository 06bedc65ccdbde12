//! The framing of ASTERIX records: FSPEC, item kinds, and the User
//! Application Profiles of the three categories skerry reads.
//!
//! Every item of a UAP is listed, including those skerry never reads, so
//! that any record can be walked item by item: an item skerry does not use
//! is skipped by its length, which its kind determines. The tables follow
//! the EUROCONTROL ASTERIX specifications: Category 048 edition 1.31,
//! Category 034 edition 1.29, Category 010 edition 1.1 (checked against the
//! machine-readable transcription of those editions, item by item: kind,
//! octet count, sub-fields of compound items).

use super::AsterixRejectReason as Reason;

/// How an item's length is found.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub(crate) enum Item {
    /// A fixed number of octets.
    Fixed(u8),
    /// One or more octets, each ending in an FX bit (bit 1) that says
    /// whether another octet follows.
    Extended,
    /// A one-octet repetition count, then that many groups of this size.
    Repetitive(u8),
    /// A presence bitmap (7 flags per octet, FX-extended), then the
    /// sub-items it flags, in order.
    Compound(&'static [Item]),
    /// A one-octet length that counts itself, then the content (SP, RE).
    Explicit,
    /// A spare FRN or an undefined sub-field: its length is unknown, so a
    /// record that flags it cannot be walked.
    Undefined,
}

use Item::*;

/// I048/130 radar plot characteristics: SRL, SRR, SAM, PRL, PAM, RPD, APD.
const I048_130: &[Item] = &[Fixed(1), Fixed(1), Fixed(1), Fixed(1), Fixed(1), Fixed(1), Fixed(1)];
/// I048/120 radial Doppler speed: CAL (2 octets), RDS (repetitive, 6).
const I048_120: &[Item] = &[Fixed(2), Repetitive(6)];

/// Category 048 ed. 1.31, FRN 1..=28.
pub(crate) const UAP_048: &[Item] = &[
    Fixed(2),           // 1  I048/010 data source identifier
    Fixed(3),           // 2  I048/140 time of day
    Extended,           // 3  I048/020 target report descriptor
    Fixed(4),           // 4  I048/040 measured position, polar
    Fixed(2),           // 5  I048/070 mode-3/A code
    Fixed(2),           // 6  I048/090 flight level
    Compound(I048_130), // 7  I048/130 radar plot characteristics
    Fixed(3),           // 8  I048/220 aircraft address
    Fixed(6),           // 9  I048/240 aircraft identification
    Repetitive(8),      // 10 I048/250 BDS register data
    Fixed(2),           // 11 I048/161 track number
    Fixed(4),           // 12 I048/042 calculated position, Cartesian
    Fixed(4),           // 13 I048/200 calculated track velocity, polar
    Extended,           // 14 I048/170 track status
    Fixed(4),           // 15 I048/210 track quality
    Extended,           // 16 I048/030 warning/error conditions
    Fixed(2),           // 17 I048/080 mode-3/A code confidence
    Fixed(4),           // 18 I048/100 mode-C code and confidence
    Fixed(2),           // 19 I048/110 height measured by 3D radar
    Compound(I048_120), // 20 I048/120 radial Doppler speed
    Fixed(2),           // 21 I048/230 communications/ACAS capability
    Fixed(7),           // 22 I048/260 ACAS resolution advisory
    Fixed(1),           // 23 I048/055 mode-1 code
    Fixed(2),           // 24 I048/050 mode-2 code
    Fixed(1),           // 25 I048/065 mode-1 code confidence
    Fixed(2),           // 26 I048/060 mode-2 code confidence
    Explicit,           // 27 SP special purpose field
    Explicit,           // 28 RE reserved expansion field
];

/// I034/050 system configuration and status: COM, -, -, PSR, SSR, MDS.
const I034_050: &[Item] = &[Fixed(1), Undefined, Undefined, Fixed(1), Fixed(1), Fixed(2)];
/// I034/060 system processing mode: COM, -, -, PSR, SSR, MDS.
const I034_060: &[Item] = &[Fixed(1), Undefined, Undefined, Fixed(1), Fixed(1), Fixed(1)];

/// Category 034 ed. 1.29, FRN 1..=14.
pub(crate) const UAP_034: &[Item] = &[
    Fixed(2),           // 1  I034/010 data source identifier
    Fixed(1),           // 2  I034/000 message type
    Fixed(3),           // 3  I034/030 time of day
    Fixed(1),           // 4  I034/020 sector number
    Fixed(2),           // 5  I034/041 antenna rotation period
    Compound(I034_050), // 6  I034/050 system configuration and status
    Compound(I034_060), // 7  I034/060 system processing mode
    Repetitive(2),      // 8  I034/070 message count values
    Fixed(8),           // 9  I034/100 generic polar window
    Fixed(1),           // 10 I034/110 data filter
    Fixed(8),           // 11 I034/120 3D position of data source
    Fixed(2),           // 12 I034/090 collimation error
    Explicit,           // 13 RE reserved expansion field
    Explicit,           // 14 SP special purpose field
];

/// Category 010 ed. 1.1, FRN 1..=28.
pub(crate) const UAP_010: &[Item] = &[
    Fixed(2),      // 1  I010/010 data source identifier
    Fixed(1),      // 2  I010/000 message type
    Extended,      // 3  I010/020 target report descriptor
    Fixed(3),      // 4  I010/140 time of day
    Fixed(8),      // 5  I010/041 position in WGS-84
    Fixed(4),      // 6  I010/040 measured position, polar
    Fixed(4),      // 7  I010/042 position, Cartesian
    Fixed(4),      // 8  I010/200 calculated track velocity, polar
    Fixed(4),      // 9  I010/202 calculated track velocity, Cartesian
    Fixed(2),      // 10 I010/161 track number
    Extended,      // 11 I010/170 track status
    Fixed(2),      // 12 I010/060 mode-3/A code
    Fixed(3),      // 13 I010/220 target address
    Fixed(7),      // 14 I010/245 target identification
    Repetitive(8), // 15 I010/250 mode S MB data
    Fixed(1),      // 16 I010/300 vehicle fleet identification
    Fixed(2),      // 17 I010/090 flight level
    Fixed(2),      // 18 I010/091 measured height
    Extended,      // 19 I010/270 target size and orientation
    Fixed(1),      // 20 I010/550 system status
    Fixed(1),      // 21 I010/310 pre-programmed message
    Fixed(4),      // 22 I010/500 standard deviation of position
    Repetitive(2), // 23 I010/280 presence
    Fixed(1),      // 24 I010/131 amplitude of primary plot
    Fixed(2),      // 25 I010/210 calculated acceleration
    Undefined,     // 26 spare
    Explicit,      // 27 SP special purpose field
    Explicit,      // 28 RE reserved expansion field
];

/// Reads a presence bitmap (a record's FSPEC or a compound item's primary
/// sub-field): 7 flags per octet, most significant first, bit 1 = FX.
///
/// Returns the flags (bit `i` set = entry `i` of `table` present) and the
/// bitmap's length in octets. A flag for an entry beyond `table_len` is
/// [`Reason::UndefinedItem`]; a bitmap that runs off the end of `buf` is
/// `unterminated`.
#[inline]
pub(crate) fn read_bitmap(buf: &[u8], table_len: usize, unterminated: Reason) -> Result<(u64, usize), Reason> {
    // One octet, the usual case for compound items.
    if let Some(&o) = buf.first()
        && o & 1 == 0
    {
        let flags = ((o >> 1).reverse_bits() >> 1) as u64;
        return if flags >> table_len.min(63) != 0 { Err(Reason::UndefinedItem) } else { Ok((flags, 1)) };
    }
    let mut flags = 0u64;
    let mut i = 0usize;
    loop {
        let Some(&octet) = buf.get(i) else {
            return Err(unterminated);
        };
        let seven = (octet >> 1) as u64;
        if seven != 0 {
            // Every table here has at most 28 entries, so 7 * i < 64
            // whenever a flag can be defined at all.
            if 7 * i >= table_len {
                return Err(Reason::UndefinedItem);
            }
            // Flags in MSB-first order: octet bit 8 is entry 7i.
            let rev = (seven as u8).reverse_bits() >> 1;
            flags |= (rev as u64) << (7 * i);
        }
        i += 1;
        if octet & 1 == 0 {
            break;
        }
    }
    if table_len < 64 && flags >> table_len != 0 {
        return Err(Reason::UndefinedItem);
    }
    Ok((flags, i))
}

/// The length in octets of an item of kind `item` that starts at `buf[0]`.
/// The whole item must lie inside `buf`.
#[inline(always)]
pub(crate) fn item_len(item: Item, buf: &[u8]) -> Result<usize, Reason> {
    match item {
        // The common case, kept free of calls.
        Fixed(n) if (n as usize) <= buf.len() => Ok(n as usize),
        Compound(subs) => compound_len(subs, buf),
        other => simple_len(other, buf),
    }
}

/// Length of an item that is not compound (compound items of the three
/// categories hold only fixed and repetitive sub-fields).
#[inline]
fn simple_len(item: Item, buf: &[u8]) -> Result<usize, Reason> {
    let len = match item {
        Fixed(n) => n as usize,
        Extended => match buf.iter().position(|o| o & 1 == 0) {
            Some(i) => i + 1,
            None => return Err(Reason::TruncatedItem),
        },
        Repetitive(size) => {
            let Some(&rep) = buf.first() else {
                return Err(Reason::TruncatedItem);
            };
            1 + rep as usize * size as usize
        }
        Explicit => {
            let Some(&n) = buf.first() else {
                return Err(Reason::TruncatedItem);
            };
            if n == 0 {
                // The length counts its own octet, so 0 cannot be right.
                return Err(Reason::BadItemLength);
            }
            n as usize
        }
        Compound(_) | Undefined => return Err(Reason::UndefinedItem),
    };
    if len > buf.len() {
        return Err(Reason::TruncatedItem);
    }
    Ok(len)
}

#[inline]
fn compound_len(subs: &'static [Item], buf: &[u8]) -> Result<usize, Reason> {
    let (mut flags, mut n) = read_bitmap(buf, subs.len(), Reason::TruncatedItem)?;
    while flags != 0 {
        let i = flags.trailing_zeros() as usize;
        flags &= flags - 1;
        // n <= buf.len() holds: read_bitmap and simple_len stay inside buf.
        n += simple_len(subs[i], &buf[n..])?;
    }
    Ok(n)
}

/// The sub-fields of a well-formed compound item (already measured by
/// [`item_len`]): calls `f(index, bytes)` for each present sub-field.
#[inline]
pub(crate) fn compound_fields(subs: &'static [Item], item: &[u8], mut f: impl FnMut(usize, &[u8])) -> Result<(), Reason> {
    let (mut flags, mut n) = read_bitmap(item, subs.len(), Reason::TruncatedItem)?;
    while flags != 0 {
        let i = flags.trailing_zeros() as usize;
        flags &= flags - 1;
        let rest = item.get(n..).ok_or(Reason::TruncatedItem)?;
        let len = item_len(subs[i], rest)?;
        f(i, &rest[..len]);
        n += len;
    }
    Ok(())
}

pub(crate) const I048_130_SUBS: &[Item] = I048_130;
pub(crate) const I048_120_SUBS: &[Item] = I048_120;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn uap_sizes_match_the_editions() {
        // Category 048 ed. 1.31 and 010 ed. 1.1 define 28 FRNs, 034 ed. 1.29
        // defines 14 (the specifications' UAP tables).
        assert_eq!(UAP_048.len(), 28);
        assert_eq!(UAP_034.len(), 14);
        assert_eq!(UAP_010.len(), 28);
    }

    #[test]
    fn bitmap_flags_are_msb_first() {
        // 0b1010_0001, 0b0100_0000: entries 0 and 2, FX, then entry 8.
        let (flags, n) = read_bitmap(&[0xA1, 0x40], 28, Reason::FspecUnterminated).unwrap();
        assert_eq!(n, 2);
        assert_eq!(flags, (1 << 0) | (1 << 2) | (1 << 8));
        assert_eq!(read_bitmap(&[0x01, 0x01], 28, Reason::FspecUnterminated), Err(Reason::FspecUnterminated));
        // Entry 14 of a 14-entry table does not exist.
        assert_eq!(read_bitmap(&[0x01, 0x01, 0x80], 14, Reason::FspecUnterminated), Err(Reason::UndefinedItem));
    }

    #[test]
    fn item_lengths_by_kind() {
        assert_eq!(item_len(Extended, &[0x01, 0x01, 0x00, 0xFF]), Ok(3));
        assert_eq!(item_len(Extended, &[0x01, 0x01]), Err(Reason::TruncatedItem));
        assert_eq!(item_len(Repetitive(8), &[2; 17]), Ok(17));
        assert_eq!(item_len(Repetitive(8), &[2; 16]), Err(Reason::TruncatedItem));
        assert_eq!(item_len(Explicit, &[3, 0, 0]), Ok(3));
        assert_eq!(item_len(Explicit, &[0, 0, 0]), Err(Reason::BadItemLength));
        // I048/120 with CAL and RDS (2 repeats): 1 + 2 + 1 + 12.
        let mut b = vec![0b1100_0000, 0, 0, 2];
        b.extend_from_slice(&[0; 12]);
        assert_eq!(item_len(Compound(I048_120), &b), Ok(16));
        // I034/050 flags an undefined sub-field (the second).
        assert_eq!(item_len(Compound(I034_050), &[0b0100_0000, 0]), Err(Reason::UndefinedItem));
    }
}
