//! Warm restart: the newest snapshot that restores cleanly, then every
//! recorded record after it, through the screen and the engine in feed
//! order, as `skerry track` runs a feed.
//!
//! With `restore = false` the start is cold, but track numbers go on
//! after the highest the snapshots there had given out. What
//! [`warm_start`] does with `[record] restore = true`:
//! 1. Tries the snapshots newest first ([`super::files`]). A damaged one
//!    (truncated, bad checksum, undecodable) is skipped with a warning and
//!    the next older one is tried.
//! 2. A sound snapshot made under another configuration (site, sensor
//!    table, `[tracking]`), format version or build is refused with a
//!    warning that says why. If no snapshot restores and one was refused
//!    so, the start is cold: no state and no replay, since the recorded
//!    past was tracked under other rules; but track numbering goes on
//!    after the highest number the refused snapshots had given out.
//! 3. With a snapshot restored, the recording files (`YYYY-MM-DDTHH.jsonl`
//!    in the same folder, CONTRACT.md §7) that may hold records after its
//!    last key are read with the offline decoder, which ignores the
//!    `received` field and counts bad lines (a line torn by a crash among
//!    them) without stopping; each record whose feed-order key is after
//!    the snapshot's is run through the pipeline. With no snapshot at all
//!    (or only damaged ones), the whole recording is replayed, which also
//!    rebuilds the track numbering.
//!
//! Which files are read: a record not yet handled when the snapshot was
//! written was received before it by at most as long as the reorder
//! buffer held it, which is bounded here by [`RECEIPT_MARGIN_S`]; and it
//! lies after the snapshot's feed time. So a file is skipped only if its
//! hour ended before both the snapshot's clock time and its feed time,
//! less the margin: right whether the files are named by receipt or by
//! feed time.
//!
//! Feed order over files: the records are sorted across files, as the
//! offline reader sorts a feed, with bounded memory: a first pass notes
//! each file's earliest record, and the second hands on a file's records
//! only up to the earliest record of any later file, carrying the rest.

use super::files::SnapshotDir;
use super::{Header, Pipeline};
use crate::config::Config;
use crate::engine::EngineError;
use crate::feed::{Record, SensorTable, TrackRecord};
use crate::offline::{Feed, decode_bytes, feed_order};
use crate::time::Timestamp;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

/// How long before a snapshot a record it did not hold may have been
/// received (s): the reorder buffer holds records for seconds (a sensor
/// ahead of the others longer); an hour is far beyond that.
pub const RECEIPT_MARGIN_S: f64 = 3600.0;

/// Records kept decoded between the two passes; past this the second
/// pass decodes the files again instead.
const RETAINED_RECORDS: usize = 2_000_000;

/// What the replay of a recording did.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct TailSummary {
    /// Recording files read, and files that could not be read.
    pub files: usize,
    pub unreadable: Vec<(PathBuf, String)>,
    /// Non-blank lines read, and lines rejected when decoding (a line
    /// torn by a crash is one).
    pub lines: usize,
    pub bad_lines: u64,
    /// Records at or before the snapshot's last key: already in the state.
    pub before: u64,
    /// Records after it, run through the pipeline, and of these the exact
    /// duplicates the screen turned away.
    pub replayed: u64,
    pub duplicates: u64,
    /// Track records the replay made.
    pub track_records: u64,
}

/// What a warm start restored, for the start-up log.
#[derive(Clone, Debug, Default)]
pub struct RestoreReport {
    /// The snapshot restored, and its feed time.
    pub snapshot: Option<PathBuf>,
    pub snapshot_feed_time: Option<Timestamp>,
    /// Snapshots tried and not used, with the reason.
    pub refused: Vec<(PathBuf, String)>,
    /// Why the start is cold (nothing restored, nothing replayed).
    pub cold: Option<String>,
    pub tail: TailSummary,
    /// Live tracks after the restore: tentative, confirmed, coasting.
    pub tracks: [usize; 3],
    pub next_track: u64,
    pub elapsed: Duration,
}

pub struct WarmStart {
    pub pipeline: Pipeline,
    pub report: RestoreReport,
}

