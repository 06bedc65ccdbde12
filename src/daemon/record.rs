//! The recording writer (CONTRACT.md §7): with `[record] dir` set, every
//! record accepted at ingest, from any input, is appended to the hour's
//! recording file as a feed line with its `received` time.
//!
//! ```text
//!  ingest (after the checks, before the reorder buffer, so late records
//!    │      are recorded too)
//!    │ try_send: never waits; a full queue counts `queue_full`
//!    ▼
//!  bounded queue (`record.queue` records) ──► writer thread ──► Disk
//! ```
//!
//! The writer runs on its own OS thread rather than a tokio task: file
//! writes and fsync block, and a slow or hung disk must stall only the
//! recording, never a runtime worker that ingest and the engine share.
//! It wakes on the first queued record, waits [`LINGER`] so that a burst
//! collects, takes everything queued at once, formats it into one buffer
//! and writes it in one call (so every batch reaches the operating system
//! when it is written); the open file is fsynced every
//! `record.fsync_interval_s`.
//!
//! The queue is a vector filled under a short lock and swapped whole by
//! the writer, not a ring channel: a ring of `record.queue` slots is
//! touched one cold cache line after another, while the batch vector
//! stays small and warm, and ingest pays one uncontended lock per record
//! and a wake-up only when the queue was empty. Both vectors are sized
//! to `record.queue` at start, so the hot path never allocates.
//!
//! # Files
//!
//! One file per UTC hour of `received`, `YYYY-MM-DDTHH.jsonl`
//! ([`crate::recording`]), opened for append, so a restart within the
//! hour continues the same file. When the hour changes (a record of a
//! later hour, or the clock alone) the open file is fsynced and closed,
//! the next record opens the next one, and retention runs; it also runs
//! at start. Retention deletes only files named like recordings, never
//! the open one ([`crate::recording::to_delete`]). Records from two inputs
//! may reach the queue a few microseconds out of order: a record of an
//! hour before the newest file opened goes into that newest file, so a
//! file is never reopened for an hour that was already left behind by a
//! later record.
//!
//! # Faults
//!
//! Every file operation goes through [`Disk`] (tests inject a failing or
//! full disk). A failed write never stops tracking: the records not
//! written are counted (`write_error`), `/healthz` is degraded with the
//! reason until a write succeeds again, and errors are logged at most once
//! per `serve.bad_input_log_interval_s`. A write that failed part-way may
//! have left part of a line in the file; before the next write the writer
//! looks at the file's last byte and, if it is not a newline, writes one,
//! so the torn piece stands as a line of its own and the next record
//! starts on a fresh line. The same check is made when an existing file
//! is opened (a crash in the middle of a line).

use super::clock::DaemonClock;
use super::ingest::LogLimiter;
use super::metrics::Metrics;
use crate::config::RecordConfig;
use crate::feed::{Record, SensorTable};
use crate::recording::{LineWriter, RecordingFile, file_name, hour_index, to_delete};
use crate::time::Timestamp;
use std::fmt::Write as _;
use std::fs::File;
use std::io::{self, Read, Seek, SeekFrom, Write};
use std::path::PathBuf;
use std::sync::atomic::AtomicU64;
use std::sync::atomic::Ordering::Relaxed;
use std::sync::{Arc, Condvar, Mutex, MutexGuard, PoisonError};
use std::time::Duration;

/// How long the writer lets records collect between takes: at most about
/// 10 writes (and wake-ups) a second at any rate, instead of one per
/// datagram. A crash of the process loses at most this much of the
/// recording beyond what the fsync interval already risks. Wake-ups of
/// the writer thread are dear: at 50 000 plots/s, 20 ms cost the daemon
/// about +12 % CPU against +8 % for 100 ms (BENCHMARKS.md).
pub const LINGER: Duration = Duration::from_millis(100);

/// How often an idle writer looks at the clock (hour change, fsync, stop).
const TICK: Duration = Duration::from_millis(100);

/// Most records formatted into one write.
const MAX_BATCH: usize = 16_384;

