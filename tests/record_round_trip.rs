//! Recording round trip: a demo feed replayed into the daemon with
//! `[record] dir` set is recorded whole, as feed lines with a `received`
//! time, one file per UTC hour; `skerry track`'s logic
//! (`offline::read_feeds` + the engine) run over the recording folder
//! gives the same firm (confirmed, coasting) track records as the live
//! run's default subscriber received.
//!
//! The reference is the live daemon itself: the offline and live paths
//! share the engine but not the transport, ordering or decoding of the
//! recording, which is what is checked here.

mod daemon_support;

use daemon_support::*;
use skerry::config::Config;
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::Engine;
use skerry::feed::{self, Record};
use skerry::offline::{feed_order, read_feeds};
use skerry::recording::{line_received, parse_file_name};
use skerry::time::Timestamp;
use std::collections::HashMap;
use std::path::Path;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

fn wall() -> Timestamp {
    Timestamp::from_unix_nanos(SystemTime::now().duration_since(UNIX_EPOCH).unwrap().as_nanos() as i64)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn recording_of_a_demo_feed_tracks_like_the_live_run() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-feeds/quiet-morning");
    let dir = tempfile::tempdir().unwrap();
    let env: HashMap<String, String> = [
        ("SKERRY__RECORD__DIR", dir.path().to_str().unwrap()),
        // The demo feed lies in May 2026: older than the default week.
        ("SKERRY__FEED__MAX_TIME_OFFSET_S", "1000000000.0"),
    ]
    .into_iter()
    .map(|(k, v)| (k.to_string(), v.to_string()))
    .collect();
    let cfg = Config::load(Some(&root.join("config.toml")), &env).unwrap();
    assert!(cfg.record.is_some(), "the environment alone turns recording on");
    let table = cfg.sensor_table();
    let text = std::fs::read_to_string(root.join("feed.jsonl")).unwrap();
    let lines: Vec<String> = text.lines().filter(|l| !l.trim().is_empty()).map(str::to_string).collect();

    let before = wall();
    let d = start(cfg.clone(), Engine::new(&cfg).unwrap()).await;
    let collector = tokio::spawn(collect(subscribe(d.addrs.grpc, false).await));
    let rep = replay::replay(&lines, &Target::Udp(d.addrs.udp.to_string()), &Pace { speed: 0.0, max_rate: 50_000.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
    assert_eq!(rep.records as usize, lines.len());
    wait_received(d.addrs.http, lines.len() as f64).await;
    let summary = d.stop().await;
    let after = wall();
    let live = tokio::time::timeout(Duration::from_secs(10), collector).await.unwrap().unwrap();
    assert_eq!(summary.accepted, lines.len() as u64, "{summary:?}");
    assert_eq!(summary.late, 0, "{summary:?}");
    assert_eq!((summary.recorded, summary.not_recorded), (summary.accepted, 0), "{summary:?}");
    assert_eq!(live.skipped, 0);

    // The files: named by hour, every line a feed line with `received`
    // inside the run and inside its file's hour, in arrival order (one
    // UDP input: received never goes back).
    // The engine snapshots share the folder: only the `.jsonl` files are the recording.
    let mut names: Vec<String> = std::fs::read_dir(dir.path()).unwrap().map(|e| e.unwrap().file_name().into_string().unwrap()).filter(|n| n.ends_with(".jsonl")).collect();
    names.sort();
    assert!(!names.is_empty() && names.len() <= 2, "{names:?}");
    let mut recorded: Vec<Record> = Vec::new();
    let mut last = None;
    for n in &names {
        let hour = parse_file_name(n).unwrap_or_else(|| panic!("{n} is not a recording file name"));
        let body = std::fs::read_to_string(dir.path().join(n)).unwrap();
        assert!(body.ends_with('\n'));
        for l in body.lines() {
            let r = line_received(l).unwrap_or_else(|| panic!("no received in {l}"));
            assert!(r >= before && r <= after, "{r} outside the run");
            assert_eq!(skerry::recording::hour_index(r), hour, "{l} in {n}");
            assert!(last.is_none_or(|p| p <= r), "received went back at {l}");
            last = Some(r);
            recorded.push(feed::decode_line(l.as_bytes(), &table).unwrap());
        }
    }
    // The same records as the feed (the decoder ignores `received`).
    let mut sent: Vec<Record> = lines.iter().map(|l| feed::decode_line(l.as_bytes(), &table).unwrap()).collect();
    sent.sort_by(feed_order);
    recorded.sort_by(feed_order);
    assert_eq!(recorded, sent);

    // `skerry track` on the folder.
    let feed = read_feeds(&[dir.path().to_path_buf()], &cfg).unwrap();
    assert!(feed.torn.is_empty() && feed.bad.is_empty());
    assert_eq!(feed.records.len(), lines.len());
    let offline = skerry::cli::run_engine(&cfg, &feed.records).unwrap();
    let firm: Vec<_> = offline.into_iter().filter(|t| t.status.is_firm()).collect();
    assert!(firm.len() > 100, "the demo has firm tracks: {}", firm.len());
    assert_eq!(json(&live.tracks), json(&firm));
}
