//! A feed replayed to the daemon (UDP JSON lines, UDP protobuf, gRPC)
//! gives the track records that the same tracker gives when run directly
//! over the time-sorted, screened feed; a feed shuffled within the
//! reorder window gives the same as the ordered one; shutdown during a
//! replay is quick and loses nothing accepted.
//!
//! Each check runs twice: with the real engine (its output compared in
//! full, so the check bites as the engine grows) and with the `Echo`
//! stand-in, whose output names every detection in the order it came.

mod daemon_support;

use daemon_support::*;
use rand::{Rng, SeedableRng};
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::Engine;
use std::time::{Duration, Instant};

async fn replay_to(lines: &[String], target: Target, pace: Pace) -> replay::ReplayReport {
    replay::replay(lines, &target, &pace, &indicatif::ProgressBar::hidden()).await.expect("replay")
}

/// Replays `lines` to a daemon running `tracker`, collects what one
/// all-status subscriber receives until shutdown.
async fn through_daemon<T: skerry::daemon::Tracker>(cfg: skerry::config::Config, tracker: T, lines: &[String], how: &str, pace: Pace) -> (Received, skerry::daemon::RunSummary) {
    let d = start(cfg, tracker).await;
    let sub = subscribe(d.addrs.grpc, true).await;
    let collector = tokio::spawn(collect(sub));
    let target = match how {
        "grpc" => Target::Grpc(d.addrs.grpc.to_string()),
        _ => Target::Udp(d.addrs.udp.to_string()),
    };
    let pace = Pace { protobuf: how == "udp-protobuf", ..pace };
    let rep = replay_to(lines, target, pace).await;
    assert_eq!(rep.records as usize, lines.len());
    wait_received(d.addrs.http, lines.len() as f64).await;
    let summary = d.stop().await;
    let got = tokio::time::timeout(Duration::from_secs(10), collector).await.expect("subscriber stream ends").unwrap();
    (got, summary)
}