/// The recording files of `dir` (`YYYY-MM-DDTHH.jsonl`), by hour.
pub fn recording_files(dir: &Path) -> std::io::Result<Vec<(Timestamp, PathBuf)>> {
    let mut out = Vec::new();
    let rd = match std::fs::read_dir(dir) {
        Ok(rd) => rd,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(out),
        Err(e) => return Err(e),
    };
    for entry in rd {
        let entry = entry?;
        let name = entry.file_name();
        let Some(stem) = name.to_str().and_then(|n| n.strip_suffix(".jsonl")) else { continue };
        if stem.len() != 13 || stem.as_bytes()[10] != b'T' {
            continue;
        }
        if let Ok(hour) = Timestamp::parse_rfc3339(&format!("{stem}:00:00Z")) {
            out.push((hour, entry.path()));
        }
    }
    out.sort();
    Ok(out)
}

/// Runs every record of the recording in `dir` that comes after the
/// pipeline's last key through it, in feed order. Files whose hour ended
/// before `floor` are not read. `sink` gets the track records made, in
/// pieces.
pub fn replay_recording(p: &mut Pipeline, dir: &Path, sensors: &SensorTable, floor: Option<Timestamp>, sink: &mut dyn FnMut(&[TrackRecord])) -> TailSummary {
    let mut sum = TailSummary::default();
    let files = match recording_files(dir) {
        Ok(f) => f,
        Err(e) => {
            sum.unreadable.push((dir.to_path_buf(), e.to_string()));
            return sum;
        }
    };
    let files: Vec<PathBuf> = files.into_iter().filter(|(hour, _)| floor.is_none_or(|f| hour.plus_secs(3600.0) > f)).map(|(_, p)| p).collect();
    let after = p.last_key();
    let keep = |r: &Record| after.is_none_or(|k| k.precedes(r));

    // Pass 1: decode, note each file's earliest record after the key.
    let mut feed = Feed::default();
    let mut earliest: Vec<Option<Timestamp>> = Vec::with_capacity(files.len());
    let mut retained: Vec<Option<Vec<Record>>> = Vec::with_capacity(files.len());
    let mut held = 0usize;
    let mut readable = vec![true; files.len()];
    for (i, path) in files.iter().enumerate() {
        let bytes = match std::fs::read(path) {
            Ok(b) => b,
            Err(e) => {
                tracing::warn!(file = %path.display(), error = %e, "cannot read a recording file: skipped");
                sum.unreadable.push((path.clone(), e.to_string()));
                readable[i] = false;
                earliest.push(None);
                retained.push(None);
                continue;
            }
        };
        sum.files += 1;
        let mut recs = Vec::new();
        decode_bytes(&bytes, path, sensors, &mut feed, &mut recs);
        let before = recs.len();
        recs.retain(keep);
        sum.before += (before - recs.len()) as u64;
        earliest.push(recs.iter().map(Record::time).min());
        held += recs.len();
        retained.push((held <= RETAINED_RECORDS).then_some(recs));
    }
    sum.lines = feed.lines;
    // Torn final lines (a crash mid-write) count as bad lines here.
    sum.bad_lines = feed.counts.total_rejected() + feed.torn.len() as u64;
    drop(feed);
    // later[i]: the earliest record of any file after file i.
    let mut later = vec![None; files.len()];
    let mut acc: Option<Timestamp> = None;
    for i in (0..files.len()).rev() {
        later[i] = acc;
        acc = match (acc, earliest[i]) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        };
    }

    // Pass 2: hand records on in feed order.
    let mut carry: Vec<Record> = Vec::new();
    let mut out = Vec::with_capacity(1024);
    for (i, path) in files.iter().enumerate() {
        if !readable[i] {
            continue;
        }
        match retained[i].take() {
            Some(recs) => carry.extend(recs),
            None => {
                let Ok(bytes) = std::fs::read(path) else { continue };
                let mut scratch = Feed::default();
                let mut recs = Vec::new();
                decode_bytes(&bytes, path, sensors, &mut scratch, &mut recs);
                carry.extend(recs.into_iter().filter(keep));
            }
        }
        carry.sort_by(feed_order);
        let upto = match later[i] {
            Some(bound) => carry.partition_point(|r| r.time() < bound),
            None => carry.len(),
        };
        for r in carry.drain(..upto) {
            sum.replayed += 1;
            if p.handle(&r, &mut out).is_err() {
                sum.duplicates += 1;
            }
            if out.len() >= 1024 {
                sum.track_records += out.len() as u64;
                sink(&out);
                out.clear();
            }
        }
    }
    sum.track_records += out.len() as u64;
    sink(&out);
    sum
}

fn live_counts(p: &Pipeline) -> [usize; 3] {
    let s = p.engine().stats();
    [s.tentative, s.confirmed, s.coasting]
}

