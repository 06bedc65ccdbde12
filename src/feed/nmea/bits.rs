//! Six-bit payload armouring (ITU-R M.1371 over IEC 61162-1) and bit
//! access, on a fixed stack buffer.

use super::AisRejectReason as R;

/// The longest AIS message: 5 slots, 1008 bits (ITU-R M.1371-5).
pub(crate) const MAX_BITS: usize = 1008;
/// Payload characters needed for [`MAX_BITS`].
pub(crate) const MAX_CHARS: usize = MAX_BITS / 6;

/// A message's bits, MSB first.
pub(crate) struct Bits {
    buf: [u8; 128],
    len: usize,
}

impl Bits {
    pub fn new() -> Self {
        Bits { buf: [0; 128], len: 0 }
    }

    /// Appends armoured characters (already checked by the sentence
    /// parser, but checked again: this is the last line of defence).
    pub fn push_armoured(&mut self, chars: &[u8]) -> Result<(), R> {
        if self.len + chars.len() * 6 > MAX_BITS + 6 {
            return Err(R::TooLong);
        }
        for &c in chars {
            let v = match c {
                48..=87 => c - 48,
                96..=119 => c - 56,
                _ => return Err(R::BadPayload),
            };
            // Six bits at bit position `len`.
            let byte = self.len / 8;
            let off = self.len % 8;
            let w = (v as u16) << (10 - off);
            self.buf[byte] |= (w >> 8) as u8;
            if byte + 1 < self.buf.len() {
                self.buf[byte + 1] |= w as u8;
            }
            self.len += 6;
        }
        Ok(())
    }

    /// Drops the trailing fill bits of the last sentence.
    pub fn drop_fill(&mut self, fill: u8) {
        self.len = self.len.saturating_sub(fill as usize);
    }

    pub fn len(&self) -> usize {
        self.len
    }

    /// `n` ≤ 32 bits from bit `start`, unsigned. Bits past the message
    /// read as 0 (callers check the length first).
    #[inline]
    pub fn u(&self, start: usize, n: usize) -> u32 {
        debug_assert!(n <= 32 && n > 0);
        let first = start / 8;
        let last = (start + n - 1) / 8;
        let mut v: u64 = 0;
        for i in first..=last {
            v = v << 8 | *self.buf.get(i).unwrap_or(&0) as u64;
        }
        let width = (last - first + 1) * 8;
        let shift = width - start % 8 - n;
        ((v >> shift) & ((1u64 << n) - 1)) as u32
    }

    /// `n` ≤ 32 bits from bit `start`, two's complement.
    #[inline]
    pub fn i(&self, start: usize, n: usize) -> i32 {
        let v = self.u(start, n) as i64;
        (if v >> (n - 1) & 1 == 1 { v - (1i64 << n) } else { v }) as i32
    }

    pub fn flag(&self, bit: usize) -> bool {
        self.u(bit, 1) == 1
    }

    /// `N` six-bit ASCII characters from bit `start`; '@' ends the text,
    /// surrounding spaces are trimmed.
    pub fn text<const N: usize>(&self, start: usize) -> AisText<N> {
        let mut t = AisText { bytes: [0; N], len: 0 };
        for k in 0..N {
            let v = self.u(start + 6 * k, 6) as u8;
            let c = if v < 32 { v + 64 } else { v };
            if c == b'@' {
                break;
            }
            t.bytes[t.len as usize] = c;
            t.len += 1;
        }
        // Trim in place: leading spaces shift down, trailing ones drop.
        let lead = t.bytes[..t.len as usize].iter().take_while(|&&c| c == b' ').count();
        if lead > 0 {
            t.bytes.copy_within(lead..t.len as usize, 0);
            t.len -= lead as u8;
        }
        while t.len > 0 && t.bytes[t.len as usize - 1] == b' ' {
            t.len -= 1;
        }
        t
    }
}

/// Text of at most `N` six-bit ASCII characters, held inline.
#[derive(Copy, Clone, PartialEq, Eq, Hash)]
pub struct AisText<const N: usize> {
    bytes: [u8; N],
    len: u8,
}

impl<const N: usize> AisText<N> {
    pub fn as_str(&self) -> &str {
        // Six-bit ASCII maps only to 0x20..=0x5F, all single-byte UTF-8.
        std::str::from_utf8(&self.bytes[..self.len as usize]).unwrap_or("")
    }
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }
}

impl<const N: usize> std::fmt::Debug for AisText<N> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{:?}", self.as_str())
    }
}

impl<const N: usize> std::fmt::Display for AisText<N> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn armouring_by_definition() {
        // '0' = 0, 'W' = 39, '`' = 40, 'w' = 63 (ITU-R M.1371 / IEC 61162-1
        // six-bit armouring: ASCII − 48, minus 8 more above 40).
        let mut b = Bits::new();
        b.push_armoured(b"0W`w").unwrap();
        assert_eq!(b.len(), 24);
        assert_eq!(b.u(0, 6), 0);
        assert_eq!(b.u(6, 6), 39);
        assert_eq!(b.u(12, 6), 40);
        assert_eq!(b.u(18, 6), 63);
        // Bits 3..15: the low 3 bits of char 0, all of char 1, the top 3 of char 2.
        assert_eq!(b.u(3, 12), (39 << 3 | 0b101) as u32);
        assert_eq!(b.i(18, 6), -1);
        assert!(Bits::new().push_armoured(b"X").is_err());
    }
}
