//! What recording costs: the daemon's CPU time (getrusage) for the same
//! offered load, 50 000 plots/s over UDP loopback, with and without
//! `[record] dir`, in one run. `cargo bench --bench record`.
//!
//! The daemon runs as a child process (`skerry serve`), so that its CPU
//! time is its own: the sender and the metrics polling stay in this
//! process, and `getrusage(RUSAGE_CHILDREN)` after the child is reaped
//! gives the daemon's user + system time, start to exit, and nothing
//! else. Runs alternate A B B A ... (A: without, B: with recording), so
//! that a drift in the machine's load falls on both alike; each pair
//! gives a ratio, and the median of the pair ratios is reported beside
//! the ratio of the totals. Every run must process every plot sent (the
//! load is the same), and the recording runs must record every one.
//!
//! Without `--bench` (as `cargo test --benches` runs it) a short smoke
//! version runs.

#[path = "../tests/daemon_support/mod.rs"]
mod daemon_support;

use daemon_support::{CONFIG, metrics, sample};
use skerry::daemon::replay::{self, Pace, Target};
use skerry::time::Timestamp;
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

const RATE: f64 = 50_000.0;

/// Kestrel-point plots, 100 per 2.5 s scan and a scan_end each.
fn plot_lines(n: usize, start: Timestamp) -> Vec<String> {
    let mut v = Vec::with_capacity(n + n / 100 + 1);
    for i in 0..n {
        let scan = i / 100;
        let t = start.plus_secs(scan as f64 * 2.5 + (i % 100) as f64 * 0.025);
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
    v
}

/// User + system CPU seconds of the reaped children so far.
fn children_cpu_s() -> f64 {
    // SAFETY: getrusage writes one rusage struct, which we own.
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    let rc = unsafe { libc::getrusage(libc::RUSAGE_CHILDREN, &mut u) };
    assert_eq!(rc, 0, "getrusage");
    let tv = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    tv(u.ru_utime) + tv(u.ru_stime)
}

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

struct Daemon {
    child: Child,
    udp: String,
    http: std::net::SocketAddr,
}

fn start_daemon(work: &Path, record: Option<&Path>) -> Daemon {
    let udp_port = std::net::UdpSocket::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
    let (grpc_port, http_port) = (free_port(), free_port());
    let mut text = format!("{CONFIG}\n[serve]\nudp_addr = \"127.0.0.1:{udp_port}\"\ngrpc_addr = \"127.0.0.1:{grpc_port}\"\nhttp_addr = \"127.0.0.1:{http_port}\"\n");
    if let Some(dir) = record {
        text.push_str(&format!("\n[record]\ndir = {:?}\n", dir.display().to_string()));
    }
    let conf = work.join("skerry.toml");
    std::fs::write(&conf, text).unwrap();
    let mut child = Command::new(env!("CARGO_BIN_EXE_skerry")).args(["serve", "--log", "warn,skerry::daemon=info", "--config"]).arg(&conf).stderr(Stdio::piped()).stdout(Stdio::null()).spawn().expect("skerry serve");
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
    // Keep draining stderr so the child never blocks on a full pipe.
    std::thread::spawn(move || for _ in rx {});
    Daemon { child, udp: format!("127.0.0.1:{udp_port}"), http: format!("127.0.0.1:{http_port}").parse().unwrap() }
}

fn total(m: &str, prefix: &str) -> f64 {
    m.lines().filter(|l| l.starts_with(prefix)).filter_map(|l| l.rsplit(' ').next()?.parse::<f64>().ok()).sum()
}

struct Run {
    cpu_s: f64,
    processed: f64,
    recorded: f64,
    not_recorded: f64,
    bytes: f64,
}

async fn one_run(lines: &[String], work: &Path, record: bool) -> Run {
    let dir = work.join("recordings");
    let _ = std::fs::remove_dir_all(&dir);
    let cpu_before = children_cpu_s();
    let mut d = start_daemon(work, record.then_some(dir.as_path()));
    replay::replay(lines, &Target::Udp(d.udp.clone()), &Pace { speed: 0.0, max_rate: RATE, ..Pace::default() }, &indicatif::ProgressBar::hidden()).await.unwrap();
    // Until every record is processed (and, recording, recorded), or
    // nothing moves for 3 s.
    let want = lines.len() as f64;
    let mut last = (0.0, 0.0);
    let mut still = Instant::now();
    let m = loop {
        let m = metrics(d.http).await;
        let now = (total(&m, "skerry_records_processed_total{"), sample(&m, "skerry_recorded_total").unwrap_or(0.0));
        let done = now.0 >= want && (!record || now.1 + sample(&m, "skerry_not_recorded_total{reason=\"queue_full\"}").unwrap_or(0.0) + sample(&m, "skerry_not_recorded_total{reason=\"write_error\"}").unwrap_or(0.0) >= want);
        if done || still.elapsed() > Duration::from_secs(3) {
            break m;
        }
        if now != last {
            last = now;
            still = Instant::now();
        }
        tokio::time::sleep(Duration::from_millis(100)).await;
    };
    // SAFETY: kill(2) on our own child's pid.
    unsafe { libc::kill(d.child.id() as i32, libc::SIGTERM) };
    let status = d.child.wait().unwrap();
    assert!(status.success(), "{status:?}");
    Run {
        cpu_s: children_cpu_s() - cpu_before,
        processed: total(&m, "skerry_records_processed_total{"),
        recorded: sample(&m, "skerry_recorded_total").unwrap_or(0.0),
        not_recorded: sample(&m, "skerry_not_recorded_total{reason=\"queue_full\"}").unwrap_or(0.0) + sample(&m, "skerry_not_recorded_total{reason=\"write_error\"}").unwrap_or(0.0),
        bytes: sample(&m, "skerry_record_bytes_total").unwrap_or(0.0),
    }
}

fn main() {
    let quick = !std::env::args().any(|a| a == "--bench");
    let (plots, pairs) = if quick { (20_000, 1) } else { (500_000, 8) };
    let lines = plot_lines(plots, Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap());
    let work = tempfile::tempdir_in(env!("CARGO_TARGET_TMPDIR")).unwrap();
    let rt = tokio::runtime::Builder::new_current_thread().enable_all().build().unwrap();
    println!("recording overhead: {} records ({} plots + scan ends) offered at {RATE:.0}/s over UDP loopback, {pairs} pair(s) of runs", lines.len(), plots);
    let mut off = Vec::new();
    let mut on = Vec::new();
    rt.block_on(async {
        for k in 0..pairs {
            let order = if k % 2 == 0 { [false, true] } else { [true, false] };
            for record in order {
                let r = one_run(&lines, work.path(), record).await;
                println!(
                    "  {:<18} daemon CPU {:6.2} s ({:5.1} % of one core over {:.1} s of load); processed {:.0}; recorded {:.0}, not recorded {:.0}, {:.1} MB written",
                    if record { "with recording" } else { "without recording" },
                    r.cpu_s,
                    100.0 * r.cpu_s / (lines.len() as f64 / RATE),
                    lines.len() as f64 / RATE,
                    r.processed,
                    r.recorded,
                    r.not_recorded,
                    r.bytes / 1e6
                );
                assert_eq!(r.processed, lines.len() as f64, "every record processed: the same load");
                if record {
                    assert_eq!((r.recorded, r.not_recorded), (lines.len() as f64, 0.0), "every record recorded");
                    on.push(r);
                } else {
                    off.push(r);
                }
            }
        }
    });
    let sum = |v: &[Run]| v.iter().map(|r| r.cpu_s).sum::<f64>();
    let mut ratios: Vec<f64> = on.iter().zip(&off).map(|(a, b)| a.cpu_s / b.cpu_s).collect();
    ratios.sort_by(f64::total_cmp);
    let median = ratios[ratios.len() / 2];
    println!(
        "daemon CPU with / without recording: {:.3} (totals {:.2} s / {:.2} s), median of pair ratios {:.3}, pairs {:?}",
        sum(&on) / sum(&off),
        sum(&on),
        sum(&off),
        median,
        ratios.iter().map(|r| format!("{r:.3}")).collect::<Vec<_>>()
    );
}