/// A record to record.
#[derive(Clone, Debug)]
pub struct Entry {
    pub rec: Record,
    /// When the daemon received it (daemon clock).
    pub received: Timestamp,
}

/// What [`Disk::open`] found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Opened {
    /// The file was there before.
    pub existed: bool,
    /// Its length when opened (bytes).
    pub len: u64,
}

/// A write that stopped part-way: `written` bytes of the buffer reached
/// the file before `error`.
#[derive(Debug)]
pub struct WriteFault {
    pub written: usize,
    pub error: io::Error,
}

/// The file operations of the writer, on one folder. At most one file is
/// open (the current file) at a time.
pub trait Disk: Send + 'static {
    /// Every regular file in the folder, with its size; an absent folder
    /// has none.
    fn list(&mut self) -> io::Result<Vec<(String, u64)>>;
    /// Opens `name` for append (creating it, and the folder, if needed)
    /// as the current file.
    fn open(&mut self, name: &str) -> io::Result<Opened>;
    /// Whether the current file is empty or ends in `\n`.
    fn ends_with_newline(&mut self) -> io::Result<bool>;
    /// Appends all of `buf` to the current file.
    fn write(&mut self, buf: &[u8]) -> Result<(), WriteFault>;
    /// Makes what was written to the current file durable (fsync).
    fn sync(&mut self) -> io::Result<()>;
    /// Syncs and closes the current file, if any.
    fn close(&mut self) -> io::Result<()>;
    /// Deletes `name` from the folder.
    fn remove(&mut self, name: &str) -> io::Result<()>;
}

/// [`Disk`] on the file system.
pub struct FsDisk {
    dir: PathBuf,
    file: Option<File>,
}

impl FsDisk {
    pub fn new(dir: impl Into<PathBuf>) -> FsDisk {
        FsDisk { dir: dir.into(), file: None }
    }

    fn current(&mut self) -> io::Result<&mut File> {
        self.file.as_mut().ok_or_else(|| io::Error::other("no recording file is open"))
    }
}

impl Disk for FsDisk {
    fn list(&mut self) -> io::Result<Vec<(String, u64)>> {
        let rd = match std::fs::read_dir(&self.dir) {
            Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(Vec::new()),
            r => r?,
        };
        let mut out = Vec::new();
        for e in rd {
            let e = e?;
            let Ok(name) = e.file_name().into_string() else { continue };
            let md = e.metadata()?;
            if md.is_file() {
                out.push((name, md.len()));
            }
        }
        Ok(out)
    }

    fn open(&mut self, name: &str) -> io::Result<Opened> {
        self.file = None;
        std::fs::create_dir_all(&self.dir)?;
        let path = self.dir.join(name);
        let existed = path.exists();
        // Read too: the last byte is looked at after a fault.
        let f = std::fs::OpenOptions::new().read(true).append(true).create(true).open(&path)?;
        if !existed {
            // A new file's name is durable only once its folder is synced.
            if let Ok(d) = File::open(&self.dir) {
                let _ = d.sync_all();
            }
        }
        let len = f.metadata()?.len();
        self.file = Some(f);
        Ok(Opened { existed, len })
    }

    fn ends_with_newline(&mut self) -> io::Result<bool> {
        let f = self.current()?;
        if f.metadata()?.len() == 0 {
            return Ok(true);
        }
        // In append mode every write goes to the end whatever the position.
        f.seek(SeekFrom::End(-1))?;
        let mut b = [0u8; 1];
        f.read_exact(&mut b)?;
        Ok(b[0] == b'\n')
    }

    fn write(&mut self, buf: &[u8]) -> Result<(), WriteFault> {
        let f = self.current().map_err(|error| WriteFault { written: 0, error })?;
        let mut written = 0;
        while written < buf.len() {
            match f.write(&buf[written..]) {
                Ok(0) => return Err(WriteFault { written, error: io::ErrorKind::WriteZero.into() }),
                Ok(n) => written += n,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
                Err(error) => return Err(WriteFault { written, error }),
            }
        }
        Ok(())
    }

