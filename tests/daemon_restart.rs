//! Warm restart of the in-process daemon: a run over the first part of a
//! feed stops and leaves its snapshot; a recording folder written by hand
//! (feed lines with `received`, CONTRACT.md §7) holds that part and the
//! next, as a crash after the snapshot would leave it; the restarted
//! daemon restores the snapshot and the recording after it, serves the
//! restored picture to a new subscriber, and then tracks the rest of the
//! feed live. Its picture and every track record after the restart equal
//! those of one run never stopped: the same screen and engine over the
//! whole feed in feed order (which the daemon replay tests show the
//! daemon gives).
//!
//! Also through the warm start itself: with no snapshot the whole
//! recording rebuilds the same picture and numbering, and a changed
//! tracking configuration starts cold, numbering on after the snapshot's.

mod daemon_support;

use daemon_support::{Running, collect, json, lines, wait_received};
use rand::{Rng, SeedableRng};
use skerry::config::{Config, RecordConfig};
use skerry::daemon::proto::{self, v1};
use skerry::daemon::replay::{self, Pace, Target};
use skerry::daemon::{self, Listeners};
use skerry::feed::{self, Record, TrackRecord};
use skerry::offline::feed_order;
use skerry::sim::{Scenario, generate};
use skerry::snapshot::{FeedKey, Pipeline, SnapshotDir, warm_start};
use skerry::time::Timestamp;
use std::path::Path;
use std::time::Duration;
use tokio_util::sync::CancellationToken;

/// Two radars, the transponder receiver, five vessels (three with
/// transponders), light clutter; 150 s across the hour 07:00, so the
/// recording spans two hourly files.
const SCENARIO: &str = r#"
[scenario]
name = "restart"
start = 2026-05-14T06:58:30Z
duration_s = 150.0

[site]
lat_deg = 56.45
lon_deg = 7.35

[[radars]]
id = "kestrel-point"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 12.0
bearing_sigma_deg = 0.2
detection_probability = 0.9
clutter_per_scan = 8.0
max_range_m = 12000.0
scan_period_s = 2.5

[[radars]]
id = "gullhead"
lat_deg = 56.431
lon_deg = 7.392
height_m = 25.0
range_sigma_m = 15.0
bearing_sigma_deg = 0.3
detection_probability = 0.85
clutter_per_scan = 6.0
max_range_m = 12000.0
scan_period_s = 3.0
first_scan_s = 0.4

[transponder]
id = "sound-ais"
position_sigma_m = 10.0

[[vessels]]
name = "Corrie Dawn"
east_m = -4000.0
north_m = 250.0
course_deg = 80.0
speed_kn = 9.0
mmsi = "200100001"

[[vessels]]
name = "Brannoch Star"
east_m = 3000.0
north_m = 1200.0
course_deg = 255.0
speed_kn = 12.0
mmsi = "200100002"
legs = [{ leg = "straight", duration_s = 60.0 }, { leg = "turn", rate_deg_s = 2.0, angle_deg = 45.0 }]

[[vessels]]
name = "Selkie"
east_m = -1100.0
north_m = -2150.0
course_deg = 10.0
speed_kn = 7.0
class = "B"
mmsi = "200100003"

[[vessels]]
name = "Gannet"
east_m = 1500.0
north_m = -3000.0
course_deg = 300.0
speed_kn = 15.0

[[vessels]]
name = "Tern"
east_m = -2500.0
north_m = 3000.0
course_deg = 140.0
speed_kn = 5.0
"#;

struct Setup {
    cfg: Config,
    /// The feed in feed order, split in three by time: before the
    /// snapshot, recorded after it (before the crash), sent live after
    /// the restart.
    first: Vec<Record>,
    recorded: Vec<Record>,
    live: Vec<Record>,
}

