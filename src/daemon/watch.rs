//! `skerry watch`: a live table of the firm tracks of a running daemon, or
//! its track records as JSON lines.

use super::proto::{self, v1};
use crate::feed::{TrackRecord, TrackStatus};
use crate::time::Timestamp;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::io::Write;
use std::time::Duration;

/// Watch the tracks of a running `skerry serve`.
#[derive(Debug, Clone, clap::Args)]
pub struct WatchArgs {
    /// The daemon's gRPC address: grpc://HOST:PORT.
    #[arg(long, value_name = "URL")]
    pub from: String,
    /// Print contract track records, one JSON line each, instead of the table.
    #[arg(long)]
    pub jsonl: bool,
    /// With --jsonl: every status (tentative and ended too), not only
    /// confirmed and coasting.
    #[arg(long)]
    pub all: bool,
    /// At most one record per track per this many seconds of feed time.
    #[arg(long, default_value_t = 0.0)]
    pub min_interval: f64,
    /// Table refresh period (s).
    #[arg(long, default_value_t = 1.0)]
    pub refresh: f64,
}

/// The table of confirmed and coasting tracks, newest feed time `now`.
pub fn render_table(tracks: &BTreeMap<u64, TrackRecord>, now: Option<Timestamp>, skipped: u64) -> String {
    let mut o = String::new();
    let firm: Vec<_> = tracks.values().filter(|t| t.status.is_firm()).collect();
    let _ = writeln!(o, "skerry watch: {} firm tracks, feed time {}{}", firm.len(), now.map(|t| t.to_rfc3339()).unwrap_or_else(|| "-".into()), if skipped > 0 { format!(", {skipped} updates skipped") } else { String::new() });
    let _ = writeln!(o, "{:>6} {:<9} {:>11} {:>11} {:>7} {:>7} {:>7}  {:<24} identity", "track", "status", "lat", "lon", "kn", "course", "age s", "sensors");
    for t in firm {
        let age = now.map(|n| n.secs_since(t.time)).unwrap_or(0.0);
        let sensors = t.sensors.iter().map(|s| &**s).collect::<Vec<_>>().join(",");
        let _ = writeln!(
            o,
            "{:>6} {:<9} {:>11.6} {:>11.6} {:>7.1} {:>7.1} {:>7.1}  {:<24} {}",
            t.track,
            t.status.as_str(),
            t.lat_deg,
            t.lon_deg,
            t.speed_kn,
            t.course_deg,
            age,
            sensors,
            t.identity.as_deref().unwrap_or("-")
        );
    }
    o
}

pub fn watch_main(args: &WatchArgs) -> anyhow::Result<()> {
    let addr = args.from.strip_prefix("grpc://").ok_or_else(|| anyhow::anyhow!("`{}`: expected grpc://HOST:PORT", args.from))?;
    if !(args.refresh.is_finite() && args.refresh > 0.0) {
        anyhow::bail!("--refresh must be a positive number of seconds");
    }
    let rt = tokio::runtime::Builder::new_current_thread().enable_all().build()?;
    rt.block_on(async move {
        let mut client = v1::picture_client::PictureClient::connect(format!("http://{addr}")).await?;
        use v1::TrackStatus as S;
        let statuses: Vec<i32> = match (args.jsonl, args.all) {
            (true, true) => vec![S::Tentative as i32, S::Confirmed as i32, S::Coasting as i32, S::Ended as i32],
            (true, false) => vec![S::Confirmed as i32, S::Coasting as i32],
            // The table takes ended records too, to drop tracks as they end.
            (false, _) => vec![S::Confirmed as i32, S::Coasting as i32, S::Ended as i32],
        };
        let req = v1::SubscribeRequest { statuses, area: None, min_interval_s: args.min_interval };
        let mut stream = client.subscribe(req).await?.into_inner();
        let mut tracks = BTreeMap::new();
        let mut now: Option<Timestamp> = None;
        let mut skipped = 0u64;
        let mut tick = tokio::time::interval(Duration::from_secs_f64(args.refresh));
        let stdout = std::io::stdout();
        loop {
            tokio::select! {
                m = stream.message() => {
                    let Some(m) = m? else { break };
                    match m.update {
                        Some(v1::picture_update::Update::Track(t)) => {
                            let t = proto::track_from_proto(&t)?;
                            if args.jsonl {
                                let mut out = stdout.lock();
                                writeln!(out, "{}", t.to_json())?;
                                out.flush()?;
                                continue;
                            }
                            now = Some(now.map_or(t.time, |n| n.max(t.time)));
                            if t.status == TrackStatus::Ended {
                                tracks.remove(&t.track);
                            } else {
                                tracks.insert(t.track, t);
                            }
                        }
                        Some(v1::picture_update::Update::Skipped(s)) => {
                            skipped += s.updates;
                            if args.jsonl {
                                eprintln!("skerry watch: skipped {} updates (reading too slowly)", s.updates);
                            }
                        }
                        _ => {}
                    }
                }
                _ = tick.tick(), if !args.jsonl => {
                    let mut out = stdout.lock();
                    write!(out, "\x1b[2J\x1b[H{}", render_table(&tracks, now, skipped))?;
                    out.flush()?;
                }
            }
        }
        if !args.jsonl {
            let mut out = stdout.lock();
            write!(out, "{}", render_table(&tracks, now, skipped))?;
        }
        eprintln!("skerry watch: the daemon closed the stream");
        anyhow::Ok(())
    })
}
