//! A recording cut in the middle of its last line (a crash or a full disk
//! during a write): `skerry check`, `skerry track` and `skerry replay`
//! report the torn final line by file and line, skip it, keep every other
//! record and exit 0. A bad line that is not a torn final line keeps its
//! usual handling (counted as rejected).

mod daemon_support;

use daemon_support::{CONFIG, config};
use skerry::daemon::metrics::Metrics;
use skerry::daemon::record::{Entry, FsDisk, Writer, WriterSettings};
use skerry::daemon::replay::{PaceBy, load_lines};
use skerry::feed::{self, Record};
use skerry::offline::{TornLine, read_feeds};
use skerry::time::Timestamp;
use std::path::Path;
use std::process::Command;
use std::sync::Arc;

fn ts(s: &str) -> Timestamp {
    Timestamp::parse_rfc3339(s).unwrap()
}

/// A recording of 06 and 07 with 20 plots each, written by the writer;
/// returns the records and the folder.
fn recording(dir: &Path) -> Vec<Record> {
    let cfg = config(&[("SKERRY__RECORD__DIR", dir.to_str().unwrap())]);
    let radar = cfg.sensor_table().lookup("kestrel-point").unwrap();
    let metrics = Arc::new(Metrics::new(&cfg, ts("2026-05-14T06:59:00Z")));
    let mut w = Writer::new(Box::new(FsDisk::new(dir)), cfg.sensor_table(), WriterSettings::new(cfg.record.as_ref().unwrap(), 10.0), metrics);
    let t0 = ts("2026-05-14T06:59:58Z");
    w.start(t0);
    let recs: Vec<Record> = (0..40)
        .map(|i| Record::Detection(feed::Detection { sensor: radar, time: t0.plus_secs(i as f64 * 0.1), scan: Some(3), range_m: 3000.0 + i as f64, bearing_deg: 40.0 + i as f64 * 0.5, radial_speed_mps: None, snr_db: None }))
        .collect();
    let entries: Vec<Entry> = recs.iter().map(|r| Entry { rec: r.clone(), received: r.time().plus_secs(0.05) }).collect();
    w.write(&entries, t0.plus_secs(5.0));
    w.close(t0.plus_secs(5.0));
    recs
}

/// Cuts the file's last line in its middle; returns that line's number.
fn cut_last_line(path: &Path) -> usize {
    let text = std::fs::read_to_string(path).unwrap();
    let n = text.lines().count();
    let last_start = text[..text.len() - 1].rfind('\n').unwrap() + 1;
    std::fs::write(path, &text[..last_start + 37]).unwrap();
    n
}

#[test]
fn torn_final_line_is_reported_and_skipped_everywhere() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let recs = recording(d);
    let seven = d.join("2026-05-14T07.jsonl");
    assert!(d.join("2026-05-14T06.jsonl").exists() && seven.exists());
    let torn_at = cut_last_line(&seven);

    // The offline reader: the folder is one feed.
    let cfg = config(&[]);
    let feed = read_feeds(&[d.to_path_buf()], &cfg).unwrap();
    assert_eq!(feed.torn, vec![TornLine { file: seven.clone(), line: torn_at }]);
    assert!(feed.bad.is_empty());
    assert_eq!(feed.counts.total_rejected(), 0);
    assert_eq!(feed.records, recs[..recs.len() - 1].to_vec(), "every other record kept, in time order");

    // The commands, as processes: exit 0, the torn line named.
    let conf = d.join("skerry.toml");
    std::fs::write(&conf, CONFIG).unwrap();
    let want = format!("{}:{torn_at}: torn final line", seven.display());
    for args in [vec!["check", "--config"], vec!["track", "--config"]] {
        let out = Command::new(env!("CARGO_BIN_EXE_skerry")).args(&args).arg(&conf).arg(d).output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{args:?}: {err}");
        assert!(err.contains(&want), "{args:?}: {err}");
        assert!(!err.contains(": rejected:"), "{args:?}: {err}");
    }
    let out = Command::new(env!("CARGO_BIN_EXE_skerry")).args(["check", "--config"]).arg(&conf).arg(d).output().unwrap();
    assert!(String::from_utf8_lossy(&out.stdout).contains("39"), "39 records counted: {}", String::from_utf8_lossy(&out.stdout));

    // Replay's reader.
    let loaded = load_lines(d, PaceBy::Received).unwrap();
    assert_eq!(loaded.torn, vec![(seven.clone(), torn_at)]);
    assert_eq!(loaded.lines.len(), recs.len() - 1);
}

#[test]
fn other_bad_lines_keep_their_handling() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let recs = recording(d);
    let six = d.join("2026-05-14T06.jsonl");
    // A torn line in the middle (a crash, then a restart that began a
    // fresh line) is an ordinary bad line; so is a whole-JSON bad record
    // at the very end without a newline.
    let mut text = std::fs::read_to_string(&six).unwrap();
    let n = text.lines().count();
    text.push_str("{\"type\":\"detection\",\"sens\n");
    text.push_str(r#"{"type":"detection","sensor":"nowhere","time":"2026-05-14T06:59:59Z","range_m":5.0,"bearing_deg":1.0}"#);
    std::fs::write(&six, text).unwrap();
    let feed = read_feeds(&[d.to_path_buf()], &config(&[])).unwrap();
    assert!(feed.torn.is_empty());
    let bad: Vec<(usize, &str)> = feed.bad.iter().map(|b| (b.line, b.reject.reason.key())).collect();
    assert_eq!(bad, vec![(n + 1, "bad_json"), (n + 2, "unknown_sensor")]);
    assert_eq!(feed.records.len(), recs.len());
}
