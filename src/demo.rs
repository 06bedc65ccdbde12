//! `skerry demo`: the whole service on the bundled demo harbour, in one
//! command.
//!
//! It starts the daemon in this process on loopback (ports chosen by the
//! system), subscribes to every track record over gRPC, replays the busy
//! demo feed into it over UDP as fast as the pacing allows, shows a live
//! table of the confirmed tracks while it runs, then shuts the daemon
//! down in order, scores the tracks it received against the scenario's
//! truth, and writes a plot of truth and tracks as SVG.

use crate::config::Config;
use crate::daemon::proto::{self, v1};
use crate::daemon::replay::{Pace, Target, replay};
use crate::daemon::watch::render_table;
use crate::daemon::{Listeners, run};
use crate::feed::{TrackRecord, TrackStatus};
use crate::geo::{Geodetic, LocalFrame};
use crate::score::{ScoreOptions, parse_truth_jsonl, plot_svg, score};
use anyhow::{Context, Result};
use std::collections::BTreeMap;
use std::io::Write;
use std::path::PathBuf;
use std::time::{Duration, Instant};
use tokio_util::sync::CancellationToken;

#[derive(clap::Args, Debug)]
pub struct DemoArgs {
    /// Folder with the demo scenario (feed.jsonl, truth.jsonl, config.toml).
    #[arg(long, default_value = "demo-feeds/busy-afternoon")]
    pub scenario: PathBuf,
    /// Where to write the SVG plot and the received track records.
    #[arg(long, default_value = "target/demo")]
    pub out: PathBuf,
    /// Replay speed against the recorded times (30: the 8-minute feed in
    /// 16 s); 0 sends as fast as the pacing allows.
    #[arg(long, default_value_t = 30.0)]
    pub speed: f64,
    /// No live table (for scripts and tests).
    #[arg(long)]
    pub quiet: bool,
}

