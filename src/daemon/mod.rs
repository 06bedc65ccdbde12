//! The live service, `skerry serve`, and its two clients, `skerry replay`
//! and `skerry watch`.
//!
//! ```text
//!  UDP (JSON lines | 0x00+protobuf) ─┐
//!  UDP ASTERIX, UDP NMEA per sensor ─┤
//!  gRPC Ingest.Send (client stream) ─┴► ingest ──► reorder task ──► engine task ──► publisher ──► Picture.Subscribe streams
//!    decode, check, count      bounded   (feed-time   bounded  (screen,   try_send per
//!    (never waits: a full      queue     ordering)    queue    Tracker)   subscriber queue)
//!     queue drops and counts)                                     │
//!                                              shared Metrics ◄───┴──► HTTP /metrics, /healthz; Monitor.Health
//! ```
//!
//! One file per concern: [`ingest`] (UDP and gRPC input), [`sequencer`]
//! (the task around the pure [`crate::reorder`] buffer), [`engine_task`]
//! (the sole owner of the tracks), [`publisher`] (fan-out), [`grpc`]
//! (picture and health services), [`http`] (metrics and health check),
//! [`metrics`] (the shared figures), [`record`] (the recording writer,
//! with `[record] dir` set), [`proto`] (generated code and conversions),
//! and the command-line edges [`serve`], [`replay`], [`watch`].
//!
//! [`run`] starts the whole service on sockets bound beforehand (port 0 in
//! tests) and returns when `shutdown` is cancelled and the service has
//! stopped in order: ingest stops, the reorder buffer is drained through
//! the engine (`finish`), the subscribers get what is queued for them (for
//! up to `serve.shutdown_flush_s`), the servers close, and the recording
//! writer writes what it holds and closes its file.
//!
//! With `[record] dir` and `restore = true`, [`run`] first makes a warm
//! start ([`crate::snapshot::warm`]): the newest snapshot that restores
//! cleanly, then every recorded record after it, before it serves, so
//! that the first subscriber already gets the restored picture. With
//! `snapshot_interval_s > 0` the engine task writes snapshots there.

pub mod clock;
pub mod engine_task;
pub mod grpc;
pub mod http;
pub mod ingest;
pub mod metrics;
pub mod proto;
pub mod publisher;
pub mod record;
pub mod replay;
pub mod sequencer;
pub mod serve;
pub mod watch;

pub use engine_task::Tracker;
pub use replay::{ReplayArgs, replay_main};
pub use serve::{ServeArgs, serve_main};
pub use watch::{WatchArgs, watch_main};

use crate::config::{Config, ServeConfig};
use crate::engine::EngineError;
use crate::feed::asterix::{AsterixDecoder, SourceTable};
use crate::feed::nmea::AisDecoder;
use crate::feed::{Screen, SensorId};
use crate::reorder::{Reorder, ReorderConfig};
use crate::snapshot::{FeedKey, Fingerprint, RestoreReport, SnapshotDir};
use crate::time::Timestamp;
use clock::DaemonClock;
use engine_task::{EngineTask, Snapshots};
use ingest::{AllowRange, IngestContext, IngestService, LogLimiter};
use metrics::Metrics;
use proto::v1;
use publisher::Publisher;
use sequencer::Sequencer;
use std::net::SocketAddr;
use std::sync::atomic::Ordering::Relaxed;
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::net::{TcpListener, UdpSocket};
use tokio::sync::mpsc;
use tokio_util::sync::CancellationToken;
use tokio_util::task::TaskTracker;

