//! Offline reading of feed files, shared by `skerry check` and
//! `skerry track` (CONTRACT.md §4).
//!
//! A feed is read whole, decoded line by line, screened for implausible
//! times against the feed's median time, ordered by time (stably, so equal
//! times keep file order), and screened for exact duplicates. Bad lines
//! are counted per sensor and reason and reported on standard error with
//! their file and line, a few at a time; they never stop the run.
//!
//! A folder stands for its recording files (`YYYY-MM-DDTHH.jsonl`,
//! CONTRACT.md §7) in name order. A torn final line (a file without its
//! final newline whose last line is not whole JSON, as a crash or a full
//! disk leaves it) is reported by file and line, skipped, and not counted
//! as a rejected record.
//!
//! [`trade`] adds the trade formats (NMEA 0183 AIS logs, ASTERIX
//! recordings) and merges them with the JSON files ([`read_inputs`]).

pub mod trade;

pub use trade::{InputError, NmeaInput, TradeInputs, TradeSummary, read_inputs};

use crate::config::Config;
use crate::feed::screen::median_time;
use crate::feed::{FeedCounts, Record, Reject, Screen, SensorTable, decode_line};
use crate::time::Timestamp;
use std::path::{Path, PathBuf};

/// How many individual bad lines are printed before only counting.
const SHOWN_REJECTS: usize = 10;

#[derive(Debug, thiserror::Error)]
pub enum ReadError {
    #[error("{path}: cannot read: {source}")]
    Io { path: String, source: std::io::Error },
    #[error(transparent)]
    Path(#[from] crate::recording::FeedPathError),
}

/// One rejected line, for the report.
#[derive(Debug, Clone)]
pub struct BadLine {
    pub file: PathBuf,
    pub line: usize,
    pub reject: Reject,
}

/// A torn final line, for the report.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TornLine {
    pub file: PathBuf,
    pub line: usize,
}

/// A decoded, screened and ordered feed.
#[derive(Debug, Default)]
pub struct Feed {
    pub records: Vec<Record>,
    pub counts: FeedCounts,
    pub bad: Vec<BadLine>,
    pub lines: usize,
    /// Torn final lines, skipped.
    pub torn: Vec<TornLine>,
}

/// The lines of a byte buffer, without their line ends. A final line with
/// no newline is still a line.
pub fn split_lines(bytes: &[u8]) -> impl Iterator<Item = &[u8]> {
    let bytes = bytes.strip_suffix(b"\n").unwrap_or(bytes);
    bytes.split(|&b| b == b'\n').map(|l| l.strip_suffix(b"\r").unwrap_or(l)).filter(|_| !bytes.is_empty())
}

/// Decodes one file's bytes, appending accepted records (with their file
/// order) to `out`.
pub fn decode_bytes(bytes: &[u8], file: &Path, sensors: &SensorTable, feed: &mut Feed, out: &mut Vec<Record>) {
    // Only the last line of a file cut short can be torn.
    let last = (!bytes.is_empty() && !bytes.ends_with(b"\n")).then(|| split_lines(bytes).count());
    for (i, line) in split_lines(bytes).enumerate() {
        if line.iter().all(u8::is_ascii_whitespace) {
            continue;
        }
        if last == Some(i + 1) && crate::recording::is_torn(line) {
            feed.torn.push(TornLine { file: file.to_path_buf(), line: i + 1 });
            continue;
        }
        feed.lines += 1;
        match decode_line(line, sensors) {
            Ok(r) => out.push(r),
            Err(reject) => {
                feed.counts.reject(&reject);
                feed.bad.push(BadLine { file: file.to_path_buf(), line: i + 1, reject });
            }
        }
    }
}