    fn sync(&mut self) -> io::Result<()> {
        // sync_data: the data and the length needed to read it back.
        self.current()?.sync_data()
    }

    fn close(&mut self) -> io::Result<()> {
        match self.file.take() {
            Some(f) => f.sync_data(),
            None => Ok(()),
        }
    }

    fn remove(&mut self, name: &str) -> io::Result<()> {
        std::fs::remove_file(self.dir.join(name))
    }
}

/// The recording's figures, part of the daemon's [`Metrics`].
#[derive(Debug, Default)]
pub struct RecordStats {
    /// Recording is configured.
    pub enabled: bool,
    pub dir: String,
    /// Records written to a recording file.
    pub recorded: AtomicU64,
    /// Not recorded: the writer's queue was full.
    pub queue_full: AtomicU64,
    /// Not recorded: a file could not be opened or written.
    pub write_error: AtomicU64,
    /// Bytes written to recording files.
    pub bytes_written: AtomicU64,
    /// Recording files in the folder, and their bytes (as of the last
    /// retention pass, plus what was written since).
    pub files: AtomicU64,
    pub disk_bytes: AtomicU64,
    pub files_deleted: AtomicU64,
    /// While writes fail: why.
    failing: Mutex<Option<String>>,
}

impl RecordStats {
    pub fn new(cfg: Option<&RecordConfig>) -> RecordStats {
        RecordStats { enabled: cfg.is_some(), dir: cfg.map(|c| c.dir.clone()).unwrap_or_default(), ..RecordStats::default() }
    }

    /// Why the recording is failing, if it is.
    pub fn failing(&self) -> Option<String> {
        self.failing.lock().ok().and_then(|f| f.clone())
    }

    fn set_failing(&self, why: Option<String>) {
        if let Ok(mut f) = self.failing.lock() {
            *f = why;
        }
    }

    /// The `/healthz` reason while writes fail.
    pub fn degraded_reason(&self) -> Option<String> {
        self.failing().map(|why| format!("recording to {} failing: {why}", self.dir))
    }

    /// Records not recorded, all reasons.
    pub fn not_recorded(&self) -> u64 {
        self.queue_full.load(Relaxed) + self.write_error.load(Relaxed)
    }

    /// The recording's series in the Prometheus text format (nothing when
    /// recording is off).
    pub fn render(&self, o: &mut String) {
        if !self.enabled {
            return;
        }
        let _ = writeln!(o, "# HELP skerry_recorded_total Records written to the recording.\n# TYPE skerry_recorded_total counter\nskerry_recorded_total {}", self.recorded.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_not_recorded_total Accepted records left out of the recording, by reason.\n# TYPE skerry_not_recorded_total counter");
        let _ = writeln!(o, "skerry_not_recorded_total{{reason=\"queue_full\"}} {}", self.queue_full.load(Relaxed));
        let _ = writeln!(o, "skerry_not_recorded_total{{reason=\"write_error\"}} {}", self.write_error.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_record_bytes_total Bytes written to recording files.\n# TYPE skerry_record_bytes_total counter\nskerry_record_bytes_total {}", self.bytes_written.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_record_files Recording files in the folder.\n# TYPE skerry_record_files gauge\nskerry_record_files {}", self.files.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_record_disk_bytes Bytes of the recording files in the folder.\n# TYPE skerry_record_disk_bytes gauge\nskerry_record_disk_bytes {}", self.disk_bytes.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_record_files_deleted_total Recording files deleted by retention.\n# TYPE skerry_record_files_deleted_total counter\nskerry_record_files_deleted_total {}", self.files_deleted.load(Relaxed));
        let _ = writeln!(o, "# HELP skerry_record_failing 1 while recording writes fail.\n# TYPE skerry_record_failing gauge\nskerry_record_failing {}", u8::from(self.failing().is_some()));
    }
}

/// The records waiting for the writer.
struct Queue {
    state: Mutex<Waiting>,
    /// Signalled when the first record goes into an empty queue, and at
    /// stop.
    ready: Condvar,
    /// Signalled each time the writer settles a batch.
    settled: Condvar,
    cap: usize,
}

struct Waiting {
    items: Vec<Entry>,
    stop: bool,
    /// Records offered so far, queued or refused.
    offered: u64,
    /// Of those, the ones settled: written to the file (handed to the
    /// operating system), refused, or given up after a write error. In
    /// offer order, as the writer takes them.
    settled: u64,
}

impl Queue {
    fn lock(&self) -> MutexGuard<'_, Waiting> {
        // A writer that panicked holding the lock leaves the vector sound.
        self.state.lock().unwrap_or_else(PoisonError::into_inner)
    }
}

/// The ingest side: offers accepted records to the writer.
#[derive(Clone)]
pub struct Recorder {
    queue: Arc<Queue>,
    metrics: Arc<Metrics>,
}

impl Recorder {
    /// Queues `rec` for the recording, or counts it as not recorded when
    /// `record.queue` records are already waiting. Never waits beyond a
    /// lock held only for a push or a swap.
    pub fn offer(&self, rec: Record, received: Timestamp) {
        let mut q = self.queue.lock();
        q.offered += 1;
        if q.items.len() >= self.queue.cap {
            q.settled += 1;
            drop(q);
            self.metrics.record.queue_full.fetch_add(1, Relaxed);
            return;
        }
        let was_empty = q.items.is_empty();
        q.items.push(Entry { rec, received });
        drop(q);
        if was_empty {
            self.queue.ready.notify_one();
        }
    }

