//! Trade-format inputs of `skerry track` and `skerry check` (CONTRACT.md
//! §8): NMEA 0183 AIS logs (`--nmea SENSOR=FILE`) and raw ASTERIX
//! recordings (`--asterix FILE --date YYYY-MM-DD`), merged with the JSON
//! feed files into one time-ordered feed.
//!
//! # Contract
//!
//! - `--nmea SENSOR=FILE` (repeatable): `SENSOR` is the id of a configured
//!   transponder sensor. Each line is one sentence, optionally after an
//!   IEC 61162-1 tag block; the tag block's `c:` (Unix seconds) is the
//!   line's time. A line with no time is rejected (`nmea_no_time`): a log
//!   carries no receive clock to fall back on. The files of one sensor
//!   are read in the order given, through one decoder, so a vessel's
//!   static data and a message split across two files carry over.
//!   Fragment sets still incomplete at the end of a sensor's logs are
//!   counted as `nmea_fragment_timeout`.
//! - `--asterix FILE` (repeatable) needs `--date YYYY-MM-DD`: the UTC day
//!   on which the first time of day of the first file falls. The files are
//!   read in the order given as one recording: each later time of day is
//!   placed on the day nearest the one before it, so a recording may run
//!   across midnight. Records map to radars by SAC/SIC (`asterix_sac`,
//!   `asterix_sic`).
//! - Every decoded record joins the JSON feed's records; the whole set is
//!   screened and ordered exactly as [`super::read_feeds`] does a JSON
//!   feed (one median time, [`super::feed_order`], duplicates). Rejects
//!   are counted in the same [`crate::feed::FeedCounts`], per sensor, under
//!   the decoders' [`crate::feed::asterix::AsterixRejectReason::feed_key`]
//!   and [`AisRejectReason::feed_key`] (`asterix_unknown_source`,
//!   `nmea_bad_checksum` …), which never clash with the JSON reasons.
//! - What decodes to no record and is not a fault (AIS static data,
//!   own-ship reports, positions "not available", fragments, other message
//!   types; ASTERIX service messages that close no sector) is counted in
//!   the [`TradeSummary`], not as a reject.
//! - With no trade input at all, [`read_inputs`] is [`super::read_feeds`].

use super::{Feed, ReadError, decode_files, read_feeds, screen_in_order, split_lines};
use crate::config::Config;
use crate::feed::asterix::{AsterixCounts, AsterixDecoder, AsterixItem, SourceTable, SourceTableError};
use crate::feed::nmea::{AisCounts, AisDecoder, AisOutcome, AisRejectReason};
use crate::feed::{Record, SensorId, SensorKind, SensorTable};
use crate::time::Timestamp;
use std::collections::BTreeMap;
use std::path::PathBuf;

/// How many individual bad trade inputs are printed before only counting.
const SHOWN: usize = 10;

/// One `--nmea SENSOR=FILE` argument.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct NmeaInput {
    pub sensor: String,
    pub path: PathBuf,
}

impl NmeaInput {
    /// Parses `SENSOR=FILE` (the first `=` splits; both parts non-empty).
    pub fn parse(arg: &str) -> Result<NmeaInput, String> {
        match arg.split_once('=') {
            Some((s, f)) if !s.is_empty() && !f.is_empty() => Ok(NmeaInput { sensor: s.to_string(), path: PathBuf::from(f) }),
            _ => Err(format!("`{arg}` is not SENSOR=FILE (e.g. shore-transponders=ais.nmea)")),
        }
    }
}

/// The trade inputs of one run.
#[derive(Clone, Debug, Default)]
pub struct TradeInputs {
    pub nmea: Vec<NmeaInput>,
    pub asterix: Vec<PathBuf>,
    /// Midnight UTC of the day the ASTERIX recording starts on.
    pub date: Option<Timestamp>,
}

impl TradeInputs {
    pub fn is_empty(&self) -> bool {
        self.nmea.is_empty() && self.asterix.is_empty()
    }
}

