//! The recording writer driven directly, with the times passed in: hourly
//! files by `received` (CONTRACT.md §7), the hour change, append on a
//! restart within the hour, a fresh line after a crash mid-line, and the
//! fsync cadence. Expected file names and line counts are worked out by
//! hand from the definitions in the contract.

mod daemon_support;

use daemon_support::{DiskHooks, HookedDisk, config};
use skerry::daemon::metrics::Metrics;
use skerry::daemon::record::{Disk, Entry, FsDisk, WriteFault, Writer, WriterSettings};
use skerry::feed::{self, Record};
use skerry::recording::line_received;
use skerry::time::Timestamp;
use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering::Relaxed};
use std::sync::Arc;

fn ts(s: &str) -> Timestamp {
    Timestamp::parse_rfc3339(s).unwrap()
}

fn plot(cfg: &skerry::config::Config, time: Timestamp, range_m: f64) -> Record {
    let radar = cfg.sensor_table().lookup("kestrel-point").unwrap();
    Record::Detection(feed::Detection { sensor: radar, time, scan: Some(1), range_m, bearing_deg: 12.5, radial_speed_mps: None, snr_db: Some(14.0) })
}

/// Counts syncs and closes of the real disk under it.
struct Counting {
    syncs: Arc<AtomicUsize>,
    closes: Arc<AtomicUsize>,
}

impl DiskHooks for Counting {
    fn sync(&mut self) {
        self.syncs.fetch_add(1, Relaxed);
    }
    fn close(&mut self) {
        self.closes.fetch_add(1, Relaxed);
    }
}

struct Rig {
    cfg: skerry::config::Config,
    metrics: Arc<Metrics>,
    syncs: Arc<AtomicUsize>,
    closes: Arc<AtomicUsize>,
}

fn rig(dir: &Path) -> (Rig, Writer) {
    let cfg = config(&[("SKERRY__RECORD__DIR", dir.to_str().unwrap())]);
    let metrics = Arc::new(Metrics::new(&cfg, ts("2026-05-14T06:00:00Z")));
    let syncs = Arc::new(AtomicUsize::new(0));
    let closes = Arc::new(AtomicUsize::new(0));
    let disk = HookedDisk::new(dir, Counting { syncs: syncs.clone(), closes: closes.clone() });
    let set = WriterSettings::new(cfg.record.as_ref().unwrap(), 10.0);
    let w = Writer::new(Box::new(disk), cfg.sensor_table(), set, metrics.clone());
    (Rig { cfg, metrics, syncs, closes }, w)
}

