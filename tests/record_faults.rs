//! Disk faults under the recording: a failing disk (every write stops
//! half-way with an I/O error) and a full disk (writes stop where the
//! space ends). In both, the tracking output is the same as with no
//! recording at all (the reference: the tracker run directly over the
//! time-sorted feed), the lost records are counted and `/healthz` names
//! the recording while writes fail; once the disk works again the
//! writer recovers, `/healthz` clears, and no line of the recording is
//! glued to a torn piece of another.

mod daemon_support;

use daemon_support::*;
use skerry::daemon::record::{Disk, FsDisk, WriteFault};
use skerry::daemon::replay::{self, Pace, Target};
use skerry::daemon::{Listeners, run_with_disk};
use skerry::feed;
use skerry::recording::is_torn;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};
use tokio_util::sync::CancellationToken;

#[derive(Clone, Copy, Debug)]
enum Mode {
    Healthy,
    /// Half of the first line of each write reaches the file, then EIO.
    Failing,
    /// This many bytes of room left, then ENOSPC (where the room ends in
    /// a write, the cut is moved off a line's end, so that a line is
    /// torn and the writer must start the next one afresh).
    Full(usize),
}

struct Faulty {
    mode: Arc<Mutex<Mode>>,
    /// Writes that failed.
    faults: Arc<Mutex<usize>>,
}

impl DiskHooks for Faulty {
    fn write(&mut self, inner: &mut FsDisk, buf: &[u8]) -> Result<(), WriteFault> {
        let mut mode = self.mode.lock().unwrap();
        let first_line = buf.iter().position(|&b| b == b'\n').unwrap_or(buf.len());
        let (room, error) = match *mode {
            Mode::Healthy => return inner.write(buf),
            Mode::Failing => (first_line / 2, std::io::Error::from_raw_os_error(5)),
            Mode::Full(room) => (room, std::io::Error::from_raw_os_error(28)),
        };
        let mut n = room.min(buf.len());
        while n < buf.len() && n >= 2 && (buf[n - 1] == b'\n' || buf[n] == b'\n') {
            n -= 1;
        }
        inner.write(&buf[..n])?;
        if let Mode::Full(r) = &mut *mode {
            *r -= n;
        }
        if n == buf.len() {
            return Ok(());
        }
        *self.faults.lock().unwrap() += 1;
        Err(WriteFault { written: n, error })
    }
}

/// Polls `/metrics` until `n` records are either recorded or counted as
/// not recorded.
async fn wait_accounted(addr: std::net::SocketAddr, n: usize) -> String {
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let m = metrics(addr).await;
        let done = sample(&m, "skerry_recorded_total").unwrap() + sample(&m, "skerry_not_recorded_total{reason=\"queue_full\"}").unwrap() + sample(&m, "skerry_not_recorded_total{reason=\"write_error\"}").unwrap();
        if done >= n as f64 {
            return m;
        }
        assert!(Instant::now() < deadline, "recording never caught up: {done} of {n}");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
}

