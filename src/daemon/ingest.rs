//! Ingest: UDP datagrams and gRPC client streams in, checked records out
//! to the reorder task.
//!
//! # UDP datagrams
//!
//! A datagram is either
//! - JSON lines: one or more whole contract lines (CONTRACT.md §1)
//!   separated by `\n`; its first byte is `{` or white space; or
//! - protobuf: the byte `0x00` followed by one encoded
//!   `skerry.v1.FeedBatch` (proto/skerry/v1/records.proto).
//!
//! Valid JSON text can never begin with a 0x00 byte, so the first byte
//! tells the two apart without ambiguity. A datagram longer than
//! `feed.max_record_bytes` is rejected whole as `oversize`.
//!
//! # Checks and counts
//!
//! Every record is decoded (the same checks for both codecs), its time is
//! checked against the daemon's clock (`feed.max_time_offset_s`), and its
//! source address against the sensor's `allow_from` list. Each outcome is
//! counted under the sensor the record named. Bad input is logged at most
//! once per sensor and reason per `serve.bad_input_log_interval_s`, with
//! the number of lines held back.
//!
//! The queue to the reorder task is bounded and filled with `try_send`: a
//! full queue drops the record and counts it; ingest never waits.
//!
//! # Trade inputs (CONTRACT.md §8)
//!
//! - `serve.asterix_udp`: one socket for every radar. Each datagram holds
//!   one or more ASTERIX data blocks; records map to radars by SAC/SIC.
//!   Times of day are placed on the day nearest the daemon's clock at
//!   receipt, which handles the midnight rollover (the decoder's rule). A
//!   category 034 message's measured rotation period goes to the radar's
//!   health figures.
//! - `nmea_udp` of a transponder sensor: one socket per sensor, each with
//!   its own AIS decoder (reassembly and static data per receiver). A
//!   sentence without a tag block time is timed by the daemon's clock.
//! - Decoded records go through [`IngestContext::admit`] like JSON ones:
//!   the same allow-list, time check, counts and queue. Decoder rejects
//!   count per sensor (or under the unknown sensor, when the source is not
//!   known) under the decoders' `feed_key`s (`asterix_unknown_source`,
//!   `nmea_bad_checksum` …). Items that are neither records nor faults (a
//!   service message that closes no sector, AIS static data, a fragment)
//!   are not counted as records, but do mark the sensor as heard from.

use super::clock::DaemonClock;
use super::metrics::{self, Metrics};
use super::proto::{self, v1};
use crate::feed::asterix::{AsterixDecoder, AsterixItem};
use crate::feed::nmea::{AisDecoder, AisOutcome};
use crate::feed::{self, Record, Reject, RejectReason, SensorId, SensorTable};
use crate::time::Timestamp;
use prost::Message;
use std::collections::HashMap;
use std::net::{IpAddr, SocketAddr};
use std::sync::atomic::Ordering::Relaxed;
use std::sync::{Arc, Mutex};
use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tokio_util::task::TaskTracker;

/// A checked record and the daemon-clock instant it arrived.
#[derive(Debug)]
pub struct Arrival {
    pub rec: Record,
    pub at: Timestamp,
}

/// First byte of a protobuf datagram.
pub const PROTOBUF_MARK: u8 = 0x00;

/// An address range on a sensor's allow-list: an address or a CIDR prefix.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct AllowRange {
    net: IpAddr,
    prefix: u8,
}

impl AllowRange {
    /// `10.0.0.5`, `10.0.0.0/24`, `::1`, `fd00::/8` (a port, as in
    /// `10.0.0.5:4000`, is accepted and ignored).
    pub fn parse(s: &str) -> Result<AllowRange, String> {
        let s = s.trim();
        if let Ok(sa) = s.parse::<SocketAddr>() {
            let prefix = if sa.is_ipv4() { 32 } else { 128 };
            return Ok(AllowRange { net: sa.ip(), prefix });
        }
        let (addr, prefix) = match s.split_once('/') {
            Some((a, p)) => (a, Some(p)),
            None => (s, None),
        };
        let net: IpAddr = addr.parse().map_err(|_| format!("`{s}` is not an IP address or prefix"))?;
        let max = if net.is_ipv4() { 32 } else { 128 };
        let prefix = match prefix {
            None => max,
            Some(p) => p.parse::<u8>().ok().filter(|p| *p <= max).ok_or_else(|| format!("`{s}`: prefix length must be 0..={max}"))?,
        };
        Ok(AllowRange { net, prefix })
    }

