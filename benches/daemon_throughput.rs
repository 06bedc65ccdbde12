//! Daemon benchmarks, run with `cargo bench --bench daemon_throughput`
//! (a plain program, not criterion: it measures rates, latencies and
//! memory over seconds of loopback traffic). Everything stays on
//! 127.0.0.1 and every loop is bounded in count and time.
//!
//! 1. UDP ingest throughput: plots offered at a fixed rate over loopback
//!    to a bare receive loop (the ceiling) and to the daemon; how many
//!    arrive and at what rate the daemon takes them.
//! 2. Latency from send to a subscriber's track record, stage by stage
//!    (datagram → engine task → tracker output → subscriber; see
//!    BENCHMARKS.md), with the default 1 s reorder window and a
//!    50 ms one: the transport alone (the Echo stand-in tracker) at
//!    20 000 plots/s, and the real engine on live radar scenes (800
//!    plots/s from one radar; 20 000 plots/s from eight), for values of
//!    `tracking.batch_scan_fraction`. Feed times are the sending clock, as
//!    from a live radar.
//! 3. Resident memory sampled over a long replay.
//!
//! Arguments choose the parts (`throughput`, `latency`, `memory`;
//! default all); the environment chooses latency cases
//! (`LATENCY_CASES=echo,engine,wide,offline`, `LATENCY_WINDOWS`,
//! `LATENCY_FRACTIONS`, `LATENCY_VESSELS`, `LATENCY_WIDE=radars,vessels,scan_s`)
//! and `LATENCY_DUMP=PREFIX` writes each record's ages to files.

#[path = "../tests/daemon_support/mod.rs"]
mod daemon_support;

use daemon_support::*;
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::Engine;
use skerry::time::Timestamp;
use skerry::daemon::Tracker;
use skerry::config::Config;
use skerry::feed::{Detection, Record, ScanEnd, SensorTable, TrackRecord};
use skerry::geo::{Antenna, Geodetic, LocalFrame, geodetic_to_ecef};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

fn now_ts() -> Timestamp {
    Timestamp::from_unix_nanos(SystemTime::now().duration_since(UNIX_EPOCH).unwrap().as_nanos() as i64)
}

