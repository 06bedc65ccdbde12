//! `skerry serve` with its trade listeners (CONTRACT.md §8): ASTERIX on
//! `serve.asterix_udp`, NMEA on a transponder's `nmea_udp`, through the
//! same ingest as JSON: counted per sensor and reason, ordered, tracked;
//! the radar's measured rotation period in `/metrics` and in the health
//! stream; the static data of AIS type 5 on the track records.
//!
//! The AIS sentences are the pyais-made session's
//! (tests/fixtures/ais_session.json), sent without their tag blocks so
//! that the daemon's clock times them. The ASTERIX records are encoded
//! here from Category 010 ed. 1.1 and 034 ed. 1.29 (the same layouts as
//! tests/trade_equivalence.rs), stamped with today's time of day.

mod daemon_support;

use daemon_support::*;
use skerry::config::Config;
use skerry::daemon::proto::v1;
use skerry::daemon::{self, Listeners};
use std::time::{Duration, SystemTime, UNIX_EPOCH};
use tokio_util::sync::CancellationToken;

const CONFIG: &str = r#"
[site]
name = "Brannoch Sound (invented)"
lat_deg = 56.45
lon_deg = 7.35

[[sensors]]
id = "north-mast"
kind = "radar"
lat_deg = 56.462
lon_deg = 7.343
range_sigma_m = 12.0
bearing_sigma_deg = 0.3
max_range_m = 18000.0
scan_period_s = 2.5
asterix_sac = 25
asterix_sic = 201

[[sensors]]
id = "harbour-ais"
kind = "transponder"
position_sigma_m = 10.0
nmea_udp = "127.0.0.1:0"

[tracking]
association = "gnn"

[serve]
asterix_udp = "127.0.0.1:0"
udp_addr = "127.0.0.1:0"
grpc_addr = "127.0.0.1:0"
http_addr = "127.0.0.1:0"
reorder_window_s = 0.2
reorder_idle_s = 1.0
"#;

fn config() -> Config {
    Config::from_toml_str(CONFIG, "trade daemon test", &Default::default()).unwrap()
}

/// Now, as a 24-bit time of day in 1/128 s.
fn tod_now(offset_s: f64) -> u32 {
    let d = SystemTime::now().duration_since(UNIX_EPOCH).unwrap().as_secs_f64() + offset_s;
    ((d.rem_euclid(86_400.0)) * 128.0) as u32 % (86_400 * 128)
}

fn block(cat: u8, body: &[u8]) -> Vec<u8> {
    let mut b = vec![cat];
    b.extend_from_slice(&((body.len() + 3) as u16).to_be_bytes());
    b.extend_from_slice(body);
    b
}

/// Category 010 target report: FSPEC 0xF4 = FRN 1, 2, 3, 4, 6 (I010/010,
/// /000, /020, /140, /040), TYP = 3 (PSR).
fn plot(sic: u8, tod: u32, rho_m: u16, theta: u16) -> Vec<u8> {
    let mut r = vec![0xF4, 25, sic, 1, 0x60];
    r.extend_from_slice(&tod.to_be_bytes()[1..]);
    r.extend_from_slice(&rho_m.to_be_bytes());
    r.extend_from_slice(&theta.to_be_bytes());
    r
}

/// Category 034 north marker with the rotation period: FSPEC 0xE8 = FRN
/// 1, 2, 3, 5 (I034/010, /000, /030, /041).
fn north(tod: u32, period_128: u16) -> Vec<u8> {
    let mut r = vec![0xE8, 25, 201, 1];
    r.extend_from_slice(&tod.to_be_bytes()[1..]);
    r.extend_from_slice(&period_128.to_be_bytes());
    r
}

fn untagged(line: &str) -> &str {
    match line.strip_prefix('\\') {
        Some(rest) => rest.split_once('\\').map(|(_, s)| s).unwrap_or(rest),
        None => line,
    }
}

