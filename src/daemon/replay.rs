//! `skerry replay`: sends a recorded feed to a running daemon, paced by
//! the records' own times.
//!
//! `--speed X` plays X seconds of feed per second (0: as fast as the rate
//! cap allows). Lines are packed into datagrams of up to
//! `--datagram-bytes`, and sending never exceeds `--max-rate` records per
//! second, so that a burst at speed 0 does not overflow the receiver's
//! socket buffer. Over gRPC, each line is mapped to its protobuf form
//! (lines that cannot be, such as ones that are not JSON, are counted and
//! skipped; over UDP they are sent as they are, for the daemon to count).

use super::ingest::PROTOBUF_MARK;
use super::proto::{self, v1};
use crate::time::Timestamp;
use prost::Message;
use std::io::IsTerminal;
use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::{Duration, Instant};

/// Replay a feed file to a running `skerry serve`.
#[derive(Debug, Clone, clap::Args)]
pub struct ReplayArgs {
    /// Feed file (JSON Lines).
    #[arg(value_name = "FEED")]
    pub feed: PathBuf,
    /// Where to send: udp://HOST:PORT or grpc://HOST:PORT.
    #[arg(long, value_name = "URL")]
    pub to: String,
    /// Seconds of feed per second of replay; 0 sends as fast as --max-rate allows.
    #[arg(long, default_value_t = 1.0)]
    pub speed: f64,
    /// Most records sent per second.
    #[arg(long, default_value_t = 100_000.0)]
    pub max_rate: f64,
    /// Largest UDP datagram sent (bytes); lines are packed up to it.
    #[arg(long, default_value_t = 1400)]
    pub datagram_bytes: usize,
    /// Send UDP datagrams as protobuf (0x00 + FeedBatch) instead of JSON lines.
    #[arg(long)]
    pub protobuf: bool,
    /// No progress bar.
    #[arg(long, short)]
    pub quiet: bool,
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Target {
    Udp(String),
    Grpc(String),
}

impl Target {
    pub fn parse(s: &str) -> Result<Target, ReplayError> {
        if let Some(a) = s.strip_prefix("udp://") {
            Ok(Target::Udp(a.to_string()))
        } else if let Some(a) = s.strip_prefix("grpc://") {
            Ok(Target::Grpc(a.to_string()))
        } else {
            Err(ReplayError::Target(s.to_string()))
        }
    }
}

#[derive(Debug, thiserror::Error)]
pub enum ReplayError {
    #[error("`{0}`: expected udp://HOST:PORT or grpc://HOST:PORT")]
    Target(String),
    #[error("{0}: {1}")]
    Io(String, std::io::Error),
    #[error("gRPC: {0}")]
    Grpc(#[from] tonic::Status),
    #[error("gRPC connection: {0}")]
    Connect(#[from] tonic::transport::Error),
    #[error("--speed and --max-rate must be numbers ≥ 0 and > 0")]
    Pace,
}

/// How to pace a replay.
#[derive(Clone, Debug)]
pub struct Pace {
    pub speed: f64,
    pub max_rate: f64,
    pub datagram_bytes: usize,
    pub protobuf: bool,
}

impl Default for Pace {
    fn default() -> Self {
        Pace { speed: 0.0, max_rate: 100_000.0, datagram_bytes: 1400, protobuf: false }
    }
}

/// What a replay sent.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ReplayReport {
    pub records: u64,
    pub datagrams: u64,
    /// Lines not sent (over gRPC: not mappable to protobuf).
    pub skipped: u64,
    pub seconds: f64,
    /// The daemon's reply, over gRPC.
    pub summary: Option<v1::SendSummary>,
}

/// The `time` of a feed line, read without decoding the rest.
fn line_time(line: &str) -> Option<Timestamp> {
    #[derive(serde::Deserialize)]
    struct T<'a> {
        #[serde(borrow)]
        time: Option<std::borrow::Cow<'a, str>>,
    }
    let t: T = serde_json::from_str(line).ok()?;
    Timestamp::parse_rfc3339(&t.time?).ok()
}

/// Decides when each record may go.
struct Pacer {
    start: Instant,
    first: Option<Timestamp>,
    newest: Option<Timestamp>,
    speed: f64,
    max_rate: f64,
    sent: u64,
}

impl Pacer {
    fn new(speed: f64, max_rate: f64) -> Self {
        Pacer { start: Instant::now(), first: None, newest: None, speed, max_rate, sent: 0 }
    }

