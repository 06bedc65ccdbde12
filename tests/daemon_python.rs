//! Interoperability with independent clients: /metrics read by the
//! official Prometheus Python client's parser (prometheus_client), and the
//! gRPC services used from a Python grpcio client generated at test time
//! from the same .proto files (grpcio-tools).
//!
//! These tests need the Python that scripts/setup-test-python.sh records
//! in target/test-python (or SKERRY_TEST_PYTHON). Without it they are
//! skipped with a message saying so; with it, a failure is a failure.

mod daemon_support;

use daemon_support::*;
use std::io::{BufRead, BufReader, Write};
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::Duration;

fn python() -> Option<String> {
    if let Ok(p) = std::env::var("SKERRY_TEST_PYTHON") {
        return Some(p);
    }
    let target = std::env::var("CARGO_TARGET_DIR").map(PathBuf::from).unwrap_or_else(|_| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"));
    match std::fs::read_to_string(target.join("test-python")) {
        Ok(p) => Some(p.trim().to_string()),
        Err(_) => {
            eprintln!("SKIPPED: no test Python recorded; run scripts/setup-test-python.sh first (it installs prometheus_client, grpcio and grpcio-tools)");
            None
        }
    }
}

async fn next(rx: &mut tokio::sync::mpsc::UnboundedReceiver<String>) -> String {
    tokio::time::timeout(Duration::from_secs(60), rx.recv()).await.expect("python client answers").expect("python client output")
}

fn script(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/python").join(name)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn metrics_parse_with_prometheus_client() {
    let Some(py) = python() else { return };
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let mut good = lines(&feed(&cfg, 3, 4), &table);
    good.push(good[0].replace("\"range_m\":", "\"range_m\":NaN,\"x\":"));
    let d = start(cfg, Echo::default()).await;
    skerry::daemon::replay::replay(&good, &skerry::daemon::replay::Target::Udp(d.addrs.udp.to_string()), &Default::default(), &indicatif::ProgressBar::hidden()).await.unwrap();
    wait_received(d.addrs.http, good.len() as f64).await;
    tokio::time::sleep(Duration::from_millis(1300)).await;
    let text = metrics(d.addrs.http).await;
    d.stop().await;

    let mut child = Command::new(&py).arg(script("parse_metrics.py")).stdin(Stdio::piped()).stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().expect("run python");
    child.stdin.take().unwrap().write_all(text.as_bytes()).unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(out.status.success(), "prometheus_client refused /metrics: {}\n{text}", String::from_utf8_lossy(&out.stderr));
    let fams: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // The parser names counter families without `_total`.
    let fam = |n: &str| fams.get(n).unwrap_or_else(|| panic!("family {n} in {}", fams.as_object().unwrap().keys().cloned().collect::<Vec<_>>().join(", ")));
    assert_eq!(fam("skerry_records_received")["type"], "counter");
    assert_eq!(fam("skerry_batch_seconds")["type"], "histogram");
    assert_eq!(fam("skerry_queue_depth")["type"], "gauge");
    assert_eq!(fam("skerry_sensor_clock_offset_seconds")["type"], "gauge");
    let value = |family: &str, name: &str, labels: &[(&str, &str)]| -> f64 {
        fam(family)["samples"]
            .as_array()
            .unwrap()
            .iter()
            .find(|s| s[0] == name && labels.iter().all(|(k, v)| s[1][*k] == *v))
            .and_then(|s| s[2].as_f64())
            .unwrap_or_else(|| panic!("{name} {labels:?}"))
    };
    assert_eq!(value("skerry_records_rejected", "skerry_records_rejected_total", &[("sensor", "kestrel-point"), ("reason", "non_finite")]), 1.0);
    assert_eq!(value("skerry_records_accepted", "skerry_records_accepted_total", &[("sensor", "kestrel-point")]), (good.len() - 1) as f64);
    assert_eq!(value("skerry_batch_seconds", "skerry_batch_seconds_count", &[]), value("skerry_batch_seconds", "skerry_batch_seconds_bucket", &[("le", "+Inf")]));
    // The replayed feed is from May 2026: its clock offset is months.
    assert!(value("skerry_sensor_clock_offset_seconds", "skerry_sensor_clock_offset_seconds", &[("sensor", "kestrel-point")]) > 86_400.0);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn python_grpc_client_ingests_and_subscribes() {
    let Some(py) = python() else { return };
    let cfg = config(&[]);
    let table = cfg.sensor_table();
    let good = lines(&feed(&cfg, 4, 10), &table);
    let want = direct(Echo::default(), &good, &table);
    let dir = tempfile::tempdir().unwrap();
    let feed_path = dir.path().join("feed.jsonl");
    let mut text = good.join("\n");
    text.push('\n');
    // One bad record: NaN is valid for Python's json and for a protobuf
    // double, and the daemon must reject it.
    text.push_str(&good[0].replace("\"range_m\":", "\"range_m\":NaN,\"x\":"));
    text.push('\n');
    std::fs::write(&feed_path, text).unwrap();

    let d = start(cfg, Echo::default()).await;
    let mut child = Command::new(&py)
        .arg(script("grpc_client.py"))
        .arg(PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("proto"))
        .arg(d.addrs.grpc.to_string())
        .arg(&feed_path)
        .stdout(Stdio::piped())
        .stderr(Stdio::inherit())
        .spawn()
        .expect("run python");
    let stdout = child.stdout.take().unwrap();
    let (tx, mut rx) = tokio::sync::mpsc::unbounded_channel();
    std::thread::spawn(move || {
        for l in BufReader::new(stdout).lines().map_while(Result::ok) {
            let _ = tx.send(l);
        }
    });
    let sent = next(&mut rx).await;
    let summary: serde_json::Value = serde_json::from_str(sent.strip_prefix("SENT ").expect(&sent)).unwrap();
    assert_eq!(summary["received"], good.len() as u64 + 1);
    assert_eq!(summary["accepted"], good.len() as u64);
    assert_eq!(summary["rejected"]["non_finite"], 1);
    let health = next(&mut rx).await;
    let health: serde_json::Value = serde_json::from_str(health.strip_prefix("HEALTH ").expect(&health)).unwrap();
    assert_eq!(health["sensors"][0]["sensor"], "kestrel-point");
    assert_eq!(health["sensors"][0]["accepted"], good.len() as u64);
    // Shutdown ends the subscription; the client then prints what it got.
    d.stop().await;
    let mut tracks = Vec::new();
    loop {
        let l = next(&mut rx).await;
        if l == "DONE" {
            break;
        }
        let t = l.strip_prefix("TRACK ").unwrap_or_else(|| panic!("unexpected line {l}"));
        tracks.push(skerry::feed::TrackRecord::from_json(t).unwrap().unwrap());
    }
    assert!(child.wait().unwrap().success());
    assert_eq!(json(&tracks), json(&want));
}
