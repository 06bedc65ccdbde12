//! The command line: `skerry <command>`. Each command is a thin layer over
//! the library.

use crate::config::Config;
use crate::engine::Engine;
use crate::feed::tracks::TrackLineWriter;
use crate::offline::trade::{report_trade_rejects, summary_table};
use crate::offline::{NmeaInput, TradeInputs, read_inputs, report_rejects};
use crate::time::Timestamp;
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
    /// Feed files (JSON Lines), or recording folders; records may be in any order.
    #[arg(required_unless_present_any = ["nmea", "asterix"])]
    pub feeds: Vec<PathBuf>,
    #[command(flatten)]
    pub trade: TradeArgs,
    /// Write track records here instead of standard output.
    #[arg(long, short)]
    pub out: Option<PathBuf>,
}

/// Trade-format inputs (CONTRACT.md §8), merged with the feed files.
#[derive(clap::Args, Debug, Clone, Default)]
pub struct TradeArgs {
    /// An NMEA 0183 AIS log of a transponder sensor, as SENSOR=FILE
    /// (repeatable). Each line needs an IEC 61162-1 tag block with
    /// c:UNIX_SECONDS; a line without a time is rejected.
    #[arg(long, value_name = "SENSOR=FILE", value_parser = NmeaInput::parse)]
    pub nmea: Vec<NmeaInput>,
    /// A raw ASTERIX recording: data blocks of categories 048, 034, 010
    /// back to back (repeatable; read in order as one recording). Needs --date.
    #[arg(long, value_name = "FILE", requires = "date")]
    pub asterix: Vec<PathBuf>,
    /// The UTC date on which the ASTERIX recording starts (its first time of day).
    #[arg(long, value_name = "YYYY-MM-DD", value_parser = parse_date)]
    pub date: Option<Timestamp>,
}

impl TradeArgs {
    pub fn inputs(&self) -> TradeInputs {
        TradeInputs { nmea: self.nmea.clone(), asterix: self.asterix.clone(), date: self.date }
    }
}

fn parse_date(s: &str) -> Result<Timestamp, String> {
    Timestamp::parse_date(s).map_err(|_| format!("`{s}` is not a date like 2026-05-14"))
}

#[derive(clap::Args, Debug)]
pub struct CheckArgs {
    /// Configuration file (TOML).
    #[arg(long, short)]
    pub config: PathBuf,
    /// Feed files (JSON Lines), or recording folders.
    #[arg(required_unless_present_any = ["nmea", "asterix"])]
    pub feeds: Vec<PathBuf>,
    #[command(flatten)]
    pub trade: TradeArgs,
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
    let (feed, trade) = read_inputs(&args.feeds, &args.trade.inputs(), &cfg)?;
    let sensors = cfg.sensor_table();
    report_trade_rejects(&trade, &sensors);
    report_rejects(&feed, &sensors);
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
    // Keeps the date-and-time text from one line to the next.
    let mut lines = TrackLineWriter::new();
    let mut flush = |out: &mut Vec<crate::feed::TrackRecord>, w: &mut Box<dyn Write>, last: bool| -> Result<()> {
        for r in out.drain(..) {
            lines.write(&r, &mut buf);
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
    let (feed, trade) = read_inputs(&args.feeds, &args.trade.inputs(), &cfg)?;
    let sensors = cfg.sensor_table();
    report_trade_rejects(&trade, &sensors);
    report_rejects(&feed, &sensors);
    print!("{}", feed.counts.table(&sensors));
    print!("{}", summary_table(&trade, &sensors));
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
