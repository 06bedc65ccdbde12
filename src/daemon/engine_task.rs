//! The engine task: the sole owner of the tracks.
//!
//! It takes ordered batches from the reorder task, passes each record
//! through the duplicate screen and into the tracker, tells the tracker how
//! far feed time has come (`advance`), and hands the track records made to
//! the publisher. Subscriptions are made here too, between batches, so a
//! new subscriber gets the picture and then every later update, with no
//! gap and no lock on the tracks.
//!
//! Snapshots (`[record] snapshot_interval_s`) are taken here too, between
//! batches, so the state is consistent: the task encodes the state and a
//! blocking thread writes the file (at most one write at a time; a tick
//! that finds the last write still going is skipped). At shutdown the
//! last snapshot is taken after the final records are handled and before
//! the engine's `finish`, so that a restart continues as if the daemon had
//! never stopped. After a warm restart, records at or before the restored
//! key in feed order are refused as late: the engine has handled them.

use super::clock::DaemonClock;
use super::metrics::Metrics;
use super::publisher::{Filter, Publisher, SubscribeError, Subscription};
use super::sequencer::Batch;
use crate::engine::{Dropped, Engine, EngineState};
use crate::feed::{Record, Screen, TrackRecord, TrackStatus};
use crate::snapshot::{FeedKey, Fingerprint, SnapshotDir};
use crate::time::Timestamp;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::{Duration, Instant};
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
    /// The state for a snapshot; `None`: this tracker keeps none, and no
    /// snapshot is written.
    fn state(&self) -> Option<EngineState> {
        None
    }

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
    fn state(&self) -> Option<EngineState> {
        Some(Engine::state(self))
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

/// Where and how often snapshots are written.
pub struct Snapshots {
    pub dir: SnapshotDir,
    pub interval: Duration,
    /// Of the configuration the tracker was built from.
    pub fingerprint: Fingerprint,
    /// Stamps each snapshot, which bounds the recording a restart reads.
    pub clock: DaemonClock,
    /// The recording the snapshots go with. A snapshot is written only
    /// once the recording has settled every record offered before it was
    /// taken: a restart replays the recording's tail after the snapshot,
    /// and a record the snapshot covers but the recording lacks would
    /// make the replayed state differ from the one that was lost.
    pub recorder: Option<super::record::Recorder>,
}

/// How long a snapshot waits for the recording to catch up before it is
/// given up (the next one will try again; the older snapshot stays).
const SETTLE_LIMIT: Duration = Duration::from_secs(5);

pub struct EngineTask<T: Tracker> {
    pub tracker: T,
    pub screen: Screen,
    /// The greatest feed-order key handled, saved in each snapshot so a
    /// restart knows which recorded records come after it.
    pub last: Option<FeedKey>,
    /// Records at or before this key were handled before a restart.
    pub floor: Option<FeedKey>,
    pub snapshots: Option<Snapshots>,
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
    /// Handles a batch's records and release time; the caller publishes.
    fn batch(&mut self, b: &Batch, out: &mut Vec<TrackRecord>, sum: &mut EngineSummary) {
        let start = Instant::now();
        let late = super::metrics::reason_index("late");
        for rec in &b.records {
            if self.floor.is_some_and(|f| !f.precedes(rec)) {
                self.metrics.reject(Some(rec.sensor()), late);
                continue;
            }
            if self.snapshots.is_some() {
                let key = FeedKey::of(rec);
                if self.last.is_none_or(|l| key > l) {
                    self.last = Some(key);
                }
            }
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
        self.metrics.observe_batch(start.elapsed().as_secs_f64());
        sum.batches += 1;
    }

    /// Publishes what the batch made and updates the gauges.
    fn publish(&mut self, out: &mut Vec<TrackRecord>, sum: &mut EngineSummary, last: bool) {
        sum.track_records += out.len() as u64;
        self.metrics.track_records.fetch_add(out.len() as u64, Relaxed);
        self.publisher.publish(out);
        out.clear();
        let due = self.tracker.next_due();
        self.due.send_if_modified(|d| std::mem::replace(d, due) != due);
        // Counting live tracks visits every track: at most every
        // LIVE_GAUGE_PERIOD, not after every batch (a batch may be one
        // datagram's worth of plots, a thousand times a second).
        if last || self.live_at.is_none_or(|t| t.elapsed() >= LIVE_GAUGE_PERIOD) {
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

    /// The snapshot bytes of the state now and their feed time; None when
    /// snapshots are off, the tracker keeps none, or nothing was handled.
    fn encode_snapshot(&self) -> Option<(Vec<u8>, crate::time::Timestamp)> {
        let s = self.snapshots.as_ref()?;
        let last = self.last?;
        let state = self.tracker.state()?;
        Some((crate::snapshot::encode(&s.fingerprint, state, &self.screen, Some(last), Some(s.clock.now())), last.time))
    }

    /// Starts writing a snapshot on a blocking thread.
    fn start_snapshot(&self, fin: bool) -> Option<tokio::task::JoinHandle<()>> {
        let (bytes, feed_time) = self.encode_snapshot()?;
        let s = self.snapshots.as_ref()?;
        let dir = s.dir.clone();
        let recording = s.recorder.clone().map(|r| (r.mark(), r));
        Some(tokio::task::spawn_blocking(move || {
            let started = Instant::now();
            if let Some((mark, r)) = recording
                && !r.wait_settled(mark, SETTLE_LIMIT)
            {
                tracing::warn!(feed_time = %feed_time, "snapshot not written: the recording has not caught up with the records it covers after {} s", SETTLE_LIMIT.as_secs());
                return;
            }
            match dir.write(&bytes, feed_time) {
                Ok(path) if fin => {
                    tracing::info!(file = %path.display(), bytes = bytes.len(), feed_time = %feed_time, seconds = started.elapsed().as_secs_f64(), "snapshot written at shutdown")
                }
                Ok(path) => tracing::debug!(file = %path.display(), bytes = bytes.len(), feed_time = %feed_time, "snapshot written"),
                Err(e) => tracing::warn!(error = %e, "cannot write a snapshot"),
            }
        }))
    }

    /// The last snapshot, after any write still going. (Takes `self` by
    /// value and gives it back: a borrow held across the awaits would ask
    /// the tracker to be `Sync`.)
    async fn final_snapshot(self, writing: &mut Option<tokio::task::JoinHandle<()>>) -> Self {
        if let Some(h) = writing.take() {
            let _ = h.await;
        }
        let h = self.start_snapshot(true);
        if let Some(h) = h {
            let _ = h.await;
        }
        self
    }

    pub async fn run(mut self) -> EngineSummary {
        let mut out = Vec::new();
        let mut sum = EngineSummary::default();
        let mut control_open = true;
        // The gauges show a restored picture before the first batch.
        for (g, v) in self.metrics.tracks.iter().zip(self.tracker.live()) {
            g.store(v, Relaxed);
        }
        let period = self.snapshots.as_ref().map_or(Duration::from_secs(3600), |s| s.interval);
        let mut snapshot_tick = tokio::time::interval_at(tokio::time::Instant::now() + period, period);
        snapshot_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        let mut writing: Option<tokio::task::JoinHandle<()>> = None;
        loop {
            tokio::select! {
                biased;
                // First: it is ready once a period, and must not wait
                // behind a queue of batches that never empties.
                _ = snapshot_tick.tick(), if self.snapshots.is_some() => {
                    if writing.as_ref().is_some_and(|h| !h.is_finished()) {
                        tracing::debug!("the last snapshot is still being written: this one is skipped");
                    } else {
                        writing = self.start_snapshot(false);
                    }
                }
                b = self.batches.recv() => match b {
                    Some(b) => {
                        self.metrics.engine_queue_depth.store(self.batches.len(), Relaxed);
                        self.batch(&b, &mut out, &mut sum);
                        if b.last {
                            self = self.final_snapshot(&mut writing).await;
                            self.tracker.finish(&mut out);
                        }
                        self.publish(&mut out, &mut sum, b.last);
                        if b.last {
                            break;
                        }
                    }
                    None => {
                        // The reorder task ended without a last batch.
                        self = self.final_snapshot(&mut writing).await;
                        self.tracker.finish(&mut out);
                        self.publish(&mut out, &mut sum, true);
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
