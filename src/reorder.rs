//! The out-of-sequence buffer between the daemon's ingest and its tracking
//! engine. Pure: it reads no clock; the arrival time of each record and
//! the present time are passed in.
//!
//! # Contract
//!
//! - [`Reorder::push`] takes a decoded record and the daemon-clock instant
//!   it arrived. It is held, or refused as [`Admit::Late`] (its time lies
//!   before what was already released) or [`Admit::Full`] (the buffer holds
//!   its maximum).
//! - [`Reorder::pop_due`] appends, in time order, every held record whose
//!   time is at or before the *release time* `R`, and returns `R` once it
//!   has moved. `R` never goes back, and no record earlier than `R` is ever
//!   released after it: it is what the engine's `advance` needs. Records
//!   of equal time leave in the order they arrived.
//! - [`Reorder::drain`] releases everything (shutdown, end of a feed).
//! - [`Reorder::due_at`] says when, with no more arrivals, `pop_due` would
//!   move the release time to a given feed time, so that a driver can
//!   sleep until then instead of polling the clock.
//!
//! # How the release time is chosen
//!
//! Everything works in *feed time* (the records' own times), so a replay
//! of an old feed behaves like a live one, at any speed. Each sensor has a
//! feed clock `hi`: the newest time it has sent (robust to a single wild
//! time: a jump of more than `max_skew_s` is taken only when the sensor's
//! next record confirms it). Then, at each `pop_due(now)`:
//!
//! 1. A sensor that sent nothing for `idle_s` (daemon clock) is *silent*
//!    and plays no part.
//! 2. The other sensors' clocks are grouped: the largest set of sensors
//!    whose `hi` lie within `max_skew_s` of each other *agrees* (on a tie,
//!    the set whose arrival offsets are nearest the daemon's clock). A
//!    sensor above that set is *ahead*: its records are held until the
//!    agreeing sensors reach them, and its clock does not move the release
//!    time. A sensor below it is *behind*: it does not hold the release time
//!    back, and its records, older than what was released, are late.
//! 3. The feed time `F` is the newest `hi` among the agreeing sensors.
//! 4. An agreeing sensor that sent something within the last `window_s` of
//!    daemon time may still have records up to `window_s` older than its
//!    newest on the way: it bounds `R` by `hi - window_s + q`, where `q` is
//!    how long it has now been quiet (or by `hi` when its latest record was
//!    a `scan_end`, its stream has so far come in order, and
//!    `scan_end_closes` is set: the scan is complete). A record delayed by
//!    `d` arrives at least `q` after the sensor's newest, which is at most
//!    `d` newer than it, so it is still ahead of that bound while
//!    `d < window_s`; and while a sensor pauses, what it sent leaves at the
//!    pace it came instead of in one burst. A sensor quiet for a whole
//!    window bounds nothing: whatever it sent is due. So `R` = the least
//!    bound, or `F` when the whole feed has been quiet for a window. With every sensor silent, all that the sensors
//!    last seen agreeing sent is due (a sensor ahead keeps its records held,
//!    so an outage does not carry the release time to its clock).
//!
//! A record is thus late only when it arrived more than `window_s` after
//! records of its time from the slowest agreeing sensor, or after the
//! whole feed went quiet for `window_s`. A feed shuffled within the window
//! (no record sent after another more than `window_s` newer) loses
//! nothing, at any replay speed; a feed sent in order loses nothing at any
//! speed.
//!
//! Each sensor's clock offset (daemon clock at arrival minus record time,
//! smoothed) is kept for health reports: a sensor far from the daemon's
//! clock is visible even when the feed is a replay of old records.

use crate::feed::{Record, SensorId};
use crate::time::Timestamp;
use std::cmp::Ordering;
use std::collections::BinaryHeap;

/// Settings of the buffer; see the module docs for their roles.
#[derive(Clone, Debug, PartialEq)]
pub struct ReorderConfig {
    /// How far out of order records may arrive (feed seconds), and how long
    /// a quiet feed is waited for (daemon seconds).
    pub window_s: f64,
    /// A sensor that sends nothing for this long (daemon seconds) is silent.
    pub idle_s: f64,
    /// Sensor clocks further apart than this (s) disagree.
    pub max_skew_s: f64,
    /// Most records held at once.
    pub max_held: usize,
    /// Release a sensor's records up to its `scan_end` at once, without
    /// waiting for the window, while that sensor's stream comes in order.
    pub scan_end_closes: bool,
}

impl Default for ReorderConfig {
    fn default() -> Self {
        ReorderConfig { window_s: 1.0, idle_s: 10.0, max_skew_s: 30.0, max_held: 500_000, scan_end_closes: false }
    }
}

/// What became of a pushed record.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum Admit {
    Held,
    /// Earlier than the release time: dropped.
    Late,
    /// The buffer holds `max_held` records: dropped.
    Full,
}

