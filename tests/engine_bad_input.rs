//! Bad input never crashes `skerry track` and never costs good data: a
//! feed with garbage mixed in gives the same track records as the good
//! feed alone (the engine sees the same records), and the same input
//! gives the same output to the byte, whatever the file order.

use std::path::PathBuf;
use std::process::Command;

fn demo(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-feeds").join(name)
}

fn track(config: &PathBuf, feed: &PathBuf) -> (Vec<u8>, String, bool) {
    let out = Command::new(env!("CARGO_BIN_EXE_skerry")).arg("track").arg("--config").arg(config).arg(feed).output().expect("run skerry");
    (out.stdout, String::from_utf8_lossy(&out.stderr).into_owned(), out.status.success())
}

#[test]
fn garbage_mixed_in_leaves_tracks_unchanged() {
    let dir = demo("quiet-morning");
    let cfg = dir.join("config.toml");
    let good = std::fs::read(dir.join("feed.jsonl")).unwrap();
    let (clean, _, ok) = track(&cfg, &dir.join("feed.jsonl"));
    assert!(ok);
    let bad_lines: Vec<Vec<u8>> = vec![
        br#"{"type":"detection","sensor":"kestrel-point","time":"2026-05-14T06:01:00Z","range_m":NaN,"bearing_deg":10.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"kestrel-point","time":"2026-05-14T06:01:00Z","range_m":-40.0,"bearing_deg":10.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"kestrel-point","time":"2026-05-14T06:01:00Z","range_m":4000.0,"bearing_deg":360.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"nowhere-mast","time":"2026-05-14T06:01:00Z","range_m":4000.0,"bearing_deg":10.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"kestrel-point","time":"2031-05-14T06:01:00Z","range_m":4000.0,"bearing_deg":10.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"kestrel-point","time":"1999-05-14T06:01:00Z","range_m":4000.0,"bearing_deg":10.0}"#.to_vec(),
        br#"{"type":"detection","sensor":"kestrel-point","ti"#.to_vec(),
        b"\xff\xfe{\"type\":\"detection\"}".to_vec(),
        br#"{"type":"report","sensor":"kestrel-point","time":"2026-05-14T06:01:00Z","id":"1","lat_deg":56.4,"lon_deg":7.3}"#.to_vec(),
        b"[]".to_vec(),
    ];
    // Interleave the bad lines through the good feed, and duplicate every
    // 50th good line exactly.
    let mut mixed = Vec::new();
    let mut dupes = 0;
    for (i, line) in good.split(|&b| b == b'\n').filter(|l| !l.is_empty()).enumerate() {
        mixed.extend_from_slice(line);
        mixed.push(b'\n');
        if i % 50 == 0 {
            mixed.extend_from_slice(line);
            mixed.push(b'\n');
            dupes += 1;
        }
        if i % 97 == 0 {
            mixed.extend_from_slice(&bad_lines[(i / 97) % bad_lines.len()]);
            mixed.push(b'\n');
        }
    }
    let tmp = tempfile::tempdir().unwrap();
    let path = tmp.path().join("mixed.jsonl");
    std::fs::write(&path, &mixed).unwrap();
    let (dirty, stderr, ok) = track(&cfg, &path);
    assert!(ok, "{stderr}");
    assert!(clean == dirty, "garbage changed the tracks");
    for key in ["non_finite", "out_of_range", "unknown_sensor", "implausible_time", "bad_json", "bad_utf8", "wrong_sensor_kind", "duplicate"] {
        assert!(stderr.contains(key), "no {key} in:\n{stderr}");
    }
    assert!(dupes > 0 && stderr.contains("mixed.jsonl:"), "bad lines are named by file and line:\n{stderr}");
}

#[test]
fn same_input_same_bytes_whatever_the_line_order() {
    let dir = demo("close-pass");
    let cfg = dir.join("config.toml");
    let (a, _, ok) = track(&cfg, &dir.join("feed.jsonl"));
    assert!(ok && !a.is_empty());
    let (b, _, _) = track(&cfg, &dir.join("feed.jsonl"));
    assert!(a == b);
    // Reverse the file: records are ordered by time (and a total order at
    // equal times) before tracking.
    let text = std::fs::read_to_string(dir.join("feed.jsonl")).unwrap();
    let reversed: String = text.lines().rev().map(|l| format!("{l}\n")).collect();
    let tmp = tempfile::tempdir().unwrap();
    let path = tmp.path().join("reversed.jsonl");
    std::fs::write(&path, reversed).unwrap();
    let (c, _, _) = track(&cfg, &path);
    assert!(a == c, "file order changed the output");
}

#[test]
fn errors_name_the_file_and_key() {
    let tmp = tempfile::tempdir().unwrap();
    let cfg = tmp.path().join("bad.toml");
    let text = std::fs::read_to_string(demo("quiet-morning").join("config.toml")).unwrap().replace("range_sigma_m = 12.0", "range_sigma_m = -1.0");
    std::fs::write(&cfg, text).unwrap();
    let (_, stderr, ok) = track(&cfg, &demo("quiet-morning").join("feed.jsonl"));
    assert!(!ok);
    assert!(stderr.contains("bad.toml") && stderr.contains("sensors[0].range_sigma_m"), "{stderr}");
    let (_, stderr, ok) = track(&demo("quiet-morning").join("config.toml"), &tmp.path().join("missing.jsonl"));
    assert!(!ok && stderr.contains("missing.jsonl"), "{stderr}");
}