async fn send(lines: &[String], addr: std::net::SocketAddr, max_rate: f64) {
    replay::replay(lines, &Target::Udp(addr.to_string()), &Pace { speed: 0.0, max_rate, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
}

async fn fault_and_recover(fault: Mode) {
    let dir = tempfile::tempdir().unwrap();
    let cfg = config(&[("SKERRY__RECORD__DIR", dir.path().to_str().unwrap())]);
    let table = cfg.sensor_table();
    let lines = lines(&feed(&cfg, 6, 60), &table);
    let want = direct(Echo::default(), &lines, &table);
    let mode = Arc::new(Mutex::new(Mode::Healthy));
    let faults = Arc::new(Mutex::new(0));
    let disk = HookedDisk::new(dir.path(), Faulty { mode: mode.clone(), faults: faults.clone() });

    let listeners = Listeners::loopback().await.unwrap();
    let addrs = listeners.local_addrs().unwrap();
    let token = CancellationToken::new();
    let handle = tokio::spawn(run_with_disk(cfg.clone(), listeners, token.clone(), Echo::default(), Box::new(disk)));
    let collector = tokio::spawn(collect(subscribe(addrs.grpc, true).await));

    // 60 scans of 7 lines: 20 scans healthy, 20 faulty (sent slowly, so
    // that several batches fail), 20 healthy again.
    let third = lines.len() / 3;
    send(&lines[..third], addrs.udp, 50_000.0).await;
    let m = wait_accounted(addrs.http, third).await;
    assert_eq!(sample(&m, "skerry_recorded_total"), Some(third as f64), "{m}");
    assert_eq!(sample(&m, "skerry_record_failing"), Some(0.0));

    *mode.lock().unwrap() = fault;
    send(&lines[third..2 * third], addrs.udp, 1_500.0).await;
    let m = wait_accounted(addrs.http, 2 * third).await;
    let lost = sample(&m, "skerry_not_recorded_total{reason=\"write_error\"}").unwrap();
    assert!(lost > 0.0, "{fault:?}: {m}");
    assert_eq!(sample(&m, "skerry_not_recorded_total{reason=\"queue_full\"}"), Some(0.0));
    assert_eq!(sample(&m, "skerry_record_failing"), Some(1.0));
    let (status, body) = http_get(addrs.http, "/healthz").await;
    assert_eq!(status, 503, "{body}");
    let reason = body.lines().find(|l| l.contains("recording")).unwrap_or_else(|| panic!("no recording reason in {body}"));
    let os = if matches!(fault, Mode::Failing) { "os error 5" } else { "os error 28" };
    assert!(reason.contains(os), "{reason}");
    assert!(*faults.lock().unwrap() >= 1);

    // The disk works again: the next write succeeds and health clears.
    *mode.lock().unwrap() = Mode::Healthy;
    send(&lines[2 * third..], addrs.udp, 50_000.0).await;
    let m = wait_accounted(addrs.http, lines.len()).await;
    assert_eq!(sample(&m, "skerry_record_failing"), Some(0.0), "{m}");
    let (_, body) = http_get(addrs.http, "/healthz").await;
    assert!(!body.contains("recording"), "{body}");

    token.cancel();
    let summary = tokio::time::timeout(Duration::from_secs(20), handle).await.unwrap().unwrap().unwrap();
    let got = tokio::time::timeout(Duration::from_secs(10), collector).await.unwrap().unwrap();
    // Tracking did not notice.
    assert_eq!(summary.accepted, lines.len() as u64);
    assert_eq!(summary.processed, lines.len() as u64);
    assert_eq!(json(&got.tracks), json(&want), "{fault:?}: tracking output changed");
    assert_eq!(summary.recorded + summary.not_recorded, summary.accepted);
    assert_eq!(summary.not_recorded as f64, lost);

    // The recording: every whole line decodes, one per record counted as
    // recorded; the rest are torn pieces standing alone (the start of one
    // record each, never glued to the next record).
    let mut good = 0u64;
    let mut torn = 0usize;
    for e in std::fs::read_dir(dir.path()).unwrap() {
        let text = std::fs::read_to_string(e.unwrap().path()).unwrap();
        assert!(text.ends_with('\n'));
        for l in text.lines() {
            if feed::decode_line(l.as_bytes(), &table).is_ok() {
                good += 1;
            } else {
                assert!(is_torn(l.as_bytes()), "{l}");
                // A record's start (possibly just its `{`), with no other
                // record's line after it.
                assert!(l.starts_with('{') && l.rfind("{\"type\"").is_none_or(|p| p == 0), "glued: {l}");
                torn += 1;
            }
        }
    }
    assert_eq!(good, summary.recorded, "{fault:?}");
    assert!(torn >= 1 && torn <= *faults.lock().unwrap(), "{torn} torn pieces, {} faults", faults.lock().unwrap());
    // Every record of the healthy thirds is there.
    assert!(summary.recorded >= (lines.len() - third) as u64, "{summary:?}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn failing_disk_loses_only_the_recording() {
    fault_and_recover(Mode::Failing).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn full_disk_loses_only_the_recording() {
    // Room for a few lines: the disk fills in the middle of one.
    fault_and_recover(Mode::Full(1000)).await;
}