fn setup(dir: &Path) -> Setup {
    let g = generate(&Scenario::from_toml_str(SCENARIO).expect("scenario"), 11).expect("generate");
    let mut cfg = Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    // The feed lies in May 2026: far from the daemon's clock.
    cfg.feed.max_time_offset_s = 1e9;
    cfg.record = Some(RecordConfig {
        dir: dir.display().to_string(),
        fsync_interval_s: RecordConfig::fsync_interval_s(),
        queue: RecordConfig::queue(),
        // The hand-written recording is named by its feed hours (May 2026),
        // long past: keep it from the writer's retention at start.
        keep_hours: 1.0e7,
        max_bytes: None,
        // Only the shutdown snapshot in the first run.
        snapshot_interval_s: 3600.0,
        snapshot_keep: 3,
        restore: true,
    });
    let table = cfg.sensor_table();
    // Through the text, as the daemon and the recording see the records.
    let mut recs: Vec<Record> = lines(&g.feed, &table).iter().map(|l| feed::decode_line(l.as_bytes(), &table).expect("decode")).collect();
    recs.sort_by(feed_order);
    let t0 = Timestamp::parse_rfc3339("2026-05-14T06:58:30Z").unwrap();
    let (a, b) = (t0.plus_secs(50.0), t0.plus_secs(100.0));
    let first = recs.iter().filter(|r| r.time() < a).cloned().collect();
    let recorded = recs.iter().filter(|r| r.time() >= a && r.time() < b).cloned().collect();
    let live = recs.iter().filter(|r| r.time() >= b).cloned().collect();
    Setup { cfg, first, recorded, live }
}