    /// The number of records offered so far: a mark for
    /// [`Recorder::wait_settled`].
    pub fn mark(&self) -> u64 {
        self.queue.lock().offered
    }

    /// Waits until the writer has settled the first `mark` records offered
    /// (written them to the file, or counted them as not recorded), at
    /// most `limit`. Returns whether it has. Blocking: call it off the
    /// async workers.
    pub fn wait_settled(&self, mark: u64, limit: Duration) -> bool {
        let deadline = std::time::Instant::now() + limit;
        let mut q = self.queue.lock();
        while q.settled < mark {
            let left = deadline.saturating_duration_since(std::time::Instant::now());
            if left.is_zero() {
                return false;
            }
            q = self.queue.settled.wait_timeout(q, left).unwrap_or_else(PoisonError::into_inner).0;
        }
        true
    }
}

/// Stops the writer thread.
pub struct RecordHandle {
    queue: Arc<Queue>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl RecordHandle {
    /// Call once ingest has stopped: the writer writes what is queued,
    /// syncs and closes its file, and ends.
    pub async fn finish(mut self) {
        self.queue.lock().stop = true;
        self.queue.ready.notify_one();
        if let Some(t) = self.thread.take() {
            let _ = tokio::task::spawn_blocking(move || t.join()).await;
        }
    }
}

/// The writer's settings.
#[derive(Clone, Debug)]
pub struct WriterSettings {
    pub fsync_interval_s: f64,
    pub keep_hours: f64,
    pub max_bytes: Option<u64>,
    /// Errors are logged at most once per this many seconds.
    pub log_interval_s: f64,
}

impl WriterSettings {
    pub fn new(r: &RecordConfig, log_interval_s: f64) -> WriterSettings {
        WriterSettings { fsync_interval_s: r.fsync_interval_s, keep_hours: r.keep_hours, max_bytes: r.max_bytes, log_interval_s }
    }
}

struct OpenFile {
    name: String,
    hour: i64,
}

/// The writer's logic, driven by the writer thread with the time passed
/// in (tests drive it directly with times of their own).
pub struct Writer {
    disk: Box<dyn Disk>,
    lines: LineWriter,
    set: WriterSettings,
    metrics: Arc<Metrics>,
    open: Option<OpenFile>,
    /// Hour of the newest file opened: no record goes to an older one.
    newest: Option<i64>,
    /// The open file may end inside a line (after a fault, or as found).
    check_end: bool,
    /// Written since the last fsync.
    unsynced: bool,
    last_sync: Timestamp,
    failing: bool,
    log: LogLimiter,
    /// The batch being written, and where each of its lines ends.
    buf: Vec<u8>,
    ends: Vec<usize>,
}

impl Writer {
    pub fn new(disk: Box<dyn Disk>, sensors: SensorTable, set: WriterSettings, metrics: Arc<Metrics>) -> Writer {
        let log = LogLimiter::new(set.log_interval_s);
        Writer {
            disk,
            lines: LineWriter::new(&sensors),
            set,
            metrics,
            open: None,
            newest: None,
            check_end: false,
            unsynced: false,
            last_sync: Timestamp::from_unix_nanos(0),
            failing: false,
            log,
            buf: Vec::with_capacity(1 << 16),
            ends: Vec::with_capacity(1024),
        }
    }