fn read(dir: &Path, name: &str) -> String {
    std::fs::read_to_string(dir.join(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

#[test]
fn files_follow_the_received_hour_and_the_hour_change_closes_them() {
    let dir = tempfile::tempdir().unwrap();
    let (r, mut w) = rig(dir.path());
    w.start(ts("2026-05-14T06:59:00Z"));
    let e = |rec: &str, t: f64| Entry { rec: plot(&r.cfg, ts("2026-05-14T06:59:00Z"), t), received: ts(rec) };
    // Two records of 06, then 07, then one received a hair before 07
    // from another input, queued after the first 07 record.
    w.write(&[e("2026-05-14T06:59:59.5Z", 1000.0), e("2026-05-14T06:59:59.999Z", 1001.0), e("2026-05-14T07:00:00.001Z", 1002.0), e("2026-05-14T06:59:59.9995Z", 1003.0)], ts("2026-05-14T07:00:00.002Z"));
    let six = read(dir.path(), "2026-05-14T06.jsonl");
    let seven = read(dir.path(), "2026-05-14T07.jsonl");
    assert_eq!(six.lines().count(), 2, "{six}");
    assert_eq!(seven.lines().count(), 2, "{seven}");
    assert!(seven.lines().nth(1).unwrap().contains("\"range_m\":1003.0"), "the stray 06 record went to the newest file");
    // The 06 file was closed (synced) when the 07 record came.
    assert_eq!(r.closes.load(Relaxed), 1);
    for l in six.lines().chain(seven.lines()) {
        // Each line is a feed line the decoder takes, `received` and all.
        feed::decode_line(l.as_bytes(), &r.cfg.sensor_table()).unwrap();
        assert!(line_received(l).is_some(), "{l}");
    }
    assert_eq!(line_received(six.lines().next().unwrap()), Some(ts("2026-05-14T06:59:59.5Z")));
    // The clock alone moving into 08 closes the 07 file.
    w.tick(ts("2026-05-14T07:59:59Z"));
    assert_eq!(r.closes.load(Relaxed), 1);
    w.tick(ts("2026-05-14T08:00:00.01Z"));
    assert_eq!(r.closes.load(Relaxed), 2);
    let m = r.metrics.render(ts("2026-05-14T08:00:01Z"));
    assert!(m.contains("skerry_recorded_total 4\n"), "{m}");
    assert!(m.contains("skerry_record_files 2\n"), "{m}");
    let bytes = six.len() + seven.len();
    assert!(m.contains(&format!("skerry_record_bytes_total {bytes}\n")), "{m}");
}

#[test]
fn a_restart_in_the_same_hour_appends_and_starts_on_a_fresh_line() {
    let dir = tempfile::tempdir().unwrap();
    let name = "2026-05-14T06.jsonl";
    {
        let (r, mut w) = rig(dir.path());
        w.start(ts("2026-05-14T06:10:00Z"));
        w.write(&[Entry { rec: plot(&r.cfg, ts("2026-05-14T06:10:00Z"), 1500.0), received: ts("2026-05-14T06:10:00.5Z") }], ts("2026-05-14T06:10:00.6Z"));
        w.close(ts("2026-05-14T06:10:01Z"));
    }
    // A crash in the middle of the next line.
    let mut f = std::fs::OpenOptions::new().append(true).open(dir.path().join(name)).unwrap();
    std::io::Write::write_all(&mut f, br#"{"type":"detection","sensor":"kestrel-po"#).unwrap();
    drop(f);
    let (r, mut w) = rig(dir.path());
    w.start(ts("2026-05-14T06:20:00Z"));
    w.write(&[Entry { rec: plot(&r.cfg, ts("2026-05-14T06:20:00Z"), 2500.0), received: ts("2026-05-14T06:20:00.5Z") }], ts("2026-05-14T06:20:01Z"));
    w.close(ts("2026-05-14T06:20:02Z"));
    let text = read(dir.path(), name);
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3, "{text}");
    let table = r.cfg.sensor_table();
    assert!(feed::decode_line(lines[0].as_bytes(), &table).is_ok());
    assert_eq!(lines[1], r#"{"type":"detection","sensor":"kestrel-po"#, "the torn piece stands alone");
    assert!(feed::decode_line(lines[2].as_bytes(), &table).is_ok(), "{}", lines[2]);
    assert!(lines[2].contains("2500.0"));
    // No new file was counted: it existed.
    assert!(r.metrics.render(ts("2026-05-14T06:20:03Z")).contains("skerry_record_files 1\n"));
}

#[test]
fn fsync_follows_the_interval() {
    let dir = tempfile::tempdir().unwrap();
    let (r, mut w) = rig(dir.path());
    // record.fsync_interval_s defaults to 1 s.
    let t0 = ts("2026-05-14T06:00:00Z");
    w.start(t0);
    // A batch every 0.25 s for 3 s: a sync when 1, 2 and 3 s have passed
    // since the last one.
    for k in 1..=12 {
        let now = t0.plus_secs(0.25 * k as f64);
        w.write(&[Entry { rec: plot(&r.cfg, now, 1000.0 + k as f64), received: now }], now);
    }
    assert_eq!(r.syncs.load(Relaxed), 3);
    // Nothing written since: time alone does not sync again.
    w.tick(t0.plus_secs(10.0));
    assert_eq!(r.syncs.load(Relaxed), 3);
    let now = t0.plus_secs(10.1);
    w.write(&[Entry { rec: plot(&r.cfg, now, 999.0), received: now }], now);
    assert_eq!(r.syncs.load(Relaxed), 4, "more than 1 s since the last sync");
    assert_eq!(read(dir.path(), "2026-05-14T06.jsonl").lines().count(), 13);
}

/// Fails its first write after all but `short` bytes of it.
struct CutOnce {
    short: Option<usize>,
}

impl DiskHooks for CutOnce {
    fn write(&mut self, inner: &mut FsDisk, buf: &[u8]) -> Result<(), WriteFault> {
        match self.short.take() {
            Some(k) => {
                let n = buf.len() - k;
                inner.write(&buf[..n])?;
                Err(WriteFault { written: n, error: std::io::Error::from_raw_os_error(5) })
            }
            None => inner.write(buf),
        }
    }
}

#[test]
fn a_write_cut_short_counts_the_lines_that_reached_the_file() {
    // Two lines cut (a) just before the last newline: both are in the file
    // (the next write adds the newline); (b) two bytes before it: the
    // second line is torn and not recorded.
    for (short, recorded, torn) in [(1usize, 3u64, 0usize), (2, 2, 1)] {
        let dir = tempfile::tempdir().unwrap();
        let cfg = config(&[("SKERRY__RECORD__DIR", dir.path().to_str().unwrap())]);
        let metrics = Arc::new(Metrics::new(&cfg, ts("2026-05-14T06:00:00Z")));
        let disk = HookedDisk::new(dir.path(), CutOnce { short: Some(short) });
        let mut w = Writer::new(Box::new(disk), cfg.sensor_table(), WriterSettings::new(cfg.record.as_ref().unwrap(), 10.0), metrics.clone());
        let t = ts("2026-05-14T06:00:01Z");
        w.start(t);
        let e = |r: f64| Entry { rec: plot(&cfg, t, r), received: t };
        w.write(&[e(1000.0), e(1001.0)], t);
        w.write(&[e(1002.0)], t.plus_secs(0.1));
        w.close(t.plus_secs(0.2));
        let m = metrics.render(t.plus_secs(1.0));
        assert!(m.contains(&format!("skerry_recorded_total {recorded}\n")), "short {short}: {m}");
        assert!(m.contains(&format!("skerry_not_recorded_total{{reason=\"write_error\"}} {}\n", 3 - recorded)), "short {short}: {m}");
        let text = read(dir.path(), "2026-05-14T06.jsonl");
        let table = cfg.sensor_table();
        let good = text.lines().filter(|l| feed::decode_line(l.as_bytes(), &table).is_ok()).count() as u64;
        assert_eq!(good, recorded, "{text}");
        assert_eq!(text.lines().count() - good as usize, torn, "{text}");
        // Recovery cleared the failure.
        assert!(m.contains("skerry_record_failing 0\n"), "{m}");
    }
}

/// Writes wait at a gate until the test opens it.
struct Gated {
    gate: Arc<(std::sync::Mutex<bool>, std::sync::Condvar)>,
    entered: Arc<AtomicUsize>,
}

impl DiskHooks for Gated {
    fn write(&mut self, inner: &mut FsDisk, buf: &[u8]) -> Result<(), WriteFault> {
        self.entered.fetch_add(1, Relaxed);
        let (open, cv) = &*self.gate;
        let mut g = open.lock().unwrap();
        while !*g {
            g = cv.wait(g).unwrap();
        }
        drop(g);
        inner.write(buf)
    }
}

/// Snapshots wait on `Recorder::wait_settled` (src/daemon/engine_task.rs):
/// it must not report a record settled while its write is still under
/// way, must count a record refused by a full queue as settled at once
/// (it will never be written), and must report all settled once the
/// writes are done. Definition: settled = written to the file or counted
/// as not recorded.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn settled_marks_follow_the_writes_and_the_refusals() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let cfg = config(&[("SKERRY__RECORD__DIR", dir.to_str().unwrap()), ("SKERRY__RECORD__QUEUE", "4")]);
    let metrics = Arc::new(Metrics::new(&cfg, ts("2026-05-14T06:00:00Z")));
    let gate = Arc::new((std::sync::Mutex::new(false), std::sync::Condvar::new()));
    let entered = Arc::new(AtomicUsize::new(0));
    let disk = HookedDisk::new(dir, Gated { gate: gate.clone(), entered: entered.clone() });
    let r = cfg.record.as_ref().unwrap();
    assert_eq!(r.queue, 4);
    let clock = skerry::daemon::clock::DaemonClock::start();
    let (rec, handle) = skerry::daemon::record::start(r, Box::new(disk), cfg.sensor_table(), metrics.clone(), clock, 10.0).unwrap();
    let t = ts("2026-05-14T06:00:01Z");
    assert_eq!(rec.mark(), 0);
    assert!(rec.wait_settled(0, std::time::Duration::ZERO), "nothing offered: nothing to wait for");

    // One record; the writer takes it and is held at the gate.
    rec.offer(plot(&cfg, t, 1000.0), clock.now());
    let started = std::time::Instant::now();
    while entered.load(Relaxed) == 0 {
        assert!(started.elapsed() < std::time::Duration::from_secs(10), "the writer never started a write");
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    assert_eq!(rec.mark(), 1);
    assert!(!rec.wait_settled(1, std::time::Duration::from_millis(150)), "a record still being written is not settled");

    // Five more while the writer is held: four fill the queue, the fifth
    // is refused and so settled at once.
    for i in 0..5 {
        rec.offer(plot(&cfg, t, 1100.0 + f64::from(i)), clock.now());
    }
    assert_eq!(rec.mark(), 6);
    assert_eq!(metrics.record.queue_full.load(Relaxed), 1);
    assert!(!rec.wait_settled(6, std::time::Duration::from_millis(150)), "five are not settled yet");

    // Open the gate: everything settles, and five records reach the file.
    {
        let (open, cv) = &*gate;
        *open.lock().unwrap() = true;
        cv.notify_all();
    }
    assert!(rec.wait_settled(6, std::time::Duration::from_secs(10)), "all six settle once the writes are done");
    assert_eq!(metrics.record.recorded.load(Relaxed), 5);
    handle.finish().await;
    let lines: usize = std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().path()).filter(|p| p.extension().is_some_and(|x| x == "jsonl")).map(|p| std::fs::read_to_string(p).unwrap().lines().count()).sum();
    assert_eq!(lines, 5);
}