#[derive(Debug, thiserror::Error)]
pub enum DaemonError {
    #[error("`{key}`: {message}")]
    Config { key: String, message: String },
    #[error("cannot listen on {what} {addr}: {source}")]
    Bind { what: &'static str, addr: String, source: std::io::Error },
    #[error("engine: {0}")]
    Engine(#[from] EngineError),
    #[error("gRPC server: {0}")]
    Grpc(#[from] tonic::transport::Error),
    #[error("gRPC reflection: {0}")]
    Reflection(#[from] tonic_reflection::server::Error),
    #[error("HTTP server: {0}")]
    Http(std::io::Error),
    #[error("a daemon task failed: {0}")]
    Task(#[from] tokio::task::JoinError),
    #[error("cannot start the recording writer: {0}")]
    Record(std::io::Error),
}

/// The daemon's sockets, bound before [`run`] so that tests can use port 0
/// and read the addresses.
pub struct Listeners {
    pub udp: UdpSocket,
    pub grpc: TcpListener,
    pub http: TcpListener,
    /// `serve.asterix_udp` (CONTRACT.md §8), if configured.
    pub asterix: Option<UdpSocket>,
    /// The `nmea_udp` socket of each transponder sensor that has one, by
    /// sensor index.
    pub nmea: Vec<(SensorId, UdpSocket)>,
}

/// The addresses the [`Listeners`] are bound to.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct LocalAddrs {
    pub udp: SocketAddr,
    pub grpc: SocketAddr,
    pub http: SocketAddr,
    pub asterix: Option<SocketAddr>,
    pub nmea: Vec<(SensorId, SocketAddr)>,
}

impl LocalAddrs {
    /// The NMEA address of a sensor, if it has one.
    pub fn nmea_of(&self, sensor: SensorId) -> Option<SocketAddr> {
        self.nmea.iter().find(|(s, _)| *s == sensor).map(|(_, a)| *a)
    }
}

fn parse_addr(key: &str, s: &str) -> Result<SocketAddr, DaemonError> {
    s.parse().map_err(|_| DaemonError::Config { key: key.into(), message: format!("`{s}` is not an address like 127.0.0.1:4100") })
}

impl Listeners {
    /// Binds the addresses of the `[serve]` section (with
    /// `asterix_udp`, if set; the sensors' `nmea_udp` need
    /// [`Listeners::bind_config`]).
    pub async fn bind(serve: &ServeConfig) -> Result<Listeners, DaemonError> {
        let udp = parse_addr("serve.udp_addr", &serve.udp_addr)?;
        let grpc = parse_addr("serve.grpc_addr", &serve.grpc_addr)?;
        let http = parse_addr("serve.http_addr", &serve.http_addr)?;
        let mut l = Self::bind_addrs(udp, grpc, http, serve.udp_recv_buffer_bytes).await?;
        if let Some(a) = &serve.asterix_udp {
            let addr = parse_addr("serve.asterix_udp", a)?;
            l.asterix = Some(trade_socket("ASTERIX UDP", addr, serve.udp_recv_buffer_bytes)?);
        }
        Ok(l)
    }

    /// Binds every address of the configuration: `[serve]` and the
    /// transponders' `nmea_udp`.
    pub async fn bind_config(cfg: &Config) -> Result<Listeners, DaemonError> {
        let mut l = Self::bind(&cfg.serve).await?;
        for (i, s) in cfg.sensors.iter().enumerate() {
            if let Some(a) = &s.nmea_udp {
                let addr = parse_addr(&format!("sensors[{i}].nmea_udp"), a)?;
                l.nmea.push((i as SensorId, trade_socket("NMEA UDP", addr, cfg.serve.udp_recv_buffer_bytes)?));
            }
        }
        Ok(l)
    }

    /// As [`Listeners::loopback`], plus a port-0 loopback socket for each
    /// trade listener the configuration asks for (tests).
    pub async fn loopback_for(cfg: &Config) -> Result<Listeners, DaemonError> {
        let any: SocketAddr = SocketAddr::from(([127, 0, 0, 1], 0));
        let mut l = Self::loopback().await?;
        if cfg.serve.asterix_udp.is_some() {
            l.asterix = Some(trade_socket("ASTERIX UDP", any, 8 << 20)?);
        }
        for (i, s) in cfg.sensors.iter().enumerate() {
            if s.nmea_udp.is_some() {
                l.nmea.push((i as SensorId, trade_socket("NMEA UDP", any, 1 << 20)?));
            }
        }
        Ok(l)
    }

    /// Binds the given addresses; the UDP socket asks for a receive buffer
    /// of `udp_recv_buffer` bytes.
    pub async fn bind_addrs(udp: SocketAddr, grpc: SocketAddr, http: SocketAddr, udp_recv_buffer: usize) -> Result<Listeners, DaemonError> {
        let bind_err = |what: &'static str, addr: SocketAddr| move |source| DaemonError::Bind { what, addr: addr.to_string(), source };
        let udp_sock = udp_socket(udp, udp_recv_buffer).map_err(bind_err("UDP", udp))?;
        let grpc_l = TcpListener::bind(grpc).await.map_err(bind_err("gRPC", grpc))?;
        let http_l = TcpListener::bind(http).await.map_err(bind_err("HTTP", http))?;
        Ok(Listeners { udp: udp_sock, grpc: grpc_l, http: http_l, asterix: None, nmea: Vec::new() })
    }

    /// Binds every socket to port 0 on 127.0.0.1 (tests).
    pub async fn loopback() -> Result<Listeners, DaemonError> {
        let any: SocketAddr = SocketAddr::from(([127, 0, 0, 1], 0));
        Self::bind_addrs(any, any, any, 8 << 20).await
    }

    pub fn local_addrs(&self) -> std::io::Result<LocalAddrs> {
        let nmea = self.nmea.iter().map(|(s, u)| u.local_addr().map(|a| (*s, a))).collect::<std::io::Result<_>>()?;
        let asterix = self.asterix.as_ref().map(|u| u.local_addr()).transpose()?;
        Ok(LocalAddrs { udp: self.udp.local_addr()?, grpc: self.grpc.local_addr()?, http: self.http.local_addr()?, asterix, nmea })
    }
}

fn trade_socket(what: &'static str, addr: SocketAddr, recv_buffer: usize) -> Result<UdpSocket, DaemonError> {
    udp_socket(addr, recv_buffer).map_err(|source| DaemonError::Bind { what, addr: addr.to_string(), source })
}

/// A UDP socket with its receive buffer sized: bursts of plots arrive
/// faster than one task reads them, and the kernel drops what does not fit.
fn udp_socket(addr: SocketAddr, recv_buffer: usize) -> std::io::Result<UdpSocket> {
    use socket2::{Domain, Protocol, Socket, Type};
    let sock = Socket::new(Domain::for_address(addr), Type::DGRAM, Some(Protocol::UDP))?;
    if recv_buffer > 0 {
        if let Err(e) = sock.set_recv_buffer_size(recv_buffer) {
            tracing::warn!(error = %e, "cannot set the UDP receive buffer size");
        }
        let got = sock.recv_buffer_size().unwrap_or(0);
        // Linux reports twice the granted size (it counts its bookkeeping).
        if got < recv_buffer {
            tracing::info!(requested = recv_buffer, granted = got, "UDP receive buffer is smaller than asked (see net.core.rmem_max)");
        }
    }
    sock.set_nonblocking(true)?;
    sock.bind(&addr.into())?;
    UdpSocket::from_std(sock.into())
}

/// What the service did, returned by [`run`] when it has stopped.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct RunSummary {
    /// Records read from every input.
    pub received: u64,
    /// Passed the ingest checks and queued.
    pub accepted: u64,
    /// Rejected at ingest (bad input, implausible time, not allowed).
    pub rejected: u64,
    /// Accepted, then too late for the reorder window.
    pub late: u64,
    /// Accepted, then screened out as exact duplicates.
    pub duplicates: u64,
    /// Accepted, then dropped because a queue or the buffer was full.
    pub dropped: u64,
    /// Handed to the engine.
    pub processed: u64,
    /// Track records the engine made.
    pub track_records: u64,
    /// Accepted records written to the recording (with `[record]`).
    pub recorded: u64,
    /// Accepted records the recording lost (queue full, write errors).
    pub not_recorded: u64,
}

impl RunSummary {
    /// Every accepted record is accounted for: processed, late, duplicate
    /// or dropped by a full reorder buffer (ingest-queue drops are never
    /// counted as accepted).
    pub fn accounted(&self) -> bool {
        self.accepted == self.processed + self.late + self.duplicates + self.dropped
    }
}

/// The reorder buffer's settings from `[serve]`.
pub fn reorder_config(s: &ServeConfig) -> ReorderConfig {
    ReorderConfig {
        window_s: s.reorder_window_s,
        idle_s: s.reorder_idle_s,
        max_skew_s: s.reorder_max_skew_s,
        max_held: s.reorder_max_held,
        scan_end_closes: s.reorder_scan_end_closes,
    }
}

/// Checks the `[serve]` keys and the sensors' `allow_from` lists (the
/// lists come back parsed, by sensor).
pub fn check_settings(cfg: &Config) -> Result<Vec<Vec<AllowRange>>, DaemonError> {
    let s = &cfg.serve;
    let bad = |key: &str, message: String| DaemonError::Config { key: format!("serve.{key}"), message };
    for (k, v) in [
        ("reorder_window_s", s.reorder_window_s),
        ("reorder_idle_s", s.reorder_idle_s),
        ("reorder_max_skew_s", s.reorder_max_skew_s),
        ("health_interval_s", s.health_interval_s),
        ("silent_scans", s.silent_scans),
        ("transponder_silent_s", s.transponder_silent_s),
        ("bad_input_log_interval_s", s.bad_input_log_interval_s),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return Err(bad(k, format!("must be a positive number (got {v})")));
        }
    }
    if !(s.shutdown_flush_s.is_finite() && s.shutdown_flush_s >= 0.0) {
        return Err(bad("shutdown_flush_s", "must be ≥ 0".into()));
    }
    if s.reorder_idle_s < s.reorder_window_s {
        return Err(bad("reorder_idle_s", format!("must be at least reorder_window_s ({})", s.reorder_window_s)));
    }
    if !(s.queue_warn_fraction > 0.0 && s.queue_warn_fraction <= 1.0) {
        return Err(bad("queue_warn_fraction", "must be in (0, 1]".into()));
    }
    for (k, v) in [
        ("ingest_queue", s.ingest_queue),
        ("engine_queue", s.engine_queue),
        ("subscriber_queue", s.subscriber_queue),
        ("max_subscribers", s.max_subscribers),
        ("reorder_max_held", s.reorder_max_held),
    ] {
        if v == 0 {
            return Err(bad(k, "must be at least 1".into()));
        }
    }
    if cfg.feed.max_record_bytes == 0 {
        return Err(DaemonError::Config { key: "feed.max_record_bytes".into(), message: "must be at least 1".into() });
    }
    let mut allow = Vec::new();
    for (i, sensor) in cfg.sensors.iter().enumerate() {
        let mut list = Vec::new();
        for (j, a) in sensor.allow_from.iter().enumerate() {
            list.push(AllowRange::parse(a).map_err(|m| DaemonError::Config { key: format!("sensors[{i}].allow_from[{j}]"), message: m })?);
        }
        allow.push(list);
    }
    Ok(allow)
}

/// Runs the service with the real tracking engine until `shutdown` is
/// cancelled, after a warm start when `[record]` asks for one; see the
/// module docs.
pub async fn run(cfg: Config, listeners: Listeners, shutdown: CancellationToken) -> Result<RunSummary, DaemonError> {
    check_settings(&cfg)?;
    if let Some(r) = cfg.record.as_ref().filter(|r| r.restore) {
        tracing::info!(dir = %r.dir, "warm start: reading the snapshots and the recording");
    }
    let warm = {
        let cfg = cfg.clone();
        tokio::task::spawn_blocking(move || crate::snapshot::warm_start(&cfg)).await??
    };
    if cfg.record.is_some() {
        log_restore(&warm.report);
    }
    let (engine, screen, last) = warm.pipeline.into_parts();
    run_from(cfg, listeners, shutdown, engine, screen, last, None).await
}

/// The start-up log line of a warm start.
fn log_restore(r: &RestoreReport) {
    let [tentative, confirmed, coasting] = r.tracks;
    let seconds = r.elapsed.as_secs_f64();
    let t = &r.tail;
    match (&r.snapshot, &r.cold) {
        (_, Some(why)) => tracing::info!(next_track = r.next_track, "starting cold: {why}"),
        (Some(path), None) => tracing::info!(
            snapshot = %path.display(),
            feed_time = %r.snapshot_feed_time.map(|t| t.to_rfc3339()).unwrap_or_default(),
            tail_files = t.files,
            tail_records = t.replayed,
            bad_lines = t.bad_lines,
            tentative, confirmed, coasting,
            next_track = r.next_track,
            seconds,
            "restored from a snapshot and the recording after it"
        ),
        (None, None) if t.files > 0 => tracing::info!(
            recording_files = t.files,
            records = t.replayed,
            bad_lines = t.bad_lines,
            tentative, confirmed, coasting,
            next_track = r.next_track,
            seconds,
            "no usable snapshot: rebuilt from the whole recording"
        ),
        (None, None) => tracing::info!("no snapshot and no recording: starting cold"),
    }
    for (path, why) in &t.unreadable {
        tracing::warn!(file = %path.display(), "recording not read: {why}");
    }
}

/// [`run`] with any [`Tracker`], started fresh.
pub async fn run_with<T: Tracker>(cfg: Config, listeners: Listeners, shutdown: CancellationToken, tracker: T) -> Result<RunSummary, DaemonError> {
    // Duplicates only: the time check is made at ingest.
    let screen = Screen::new(None, cfg.feed.max_time_offset_s);
    run_from(cfg, listeners, shutdown, tracker, screen, None, None).await
}

/// [`run_with`], recording (when `[record]` is set) through `disk`
/// instead of the file system: tests inject failing disks.
pub async fn run_with_disk<T: Tracker>(cfg: Config, listeners: Listeners, shutdown: CancellationToken, tracker: T, disk: Box<dyn record::Disk>) -> Result<RunSummary, DaemonError> {
    let screen = Screen::new(None, cfg.feed.max_time_offset_s);
    run_from(cfg, listeners, shutdown, tracker, screen, None, Some(disk)).await
}

/// The service around a tracker and screen that have handled the records
/// up to `last` in feed order (a warm start), or none; recording through
/// `disk` when given, else the file system.
async fn run_from<T: Tracker>(
    cfg: Config,
    listeners: Listeners,
    shutdown: CancellationToken,
    tracker: T,
    screen: Screen,
    last: Option<FeedKey>,
    disk: Option<Box<dyn record::Disk>>,
) -> Result<RunSummary, DaemonError> {
    let allow = check_settings(&cfg)?;
    // The trade listeners' checks are the configuration's validation;
    // repeated here, before anything starts, for listeners and a
    // configuration put together in code.
    let sources = match &listeners.asterix {
        Some(_) => {
            let table = SourceTable::from_config(&cfg).map_err(|e| DaemonError::Config { key: "sensors".into(), message: e.to_string() })?;
            if table.is_empty() {
                tracing::warn!("the ASTERIX listener is on but no radar has asterix_sac and asterix_sic: every ASTERIX record will be an unknown source");
            }
            Some(table)
        }
        None => None,
    };
    for (sensor, _) in &listeners.nmea {
        if cfg.sensors.get(*sensor as usize).map(|s| s.kind) != Some(crate::feed::SensorKind::Transponder) {
            return Err(DaemonError::Config { key: format!("sensors[{sensor}].nmea_udp"), message: "only a transponder sensor has an NMEA listener".into() });
        }
    }
    let addrs = listeners.local_addrs().map_err(DaemonError::Http)?;
    let s = cfg.serve.clone();
    let clock = DaemonClock::start();
    let metrics = Arc::new(Metrics::new(&cfg, clock.now()));
    // Ingest → recording writer: bounded, filled with try_send.
    let (recorder, recording) = match &cfg.record {
        Some(r) => {
            let disk = disk.unwrap_or_else(|| Box::new(record::FsDisk::new(&r.dir)));
            let (rec, handle) = record::start(r, disk, cfg.sensor_table(), metrics.clone(), clock, s.bad_input_log_interval_s).map_err(DaemonError::Record)?;
            (Some(rec), Some(handle))
        }
        None => (None, None),
    };

    // Ingest → reorder: bounded, filled with try_send (ingest never waits).
    let (arrival_tx, arrival_rx) = mpsc::channel(s.ingest_queue);
    // Reorder → engine: bounded; the reorder task waits on it, which backs
    // up into the ingest queue when the engine falls behind.
    let (batch_tx, batch_rx) = mpsc::channel(s.engine_queue);
    // Engine → reorder: the feed time the engine waits for, so that the
    // reorder task releases up to it on time (a watch: only the latest
    // value matters).
    let (due_tx, due_rx) = tokio::sync::watch::channel(None);
    // Subscription requests to the engine task, which owns the picture.
    let (control_tx, control_rx) = mpsc::channel(64);
    // The engine task is done: the servers may close.
    let drained = CancellationToken::new();
    let ingest_tasks = TaskTracker::new();
    let tasks = TaskTracker::new();

    let ctx = Arc::new(IngestContext {
        sensors: cfg.sensor_table(),
        allow,
        max_record_bytes: cfg.feed.max_record_bytes,
        max_time_offset_s: cfg.feed.max_time_offset_s,
        metrics: metrics.clone(),
        clock,
        tx: arrival_tx,
        log: Mutex::new(LogLimiter::new(s.bad_input_log_interval_s)),
        cancel: shutdown.clone(),
        tracker: ingest_tasks.clone(),
        recorder: recorder.clone(),
    });
    ingest_tasks.spawn(ingest::udp_task(ctx.clone(), listeners.udp));
    if let (Some(sock), Some(table)) = (listeners.asterix, sources) {
        ingest_tasks.spawn(ingest::asterix_task(ctx.clone(), sock, AsterixDecoder::new(table)));
    }
    for (sensor, sock) in listeners.nmea {
        ingest_tasks.spawn(ingest::nmea_task(ctx.clone(), sock, AisDecoder::new(sensor)));
    }
    ingest_tasks.close();

    // The reorder task wakes when a release is due; this tick is only its
    // backstop (see sequencer.rs), at most 100 times a second.
    let tick = Duration::from_secs_f64((s.reorder_window_s / 10.0).clamp(0.01, 0.1));
    tasks.spawn(
        Sequencer {
            reorder: Reorder::new(reorder_config(&s)),
            rx: arrival_rx,
            tx: batch_tx,
            metrics: metrics.clone(),
            clock,
            tick,
            engine_due: due_rx,
            cancel: shutdown.clone(),
            ingest: ingest_tasks.clone(),
            last_pop: Timestamp::default(),
        }
        .run(),
    );
    let engine = tokio::spawn(
        EngineTask {
            tracker,
            screen,
            last,
            floor: last,
            snapshots: cfg.record.as_ref().filter(|r| r.snapshot_interval_s > 0.0).map(|r| Snapshots {
                dir: SnapshotDir::new(&r.dir, r.snapshot_keep),
                interval: Duration::from_secs_f64(r.snapshot_interval_s),
                fingerprint: Fingerprint::of(&cfg),
                clock,
                recorder: recorder.clone(),
            }),
            batches: batch_rx,
            control: control_rx,
            publisher: Publisher::new(s.subscriber_queue, s.max_subscribers, Some(metrics.clone())),
            metrics: metrics.clone(),
            due: due_tx,
            live_at: None,
        }
        .run(),
    );
    tasks.spawn(rates_task(metrics.clone(), Duration::from_secs_f64(s.health_interval_s), drained.clone()));

    let (health, health_service) = tonic_health::server::health_reporter();
    health.set_serving::<v1::ingest_server::IngestServer<IngestService>>().await;
    health.set_serving::<v1::picture_server::PictureServer<grpc::PictureService>>().await;
    health.set_serving::<v1::monitor_server::MonitorServer<grpc::MonitorService>>().await;
    let reflection = tonic_reflection::server::Builder::configure().register_encoded_file_descriptor_set(proto::FILE_DESCRIPTOR_SET).build_v1()?;
    let grpc_server = tonic::transport::Server::builder()
        .add_service(v1::ingest_server::IngestServer::new(IngestService { ctx: ctx.clone() }))
        .add_service(v1::picture_server::PictureServer::new(grpc::PictureService { control: control_tx }))
        .add_service(v1::monitor_server::MonitorServer::new(grpc::MonitorService { metrics: metrics.clone(), clock, interval_s: s.health_interval_s, cancel: shutdown.clone() }))
        .add_service(health_service)
        .add_service(reflection)
        .serve_with_incoming_shutdown(
            // Nagle's algorithm off: a picture update is a small write that
            // must leave at once, not wait for the client's delayed ACK
            // (tens of ms). Given our own listener, tonic leaves the
            // socket option unset unless asked.
            tonic::transport::server::TcpIncoming::from(listeners.grpc).with_nodelay(Some(true)),
            drained.clone().cancelled_owned(),
        );
    let flush = Duration::from_secs_f64(s.shutdown_flush_s);
    let flush_deadline = drained.clone();
    let grpc_task = tokio::spawn(async move {
        tokio::select! {
            r = grpc_server => r.map_err(DaemonError::Grpc),
            _ = async { flush_deadline.cancelled().await; tokio::time::sleep(flush).await } => {
                tracing::warn!("subscribers still reading after {:.1} s: closing their streams", flush.as_secs_f64());
                Ok(())
            }
        }
    });
    let router = http::router(http::HttpState { metrics: metrics.clone(), clock });
    let http_task = tokio::spawn(axum::serve(listeners.http, router).with_graceful_shutdown(drained.clone().cancelled_owned()).into_future());
    tracing::info!(udp = %addrs.udp, grpc = %addrs.grpc, http = %addrs.http, sensors = cfg.sensors.len(), "skerry serving");
    if let Some(a) = addrs.asterix {
        tracing::info!(asterix_udp = %a, "listening for ASTERIX");
    }
    for (s, a) in &addrs.nmea {
        tracing::info!(sensor = ctx.sensors.name(*s), nmea_udp = %a, "listening for NMEA");
    }

    shutdown.cancelled().await;
    tracing::info!("shutting down: ingest stopped, draining the reorder buffer through the engine");
    health.set_not_serving::<v1::ingest_server::IngestServer<IngestService>>().await;
    let engine_summary = engine.await?;
    drained.cancel();
    grpc_task.await??;
    http_task.await?.map_err(DaemonError::Http)?;
    tasks.close();
    tasks.wait().await;
    drop(ctx);
    // Ingest stopped before the engine finished: nothing more is queued.
    if let Some(r) = recording {
        r.finish().await;
    }

    let t = metrics.totals();
    let li = metrics::reason_index("late");
    let di = metrics::reason_index("duplicate");
    let all_rejected: u64 = t.rejected.iter().sum();
    let summary = RunSummary {
        received: t.received,
        accepted: t.accepted,
        rejected: all_rejected - t.rejected[li] - t.rejected[di],
        late: t.rejected[li],
        duplicates: t.rejected[di],
        dropped: metrics.dropped_reorder_full.load(Relaxed),
        processed: t.processed,
        track_records: engine_summary.track_records,
        recorded: metrics.record.recorded.load(Relaxed),
        not_recorded: metrics.record.not_recorded(),
    };
    tracing::info!(
        received = summary.received,
        accepted = summary.accepted,
        rejected = summary.rejected,
        late = summary.late,
        duplicate = summary.duplicates,
        dropped = summary.dropped,
        ingest_queue_dropped = metrics.dropped_ingest_queue.load(Relaxed),
        processed = summary.processed,
        track_records = summary.track_records,
        recorded = summary.recorded,
        not_recorded = summary.not_recorded,
        "skerry stopped"
    );
    Ok(summary)
}

/// Accepted records per second per sensor, once per health period.
async fn rates_task(metrics: Arc<Metrics>, period: Duration, stop: CancellationToken) {
    let n = metrics.sensors.len();
    let mut prev: Vec<u64> = (0..n).map(|i| metrics.snapshot(Some(i as u16)).accepted).collect();
    let mut last = tokio::time::Instant::now();
    let mut tick = tokio::time::interval(period);
    tick.tick().await;
    loop {
        tokio::select! {
            _ = stop.cancelled() => break,
            _ = tick.tick() => {
                let now = tokio::time::Instant::now();
                let dt = now.duration_since(last).as_secs_f64().max(1e-6);
                last = now;
                let cur: Vec<u64> = (0..n).map(|i| metrics.snapshot(Some(i as u16)).accepted).collect();
                if let Ok(mut r) = metrics.rates.lock() {
                    *r = cur.iter().zip(&prev).map(|(c, p)| c.saturating_sub(*p) as f64 / dt).collect();
                }
                prev = cur;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashMap;

    /// deploy/skerry.toml documents every [serve] key with its default.
    #[test]
    fn deploy_config_documents_every_serve_key_with_its_default() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy/skerry.toml");
        let deployed = Config::load(Some(&path), &HashMap::new()).unwrap();
        let demo = Config::load(None, &HashMap::new()).unwrap();
        let a = toml::Value::try_from(&deployed.serve).unwrap();
        let b = toml::Value::try_from(&demo.serve).unwrap();
        assert_eq!(a, b, "deploy/skerry.toml [serve] differs from the defaults");
        let text = std::fs::read_to_string(&path).unwrap();
        for key in b.as_table().unwrap().keys() {
            assert!(text.contains(&format!("\n{key} =")) || text.contains(&format!("# {key} =")), "deploy/skerry.toml lacks `{key}`");
        }
        check_settings(&deployed).unwrap();
    }

    #[test]
    fn bad_settings_name_the_key() {
        let mut env = HashMap::new();
        env.insert("SKERRY__SERVE__REORDER_WINDOW_S".to_string(), "-1".to_string());
        let cfg = Config::load(None, &env).unwrap();
        let e = check_settings(&cfg).unwrap_err().to_string();
        assert!(e.contains("serve.reorder_window_s"), "{e}");
        let mut cfg = Config::load(None, &HashMap::new()).unwrap();
        cfg.sensors[0].allow_from = vec!["10.0.0.0/8".into(), "quay".into()];
        let e = check_settings(&cfg).unwrap_err().to_string();
        assert!(e.contains("sensors[0].allow_from[1]"), "{e}");
    }
}