    pub fn contains(&self, ip: IpAddr) -> bool {
        // An IPv4 peer seen on an IPv6 socket is compared as IPv4.
        let ip = match ip {
            IpAddr::V6(v6) => v6.to_ipv4_mapped().map(IpAddr::V4).unwrap_or(ip),
            v4 => v4,
        };
        match (self.net, ip) {
            (IpAddr::V4(n), IpAddr::V4(a)) => {
                let mask = if self.prefix == 0 { 0 } else { u32::MAX << (32 - self.prefix as u32) };
                u32::from(n) & mask == u32::from(a) & mask
            }
            (IpAddr::V6(n), IpAddr::V6(a)) => {
                let mask = if self.prefix == 0 { 0 } else { u128::MAX << (128 - self.prefix as u32) };
                u128::from(n) & mask == u128::from(a) & mask
            }
            _ => false,
        }
    }
}

/// At most one log line per key per interval, with the count held back.
/// Pure: the time is passed in.
#[derive(Debug)]
pub struct LogLimiter {
    interval_s: f64,
    seen: HashMap<(Option<SensorId>, &'static str), (Timestamp, u64)>,
}

impl LogLimiter {
    pub fn new(interval_s: f64) -> Self {
        LogLimiter { interval_s, seen: HashMap::new() }
    }

    /// `Some(n)`: log now, `n` similar lines were held back since the last
    /// one; `None`: hold this one back.
    pub fn check(&mut self, sensor: Option<SensorId>, reason: &'static str, now: Timestamp) -> Option<u64> {
        match self.seen.get_mut(&(sensor, reason)) {
            Some((last, held)) if now.secs_since(*last) < self.interval_s => {
                *held += 1;
                None
            }
            Some((last, held)) => {
                let n = *held;
                *last = now;
                *held = 0;
                Some(n)
            }
            None => {
                self.seen.insert((sensor, reason), (now, 0));
                Some(0)
            }
        }
    }
}

/// What every ingest task shares.
pub struct IngestContext {
    pub sensors: SensorTable,
    /// Per sensor; empty: any source.
    pub allow: Vec<Vec<AllowRange>>,
    pub max_record_bytes: usize,
    pub max_time_offset_s: f64,
    pub metrics: Arc<Metrics>,
    pub clock: DaemonClock,
    pub tx: mpsc::Sender<Arrival>,
    pub log: Mutex<LogLimiter>,
    /// Cancelled when shutdown starts: ingest stops.
    pub cancel: CancellationToken,
    /// Tracks the ingest tasks and streams, so the reorder task knows when
    /// the last record has been queued.
    pub tracker: TaskTracker,
    /// The recording writer's queue, when `[record]` is set: every
    /// accepted record is offered to it (late ones too: lateness is
    /// judged later, by the reorder buffer).
    pub recorder: Option<super::record::Recorder>,
}

/// Counts of one batch of input (a datagram, a stream).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Tally {
    pub received: u64,
    pub accepted: u64,
    pub rejected: HashMap<&'static str, u64>,
    pub dropped: u64,
}

impl IngestContext {
    fn rejected(&self, r: &Reject, src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        self.rejected_key(r.sensor, metrics::reason_of(&r.reason), &r.reason.to_string(), src, now, tally);
    }

    fn rejected_key(&self, sensor: Option<SensorId>, reason: usize, text: &str, src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        let key = metrics::REASONS[reason];
        self.metrics.reject(sensor, reason);
        *tally.rejected.entry(key).or_default() += 1;
        let held = self.log.lock().ok().and_then(|mut l| l.check(sensor, key, now));
        if let Some(held) = held {
            let name = sensor.map(|s| self.sensors.name(s)).unwrap_or("(unknown)");
            let src = src.map(|s| s.to_string()).unwrap_or_default();
            if held > 0 {
                tracing::warn!(sensor = name, reason = key, source = %src, held_back = held, "bad input: {text} ({held} similar held back)");
            } else {
                tracing::warn!(sensor = name, reason = key, source = %src, "bad input: {text}");
            }
        }
    }

