//! Reassembly of multi-sentence AIS messages.
//!
//! Fragments of one message share a sequential message id and a radio
//! channel (IEC 61162-1); VDM and VDO are kept apart. Fragments may arrive
//! in any order; the message is complete when every number 1..=count has
//! arrived. A set that is not complete within the timeout (measured in
//! the sentences' own times: nothing here reads a clock) is dropped and
//! counted. Storage is a fixed table allocated once: at most one set per
//! key, and there are only 2 × 11 × (channels seen) keys in use at once.

use super::AisRejectReason as R;
use super::bits::{Bits, MAX_CHARS};
use super::sentence::Sentence;
use crate::time::Timestamp;

/// Slots in the table. Keys are (VDM/VDO, 11 sequence ids incl. none,
/// channel): 2 × 11 × 2 = 44 for channels A and B.
const SLOTS: usize = 48;
const MAX_FRAGMENTS: usize = 9;

#[derive(Copy, Clone, PartialEq, Eq, Debug)]
struct Key {
    own: bool,
    seq: Option<u8>,
    channel: u8,
}

struct Slot {
    used: bool,
    key: Key,
    count: u8,
    /// Bit `n - 1` set: fragment `n` has arrived.
    have: u16,
    started: Timestamp,
    fill: u8,
    lens: [u8; MAX_FRAGMENTS],
    chars: [[u8; MAX_CHARS]; MAX_FRAGMENTS],
}

/// Fragment sets lost since the last call, for the counters.
#[derive(Default, Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Lost {
    pub timed_out: u64,
    /// Replaced by a new set with the same key before completing.
    pub abandoned: u64,
}

pub(crate) struct Reassembly {
    slots: Vec<Slot>,
    in_use: usize,
    timeout_ns: i64,
}

impl Reassembly {
    pub fn new(timeout_s: f64) -> Self {
        let slots = (0..SLOTS)
            .map(|_| Slot {
                used: false,
                key: Key { own: false, seq: None, channel: 0 },
                count: 0,
                have: 0,
                started: Timestamp::default(),
                fill: 0,
                lens: [0; MAX_FRAGMENTS],
                chars: [[0; MAX_CHARS]; MAX_FRAGMENTS],
            })
            .collect();
        Reassembly { slots, in_use: 0, timeout_ns: (timeout_s * 1e9).round() as i64 }
    }

    pub fn pending(&self) -> usize {
        self.in_use
    }

    /// Drops sets older than the timeout at `now`.
    pub fn expire(&mut self, now: Timestamp, lost: &mut Lost) {
        if self.in_use == 0 {
            return;
        }
        for s in self.slots.iter_mut().filter(|s| s.used) {
            if now.unix_nanos() - s.started.unix_nanos() > self.timeout_ns {
                s.used = false;
                self.in_use -= 1;
                lost.timed_out += 1;
            }
        }
    }

    /// Adds one fragment (count > 1). Returns the whole message's bits
    /// once complete.
    pub fn add(&mut self, s: &Sentence<'_>, time: Timestamp, lost: &mut Lost) -> Result<Option<Bits>, R> {
        if s.payload.len() > MAX_CHARS {
            return Err(R::TooLong);
        }
        self.expire(time, lost);
        let key = Key { own: s.own, seq: s.seq, channel: s.channel };
        let bit = 1u16 << (s.number - 1);
        let idx = match self.slots.iter().position(|x| x.used && x.key == key) {
            Some(i) => {
                let x = &self.slots[i];
                if x.count != s.count || x.have & bit != 0 {
                    // A new message reuses the id before the old one ended.
                    lost.abandoned += 1;
                    self.reset(i, key, s.count, time);
                }
                i
            }
            None => {
                let i = match self.slots.iter().position(|x| !x.used) {
                    Some(i) => i,
                    None => {
                        // Full (more keys than expected): drop the oldest.
                        let i = (0..self.slots.len()).min_by_key(|&i| self.slots[i].started).unwrap_or(0);
                        lost.abandoned += 1;
                        self.slots[i].used = false;
                        self.in_use -= 1;
                        i
                    }
                };
                self.in_use += 1;
                self.reset(i, key, s.count, time);
                i
            }
        };
        let slot = &mut self.slots[idx];
        let n = s.number as usize - 1;
        slot.chars[n][..s.payload.len()].copy_from_slice(s.payload);
        slot.lens[n] = s.payload.len() as u8;
        slot.have |= bit;
        if s.number == s.count {
            slot.fill = s.fill;
        }
        let all = (1u16 << slot.count) - 1;
        if slot.have != all {
            return Ok(None);
        }
        slot.used = false;
        self.in_use -= 1;
        let mut bits = Bits::new();
        for k in 0..slot.count as usize {
            bits.push_armoured(&slot.chars[k][..slot.lens[k] as usize])?;
        }
        bits.drop_fill(slot.fill);
        Ok(Some(bits))
    }

    fn reset(&mut self, i: usize, key: Key, count: u8, time: Timestamp) {
        let x = &mut self.slots[i];
        x.used = true;
        x.key = key;
        x.count = count;
        x.have = 0;
        x.started = time;
        x.fill = 0;
    }
}
