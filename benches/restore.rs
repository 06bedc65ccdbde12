//! Warm restart over one hour of busy recording.
//!
//! The hour: demo-feeds/busy-afternoon (35 vessels, two radars with 60 and
//! 45 clutter plots per scan, transponder reports; 8 minutes) repeated
//! back to back, shifted by 8 minutes each time, cut at 60 minutes. It is
//! written as a recording folder (hourly files of feed lines with
//! `received` 0.25 s after each record's time, CONTRACT.md §7). Then:
//! - with a snapshot taken 60 s before the end (as the periodic snapshot
//!   leaves it at worst with the default 60 s interval): the time of
//!   `warm_start`, i.e. choosing and restoring the snapshot, reading the
//!   recording and running the tail through screen and engine;
//! - with no snapshot at all: the full replay of the hour.
//!
//! Both must give the picture that one run over the whole hour gives
//! (checked here). Figures go to BENCHMARKS.md.
//! Run: `cargo bench --bench restore`.

use skerry::config::{Config, RecordConfig};
use skerry::feed::{Record, encode_record};
use skerry::offline::read_feeds;
use skerry::snapshot::{Pipeline, SnapshotDir, warm_start};
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

const BLOCK_S: f64 = 480.0;
const HOUR_S: f64 = 3600.0;
const SNAPSHOT_BEFORE_END_S: f64 = 60.0;
const RUNS: usize = 5;

fn shifted(r: &Record, s: f64) -> Record {
    let mut r = r.clone();
    match &mut r {
        Record::Detection(d) => d.time = d.time.plus_secs(s),
        Record::ScanEnd(e) => e.time = e.time.plus_secs(s),
        Record::Report(p) => p.time = p.time.plus_secs(s),
    }
    r
}

fn with_record(cfg: &Config, dir: &Path) -> Config {
    let mut c = cfg.clone();
    c.record = Some(RecordConfig {
        dir: dir.display().to_string(),
        fsync_interval_s: RecordConfig::fsync_interval_s(),
        queue: RecordConfig::queue(),
        keep_hours: RecordConfig::keep_hours(),
        max_bytes: None,
        snapshot_interval_s: RecordConfig::snapshot_interval_s(),
        snapshot_keep: RecordConfig::snapshot_keep(),
        restore: true,
    });
    c
}

fn write_recording(dir: &Path, recs: &[Record], cfg: &Config) -> u64 {
    let table = cfg.sensor_table();
    let mut files: std::collections::BTreeMap<String, String> = Default::default();
    for r in recs {
        let received = r.time().plus_secs(0.25);
        let hour = received.to_rfc3339()[..13].to_string();
        let text = files.entry(hour).or_insert_with(|| String::with_capacity(48 << 20));
        encode_record(r, &table, Some(received), text);
        text.push('\n');
    }
    let mut bytes = 0;
    for (hour, text) in &files {
        std::fs::write(dir.join(format!("{hour}.jsonl")), text).expect("write recording");
        bytes += text.len() as u64;
    }
    bytes
}

fn secs(d: Duration) -> f64 {
    d.as_secs_f64()
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn main() {
    if !std::env::args().any(|a| a == "--bench") {
        return;
    }
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds/busy-afternoon");
    let base = Config::load(Some(&root.join("config.toml")), &Default::default()).expect("config");
    let feed = read_feeds(&[root.join("feed.jsonl")], &base).expect("feed");
    let t0 = feed.records[0].time();
    let mut hour = Vec::with_capacity(feed.records.len() * 8);
    for k in 0..(HOUR_S / BLOCK_S).ceil() as usize {
        let s = k as f64 * BLOCK_S;
        hour.extend(feed.records.iter().map(|r| shifted(r, s)).filter(|r| r.time().secs_since(t0) < HOUR_S));
    }
    hour.sort_by(skerry::offline::feed_order);
    let end = hour.last().expect("records").time();
    let plots = hour.iter().filter(|r| matches!(r, Record::Detection(_))).count();

    let tmp = tempfile::tempdir().expect("tempdir");
    let with_snap = tmp.path().join("with-snapshot");
    let no_snap = tmp.path().join("no-snapshot");
    std::fs::create_dir_all(&with_snap).unwrap();
    std::fs::create_dir_all(&no_snap).unwrap();
    let bytes = write_recording(&with_snap, &hour, &base);
    write_recording(&no_snap, &hour, &base);
    println!("restore: recording of {} records ({plots} plots), {:.1} MB, {:.0} s of feed", hour.len(), bytes as f64 / 1e6, end.secs_since(t0));

    // The run never stopped, and the snapshot 60 s before the end.
    let cut = end.plus_secs(-SNAPSHOT_BEFORE_END_S);
    let mut p = Pipeline::new(&base).expect("pipeline");
    let mut out = Vec::new();
    let started = Instant::now();
    let mut split = None;
    for (i, r) in hour.iter().enumerate() {
        if split.is_none() && r.time() > cut {
            split = Some(i);
        }
        if split == Some(i) {
            let t = Instant::now();
            let snap = p.snapshot_at(r.time());
            let encode = t.elapsed();
            let t = Instant::now();
            let path = SnapshotDir::new(&with_snap, 3).write(&snap, p.last_key().expect("key").time).expect("write snapshot");
            let write = t.elapsed();
            let s = p.engine().stats();
            println!(
                "restore: snapshot at {} with {} live tracks ({} confirmed, {} coasting, {} tentative): {:.1} kB, encoded in {:.2} ms, written (fsync, rename) in {:.2} ms -> {}",
                r.time(),
                p.engine().live_tracks(),
                s.confirmed,
                s.coasting,
                s.tentative,
                snap.len() as f64 / 1e3,
                secs(encode) * 1e3,
                secs(write) * 1e3,
                path.file_name().and_then(|n| n.to_str()).unwrap_or("?"),
            );
        }
        let _ = p.handle(r, &mut out);
        out.clear();
    }
    let one_run = secs(started.elapsed());
    let want: Vec<String> = p.engine().picture().iter().map(|t| t.to_json()).collect();
    println!("restore: one uninterrupted run over the decoded hour (engine and screen only): {one_run:.2} s");

    for (name, dir) in [("snapshot 60 s before the end + tail", &with_snap), ("no snapshot: full replay of the hour", &no_snap)] {
        let cfg = with_record(&base, dir);
        let mut times = Vec::new();
        let mut last = None;
        for _ in 0..RUNS {
            let t = Instant::now();
            let w = warm_start(&cfg).expect("warm start");
            times.push(secs(t.elapsed()));
            last = Some(w);
        }
        let w = last.expect("runs");
        let got: Vec<String> = w.pipeline.engine().picture().iter().map(|t| t.to_json()).collect();
        assert!(got == want, "{name}: the restored picture differs from one run's");
        let r = &w.report;
        println!(
            "restore: {name}: median {:.3} s, min {:.3} s, max {:.3} s over {RUNS} runs; {} files, {} lines read, {} records replayed, {} already in the snapshot; {} live tracks",
            median(times.clone()),
            times.iter().copied().fold(f64::INFINITY, f64::min),
            times.iter().copied().fold(0.0, f64::max),
            r.tail.files,
            r.tail.lines,
            r.tail.replayed,
            r.tail.before,
            r.tracks.iter().sum::<usize>(),
        );
    }
}
