//! Crash safety with the real binary (issue #6, "Crash"): `skerry serve`
//! with recording and snapshots on is fed over UDP, killed with SIGKILL in
//! the middle of the feed, started again on the same folder, and fed the
//! rest; then stopped in order with SIGTERM.
//!
//! Checked:
//! - after the kill every recording file is still readable: at worst its
//!   final line is torn, and the offline reader skips it and goes on;
//! - the restarted daemon's first picture carries the confirmed tracks of
//!   the killed one under the same numbers;
//! - the firm (confirmed and coasting) track records the restarted daemon
//!   publishes from a few scans after the restart to the end equal, byte
//!   for byte, those of one run never killed given the same records: the
//!   offline engine (what `skerry track` runs) over the recording folder,
//!   which holds exactly the records the daemon accepted in both lives.

mod daemon_support;

use daemon_support::{collect, feed, lines, subscribe, wait_received};
use skerry::engine::Engine;
use skerry::feed::{TrackRecord, TrackStatus};
use skerry::offline::read_feeds;
use std::collections::BTreeSet;
use std::net::{SocketAddr, TcpStream, UdpSocket};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

struct Ports {
    udp: SocketAddr,
    grpc: SocketAddr,
    http: SocketAddr,
}

fn start(config: &Path, log: &Path, ports: &Ports) -> Child {
    let log = std::fs::File::create(log).unwrap();
    let child = Command::new(env!("CARGO_BIN_EXE_skerry"))
        .args(["serve", "--config"])
        .arg(config)
        .stdout(Stdio::null())
        .stderr(log)
        .spawn()
        .expect("start skerry serve");
    // Ready when the gRPC port accepts: the warm start comes before it.
    let deadline = Instant::now() + Duration::from_secs(60);
    while TcpStream::connect(ports.grpc).is_err() {
        assert!(Instant::now() < deadline, "skerry serve did not start");
        std::thread::sleep(Duration::from_millis(20));
    }
    child
}

/// Sends `lines` to the daemon's UDP port, a few lines per datagram.
fn send(sock: &UdpSocket, to: SocketAddr, lines: &[String]) {
    let mut buf = String::new();
    for l in lines {
        if buf.len() + l.len() + 1 > 1200 {
            sock.send_to(buf.as_bytes(), to).unwrap();
            buf.clear();
        }
        buf.push_str(l);
        buf.push('\n');
    }
    if !buf.is_empty() {
        sock.send_to(buf.as_bytes(), to).unwrap();
    }
}