/// How a sensor's clock stands against the others.
#[derive(Copy, Clone, Debug, PartialEq, Eq, Hash)]
pub enum ClockState {
    /// No record yet.
    Never,
    /// Nothing for `idle_s`.
    Silent,
    Agrees,
    Ahead,
    Behind,
}

impl ClockState {
    pub fn as_str(self) -> &'static str {
        match self {
            ClockState::Never => "never",
            ClockState::Silent => "silent",
            ClockState::Agrees => "agrees",
            ClockState::Ahead => "ahead",
            ClockState::Behind => "behind",
        }
    }
}

/// A sensor's clock as the buffer sees it.
#[derive(Clone, Debug, PartialEq)]
pub struct SensorClock {
    pub sensor: SensorId,
    /// Newest record time (after the jump check).
    pub feed_time: Option<Timestamp>,
    /// Daemon clock when its last record arrived.
    pub last_arrival: Option<Timestamp>,
    /// Daemon clock minus record time, smoothed (s).
    pub offset_s: Option<f64>,
    pub state: ClockState,
}

#[derive(Clone, Debug, Default)]
struct Sensor {
    hi: Option<Timestamp>,
    /// A time more than `max_skew_s` from `hi`, waiting for confirmation.
    jump: Option<Timestamp>,
    last_arrival: Option<Timestamp>,
    offset_s: Option<f64>,
    /// The last record was a scan_end at `hi`.
    closed: bool,
    /// A record of this sensor came older than its own `hi`.
    disordered: bool,
    state: Option<ClockState>,
    /// Agreed with the others when last not silent.
    agreed: bool,
}

#[derive(Clone)]
struct Held {
    time: Timestamp,
    seq: u64,
    rec: Record,
}

impl PartialEq for Held {
    fn eq(&self, o: &Self) -> bool {
        self.cmp(o) == Ordering::Equal
    }
}
impl Eq for Held {}
impl PartialOrd for Held {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}
impl Ord for Held {
    // Reversed: BinaryHeap is a max-heap and the earliest must come first.
    // Equal times follow the offline order (crate::offline::feed_order), so
    // live and offline runs process a scan's records identically.
    fn cmp(&self, o: &Self) -> Ordering {
        crate::offline::feed_order(&o.rec, &self.rec).then(o.seq.cmp(&self.seq))
    }
}

/// Smoothing weight of a new clock-offset sample.
const OFFSET_GAIN: f64 = 0.1;

#[derive(Clone)]
pub struct Reorder {
    cfg: ReorderConfig,
    heap: BinaryHeap<Held>,
    seq: u64,
    sensors: Vec<Sensor>,
    /// The release time: nothing earlier will be released.
    released: Option<Timestamp>,
    /// Scratch for the grouping, kept to avoid allocating per call.
    scratch: Vec<(Timestamp, f64, usize)>,
}

impl Reorder {
    pub fn new(cfg: ReorderConfig) -> Self {
        Reorder { cfg, heap: BinaryHeap::new(), seq: 0, sensors: Vec::new(), released: None, scratch: Vec::new() }
    }

    pub fn config(&self) -> &ReorderConfig {
        &self.cfg
    }

    /// Records held now.
    pub fn len(&self) -> usize {
        self.heap.len()
    }

    pub fn is_empty(&self) -> bool {
        self.heap.is_empty()
    }

    /// The release time reached so far.
    pub fn released(&self) -> Option<Timestamp> {
        self.released
    }

    /// Takes a record that arrived at `arrival` (daemon clock).
    pub fn push(&mut self, rec: Record, arrival: Timestamp) -> Admit {
        let t = rec.time();
        let id = rec.sensor() as usize;
        if self.sensors.len() <= id {
            self.sensors.resize_with(id + 1, Sensor::default);
        }
        let max_skew = self.cfg.max_skew_s;
        let s = &mut self.sensors[id];
        // The sensor is heard from even when its record is refused: a
        // sensor whose clock is behind must still count as not silent.
        s.last_arrival = Some(arrival);
        let sample = arrival.secs_since(t);
        s.offset_s = Some(match s.offset_s {
            Some(o) => o + OFFSET_GAIN * (sample - o),
            None => sample,
        });
        match s.hi {
            None => s.hi = Some(t),
            Some(hi) if t.secs_since(hi).abs() <= max_skew => {
                if t < hi {
                    s.disordered = true;
                }
                if t >= hi {
                    s.closed = false;
                }
                if t > hi {
                    s.hi = Some(t);
                }
                s.jump = None;
            }
            Some(_) => {
                // A wild time: taken as the sensor's new clock only when the
                // next record agrees with it (a restart, a clock step).
                match s.jump {
                    Some(j) if t.secs_since(j).abs() <= max_skew => {
                        s.hi = Some(if t > j { t } else { j });
                        s.jump = None;
                        s.closed = false;
                    }
                    _ => s.jump = Some(t),
                }
            }
        }
        if let Record::ScanEnd(_) = rec
            && s.hi == Some(t) {
                s.closed = true;
            }
        if self.released.is_some_and(|r| t < r) {
            return Admit::Late;
        }
        if self.heap.len() >= self.cfg.max_held {
            return Admit::Full;
        }
        self.seq += 1;
        self.heap.push(Held { time: t, seq: self.seq, rec });
        Admit::Held
    }

