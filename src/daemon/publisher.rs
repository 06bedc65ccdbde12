//! Fan-out of track records to the picture subscribers.
//!
//! The engine task owns the [`Publisher`] and calls it after each batch;
//! it never waits: each subscriber has its own bounded queue, filled with
//! `try_send`. When a subscriber's queue is full the update is skipped and
//! counted; the count goes into that subscriber's stream as a
//! [`Update::Skipped`] message as soon as there is room again (or, at
//! shutdown, after the last queued update). A slow subscriber therefore
//! costs the engine one failed `try_send` per update and costs the other
//! subscribers nothing.

use super::metrics::Metrics;
use crate::feed::{TrackRecord, TrackStatus};
use crate::time::Timestamp;
use std::collections::HashMap;
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering::Relaxed};
use tokio::sync::mpsc;

/// What a subscriber wants to see.
#[derive(Clone, Debug, PartialEq)]
pub struct Filter {
    /// Wanted statuses, indexed as [`status_index`].
    pub statuses: [bool; 4],
    /// Latitude/longitude box: (min_lat, max_lat, min_lon, max_lon);
    /// min_lon > max_lon crosses the 180° meridian.
    pub area: Option<[f64; 4]>,
    /// At most one record per track per this many seconds of feed time
    /// (status changes always pass).
    pub min_interval_s: f64,
}

impl Default for Filter {
    /// Confirmed and coasting tracks, everywhere, every record.
    fn default() -> Self {
        Filter { statuses: [false, true, true, false], area: None, min_interval_s: 0.0 }
    }
}

pub fn status_index(s: TrackStatus) -> usize {
    match s {
        TrackStatus::Tentative => 0,
        TrackStatus::Confirmed => 1,
        TrackStatus::Coasting => 2,
        TrackStatus::Ended => 3,
    }
}

impl Filter {
    pub fn all() -> Self {
        Filter { statuses: [true; 4], ..Filter::default() }
    }

    fn inside(&self, r: &TrackRecord) -> bool {
        match self.area {
            None => true,
            Some([lat0, lat1, lon0, lon1]) => {
                let lat_ok = r.lat_deg >= lat0 && r.lat_deg <= lat1;
                let lon_ok = if lon0 <= lon1 { r.lon_deg >= lon0 && r.lon_deg <= lon1 } else { r.lon_deg >= lon0 || r.lon_deg <= lon1 };
                lat_ok && lon_ok
            }
        }
    }
}

/// Per-subscriber memory of what was sent, for the interval and the box.
#[derive(Default)]
struct Sent {
    /// Track number → (feed time, status) of the last record sent.
    last: HashMap<u64, (Timestamp, TrackStatus)>,
}

impl Sent {
    /// Whether `r` goes to a subscriber with filter `f`, remembering it.
    fn admit(&mut self, f: &Filter, r: &TrackRecord) -> bool {
        let prev = self.last.get(&r.track).copied();
        if !f.statuses[status_index(r.status)] {
            // A track that leaves the wanted statuses is forgotten.
            self.last.remove(&r.track);
            return false;
        }
        if !f.inside(r) {
            // One record outside the box tells the client the track left.
            return self.last.remove(&r.track).is_some();
        }
        if r.status == TrackStatus::Ended {
            self.last.remove(&r.track);
            return true;
        }
        if let Some((t, st)) = prev
            && st == r.status && r.time.secs_since(t) < f.min_interval_s {
                return false;
            }
        self.last.insert(r.track, (r.time, r.status));
        true
    }
}

/// An item of a subscriber's queue.
#[derive(Clone, Debug, PartialEq)]
pub enum Update {
    Track(Arc<TrackRecord>),
    /// Updates skipped since the previous item.
    Skipped(u64),
}

struct Subscriber {
    tx: mpsc::Sender<Update>,
    filter: Filter,
    sent: Sent,
    /// Skips not yet told.
    pending: u64,
    /// Skips left untold when the publisher closed: the stream reads it
    /// after the queue.
    residual: Arc<AtomicU64>,
}

/// The receiving end handed to a subscriber's stream.
pub struct Subscription {
    /// The picture at the moment of subscribing, filtered.
    pub picture: Vec<Arc<TrackRecord>>,
    pub rx: mpsc::Receiver<Update>,
    pub residual: Arc<AtomicU64>,
}

#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SubscribeError {
    #[error("too many subscribers (at most {0})")]
    TooMany(usize),
}

pub struct Publisher {
    subs: Vec<Subscriber>,
    queue: usize,
    max: usize,
    metrics: Option<Arc<Metrics>>,
}