    /// Checks one decoded (or refused) record and queues it.
    pub fn admit(&self, decoded: Result<Record, Reject>, src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        tally.received += 1;
        let sensor = match &decoded {
            Ok(r) => Some(r.sensor()),
            Err(e) => e.sensor,
        };
        let c = self.metrics.sensor(sensor);
        c.received.fetch_add(1, Relaxed);
        if sensor.is_some() {
            c.last_seen_ns.store(now.unix_nanos(), Relaxed);
        }
        let rec = match decoded {
            Ok(r) => r,
            Err(e) => return self.rejected(&e, src, now, tally),
        };
        let s = rec.sensor();
        if let (Some(list), Some(src)) = (self.allow.get(s as usize), src)
            && !list.is_empty() && !list.iter().any(|a| a.contains(src.ip())) {
                let text = format!("source {} is not on the allow-list of sensor {}", src.ip(), self.sensors.name(s));
                return self.rejected_key(Some(s), metrics::reason_index("not_allowed"), &text, Some(src), now, tally);
            }
        // Plausibility against the daemon's clock (as feed::Screen judges
        // it), before ordering: a wild time must not reach the reorder
        // buffer's sensor clocks.
        if rec.time().secs_since(now).abs() > self.max_time_offset_s {
            return self.rejected(&Reject { reason: RejectReason::ImplausibleTime, sensor: Some(s) }, src, now, tally);
        }
        // The recording is offered the record before the engine can see
        // it, so that a snapshot, which waits for the recording to settle
        // every record offered before it, never covers a record that the
        // recording has yet to get (a restart would then replay a tail
        // without it). A slot is reserved first: a record the ingest
        // queue refuses is neither tracked nor recorded.
        match self.tx.try_reserve() {
            Ok(permit) => {
                if let Some(r) = &self.recorder {
                    // No heap: a report's id is shared.
                    r.offer(rec.clone(), now);
                }
                permit.send(Arrival { rec, at: now });
                c.accepted.fetch_add(1, Relaxed);
                tally.accepted += 1;
            }
            Err(_) => {
                self.metrics.dropped_ingest_queue.fetch_add(1, Relaxed);
                tally.dropped += 1;
            }
        }
    }

    /// Decodes and queues the records of one datagram.
    pub fn datagram(&self, buf: &[u8], src: Option<SocketAddr>, now: Timestamp) -> Tally {
        let mut tally = Tally::default();
        self.metrics.datagrams.fetch_add(1, Relaxed);
        self.metrics.datagram_bytes.fetch_add(buf.len() as u64, Relaxed);
        if buf.len() > self.max_record_bytes {
            let r = Reject { reason: RejectReason::Oversize, sensor: None };
            tally.received += 1;
            self.metrics.sensor(None).received.fetch_add(1, Relaxed);
            self.rejected(&r, src, now, &mut tally);
            return tally;
        }
        if buf.first() == Some(&PROTOBUF_MARK) {
            match v1::FeedBatch::decode(&buf[1..]) {
                Ok(batch) => {
                    for m in &batch.records {
                        self.admit(proto::to_record(m, &self.sensors), src, now, &mut tally);
                    }
                }
                Err(_) => {
                    tally.received += 1;
                    self.metrics.sensor(None).received.fetch_add(1, Relaxed);
                    let r = Reject { reason: RejectReason::BadJson, sensor: None };
                    self.rejected_key(None, metrics::reason_of(&r.reason), "not a valid protobuf FeedBatch", src, now, &mut tally);
                }
            }
            return tally;
        }
        for line in buf.split(|&b| b == b'\n') {
            if line.iter().all(u8::is_ascii_whitespace) {
                continue;
            }
            self.admit(feed::decode_line(line, &self.sensors), src, now, &mut tally);
        }
        tally
    }
}