    /// Releases what is due at `now` (daemon clock), in time order, into
    /// `out`; returns the release time when it moved.
    pub fn pop_due(&mut self, now: Timestamp, out: &mut Vec<Record>) -> Option<Timestamp> {
        let due = self.due_time(now);
        let mut moved = None;
        if let Some(d) = due
            && self.released.is_none_or(|r| d > r) {
                self.released = Some(d);
                moved = Some(d);
            }
        if let Some(r) = self.released {
            while self.heap.peek().is_some_and(|h| h.time <= r) {
                if let Some(h) = self.heap.pop() {
                    out.push(h.rec);
                }
            }
        }
        moved
    }

    /// Releases everything held, in time order; returns the release time
    /// when it moved.
    pub fn drain(&mut self, out: &mut Vec<Record>) -> Option<Timestamp> {
        let mut last = None;
        while let Some(h) = self.heap.pop() {
            last = Some(h.time);
            out.push(h.rec);
        }
        match last {
            Some(t) if self.released.is_none_or(|r| t > r) => {
                self.released = Some(t);
                Some(t)
            }
            _ => None,
        }
    }

    /// The feed time of the earliest record held, if any.
    pub fn earliest(&self) -> Option<Timestamp> {
        self.heap.peek().map(|h| h.time)
    }

    /// The earliest daemon-clock instant at which `pop_due` would move the
    /// release time to `target` or beyond, if nothing more arrived and the
    /// sensors kept the clock states of the last `pop_due`; `None` when
    /// only new arrivals (or a change of clock states, such as a sensor
    /// falling silent) can get there. It lets the reorder task sleep until
    /// a record is due instead of polling the clock.
    ///
    /// From step 4 of the module docs: an agreeing sensor `i` that last
    /// sent at `a_i`, newest time `hi_i`, bounds the release time by
    /// `hi_i - window + (now - a_i)` until it has been quiet for a window,
    /// then not at all; a closed scan bounds it by `hi_i`. So `i` allows
    /// `target` from `a_i + window - max(0, hi_i - target)` on (a closed
    /// scan with `hi_i >= target`: at once), and the release time reaches
    /// `target` once every agreeing sensor allows it, provided the feed
    /// time does. The instant is rounded up to the next microsecond, so
    /// that the rounding of `pop_due`'s own arithmetic never leaves it
    /// short.
    pub fn due_at(&self, target: Timestamp) -> Option<Timestamp> {
        if self.released.is_some_and(|r| r >= target) {
            return Some(Timestamp::from_unix_nanos(i64::MIN));
        }
        let window_ns = (self.cfg.window_s * 1e9).round() as i64;
        let mut feed: Option<Timestamp> = None;
        let mut at = i64::MIN;
        for s in &self.sensors {
            let (Some(hi), Some(arr), Some(ClockState::Agrees)) = (s.hi, s.last_arrival, s.state) else { continue };
            feed = feed.max(Some(hi));
            let closed = self.cfg.scan_end_closes && s.closed && !s.disordered;
            let allows = if closed && hi >= target {
                i64::MIN
            } else if closed {
                arr.unix_nanos() + window_ns
            } else {
                arr.unix_nanos() + window_ns - (hi.unix_nanos() - target.unix_nanos()).max(0)
            };
            at = at.max(allows);
        }
        match feed {
            Some(f) if f >= target => {
                const US: i64 = 1_000;
                Some(Timestamp::from_unix_nanos(if at == i64::MIN { at } else { (at.div_euclid(US) + 1) * US }))
            }
            _ => None,
        }
    }

