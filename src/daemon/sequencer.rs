//! The reorder task: owns the [`Reorder`] buffer, takes checked records
//! from ingest, and sends ordered batches to the engine task.
//!
//! It runs `pop_due` after every burst of arrivals and on a short tick, so
//! that a quiet feed is still released by the clock. The batch channel to
//! the engine is bounded and this task *does* wait on it: when the engine
//! falls behind, the wait backs up into the ingest queue, which drops and
//! counts (ingest itself never waits).
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
use tokio::sync::mpsc;
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
    pub tick: Duration,
    pub cancel: CancellationToken,
    pub ingest: TaskTracker,
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
        let release = self.reorder.pop_due(self.clock.now(), &mut records);
        self.gauges();
        if records.is_empty() && release.is_none() {
            return true;
        }
        self.tx.send(Batch { records, release, last: false }).await.is_ok()
    }

    pub async fn run(mut self) {
        let mut tick = tokio::time::interval(self.tick);
        tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        loop {
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
                _ = tick.tick() => {
                    if !self.release().await {
                        return;
                    }
                }
            }
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