impl IngestContext {
    /// Whether `src` may send for `sensor` (its `allow_from`).
    fn allowed(&self, sensor: SensorId, src: Option<SocketAddr>) -> bool {
        match (self.allow.get(sensor as usize), src) {
            (Some(list), Some(src)) => list.is_empty() || list.iter().any(|a| a.contains(src.ip())),
            _ => true,
        }
    }

    /// The sensor sent something that is not a record (a service message,
    /// static data): it is alive, if the source may speak for it.
    fn heard(&self, sensor: SensorId, src: Option<SocketAddr>, now: Timestamp) {
        if self.allowed(sensor, src) {
            self.metrics.sensor(Some(sensor)).last_seen_ns.store(now.unix_nanos(), Relaxed);
        }
    }

    /// A trade decoder's reject, counted like a refused record.
    fn trade_reject(&self, sensor: Option<SensorId>, reason: usize, what: &str, src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        tally.received += 1;
        self.metrics.sensor(sensor).received.fetch_add(1, Relaxed);
        if let Some(s) = sensor {
            self.heard(s, src, now);
        }
        self.rejected_key(sensor, reason, what, src, now, tally);
    }

    /// A datagram over `feed.max_record_bytes`, on a trade socket.
    fn oversize(&self, sensor: Option<SensorId>, src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        let r = Reject { reason: RejectReason::Oversize, sensor };
        tally.received += 1;
        self.metrics.sensor(sensor).received.fetch_add(1, Relaxed);
        self.rejected(&r, src, now, tally);
    }

    /// Decodes one datagram of ASTERIX data blocks received at `now` and
    /// queues its records.
    pub fn asterix_datagram(&self, dec: &mut AsterixDecoder, buf: &[u8], src: Option<SocketAddr>, now: Timestamp) -> Tally {
        let mut tally = Tally::default();
        self.metrics.datagrams.fetch_add(1, Relaxed);
        self.metrics.datagram_bytes.fetch_add(buf.len() as u64, Relaxed);
        if buf.len() > self.max_record_bytes {
            self.oversize(None, src, now, &mut tally);
            return tally;
        }
        dec.decode(buf, now, &mut |x| match x {
            Ok(item) => {
                if let AsterixItem::Service(s) = &item
                    && let Some(p) = s.rotation_period_s
                    && self.allowed(s.sensor, src)
                {
                    self.metrics.set_rotation_period(s.sensor, p);
                }
                match item.record() {
                    Some(rec) => self.admit(Ok(rec), src, now, &mut tally),
                    None => self.heard(item.sensor(), src, now),
                }
            }
            Err(rej) => {
                let what = format!("ASTERIX {} (category {:03})", rej.reason.key().replace('_', " "), rej.category);
                self.trade_reject(rej.sensor, metrics::asterix_reason(rej.reason), &what, src, now, &mut tally);
            }
        });
        tally
    }

    /// Decodes one datagram of NMEA 0183 sentences for the transponder
    /// sensor of `dec`, received at `now`, and queues its reports.
    pub fn nmea_datagram(&self, dec: &mut AisDecoder, buf: &[u8], src: Option<SocketAddr>, now: Timestamp) -> Tally {
        let mut tally = Tally::default();
        let sensor = dec.sensor();
        self.metrics.datagrams.fetch_add(1, Relaxed);
        self.metrics.datagram_bytes.fetch_add(buf.len() as u64, Relaxed);
        if buf.len() > self.max_record_bytes {
            self.oversize(Some(sensor), src, now, &mut tally);
            return tally;
        }
        // Fragment sets lost between sentences (timed out, abandoned) show
        // in the decoder's counts only: count the difference.
        let lost_before = lost_fragments(dec);
        dec.decode_datagram(buf, Some(now), &mut |out| match out {
            AisOutcome::Position(p) => self.admit(Ok(Record::Report(p.report)), src, now, &mut tally),
            AisOutcome::Rejected(r) => {
                let what = format!("NMEA {}", r.key().replace('_', " "));
                self.trade_reject(Some(sensor), metrics::nmea_reason(r), &what, src, now, &mut tally);
            }
            _ => self.heard(sensor, src, now),
        });
        self.count_lost(dec, lost_before, src, now, &mut tally);
        tally
    }

