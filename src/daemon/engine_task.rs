//! The engine task: the sole owner of the tracks.
//!
//! It takes ordered batches from the reorder task, passes each record
//! through the duplicate screen and into the tracker, tells the tracker how
//! far feed time has come (`advance`), and hands the track records made to
//! the publisher. Subscriptions are made here too, between batches, so a
//! new subscriber gets the picture and then every later update, with no
//! gap and no lock on the tracks.

use super::metrics::Metrics;
use super::publisher::{Filter, Publisher, SubscribeError, Subscription};
use super::sequencer::Batch;
use crate::engine::{Dropped, Engine};
use crate::feed::{Record, Screen, TrackRecord, TrackStatus};
use crate::time::Timestamp;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Instant;
use tokio::sync::{mpsc, oneshot, watch};

/// What the daemon needs of a tracking engine. [`Engine`] is the real
/// one; tests may drive the daemon with another.
pub trait Tracker: Send + 'static {
    /// One record, in time order; appends the track records it made.
    fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>);
    /// Feed time reached `now`: no record earlier than `now` follows.
    fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>);
    /// The earliest feed time at which `advance` would make or close
    /// something (an open batch, a timeout check); `None`: nothing waits
    /// on feed time. The reorder task releases up to it as soon as the
    /// buffer allows, rather than at its next clock tick.
    fn next_due(&self) -> Option<Timestamp> {
        None
    }
    /// End of the feed.
    fn finish(&mut self, out: &mut Vec<TrackRecord>);
    /// The latest record of every live track.
    fn picture(&self) -> Vec<TrackRecord>;
    /// Live tracks: tentative, confirmed, coasting.
    fn live(&self) -> [u64; 3];
    /// What the tracker's overload limits dropped so far, by sensor;
    /// empty: none counted.
    fn dropped(&self) -> &[Dropped] {
        &[]
    }
}

impl Tracker for Engine {
    fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) {
        Engine::handle(self, rec, out)
    }
    fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>) {
        Engine::advance(self, now, out)
    }
    fn next_due(&self) -> Option<Timestamp> {
        Engine::next_due(self)
    }
    fn finish(&mut self, out: &mut Vec<TrackRecord>) {
        Engine::finish(self, out)
    }
    fn picture(&self) -> Vec<TrackRecord> {
        Engine::picture(self)
    }
    fn live(&self) -> [u64; 3] {
        let s = self.stats();
        [s.tentative as u64, s.confirmed as u64, s.coasting as u64]
    }
    fn dropped(&self) -> &[Dropped] {
        Engine::dropped(self)
    }
}

/// A request to the engine task.
pub enum Control {
    Subscribe { filter: Filter, reply: oneshot::Sender<Result<Subscription, SubscribeError>> },
}

/// What the engine task did over its life.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct EngineSummary {
    pub processed: u64,
    pub duplicates: u64,
    pub track_records: u64,
    pub batches: u64,
}

pub struct EngineTask<T: Tracker> {
    pub tracker: T,
    pub screen: Screen,
    pub batches: mpsc::Receiver<Batch>,
    pub control: mpsc::Receiver<Control>,
    pub publisher: Publisher,
    pub metrics: Arc<Metrics>,
    /// The tracker's [`Tracker::next_due`] after each batch, for the
    /// reorder task.
    pub due: watch::Sender<Option<Timestamp>>,
    /// When the live-track gauges were last set.
    pub live_at: Option<Instant>,
}

/// Period of the live-track gauges.
const LIVE_GAUGE_PERIOD: std::time::Duration = std::time::Duration::from_millis(100);

impl<T: Tracker> EngineTask<T> {
    fn batch(&mut self, b: &Batch, out: &mut Vec<TrackRecord>, sum: &mut EngineSummary) {
        let start = Instant::now();
        for rec in &b.records {
            match self.screen.admit(rec) {
                Ok(()) => {
                    self.tracker.handle(rec, out);
                    self.metrics.sensor(Some(rec.sensor())).processed.fetch_add(1, Relaxed);
                    sum.processed += 1;
                }
                Err(e) => {
                    self.metrics.reject(e.sensor, super::metrics::reason_of(&e.reason));
                    sum.duplicates += 1;
                }
            }
        }
        if let Some(t) = b.release {
            self.tracker.advance(t, out);
        }
        if b.last {
            self.tracker.finish(out);
        }
        self.metrics.observe_batch(start.elapsed().as_secs_f64());
        sum.batches += 1;
        sum.track_records += out.len() as u64;
        self.metrics.track_records.fetch_add(out.len() as u64, Relaxed);
        self.publisher.publish(out);
        out.clear();
        let due = self.tracker.next_due();
        self.due.send_if_modified(|d| std::mem::replace(d, due) != due);
        // Counting live tracks visits every track: at most every
        // LIVE_GAUGE_PERIOD, not after every batch (a batch may be one
        // datagram's worth of plots, a thousand times a second).
        if b.last || self.live_at.is_none_or(|t| t.elapsed() >= LIVE_GAUGE_PERIOD) {
            self.live_at = Some(Instant::now());
            let live = self.tracker.live();
            for (g, v) in self.metrics.tracks.iter().zip(live) {
                g.store(v, Relaxed);
            }
            for (i, d) in self.tracker.dropped().iter().enumerate() {
                let c = self.metrics.sensor(Some(i as u16));
                c.plots_dropped.store(d.plots, Relaxed);
                c.starts_dropped.store(d.starts, Relaxed);
            }
        }
    }

    pub async fn run(mut self) -> EngineSummary {
        let mut out = Vec::new();
        let mut sum = EngineSummary::default();
        let mut control_open = true;
        loop {
            tokio::select! {
                biased;
                b = self.batches.recv() => match b {
                    Some(b) => {
                        self.metrics.engine_queue_depth.store(self.batches.len(), Relaxed);
                        self.batch(&b, &mut out, &mut sum);
                        if b.last {
                            break;
                        }
                    }
                    None => {
                        // The reorder task ended without a last batch.
                        self.tracker.finish(&mut out);
                        self.publisher.publish(&out);
                        break;
                    }
                },
                c = self.control.recv(), if control_open => match c {
                    Some(Control::Subscribe { filter, reply }) => {
                        let picture = self.tracker.picture();
                        let _ = reply.send(self.publisher.subscribe(filter, &picture));
                    }
                    None => control_open = false,
                },
            }
        }
        // Dropping the publisher closes every subscriber's queue: their
        // streams send what is queued and end.
        drop(self.publisher);
        sum
    }
}

/// Statuses counted as live, in [`Tracker::live`] order.
pub const LIVE: [TrackStatus; 3] = [TrackStatus::Tentative, TrackStatus::Confirmed, TrackStatus::Coasting];