impl Publisher {
    /// `queue`: updates queued per subscriber; `max`: most subscribers.
    pub fn new(queue: usize, max: usize, metrics: Option<Arc<Metrics>>) -> Self {
        Publisher { subs: Vec::new(), queue: queue.max(1), max, metrics }
    }

    pub fn len(&self) -> usize {
        self.subs.len()
    }

    pub fn is_empty(&self) -> bool {
        self.subs.is_empty()
    }

    /// A new subscriber; `picture` is the engine's current picture.
    pub fn subscribe(&mut self, filter: Filter, picture: &[TrackRecord]) -> Result<Subscription, SubscribeError> {
        self.subs.retain(|s| !s.tx.is_closed());
        if self.subs.len() >= self.max {
            return Err(SubscribeError::TooMany(self.max));
        }
        let (tx, rx) = mpsc::channel(self.queue);
        let mut sent = Sent::default();
        let picture = picture.iter().filter(|r| sent.admit(&filter, r)).map(|r| Arc::new(r.clone())).collect();
        let residual = Arc::new(AtomicU64::new(0));
        self.subs.push(Subscriber { tx, filter, sent, pending: 0, residual: residual.clone() });
        self.gauge();
        Ok(Subscription { picture, rx, residual })
    }

    /// Offers each record to every subscriber. Never waits.
    pub fn publish(&mut self, recs: &[TrackRecord]) {
        if recs.is_empty() || self.subs.is_empty() {
            return;
        }
        let shared: Vec<Arc<TrackRecord>> = recs.iter().map(|r| Arc::new(r.clone())).collect();
        let (mut sent, mut skipped) = (0u64, 0u64);
        let mut closed = false;
        for s in &mut self.subs {
            for r in &shared {
                if !s.sent.admit(&s.filter, r) {
                    continue;
                }
                if s.pending > 0 {
                    match s.tx.try_send(Update::Skipped(s.pending)) {
                        Ok(()) => s.pending = 0,
                        Err(mpsc::error::TrySendError::Full(_)) => {
                            s.pending += 1;
                            skipped += 1;
                            continue;
                        }
                        Err(mpsc::error::TrySendError::Closed(_)) => {
                            closed = true;
                            break;
                        }
                    }
                }
                match s.tx.try_send(Update::Track(r.clone())) {
                    Ok(()) => sent += 1,
                    Err(mpsc::error::TrySendError::Full(_)) => {
                        s.pending += 1;
                        skipped += 1;
                    }
                    Err(mpsc::error::TrySendError::Closed(_)) => {
                        closed = true;
                        break;
                    }
                }
            }
        }
        if closed {
            self.subs.retain(|s| !s.tx.is_closed());
            self.gauge();
        }
        if let Some(m) = &self.metrics {
            m.subscriber_sent.fetch_add(sent, Relaxed);
            m.subscriber_skipped.fetch_add(skipped, Relaxed);
        }
    }

    fn gauge(&self) {
        if let Some(m) = &self.metrics {
            m.subscribers.store(self.subs.len(), Relaxed);
        }
    }
}

