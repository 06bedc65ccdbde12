//! Shared helpers of the daemon integration tests: a test configuration,
//! a generated feed, a daemon started in-process on 127.0.0.1 port 0, a
//! subscriber that collects everything, and the reference: the same
//! tracker run directly over the time-sorted, screened feed.

#![allow(dead_code)]

use skerry::config::Config;
use skerry::daemon::proto::{self, v1};
use skerry::daemon::{self, Listeners, LocalAddrs, RunSummary, Tracker};
use skerry::feed::{self, Record, Screen, SensorTable, TrackRecord, TrackStatus};
use skerry::geo::{Antenna, Geodetic, LocalFrame, geodetic_to_ecef};
use skerry::time::Timestamp;
use std::collections::HashMap;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::{Duration, Instant};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio_util::sync::CancellationToken;

/// One radar and one transponder at the invented demo harbour. The
/// plausibility limit is wide because the feed's times (May 2026) lie
/// further in the past than the default week: a replay of an old feed.
pub const CONFIG: &str = r#"
[site]
name = "test harbour"
lat_deg = 56.45
lon_deg = 7.35

[[sensors]]
id = "kestrel-point"
kind = "radar"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 12.0
bearing_sigma_deg = 0.2
detection_probability = 0.9
clutter_per_scan = 0.0
max_range_m = 18000.0
scan_period_s = 2.5

[[sensors]]
id = "sound-ais"
kind = "transponder"
position_sigma_m = 10.0
allow_from = ["10.99.0.0/16"]

[tracking]
association = "gnn"

[feed]
max_time_offset_s = 1.0e9
max_record_bytes = 4000
"#;

pub fn config(overrides: &[(&str, &str)]) -> Config {
    let env: HashMap<String, String> = overrides.iter().map(|(k, v)| (k.to_string(), v.to_string())).collect();
    Config::from_toml_str(CONFIG, "test config", &env).expect("test config")
}

/// 2026-05-14T06:00:00Z.
pub fn t0() -> Timestamp {
    Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap()
}

/// Plots of `targets` vessels moving in straight lines, seen by
/// kestrel-point on every scan of 2.5 s, each scan closed by a scan_end.
/// Noise-free: the tests here are about transport and ordering.
pub fn feed(cfg: &Config, targets: usize, scans: u64) -> Vec<Record> {
    let table = cfg.sensor_table();
    let radar = table.lookup("kestrel-point").unwrap();
    let sc = &cfg.sensors[radar as usize];
    let site = LocalFrame::new(Geodetic::new(cfg.site.lat_deg, cfg.site.lon_deg, 0.0));
    let antenna = Antenna::new(Geodetic::new(sc.lat_deg.unwrap(), sc.lon_deg.unwrap(), sc.height_m), &site);
    let period = sc.scan_period_s.unwrap();
    let mut out = Vec::new();
    for k in 0..scans {
        let start = t0().plus_secs(k as f64 * period);
        let mut plots = Vec::new();
        for i in 0..targets {
            // Spread round the antenna, 2–9 km out, 4–14 m/s.
            let a = i as f64 * 2.399;
            let r0 = 2000.0 + 7000.0 * ((i * 37 % 100) as f64 / 100.0);
            let (e0, n0) = (antenna.site_en.x + r0 * a.sin(), antenna.site_en.y + r0 * a.cos());
            let speed = 4.0 + (i % 11) as f64;
            let heading = a * 1.7;
            let t = k as f64 * period;
            let en = nalgebra::Vector2::new(e0 + speed * heading.sin() * t, n0 + speed * heading.cos() * t);
            let g = site.plane_to_geodetic(en, 0.0);
            let (range, bearing) = antenna.range_bearing_to(geodetic_to_ecef(g));
            let bearing_deg = bearing.to_degrees().rem_euclid(360.0);
            let time = start.plus_secs(period * bearing_deg / 360.0);
            plots.push(Record::Detection(feed::Detection { sensor: radar, time, scan: Some(k), range_m: range, bearing_deg, radial_speed_mps: None, snr_db: Some(15.0) }));
        }
        plots.sort_by_key(|r| r.time());
        out.extend(plots);
        out.push(Record::ScanEnd(feed::ScanEnd { sensor: radar, time: start.plus_secs(period), scan: k, sector_deg: None }));
    }
    out
}

pub fn lines(recs: &[Record], table: &SensorTable) -> Vec<String> {
    recs.iter()
        .map(|r| {
            let mut s = String::new();
            feed::encode_record(r, table, None, &mut s);
            s
        })
        .collect()
}