#[derive(Debug, thiserror::Error)]
pub enum InputError {
    #[error(transparent)]
    Read(#[from] ReadError),
    #[error("--nmea {sensor}={path}: no sensor `{sensor}` in the configuration")]
    UnknownSensor { sensor: String, path: String },
    #[error("--nmea {sensor}={path}: sensor `{sensor}` is a {kind}; an NMEA log belongs to a transponder sensor")]
    NotTransponder { sensor: String, path: String, kind: &'static str },
    #[error("--asterix needs --date YYYY-MM-DD: ASTERIX records carry only the time of day, so the date of the recording's first record must be given")]
    NoDate,
    #[error("configuration: {0}")]
    Sources(#[from] SourceTableError),
}

/// A trade input that gave a reject, for the report.
#[derive(Clone, Debug, PartialEq)]
pub struct TradeBadInput {
    pub file: PathBuf,
    /// The line of an NMEA log; `None` for ASTERIX (a binary recording).
    pub line: Option<usize>,
    pub sensor: Option<SensorId>,
    /// The reason's feed key.
    pub key: &'static str,
    /// ASTERIX: the category of the block (0 if its header was unreadable).
    pub category: Option<u8>,
}

/// What the trade decoders did, beyond the records and rejects that are
/// in the [`Feed`].
#[derive(Clone, Debug, Default)]
pub struct TradeSummary {
    /// Per transponder sensor with an NMEA log, in configuration order.
    pub nmea: BTreeMap<SensorId, AisCounts>,
    /// Lines read per NMEA sensor (blank lines left out).
    pub nmea_lines: BTreeMap<SensorId, u64>,
    pub asterix: Option<AsterixCounts>,
    /// The last antenna rotation period each radar measured (I034/041), s.
    pub rotation_period_s: BTreeMap<SensorId, f64>,
    pub bad: Vec<TradeBadInput>,
}

/// Checks the trade arguments against the configuration, before any file
/// is read: the NMEA sensors by index, and the ASTERIX source table.
fn check_args(trade: &TradeInputs, cfg: &Config, sensors: &SensorTable) -> Result<(Vec<SensorId>, Option<SourceTable>), InputError> {
    let mut ids = Vec::with_capacity(trade.nmea.len());
    for n in &trade.nmea {
        let path = n.path.display().to_string();
        let id = sensors.lookup(&n.sensor).ok_or_else(|| InputError::UnknownSensor { sensor: n.sensor.clone(), path: path.clone() })?;
        match sensors.kind(id) {
            Some(SensorKind::Transponder) => ids.push(id),
            k => return Err(InputError::NotTransponder { sensor: n.sensor.clone(), path, kind: k.unwrap_or(SensorKind::Radar).as_str() }),
        }
    }
    let table = if trade.asterix.is_empty() {
        None
    } else {
        if trade.date.is_none() {
            return Err(InputError::NoDate);
        }
        Some(SourceTable::from_config(cfg)?)
    };
    Ok((ids, table))
}

fn read(p: &PathBuf) -> Result<Vec<u8>, ReadError> {
    std::fs::read(p).map_err(|source| ReadError::Io { path: p.display().to_string(), source })
}

/// Decodes the NMEA logs, one decoder per sensor, appending the position
/// reports to `out` and counting the rest.
fn decode_nmea(trade: &TradeInputs, ids: &[SensorId], feed: &mut Feed, summary: &mut TradeSummary, out: &mut Vec<Record>) -> Result<(), ReadError> {
    let mut decoders: BTreeMap<SensorId, AisDecoder> = BTreeMap::new();
    for (n, &id) in trade.nmea.iter().zip(ids) {
        let bytes = read(&n.path)?;
        let dec = decoders.entry(id).or_insert_with(|| AisDecoder::new(id));
        let lines = summary.nmea_lines.entry(id).or_default();
        for (i, line) in split_lines(&bytes).enumerate() {
            if line.iter().all(u8::is_ascii_whitespace) {
                continue;
            }
            feed.lines += 1;
            *lines += 1;
            match dec.decode_line(line, None) {
                AisOutcome::Position(p) => out.push(Record::Report(p.report)),
                AisOutcome::Rejected(r) => {
                    summary.bad.push(TradeBadInput { file: n.path.clone(), line: Some(i + 1), sensor: Some(id), key: r.feed_key(), category: None })
                }
                _ => {}
            }
        }
    }
    for (id, mut dec) in decoders {
        // The end of the logs: no fragment still waiting will be completed.
        dec.expire(Timestamp::from_unix_nanos(i64::MAX));
        let c = dec.counts();
        // Every reject the decoder counted, including fragment sets lost
        // between lines (abandoned, timed out), which no line outcome shows.
        for r in AisRejectReason::ALL {
            let n = c.rejected(r);
            if n > 0 {
                *feed.counts.rejected.entry((Some(id), r.feed_key())).or_default() += n;
            }
        }
        summary.nmea.insert(id, c.clone());
    }
    Ok(())
}

/// Decodes the ASTERIX files as one recording starting on `date`.
fn decode_asterix(trade: &TradeInputs, table: SourceTable, feed: &mut Feed, summary: &mut TradeSummary, out: &mut Vec<Record>) -> Result<(), ReadError> {
    let date = trade.date.unwrap_or_default();
    let mut dec = AsterixDecoder::new(table);
    for p in &trade.asterix {
        let bytes = read(p)?;
        dec.decode_recording(&bytes, date, &mut |x| {
            feed.lines += 1;
            match x {
                Ok(item) => {
                    if let AsterixItem::Service(s) = &item
                        && let Some(period) = s.rotation_period_s
                    {
                        summary.rotation_period_s.insert(s.sensor, period);
                    }
                    if let Some(r) = item.record() {
                        out.push(r);
                    }
                }
                Err(rej) => {
                    *feed.counts.rejected.entry((rej.sensor, rej.reason.feed_key())).or_default() += 1;
                    summary.bad.push(TradeBadInput { file: p.clone(), line: None, sensor: rej.sensor, key: rej.reason.feed_key(), category: Some(rej.category) });
                }
            }
        });
    }
    summary.asterix = Some(dec.counts().clone());
    Ok(())
}

/// Reads the JSON feed files and the trade inputs, and screens and orders
/// them into one feed; see the module docs.
pub fn read_inputs(paths: &[PathBuf], trade: &TradeInputs, cfg: &Config) -> Result<(Feed, TradeSummary), InputError> {
    let sensors = cfg.sensor_table();
    let (ids, table) = check_args(trade, cfg, &sensors)?;
    if trade.is_empty() {
        return Ok((read_feeds(paths, cfg)?, TradeSummary::default()));
    }
    let mut feed = Feed::default();
    let mut summary = TradeSummary::default();
    let mut decoded = Vec::new();
    decode_files(paths, &sensors, &mut feed, &mut decoded)?;
    decode_nmea(trade, &ids, &mut feed, &mut summary, &mut decoded)?;
    if let Some(table) = table {
        decode_asterix(trade, table, &mut feed, &mut summary, &mut decoded)?;
    }
    // As read_feeds: one plausibility reference for every input, then
    // time order and the duplicate screen.
    screen_in_order(decoded, cfg, &mut feed);
    Ok((feed, summary))
}

/// Prints the first bad trade inputs to standard error (the counts are in
/// the feed's and go out with [`super::report_rejects`]).
pub fn report_trade_rejects(summary: &TradeSummary, sensors: &SensorTable) {
    for b in summary.bad.iter().take(SHOWN) {
        let who = b.sensor.map(|s| format!(" (sensor {})", sensors.name(s))).unwrap_or_default();
        match (b.line, b.category) {
            (Some(l), _) => eprintln!("{}:{}: rejected: {}{}", b.file.display(), l, b.key, who),
            (None, Some(c)) => eprintln!("{}: rejected: {} in a category {:03} block{}", b.file.display(), b.key, c, who),
            (None, None) => eprintln!("{}: rejected: {}{}", b.file.display(), b.key, who),
        }
    }
    if summary.bad.len() > SHOWN {
        eprintln!("... and {} more bad trade inputs", summary.bad.len() - SHOWN);
    }
}

/// A plain-text table of what the trade decoders read, for `skerry check`.
pub fn summary_table(summary: &TradeSummary, sensors: &SensorTable) -> String {
    use std::fmt::Write;
    let mut out = String::new();
    for (id, c) in &summary.nmea {
        let lines = summary.nmea_lines.get(id).copied().unwrap_or(0);
        let _ = writeln!(
            out,
            "nmea {}: {} lines; {} positions, {} static, {} own ship, {} without position, {} fragments, {} other types, {} rejected",
            sensors.name(*id),
            lines,
            c.positions,
            c.statics,
            c.own_ship,
            c.no_position,
            c.fragments,
            c.other,
            c.total_rejected()
        );
    }
    if let Some(c) = &summary.asterix {
        let _ = writeln!(out, "asterix: {} plots, {} service messages ({} scan ends), {} rejected", c.plots, c.services, c.scan_ends, c.total_rejected());
    }
    for (id, p) in &summary.rotation_period_s {
        let _ = writeln!(out, "asterix {}: antenna rotation period {:.3} s", sensors.name(*id), p);
    }
    out
}