#[test]
fn trade_daemon_binds_every_configured_listener() {
    let rt = tokio::runtime::Builder::new_current_thread().enable_all().build().unwrap();
    rt.block_on(async {
        let l = Listeners::bind_config(&config()).await.unwrap();
        let a = l.local_addrs().unwrap();
        assert!(a.asterix.is_some_and(|x| x.port() != 0));
        assert_eq!(a.nmea.len(), 1);
        assert!(a.nmea_of(1).is_some_and(|x| x.port() != 0));
        // Without the keys, no trade listener.
        let plain = Listeners::loopback().await.unwrap().local_addrs().unwrap();
        assert!(plain.asterix.is_none() && plain.nmea.is_empty());
    });
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn trade_daemon_ingests_asterix_and_nmea() {
    let cfg = config();
    let listeners = Listeners::loopback_for(&cfg).await.unwrap();
    let addrs = listeners.local_addrs().unwrap();
    let token = CancellationToken::new();
    let handle = tokio::spawn(daemon::run(cfg, listeners, token.clone()));
    let sub = subscribe(addrs.grpc, true).await;
    let collector = tokio::spawn(collect(sub));

    let sock = tokio::net::UdpSocket::bind("127.0.0.1:0").await.unwrap();
    // ASTERIX: a north marker (rotation period 2.5 s = 320/128), three
    // plots, a plot from an unknown SIC, then a block whose LEN overruns.
    let t = tod_now(-1.0);
    let mut plots = Vec::new();
    for k in 0..3u32 {
        plots.extend(plot(201, t + 8 * k, 2500 + 10 * k as u16, 8192));
    }
    plots.extend(plot(99, t, 3000, 100));
    let mut dg = block(34, &north(t, 320));
    dg.extend(block(10, &plots));
    sock.send_to(&dg, addrs.asterix.unwrap()).await.unwrap();
    sock.send_to(&[10, 0, 200, 0xF4], addrs.asterix.unwrap()).await.unwrap();

    // NMEA: MORWEN GLASS's type 5 (two fragments), then its type 1 report,
    // and a sentence with a bad checksum, in one datagram.
    let doc: serde_json::Value = serde_json::from_str(include_str!("fixtures/ais_session.json")).unwrap();
    let all = doc["lines"].as_array().unwrap();
    let lines: Vec<&str> = all.iter().map(|l| l["line"].as_str().unwrap()).collect();
    let bad = all.iter().find(|l| l["expect"]["reason"] == "bad_checksum").unwrap()["line"].as_str().unwrap();
    let mut nmea = String::new();
    for l in lines[..3].iter().chain([&bad]) {
        nmea.push_str(untagged(l));
        nmea.push_str("\r\n");
    }
    sock.send_to(nmea.as_bytes(), addrs.nmea_of(1).unwrap()).await.unwrap();

    // Received: marker + 3 plots + unknown source + bad block; report +
    // bad checksum (static data and fragments are not records).
    wait_received(addrs.http, 8.0).await;
    tokio::time::sleep(Duration::from_millis(600)).await;
    let m = metrics(addrs.http).await;
    let v = |series: &str| sample(&m, series).unwrap_or(-1.0);
    assert_eq!(v(r#"skerry_records_accepted_total{sensor="north-mast"}"#), 4.0, "{m}");
    assert_eq!(v(r#"skerry_records_accepted_total{sensor="harbour-ais"}"#), 1.0);
    assert_eq!(v(r#"skerry_records_rejected_total{sensor="(unknown)",reason="asterix_unknown_source"}"#), 1.0);
    assert_eq!(v(r#"skerry_records_rejected_total{sensor="(unknown)",reason="asterix_bad_block_length"}"#), 1.0);
    assert_eq!(v(r#"skerry_records_rejected_total{sensor="harbour-ais",reason="nmea_bad_checksum"}"#), 1.0);
    assert_eq!(v(r#"skerry_radar_rotation_period_seconds{sensor="north-mast"}"#), 2.5);
    assert!(!m.contains(r#"skerry_radar_rotation_period_seconds{sensor="harbour-ais"}"#));

    let mut mon = v1::monitor_client::MonitorClient::connect(format!("http://{}", addrs.grpc)).await.unwrap();
    let mut health = mon.health(v1::HealthRequest { interval_s: 0.2 }).await.unwrap().into_inner();
    let report = health.message().await.unwrap().unwrap();
    let radar = report.sensors.iter().find(|s| s.sensor == "north-mast").unwrap();
    assert_eq!(radar.rotation_period_s, Some(2.5));
    assert_eq!(radar.accepted, 4);
    let ais = report.sensors.iter().find(|s| s.sensor == "harbour-ais").unwrap();
    assert_eq!(ais.rotation_period_s, None);
    assert_eq!(ais.rejected.get("nmea_bad_checksum"), Some(&1));
    drop(health);

    token.cancel();
    let summary = tokio::time::timeout(Duration::from_secs(20), handle).await.unwrap().unwrap().unwrap();
    assert!(summary.accounted(), "{summary:?}");
    assert_eq!((summary.received, summary.accepted, summary.rejected), (8, 5, 3));
    let got = collector.await.unwrap();
    let morwen: Vec<_> = got.tracks.iter().filter(|t| t.identity.as_deref() == Some("235000101")).collect();
    assert!(!morwen.is_empty(), "{:?}", got.tracks);
    for t in morwen {
        assert_eq!((t.name.as_deref(), t.ship_type, t.length_m, t.beam_m), (Some("MORWEN GLASS"), Some(70), Some(40.0), Some(10.0)));
    }
}