/// `n` plot lines of kestrel-point, 100 per 2.5 s scan with a scan_end.
fn plot_lines(n: usize, start: Timestamp) -> Vec<String> {
    let mut v = Vec::with_capacity(n + n / 100 + 1);
    let mut t = start;
    for i in 0..n {
        let scan = i / 100;
        t = start.plus_secs(scan as f64 * 2.5 + (i % 100) as f64 * 0.025);
        v.push(format!(
            r#"{{"type":"detection","sensor":"kestrel-point","time":"{}","scan":{scan},"range_m":{:.1},"bearing_deg":{:.2},"snr_db":12.5}}"#,
            t.to_rfc3339(),
            2000.0 + (i * 7919 % 15000) as f64,
            (i % 100) as f64 * 3.6
        ));
        if i % 100 == 99 {
            v.push(format!(r#"{{"type":"scan_end","sensor":"kestrel-point","time":"{}","scan":{scan}}}"#, start.plus_secs((scan + 1) as f64 * 2.5).to_rfc3339()));
        }
    }
    let _ = t;
    v
}

fn rss_kib() -> u64 {
    std::fs::read_to_string("/proc/self/status").ok().and_then(|s| s.lines().find(|l| l.starts_with("VmRSS:")).and_then(|l| l.split_whitespace().nth(1)?.parse().ok())).unwrap_or(0)
}

async fn bare_receive(lines: &[String], rate: f64) -> (u64, f64) {
    let sock = std::sync::Arc::new(skerry::daemon::Listeners::loopback().await.unwrap().udp);
    let addr = sock.local_addr().unwrap();
    let want = lines.len() as u64;
    let rx = tokio::spawn(async move {
        let mut buf = vec![0u8; 65536];
        let mut got = 0u64;
        let mut first = None;
        let mut last = Instant::now();
        while got < want {
            match tokio::time::timeout(Duration::from_secs(2), sock.recv_from(&mut buf)).await {
                Ok(Ok((n, _))) => {
                    first.get_or_insert_with(Instant::now);
                    last = Instant::now();
                    got += buf[..n].iter().filter(|&&b| b == b'\n').count() as u64 + 1;
                }
                _ => break,
            }
        }
        (got, first.map(|f| last.duration_since(f).as_secs_f64()).unwrap_or(0.0))
    });
    replay::replay(lines, &Target::Udp(addr.to_string()), &Pace { speed: 0.0, max_rate: rate, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
    rx.await.unwrap()
}

async fn daemon_receive(lines: &[String], rate: f64) -> (f64, f64, String) {
    let cfg = config(&[]);
    let d = start(cfg.clone(), Engine::new(&cfg).unwrap()).await;
    let t = Instant::now();
    let udp = d.addrs.udp.to_string();
    let ls = lines.to_vec();
    let sender = tokio::spawn(async move { replay::replay(&ls, &Target::Udp(udp), &Pace { speed: 0.0, max_rate: rate, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap() });
    let n = lines.len() as f64;
    let mut received = 0.0;
    let mut at = 0.0;
    let deadline = Instant::now() + Duration::from_secs(60);
    let mut last_change = Instant::now();
    while Instant::now() < deadline {
        let m = metrics(d.addrs.http).await;
        let r: f64 = m.lines().filter(|l| l.starts_with("skerry_records_received_total{")).filter_map(|l| l.rsplit(' ').next()?.parse::<f64>().ok()).sum();
        if r > received {
            received = r;
            at = t.elapsed().as_secs_f64();
            last_change = Instant::now();
        }
        if received >= n || last_change.elapsed() > Duration::from_secs(2) {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let rep = sender.await.unwrap();
    let m = metrics(d.addrs.http).await;
    let drops = format!(
        "ingest-queue drops {}, UDP datagrams {}",
        sample(&m, "skerry_dropped_total{stage=\"ingest_queue\"}").unwrap_or(0.0),
        sample(&m, "skerry_udp_datagrams_total").unwrap_or(0.0)
    );
    let s = d.stop().await;
    let _ = (rep, s);
    (received, at, drops)
}

/// A tracker wrapped to time each stage inside the daemon: when a plot
/// reaches the engine task (`handle`), and when each track record leaves
/// the tracker (to the publisher), both on the wall clock.
struct Stamped<T> {
    inner: T,
    stamps: Arc<Mutex<Stamps>>,
}

#[derive(Default)]
struct Stamps {
    /// Wall clock minus plot time when the plot was handed to the tracker (s).
    at_engine: Vec<f64>,
    /// The plot times, in the order of `at_engine`.
    plot_times: Vec<i64>,
    /// (track, record time) → wall clock (ns) when the tracker emitted it.
    emitted: HashMap<(u64, i64), i64>,
}

fn wall_ns() -> i64 {
    SystemTime::now().duration_since(UNIX_EPOCH).unwrap().as_nanos() as i64
}

impl<T: Tracker> Stamped<T> {
    fn note(&self, out: &[TrackRecord]) {
        if out.is_empty() {
            return;
        }
        let now = wall_ns();
        let mut s = self.stamps.lock().unwrap();
        for r in out {
            s.emitted.entry((r.track, r.time.unix_nanos())).or_insert(now);
        }
    }
}

impl<T: Tracker> Tracker for Stamped<T> {
    fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) {
        if let Record::Detection(d) = rec {
            let age = (wall_ns() - d.time.unix_nanos()) as f64 * 1e-9;
            let mut s = self.stamps.lock().unwrap();
            s.at_engine.push(age);
            s.plot_times.push(d.time.unix_nanos());
        }
        let n = out.len();
        self.inner.handle(rec, out);
        self.note(&out[n..]);
    }
    fn advance(&mut self, now: Timestamp, out: &mut Vec<TrackRecord>) {
        let n = out.len();
        self.inner.advance(now, out);
        self.note(&out[n..]);
    }
    fn finish(&mut self, out: &mut Vec<TrackRecord>) {
        let n = out.len();
        self.inner.finish(out);
        self.note(&out[n..]);
    }
    fn picture(&self) -> Vec<TrackRecord> {
        self.inner.picture()
    }
    fn live(&self) -> [u64; 3] {
        self.inner.live()
    }
}

/// Quantiles (p50, p99, p99.9, max) of a sample, in ms.
fn quantiles(v: &mut [f64]) -> [f64; 4] {
    v.sort_by(f64::total_cmp);
    let q = |p: f64| v.get(((v.len() as f64 * p) as usize).min(v.len().saturating_sub(1))).copied().unwrap_or(f64::NAN) * 1e3;
    [q(0.5), q(0.99), q(0.999), v.last().copied().unwrap_or(f64::NAN) * 1e3]
}

fn fmt_q(name: &str, v: &mut [f64]) -> String {
    let [a, b, c, d] = quantiles(v);
    format!("  {name:<34} n {:>7}  p50 {a:>8.2}  p99 {b:>8.2}  p99.9 {c:>8.2}  max {d:>8.2} ms", v.len())
}

/// What a latency run sends: the Echo pipeline with plots stamped at the
/// sending instant, or a live radar scene for the real engine.
enum Load {
    /// `rate` plots/s in 1 ms datagrams, each stamped when sent.
    Stamped { rate: f64 },
    /// A schedule of records (offset from the start, s) re-stamped to the
    /// wall clock and sent when their time comes.
    Scene { records: Vec<Record>, table: SensorTable },
}

/// Sends the load for `secs` and returns the number of plots sent.
async fn send_load(load: &Load, secs: f64, udp: std::net::SocketAddr) -> usize {
    let sock = tokio::net::UdpSocket::bind("127.0.0.1:0").await.unwrap();
    let start = Instant::now();
    let start_wall = now_ts();
    let mut tick = tokio::time::interval(Duration::from_millis(1));
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Burst);
    let mut sent = 0usize;
    match load {
        Load::Stamped { rate } => {
            let per_tick = (rate / 1000.0).round() as usize;
            while start.elapsed().as_secs_f64() < secs {
                tick.tick().await;
                let t = now_ts();
                let mut dgram = String::new();
                for _ in 0..per_tick {
                    if !dgram.is_empty() {
                        dgram.push('\n');
                    }
                    let i = sent;
                    dgram.push_str(&format!(r#"{{"type":"detection","sensor":"kestrel-point","time":"{}","range_m":{:.1},"bearing_deg":{:.2}}}"#, t.to_rfc3339(), 1000.0 + i as f64 % 9000.0, (i % 3600) as f64 * 0.1));
                    sent += 1;
                }
                sock.send_to(dgram.as_bytes(), udp).await.unwrap();
            }
        }
        Load::Scene { records, table } => {
            let t0 = records[0].time();
            let mut k = 0;
            let mut dgram = String::new();
            let mut line = String::new();
            while k < records.len() && start.elapsed().as_secs_f64() < secs {
                tick.tick().await;
                let el = start.elapsed().as_secs_f64();
                while k < records.len() && records[k].time().secs_since(t0) <= el {
                    let mut r = records[k].clone();
                    let t = start_wall.plus_secs(r.time().secs_since(t0));
                    match &mut r {
                        Record::Detection(d) => {
                            d.time = t;
                            sent += 1;
                        }
                        Record::ScanEnd(s) => s.time = t,
                        Record::Report(p) => p.time = t,
                    }
                    line.clear();
                    skerry::feed::encode_record(&r, table, None, &mut line);
                    if dgram.len() + line.len() + 1 > 3800 {
                        sock.send_to(dgram.as_bytes(), udp).await.unwrap();
                        dgram.clear();
                    }
                    if !dgram.is_empty() {
                        dgram.push('\n');
                    }
                    dgram.push_str(&line);
                    k += 1;
                }
                if !dgram.is_empty() {
                    sock.send_to(dgram.as_bytes(), udp).await.unwrap();
                    dgram.clear();
                }
            }
        }
    }
    sent
}

/// One latency run: the daemon with `tracker` (wrapped in [`Stamped`]) and
/// the `[serve]` overrides, the load sent for `secs`; prints the stages.
async fn latency<T: Tracker>(label: &str, cfg: Config, tracker: T, load: &Load, secs: f64) {
    let window = cfg.serve.reorder_window_s;
    let stamps = Arc::new(Mutex::new(Stamps::default()));
    let d = start(cfg, Stamped { inner: tracker, stamps: stamps.clone() }).await;
    let mut sub = subscribe(d.addrs.grpc, true).await;
    let st = stamps.clone();
    let collector = tokio::spawn(async move {
        // (age at the subscriber, subscriber minus emission), seconds.
        let mut age = Vec::new();
        let mut hop = Vec::new();
        let mut skipped = 0;
        while let Ok(Some(m)) = sub.message().await {
            match m.update {
                Some(skerry::daemon::proto::v1::picture_update::Update::Track(t)) => {
                    let now = wall_ns();
                    let time = Timestamp::parse_rfc3339(&t.time).unwrap();
                    age.push((now - time.unix_nanos()) as f64 * 1e-9);
                    if let Some(e) = st.lock().unwrap().emitted.get(&(t.track, time.unix_nanos())) {
                        hop.push((now - e) as f64 * 1e-9);
                    }
                }
                Some(skerry::daemon::proto::v1::picture_update::Update::Skipped(n)) => skipped += n.updates,
                _ => {}
            }
        }
        (age, hop, skipped)
    });
    let sent = send_load(load, secs, d.addrs.udp).await;
    tokio::time::sleep(Duration::from_secs_f64(window * 2.0 + 0.5)).await;
    let m = metrics(d.addrs.http).await;
    let summary = d.stop().await;
    let (age, mut hop, skipped) = collector.await.unwrap();
    let s = stamps.lock().unwrap();
    if let Ok(path) = std::env::var("LATENCY_DUMP") {
        // Plot time (s from the first) and its age at the engine task, for a look.
        let t0 = s.plot_times.first().copied().unwrap_or(0);
        let text: String = s.plot_times.iter().zip(&s.at_engine).map(|(t, a)| format!("{:.6} {:.6}\n", (t - t0) as f64 * 1e-9, a - window)).collect();
        let name = label.chars().map(|c| if c.is_ascii_alphanumeric() { c } else { '_' }).collect::<String>();
        std::fs::write(format!("{path}-{name}.txt"), text).unwrap();
        // And each track record's age when the tracker emitted it.
        let text: String = s.emitted.iter().map(|(&(_, t), &w)| format!("{:.6} {:.6}\n", (t - t0) as f64 * 1e-9, (w - t) as f64 * 1e-9 - window)).collect();
        std::fs::write(format!("{path}-{name}-emitted.txt"), text).unwrap();
    }
    let mut at_engine: Vec<f64> = s.at_engine.iter().map(|a| a - window).collect();
    let mut beyond: Vec<f64> = age.iter().map(|a| a - window).collect();
    let mut emitted_age: Vec<f64> = s.emitted.iter().map(|(&(_, t), &w)| (w - t) as f64 * 1e-9 - window).collect();
    println!("{label}: {sent} plots sent, {} processed, {} track records at the subscriber ({skipped} skipped); batch time p99 from /metrics: {}", summary.processed, age.len(), batch_p99(&m));
    println!("{}", fmt_q("datagram → engine task, − window", &mut at_engine));
    println!("{}", fmt_q("datagram → tracker output, − window", &mut emitted_age));
    println!("{}", fmt_q("tracker output → subscriber", &mut hop));
    println!("{}", fmt_q("datagram → subscriber, − window", &mut beyond));
}

/// The 0.99 quantile of the batch-time histogram, from its buckets.
fn batch_p99(m: &str) -> String {
    let mut buckets: Vec<(f64, f64)> = m
        .lines()
        .filter(|l| l.starts_with("skerry_batch_seconds_bucket{"))
        .filter_map(|l| {
            let le = l.split("le=\"").nth(1)?.split('"').next()?;
            let le = if le == "+Inf" { f64::INFINITY } else { le.parse().ok()? };
            Some((le, l.rsplit(' ').next()?.parse().ok()?))
        })
        .collect();
    buckets.sort_by(|a, b| a.0.total_cmp(&b.0));
    let Some(&(_, total)) = buckets.last() else { return "n/a".into() };
    match buckets.iter().find(|(_, c)| *c >= 0.99 * total) {
        Some((le, _)) => format!("≤ {} ms", le * 1e3),
        None => "n/a".into(),
    }
}

fn main() {
    // `cargo bench` passes --bench; `cargo test --benches` passes nothing
    // we need: run a quick smoke version then. Other arguments choose the
    // parts to run: `throughput`, `latency`, `memory` (default: all).
    let args: Vec<String> = std::env::args().skip(1).collect();
    let quick = !args.iter().any(|a| a == "--bench");
    let parts: Vec<&str> = args.iter().map(String::as_str).filter(|a| !a.starts_with('-')).collect();
    let want = |p: &str| parts.is_empty() || parts.contains(&p);
    let rt = tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build().unwrap();
    rt.block_on(async {
        if want("throughput") {
            throughput(quick).await;
        }
        if want("latency") {
            latency_all(quick).await;
        }
        if want("memory") {
            memory(quick).await;
        }
    });
}

async fn throughput(quick: bool) {
    let n = if quick { 20_000 } else { 1_000_000 };
    let lines = plot_lines(n, Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap());
    for rate in [100_000.0, 200_000.0] {
        let (got, secs) = bare_receive(&lines, rate).await;
        println!("bare UDP loop, offered {rate:.0}/s: received {got} of {} lines in {secs:.2} s ({:.0} lines/s)", lines.len(), got as f64 / secs.max(1e-9));
        let (got, secs, drops) = daemon_receive(&lines, rate).await;
        println!("daemon UDP ingest, offered {rate:.0}/s: received {got:.0} of {} records in {secs:.2} s ({:.0} records/s); {drops}", lines.len(), got / secs.max(1e-9));
    }
}

/// Latency, stage by stage: the transport alone (Echo tracker) at
/// 20 000 plots/s, then the real engine on a live radar scene.
async fn latency_all(quick: bool) {
    let cases = std::env::var("LATENCY_CASES").unwrap_or_else(|_| "echo,engine,wide".into());
    let secs = if quick { 1.0 } else { 5.0 };
    let stamped = Load::Stamped { rate: 20_000.0 };
    // The smoke run (`cargo test --benches`) takes one case of each.
    let windows: Vec<String> = std::env::var("LATENCY_WINDOWS").unwrap_or_else(|_| if quick { "1.0".into() } else { "1.0,0.05".into() }).split(',').map(str::to_string).collect();
    let windows: Vec<&str> = windows.iter().map(String::as_str).collect();
    for &window in windows.iter().filter(|_| cases.contains("echo")) {
        latency(&format!("Echo tracker, 20000 plots/s, reorder window {window} s"), config(&[("SKERRY__SERVE__REORDER_WINDOW_S", window)]), Echo::default(), &stamped, secs).await;
    }
    // A live radar: `n` vessels seen every 2.5 s scan, each plot sent at
    // its beam time, each scan closed by a scan_end.
    let n: usize = std::env::var("LATENCY_VESSELS").ok().and_then(|v| v.parse().ok()).unwrap_or(if quick { 200 } else { 2000 });
    let scene_secs: f64 = if quick { 3.0 } else { 30.0 };
    let cfg = config(&[]);
    let scans = (scene_secs / 2.5).ceil() as u64 + 1;
    let scene = Load::Scene { records: feed(&cfg, n, scans), table: cfg.sensor_table() };
    let fractions: Vec<String> = std::env::var("LATENCY_FRACTIONS").unwrap_or_else(|_| if quick { "0".into() } else { "0.0625,0".into() }).split(',').map(str::to_string).collect();
    for &window in windows.iter().filter(|_| cases.contains("engine")) {
        for fraction in &fractions {
            let ov = [("SKERRY__SERVE__REORDER_WINDOW_S", window), ("SKERRY__TRACKING__BATCH_SCAN_FRACTION", fraction.as_str())];
            let c = config(&ov);
            let label = format!("engine (GNN), {n} vessels, {:.0} plots/s, reorder window {window} s, batch_scan_fraction {fraction}", n as f64 / 2.5);
            latency(&label, c.clone(), Engine::new(&c).unwrap(), &scene, scene_secs).await;
        }
    }
    // The real engine at 20 000 plots/s: many radars, each with a
    // harbour's worth of vessels.
    // LATENCY_WIDE = radars,vessels per radar,scan period (s).
    let wide: Vec<f64> = std::env::var("LATENCY_WIDE").unwrap_or_else(|_| if quick { "2,200,1.0".into() } else { "8,2500,1.0".into() }).split(',').filter_map(|v| v.parse().ok()).collect();
    let (radars, per, period) = (wide[0] as usize, wide[1] as usize, wide[2]);
    let wide_secs: f64 = if quick { 3.0 } else { 20.0 };
    let (wcfg, wrecs) = wide_scene(radars, per, period, (wide_secs / period).ceil() as u64 + 1);
    if cases.contains("offline") {
        // The engine alone over the same records, for scale.
        let mut e = Engine::new(&wcfg).unwrap();
        let mut out = Vec::new();
        let t = Instant::now();
        let mut worst = 0.0f64;
        let mut per_sec = Vec::new();
        let mut sec_start = Instant::now();
        let mut sec_feed = wrecs[0].time();
        for r in &wrecs {
            let t1 = Instant::now();
            e.handle(r, &mut out);
            worst = worst.max(t1.elapsed().as_secs_f64());
            if r.time().secs_since(sec_feed) >= 1.0 {
                per_sec.push((sec_start.elapsed().as_secs_f64() * 1e3, e.live_tracks()));
                sec_start = Instant::now();
                sec_feed = r.time();
            }
            out.clear();
        }
        let n = wrecs.len();
        println!("engine alone over the wide scene: {n} records in {:.2} s ({:.0} records/s); slowest handle {:.1} ms; ms of engine time per feed second: {:?}", t.elapsed().as_secs_f64(), n as f64 / t.elapsed().as_secs_f64(), worst * 1e3, per_sec.iter().map(|v| (v.0.round(), v.1)).collect::<Vec<_>>());
    }
    let wload = Load::Scene { records: wrecs, table: wcfg.sensor_table() };
    for &window in windows.iter().filter(|_| cases.contains("wide")) {
        for fraction in &fractions {
            let mut c = wcfg.clone();
            c.serve.reorder_window_s = window.parse().unwrap();
            c.tracking.batch_scan_fraction = fraction.parse().unwrap();
            let label = format!("engine (GNN), {radars} radars × {per} vessels, {period} s scans, {:.0} plots/s, reorder window {window} s, batch_scan_fraction {fraction}", (radars * per) as f64 / period);
            latency(&label, c.clone(), Engine::new(&c).unwrap(), &wload, wide_secs).await;
        }
    }
}

/// A wide approach: `radars` radars on a 5-wide grid 40 km apart,
/// each with `per` vessels spread over its coverage (1–17 km out) on
/// straight courses at 4–14 m/s,
/// scans of `period` s, each plot stamped with its beam time and each scan closed
/// by a scan_end. Noise-free: the scene is about load and timing.
fn wide_scene(radars: usize, per: usize, period: f64, scans: u64) -> (Config, Vec<Record>) {
    let mut text = String::from("[site]\nname = \"wide approach\"\nlat_deg = 56.45\nlon_deg = 7.35\n\n[tracking]\nassociation = \"gnn\"\n\n[feed]\nmax_time_offset_s = 1.0e9\nmax_record_bytes = 4000\n");
    let site = LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0));
    let mut pos = Vec::new();
    for j in 0..radars {
        let en = nalgebra::Vector2::new((j % 5) as f64 * 40_000.0, (j / 5) as f64 * 40_000.0);
        let g = site.plane_to_geodetic(en, 0.0);
        text.push_str(&format!(
            "\n[[sensors]]\nid = \"mast-{j}\"\nkind = \"radar\"\nlat_deg = {}\nlon_deg = {}\nheight_m = 30.0\nrange_sigma_m = 12.0\nbearing_sigma_deg = 0.2\ndetection_probability = 0.9\nclutter_per_scan = 0.0\nmax_range_m = 18000.0\nscan_period_s = {period}\n",
            g.lat_deg, g.lon_deg
        ));
        pos.push(Geodetic::new(g.lat_deg, g.lon_deg, 30.0));
    }
    let cfg = Config::from_toml_str(&text, "wide scene", &HashMap::new()).expect("wide scene config");
    let t0 = Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();
    let mut out = Vec::new();
    for (j, p) in pos.iter().enumerate() {
        let antenna = Antenna::new(*p, &site);
        for k in 0..scans {
            let start = t0.plus_secs(k as f64 * period + j as f64 * 0.1);
            for i in 0..per {
                let a = i as f64 * 2.399;
                // Uniform over the disc 1–17 km: area-uniform radii.
                let r0 = (1000.0f64.powi(2) + (17_000.0f64.powi(2) - 1000.0f64.powi(2)) * ((i * 7919 % 1000) as f64 + 0.5) / 1000.0).sqrt();
                let (e0, n0) = (antenna.site_en.x + r0 * a.sin(), antenna.site_en.y + r0 * a.cos());
                let speed = 4.0 + (i % 11) as f64;
                let heading = a * 1.7;
                let t = k as f64 * period;
                let en = nalgebra::Vector2::new(e0 + speed * heading.sin() * t, n0 + speed * heading.cos() * t);
                let (range_m, bearing) = antenna.range_bearing_to(geodetic_to_ecef(site.plane_to_geodetic(en, 0.0)));
                let bearing_deg = bearing.to_degrees().rem_euclid(360.0);
                out.push(Record::Detection(Detection { sensor: j as u16, time: start.plus_secs(period * bearing_deg / 360.0), scan: Some(k), range_m, bearing_deg, radial_speed_mps: None, snr_db: None }));
            }
            out.push(Record::ScanEnd(ScanEnd { sensor: j as u16, time: start.plus_secs(period), scan: k, sector_deg: None }));
        }
    }
    out.sort_by(skerry::offline::feed_order);
    (cfg, out)
}

async fn memory(quick: bool) {
    let n = if quick { 50_000 } else { 2_000_000 };
    let lines = plot_lines(n, Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap());
    let cfg = config(&[]);
    let d = start(cfg.clone(), Engine::new(&cfg).unwrap()).await;
    let udp = d.addrs.udp.to_string();
    let before = rss_kib();
    let sender = tokio::spawn(async move { replay::replay(&lines, &Target::Udp(udp), &Pace { speed: 0.0, max_rate: 150_000.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap() });
    let mut samples = Vec::new();
    while !sender.is_finished() {
        tokio::time::sleep(Duration::from_secs(1)).await;
        samples.push(rss_kib());
    }
    let rep = sender.await.unwrap();
    let s = d.stop().await;
    println!(
        "resident memory over a replay of {} records in {:.1} s: before {} MiB, each second {:?} MiB; processed {}",
        rep.records,
        rep.seconds,
        before / 1024,
        samples.iter().map(|k| k / 1024).collect::<Vec<_>>(),
        s.processed
    );
}
