//! The track output of `skerry track`, written on a thread of its own.
//!
//! The engine hands over its track records in chunks; a second thread
//! turns them into JSON lines and writes them, about 64 KiB at a time,
//! while the engine goes on. The lines come out in the order the records
//! were handed over, so the output is the same to the byte as writing
//! them inline (the tests below hold the two together). With
//! one core the thread simply takes turns with the engine.
//!
//! Contract:
//! - [`TrackWriter::send`] takes the records out of the caller's vector
//!   (leaving it empty, with a recycled buffer) and never reorders them.
//! - A write error stops the writer; the next `send` or [`TrackWriter::finish`]
//!   returns it. Nothing is lost silently: `finish` flushes and reports
//!   how many records were written.

use crate::feed::TrackRecord;
use crate::feed::tracks::TrackLineWriter;
use std::io::Write;
use std::sync::mpsc::{Receiver, SyncSender, TryRecvError, sync_channel};
use std::thread::JoinHandle;

/// Chunks in flight between the engine and the writer. Enough to ride
/// over a slow write, few enough that memory stays bounded.
const IN_FLIGHT: usize = 8;

/// The writer hands the output buffer to the sink once it holds this
/// much.
const WRITE_AT: usize = 1 << 16;

/// Where the lines go.
pub enum Sink {
    /// Standard output (locked by the writer thread).
    Stdout,
    /// Any other byte sink, such as a file created by the caller (so that
    /// an error creating it is reported before tracking starts).
    Other(Box<dyn Write + Send>),
}

#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    #[error("writing track records")]
    Io(#[from] std::io::Error),
    #[error("the track writer thread stopped unexpectedly")]
    Lost,
}

pub struct TrackWriter {
    tx: Option<SyncSender<Vec<TrackRecord>>>,
    spare: Receiver<Vec<TrackRecord>>,
    thread: Option<JoinHandle<std::io::Result<u64>>>,
}

impl TrackWriter {
    /// Starts the writer thread.
    pub fn spawn(sink: Sink) -> Result<TrackWriter, WriteError> {
        let (tx, rx) = sync_channel::<Vec<TrackRecord>>(IN_FLIGHT);
        // Emptied chunk vectors go back for reuse; one more slot than
        // chunks in flight, so returning one never blocks.
        let (back_tx, spare) = sync_channel::<Vec<TrackRecord>>(IN_FLIGHT + 1);
        let thread = std::thread::Builder::new().name("skerry-track-out".into()).spawn(move || {
            let stdout;
            let mut w: Box<dyn Write> = match sink {
                Sink::Stdout => {
                    stdout = std::io::stdout();
                    Box::new(stdout.lock())
                }
                Sink::Other(w) => w,
            };
            let mut buf: Vec<u8> = Vec::with_capacity(2 * WRITE_AT);
            let mut written = 0u64;
            // Keeps the date-and-time text from one line to the next.
            let mut lines = TrackLineWriter::new();
            for mut chunk in rx {
                for r in chunk.drain(..) {
                    lines.write(&r, &mut buf);
                    buf.push(b'\n');
                    written += 1;
                }
                // A full return queue only means the engine has spares.
                let _ = back_tx.try_send(chunk);
                if buf.len() >= WRITE_AT {
                    w.write_all(&buf)?;
                    buf.clear();
                }
            }
            w.write_all(&buf)?;
            w.flush()?;
            Ok(written)
        })?;
        Ok(TrackWriter { tx: Some(tx), spare, thread: Some(thread) })
    }

    /// Hands the records in `recs` to the writer, leaving `recs` empty.
    pub fn send(&mut self, recs: &mut Vec<TrackRecord>) -> Result<(), WriteError> {
        if recs.is_empty() {
            return Ok(());
        }
        let fresh = match self.spare.try_recv() {
            Ok(v) => v,
            Err(TryRecvError::Empty | TryRecvError::Disconnected) => Vec::with_capacity(recs.capacity()),
        };
        let chunk = std::mem::replace(recs, fresh);
        let Some(tx) = &self.tx else { return Err(WriteError::Lost) };
        if tx.send(chunk).is_err() {
            // The writer has stopped: its error says why.
            return Err(self.join().err().unwrap_or(WriteError::Lost));
        }
        Ok(())
    }