/// A stand-in tracker that makes one track record per detection, numbered
/// in the order it sees them: any record lost, added or reordered on the
/// way changes its output. It lets the daemon tests check the transport
/// while the real engine is a placeholder.
#[derive(Default)]
pub struct Echo {
    n: u64,
    last: Vec<TrackRecord>,
}

impl Tracker for Echo {
    fn handle(&mut self, rec: &Record, out: &mut Vec<TrackRecord>) {
        if let Record::Detection(d) = rec {
            self.n += 1;
            let r = TrackRecord {
                time: d.time,
                track: self.n,
                status: TrackStatus::Confirmed,
                lat_deg: 56.0,
                lon_deg: 7.0,
                east_m: d.range_m,
                north_m: d.bearing_deg,
                vel_east_mps: 0.0,
                vel_north_mps: 0.0,
                speed_kn: 0.0,
                course_deg: 0.0,
                pos_cov_m2: [[1.0, 0.0], [0.0, 1.0]],
                sensors: vec![Arc::from("kestrel-point")],
                identity: None,
                name: None,
                ship_type: None,
                length_m: None,
                beam_m: None,
                identity_conflict: false,
            };
            self.last.push(r.clone());
            if self.last.len() > 5 {
                self.last.remove(0);
            }
            out.push(r);
        }
    }
    fn advance(&mut self, _now: Timestamp, _out: &mut Vec<TrackRecord>) {}
    fn finish(&mut self, _out: &mut Vec<TrackRecord>) {}
    fn picture(&self) -> Vec<TrackRecord> {
        self.last.clone()
    }
    fn live(&self) -> [u64; 3] {
        [0, self.last.len() as u64, 0]
    }
}

/// The reference: decode, sort by time (stable, as the offline command
/// does), screen duplicates, run the tracker, finish.
pub fn direct<T: Tracker>(mut tracker: T, lines: &[String], table: &SensorTable) -> Vec<TrackRecord> {
    let mut recs: Vec<Record> = lines.iter().filter_map(|l| feed::decode_line(l.as_bytes(), table).ok()).collect();
    recs.sort_by_key(|r| r.time());
    let mut screen = Screen::new(None, 1e9);
    let mut out = Vec::new();
    for r in &recs {
        if screen.admit(r).is_ok() {
            tracker.handle(r, &mut out);
        }
    }
    tracker.finish(&mut out);
    out
}

pub struct Running {
    pub addrs: LocalAddrs,
    pub token: CancellationToken,
    pub handle: tokio::task::JoinHandle<Result<RunSummary, daemon::DaemonError>>,
}

impl Running {
    pub async fn stop(self) -> RunSummary {
        self.token.cancel();
        tokio::time::timeout(Duration::from_secs(20), self.handle).await.expect("daemon stops").expect("daemon task").expect("daemon run")
    }
}

pub async fn start<T: Tracker>(cfg: Config, tracker: T) -> Running {
    let listeners = Listeners::loopback().await.expect("bind loopback");
    let addrs = listeners.local_addrs().unwrap();
    let token = CancellationToken::new();
    let handle = tokio::spawn(daemon::run_with(cfg, listeners, token.clone(), tracker));
    Running { addrs, token, handle }
}

/// Everything a subscriber receives until the stream ends.
#[derive(Debug, Default)]
pub struct Received {
    pub tracks: Vec<TrackRecord>,
    pub picture: usize,
    pub skipped: u64,
}

pub async fn subscribe(addr: SocketAddr, all: bool) -> tonic::Streaming<v1::PictureUpdate> {
    let mut c = v1::picture_client::PictureClient::connect(format!("http://{addr}")).await.expect("connect");
    let statuses = if all { vec![1, 2, 3, 4] } else { vec![] };
    let mut s = c.subscribe(v1::SubscribeRequest { statuses, area: None, min_interval_s: 0.0 }).await.expect("subscribe").into_inner();
    // The picture first, then the marker: after it the subscription is
    // live and nothing later will be missed.
    loop {
        match s.message().await.expect("stream").expect("marker").update {
            Some(v1::picture_update::Update::PictureSent(_)) => break,
            Some(v1::picture_update::Update::Track(_)) => {}
            other => panic!("unexpected {other:?}"),
        }
    }
    s
}

pub async fn collect(mut s: tonic::Streaming<v1::PictureUpdate>) -> Received {
    let mut r = Received::default();
    while let Ok(Some(m)) = s.message().await {
        match m.update {
            Some(v1::picture_update::Update::Track(t)) => r.tracks.push(proto::track_from_proto(&t).unwrap()),
            Some(v1::picture_update::Update::Skipped(n)) => r.skipped += n.updates,
            Some(v1::picture_update::Update::PictureSent(p)) => r.picture = p.tracks as usize,
            None => {}
        }
    }
    r
}

