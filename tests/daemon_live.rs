//! The live path gives the offline tracks however its clock runs.
//!
//! The daemon advances the engine at release times that follow the clock
//! (`Engine::advance` after every release, and at the instant the engine
//! waits for, `Engine::next_due`). These checks hold the engine to its
//! contract by brute force over a simulated harbour with clutter, tracks
//! that leave coverage and time out, a vessel that vanishes, and a
//! transponder:
//! - advancing the engine at any instants between records (random ones,
//!   and exactly at `next_due` and a nanosecond before) gives the track
//!   records of a run with no `advance` at all, byte for byte;
//! - `next_due` is the first feed time at which `advance` acts;
//! - the daemon, fed the scene live (paced replay, so releases happen on
//!   the clock), gives the offline track records, for the default batch
//!   span and for `tracking.batch_scan_fraction = 0`.

mod daemon_support;

use daemon_support::*;
use rand::{Rng, SeedableRng};
use skerry::config::Config;
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::Engine;
use skerry::feed::{self, Record, Screen, TrackRecord};
use skerry::offline::feed_order;
use skerry::sim::{Scenario, generate};
use skerry::time::Timestamp;
use std::time::Duration;

/// One radar with a short range, so that tracks leave coverage and end by
/// the silence timeout (the one-second checks), plus one that vanishes
/// (ended by missed looks) and one with a transponder that leaves.
const SCENE: &str = r#"
[scenario]
name = "live-checks"
start = 2026-05-14T07:00:00Z
duration_s = 150.0

[site]
lat_deg = 56.45
lon_deg = 7.35

[[radars]]
id = "kestrel-point"
lat_deg = 56.45
lon_deg = 7.35
height_m = 20.0
range_sigma_m = 10.0
bearing_sigma_deg = 0.2
detection_probability = 0.9
clutter_per_scan = 8.0
max_range_m = 3000.0
scan_period_s = 2.5

[transponder]
id = "sound-ais"
position_sigma_m = 10.0

[[vessels]]
name = "outbound"
east_m = 2500.0
north_m = 100.0
course_deg = 90.0
speed_kn = 14.0

[[vessels]]
name = "crosser"
east_m = -1500.0
north_m = -800.0
course_deg = 40.0
speed_kn = 8.0

[[vessels]]
name = "vanishes"
east_m = 500.0
north_m = 1500.0
course_deg = 200.0
speed_kn = 6.0
exit_s = 60.0

[[vessels]]
name = "ferry"
east_m = -2400.0
north_m = 900.0
course_deg = 300.0
speed_kn = 15.0
mmsi = "257000123"
report_interval_s = 10.0
"#;

/// The scene with `clutter` false plots per scan: with none, records come
/// seconds apart and the timeout checks fall in the gaps.
fn scene_with(clutter: f64, seed: u64) -> (Config, Vec<Record>) {
    let sc = Scenario::from_toml_str(&SCENE.replace("clutter_per_scan = 8.0", &format!("clutter_per_scan = {clutter:.1}"))).expect("scenario");
    let g = generate(&sc, seed).expect("generate");
    let mut cfg = Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    // The scene lies in May 2026: a replay of an old feed.
    cfg.feed.max_time_offset_s = 1e9;
    let mut recs = g.feed;
    recs.sort_by(feed_order);
    (cfg, recs)
}

fn scene() -> (Config, Vec<Record>) {
    scene_with(8.0, 7)
}

fn offline(cfg: &Config, recs: &[Record]) -> Vec<TrackRecord> {
    run_engine(cfg, recs)
}

#[test]
fn engine_output_is_the_same_however_often_it_is_advanced() {
    advanced_anyhow(8.0, 7);
    // Without clutter, records come seconds apart; over several seeds a
    // silence timeout falls in such a gap, where the one-second checks
    // run on `advance` alone.
    for seed in 1..=12 {
        advanced_anyhow(0.0, seed);
    }
}

