//! Retention of recording files: a folder with recording files of given
//! hours and sizes, beside files and a folder that only look like them;
//! exactly the files the rule names are deleted (the rule: a file whose
//! hour ended more than `keep_hours` ago goes; then, with `max_bytes`, the
//! oldest closed files go until the rest fits; the open file and anything
//! not named `YYYY-MM-DDTHH.jsonl` never go). The expected sets are worked
//! out by hand from that rule, beside each case.

mod daemon_support;

use daemon_support::config;
use skerry::daemon::metrics::Metrics;
use skerry::daemon::record::{FsDisk, Writer, WriterSettings};
use skerry::recording::{RecordingFile, to_delete};
use skerry::time::Timestamp;
use std::collections::BTreeSet;
use std::path::Path;
use std::sync::Arc;

fn ts(s: &str) -> Timestamp {
    Timestamp::parse_rfc3339(s).unwrap()
}

fn f(name: &str, bytes: u64) -> RecordingFile {
    RecordingFile::new(name, bytes).unwrap()
}

#[test]
fn age_limit_is_strictly_more_than_keep_hours_after_the_hour_ended() {
    let files = [f("2026-05-14T08.jsonl", 1), f("2026-05-14T09.jsonl", 1), f("2026-05-14T10.jsonl", 1)];
    // At 13:00 with 3 h: T08 ended 09:00 (4 h ago, goes), T09 ended 10:00
    // (exactly 3 h: stays), T10 ended 11:00 (stays).
    assert_eq!(to_delete(&files, ts("2026-05-14T13:00:00Z"), 3.0, None, None), vec!["2026-05-14T08.jsonl"]);
    // One nanosecond later T09 is more than 3 h past.
    assert_eq!(to_delete(&files, ts("2026-05-14T13:00:00.000000001Z"), 3.0, None, None), vec!["2026-05-14T08.jsonl", "2026-05-14T09.jsonl"]);
    // Fractional hours: 0.5 h at 10:31 takes T09 (ended 10:00, 31 min ago).
    assert_eq!(to_delete(&files, ts("2026-05-14T10:31:00Z"), 0.5, None, None), vec!["2026-05-14T08.jsonl", "2026-05-14T09.jsonl"]);
    // The open file is spared even when old (a clock set back).
    assert_eq!(to_delete(&files, ts("2026-05-15T00:00:00Z"), 1.0, None, Some("2026-05-14T09.jsonl")), vec!["2026-05-14T08.jsonl", "2026-05-14T10.jsonl"]);
}

#[test]
fn size_limit_takes_the_oldest_closed_files_first() {
    // Total 100 + 200 + 300 + 400 = 1000 over a 650 limit: T09 (900
    // left), T10 (700), T11 (400 ≤ 650): three go, oldest first, and the
    // open T12 stays.
    let files = [f("2026-05-14T11.jsonl", 300), f("2026-05-14T09.jsonl", 100), f("2026-05-14T12.jsonl", 400), f("2026-05-14T10.jsonl", 200)];
    let now = ts("2026-05-14T12:30:00Z");
    assert_eq!(to_delete(&files, now, 720.0, Some(650), Some("2026-05-14T12.jsonl")), vec!["2026-05-14T09.jsonl", "2026-05-14T10.jsonl", "2026-05-14T11.jsonl"]);
    // The open file alone over the limit: every closed file goes, it stays.
    assert_eq!(to_delete(&files, now, 720.0, Some(10), Some("2026-05-14T12.jsonl")).len(), 3);
    // Within the limit: nothing.
    assert!(to_delete(&files, now, 720.0, Some(1000), None).is_empty());
    // Age first, then size over what is left: at 3 h, T09 (ended 10:00,
    // 2.5 h ago) stays by age; 1000 > 800 takes T09 then T10 (700).
    assert_eq!(to_delete(&files, now, 3.0, Some(800), Some("2026-05-14T12.jsonl")), vec!["2026-05-14T09.jsonl", "2026-05-14T10.jsonl"]);
}

fn touch(dir: &Path, name: &str, bytes: usize) {
    std::fs::write(dir.join(name), vec![b'x'; bytes]).unwrap();
}

fn names(dir: &Path) -> BTreeSet<String> {
    std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().into_string().unwrap()).collect()
}

#[test]
fn a_real_folder_loses_exactly_the_right_files() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    for (name, bytes) in [
        ("2026-05-14T05.jsonl", 50),
        ("2026-05-14T08.jsonl", 60),
        ("2026-05-14T09.jsonl", 100),
        ("2026-05-14T10.jsonl", 200),
        ("2026-05-14T11.jsonl", 300),
        ("2026-05-14T12.jsonl", 400),
        // Not recording files: never deleted, never counted.
        ("notes.txt", 100_000),
        ("2026-05-14T03.jsonl.gz", 10),
        ("2026-05-14T3.jsonl", 10),
        ("2026-02-30T01.jsonl", 10),
        ("2026-05-14T24.jsonl", 10),
        ("x2026-05-14T04.jsonl", 10),
        ("snapshot-2026-05-14T01.json", 10),
    ] {
        touch(d, name, bytes);
    }
    // A folder named like a recording file, with a file inside.
    std::fs::create_dir(d.join("2026-05-14T02.jsonl")).unwrap();
    touch(&d.join("2026-05-14T02.jsonl"), "inner", 5);
    let before = names(d);

    let cfg = config(&[("SKERRY__RECORD__DIR", d.to_str().unwrap()), ("SKERRY__RECORD__KEEP_HOURS", "3.0"), ("SKERRY__RECORD__MAX_BYTES", "800")]);
    let r = cfg.record.clone().unwrap();
    assert_eq!((r.keep_hours, r.max_bytes), (3.0, Some(800)));
    let metrics = Arc::new(Metrics::new(&cfg, ts("2026-05-14T12:30:00Z")));
    let mut w = Writer::new(Box::new(FsDisk::new(d)), cfg.sensor_table(), WriterSettings::new(&r, 10.0), metrics.clone());
    // At start, 12:30: by age T05 (ended 06:00) and T08 (ended 09:00,
    // 3.5 h ago) go; T09 (2.5 h) stays. Left 100+200+300+400 = 1000 > 800:
    // T09 (900), T10 (700) go. T12 is the current hour's file: spared.
    w.start(ts("2026-05-14T12:30:00Z"));
    let gone: BTreeSet<String> = before.difference(&names(d)).cloned().collect();
    let want: BTreeSet<String> = ["2026-05-14T05.jsonl", "2026-05-14T08.jsonl", "2026-05-14T09.jsonl", "2026-05-14T10.jsonl"].map(String::from).into();
    assert_eq!(gone, want);
    assert!(d.join("2026-05-14T02.jsonl/inner").exists());
    let m = metrics.render(ts("2026-05-14T12:30:00Z"));
    assert!(m.contains("skerry_record_files 2\n"), "{m}");
    assert!(m.contains("skerry_record_disk_bytes 700\n"), "{m}");
    assert!(m.contains("skerry_record_files_deleted_total 4\n"), "{m}");
}