fn firm(t: &TrackRecord) -> bool {
    matches!(t.status, TrackStatus::Confirmed | TrackStatus::Coasting)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigkill_mid_feed_then_restart_continues_the_tracks() {
    let tmp = tempfile::tempdir().unwrap();
    let rec_dir = tmp.path().join("rec");
    let ports = Ports {
        udp: SocketAddr::from(([127, 0, 0, 1], free_port())),
        grpc: SocketAddr::from(([127, 0, 0, 1], free_port())),
        http: SocketAddr::from(([127, 0, 0, 1], free_port())),
    };
    let text = format!(
        "{}\n[serve]\nudp_addr = \"{}\"\ngrpc_addr = \"{}\"\nhttp_addr = \"{}\"\n\n[record]\ndir = \"{}\"\nfsync_interval_s = 0.1\nsnapshot_interval_s = 0.2\nkeep_hours = 1.0e7\n",
        daemon_support::CONFIG,
        ports.udp,
        ports.grpc,
        ports.http,
        rec_dir.display()
    );
    let cfg_path = tmp.path().join("skerry.toml");
    std::fs::write(&cfg_path, &text).unwrap();
    let cfg = skerry::config::Config::load(Some(&cfg_path), &Default::default()).unwrap();

    // Eight vessels over 100 scans of 2.5 s; every scan ends in a scan_end.
    let recs = feed(&cfg, 8, 100);
    let table = cfg.sensor_table();
    let all = lines(&recs, &table);
    let scan_ends: Vec<usize> = recs.iter().enumerate().filter(|(_, r)| matches!(r, skerry::feed::Record::ScanEnd(_))).map(|(i, _)| i + 1).collect();
    let kill_at = scan_ends[49];
    let sock = UdpSocket::bind("127.0.0.1:0").unwrap();

    // First life: half the feed, at about 100 times real time.
    let mut first = start(&cfg_path, &tmp.path().join("serve-1.log"), &ports);
    let sub = subscribe(ports.grpc, false).await;
    let watcher = tokio::spawn(collect(sub));
    let mut from = 0;
    for &end in scan_ends.iter().take(50) {
        send(&sock, ports.udp, &all[from..end]);
        from = end;
        std::thread::sleep(Duration::from_millis(25));
    }
    wait_received(ports.http, kill_at as f64).await;
    // Time for a snapshot or two, then ten more scans sent while the kill
    // comes, so that it lands while records are arriving and being written.
    std::thread::sleep(Duration::from_millis(500));
    let resume = scan_ends[59];
    let sender = {
        let (sock, to, part) = (sock.try_clone().unwrap(), ports.udp, all[kill_at..resume].to_vec());
        std::thread::spawn(move || {
            for chunk in part.chunks(3) {
                send(&sock, to, chunk);
                std::thread::sleep(Duration::from_millis(2));
            }
        })
    };
    std::thread::sleep(Duration::from_millis(40));
    first.kill().expect("SIGKILL");
    sender.join().unwrap();
    from = resume;
    first.wait().unwrap();
    let before = watcher.await.unwrap();
    let confirmed_before: BTreeSet<u64> = before.tracks.iter().filter(|t| t.status == TrackStatus::Confirmed).map(|t| t.track).collect();
    assert!(confirmed_before.len() >= 6, "confirmed before the kill: {confirmed_before:?}");

    // Every recording file is readable after the kill.
    let after_kill = read_feeds(&[rec_dir.clone()], &cfg).expect("recording readable after SIGKILL");
    assert!(after_kill.torn.len() <= 1, "at most the last line of the open file is torn: {:?}", after_kill.torn.len());
    assert_eq!(after_kill.counts.total_rejected(), 0, "no other bad line");
    let snapshots = std::fs::read_dir(&rec_dir).unwrap().filter(|e| e.as_ref().unwrap().file_name().to_string_lossy().starts_with("snapshot-")).count();
    assert!(snapshots >= 1, "a snapshot was written before the kill");

    // Second life: the warm start, then the rest of the feed.
    let mut second = start(&cfg_path, &tmp.path().join("serve-2.log"), &ports);
    let mut c = skerry::daemon::proto::v1::picture_client::PictureClient::connect(format!("http://{}", ports.grpc)).await.unwrap();
    let mut s = c.subscribe(skerry::daemon::proto::v1::SubscribeRequest { statuses: vec![], area: None, min_interval_s: 0.0 }).await.unwrap().into_inner();
    let mut picture = Vec::new();
    loop {
        use skerry::daemon::proto::v1::picture_update::Update;
        match s.message().await.unwrap().expect("picture marker").update {
            Some(Update::Track(t)) => picture.push(skerry::daemon::proto::track_from_proto(&t).unwrap()),
            Some(Update::PictureSent(_)) => break,
            other => panic!("unexpected {other:?}"),
        }
    }
    let restored: BTreeSet<u64> = picture.iter().filter(|t| t.status == TrackStatus::Confirmed).map(|t| t.track).collect();
    assert_eq!(restored, confirmed_before, "the confirmed tracks come back under the same numbers");
    let watcher = tokio::spawn(collect(s));
    for &end in scan_ends.iter().skip(60) {
        send(&sock, ports.udp, &all[from..end]);
        from = end;
        std::thread::sleep(Duration::from_millis(25));
    }
    wait_received(ports.http, (all.len() - resume) as f64).await;
    let term = Command::new("kill").args(["-TERM", &second.id().to_string()]).status().unwrap();
    assert!(term.success());
    let status = second.wait().unwrap();
    assert!(status.success(), "orderly stop: {status:?}");
    let live = watcher.await.unwrap();
    assert_eq!(live.skipped, 0);

    // The run never killed, given the same records: the recording.
    let recorded = read_feeds(&[rec_dir.clone()], &cfg).unwrap();
    assert_eq!(recorded.torn.len(), after_kill.torn.len());
    let mut engine = Engine::new(&cfg).unwrap();
    let mut reference = Vec::new();
    for r in &recorded.records {
        engine.handle(r, &mut reference);
    }
    engine.finish(&mut reference);

    // From three scans after the restart to the end.
    let from_time = recs[scan_ends[62]].time();
    let pick = |v: &[TrackRecord]| -> Vec<String> { v.iter().filter(|t| firm(t) && t.time >= from_time).map(|t| t.to_json()).collect() };
    let (want, got) = (pick(&reference), pick(&live.tracks));
    eprintln!("compared {} firm records; {} torn line(s) after the kill; {} tracks restored", want.len(), after_kill.torn.len(), restored.len());
    assert!(want.len() > 200, "enough firm records compared: {}", want.len());
    assert_eq!(got, want, "firm track records after the restart equal a run never killed");
    // No track number of the first life is reused by a new track.
    let max_before = before.tracks.iter().map(|t| t.track).max().unwrap();
    for t in &live.tracks {
        assert!(t.track > max_before || confirmed_before.contains(&t.track) || picture.iter().any(|p| p.track == t.track), "track {} reused", t.track);
    }
}