/// A minimal HTTP/1.0 GET: (status, body).
pub async fn http_get(addr: SocketAddr, path: &str) -> (u16, String) {
    let mut s = tokio::net::TcpStream::connect(addr).await.expect("connect http");
    s.write_all(format!("GET {path} HTTP/1.0\r\nHost: test\r\n\r\n").as_bytes()).await.unwrap();
    let mut buf = Vec::new();
    s.read_to_end(&mut buf).await.unwrap();
    let text = String::from_utf8_lossy(&buf).to_string();
    let (head, body) = text.split_once("\r\n\r\n").unwrap_or((&text, ""));
    let status = head.split_whitespace().nth(1).and_then(|s| s.parse().ok()).unwrap_or(0);
    (status, body.to_string())
}

/// The value of one sample in a metrics text, by its exact series name
/// with labels (e.g. `skerry_records_received_total{sensor="kestrel-point"}`).
pub fn sample(text: &str, series: &str) -> Option<f64> {
    text.lines().find_map(|l| l.strip_prefix(series).and_then(|rest| rest.strip_prefix(' ')).and_then(|v| v.trim().parse().ok()))
}

pub async fn metrics(addr: SocketAddr) -> String {
    http_get(addr, "/metrics").await.1
}

/// Polls until the daemon has received `n` records (all sensors).
pub async fn wait_received(addr: SocketAddr, n: f64) {
    let deadline = Instant::now() + Duration::from_secs(30);
    loop {
        let m = metrics(addr).await;
        let got: f64 = m.lines().filter(|l| l.starts_with("skerry_records_received_total{")).filter_map(|l| l.rsplit(' ').next()?.parse::<f64>().ok()).sum();
        if got >= n {
            return;
        }
        assert!(Instant::now() < deadline, "daemon received only {got} of {n} records");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
}

pub fn json(tracks: &[TrackRecord]) -> Vec<String> {
    tracks.iter().map(|t| t.to_json()).collect()
}

/// What a test does around a real recording folder's writes, syncs and
/// closes ([`HookedDisk`]); by default, nothing.
pub trait DiskHooks: Send + 'static {
    /// Stands in for `inner.write(buf)`.
    fn write(&mut self, inner: &mut skerry::daemon::record::FsDisk, buf: &[u8]) -> Result<(), skerry::daemon::record::WriteFault> {
        use skerry::daemon::record::Disk;
        inner.write(buf)
    }
    /// Called before each sync.
    fn sync(&mut self) {}
    /// Called before each close.
    fn close(&mut self) {}
}

/// A recording disk on a real folder: every call goes through to it, the
/// writes, syncs and closes by way of the test's hooks.
pub struct HookedDisk<H: DiskHooks> {
    pub inner: skerry::daemon::record::FsDisk,
    pub hooks: H,
}

impl<H: DiskHooks> HookedDisk<H> {
    pub fn new(dir: &std::path::Path, hooks: H) -> Self {
        HookedDisk { inner: skerry::daemon::record::FsDisk::new(dir), hooks }
    }
}

impl<H: DiskHooks> skerry::daemon::record::Disk for HookedDisk<H> {
    fn list(&mut self) -> std::io::Result<Vec<(String, u64)>> {
        self.inner.list()
    }
    fn open(&mut self, name: &str) -> std::io::Result<skerry::daemon::record::Opened> {
        self.inner.open(name)
    }
    fn ends_with_newline(&mut self) -> std::io::Result<bool> {
        self.inner.ends_with_newline()
    }
    fn write(&mut self, buf: &[u8]) -> Result<(), skerry::daemon::record::WriteFault> {
        self.hooks.write(&mut self.inner, buf)
    }
    fn sync(&mut self) -> std::io::Result<()> {
        self.hooks.sync();
        self.inner.sync()
    }
    fn close(&mut self) -> std::io::Result<()> {
        self.hooks.close();
        self.inner.close()
    }
    fn remove(&mut self, name: &str) -> std::io::Result<()> {
        self.inner.remove(name)
    }
}

/// The engine alone over `recs` (in order), then `finish`: every track
/// record it writes.
pub fn run_engine(cfg: &Config, recs: &[Record]) -> Vec<TrackRecord> {
    let mut e = skerry::engine::Engine::new(cfg).expect("engine");
    let mut out = Vec::new();
    for r in recs {
        e.handle(r, &mut out);
    }
    e.finish(&mut out);
    out
}