pub fn demo(args: &DemoArgs) -> Result<()> {
    let dir = &args.scenario;
    let mut cfg = Config::load(Some(&dir.join("config.toml")), &Config::env_overrides())?;
    // The demo feed carries its recorded (past) times: let the live
    // plausibility check accept them, as a replay of old data needs.
    cfg.feed.max_time_offset_s = 1e10;
    // The demo scores everything it receives: give its one subscriber a
    // queue long enough that it never has to skip.
    cfg.serve.subscriber_queue = cfg.serve.subscriber_queue.max(1 << 20);
    let feed_path = dir.join("feed.jsonl");
    let text = std::fs::read_to_string(&feed_path).with_context(|| format!("{}: cannot read", feed_path.display()))?;
    let lines: Vec<String> = text.lines().filter(|l| !l.trim().is_empty()).map(str::to_string).collect();
    let truth_path = dir.join("truth.jsonl");
    let truth_text = std::fs::read_to_string(&truth_path).with_context(|| format!("{}: cannot read", truth_path.display()))?;
    let truth = parse_truth_jsonl(&truth_text, &truth_path.display().to_string())?;
    let frame = LocalFrame::new(Geodetic::new(cfg.site.lat_deg, cfg.site.lon_deg, cfg.site.height_m));
    std::fs::create_dir_all(&args.out).with_context(|| format!("{}: cannot create", args.out.display()))?;

    let started = Instant::now();
    let rt = tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build()?;
    let (tracks, summary) = rt.block_on(async {
        let listeners = Listeners::loopback().await?;
        let addrs = listeners.local_addrs()?;
        let shutdown = CancellationToken::new();
        let daemon = tokio::spawn(run(cfg.clone(), listeners, shutdown.clone()));
        println!("skerry demo: daemon on udp {} grpc {} http {}", addrs.udp, addrs.grpc, addrs.http);

        // Subscribe to every status, so the score sees tracks end.
        let mut client = loop {
            match v1::picture_client::PictureClient::connect(format!("http://{}", addrs.grpc)).await {
                Ok(c) => break c,
                Err(_) if started.elapsed() < Duration::from_secs(10) => tokio::time::sleep(Duration::from_millis(50)).await,
                Err(e) => return Err(anyhow::Error::from(e)),
            }
        };
        use v1::TrackStatus as S;
        let req = v1::SubscribeRequest {
            statuses: vec![S::Tentative as i32, S::Confirmed as i32, S::Coasting as i32, S::Ended as i32],
            area: None,
            min_interval_s: 0.0,
        };
        let mut stream = client.subscribe(req).await?.into_inner();
        let quiet = args.quiet;
        let collector = tokio::spawn(async move {
            let mut all: Vec<TrackRecord> = Vec::new();
            let mut live: BTreeMap<u64, TrackRecord> = BTreeMap::new();
            let mut skipped = 0u64;
            let mut shown = Instant::now();
            while let Ok(Some(m)) = stream.message().await {
                match m.update {
                    Some(v1::picture_update::Update::Track(t)) => {
                        let Ok(t) = proto::track_from_proto(&t) else { continue };
                        if t.status.is_firm() {
                            live.insert(t.track, t.clone());
                        } else {
                            live.remove(&t.track);
                        }
                        let now = t.time;
                        all.push(t);
                        if !quiet && shown.elapsed() > Duration::from_millis(500) {
                            shown = Instant::now();
                            let mut out = std::io::stdout().lock();
                            let _ = write!(out, "\x1b[2J\x1b[H{}", render_table(&live, Some(now), skipped));
                            let _ = out.flush();
                        }
                    }
                    Some(v1::picture_update::Update::Skipped(s)) => skipped += s.updates,
                    _ => {}
                }
            }
            (all, skipped)
        });

        let target = Target::parse(&format!("udp://{}", addrs.udp))?;
        let pace = Pace { speed: args.speed, ..Pace::default() };
        let pb = if args.quiet { indicatif::ProgressBar::hidden() } else { indicatif::ProgressBar::new(lines.len() as u64) };
        let sent = replay(&lines, &target, &pace, &pb).await?;
        pb.finish_and_clear();
        // Let the reorder window pass, then stop in order: the daemon
        // drains what it holds through the engine and closes the streams.
        tokio::time::sleep(Duration::from_millis(1500)).await;
        shutdown.cancel();
        let summary = daemon.await??;
        let (all, skipped) = collector.await?;
        anyhow::Ok((all, (sent, summary, skipped)))
    })?;
    let (sent, run_summary, skipped) = summary;
    let elapsed = started.elapsed();

    let firm: std::collections::BTreeSet<u64> = tracks.iter().filter(|t| t.status.is_firm()).map(|t| t.track).collect();
    let live_end: usize = {
        let mut last: BTreeMap<u64, TrackStatus> = BTreeMap::new();
        for t in &tracks {
            last.insert(t.track, t.status);
        }
        last.values().filter(|s| s.is_firm()).count()
    };
    let tracks_path = args.out.join("tracks.jsonl");
    let mut body = String::new();
    for t in &tracks {
        t.write_json(&mut body);
        body.push('\n');
    }
    std::fs::write(&tracks_path, body).with_context(|| format!("{}: cannot write", tracks_path.display()))?;
    let report = score(&truth, &tracks, &frame, &ScoreOptions::default())?;
    let svg = args.out.join(format!("{}.svg", dir.file_name().and_then(|s| s.to_str()).unwrap_or("demo")));
    plot_svg(&svg, &truth, &tracks, &frame)?;

    println!();
    println!("skerry demo: {} — {} feed records sent over UDP in {} datagrams", dir.display(), sent.records, sent.datagrams);
    println!("  daemon: {run_summary:?}");
    println!("  {} track records received ({} skipped), {} tracks ever confirmed, {} firm at the end", tracks.len(), skipped, firm.len(), live_end);
    println!("  wall time {:.1} s", elapsed.as_secs_f64());
    println!();
    print!("{}", report.table());
    println!();
    println!("track records: {}", tracks_path.display());
    println!("plot of truth and tracks: {}", svg.display());
    Ok(())
}
