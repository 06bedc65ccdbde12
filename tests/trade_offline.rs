//! `skerry track` and `skerry check` with trade inputs (CONTRACT.md §8):
//! `--nmea SENSOR=FILE` and `--asterix FILE --date D`, merged with JSON
//! feed files; rejects counted per sensor and reason; the static data of
//! AIS types 5 and 24 on the track records.
//!
//! The inputs are the committed fixtures: the AIS session made with pyais
//! 3.3.1 (tests/fixtures/make_ais_fixtures.py) and the ASTERIX cases made
//! by the independent encoder tests/fixtures/make_asterix_fixtures.py;
//! expected outcomes are the ones those scripts recorded.

mod trade_support;

use serde_json::Value;
use skerry::feed::{Record, SensorId, TrackRecord};
use skerry::offline::{InputError, NmeaInput, TradeInputs, feed_order, read_inputs};
use skerry::time::Timestamp;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use trade_support::{AIS, ASTERIX, CONFIG, config};


/// The fixtures' radars (names and SAC/SIC from asterix_cases.json) and a
/// transponder receiver.

const AIS_SENSOR: SensorId = 2;

fn hex(s: &str) -> Vec<u8> {
    (0..s.len()).step_by(2).map(|i| u8::from_str_radix(&s[i..i + 2], 16).unwrap()).collect()
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn ais_log(dir: &Path) -> PathBuf {
    let doc: Value = serde_json::from_str(AIS).unwrap();
    let mut text = String::new();
    for l in doc["lines"].as_array().unwrap() {
        text.push_str(l["line"].as_str().unwrap());
        text.push_str("\r\n");
    }
    write(dir, "session.nmea", text.as_bytes())
}

fn skerry(args: &[&std::ffi::OsStr]) -> (String, String, bool) {
    let out = Command::new(env!("CARGO_BIN_EXE_skerry")).args(args).output().expect("run skerry");
    (String::from_utf8_lossy(&out.stdout).into_owned(), String::from_utf8_lossy(&out.stderr).into_owned(), out.status.success())
}

#[test]
fn trade_offline_nmea_log_counts_like_the_fixture() {
    let doc: Value = serde_json::from_str(AIS).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let log = ais_log(dir.path());
    let trade = TradeInputs { nmea: vec![NmeaInput { sensor: "harbour-ais".into(), path: log }], ..Default::default() };
    let (feed, summary) = read_inputs(&[], &trade, &config()).unwrap();

    // What the pyais-made session says each line is, with one change: in a
    // log, a line without a tag block has no time at all (the session
    // gave it a receive time).
    let mut positions = 0u64;
    let mut rejects: BTreeMap<String, u64> = BTreeMap::new();
    for l in doc["lines"].as_array().unwrap() {
        let timed = l["line"].as_str().unwrap().starts_with('\\');
        match l["expect"]["kind"].as_str().unwrap() {
            "reject" => *rejects.entry(format!("nmea_{}", l["expect"]["reason"].as_str().unwrap())).or_default() += 1,
            _ if !timed => *rejects.entry("nmea_no_time".into()).or_default() += 1,
            "position" => positions += 1,
            _ => {}
        }
    }
    // Fragment sets lost along the way (the session's own final counts).
    for (k, v) in doc["final_counts"].as_object().unwrap() {
        *rejects.entry(format!("nmea_{k}")).or_default() += v.as_u64().unwrap();
    }
    let got: BTreeMap<String, u64> = feed.counts.rejected.iter().map(|((s, k), n)| {
        assert_eq!(*s, Some(AIS_SENSOR), "{k}: counted under the sensor");
        (k.to_string(), *n)
    }).collect();
    assert_eq!(got, rejects);
    assert_eq!(feed.records.len() as u64, positions);
    assert_eq!(feed.counts.total_accepted(), positions);
    assert!(feed.records.iter().all(|r| matches!(r, Record::Report(_)) && r.sensor() == AIS_SENSOR));
    assert!(feed.records.windows(2).all(|w| feed_order(&w[0], &w[1]).is_le()));
    let c = &summary.nmea[&AIS_SENSOR];
    assert_eq!(c.positions, positions);
    assert_eq!(summary.nmea_lines[&AIS_SENSOR], doc["lines"].as_array().unwrap().len() as u64);
    assert_eq!(feed.lines, doc["lines"].as_array().unwrap().len());
    // The lines that are neither records nor faults add up with them.
    assert_eq!(c.positions + c.own_ship + c.no_position + c.statics + c.fragments + c.other + (c.total_rejected() - c.rejected(skerry::feed::nmea::AisRejectReason::FragmentTimeout) - c.rejected(skerry::feed::nmea::AisRejectReason::FragmentAbandoned)), feed.lines as u64);
}

#[test]
fn trade_offline_static_data_reaches_the_track_records() {
    // pyais decodes of the session (ais_session.json): MMSI 235000101 is
    // "MORWEN GLASS", ship type 70, A+B = 30+10, C+D = 4+6; 338000201 gets
    // its name from type 24 part A and the rest from part B.
    let dir = tempfile::tempdir().unwrap();
    let cfg_path = write(dir.path(), "c.toml", CONFIG.as_bytes());
    let log = ais_log(dir.path());
    let arg = format!("harbour-ais={}", log.display());
    let (out, err, ok) = skerry(&["track".as_ref(), "--config".as_ref(), cfg_path.as_os_str(), "--nmea".as_ref(), arg.as_ref()]);
    assert!(ok, "{err}");
    assert!(err.contains("nmea_bad_checksum") && err.contains("nmea_no_time"), "{err}");
    let tracks: Vec<TrackRecord> = out.lines().map(|l| TrackRecord::from_json(l).unwrap().unwrap()).collect();
    let of = |id: &str| tracks.iter().filter(|t| t.identity.as_deref() == Some(id)).collect::<Vec<_>>();
    let morwen = of("235000101");
    assert!(!morwen.is_empty());
    for t in &morwen {
        assert_eq!((t.name.as_deref(), t.ship_type, t.length_m, t.beam_m), (Some("MORWEN GLASS"), Some(70), Some(40.0), Some(10.0)));
    }
    // Class B: the first report came before any static message.
    let kestrel = of("338000201");
    assert!(kestrel.len() >= 2);
    assert_eq!((kestrel[0].name.as_deref(), kestrel[0].ship_type), (None, None));
    let last = kestrel.last().unwrap();
    assert_eq!((last.name.as_deref(), last.ship_type, last.length_m, last.beam_m), (Some("KESTREL DAWN"), Some(37), Some(10.0), Some(3.0)));
    // The raw line: the fields follow the identity, and are absent when unknown.
    let first_kestrel = out.lines().find(|l| l.contains("\"identity\":\"338000201\"")).unwrap();
    assert!(!first_kestrel.contains("\"name\""), "{first_kestrel}");
    assert!(out.contains(r#""identity":"235000101","name":"MORWEN GLASS","ship_type":70,"length_m":40.0,"beam_m":10.0"#));

    // `skerry check` lists what the decoder read.
    let (out, err, ok) = skerry(&["check".as_ref(), "--config".as_ref(), cfg_path.as_os_str(), "--nmea".as_ref(), arg.as_ref()]);
    assert!(ok, "{err}");
    assert!(out.contains("rejected:nmea_bad_checksum") && out.contains("nmea harbour-ais: 43 lines"), "{out}");
}

#[test]
fn trade_offline_bad_arguments_are_clear_errors() {
    let dir = tempfile::tempdir().unwrap();
    let cfg_path = write(dir.path(), "c.toml", CONFIG.as_bytes());
    let blob = write(dir.path(), "x.ast", &[34, 0, 3]);
    let log = ais_log(dir.path());
    let c = cfg_path.as_os_str();
    for (args, words) in [
        (vec!["track".as_ref(), "--config".as_ref(), c, "--asterix".as_ref(), blob.as_os_str()], "--date"),
        (vec!["check".as_ref(), "--config".as_ref(), c, "--asterix".as_ref(), blob.as_os_str()], "--date"),
        (vec!["track".as_ref(), "--config".as_ref(), c, "--asterix".as_ref(), blob.as_os_str(), "--date".as_ref(), "2026-13-01".as_ref()], "not a date"),
        (vec!["track".as_ref(), "--config".as_ref(), c, "--nmea".as_ref(), log.as_os_str()], "SENSOR=FILE"),
        (vec!["track".as_ref(), "--config".as_ref(), c, "--nmea".as_ref(), format!("nowhere={}", log.display()).as_ref()], "no sensor `nowhere`"),
        (vec!["track".as_ref(), "--config".as_ref(), c, "--nmea".as_ref(), format!("north-mast={}", log.display()).as_ref()], "is a radar"),
        (vec!["track".as_ref(), "--config".as_ref(), c, "--nmea".as_ref(), "harbour-ais=/nonexistent/ais.nmea".as_ref()], "/nonexistent/ais.nmea"),
        (vec!["track".as_ref(), "--config".as_ref(), c], "required"),
    ] {
        let owned: Vec<std::ffi::OsString> = args.iter().map(|a| a.to_os_string()).collect();
        let refs: Vec<&std::ffi::OsStr> = owned.iter().map(|a| a.as_os_str()).collect();
        let (_, err, ok) = skerry(&refs);
        assert!(!ok, "{args:?} should fail");
        assert!(err.contains(words), "{args:?}: {err}");
    }
    // The library says the same without the command line.
    let e = read_inputs(&[], &TradeInputs { asterix: vec![blob], ..Default::default() }, &config()).unwrap_err();
    assert!(matches!(e, InputError::NoDate), "{e}");
}

#[test]
fn trade_offline_asterix_rejects_are_counted_per_sensor_and_reason() {
    // Every fixture case as a recording of its own, read offline: the
    // decoder's outcomes (the encoder script's expectations) become
    // records and per-sensor reject counts.
    let doc: Value = serde_json::from_str(ASTERIX).unwrap();
    let cfg = config();
    let sensors = cfg.sensor_table();
    let dir = tempfile::tempdir().unwrap();
    let mut covered = std::collections::BTreeSet::new();
    for case in doc["cases"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let date = match case["date"].as_str() {
            Some(d) => Timestamp::parse_date(d).unwrap(),
            None => Timestamp::from_unix_nanos(case["reference_unix_ns"].as_i64().unwrap()).midnight(),
        };
        let path = write(dir.path(), &format!("{name}.ast"), &hex(case["hex"].as_str().unwrap()));
        let trade = TradeInputs { asterix: vec![path], date: Some(date), ..Default::default() };
        let (feed, summary) = read_inputs(&[], &trade, &cfg).unwrap();
        let mut want: BTreeMap<(Option<SensorId>, String), u64> = BTreeMap::new();
        let mut records = 0usize;
        let expect = case["expect"].as_array().unwrap();
        for e in expect {
            match e["kind"].as_str().unwrap() {
                "reject" => {
                    let s = e["sensor"].as_str().map(|n| sensors.lookup(n).unwrap());
                    *want.entry((s, format!("asterix_{}", e["reason"].as_str().unwrap()))).or_default() += 1;
                    covered.insert(e["reason"].as_str().unwrap().to_string());
                }
                "plot" => records += 1,
                _ => records += usize::from(!e["scan_end"].is_null()),
            }
        }
        let got: BTreeMap<(Option<SensorId>, String), u64> =
            feed.counts.rejected.iter().filter(|((_, k), _)| k.starts_with("asterix_")).map(|((s, k), n)| ((*s, k.to_string()), *n)).collect();
        assert_eq!(got, want, "{name}");
        // Records: accepted, or screened out (duplicates within a case).
        let screened: u64 = feed.counts.rejected.iter().filter(|((_, k), _)| !k.starts_with("asterix_")).map(|(_, n)| n).sum();
        assert_eq!(feed.counts.total_accepted() + screened, records as u64, "{name}");
        assert_eq!(feed.lines, expect.len(), "{name}");
        let c = summary.asterix.as_ref().unwrap();
        assert_eq!((c.plots + c.services + c.total_rejected()) as usize, expect.len(), "{name}");
        if case["mode"] == "recording" {
            // The recording's own date and rollover: times as the script made them.
            let mut t: Vec<i64> = expect.iter().filter_map(|e| e["time_unix_ns"].as_i64().or(e["scan_end"]["time_unix_ns"].as_i64())).collect();
            t.sort_unstable();
            assert_eq!(feed.records.iter().map(|r| r.time().unix_nanos()).collect::<Vec<_>>(), t, "{name}");
        }
    }
    for r in ["unknown_source", "test_target", "bad_block_length", "truncated_item", "fspec_unterminated", "unknown_category"] {
        assert!(covered.contains(r), "the cases cover {r}");
    }
}

#[test]
fn trade_offline_inputs_merge_into_one_time_ordered_feed() {
    // A JSON feed, an NMEA log and an ASTERIX recording of the same
    // morning: one feed, in feed order, each record counted once.
    let doc: Value = serde_json::from_str(ASTERIX).unwrap();
    let case = doc["cases"].as_array().unwrap().iter().find(|c| c["name"] == "cat034_scans_and_sectors").unwrap();
    let dir = tempfile::tempdir().unwrap();
    let ast = write(dir.path(), "a.ast", &hex(case["hex"].as_str().unwrap()));
    let log = ais_log(dir.path());
    let json = write(
        dir.path(),
        "f.jsonl",
        br#"{"type":"detection","sensor":"south-quay","time":"2026-05-14T07:00:00Z","range_m":900.0,"bearing_deg":12.5}
{"type":"report","sensor":"harbour-ais","time":"2026-05-14T06:00:03.5Z","id":"235000777","lat_deg":56.45,"lon_deg":7.35,"name":"TIDEWATER"}
{"type":"detection","sensor":"south-quay","time":"yesterday","range_m":900.0,"bearing_deg":12.5}
"#,
    );
    let cfg = config();
    let trade = TradeInputs { nmea: vec![NmeaInput { sensor: "harbour-ais".into(), path: log.clone() }], asterix: vec![ast.clone()], date: Some(Timestamp::parse_date("2026-05-14").unwrap()) };
    let (all, _) = read_inputs(std::slice::from_ref(&json), &trade, &cfg).unwrap();
    let (j, _) = read_inputs(std::slice::from_ref(&json), &TradeInputs::default(), &cfg).unwrap();
    let (n, _) = read_inputs(&[], &TradeInputs { asterix: vec![], ..trade.clone() }, &cfg).unwrap();
    let (a, _) = read_inputs(&[], &TradeInputs { nmea: vec![], ..trade.clone() }, &cfg).unwrap();
    let mut each: Vec<Record> = [j.records, n.records, a.records].concat();
    each.sort_by(feed_order);
    assert_eq!(all.records, each);
    assert!(all.records.windows(2).all(|w| feed_order(&w[0], &w[1]).is_le()));
    assert_eq!(all.counts.total_rejected(), j.counts.total_rejected() + n.counts.total_rejected() + a.counts.total_rejected());
    assert_eq!(all.counts.rejected.get(&(Some(1), "bad_time")), Some(&1));
    let kinds: std::collections::BTreeSet<u16> = all.records.iter().map(Record::sensor).collect();
    assert_eq!(kinds.len(), 3, "records of all three sensors");
}
