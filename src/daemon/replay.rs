//! `skerry replay`: sends a recorded feed to a running daemon, paced by
//! the records' own times.
//!
//! The feed is a file or a recording folder (its `YYYY-MM-DDTHH.jsonl`
//! files in name order, CONTRACT.md §7). A torn final line of a file (no
//! newline at the end, not whole JSON) is reported and skipped.
//!
//! `--pace time` (the default) paces by the records' `time`, following
//! the newest time seen (a record older than one already sent goes at
//! once). `--pace received` paces by a recording's `received` times, in
//! file order, so the daemon sees the original arrival jitter and
//! lateness again; every line must then carry `received`.
//! `--speed X` plays X seconds of feed per second (0: as fast as the rate
//! cap allows), for both paces. Lines are packed into datagrams of up to
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
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

/// Replay a feed file to a running `skerry serve`.
#[derive(Debug, Clone, clap::Args)]
pub struct ReplayArgs {
    /// Feed file (JSON Lines), or a recording folder.
    #[arg(value_name = "FEED")]
    pub feed: PathBuf,
    /// What paces the sends: the records' `time`, or a recording's `received` times.
    #[arg(long, value_enum, default_value_t = PaceBy::Time)]
    pub pace: PaceBy,
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
    #[error("{file}:{line}: no `received` time (needed for --pace received)")]
    NoReceived { file: String, line: usize },
    #[error("{file}:{line}: not UTF-8")]
    NotUtf8 { file: String, line: usize },
    #[error(transparent)]
    Path(#[from] crate::recording::FeedPathError),
}

/// What paces a replay.
#[derive(Copy, Clone, Debug, Default, PartialEq, Eq, clap::ValueEnum)]
pub enum PaceBy {
    /// The records' own `time`.
    #[default]
    Time,
    /// A recording's `received` times, in file order.
    Received,
}

/// How to pace a replay.
#[derive(Clone, Debug)]
pub struct Pace {
    pub speed: f64,
    pub max_rate: f64,
    pub datagram_bytes: usize,
    pub protobuf: bool,
    pub by: PaceBy,
}

impl Default for Pace {
    fn default() -> Self {
        Pace { speed: 0.0, max_rate: 100_000.0, datagram_bytes: 1400, protobuf: false, by: PaceBy::Time }
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

/// A line without the `received` time that `--pace received` needs.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub struct MissingReceived;

/// Decides when each record may go. Pure: it gives the time after the
/// start of the replay at which a line is due, and the caller waits.
#[derive(Clone, Debug)]
pub struct Pacer {
    by: PaceBy,
    first: Option<Timestamp>,
    newest: Option<Timestamp>,
    speed: f64,
    max_rate: f64,
    sent: u64,
}

impl Pacer {
    pub fn new(by: PaceBy, speed: f64, max_rate: f64) -> Self {
        Pacer { by, first: None, newest: None, speed, max_rate, sent: 0 }
    }

    /// Seconds after the start at which `line`, the next line sent, is
    /// due: never before `sent / max_rate`, and at speed X > 0 not before
    /// (t − t₀) / X, where t is the line's `time` (the newest `time` so
    /// far, with `PaceBy::Time`) or its `received` (`PaceBy::Received`),
    /// and t₀ that of the first line.
    pub fn due(&mut self, line: &str) -> Result<f64, MissingReceived> {
        let mut due = self.sent as f64 / self.max_rate;
        let t = match self.by {
            PaceBy::Time => line_time(line).map(|t| {
                // Records out of order do not wait: pacing follows the newest.
                let newest = match self.newest {
                    Some(n) if n > t => n,
                    _ => t,
                };
                self.newest = Some(newest);
                newest
            }),
            PaceBy::Received => Some(crate::recording::line_received(line).ok_or(MissingReceived)?),
        };
        if let (Some(t), true) = (t, self.speed > 0.0) {
            let first = *self.first.get_or_insert(t);
            due = due.max(t.secs_since(first) / self.speed);
        }
        self.sent += 1;
        Ok(due)
    }

    /// How long to wait, `elapsed` after the start, before sending `line`;
    /// `i` is its index, for the error.
    fn wait(&mut self, line: &str, elapsed: Duration, i: usize) -> Result<Duration, ReplayError> {
        let due = self.due(line).map_err(|MissingReceived| ReplayError::NoReceived { file: "(lines)".into(), line: i + 1 })?;
        Ok(Duration::from_secs_f64((due - elapsed.as_secs_f64()).max(0.0)))
    }
}

/// The lines of a feed file or recording folder, ready to replay.
#[derive(Debug, Default)]
pub struct Loaded {
    pub lines: Vec<String>,
    /// Torn final lines (file, line number), skipped.
    pub torn: Vec<(PathBuf, usize)>,
}

/// Reads `path` (a file, or a folder's recording files in name order)
/// into lines, skipping blank lines and torn final lines; with
/// `PaceBy::Received`, a line without `received` is an error naming its
/// file and line.
pub fn load_lines(path: &Path, by: PaceBy) -> Result<Loaded, ReplayError> {
    let mut out = Loaded::default();
    for file in crate::recording::expand_feed_paths(&[path.to_path_buf()])? {
        let name = || file.display().to_string();
        let bytes = std::fs::read(&file).map_err(|e| ReplayError::Io(name(), e))?;
        let last = (!bytes.is_empty() && !bytes.ends_with(b"\n")).then(|| crate::offline::split_lines(&bytes).count());
        for (i, line) in crate::offline::split_lines(&bytes).enumerate() {
            if line.iter().all(u8::is_ascii_whitespace) {
                continue;
            }
            if last == Some(i + 1) && crate::recording::is_torn(line) {
                out.torn.push((file.clone(), i + 1));
                continue;
            }
            let text = std::str::from_utf8(line).map_err(|_| ReplayError::NotUtf8 { file: name(), line: i + 1 })?;
            if by == PaceBy::Received && crate::recording::line_received(text).is_none() {
                return Err(ReplayError::NoReceived { file: name(), line: i + 1 });
            }
            out.lines.push(text.to_string());
        }
    }
    Ok(out)
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
    let mut pacer = Pacer::new(pace.by, pace.speed, pace.max_rate);
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
    for (i, line) in lines.iter().enumerate() {
        let line = line.trim_end();
        if line.trim().is_empty() {
            continue;
        }
        let wait = pacer.wait(line, start.elapsed(), i)?;
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
    let mut pacer = Pacer::new(pace.by, pace.speed, pace.max_rate);
    let mut rep = ReplayReport::default();
    let start = Instant::now();
    for (i, line) in lines.iter().enumerate() {
        let line = line.trim_end();
        if line.trim().is_empty() {
            continue;
        }
        let Some(m) = proto::json_line_to_proto(line) else {
            rep.skipped += 1;
            continue;
        };
        let wait = pacer.wait(line, start.elapsed(), i)?;
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
    let Loaded { lines, torn } = load_lines(&args.feed, args.pace)?;
    for (file, line) in &torn {
        eprintln!("{}:{line}: torn final line (no newline at the end, not whole JSON): skipped", file.display());
    }
    let pace = Pace { speed: args.speed, max_rate: args.max_rate, datagram_bytes: args.datagram_bytes.max(1), protobuf: args.protobuf, by: args.pace };
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
        let t = |s: f64| format!(r#"{{"type":"scan_end","time":"{}"}}"#, Timestamp::from_unix_secs_f64(1000.0 + s));
        let mut p = Pacer::new(PaceBy::Time, 2.0, 1e9);
        assert_eq!(p.due(&t(0.0)), Ok(0.0));
        // 4 s of feed at speed 2: due 2 s after the start.
        let w = p.due(&t(4.0)).unwrap();
        assert!((w - 2.0).abs() < 1e-6, "{w}");
        // Older than the newest: no later than the newest's.
        let w2 = p.due(&t(1.0)).unwrap();
        assert!(w2 <= w + 1e-9);
        // Rate cap alone at speed 0: the 1001st record is due at 1 s.
        let mut p = Pacer::new(PaceBy::Time, 0.0, 1000.0);
        let mut last = 0.0;
        for _ in 0..1001 {
            last = p.due(&t(0.0)).unwrap();
        }
        assert!((last - 1.0).abs() < 1e-9, "{last:?}");
    }

    #[test]
    fn targets() {
        assert_eq!(Target::parse("udp://127.0.0.1:4100").unwrap(), Target::Udp("127.0.0.1:4100".into()));
        assert_eq!(Target::parse("grpc://h:1").unwrap(), Target::Grpc("h:1".into()));
        assert!(Target::parse("tcp://h:1").is_err());
    }
}