    /// Every sensor heard from, with its clock state as of the last
    /// `pop_due`.
    pub fn clocks(&self) -> impl Iterator<Item = SensorClock> + '_ {
        self.sensors.iter().enumerate().map(|(i, s)| SensorClock {
            sensor: i as SensorId,
            feed_time: s.hi,
            last_arrival: s.last_arrival,
            offset_s: s.offset_s,
            state: if s.hi.is_none() { ClockState::Never } else { s.state.unwrap_or(ClockState::Agrees) },
        })
    }

    /// The release time that `now` allows (before the monotone clamp).
    fn due_time(&mut self, now: Timestamp) -> Option<Timestamp> {
        let cfg = &self.cfg;
        // 1. The sensors not silent.
        self.scratch.clear();
        for (i, s) in self.sensors.iter_mut().enumerate() {
            let (Some(hi), Some(arr)) = (s.hi, s.last_arrival) else {
                s.state = None;
                continue;
            };
            if now.secs_since(arr) > cfg.idle_s {
                s.state = Some(ClockState::Silent);
                continue;
            }
            self.scratch.push((hi, s.offset_s.unwrap_or(0.0).abs(), i));
        }
        if self.scratch.is_empty() {
            // Every sensor silent: all that the agreeing sensors sent is
            // due. A sensor that was ahead keeps its records held, so that
            // an outage does not carry the release time to its clock.
            let agreed = self.sensors.iter().filter(|s| s.agreed).filter_map(|s| s.hi).max();
            return agreed.or_else(|| self.heap.iter().map(|h| h.time).max());
        }
        // 2. The largest group within max_skew_s (ties: nearest the
        // daemon's clock). Sorted by clock, a group is a run [a, b].
        self.scratch.sort_by_key(|x| x.0);
        let n = self.scratch.len();
        let (mut best_a, mut best_b, mut best_off) = (0usize, 0usize, f64::INFINITY);
        let mut b = 0;
        for a in 0..n {
            if b < a {
                b = a;
            }
            while b + 1 < n && self.scratch[b + 1].0.secs_since(self.scratch[a].0) <= cfg.max_skew_s {
                b += 1;
            }
            let size = b - a + 1;
            let off = self.scratch[a..=b].iter().map(|x| x.1).sum::<f64>() / size as f64;
            let best_size = best_b - best_a + 1;
            if best_off.is_infinite() || size > best_size || (size == best_size && off < best_off) {
                (best_a, best_b, best_off) = (a, b, off);
            }
        }
        for (k, &(_, _, i)) in self.scratch.iter().enumerate() {
            let state = if k < best_a {
                ClockState::Behind
            } else if k > best_b {
                ClockState::Ahead
            } else {
                ClockState::Agrees
            };
            self.sensors[i].state = Some(state);
            self.sensors[i].agreed = state == ClockState::Agrees;
        }
        // 3. The feed time.
        let feed = self.scratch[best_b].0;
        // 4. The bound from the agreeing sensors still sending.
        let mut due = feed;
        for &(hi, _, i) in &self.scratch[best_a..=best_b] {
            let s = &self.sensors[i];
            let quiet_s = s.last_arrival.map_or(f64::INFINITY, |a| now.secs_since(a).max(0.0));
            if quiet_s >= cfg.window_s {
                continue;
            }
            // While the sensor pauses, its bound follows the clock: what it
            // sent leaves at the pace it came, a window later, rather than
            // in one burst when the pause reaches the window.
            let bound = if cfg.scan_end_closes && s.closed && !s.disordered { hi } else { hi.plus_secs(quiet_s - cfg.window_s) };
            if bound < due {
                due = bound;
            }
        }
        Some(due)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::feed::{Detection, ScanEnd};
    use rand::{Rng, SeedableRng};

    const T0: i64 = 1_778_738_400 * 1_000_000_000; // 2026-05-14T06:00:00Z

    fn ts(s: f64) -> Timestamp {
        Timestamp::from_unix_nanos(T0 + (s * 1e9).round() as i64)
    }

    fn det(sensor: SensorId, t: f64, tag: f64) -> Record {
        Record::Detection(Detection { sensor, time: ts(t), scan: None, range_m: 1000.0 + tag, bearing_deg: 1.0, radial_speed_mps: None, snr_db: None })
    }

    fn scan_end(sensor: SensorId, t: f64, scan: u64) -> Record {
        Record::ScanEnd(ScanEnd { sensor, time: ts(t), scan, sector_deg: None })
    }

    fn cfg() -> ReorderConfig {
        ReorderConfig::default()
    }

    fn times(v: &[Record]) -> Vec<f64> {
        // Rounded to the microsecond, so that decimal literals compare.
        v.iter().map(|r| (r.time().secs_since(ts(0.0)) * 1e6).round() / 1e6).collect()
    }

    /// Runs a timed arrival schedule (arrival, record) with a pop after each
    /// arrival and every 10 ms of daemon time, then drains. Returns the
    /// released records and how many were late.
    fn run(cfg: ReorderConfig, mut schedule: Vec<(f64, Record)>) -> (Vec<Record>, usize) {
        schedule.sort_by(|a, b| a.0.total_cmp(&b.0));
        let mut r = Reorder::new(cfg);
        let mut out = Vec::new();
        let mut late = 0;
        let mut last_r: Option<Timestamp> = None;
        let end = schedule.last().map(|x| x.0).unwrap_or(0.0) + 30.0;
        let mut clock = schedule.first().map(|x| x.0).unwrap_or(0.0);
        let mut it = schedule.into_iter().peekable();
        while clock <= end {
            while it.peek().is_some_and(|x| x.0 <= clock) {
                let (a, rec) = it.next().unwrap();
                if r.push(rec, ts(a)) == Admit::Late {
                    late += 1;
                }
                let before = out.len();
                let moved = r.pop_due(ts(a), &mut out);
                check_release(&out[before..], &mut last_r, moved);
            }
            let before = out.len();
            let moved = r.pop_due(ts(clock), &mut out);
            check_release(&out[before..], &mut last_r, moved);
            clock += 0.01;
        }
        r.drain(&mut out);
        (out, late)
    }

    /// The release time only moves forward and nothing released is older
    /// than an earlier release time.
    fn check_release(new: &[Record], last: &mut Option<Timestamp>, moved: Option<Timestamp>) {
        for rec in new {
            if let Some(l) = *last {
                assert!(rec.time() >= l, "released {} after release time {}", rec.time(), l);
            }
        }
        if let Some(m) = moved {
            assert!(last.is_none_or(|l| m > l));
            *last = Some(m);
            for rec in new {
                assert!(rec.time() <= m);
            }
        }
    }

    /// A radar feed: `plots` plots per 2.5 s scan, each scan ended by a
    /// scan_end; arrival = feed time + `delay` (the feed's offset from the
    /// daemon clock, large for a replay).
    fn radar(sensor: SensorId, scans: u64, plots: usize, start: f64) -> Vec<Record> {
        let mut v = Vec::new();
        for k in 0..scans {
            let t0 = start + k as f64 * 2.5;
            for p in 0..plots {
                v.push(det(sensor, t0 + 2.5 * (p as f64 + 0.5) / plots as f64, p as f64));
            }
            v.push(scan_end(sensor, t0 + 2.5, k));
        }
        v
    }

    fn sorted(mut v: Vec<Record>) -> Vec<Record> {
        // Stable: equal times keep their order, as the offline sort does.
        v.sort_by_key(|r| r.time());
        v
    }

    #[test]
    fn in_order_live_feed_passes_through_in_order() {
        let feed = radar(0, 20, 10, 0.0);
        let schedule = feed.iter().map(|r| (r.time().secs_since(ts(0.0)) + 0.05, r.clone())).collect();
        let (out, late) = run(cfg(), schedule);
        assert_eq!(late, 0);
        assert_eq!(out, feed);
    }

    #[test]
    fn shuffled_within_window_is_restored_exactly() {
        // Definition of the window: a record may be sent after records up
        // to (not including) window_s newer than itself. Shuffle by sorting
        // on time + U(0, 0.9 window): no record then overtakes one more
        // than 0.9 s older. Two radars and replays at 0 (burst), 1 and 10x.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let feed = sorted([radar(0, 30, 12, 0.0), radar(1, 25, 9, 0.7)].concat());
        for speed in [0.0, 1.0, 10.0] {
            let mut keyed: Vec<(f64, Record)> = feed.iter().map(|r| (r.time().secs_since(ts(0.0)) + rng.random_range(0.0..0.9), r.clone())).collect();
            keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
            // Send order is the shuffled order; arrival from pacing by the
            // record times at `speed`, as the replay tool does.
            let mut schedule = Vec::new();
            let mut wall = 1.0e6; // an old feed: the daemon clock is far ahead
            let mut prev = None;
            for (_, rec) in keyed {
                let t = rec.time().secs_since(ts(0.0));
                if speed > 0.0 {
                    if let Some(p) = prev
                        && t > p {
                            wall += (t - p) / speed;
                        }
                    prev = Some(prev.map_or(t, |p: f64| p.max(t)));
                } else {
                    wall += 1e-5;
                }
                schedule.push((wall, rec));
            }
            let (out, late) = run(cfg(), schedule);
            assert_eq!(late, 0, "speed {speed}");
            assert_eq!(times(&out), times(&feed), "speed {speed}");
            assert_eq!(out, feed, "speed {speed}");
        }
    }

    #[test]
    fn ordered_feed_at_slow_speed_with_gaps_loses_nothing() {
        // Quiet gaps longer than the window, replayed at a quarter speed.
        let mut feed = radar(0, 4, 5, 0.0);
        feed.extend(radar(0, 4, 5, 30.0));
        feed.extend(radar(1, 3, 4, 31.0));
        let feed = sorted(feed);
        let schedule = feed.iter().map(|r| (5000.0 + r.time().secs_since(ts(0.0)) * 4.0, r.clone())).collect();
        let (out, late) = run(cfg(), schedule);
        assert_eq!(late, 0);
        assert_eq!(out, feed);
    }

    #[test]
    fn record_older_than_release_time_is_late() {
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        for i in 0..10 {
            assert_eq!(r.push(det(0, i as f64 * 0.5, 0.0), ts(i as f64 * 0.5)), Admit::Held);
        }
        r.pop_due(ts(4.5), &mut out);
        // Release time is 4.5 - 1.0 window.
        assert_eq!(r.released(), Some(ts(3.5)));
        assert_eq!(times(&out), vec![0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5]);
        assert_eq!(r.push(det(0, 3.4, 1.0), ts(4.6)), Admit::Late);
        // Exactly at the release time is still accepted (advance promises
        // nothing *earlier* follows).
        assert_eq!(r.push(det(0, 3.5, 2.0), ts(4.6)), Admit::Held);
        assert_eq!(r.push(det(0, 3.6, 2.0), ts(4.6)), Admit::Held);
        out.clear();
        r.pop_due(ts(4.6), &mut out);
        assert_eq!(times(&out), vec![3.5]);
    }

    #[test]
    fn quiet_feed_is_released_by_wall_clock() {
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        r.push(det(0, 0.0, 0.0), ts(100.0));
        r.push(det(0, 0.3, 0.0), ts(100.3));
        assert_eq!(r.pop_due(ts(100.3), &mut out), Some(ts(-0.7)));
        assert!(out.is_empty());
        // While the feed is quiet, the release time follows the clock, a
        // window behind the newest record.
        assert_eq!(r.pop_due(ts(100.9), &mut out), Some(ts(-0.1)));
        assert!(out.is_empty());
        r.pop_due(ts(101.2), &mut out);
        assert_eq!(times(&out), vec![0.0]);
        // A window of quiet: everything up to the newest is due.
        assert_eq!(r.pop_due(ts(101.31), &mut out), Some(ts(0.3)));
        assert_eq!(times(&out), vec![0.0, 0.3]);
    }

    #[test]
    fn quiet_sensor_does_not_hold_back_a_busy_one() {
        // Sensor 1 sends once and then nothing; sensor 0 keeps sending.
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        r.push(det(1, 0.0, 0.0), ts(0.0));
        for i in 0..40 {
            let t = i as f64 * 0.1;
            r.push(det(0, t, 0.0), ts(t));
            r.pop_due(ts(t), &mut out);
        }
        // After a window of quiet from sensor 1, sensor 0 alone sets the
        // release time: 3.9 - 1.0.
        assert_eq!(r.released(), Some(ts(2.9)));
    }

    #[test]
    fn sensor_far_behind_does_not_stall_the_others() {
        // Sensor 2's clock is an hour slow. Sensors 0 and 1 agree.
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        let mut late = 0;
        for i in 0..100 {
            let t = i as f64 * 0.1;
            for (s, skew) in [(0, 0.0), (1, 0.05), (2, -3600.0)] {
                if r.push(det(s, t + skew, 0.0), ts(t)) == Admit::Late {
                    late += 1;
                    assert_eq!(s, 2);
                }
            }
            r.pop_due(ts(t), &mut out);
        }
        assert!(r.released().unwrap() >= ts(8.8), "{:?}", r.released());
        let states: Vec<_> = r.clocks().map(|c| c.state).collect();
        assert_eq!(states, vec![ClockState::Agrees, ClockState::Agrees, ClockState::Behind]);
        assert!(late >= 90, "the slow sensor's records are late: {late}");
        assert!(out.iter().all(|x| x.sensor() != 2 || x.time() < ts(-3000.0)));
        // Its offset is visible: about +3600 s.
        let off = r.clocks().nth(2).unwrap().offset_s.unwrap();
        assert!((off - 3600.0).abs() < 1.0, "{off}");
    }

    #[test]
    fn sensor_far_ahead_is_held_and_does_not_flush_the_others() {
        // Sensor 2's clock is an hour fast: its records are held; the
        // release time follows sensors 0 and 1, and the others' records
        // still come out in order with nothing late.
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        for i in 0..100 {
            let t = i as f64 * 0.1;
            for (s, skew) in [(0, 0.0), (1, 0.05), (2, 3600.0)] {
                assert_eq!(r.push(det(s, t + skew, 0.0), ts(t)), Admit::Held);
            }
            r.pop_due(ts(t), &mut out);
        }
        let rel = r.released().unwrap();
        assert!(rel >= ts(8.8) && rel <= ts(9.0), "{rel}");
        assert!(out.iter().all(|x| x.sensor() != 2));
        assert_eq!(r.len(), 300 - out.len());
        assert!(out.len() >= 2 * 89);
        let states: Vec<_> = r.clocks().map(|c| c.state).collect();
        assert_eq!(states, vec![ClockState::Agrees, ClockState::Agrees, ClockState::Ahead]);
        let off = r.clocks().nth(2).unwrap().offset_s.unwrap();
        assert!((off + 3600.0).abs() < 1.0, "{off}");
    }

    #[test]
    fn an_outage_does_not_carry_the_release_time_to_a_sensor_ahead() {
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        for i in 0..30 {
            let t = i as f64 * 0.1;
            for (s, skew) in [(0, 0.0), (1, 0.0), (2, 3600.0)] {
                r.push(det(s, t + skew, 0.0), ts(t));
            }
            r.pop_due(ts(t), &mut out);
        }
        // Everyone silent for longer than idle_s: the agreeing sensors'
        // records are all released, the one ahead keeps its own held.
        out.clear();
        r.pop_due(ts(20.0), &mut out);
        assert_eq!(r.released(), Some(ts(2.9)));
        assert!(out.iter().all(|x| x.sensor() != 2));
        assert_eq!(r.len(), 30);
        // They come back: nothing they send is late.
        for i in 0..10 {
            let t = 3.0 + i as f64 * 0.1;
            assert_eq!(r.push(det(0, t, 0.0), ts(20.0 + t)), Admit::Held);
        }
    }

    #[test]
    fn two_sensors_tie_is_broken_by_the_daemon_clock() {
        // Live: sensor 0 is on the daemon's clock, sensor 1 an hour slow.
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        for i in 0..30 {
            let t = i as f64 * 0.1;
            r.push(det(0, t, 0.0), ts(t));
            r.push(det(1, t - 3600.0, 0.0), ts(t));
            r.pop_due(ts(t), &mut out);
        }
        let states: Vec<_> = r.clocks().map(|c| c.state).collect();
        assert_eq!(states, vec![ClockState::Agrees, ClockState::Behind]);
        assert_eq!(r.released(), Some(ts(1.9)));
    }

    #[test]
    fn silent_sensor_is_excluded_and_reported() {
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        r.push(det(1, 0.0, 0.0), ts(0.0));
        r.push(det(0, 0.0, 0.0), ts(0.0));
        r.pop_due(ts(0.0), &mut out);
        r.push(det(0, 11.0, 0.0), ts(11.0));
        r.pop_due(ts(11.0), &mut out);
        let states: Vec<_> = r.clocks().map(|c| c.state).collect();
        assert_eq!(states, vec![ClockState::Agrees, ClockState::Silent]);
        // Every sensor silent: all held is due.
        r.push(det(0, 11.5, 0.0), ts(11.5));
        out.clear();
        r.pop_due(ts(30.0), &mut out);
        assert_eq!(times(&out), vec![11.0, 11.5]);
        assert!(r.is_empty());
    }

    #[test]
    fn a_single_wild_time_does_not_move_the_sensor_clock() {
        let mut r = Reorder::new(cfg());
        let mut out = Vec::new();
        for i in 0..20 {
            let t = i as f64 * 0.1;
            r.push(det(0, t, 0.0), ts(t));
            if i == 10 {
                // A record a day ahead: held, but not taken as the clock.
                assert_eq!(r.push(det(0, 86_400.0, 9.0), ts(t)), Admit::Held);
            }
            r.pop_due(ts(t), &mut out);
        }
        assert_eq!(r.clocks().next().unwrap().feed_time, Some(ts(1.9)));
        assert_eq!(r.released(), Some(ts(0.9)));
        // Two records agreeing on a step do move it.
        r.push(det(0, 500.0, 0.0), ts(2.0));
        r.push(det(0, 500.1, 0.0), ts(2.1));
        assert_eq!(r.clocks().next().unwrap().feed_time, Some(ts(500.1)));
    }

    #[test]
    fn scan_end_closes_the_scan_when_enabled() {
        let c = ReorderConfig { scan_end_closes: true, ..cfg() };
        let mut r = Reorder::new(c);
        let mut out = Vec::new();
        for rec in radar(0, 1, 5, 0.0) {
            let t = rec.time().secs_since(ts(0.0));
            r.push(rec, ts(t));
        }
        // At the scan_end's arrival the whole scan is released.
        r.pop_due(ts(2.5), &mut out);
        assert_eq!(out.len(), 6);
        assert_eq!(r.released(), Some(ts(2.5)));
        // Without the option it waits for the window.
        let mut r = Reorder::new(cfg());
        out.clear();
        for rec in radar(0, 1, 5, 0.0) {
            let t = rec.time().secs_since(ts(0.0));
            r.push(rec, ts(t));
        }
        r.pop_due(ts(2.5), &mut out);
        assert_eq!(out.len(), 3);
        // A sensor whose stream came out of order is not trusted.
        let c = ReorderConfig { scan_end_closes: true, ..cfg() };
        let mut r = Reorder::new(c);
        out.clear();
        let mut feed = radar(0, 1, 5, 0.0);
        feed.swap(1, 2);
        for rec in feed {
            r.push(rec, ts(2.5));
        }
        r.pop_due(ts(2.5), &mut out);
        assert_eq!(r.released(), Some(ts(1.5)));
    }

    #[test]
    fn full_buffer_refuses() {
        let mut r = Reorder::new(ReorderConfig { max_held: 3, ..cfg() });
        for i in 0..3 {
            assert_eq!(r.push(det(0, i as f64, 0.0), ts(0.0)), Admit::Held);
        }
        assert_eq!(r.push(det(0, 3.0, 0.0), ts(0.0)), Admit::Full);
        let mut out = Vec::new();
        assert_eq!(r.drain(&mut out), Some(ts(2.0)));
        assert_eq!(times(&out), vec![0.0, 1.0, 2.0]);
    }

    #[test]
    fn equal_times_leave_in_the_offline_order_whatever_the_arrival() {
        // Records with equal times are released in crate::offline::feed_order,
        // the order `skerry track` uses, whichever way they arrived.
        let recs: Vec<_> = (0..5).map(|k| det(0, 1.0, k as f64)).collect();
        let mut expected = recs.clone();
        expected.sort_by(crate::offline::feed_order);
        for reversed in [false, true] {
            let mut r = Reorder::new(cfg());
            let mut order = recs.clone();
            if reversed {
                order.reverse();
            }
            for rec in &order {
                r.push(rec.clone(), ts(1.0));
            }
            let mut out = Vec::new();
            r.drain(&mut out);
            assert_eq!(out, expected);
        }
    }

    #[test]
    fn random_schedules_never_release_out_of_order() {
        // Brute force over random feeds, delays and clocks: the release
        // invariant holds, and every record is released or counted late or
        // refused, never lost.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        for _ in 0..40 {
            let sensors = rng.random_range(1..4u16);
            let mut schedule = Vec::new();
            let mut n = 0;
            for s in 0..sensors {
                let skew = if rng.random_bool(0.2) { rng.random_range(-100.0..100.0) } else { 0.0 };
                let mut t: f64 = rng.random_range(0.0..2.0);
                for _ in 0..rng.random_range(5..60) {
                    t += rng.random_range(0.0..0.5);
                    let delay = rng.random_range(0.0..2.0);
                    schedule.push((t + delay, det(s, t + skew, n as f64)));
                    n += 1;
                }
            }
            let c = ReorderConfig { scan_end_closes: rng.random_bool(0.5), ..cfg() };
            let (out, late) = run(c, schedule);
            assert_eq!(out.len() + late, n);
            let mut ts: Vec<_> = out.iter().map(|r| r.time()).collect();
            let before = ts.clone();
            ts.sort();
            assert_eq!(ts, before);
        }
    }
    /// `due_at` against its definition, by brute force: on random feeds
    /// (1–3 sensors, delays, pauses, scan ends, both settings of
    /// `scan_end_closes`), after each arrival, the instant it gives for the
    /// earliest held record, and for a feed time a little beyond, is
    /// checked on copies of the buffer: `pop_due` there reaches the
    /// target, and `pop_due` at 200 instants spread over the time before
    /// it does not (instants at which a sensor's clock state changed are
    /// outside the contract and skipped).
    #[test]
    fn due_at_is_the_first_instant_that_releases() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(23);
        let (mut checked, mut reached, mut none) = (0, 0, 0);
        for _ in 0..60 {
            let sensors = rng.random_range(1..4u16);
            let mut schedule = Vec::new();
            for s in 0..sensors {
                let mut t: f64 = rng.random_range(0.0..1.0);
                let mut k = 0;
                for _ in 0..rng.random_range(5..40) {
                    t += if rng.random_bool(0.1) { rng.random_range(0.5..3.0) } else { rng.random_range(0.0..0.2) };
                    let delay = if rng.random_bool(0.5) { rng.random_range(0.0..0.8) } else { 0.01 };
                    let rec = if rng.random_bool(0.15) {
                        k += 1;
                        scan_end(s, t, k)
                    } else {
                        det(s, t, k as f64)
                    };
                    schedule.push((t + delay, rec));
                }
            }
            schedule.sort_by(|a, b| a.0.total_cmp(&b.0));
            let c = ReorderConfig { scan_end_closes: rng.random_bool(0.5), window_s: rng.random_range(0.05..1.0), ..cfg() };
            let mut r = Reorder::new(c);
            let mut out = Vec::new();
            for (a, rec) in schedule {
                let now = ts(a);
                r.push(rec, now);
                r.pop_due(now, &mut out);
                let Some(h) = r.earliest() else { continue };
                let states: Vec<_> = r.clocks().map(|c| c.state).collect();
                for target in [h, h.plus_secs(rng.random_range(0.0..0.3))] {
                    let Some(w) = r.due_at(target) else {
                        none += 1;
                        continue;
                    };
                    checked += 1;
                    let w = w.max(now);
                    let mut at_w = r.clone();
                    at_w.pop_due(w, &mut Vec::new());
                    if at_w.clocks().map(|c| c.state).collect::<Vec<_>>() == states {
                        assert!(at_w.released().is_some_and(|x| x >= target), "not released at the instant given");
                        reached += 1;
                    }
                    let span = w.secs_since(now) - 2e-6;
                    for i in 0..200 {
                        if span <= 0.0 {
                            break;
                        }
                        let u = now.plus_secs(span * i as f64 / 199.0);
                        let mut early = r.clone();
                        early.pop_due(u, &mut Vec::new());
                        if early.clocks().map(|c| c.state).collect::<Vec<_>>() != states {
                            continue;
                        }
                        assert!(early.released().is_none_or(|x| x < target), "released {} s before the instant given", w.secs_since(u));
                    }
                }
            }
        }
        assert!(checked > 1000 && reached > 900 && none > 0, "{checked} checked, {reached} reached, {none} none");
    }
}