/// Writes the recording by hand: each record as a feed line with
/// `received` 0.2 s after its time, in hourly files by receipt, in
/// arrival order (a little shuffled against feed order), one exact
/// duplicate, and a last line torn by the crash.
fn write_recording(dir: &Path, s: &Setup) -> usize {
    let table = s.cfg.sensor_table();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
    let mut recs: Vec<Record> = s.first.iter().chain(&s.recorded).cloned().collect();
    let dup = recs[recs.len() - 40].clone();
    recs.push(dup);
    // Arrival order: records up to 0.3 s apart may swap.
    let mut keyed: Vec<(f64, Record)> = recs.into_iter().map(|r| (r.time().unix_secs_f64() + rng.random_range(0.0..0.3), r)).collect();
    keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut files: std::collections::BTreeMap<String, String> = Default::default();
    for (_, r) in &keyed {
        let received = r.time().plus_secs(0.2);
        let hour = received.to_rfc3339()[..13].to_string();
        let text = files.entry(hour).or_default();
        feed::encode_record(r, &table, Some(received), text);
        text.push('\n');
    }
    assert_eq!(files.len(), 2, "the recording spans two hours");
    let last = files.values_mut().last().unwrap();
    last.push_str(r#"{"type":"detection","sensor":"kestrel-point","time":"2026-05-14T07:00:09.9"#);
    for (hour, text) in &files {
        std::fs::write(dir.join(format!("{hour}.jsonl")), text).unwrap();
    }
    keyed.len()
}

async fn start(cfg: Config) -> Running {
    let listeners = Listeners::loopback().await.expect("bind loopback");
    let addrs = listeners.local_addrs().unwrap();
    let token = CancellationToken::new();
    let handle = tokio::spawn(daemon::run(cfg, listeners, token.clone()));
    Running { addrs, token, handle }
}

async fn send(d: &Running, recs: &[Record], cfg: &Config) {
    let l = lines(recs, &cfg.sensor_table());
    let pace = Pace { speed: 0.0, max_rate: 50_000.0, ..Pace::default() };
    let rep = replay::replay(&l, &Target::Udp(d.addrs.udp.to_string()), &pace, &indicatif::ProgressBar::hidden()).await.expect("replay");
    assert_eq!(rep.records as usize, l.len());
}

/// Subscribes to every status; returns the picture sent first and the
/// stream of what follows.
async fn subscribe(addr: std::net::SocketAddr) -> (Vec<TrackRecord>, tonic::Streaming<v1::PictureUpdate>) {
    let mut c = v1::picture_client::PictureClient::connect(format!("http://{addr}")).await.expect("connect");
    let mut s = c.subscribe(v1::SubscribeRequest { statuses: vec![1, 2, 3, 4], area: None, min_interval_s: 0.0 }).await.expect("subscribe").into_inner();
    let mut picture = Vec::new();
    loop {
        match s.message().await.expect("stream").expect("marker").update {
            Some(v1::picture_update::Update::PictureSent(_)) => return (picture, s),
            Some(v1::picture_update::Update::Track(t)) => picture.push(proto::track_from_proto(&t).unwrap()),
            other => panic!("unexpected {other:?}"),
        }
    }
}

fn handle_all(p: &mut Pipeline, recs: &[Record], out: &mut Vec<TrackRecord>) {
    for r in recs {
        let _ = p.handle(r, out);
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn restart_continues_as_if_never_stopped() {
    let tmp = tempfile::tempdir().unwrap();
    let s = setup(tmp.path());
    assert!(s.first.len() > 300 && s.recorded.len() > 300 && s.live.len() > 300);

    // The run never stopped, as the reference.
    let mut never = Pipeline::new(&s.cfg).unwrap();
    let mut ignored = Vec::new();
    handle_all(&mut never, &s.first, &mut ignored);
    handle_all(&mut never, &s.recorded, &mut ignored);
    let picture_at_restart = never.engine().picture();
    let next_at_restart = never.engine().next_track_number();
    let mut after_restart = Vec::new();
    handle_all(&mut never, &s.live, &mut after_restart);
    let picture_at_end = never.engine().picture();
    never.finish(&mut after_restart);
    assert!(picture_at_restart.iter().filter(|t| t.status.is_firm()).count() >= 4, "the picture holds firm tracks");
    assert!(after_restart.iter().filter(|t| t.status.is_firm()).count() > 100);

    // First run: the first part, then an orderly stop, which leaves the
    // snapshot.
    let d = start(s.cfg.clone()).await;
    send(&d, &s.first, &s.cfg).await;
    wait_received(d.addrs.http, s.first.len() as f64).await;
    let sum = d.stop().await;
    assert_eq!(sum.processed, s.first.len() as u64);
    let snaps = SnapshotDir::new(tmp.path(), 3).list().unwrap();
    assert_eq!(snaps.len(), 1);
    let last_first = s.first.last().unwrap();
    assert_eq!(snaps[0].path.file_name().unwrap().to_str().unwrap(), skerry::snapshot::files::file_name(last_first.time()));
    let restored = Pipeline::restore(&s.cfg, &snaps[0].read().unwrap()).expect("the shutdown snapshot restores");
    assert_eq!(restored.last_key(), Some(FeedKey::of(last_first)));

    // The crash left a recording that goes on after the snapshot.
    let recorded_lines = write_recording(tmp.path(), &s);

    // The restart: the warm start, then the rest live, with snapshots
    // every 0.2 s.
    let mut cfg2 = s.cfg.clone();
    if let Some(r) = &mut cfg2.record {
        r.snapshot_interval_s = 0.2;
    }
    let d = start(cfg2.clone()).await;
    let (picture, stream) = subscribe(d.addrs.grpc).await;
    assert_eq!(json(&picture), json(&picture_at_restart), "the restored picture");
    let collector = tokio::spawn(collect(stream));
    // A sensor sends its last few recorded records again: the engine has
    // handled them, so they are refused as late.
    let again = &s.recorded[s.recorded.len() - 20..];
    let sent: Vec<Record> = again.iter().chain(&s.live).cloned().collect();
    send(&d, &sent, &s.cfg).await;
    wait_received(d.addrs.http, sent.len() as f64).await;
    // Long enough for a few periodic snapshots.
    tokio::time::sleep(Duration::from_millis(700)).await;
    let sum = d.stop().await;
    assert_eq!((sum.processed, sum.late, sum.duplicates), (s.live.len() as u64, again.len() as u64, 0));
    assert!(sum.accounted());
    let got = tokio::time::timeout(Duration::from_secs(10), collector).await.expect("subscriber stream ends").unwrap();
    assert_eq!(got.skipped, 0);
    assert_eq!(json(&got.tracks), json(&after_restart), "every track record after the restart");
    let firm = |v: &[TrackRecord]| json(&v.iter().filter(|t| t.status.is_firm()).cloned().collect::<Vec<_>>());
    assert_eq!(firm(&got.tracks), firm(&after_restart));
    // Numbers go on: none reused.
    assert!(got.tracks.iter().filter(|t| t.track < next_at_restart).all(|t| picture_at_restart.iter().any(|p| p.track == t.track)));

    // The snapshots of the second run: at most `snapshot_keep`, the newest
    // written at shutdown (before `finish`), holding the end picture.
    let snaps = SnapshotDir::new(tmp.path(), 3).list().unwrap();
    assert!((2..=3).contains(&snaps.len()), "{} snapshots", snaps.len());
    let end = Pipeline::restore(&s.cfg, &snaps[0].read().unwrap()).expect("restore the newest");
    assert_eq!(end.last_key(), Some(FeedKey::of(s.live.last().unwrap())));
    assert_eq!(json(&end.engine().picture()), json(&picture_at_end));
    let end_next = end.engine().next_track_number();

    // A changed tracking configuration: cold, numbering carried on.
    let mut changed = s.cfg.clone();
    changed.tracking.gate_probability = 0.995;
    let w = warm_start(&changed).unwrap();
    let cold = w.report.cold.clone().expect("cold start");
    assert!(cold.contains("[tracking] section"), "{cold}");
    assert_eq!(w.report.tail.replayed, 0);
    assert_eq!(w.pipeline.engine().picture().len(), 0);
    assert_eq!(w.pipeline.engine().next_track_number(), end_next);

    // Restore turned off: cold too, and numbering still carried on.
    let mut off = s.cfg.clone();
    if let Some(r) = &mut off.record {
        r.restore = false;
    }
    let w = warm_start(&off).unwrap();
    assert_eq!(w.report.cold.as_deref(), Some("[record] restore = false"));
    assert_eq!((w.pipeline.engine().picture().len(), w.pipeline.engine().next_track_number()), (0, end_next));

    // No snapshot: the whole recording rebuilds the picture and the
    // numbering, past the exact duplicate and the torn line.
    for f in SnapshotDir::new(tmp.path(), 3).list().unwrap() {
        std::fs::remove_file(f.path).unwrap();
    }
    // The restarted daemon recorded what it was sent live, in a file named
    // by today's hour of receipt; set it aside, leaving the hand-written
    // recording of the records up to the restart.
    for e in std::fs::read_dir(tmp.path()).unwrap() {
        let p = e.unwrap().path();
        let name = p.file_name().unwrap().to_string_lossy().into_owned();
        if name.ends_with(".jsonl") && !name.starts_with("2026-05-14T") {
            std::fs::remove_file(&p).unwrap();
        }
    }
    let w = warm_start(&s.cfg).unwrap();
    assert!(w.report.snapshot.is_none() && w.report.cold.is_none());
    assert_eq!(w.report.tail.files, 2);
    assert_eq!(w.report.tail.replayed as usize, recorded_lines);
    assert_eq!((w.report.tail.duplicates, w.report.tail.bad_lines), (1, 1));
    assert_eq!(json(&w.pipeline.engine().picture()), json(&picture_at_restart));
    assert_eq!(w.pipeline.engine().next_track_number(), next_at_restart);
}

/// The warm start after a snapshot reads only the records after its key,
/// and a damaged newest snapshot falls back to the older one.
#[test]
fn damaged_newest_snapshot_falls_back_to_the_older() {
    let tmp = tempfile::tempdir().unwrap();
    let s = setup(tmp.path());
    write_recording(tmp.path(), &s);
    let dir = SnapshotDir::new(tmp.path(), 3);
    let wall = Timestamp::parse_rfc3339("2026-05-14T07:00:00Z").unwrap();
    // An older snapshot a third of the way into the first part, a newer
    // one at its end.
    let mut p = Pipeline::new(&s.cfg).unwrap();
    let mut out = Vec::new();
    let third = s.first.len() / 3;
    handle_all(&mut p, &s.first[..third], &mut out);
    dir.write(&p.snapshot_at(wall), s.first[third - 1].time()).unwrap();
    handle_all(&mut p, &s.first[third..], &mut out);
    let newest = dir.write(&p.snapshot_at(wall.plus_secs(60.0)), s.first.last().unwrap().time()).unwrap();
    handle_all(&mut p, &s.recorded, &mut out);
    let want = json(&p.engine().picture());

    let w = warm_start(&s.cfg).unwrap();
    assert_eq!(w.report.snapshot.as_deref(), Some(newest.as_path()));
    assert_eq!(w.report.tail.before as usize, s.first.len());
    assert_eq!(json(&w.pipeline.engine().picture()), want);

    // Damage the newest: the older one and a longer tail give the same.
    let mut bytes = std::fs::read(&newest).unwrap();
    let mid = bytes.len() / 2;
    bytes[mid] ^= 1;
    std::fs::write(&newest, &bytes).unwrap();
    let w = warm_start(&s.cfg).unwrap();
    assert_eq!(w.report.refused.len(), 1);
    assert!(w.report.refused[0].1.contains("checksum"), "{:?}", w.report.refused);
    assert_ne!(w.report.snapshot.as_deref(), Some(newest.as_path()));
    assert_eq!(w.report.tail.before as usize, third);
    assert_eq!(json(&w.pipeline.engine().picture()), want);
}