fn advanced_anyhow(clutter: f64, seed: u64) {
    let (cfg, recs) = scene_with(clutter, seed);
    let gaps = recs.windows(2).filter(|w| w[1].time().secs_since(w[0].time()) > 1.0).count();
    let want = json(&offline(&cfg, &recs));
    let ended = want.iter().filter(|l| l.contains("\"ended\"")).count();
    assert!(ended >= 2, "the scene ends tracks ({ended})");
    assert!(clutter > 0.0 || gaps > 20, "gaps of more than 1 s between records: {gaps}");
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
    for pass in 0..4 {
        let mut e = Engine::new(&cfg).expect("engine");
        let mut out = Vec::new();
        for (k, r) in recs.iter().enumerate() {
            e.handle(r, &mut out);
            // "No record earlier than `now` follows": any instant up to
            // the next record's time.
            let Some(next) = recs.get(k + 1).map(Record::time) else { break };
            let mut at = r.time();
            for _ in 0..rng.random_range(0..4) {
                let gap = next.unix_nanos() - at.unix_nanos();
                if gap <= 0 {
                    break;
                }
                at = Timestamp::from_unix_nanos(at.unix_nanos() + rng.random_range(0..=gap));
                e.advance(at, &mut out);
            }
            if let Some(d) = e.next_due()
                && d <= next
            {
                e.advance(Timestamp::from_unix_nanos(d.unix_nanos() - 1).max(at), &mut out);
                e.advance(d, &mut out);
            }
        }
        e.finish(&mut out);
        assert_eq!(json(&out), want, "clutter {clutter}, seed {seed}, pass {pass}");
    }
}

#[test]
fn next_due_is_the_first_time_advance_acts() {
    // From a fresh engine fed the first k records: advance one nanosecond
    // before next_due changes nothing, advance at next_due acts (the open
    // batch closes, or the timeout check moves on), for sampled k.
    let (cfg, recs) = scene();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(9);
    let (mut batches, mut sweeps) = (0, 0);
    for _ in 0..80 {
        let k = rng.random_range(1..recs.len());
        let mut e = Engine::new(&cfg).expect("engine");
        let mut out = Vec::new();
        for r in &recs[..k] {
            e.handle(r, &mut out);
        }
        let Some(d) = e.next_due() else { continue };
        let open = e.stats().plots > 0 && {
            // A batch is open when next_due is not a whole second.
            d.unix_nanos() % 1_000_000_000 != 0
        };
        let n = out.len();
        e.advance(Timestamp::from_unix_nanos(d.unix_nanos() - 1), &mut out);
        assert_eq!(out.len(), n, "advance before next_due emitted");
        assert_eq!(e.next_due(), Some(d), "advance before next_due acted");
        e.advance(d, &mut out);
        assert_ne!(e.next_due(), Some(d), "advance at next_due did nothing");
        if open {
            batches += 1;
        } else {
            sweeps += 1;
        }
    }
    assert!(batches > 10 && sweeps > 5, "{batches} batches, {sweeps} timeout checks");
}

/// The scene replayed live (paced) into the daemon with the real engine,
/// collected by an all-status subscriber.
async fn live(cfg: Config, lines: &[String], speed: f64) -> Vec<TrackRecord> {
    let d = start(cfg.clone(), Engine::new(&cfg).expect("engine")).await;
    let sub = subscribe(d.addrs.grpc, true).await;
    let collector = tokio::spawn(collect(sub));
    let pace = Pace { speed, max_rate: 50_000.0, ..Pace::default() };
    let rep = replay::replay(lines, &Target::Udp(d.addrs.udp.to_string()), &pace, &indicatif::ProgressBar::hidden()).await.expect("replay");
    assert_eq!(rep.records as usize, lines.len());
    wait_received(d.addrs.http, lines.len() as f64).await;
    // Let the quiet feed be released by the clock before the drain.
    tokio::time::sleep(Duration::from_millis(1500)).await;
    let s = d.stop().await;
    assert_eq!(s.late, 0);
    assert_eq!(s.processed, lines.len() as u64);
    tokio::time::timeout(Duration::from_secs(10), collector).await.expect("stream ends").expect("collector").tracks
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn live_replay_gives_the_offline_tracks() {
    let (cfg, recs) = scene();
    let table = cfg.sensor_table();
    let lines = lines(&recs, &table);
    for fraction in ["0.0625", "0"] {
        let mut c = cfg.clone();
        c.tracking.batch_scan_fraction = fraction.parse().unwrap();
        // The reference as `skerry track` computes it: decoded, ordered,
        // screened.
        let mut decoded: Vec<Record> = lines.iter().filter_map(|l| feed::decode_line(l.as_bytes(), &table).ok()).collect();
        decoded.sort_by(feed_order);
        let mut screen = Screen::new(None, 1e9);
        decoded.retain(|r| screen.admit(r).is_ok());
        let want = json(&offline(&c, &decoded));
        // 150 s of feed at 40x: under 4 s, the releases following the clock.
        let got = json(&live(c, &lines, 40.0).await);
        assert_eq!(got.len(), want.len(), "batch_scan_fraction {fraction}");
        assert_eq!(got, want, "batch_scan_fraction {fraction}");
    }
}