    fn count_lost(&self, dec: &AisDecoder, before: [u64; 2], src: Option<SocketAddr>, now: Timestamp, tally: &mut Tally) {
        use crate::feed::nmea::AisRejectReason as R;
        let after = lost_fragments(dec);
        for (r, n) in [(R::FragmentTimeout, after[0] - before[0]), (R::FragmentAbandoned, after[1] - before[1])] {
            for _ in 0..n {
                let what = format!("NMEA {}", r.key().replace('_', " "));
                self.trade_reject(Some(dec.sensor()), metrics::nmea_reason(r), &what, src, now, tally);
            }
        }
    }
}

fn lost_fragments(dec: &AisDecoder) -> [u64; 2] {
    use crate::feed::nmea::AisRejectReason as R;
    let c = dec.counts();
    [c.rejected(R::FragmentTimeout), c.rejected(R::FragmentAbandoned)]
}

/// What one UDP listener does with its datagrams: JSON lines or
/// protobuf (`serve.udp_addr`), ASTERIX (`serve.asterix_udp`) or NMEA (a
/// transponder's `nmea_udp`).
trait Listener {
    /// For the logs.
    const NAME: &'static str;
    fn datagram(&mut self, ctx: &IngestContext, buf: &[u8], src: SocketAddr, now: Timestamp);
    /// Whether [`Listener::second`] has work: it runs once a second while
    /// it does.
    fn wants_second(&self) -> bool {
        false
    }
    fn second(&mut self, _ctx: &IngestContext, _now: Timestamp) {}
}

struct JsonOrProto;

impl Listener for JsonOrProto {
    const NAME: &'static str = "udp";
    fn datagram(&mut self, ctx: &IngestContext, buf: &[u8], src: SocketAddr, now: Timestamp) {
        ctx.datagram(buf, Some(src), now);
    }
}

impl Listener for AsterixDecoder {
    const NAME: &'static str = "asterix";
    fn datagram(&mut self, ctx: &IngestContext, buf: &[u8], src: SocketAddr, now: Timestamp) {
        ctx.asterix_datagram(self, buf, Some(src), now);
    }
}

/// Fragment sets left incomplete are dropped once a second, so a lost
/// fragment is counted even when the receiver then falls silent.
impl Listener for AisDecoder {
    const NAME: &'static str = "nmea";
    fn datagram(&mut self, ctx: &IngestContext, buf: &[u8], src: SocketAddr, now: Timestamp) {
        ctx.nmea_datagram(self, buf, Some(src), now);
    }
    fn wants_second(&self) -> bool {
        self.pending_fragments() > 0
    }
    fn second(&mut self, ctx: &IngestContext, now: Timestamp) {
        let before = lost_fragments(self);
        self.expire(now);
        ctx.count_lost(self, before, None, now, &mut Tally::default());
    }
}

/// One UDP listener's receive loop, until cancelled.
async fn receive<L: Listener>(ctx: Arc<IngestContext>, sock: tokio::net::UdpSocket, mut l: L) {
    // One byte more than the limit: a longer datagram is cut there and
    // still seen as too long.
    let mut buf = vec![0u8; (ctx.max_record_bytes + 1).clamp(2, 65_536)];
    let mut tick = tokio::time::interval(std::time::Duration::from_secs(1));
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    loop {
        tokio::select! {
            biased;
            _ = ctx.cancel.cancelled() => break,
            r = sock.recv_from(&mut buf) => match r {
                Ok((n, src)) => l.datagram(&ctx, &buf[..n], src, ctx.clock.now()),
                // ICMP errors surface here on some systems; keep going.
                Err(e) => tracing::debug!(error = %e, "{} receive error", L::NAME),
            },
            _ = tick.tick(), if l.wants_second() => l.second(&ctx, ctx.clock.now()),
        }
    }
    tracing::debug!("{} ingest stopped", L::NAME);
}

/// The ASTERIX receive loop (`serve.asterix_udp`), until cancelled.
pub async fn asterix_task(ctx: Arc<IngestContext>, sock: tokio::net::UdpSocket, dec: AsterixDecoder) {
    receive(ctx, sock, dec).await
}

