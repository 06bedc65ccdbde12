//! The reorder task: owns the [`Reorder`] buffer, takes checked records
//! from ingest, and sends ordered batches to the engine task.
//!
//! It runs `pop_due` after every burst of arrivals, and, while the feed is
//! quiet, at the instant the next release is due: when the earliest held
//! record becomes due ([`Reorder::due_at`]), or when the release time
//! passes the feed time the engine waits for ([`Tracker::next_due`]:
//! the end of its open batch's span, the next timeout check), whichever
//! comes first. Each batch carries the release time, and the engine task
//! calls `advance` with it, so a batch held in the engine closes as soon
//! as the feed has passed its span rather than on a later tick or record.
//! The decisions stay in feed time: only *when* they are taken follows the
//! clock. A slow tick remains as a backstop for changes of the sensors'
//! clock states (a sensor falling silent), which `due_at` does not
//! foresee.
//!
//! The batch channel to the engine is bounded and this task *does* wait
//! on it: when the engine falls behind, the wait backs up into the ingest
//! queue, which drops and counts (ingest itself never waits).
//!
//! [`Tracker::next_due`]: super::Tracker::next_due
//!
//! At shutdown it waits for the ingest tasks to stop, takes what they
//! queued, and drains the whole buffer into a last batch.

use super::clock::DaemonClock;
use super::ingest::Arrival;
use super::metrics::Metrics;
use crate::feed::Record;
use crate::reorder::{Admit, Reorder};
use crate::time::Timestamp;
use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;
use std::time::Duration;
use tokio::sync::{mpsc, watch};
use tokio_util::sync::CancellationToken;
use tokio_util::task::TaskTracker;

/// Records in time order, and the release time reached (for the
/// engine's `advance`): no record earlier than it will follow.
#[derive(Debug, Default)]
pub struct Batch {
    pub records: Vec<Record>,
    pub release: Option<Timestamp>,
    /// The last batch: the engine finishes after it.
    pub last: bool,
}

/// Most arrivals taken before each release.
const BURST: usize = 4096;

pub struct Sequencer {
    pub reorder: Reorder,
    pub rx: mpsc::Receiver<Arrival>,
    pub tx: mpsc::Sender<Batch>,
    pub metrics: Arc<Metrics>,
    pub clock: DaemonClock,
    /// Backstop period of `pop_due` while nothing is due.
    pub tick: Duration,
    /// The feed time the engine waits for (from the engine task).
    pub engine_due: watch::Receiver<Option<Timestamp>>,
    pub cancel: CancellationToken,
    pub ingest: TaskTracker,
    /// The daemon instant of the latest `pop_due`.
    pub last_pop: Timestamp,
}

impl Sequencer {
    fn take(&mut self, a: Arrival) {
        let s = a.rec.sensor();
        match self.reorder.push(a.rec, a.at) {
            Admit::Held => {}
            Admit::Late => self.metrics.reject(Some(s), super::metrics::reason_index("late")),
            Admit::Full => {
                self.metrics.dropped_reorder_full.fetch_add(1, Relaxed);
            }
        }
    }

    fn gauges(&self) {
        self.metrics.reorder_held.store(self.reorder.len(), Relaxed);
        self.metrics.ingest_queue_depth.store(self.rx.len(), Relaxed);
        self.metrics.engine_queue_depth.store(self.tx.max_capacity() - self.tx.capacity(), Relaxed);
        if let Some(r) = self.reorder.released() {
            self.metrics.released_ns.store(r.unix_nanos(), Relaxed);
        }
        if let Ok(mut c) = self.metrics.clocks.lock() {
            c.clear();
            c.extend(self.reorder.clocks());
        }
    }

    /// Sends what is due; false when the engine task is gone.
    async fn release(&mut self) -> bool {
        let mut records = Vec::new();
        self.last_pop = self.clock.now();
        let release = self.reorder.pop_due(self.last_pop, &mut records);
        self.gauges();
        if records.is_empty() && release.is_none() {
            return true;
        }
        self.tx.send(Batch { records, release, last: false }).await.is_ok()
    }

    /// The daemon instant of the next release, if one is foreseen: the
    /// earliest held record's, or the engine's awaited feed time's.
    fn next_wake(&self) -> Option<Timestamp> {
        let held = self.reorder.earliest().and_then(|h| self.reorder.due_at(h));
        let engine = (*self.engine_due.borrow()).and_then(|t| self.reorder.due_at(t));
        let wake = match (held, engine) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        }?;
        // An instant at or before the last pop, which did not get there,
        // means the clock states changed (due_at's caveat): the backstop
        // tick takes over. An instant merely past (the send to the engine
        // took a while) is slept to at once.
        (wake > self.last_pop).then_some(wake)
    }

    pub async fn run(mut self) {
        let mut tick = tokio::time::interval(self.tick);
        tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        let mut engine_open = true;
        let mut wake: Option<Timestamp> = None;
        loop {
            let until = tokio::time::Instant::from_std(self.clock.instant_of(wake.unwrap_or_default()));
            tokio::select! {
                biased;
                _ = self.cancel.cancelled() => break,
                a = self.rx.recv() => match a {
                    Some(a) => {
                        self.take(a);
                        for _ in 1..BURST {
                            match self.rx.try_recv() {
                                Ok(a) => self.take(a),
                                Err(_) => break,
                            }
                        }
                        if !self.release().await {
                            return;
                        }
                    }
                    None => break,
                },
                r = self.engine_due.changed(), if engine_open => {
                    // A new awaited time may already be released: check now.
                    if r.is_err() {
                        engine_open = false;
                    } else if !self.release().await {
                        return;
                    }
                }
                _ = tokio::time::sleep_until(until), if wake.is_some() => {
                    if !self.release().await {
                        return;
                    }
                }
                _ = tick.tick() => {
                    if !self.release().await {
                        return;
                    }
                }
            }
            wake = self.next_wake();
        }
        // Shutdown: the ingest tasks stop at the same token; what they
        // queued before stopping is still taken.
        self.ingest.wait().await;
        while let Ok(a) = self.rx.try_recv() {
            self.take(a);
        }
        let mut records = Vec::new();
        let release = self.reorder.drain(&mut records);
        self.gauges();
        tracing::info!(records = records.len(), "reorder buffer drained");
        let _ = self.tx.send(Batch { records, release, last: true }).await;
    }
}