    /// At start: retention (sparing the file of the current hour, which
    /// this run may append to).
    pub fn start(&mut self, now: Timestamp) {
        self.last_sync = now;
        self.retention(now, Some(&file_name(hour_index(now))));
    }

    /// Writes `entries` (in queue order) to the files of their hours.
    pub fn write(&mut self, entries: &[Entry], now: Timestamp) {
        for chunk in entries.chunks(MAX_BATCH) {
            self.write_chunk(chunk, now);
        }
        self.sync_if_due(now);
    }

    fn write_chunk(&mut self, entries: &[Entry], now: Timestamp) {
        let mut i = 0;
        while i < entries.len() {
            let floor = self.newest.unwrap_or(i64::MIN);
            let hour = hour_index(entries[i].received).max(floor);
            self.buf.clear();
            self.ends.clear();
            let mut j = i;
            while j < entries.len() && hour_index(entries[j].received).max(floor) <= hour {
                self.lines.line(&entries[j].rec, entries[j].received, &mut self.buf);
                self.ends.push(self.buf.len());
                j += 1;
            }
            self.commit(hour, now);
            i = j;
        }
    }

    /// Time passes: closes the file when its hour is over, fsyncs when due.
    pub fn tick(&mut self, now: Timestamp) {
        if self.open.as_ref().is_some_and(|o| hour_index(now) > o.hour) {
            self.roll_over(now);
        }
        self.sync_if_due(now);
    }

    /// Syncs and closes the open file (at shutdown).
    pub fn close(&mut self, now: Timestamp) {
        if let Some(o) = self.open.take()
            && let Err(e) = self.disk.close()
        {
            self.fail(format!("cannot sync {}: {e}", o.name), now);
        }
        self.unsynced = false;
    }

    /// Writes the batch in `buf` to the file of `hour`.
    fn commit(&mut self, hour: i64, now: Timestamp) {
        let n = self.ends.len() as u64;
        if self.open.as_ref().is_some_and(|o| o.hour != hour) {
            self.roll_over(now);
        }
        if self.open.is_none() {
            let name = file_name(hour);
            self.newest = Some(self.newest.map_or(hour, |h| h.max(hour)));
            match self.disk.open(&name) {
                Ok(op) => {
                    if !op.existed {
                        self.metrics.record.files.fetch_add(1, Relaxed);
                    }
                    // A file found non-empty may end inside a line.
                    self.check_end = op.len > 0;
                    self.open = Some(OpenFile { name, hour });
                }
                Err(e) => return self.lost(n, format!("cannot open {name}: {e}"), now),
            }
        }
        let name = self.open.as_ref().map(|o| o.name.clone()).unwrap_or_default();
        if self.check_end {
            let fresh = match self.disk.ends_with_newline() {
                Ok(true) => Ok(()),
                Ok(false) => self.disk.write(b"\n").map(|()| self.count_bytes(1)).map_err(|f| f.error),
                Err(e) => Err(e),
            };
            match fresh {
                Ok(()) => self.check_end = false,
                Err(e) => return self.lost(n, format!("cannot write {name}: {e}"), now),
            }
        }
        let st = &self.metrics.record;
        match self.disk.write(&self.buf) {
            Ok(()) => {
                st.recorded.fetch_add(n, Relaxed);
                self.count_bytes(self.buf.len() as u64);
                self.unsynced = true;
                if self.failing {
                    self.failing = false;
                    st.set_failing(None);
                    tracing::info!(file = %name, "recording recovered: writes succeed again");
                }
            }
            Err(f) => {
                // Whole lines before the fault are in the file; so is a
                // line that lacks only its newline (the next write, or a
                // reader at the end of the file, completes it).
                let done = self.ends.partition_point(|&e| e <= f.written + 1) as u64;
                st.recorded.fetch_add(done, Relaxed);
                st.write_error.fetch_add(n - done, Relaxed);
                self.count_bytes(f.written as u64);
                self.unsynced |= f.written > 0;
                self.check_end = true;
                self.fail(format!("cannot write {name}: {}", f.error), now);
            }
        }
    }