/// The order in which a feed is processed: by time; at equal times
/// plots, then reports, then scan ends (a plot stamped at the end of a
/// scan still belongs to it), then by sensor and content. The order is
/// total up to identical records, so the file order never matters.
pub fn feed_order(a: &Record, b: &Record) -> std::cmp::Ordering {
    let rank = |r: &Record| match r {
        Record::Detection(_) => 0u8,
        Record::Report(_) => 1,
        Record::ScanEnd(_) => 2,
    };
    a.time()
        .cmp(&b.time())
        .then(rank(a).cmp(&rank(b)))
        .then(a.sensor().cmp(&b.sensor()))
        .then_with(|| a.content_hash().cmp(&b.content_hash()))
}

/// Reads, decodes, screens and orders the feed files (a folder: its
/// recording files).
pub fn read_feeds(paths: &[PathBuf], cfg: &Config) -> Result<Feed, ReadError> {
    let mut feed = Feed::default();
    let mut decoded = Vec::new();
    decode_files(paths, &cfg.sensor_table(), &mut feed, &mut decoded)?;
    screen_in_order(decoded, cfg, &mut feed);
    Ok(feed)
}

/// Decodes the feed files (a folder: its recording files, in time order)
/// into `out`, counting what they reject in `feed`.
pub(crate) fn decode_files(paths: &[PathBuf], sensors: &SensorTable, feed: &mut Feed, out: &mut Vec<Record>) -> Result<(), ReadError> {
    for p in &crate::recording::expand_feed_paths(paths)? {
        let bytes = std::fs::read(p).map_err(|source| ReadError::Io { path: p.display().to_string(), source })?;
        decode_bytes(&bytes, p, sensors, feed, out);
    }
    Ok(())
}

/// Puts `decoded` in feed order and through the screen (one plausibility
/// reference, the median time of all of them; duplicates), appending what
/// it admits to `feed.records` and counting the rest.
pub(crate) fn screen_in_order(mut decoded: Vec<Record>, cfg: &Config, feed: &mut Feed) {
    let mut times: Vec<Timestamp> = decoded.iter().map(Record::time).collect();
    let reference = median_time(&mut times);
    let mut screen = Screen::new(reference, cfg.feed.max_time_offset_s);
    decoded.sort_by(feed_order);
    feed.records.reserve(decoded.len());
    for r in decoded {
        match screen.admit(&r) {
            Ok(()) => {
                feed.counts.accept(r.sensor());
                feed.records.push(r);
            }
            Err(reject) => feed.counts.reject(&reject),
        }
    }
}

/// Prints the first bad lines and the counts to standard error.
pub fn report_rejects(feed: &Feed, sensors: &SensorTable) {
    for t in &feed.torn {
        eprintln!("{}:{}: torn final line (no newline at the end, not whole JSON): skipped", t.file.display(), t.line);
    }
    for b in feed.bad.iter().take(SHOWN_REJECTS) {
        let who = b.reject.sensor.map(|s| format!(" (sensor {})", sensors.name(s))).unwrap_or_default();
        eprintln!("{}:{}: rejected: {}{}", b.file.display(), b.line, b.reject.reason, who);
    }
    if feed.bad.len() > SHOWN_REJECTS {
        eprintln!("... and {} more bad lines", feed.bad.len() - SHOWN_REJECTS);
    }
    let rejected = feed.counts.total_rejected();
    if rejected > 0 {
        eprintln!("{} of {} records rejected:", rejected, feed.lines);
        let mut by_reason: std::collections::BTreeMap<&str, u64> = Default::default();
        for ((_, k), n) in &feed.counts.rejected {
            *by_reason.entry(k).or_default() += n;
        }
        for (k, n) in by_reason {
            eprintln!("  {k:<20} {n}");
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines() {
        let v: Vec<&[u8]> = split_lines(b"a\r\nb\n\nc").collect();
        assert_eq!(v, vec![&b"a"[..], b"b", b"", b"c"]);
        assert_eq!(split_lines(b"").count(), 0);
        assert_eq!(split_lines(b"x\n").count(), 1);
    }
}
