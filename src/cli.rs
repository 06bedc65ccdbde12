//! The command line: `skerry <command>`. Each command is a thin layer over
//! the library.

use crate::config::Config;
use crate::engine::Engine;
use crate::offline::{read_feeds, report_rejects};
use anyhow::{Context, Result};
use clap::{Parser, Subcommand};
use std::io::Write;
use std::path::PathBuf;

#[derive(Parser, Debug)]
#[command(name = "skerry", version, about = "Streaming multi-target tracker for harbour and coastal surveillance", long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Run the tracking engine over recorded feed files and write track records.
    Track(TrackArgs),
    /// Decode and validate feed files only; print counts per sensor and reject reason.
    Check(CheckArgs),
    /// Run the live service: UDP and gRPC ingest, track subscriptions, health.
    Serve(crate::daemon::ServeArgs),
    /// Send a recorded feed to a running service, paced by its record times.
    Replay(crate::daemon::ReplayArgs),
    /// Show the live track picture of a running service.
    Watch(crate::daemon::WatchArgs),
    /// Generate a scenario: feed, truth and configuration.
    Simulate(crate::sim::SimulateArgs),
    /// Score track records against truth (GOSPA, continuity, errors).
    Score(crate::score::ScoreArgs),
    /// One command that shows skerry working on the bundled demo harbour.
    Demo(crate::demo::DemoArgs),
}

#[derive(clap::Args, Debug)]
pub struct TrackArgs {
    /// Configuration file (TOML): site, sensors, tracking.
    #[arg(long, short)]
    pub config: PathBuf,
    /// Feed files (JSON Lines); records may be in any order.
    #[arg(required = true)]
    pub feeds: Vec<PathBuf>,
    /// Write track records here instead of standard output.
    #[arg(long, short)]
    pub out: Option<PathBuf>,
}

#[derive(clap::Args, Debug)]
pub struct CheckArgs {
    /// Configuration file (TOML).
    #[arg(long, short)]
    pub config: PathBuf,
    /// Feed files (JSON Lines).
    #[arg(required = true)]
    pub feeds: Vec<PathBuf>,
}

pub fn load_config(path: &std::path::Path) -> Result<Config> {
    Ok(Config::load(Some(path), &Config::env_overrides())?)
}

/// Runs the engine over a decoded feed and returns the track records.
pub fn run_engine(cfg: &Config, records: &[crate::feed::Record]) -> Result<Vec<crate::feed::TrackRecord>> {
    let mut engine = Engine::new(cfg)?;
    let mut out = Vec::with_capacity(records.len());
    for r in records {
        engine.handle(r, &mut out);
    }
    engine.finish(&mut out);
    Ok(out)
}

pub fn track(args: &TrackArgs) -> Result<()> {
    let cfg = load_config(&args.config)?;
    let feed = read_feeds(&args.feeds, &cfg)?;
    report_rejects(&feed, &cfg.sensor_table());
    let mut engine = Engine::new(&cfg)?;
    let sink: Box<dyn Write> = match &args.out {
        Some(p) => Box::new(std::fs::File::create(p).with_context(|| format!("{}: cannot create", p.display()))?),
        None => Box::new(std::io::stdout().lock()),
    };
    let mut w = sink;
    let mut out = Vec::new();
    // Lines are written as bytes straight into one buffer, handed to the
    // sink about 64 KiB at a time.
    let mut buf: Vec<u8> = Vec::with_capacity(1 << 17);
    let mut written = 0u64;
    let mut flush = |out: &mut Vec<crate::feed::TrackRecord>, w: &mut Box<dyn Write>, last: bool| -> Result<()> {
        for r in out.drain(..) {
            r.write_json_bytes(&mut buf);
            buf.push(b'\n');
            written += 1;
        }
        if last || buf.len() >= 1 << 16 {
            w.write_all(&buf)?;
            buf.clear();
        }
        Ok(())
    };
    for r in &feed.records {
        engine.handle(r, &mut out);
        if out.len() > 256 {
            flush(&mut out, &mut w, false)?;
        }
    }
    engine.finish(&mut out);
    flush(&mut out, &mut w, true)?;
    w.flush()?;
    drop(w);
    let s = engine.stats();
    eprintln!(
        "{} records tracked ({} rejected); {} track records written; tracks started {}, live at end {} ({} confirmed, {} coasting, {} tentative)",
        feed.records.len(),
        feed.counts.total_rejected(),
        written,
        s.tracks_started,
        engine.live_tracks(),
        s.confirmed,
        s.coasting,
        s.tentative
    );
    Ok(())
}

pub fn check(args: &CheckArgs) -> Result<()> {
    let cfg = load_config(&args.config)?;
    let feed = read_feeds(&args.feeds, &cfg)?;
    let sensors = cfg.sensor_table();
    report_rejects(&feed, &sensors);
    print!("{}", feed.counts.table(&sensors));
    Ok(())
}

pub fn main() -> Result<()> {
    let cli = Cli::parse();
    match &cli.command {
        Command::Track(a) => track(a),
        Command::Check(a) => check(a),
        Command::Serve(a) => crate::daemon::serve_main(a),
        Command::Replay(a) => crate::daemon::replay_main(a),
        Command::Watch(a) => crate::daemon::watch_main(a),
        Command::Simulate(a) => crate::sim::run(a),
        Command::Score(a) => crate::score::run(a),
        Command::Demo(a) => crate::demo::demo(a),
    }
}