    fn count_bytes(&self, n: u64) {
        self.metrics.record.bytes_written.fetch_add(n, Relaxed);
        self.metrics.record.disk_bytes.fetch_add(n, Relaxed);
    }

    /// `n` records not written.
    fn lost(&mut self, n: u64, why: String, now: Timestamp) {
        self.metrics.record.write_error.fetch_add(n, Relaxed);
        self.fail(why, now);
    }

    fn fail(&mut self, why: String, now: Timestamp) {
        self.failing = true;
        if let Some(held) = self.log.check(None, "record_write", now) {
            tracing::error!(dir = %self.metrics.record.dir, held_back = held, "recording: {why} (tracking goes on; {held} similar errors held back)");
        }
        self.metrics.record.set_failing(Some(why));
    }

    fn sync_if_due(&mut self, now: Timestamp) {
        if !self.unsynced || self.open.is_none() || now.secs_since(self.last_sync) < self.set.fsync_interval_s {
            return;
        }
        self.last_sync = now;
        self.unsynced = false;
        if let Err(e) = self.disk.sync() {
            let name = self.open.as_ref().map(|o| o.name.clone()).unwrap_or_default();
            self.fail(format!("cannot sync {name}: {e}"), now);
        }
    }

    /// The hour is over: sync and close the file, then retention.
    fn roll_over(&mut self, now: Timestamp) {
        self.close(now);
        let current = hour_index(now).max(self.newest.unwrap_or(i64::MIN));
        self.retention(now, Some(&file_name(current)));
    }

    fn retention(&mut self, now: Timestamp, spare: Option<&str>) {
        let st = &self.metrics.record;
        let listed = match self.disk.list() {
            Ok(l) => l,
            Err(e) => {
                if self.log.check(None, "record_retention", now).is_some() {
                    tracing::warn!(dir = %st.dir, "recording retention: cannot list the folder: {e}");
                }
                return;
            }
        };
        let mut files: Vec<RecordingFile> = listed.iter().filter_map(|(n, b)| RecordingFile::new(n, *b)).collect();
        let protect = self.open.as_ref().map(|o| o.name.as_str()).or(spare);
        let doomed = to_delete(&files, now, self.set.keep_hours, self.set.max_bytes, protect);
        for name in &doomed {
            match self.disk.remove(name) {
                Ok(()) => {
                    st.files_deleted.fetch_add(1, Relaxed);
                    files.retain(|f| &f.name != name);
                    tracing::info!(file = %name, "recording retention: deleted");
                }
                Err(e) => {
                    if self.log.check(None, "record_retention", now).is_some() {
                        tracing::warn!(file = %name, "recording retention: cannot delete: {e}");
                    }
                }
            }
        }
        st.files.store(files.len() as u64, Relaxed);
        st.disk_bytes.store(files.iter().map(|f| f.bytes).sum(), Relaxed);
    }