/// The pipeline a daemon starts with; see the module docs. Without a
/// `[record]` section, or with `restore = false`, it is a fresh one.
pub fn warm_start(cfg: &Config) -> Result<WarmStart, EngineError> {
    let started = Instant::now();
    let mut report = RestoreReport::default();
    let mut pipeline = Pipeline::new(cfg)?;
    let finish = |pipeline: Pipeline, mut report: RestoreReport| {
        report.tracks = live_counts(&pipeline);
        report.next_track = pipeline.engine().next_track_number();
        report.elapsed = started.elapsed();
        Ok(WarmStart { pipeline, report })
    };
    let Some(rec) = &cfg.record else {
        report.cold = Some("no [record] dir".into());
        return finish(pipeline, report);
    };
    let dir = PathBuf::from(&rec.dir);
    let snapshots = match SnapshotDir::new(&dir, rec.snapshot_keep).list() {
        Ok(s) => s,
        Err(e) => {
            tracing::warn!(error = %e, "cannot list the snapshots: starting without one");
            Vec::new()
        }
    };
    if !rec.restore {
        // No state, but the numbering still goes on.
        let next = snapshots.iter().filter_map(|f| f.read().ok()).filter_map(|b| Header::check(&b).ok()).map(|h| h.next_track).max();
        if let Some(next) = next {
            pipeline.reserve_track_numbers(next);
        }
        report.cold = Some("[record] restore = false".into());
        return finish(pipeline, report);
    }
    let mut foreign_next: Option<u64> = None;
    let mut chosen: Option<(PathBuf, Header)> = None;
    for f in &snapshots {
        let bytes = match f.read() {
            Ok(b) => b,
            Err(e) => {
                tracing::warn!(error = %e, "cannot read a snapshot: trying an older one");
                report.refused.push((f.path.clone(), e.to_string()));
                continue;
            }
        };
        match Pipeline::restore(cfg, &bytes) {
            Ok(p) => {
                if let Ok(h) = Header::read(&bytes) {
                    chosen = Some((f.path.clone(), h));
                }
                pipeline = p;
                break;
            }
            Err(e) if e.is_foreign() => {
                tracing::warn!(file = %f.path.display(), reason = %e, "snapshot refused");
                if let Ok(h) = Header::check(&bytes) {
                    foreign_next = Some(foreign_next.unwrap_or(0).max(h.next_track));
                }
                report.refused.push((f.path.clone(), e.to_string()));
            }
            Err(e) => {
                tracing::warn!(file = %f.path.display(), reason = %e, "snapshot damaged: trying an older one");
                report.refused.push((f.path.clone(), e.to_string()));
            }
        }
    }
    let sensors = cfg.sensor_table();
    match (&chosen, foreign_next) {
        (Some((path, h)), _) => {
            report.snapshot = Some(path.clone());
            report.snapshot_feed_time = h.feed_time;
            let floor = match (h.written_at, h.feed_time) {
                (Some(w), Some(f)) => Some(w.min(f).plus_secs(-RECEIPT_MARGIN_S)),
                _ => None,
            };
            report.tail = replay_recording(&mut pipeline, &dir, &sensors, floor, &mut |_| {});
        }
        (None, Some(next)) => {
            pipeline.reserve_track_numbers(next);
            report.cold = Some(format!("no snapshot fits this configuration and build ({}); track numbers go on from {next}", report.refused.last().map(|r| r.1.as_str()).unwrap_or("refused")));
        }
        (None, None) => {
            report.tail = replay_recording(&mut pipeline, &dir, &sensors, None, &mut |_| {});
        }
    }
    finish(pipeline, report)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recording_file_names() {
        let tmp = tempfile::tempdir().unwrap();
        for n in ["2026-05-14T07.jsonl", "2026-05-14T06.jsonl", "notes.jsonl", "2026-05-14T6.jsonl", "2026-05-14T06.jsonl.gz", "snapshot-x.bin"] {
            std::fs::write(tmp.path().join(n), b"").unwrap();
        }
        let f = recording_files(tmp.path()).unwrap();
        let names: Vec<_> = f.iter().map(|(_, p)| p.file_name().unwrap().to_str().unwrap().to_string()).collect();
        assert_eq!(names, ["2026-05-14T06.jsonl", "2026-05-14T07.jsonl"]);
        assert_eq!(f[0].0, Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap());
    }
}