    /// How long to wait before sending a record of time `t`.
    fn wait(&mut self, t: Option<Timestamp>) -> Duration {
        let now = self.start.elapsed().as_secs_f64();
        let mut due = self.sent as f64 / self.max_rate;
        if let (Some(t), true) = (t, self.speed > 0.0) {
            let first = *self.first.get_or_insert(t);
            // Records out of order do not wait: pacing follows the newest.
            let newest = match self.newest {
                Some(n) if n > t => n,
                _ => t,
            };
            self.newest = Some(newest);
            due = due.max(newest.secs_since(first) / self.speed);
        }
        self.sent += 1;
        Duration::from_secs_f64((due - now).max(0.0))
    }
}

fn progress(n: u64, quiet: bool) -> indicatif::ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let pb = indicatif::ProgressBar::new(n);
    if let Ok(style) = indicatif::ProgressStyle::with_template("{elapsed_precise} [{wide_bar}] {pos}/{len} records ({per_sec})") {
        pb.set_style(style);
    }
    pb
}

/// Sends `lines` to a UDP address.
pub async fn replay_udp(lines: &[String], addr: &str, pace: &Pace, pb: &indicatif::ProgressBar) -> Result<ReplayReport, ReplayError> {
    let dest: SocketAddr = tokio::net::lookup_host(addr).await.map_err(|e| ReplayError::Io(addr.into(), e))?.next().ok_or_else(|| ReplayError::Io(addr.into(), std::io::Error::other("no address")))?;
    let local: SocketAddr = if dest.is_ipv4() { ([0, 0, 0, 0], 0).into() } else { (std::net::Ipv6Addr::UNSPECIFIED, 0).into() };
    let sock = tokio::net::UdpSocket::bind(local).await.map_err(|e| ReplayError::Io(addr.into(), e))?;
    let mut pacer = Pacer::new(pace.speed, pace.max_rate);
    let mut rep = ReplayReport::default();
    let start = Instant::now();
    let mut buf: Vec<u8> = Vec::with_capacity(pace.datagram_bytes.max(1) + 1024);
    let mut batch = v1::FeedBatch::default();
    let mut in_buf = 0u64;
    let flush = |buf: &mut Vec<u8>, batch: &mut v1::FeedBatch, in_buf: &mut u64, rep: &mut ReplayReport| {
        if *in_buf == 0 {
            return None;
        }
        let out = if pace.protobuf {
            let mut b = vec![PROTOBUF_MARK];
            batch.encode(&mut b).ok()?;
            batch.records.clear();
            b
        } else {
            std::mem::take(buf)
        };
        rep.datagrams += 1;
        *in_buf = 0;
        Some(out)
    };
    for line in lines {
        let line = line.trim_end();
        if line.trim().is_empty() {
            continue;
        }
        let wait = pacer.wait(line_time(line));
        if !wait.is_zero() {
            if let Some(d) = flush(&mut buf, &mut batch, &mut in_buf, &mut rep) {
                sock.send_to(&d, dest).await.map_err(|e| ReplayError::Io(addr.into(), e))?;
            }
            tokio::time::sleep(wait).await;
        }
        if pace.protobuf {
            let Some(m) = proto::json_line_to_proto(line) else {
                rep.skipped += 1;
                continue;
            };
            let size = batch.encoded_len() + m.encoded_len() + 4;
            if in_buf > 0 && size + 1 > pace.datagram_bytes
                && let Some(d) = flush(&mut buf, &mut batch, &mut in_buf, &mut rep) {
                    sock.send_to(&d, dest).await.map_err(|e| ReplayError::Io(addr.into(), e))?;
                }
            batch.records.push(m);
        } else {
            if in_buf > 0 && buf.len() + 1 + line.len() > pace.datagram_bytes
                && let Some(d) = flush(&mut buf, &mut batch, &mut in_buf, &mut rep) {
                    sock.send_to(&d, dest).await.map_err(|e| ReplayError::Io(addr.into(), e))?;
                }
            if in_buf > 0 {
                buf.push(b'\n');
            }
            buf.extend_from_slice(line.as_bytes());
        }
        in_buf += 1;
        rep.records += 1;
        pb.inc(1);
    }
    if let Some(d) = flush(&mut buf, &mut batch, &mut in_buf, &mut rep) {
        sock.send_to(&d, dest).await.map_err(|e| ReplayError::Io(addr.into(), e))?;
    }
    rep.seconds = start.elapsed().as_secs_f64();
    Ok(rep)
}