async fn check_transport(how: &str) {
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let recs = feed(&cfg, 6, 30);
    let lines = lines(&recs, &table);
    let fast = Pace { speed: 0.0, max_rate: 50_000.0, ..Pace::default() };

    let want = direct(Echo::default(), &lines, &table);
    assert_eq!(want.len(), 6 * 30);
    let (got, s) = through_daemon(cfg.clone(), Echo::default(), &lines, how, fast.clone()).await;
    assert_eq!(s.late, 0, "{how}: nothing late");
    assert_eq!(s.accepted, lines.len() as u64);
    assert_eq!(s.processed, lines.len() as u64);
    assert_eq!(got.skipped, 0);
    assert_eq!(json(&got.tracks), json(&want), "{how}: echo tracker");

    let want = direct(Engine::new(&cfg).unwrap(), &lines, &table);
    let (got, s) = through_daemon(cfg.clone(), Engine::new(&cfg).unwrap(), &lines, how, fast).await;
    assert_eq!(s.late, 0);
    assert_eq!(s.processed, lines.len() as u64);
    assert_eq!(json(&got.tracks), json(&want), "{how}: engine");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn udp_json_replay_matches_direct_run() {
    check_transport("udp").await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn udp_protobuf_replay_matches_direct_run() {
    check_transport("udp-protobuf").await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn grpc_replay_matches_direct_run() {
    check_transport("grpc").await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn paced_replay_matches_direct_run() {
    // At 20x the 12.5 s feed takes about 0.6 s: releases happen while the
    // feed is live, not only at the final drain.
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let lines = lines(&feed(&cfg, 4, 5), &table);
    let want = direct(Echo::default(), &lines, &table);
    let (got, s) = through_daemon(cfg, Echo::default(), &lines, "udp", Pace { speed: 20.0, ..Pace::default() }).await;
    assert_eq!(s.late, 0);
    assert_eq!(json(&got.tracks), json(&want));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn shuffled_within_window_matches_ordered() {
    // Sorted by time + U(0, 0.8 s): no record is sent after one more than
    // the 1 s reorder window newer than itself.
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let recs = feed(&cfg, 6, 30);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
    let mut keyed: Vec<(f64, String)> = lines(&recs, &table).into_iter().zip(&recs).map(|(l, r)| (r.time().unix_secs_f64() + rng.random_range(0.0..0.8), l)).collect();
    keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
    let shuffled: Vec<String> = keyed.into_iter().map(|x| x.1).collect();
    let ordered = lines(&recs, &table);
    assert_ne!(shuffled, ordered, "the shuffle moved something");
    for speed in [0.0, 40.0] {
        let pace = Pace { speed, max_rate: 50_000.0, ..Pace::default() };
        let want = direct(Echo::default(), &ordered, &table);
        let (got, s) = through_daemon(cfg.clone(), Echo::default(), &shuffled, "udp", pace.clone()).await;
        assert_eq!(s.late, 0, "speed {speed}");
        assert_eq!(json(&got.tracks), json(&want), "speed {speed}");
        let want = direct(Engine::new(&cfg).unwrap(), &ordered, &table);
        let (got, _) = through_daemon(cfg.clone(), Engine::new(&cfg).unwrap(), &shuffled, "udp", pace).await;
        assert_eq!(json(&got.tracks), json(&want), "speed {speed}, engine");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn shutdown_during_replay_is_quick_and_loses_nothing_accepted() {
    // The in-process form of SIGTERM: the same cancellation token the
    // signal handler cancels.
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let lines = lines(&feed(&cfg, 10, 400), &table);
    let d = start(cfg, Echo::default()).await;
    let sub = subscribe(d.addrs.grpc, true).await;
    let collector = tokio::spawn(collect(sub));
    let target = Target::Udp(d.addrs.udp.to_string());
    // 1000 s of feed at 200x: about 5 s, cut after 1 s.
    let sender = tokio::spawn(async move { replay::replay(&lines, &target, &Pace { speed: 200.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await });
    tokio::time::sleep(Duration::from_secs(1)).await;
    let t = Instant::now();
    let s = d.stop().await;
    let took = t.elapsed();
    sender.abort();
    assert!(took < Duration::from_secs(2), "shutdown took {took:?}");
    assert!(s.accepted > 100, "{s:?}");
    assert!(s.accepted < 4400, "the replay was cut: {s:?}");
    assert_eq!(s.accepted, s.processed + s.late + s.duplicates + s.dropped, "{s:?}");
    assert_eq!(s.late, 0);
    let got = tokio::time::timeout(Duration::from_secs(5), collector).await.unwrap().unwrap();
    // Every processed detection reached the subscriber, and the processed
    // records are a time-ordered prefix: 10 detections per scan_end.
    assert_eq!(got.tracks.len() as u64, s.track_records);
    assert_eq!(got.skipped, 0);
    assert!(s.track_records * 11 >= s.processed * 10 - 11 && s.track_records * 11 <= s.processed * 10 + 11, "{s:?}");
}

/// `skerry serve` as a process: SIGTERM during a replay exits 0 within
/// 2 s, and its final log line accounts for every accepted record.
#[test]
fn sigterm_during_replay_exits_zero_quickly() {
    use std::io::{BufRead, BufReader};
    use std::process::{Command, Stdio};
    let free = || std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
    let (udp_port, grpc_port, http_port) = (std::net::UdpSocket::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port(), free(), free());
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("skerry.toml");
    let text = format!("{CONFIG}\n[serve]\nudp_addr = \"127.0.0.1:{udp_port}\"\ngrpc_addr = \"127.0.0.1:{grpc_port}\"\nhttp_addr = \"127.0.0.1:{http_port}\"\n");
    std::fs::write(&path, text).unwrap();
    let mut child = Command::new(env!("CARGO_BIN_EXE_skerry")).args(["serve", "--config"]).arg(&path).stderr(Stdio::piped()).stdout(Stdio::null()).spawn().expect("start skerry serve");
    let stderr = child.stderr.take().unwrap();
    let (tx, rx) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        for l in BufReader::new(stderr).lines().map_while(Result::ok) {
            let _ = tx.send(l);
        }
    });
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let l = rx.recv_timeout(deadline.saturating_duration_since(Instant::now())).expect("serve starts");
        if l.contains("skerry serving") {
            break;
        }
    }
    let cfg = config(&[]);
    let lines = lines(&feed(&cfg, 10, 400), &cfg.sensor_table());
    let rt = tokio::runtime::Runtime::new().unwrap();
    let target = Target::Udp(format!("127.0.0.1:{udp_port}"));
    let sender = rt.spawn(async move { replay::replay(&lines, &target, &Pace { speed: 200.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await });
    std::thread::sleep(Duration::from_secs(1));
    let t = Instant::now();
    Command::new("kill").args(["-TERM", &child.id().to_string()]).status().unwrap();
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        assert!(t.elapsed() < Duration::from_secs(2), "no exit within 2 s of SIGTERM");
        std::thread::sleep(Duration::from_millis(10));
    };
    sender.abort();
    assert!(status.success(), "{status:?}");
    let stopped = rx.try_iter().find(|l| l.contains("skerry stopped")).expect("final log line");
    let field = |k: &str| -> u64 { stopped.split_whitespace().find_map(|w| w.strip_prefix(&format!("{k}="))).and_then(|v| v.parse().ok()).unwrap_or_else(|| panic!("{k} in {stopped}")) };
    assert!(field("accepted") > 0);
    assert_eq!(field("accepted"), field("processed") + field("late") + field("duplicate") + field("dropped"), "{stopped}");
}