impl Drop for Publisher {
    /// Closes every queue; skips not yet told are left for the streams.
    fn drop(&mut self) {
        for s in &mut self.subs {
            if s.pending > 0 && s.tx.try_send(Update::Skipped(s.pending)).is_err() {
                s.residual.store(s.pending, Relaxed);
            }
        }
        self.subs.clear();
        self.gauge();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(track: u64, t: f64, status: TrackStatus, lat: f64, lon: f64) -> TrackRecord {
        TrackRecord {
            time: Timestamp::from_unix_secs_f64(1.7e9 + t),
            track,
            status,
            lat_deg: lat,
            lon_deg: lon,
            east_m: 0.0,
            north_m: 0.0,
            vel_east_mps: 0.0,
            vel_north_mps: 0.0,
            speed_kn: 0.0,
            course_deg: 0.0,
            pos_cov_m2: [[1.0, 0.0], [0.0, 1.0]],
            sensors: vec![],
            identity: None,
            name: None,
            ship_type: None,
            length_m: None,
            beam_m: None,
            identity_conflict: false,
        }
    }

    fn drain(rx: &mut mpsc::Receiver<Update>) -> Vec<Update> {
        let mut v = Vec::new();
        while let Ok(u) = rx.try_recv() {
            v.push(u);
        }
        v
    }

    #[test]
    fn slow_subscriber_skips_and_is_told_while_fast_one_gets_all() {
        let mut p = Publisher::new(4, 10, None);
        let mut slow = p.subscribe(Filter::all(), &[]).unwrap();
        let mut fast = p.subscribe(Filter::all(), &[]).unwrap();
        let mut got_fast = 0;
        for k in 0..100 {
            p.publish(&[rec(1, k as f64, TrackStatus::Confirmed, 56.0, 7.0)]);
            got_fast += drain(&mut fast.rx).len();
        }
        assert_eq!(got_fast, 100);
        // The slow one holds its first 4 and missed 96.
        let q = drain(&mut slow.rx);
        assert_eq!(q.len(), 4);
        assert!(q.iter().all(|u| matches!(u, Update::Track(_))));
        // Room again: the next update is preceded by the count.
        p.publish(&[rec(1, 100.0, TrackStatus::Confirmed, 56.0, 7.0)]);
        assert_eq!(drain(&mut slow.rx), vec![Update::Skipped(96), Update::Track(Arc::new(rec(1, 100.0, TrackStatus::Confirmed, 56.0, 7.0)))]);
        // Skips untold at close are left for the stream.
        for k in 0..10 {
            p.publish(&[rec(1, 200.0 + k as f64, TrackStatus::Confirmed, 56.0, 7.0)]);
        }
        drop(p);
        let q = drain(&mut slow.rx);
        let told: u64 = q.iter().map(|u| if let Update::Skipped(n) = u { *n } else { 0 }).sum::<u64>() + slow.residual.load(Relaxed);
        let tracks = q.iter().filter(|u| matches!(u, Update::Track(_))).count() as u64;
        assert_eq!(told + tracks, 10);
    }

    #[test]
    fn filters() {
        let mut p = Publisher::new(100, 10, None);
        let picture = [rec(1, 0.0, TrackStatus::Tentative, 56.0, 7.0), rec(2, 0.0, TrackStatus::Confirmed, 56.0, 7.0)];
        let mut def = p.subscribe(Filter::default(), &picture).unwrap();
        assert_eq!(def.picture.len(), 1);
        let boxed = Filter { area: Some([55.5, 56.5, 6.5, 7.5]), min_interval_s: 10.0, ..Filter::default() };
        let mut b = p.subscribe(boxed, &[]).unwrap();
        p.publish(&[
            rec(2, 1.0, TrackStatus::Confirmed, 56.0, 7.0),
            rec(2, 5.0, TrackStatus::Confirmed, 56.0, 7.0),  // within the interval
            rec(2, 6.0, TrackStatus::Coasting, 56.0, 7.0),   // status change
            rec(2, 20.0, TrackStatus::Coasting, 58.0, 7.0),  // leaves the box: told once
            rec(2, 40.0, TrackStatus::Coasting, 58.0, 7.0),  // outside: not sent
            rec(3, 1.0, TrackStatus::Tentative, 56.0, 7.0),  // unwanted status
            rec(2, 50.0, TrackStatus::Ended, 58.0, 7.0),
        ]);
        let times = |v: Vec<Update>| -> Vec<f64> { v.into_iter().filter_map(|u| if let Update::Track(r) = u { Some(r.time.unix_secs_f64() - 1.7e9) } else { None }).collect() };
        assert_eq!(times(drain(&mut b.rx)), vec![1.0, 6.0, 20.0]);
        // The default filter: confirmed and coasting, no ended.
        assert_eq!(times(drain(&mut def.rx)), vec![1.0, 5.0, 6.0, 20.0, 40.0]);
        // The 180° meridian.
        let f = Filter { area: Some([-10.0, 10.0, 170.0, -170.0]), ..Filter::all() };
        assert!(f.inside(&rec(1, 0.0, TrackStatus::Confirmed, 0.0, 175.0)));
        assert!(f.inside(&rec(1, 0.0, TrackStatus::Confirmed, 0.0, -175.0)));
        assert!(!f.inside(&rec(1, 0.0, TrackStatus::Confirmed, 0.0, 0.0)));
    }

    #[test]
    fn closed_subscribers_are_dropped_and_limit_holds() {
        let mut p = Publisher::new(4, 1, None);
        let s = p.subscribe(Filter::all(), &[]).unwrap();
        assert_eq!(p.subscribe(Filter::all(), &[]).err(), Some(SubscribeError::TooMany(1)));
        drop(s);
        p.publish(&[rec(1, 0.0, TrackStatus::Confirmed, 0.0, 0.0)]);
        assert!(p.is_empty());
        assert!(p.subscribe(Filter::all(), &[]).is_ok());
    }
}