    /// Waits until everything handed over is written and flushed; returns
    /// the number of records written.
    pub fn finish(mut self) -> Result<u64, WriteError> {
        self.join()
    }

    fn join(&mut self) -> Result<u64, WriteError> {
        self.tx = None;
        match self.thread.take() {
            Some(h) => match h.join() {
                Ok(r) => Ok(r?),
                Err(_) => Err(WriteError::Lost),
            },
            None => Err(WriteError::Lost),
        }
    }
}

impl Drop for TrackWriter {
    fn drop(&mut self) {
        // Closing the channel ends the thread; wait for it so that no
        // output is cut off mid-line by the process ending.
        self.tx = None;
        if let Some(h) = self.thread.take() {
            let _ = h.join();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::feed::TrackStatus;
    use crate::time::Timestamp;
    use std::sync::{Arc, Mutex};

    /// A sink the test can read back, failing after `fail_after` bytes if
    /// set.
    #[derive(Clone)]
    struct Shared(Arc<Mutex<Vec<u8>>>, Option<usize>);

    impl Write for Shared {
        fn write(&mut self, b: &[u8]) -> std::io::Result<usize> {
            let mut v = self.0.lock().map_err(|_| std::io::Error::other("poisoned"))?;
            if self.1.is_some_and(|n| v.len() + b.len() > n) {
                return Err(std::io::Error::other("disk full"));
            }
            v.extend_from_slice(b);
            Ok(b.len())
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }

    fn record(k: u64) -> TrackRecord {
        TrackRecord {
            time: Timestamp::from_unix_nanos(1_800_000_000_000_000_000 + k as i64 * 1_234_567),
            track: k % 97 + 1,
            status: TrackStatus::Confirmed,
            lat_deg: 57.0 + k as f64 * 1e-6,
            lon_deg: 11.0 - k as f64 * 1e-6,
            east_m: k as f64 * 0.37,
            north_m: -(k as f64) * 0.11,
            vel_east_mps: 1.5,
            vel_north_mps: -0.25,
            speed_kn: 2.9,
            course_deg: 99.5,
            pos_cov_m2: [[40.0, 1.5], [1.5, 60.0]],
            sensors: vec![Arc::from("radar-north")],
            identity: None,
            name: None,
            ship_type: None,
            length_m: None,
            beam_m: None,
            identity_conflict: false,
        }
    }

    /// What writing inline gives: each record's line, in order.
    fn inline(recs: &[TrackRecord]) -> Vec<u8> {
        let mut out = Vec::new();
        for r in recs {
            r.write_json_bytes(&mut out);
            out.push(b'\n');
        }
        out
    }

    #[test]
    fn threaded_output_is_the_inline_output() {
        let all: Vec<TrackRecord> = (0..20_000).map(record).collect();
        let sink = Shared(Arc::new(Mutex::new(Vec::new())), None);
        let mut w = TrackWriter::spawn(Sink::Other(Box::new(sink.clone()))).expect("spawn");
        // Chunks of uneven sizes, some empty.
        let mut at = 0;
        let mut size = 0;
        while at < all.len() {
            size = (size * 7 + 13) % 600;
            let end = (at + size).min(all.len());
            let mut chunk = all[at..end].to_vec();
            w.send(&mut chunk).expect("send");
            assert!(chunk.is_empty());
            at = end;
        }
        assert_eq!(w.finish().expect("finish"), all.len() as u64);
        let got = sink.0.lock().expect("lock").clone();
        assert_eq!(got, inline(&all));
    }

    #[test]
    fn a_write_error_is_reported_not_lost() {
        let sink = Shared(Arc::new(Mutex::new(Vec::new())), Some(100_000));
        let mut w = TrackWriter::spawn(Sink::Other(Box::new(sink))).expect("spawn");
        let mut failed = false;
        for k in 0..5_000 {
            let mut chunk: Vec<TrackRecord> = (k * 100..k * 100 + 100).map(record).collect();
            if let Err(e) = w.send(&mut chunk) {
                let e = format!("{:#}", anyhow::Error::from(e));
                assert!(e.contains("disk full"), "{e}");
                failed = true;
                break;
            }
        }
        if !failed {
            let e = format!("{:#}", anyhow::Error::from(w.finish().expect_err("the sink fills up")));
            assert!(e.contains("disk full"), "{e}");
        }
    }
}