/// Sends `lines` over one gRPC ingest stream.
pub async fn replay_grpc(lines: &[String], addr: &str, pace: &Pace, pb: &indicatif::ProgressBar) -> Result<ReplayReport, ReplayError> {
    let mut client = v1::ingest_client::IngestClient::connect(format!("http://{addr}")).await?;
    let (tx, rx) = tokio::sync::mpsc::channel::<v1::FeedRecord>(1024);
    let call = tokio::spawn(async move { client.send(tokio_stream::wrappers::ReceiverStream::new(rx)).await });
    let mut pacer = Pacer::new(pace.speed, pace.max_rate);
    let mut rep = ReplayReport::default();
    let start = Instant::now();
    for line in lines {
        let line = line.trim_end();
        if line.trim().is_empty() {
            continue;
        }
        let Some(m) = proto::json_line_to_proto(line) else {
            rep.skipped += 1;
            continue;
        };
        let wait = pacer.wait(line_time(line));
        if !wait.is_zero() {
            tokio::time::sleep(wait).await;
        }
        if tx.send(m).await.is_err() {
            break;
        }
        rep.records += 1;
        pb.inc(1);
    }
    drop(tx);
    let reply = call.await.map_err(|e| ReplayError::Io(addr.into(), std::io::Error::other(e)))??;
    rep.summary = Some(reply.into_inner());
    rep.seconds = start.elapsed().as_secs_f64();
    Ok(rep)
}

/// Replays `lines` to `target`.
pub async fn replay(lines: &[String], target: &Target, pace: &Pace, pb: &indicatif::ProgressBar) -> Result<ReplayReport, ReplayError> {
    if !(pace.speed.is_finite() && pace.speed >= 0.0 && pace.max_rate.is_finite() && pace.max_rate > 0.0) {
        return Err(ReplayError::Pace);
    }
    match target {
        Target::Udp(a) => replay_udp(lines, a, pace, pb).await,
        Target::Grpc(a) => replay_grpc(lines, a, pace, pb).await,
    }
}

pub fn replay_main(args: &ReplayArgs) -> anyhow::Result<()> {
    let target = Target::parse(&args.to)?;
    let text = std::fs::read_to_string(&args.feed).map_err(|e| anyhow::anyhow!("{}: cannot read: {e}", args.feed.display()))?;
    let lines: Vec<String> = text.lines().filter(|l| !l.trim().is_empty()).map(str::to_string).collect();
    let pace = Pace { speed: args.speed, max_rate: args.max_rate, datagram_bytes: args.datagram_bytes.max(1), protobuf: args.protobuf };
    let rt = tokio::runtime::Builder::new_current_thread().enable_all().build()?;
    let pb = progress(lines.len() as u64, args.quiet);
    let rep = rt.block_on(replay(&lines, &target, &pace, &pb))?;
    pb.finish_and_clear();
    let rate = rep.records as f64 / rep.seconds.max(1e-9);
    match target {
        Target::Udp(a) => eprintln!("sent {} records in {} datagrams to udp://{a} in {:.2} s ({rate:.0} records/s); {} skipped", rep.records, rep.datagrams, rep.seconds, rep.skipped),
        Target::Grpc(a) => {
            eprintln!("sent {} records to grpc://{a} in {:.2} s ({rate:.0} records/s); {} lines not sendable over gRPC", rep.records, rep.seconds, rep.skipped);
            if let Some(s) = rep.summary {
                let mut rejected: Vec<_> = s.rejected.iter().collect();
                rejected.sort();
                eprintln!("daemon: received {}, accepted {}, dropped {}, rejected {:?}", s.received, s.accepted, s.dropped, rejected);
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pacer_follows_feed_time_and_rate() {
        let t = |s: f64| Some(Timestamp::from_unix_secs_f64(1000.0 + s));
        let mut p = Pacer::new(2.0, 1e9);
        assert!(p.wait(t(0.0)).is_zero());
        // 4 s of feed at speed 2: due 2 s after the start.
        let w = p.wait(t(4.0)).as_secs_f64();
        assert!((w - 2.0).abs() < 0.05, "{w}");
        // Older than the newest: no wait beyond the newest's.
        let w2 = p.wait(t(1.0)).as_secs_f64();
        assert!(w2 <= w + 1e-3);
        // Rate cap alone at speed 0: the 1000th record is due at 1 s.
        let mut p = Pacer::new(0.0, 1000.0);
        let mut last = Duration::ZERO;
        for _ in 0..1001 {
            last = p.wait(t(0.0));
        }
        assert!((last.as_secs_f64() - 1.0).abs() < 0.05, "{last:?}");
    }

    #[test]
    fn targets() {
        assert_eq!(Target::parse("udp://127.0.0.1:4100").unwrap(), Target::Udp("127.0.0.1:4100".into()));
        assert_eq!(Target::parse("grpc://h:1").unwrap(), Target::Grpc("h:1".into()));
        assert!(Target::parse("tcp://h:1").is_err());
    }
}