/// The NMEA receive loop of one transponder sensor, until cancelled.
pub async fn nmea_task(ctx: Arc<IngestContext>, sock: tokio::net::UdpSocket, dec: AisDecoder) {
    let sensor = dec.sensor();
    receive(ctx.clone(), sock, dec).await;
    tracing::debug!(sensor = ctx.sensors.name(sensor), "nmea ingest of this sensor stopped");
}

/// The JSON / protobuf receive loop (`serve.udp_addr`), until cancelled.
pub async fn udp_task(ctx: Arc<IngestContext>, sock: tokio::net::UdpSocket) {
    receive(ctx, sock, JsonOrProto).await
}

/// The gRPC ingest service.
pub struct IngestService {
    pub ctx: Arc<IngestContext>,
}

#[tonic::async_trait]
impl v1::ingest_server::Ingest for IngestService {
    async fn send(&self, req: tonic::Request<tonic::Streaming<v1::FeedRecord>>) -> Result<tonic::Response<v1::SendSummary>, tonic::Status> {
        // Counted as an ingest task until it returns, so that shutdown
        // drains what it queued.
        let _guard = self.ctx.tracker.token();
        if self.ctx.cancel.is_cancelled() {
            return Err(tonic::Status::unavailable("shutting down"));
        }
        self.ctx.metrics.grpc_streams.fetch_add(1, Relaxed);
        let src = req.remote_addr();
        let mut stream = req.into_inner();
        let mut tally = Tally::default();
        loop {
            tokio::select! {
                biased;
                _ = self.ctx.cancel.cancelled() => break,
                m = stream.message() => match m {
                    Ok(Some(m)) => {
                        let now = self.ctx.clock.now();
                        self.ctx.admit(proto::to_record(&m, &self.ctx.sensors), src, now, &mut tally);
                    }
                    Ok(None) => break,
                    Err(e) => {
                        tracing::info!(error = %e, "ingest stream ended with an error");
                        break;
                    }
                }
            }
        }
        Ok(tonic::Response::new(v1::SendSummary {
            received: tally.received,
            accepted: tally.accepted,
            rejected: tally.rejected.into_iter().map(|(k, v)| (k.to_string(), v)).collect(),
            dropped: tally.dropped,
        }))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn allow_ranges() {
        let a = AllowRange::parse("10.1.2.0/24").unwrap();
        assert!(a.contains("10.1.2.77".parse().unwrap()));
        assert!(!a.contains("10.1.3.1".parse().unwrap()));
        assert!(a.contains("::ffff:10.1.2.3".parse().unwrap()));
        let b = AllowRange::parse("127.0.0.1:4000").unwrap();
        assert!(b.contains("127.0.0.1".parse().unwrap()));
        assert!(!b.contains("127.0.0.2".parse().unwrap()));
        let c = AllowRange::parse("fd00::/8").unwrap();
        assert!(c.contains("fd12::1".parse().unwrap()));
        assert!(!c.contains("fe80::1".parse().unwrap()));
        assert!(AllowRange::parse("0.0.0.0/0").unwrap().contains("8.8.8.8".parse().unwrap()));
        assert!(AllowRange::parse("10.0.0.0/33").is_err());
        assert!(AllowRange::parse("harbour").is_err());
    }

    #[test]
    fn log_limiter_holds_back_within_the_interval() {
        let mut l = LogLimiter::new(10.0);
        let t = |s: f64| Timestamp::from_unix_secs_f64(1000.0 + s);
        assert_eq!(l.check(Some(0), "bad_json", t(0.0)), Some(0));
        assert_eq!(l.check(Some(0), "bad_json", t(1.0)), None);
        assert_eq!(l.check(Some(0), "bad_json", t(9.9)), None);
        // Another sensor or reason has its own allowance.
        assert_eq!(l.check(Some(1), "bad_json", t(2.0)), Some(0));
        assert_eq!(l.check(Some(0), "non_finite", t(2.0)), Some(0));
        assert_eq!(l.check(Some(0), "bad_json", t(10.0)), Some(2));
        assert_eq!(l.check(Some(0), "bad_json", t(10.5)), None);
    }
}
