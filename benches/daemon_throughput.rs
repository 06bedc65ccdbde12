//! Daemon benchmarks, run with `cargo bench --bench daemon_throughput`
//! (a plain program, not criterion: it measures rates, latencies and
//! memory over seconds of loopback traffic). Everything stays on
//! 127.0.0.1 and every loop is bounded in count and time.
//!
//! 1. UDP ingest throughput: plots offered at a fixed rate over loopback
//!    to a bare receive loop (the ceiling) and to the daemon; how many
//!    arrive and at what rate the daemon takes them.
//! 2. Latency from send to a subscriber's track record at 20 000 plots/s
//!    (feed times = the sending clock, as from a live radar), with the
//!    default 1 s reorder window and with a 50 ms one.
//! 3. Resident memory sampled over a long replay.

#[path = "../tests/daemon_support/mod.rs"]
mod daemon_support;

use daemon_support::*;
use skerry::daemon::replay::{self, Pace, Target};
use skerry::engine::Engine;
use skerry::time::Timestamp;
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

async fn latency(rate: f64, secs: f64, window: &str) -> (usize, u64, f64, f64, f64) {
    let cfg = config(&[("SKERRY__SERVE__REORDER_WINDOW_S", window)]);
    let d = start(cfg, Echo::default()).await;
    let mut sub = subscribe(d.addrs.grpc, true).await;
    let collector = tokio::spawn(async move {
        let mut lat = Vec::new();
        let mut skipped = 0;
        while let Ok(Some(m)) = sub.message().await {
            match m.update {
                Some(skerry::daemon::proto::v1::picture_update::Update::Track(t)) => {
                    let sent = Timestamp::parse_rfc3339(&t.time).unwrap();
                    lat.push(now_ts().secs_since(sent));
                }
                Some(skerry::daemon::proto::v1::picture_update::Update::Skipped(n)) => skipped += n.updates,
                _ => {}
            }
        }
        (lat, skipped)
    });
    let sock = tokio::net::UdpSocket::bind("127.0.0.1:0").await.unwrap();
    // 1 ms ticks, rate/1000 plots per datagram, each timed at its sending.
    let per_tick = (rate / 1000.0).round() as usize;
    let start = Instant::now();
    let mut tick = tokio::time::interval(Duration::from_millis(1));
    let mut i = 0usize;
    while start.elapsed().as_secs_f64() < secs {
        tick.tick().await;
        let t = now_ts();
        let mut dgram = String::new();
        for _ in 0..per_tick {
            if !dgram.is_empty() {
                dgram.push('\n');
            }
            dgram.push_str(&format!(r#"{{"type":"detection","sensor":"kestrel-point","time":"{}","range_m":{:.1},"bearing_deg":{:.2}}}"#, t.to_rfc3339(), 1000.0 + i as f64 % 9000.0, (i % 3600) as f64 * 0.1));
            i += 1;
        }
        sock.send_to(dgram.as_bytes(), d.addrs.udp).await.unwrap();
    }
    tokio::time::sleep(Duration::from_secs_f64(window.parse::<f64>().unwrap() * 2.0 + 0.5)).await;
    d.stop().await;
    let (mut lat, skipped) = collector.await.unwrap();
    lat.sort_by(f64::total_cmp);
    let q = |p: f64| lat.get(((lat.len() as f64 * p) as usize).min(lat.len().saturating_sub(1))).copied().unwrap_or(f64::NAN);
    (lat.len(), skipped, q(0.5), q(0.99), q(0.999))
}

fn main() {
    // `cargo bench` passes --bench; `cargo test --benches` passes nothing
    // we need: run a quick smoke version then.
    let quick = !std::env::args().any(|a| a == "--bench");
    let rt = tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build().unwrap();
    rt.block_on(async {
        let n = if quick { 20_000 } else { 1_000_000 };
        let lines = plot_lines(n, Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap());
        for rate in [100_000.0, 200_000.0] {
            let (got, secs) = bare_receive(&lines, rate).await;
            println!("bare UDP loop, offered {rate:.0}/s: received {got} of {} lines in {secs:.2} s ({:.0} lines/s)", lines.len(), got as f64 / secs.max(1e-9));
            let (got, secs, drops) = daemon_receive(&lines, rate).await;
            println!("daemon UDP ingest, offered {rate:.0}/s: received {got:.0} of {} records in {secs:.2} s ({:.0} records/s); {drops}", lines.len(), got / secs.max(1e-9));
        }
        let secs = if quick { 1.0 } else { 5.0 };
        for window in ["1.0", "0.05"] {
            let (k, skipped, p50, p99, p999) = latency(20_000.0, secs, window).await;
            println!("latency send → subscriber at 20000 plots/s, reorder window {window} s: {k} records ({skipped} skipped), p50 {:.1} ms, p99 {:.1} ms, p99.9 {:.1} ms", p50 * 1e3, p99 * 1e3, p999 * 1e3);
        }
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
    });
}
