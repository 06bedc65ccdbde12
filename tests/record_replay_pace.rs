//! `skerry replay --pace received`: the send schedule follows the
//! recording's `received` offsets in file order, divided by `--speed`,
//! never faster than `--max-rate`, so the original arrival jitter and
//! lateness come back; `--pace time` keeps following the newest record
//! time. The pacing function is tested, not the wall clock; the expected
//! schedules are the definitions worked by hand beside each case.

use skerry::daemon::replay::{MissingReceived, PaceBy, Pacer, ReplayError, load_lines};

/// A recording line: feed time `t` and received `r`, seconds after
/// 06:00:00Z.
fn line(t: f64, r: Option<f64>) -> String {
    let at = |s: f64| skerry::time::Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap().plus_secs(s).to_rfc3339();
    let rec = r.map(|r| format!(r#","received":"{}""#, at(r))).unwrap_or_default();
    format!(r#"{{"type":"detection","sensor":"kestrel-point","time":"{}","range_m":100.0,"bearing_deg":1.0{rec}}}"#, at(t))
}

fn schedule(p: &mut Pacer, lines: &[String]) -> Vec<f64> {
    lines.iter().map(|l| p.due(l).unwrap()).collect()
}

fn close(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-9)
}

#[test]
fn received_pace_follows_the_received_offsets() {
    // Arrivals 10.0, 10.1, 10.35, 10.3 (a datagram overtaken), 12.0 s;
    // the plots' own times differ (the third arrived 1.2 s late).
    let lines = [line(9.9, Some(10.0)), line(10.05, Some(10.1)), line(9.15, Some(10.35)), line(10.2, Some(10.3)), line(11.9, Some(12.0))];
    // Speed 2: offsets (0, 0.1, 0.35, 0.3, 2.0) / 2.
    let got = schedule(&mut Pacer::new(PaceBy::Received, 2.0, 1e9), &lines);
    assert!(close(&got, &[0.0, 0.05, 0.175, 0.15, 1.0]), "{got:?}");
    // Speed 1: the offsets themselves.
    let got = schedule(&mut Pacer::new(PaceBy::Received, 1.0, 1e9), &lines);
    assert!(close(&got, &[0.0, 0.1, 0.35, 0.3, 2.0]), "{got:?}");
    // The same lines paced by time: newest time so far (9.9, 10.05, 10.05,
    // 10.2, 11.9) minus 9.9, at speed 1.
    let got = schedule(&mut Pacer::new(PaceBy::Time, 1.0, 1e9), &lines);
    assert!(close(&got, &[0.0, 0.15, 0.15, 0.3, 2.0]), "{got:?}");
    // Speed 0: only the rate cap, here 10 records a second: i / 10.
    let got = schedule(&mut Pacer::new(PaceBy::Received, 0.0, 10.0), &lines);
    assert!(close(&got, &[0.0, 0.1, 0.2, 0.3, 0.4]), "{got:?}");
    // The cap also bounds a paced replay: 4 a second against offsets
    // (0, 0.1, 0.35, 0.3, 2.0): max(i / 4, offset).
    let got = schedule(&mut Pacer::new(PaceBy::Received, 1.0, 4.0), &lines);
    assert!(close(&got, &[0.0, 0.25, 0.5, 0.75, 2.0]), "{got:?}");
}

#[test]
fn received_pace_needs_received_on_every_line() {
    let mut p = Pacer::new(PaceBy::Received, 1.0, 1e9);
    assert!(p.due(&line(1.0, Some(1.0))).is_ok());
    assert_eq!(p.due(&line(2.0, None)), Err(MissingReceived));
    // Time pace does not care.
    assert!(Pacer::new(PaceBy::Time, 1.0, 1e9).due(&line(2.0, None)).is_ok());

    // Loading a folder names the file and line.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("2026-05-14T06.jsonl"), format!("{}\n{}\n", line(1.0, Some(1.0)), line(2.0, Some(2.0)))).unwrap();
    let seven = dir.path().join("2026-05-14T07.jsonl");
    std::fs::write(&seven, format!("{}\n\n{}\n", line(3600.0, Some(3600.0)), line(3601.0, None))).unwrap();
    let e = load_lines(dir.path(), PaceBy::Received).unwrap_err();
    assert!(matches!(&e, ReplayError::NoReceived { line: 3, .. }), "{e}");
    assert!(e.to_string().starts_with(&format!("{}:3:", seven.display())), "{e}");
    // By time, the same folder loads, files in name order.
    let loaded = load_lines(dir.path(), PaceBy::Time).unwrap();
    assert_eq!(loaded.lines.len(), 4);
    assert!(loaded.lines[2].contains("07:00:00Z"), "{:?}", loaded.lines);
}