    /// The thread's loop, until stopped with the queue empty.
    fn run(mut self, queue: Arc<Queue>, clock: DaemonClock) {
        self.start(clock.now());
        let mut batch: Vec<Entry> = Vec::with_capacity(queue.cap);
        // Busy: the last take found records. Then the writer just sleeps
        // LINGER between takes, woken by nobody; idle, it waits to be
        // woken by the first record (or TICK).
        let mut busy = false;
        loop {
            let stopping = {
                let mut q = queue.lock();
                if !busy && q.items.is_empty() && !q.stop {
                    q = queue.ready.wait_timeout(q, TICK).unwrap_or_else(PoisonError::into_inner).0;
                }
                if q.items.is_empty() && !q.stop {
                    busy = false;
                    drop(q);
                    self.tick(clock.now());
                    continue;
                }
                q.stop
            };
            if !stopping {
                std::thread::sleep(LINGER);
            }
            std::mem::swap(&mut queue.lock().items, &mut batch);
            busy = !batch.is_empty();
            if !busy && stopping {
                break;
            }
            self.write(&batch, clock.now());
            queue.lock().settled += batch.len() as u64;
            queue.settled.notify_all();
            batch.clear();
            self.tick(clock.now());
        }
        self.close(clock.now());
        tracing::debug!("recording writer stopped");
    }
}

/// Starts the writer thread on `disk` with the `[record]` settings.
pub fn start(r: &RecordConfig, disk: Box<dyn Disk>, sensors: SensorTable, metrics: Arc<Metrics>, clock: DaemonClock, log_interval_s: f64) -> io::Result<(Recorder, RecordHandle)> {
    let queue = Arc::new(Queue { state: Mutex::new(Waiting { items: Vec::with_capacity(r.queue), stop: false, offered: 0, settled: 0 }), ready: Condvar::new(), settled: Condvar::new(), cap: r.queue });
    let writer = Writer::new(disk, sensors, WriterSettings::new(r, log_interval_s), metrics.clone());
    let q = queue.clone();
    let thread = std::thread::Builder::new().name("skerry-record".into()).spawn(move || writer.run(q, clock))?;
    tracing::info!(dir = %r.dir, "recording accepted records");
    Ok((Recorder { queue: queue.clone(), metrics }, RecordHandle { queue, thread: Some(thread) }))
}

#[cfg(test)]
mod tests {
    use crate::config::{Config, RecordConfig};
    use std::collections::HashMap;

    /// deploy/skerry.toml documents every [record] key, commented out,
    /// with its default (`dir` and `max_bytes` have none: examples), and
    /// the block uncommented loads.
    #[test]
    fn deploy_config_documents_every_record_key_with_its_default() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy/skerry.toml");
        let text = std::fs::read_to_string(&path).unwrap();
        let start = text.find("\n# [record]\n").expect("a commented [record] block");
        let block: String = text[start..]
            .lines()
            .filter_map(|l| l.strip_prefix("# "))
            .filter(|l| l.split_once(" = ").is_some_and(|(k, _)| !k.is_empty() && k.chars().all(|c| c.is_ascii_lowercase() || c == '_')))
            .map(|l| format!("{l}\n"))
            .collect();
        let documented: RecordConfig = toml::from_str(&block).unwrap();
        let defaults: RecordConfig = toml::from_str(&format!("dir = {:?}", documented.dir)).unwrap();
        assert!(documented.max_bytes.is_some(), "max_bytes is shown with an example value");
        let mut a = toml::Value::try_from(&documented).unwrap();
        a.as_table_mut().unwrap().remove("max_bytes");
        assert_eq!(a, toml::Value::try_from(&defaults).unwrap(), "deploy/skerry.toml [record] differs from the defaults");
        for key in toml::Value::try_from(&documented).unwrap().as_table().unwrap().keys() {
            assert!(text[start..].contains(&format!("\n# {key} =")), "deploy/skerry.toml lacks `{key}`");
        }
        let uncommented = format!("{}\n[record]\n{block}", &text[..start]);
        let cfg = Config::from_toml_str(&uncommented, "deploy", &HashMap::new()).unwrap();
        assert!(cfg.record.is_some());
    }
}
