//! Bad input mixed into a good feed is counted under its reason and does
//! not change the tracks; a subscriber that reads nothing holds back
//! neither the engine nor another subscriber, and is told what it missed;
//! /healthz reports silent sensors.

mod daemon_support;

use daemon_support::*;
use skerry::daemon::replay::{self, Pace, Target};
use std::time::{Duration, Instant};

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bad_input_is_counted_by_reason_and_leaves_the_tracks_alone() {
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let good = lines(&feed(&cfg, 5, 12), &table);
    let want = direct(Echo::default(), &good, &table);
    let d = start(cfg, Echo::default()).await;
    let collector = tokio::spawn(collect(subscribe(d.addrs.grpc, true).await));

    let det = good.iter().find(|l| l.contains("\"detection\"")).unwrap().clone();
    let sock = tokio::net::UdpSocket::bind("127.0.0.1:0").await.unwrap();
    let send = |b: Vec<u8>| {
        let sock = &sock;
        let to = d.addrs.udp;
        async move { sock.send_to(&b, to).await.unwrap() }
    };
    // Each kind of bad input, one datagram each. The feed's limit is
    // max_record_bytes = 4000.
    send(b"hello, harbour".to_vec()).await; // bad_json, sensor unknown
    send(vec![b' '; 4100]).await; // oversize
    send(vec![0xff, 0xfe, b'{', b'}']).await; // bad_utf8
    send(det.replace("\"range_m\":", "\"range_m\":NaN,\"x\":").into_bytes()).await; // non_finite, kestrel-point
    send(det.replace("kestrel-point", "gannet-rock").into_bytes()).await; // unknown_sensor
    send(det.replace("\"type\":\"detection\"", "\"type\":\"blip\"").into_bytes()).await; // unknown_type, kestrel-point
    send(vec![0x00, 0xff, 0xff, 0xff]).await; // protobuf mark, not a FeedBatch: bad_json
    // A report from 127.0.0.1 for a transponder that only takes 10.99/16.
    send(br#"{"type":"report","sensor":"sound-ais","time":"2026-05-14T06:00:01Z","id":"235000777","lat_deg":56.45,"lon_deg":7.35}"#.to_vec()).await;
    // The good feed, with one record sent twice (a duplicate).
    let mut with_dup = good.clone();
    with_dup.insert(7, good[7].clone());
    let rep = replay::replay(&with_dup, &Target::Udp(d.addrs.udp.to_string()), &Pace { speed: 0.0, max_rate: 50_000.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
    assert_eq!(rep.records as usize, with_dup.len());
    wait_received(d.addrs.http, (with_dup.len() + 8) as f64).await;
    // Let the duplicate pass the reorder window, so that it is screened
    // and counted before we look.
    tokio::time::sleep(Duration::from_millis(1500)).await;
    let m = metrics(d.addrs.http).await;
    let rej = |sensor: &str, reason: &str| sample(&m, &format!("skerry_records_rejected_total{{sensor=\"{sensor}\",reason=\"{reason}\"}}")).unwrap_or(-1.0);
    assert_eq!(rej("(unknown)", "bad_json"), 2.0, "{m}");
    assert_eq!(rej("(unknown)", "oversize"), 1.0);
    assert_eq!(rej("(unknown)", "bad_utf8"), 1.0);
    assert_eq!(rej("(unknown)", "unknown_sensor"), 1.0);
    assert_eq!(rej("kestrel-point", "non_finite"), 1.0);
    assert_eq!(rej("kestrel-point", "unknown_type"), 1.0);
    assert_eq!(rej("sound-ais", "not_allowed"), 1.0);
    assert_eq!(rej("kestrel-point", "duplicate"), 1.0);
    assert_eq!(rej("kestrel-point", "late"), 0.0);
    assert_eq!(sample(&m, "skerry_records_accepted_total{sensor=\"kestrel-point\"}"), Some(with_dup.len() as f64));
    assert_eq!(sample(&m, "skerry_udp_datagrams_total").map(|v| v >= 9.0), Some(true));
    let s = d.stop().await;
    assert_eq!(s.processed, good.len() as u64);
    assert_eq!(s.duplicates, 1);
    let got = collector.await.unwrap();
    assert_eq!(json(&got.tracks), json(&want));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_subscriber_that_reads_nothing_holds_back_no_one() {
    // The issue's case is a subscriber silent for 30 s; here a small queue
    // (2048 updates) and a fast feed (50 000 detections in about a second)
    // make the same overflow in a second of wall time.
    let cfg = config(&[("SKERRY__SERVE__SUBSCRIBER_QUEUE", "2048"), ("SKERRY__SERVE__SHUTDOWN_FLUSH_S", "10")]);
    let table = cfg.sensor_table();
    let lines = lines(&feed(&cfg, 50, 1000), &table);
    let total = 50 * 1000;
    let d = start(cfg, Echo::default()).await;
    // The silent one: subscribed, then not read until the end.
    let silent = subscribe(d.addrs.grpc, true).await;
    let reader = tokio::spawn(collect(subscribe(d.addrs.grpc, true).await));
    let t = Instant::now();
    let target = Target::Udp(d.addrs.udp.to_string());
    let rep = replay::replay(&lines, &target, &Pace { speed: 0.0, max_rate: 40_000.0, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
    assert_eq!(rep.records as usize, lines.len());
    // The engine keeps up: everything but the last window is processed
    // while the silent subscriber sits on its full queue.
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let m = metrics(d.addrs.http).await;
        let processed = sample(&m, "skerry_records_processed_total{sensor=\"kestrel-point\"}").unwrap_or(0.0);
        if processed >= (lines.len() - 50 * 11) as f64 {
            assert!(sample(&m, "skerry_subscriber_skipped_total").unwrap() > 0.0, "the silent subscriber skipped");
            assert_eq!(sample(&m, "skerry_subscribers"), Some(2.0));
            break;
        }
        assert!(Instant::now() < deadline, "engine held back: {processed} processed");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let live_in = t.elapsed();
    // The silent one starts reading now: what was queued for it, and how
    // many it missed.
    let late = tokio::spawn(collect(silent));
    let s = d.stop().await;
    let read = tokio::time::timeout(Duration::from_secs(10), reader).await.expect("reader ends").unwrap();
    assert_eq!(read.tracks.len(), total, "the reading subscriber got every update");
    assert_eq!(read.skipped, 0);
    assert_eq!(s.track_records as usize, total);
    let late = tokio::time::timeout(Duration::from_secs(10), late).await.expect("silent stream ends").unwrap();
    assert!(late.skipped > 0);
    assert_eq!(late.tracks.len() as u64 + late.skipped, total as u64, "every update was sent or counted as skipped");
    // The updates it did get are in order, with gaps only where it skipped.
    assert!(late.tracks.windows(2).all(|w| w[0].track < w[1].track));
    assert!(live_in < Duration::from_secs(20));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn healthz_reports_silent_sensors_and_metrics_count_tracks() {
    let cfg = config(&[("SKERRY__SERVE__TRANSPONDER_SILENT_S", "0.5")]);
    let d = start(cfg.clone(), Echo::default()).await;
    let (code, body) = http_get(d.addrs.http, "/healthz").await;
    assert_eq!(code, 200, "{body}");
    assert_eq!(body, "ok\n");
    tokio::time::sleep(Duration::from_millis(700)).await;
    let (code, body) = http_get(d.addrs.http, "/healthz").await;
    assert_eq!(code, 503);
    assert!(body.starts_with("degraded\n") && body.contains("sensor sound-ais silent"), "{body}");
    assert!(!body.contains("kestrel-point"), "{body}");
    // The radar degrades after 3 scans of 2.5 s with nothing.
    let m = metrics(d.addrs.http).await;
    assert_eq!(sample(&m, "skerry_healthy"), Some(0.0));
    // A health report over gRPC says the same.
    let mut c = skerry::daemon::proto::v1::monitor_client::MonitorClient::connect(format!("http://{}", d.addrs.grpc)).await.unwrap();
    let mut s = c.health(skerry::daemon::proto::v1::HealthRequest { interval_s: 0.2 }).await.unwrap().into_inner();
    let r = s.message().await.unwrap().unwrap();
    assert_eq!(r.status, "degraded");
    assert_eq!(r.sensors.len(), 2);
    assert_eq!(r.sensors[0].clock_state, "never");
    // Standard gRPC health checking.
    let channel = tonic::transport::Endpoint::from_shared(format!("http://{}", d.addrs.grpc)).unwrap().connect().await.unwrap();
    let mut h = tonic_health::pb::health_client::HealthClient::new(channel);
    let st = h.check(tonic_health::pb::HealthCheckRequest { service: "skerry.v1.Picture".into() }).await.unwrap().into_inner();
    assert_eq!(st.status, tonic_health::pb::health_check_response::ServingStatus::Serving as i32);
    drop(s);
    d.stop().await;
}
