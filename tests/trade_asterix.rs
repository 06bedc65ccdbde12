//! ASTERIX round trips: blocks made by an independent encoder written from
//! the category specifications (tests/fixtures/make_asterix_fixtures.py:
//! Category 048 ed. 1.31, 034 ed. 1.29, 010 ed. 1.1, Part 1 framing) are
//! decoded here and compared with the content the script recorded.

use serde_json::Value;
use skerry::feed::asterix::{Amplitude, AsterixDecoder, AsterixItem, AsterixReject, AsterixRejectReason, ServiceMessage, SourceTable};
use skerry::feed::{Record, SensorId};
use skerry::time::Timestamp;

const CASES: &str = include_str!("fixtures/asterix_cases.json");

fn hex(s: &str) -> Vec<u8> {
    (0..s.len()).step_by(2).map(|i| u8::from_str_radix(&s[i..i + 2], 16).unwrap()).collect()
}

struct Fixture {
    names: Vec<String>,
    sources: SourceTable,
    cases: Vec<Value>,
}

fn fixture() -> Fixture {
    let doc: Value = serde_json::from_str(CASES).unwrap();
    let mut names = Vec::new();
    let mut pairs = Vec::new();
    for (i, s) in doc["sensors"].as_array().unwrap().iter().enumerate() {
        names.push(s["name"].as_str().unwrap().to_string());
        pairs.push((s["sac"].as_u64().unwrap() as u8, s["sic"].as_u64().unwrap() as u8, i as SensorId));
    }
    Fixture { names, sources: SourceTable::new(pairs).unwrap(), cases: doc["cases"].as_array().unwrap().clone() }
}

fn run(f: &Fixture, case: &Value) -> (Vec<Result<AsterixItem, AsterixReject>>, AsterixDecoder) {
    let data = hex(case["hex"].as_str().unwrap());
    let mut dec = AsterixDecoder::new(f.sources.clone());
    let mut out = Vec::new();
    match case["mode"].as_str().unwrap() {
        "live" => {
            let r = Timestamp::from_unix_nanos(case["reference_unix_ns"].as_i64().unwrap());
            dec.decode(&data, r, &mut |x| out.push(x));
        }
        _ => {
            let date = Timestamp::parse_date(case["date"].as_str().unwrap()).unwrap();
            dec.decode_recording(&data, date, &mut |x| out.push(x));
        }
    }
    (out, dec)
}

fn close(a: f64, b: f64, what: &str, case: &str) {
    assert!((a - b).abs() <= 1e-9 * b.abs().max(1.0), "{case}: {what}: got {a}, expected {b}");
}

fn opt_f64(v: &Value) -> Option<f64> {
    v.as_f64()
}

fn sensor_name(f: &Fixture, id: Option<SensorId>) -> Value {
    match id {
        Some(i) => Value::String(f.names[i as usize].clone()),
        None => Value::Null,
    }
}

fn check_case(f: &Fixture, case: &Value) {
    let name = case["name"].as_str().unwrap();
    let (got, _) = run(f, case);
    let want = case["expect"].as_array().unwrap();
    assert_eq!(got.len(), want.len(), "{name}: {} outcomes, expected {}: {got:#?}", got.len(), want.len());
    for (k, (g, w)) in got.iter().zip(want).enumerate() {
        let ctx = format!("{name}[{k}]");
        match (g, w["kind"].as_str().unwrap()) {
            (Err(r), "reject") => {
                assert_eq!(r.reason.key(), w["reason"].as_str().unwrap(), "{ctx}");
                assert_eq!(r.category as u64, w["category"].as_u64().unwrap(), "{ctx}");
                assert_eq!(sensor_name(f, r.sensor), w["sensor"], "{ctx}: sensor");
            }
            (Ok(AsterixItem::Plot(p)), "plot") => {
                let d = &p.detection;
                assert_eq!(sensor_name(f, Some(d.sensor)), w["sensor"], "{ctx}");
                assert_eq!(d.time.unix_nanos(), w["time_unix_ns"].as_i64().unwrap(), "{ctx}: time {} vs {}", d.time, w["time"]);
                assert_eq!(d.scan, w["scan"].as_u64(), "{ctx}: scan");
                close(d.range_m, w["range_m"].as_f64().unwrap(), "range_m", &ctx);
                close(d.bearing_deg, w["bearing_deg"].as_f64().unwrap(), "bearing_deg", &ctx);
                assert!((0.0..360.0).contains(&d.bearing_deg), "{ctx}");
                assert_eq!(d.radial_speed_mps, opt_f64(&w["radial_speed_mps"]), "{ctx}: radial speed");
                assert_eq!(d.snr_db, None);
                assert_eq!(p.category as u64, w["category"].as_u64().unwrap(), "{ctx}");
                assert_eq!(p.report_type.map(|t| t as u64), w["report_type"].as_u64(), "{ctx}: report type");
                assert_eq!(p.simulated, w["simulated"].as_bool().unwrap(), "{ctx}: simulated");
                assert_eq!(p.from_cartesian, w["from_cartesian"].as_bool().unwrap(), "{ctx}");
                let amp = match p.amplitude {
                    Some(Amplitude::Dbm(x)) => (Some(x), None),
                    Some(Amplitude::Raw(x)) => (None, Some(x as u64)),
                    None => (None, None),
                };
                assert_eq!(amp, (opt_f64(&w["amplitude_dbm"]), w["amplitude_raw"].as_u64()), "{ctx}: amplitude");
                match (p.run_length_deg, opt_f64(&w["run_length_deg"])) {
                    (Some(a), Some(b)) => close(a, b, "run length", &ctx),
                    (a, b) => assert_eq!(a, b, "{ctx}: run length"),
                }
                match (&p.doppler, &w["doppler"]) {
                    (None, Value::Null) => {}
                    (Some(d), v) => {
                        assert_eq!(d.speed_mps, v["speed_mps"].as_f64().unwrap(), "{ctx}: doppler");
                        assert_eq!(d.doubtful, v["doubtful"].as_bool().unwrap(), "{ctx}: doubtful");
                    }
                    (None, v) => panic!("{ctx}: expected doppler {v}"),
                }
                // The feed record is the detection itself.
                assert_eq!(g.as_ref().unwrap().record(), Some(Record::Detection(d.clone())));
            }
            (Ok(AsterixItem::Service(s)), "service") => {
                assert_eq!(sensor_name(f, Some(s.sensor)), w["sensor"], "{ctx}");
                assert_eq!(s.category as u64, w["category"].as_u64().unwrap(), "{ctx}");
                let (msg, mtype, sector) = match s.message {
                    ServiceMessage::NorthMarker => ("north_marker", 1, None),
                    ServiceMessage::SectorCrossing { sector_deg } => ("sector_crossing", 2, Some(sector_deg)),
                    ServiceMessage::StartOfUpdateCycle => ("start_of_update_cycle", 2, None),
                    ServiceMessage::Other { message_type } => ("other", message_type as u64, None),
                };
                assert_eq!(msg, w["message"].as_str().unwrap(), "{ctx}");
                assert_eq!(mtype, w["message_type"].as_u64().unwrap(), "{ctx}");
                assert_eq!(sector, opt_f64(&w["sector_deg"]), "{ctx}: sector");
                assert_eq!(s.time.map(|t| t.unix_nanos()), w["time_unix_ns"].as_i64(), "{ctx}: time");
                assert_eq!(s.rotation_period_s, opt_f64(&w["rotation_period_s"]), "{ctx}: rotation period");
                match (&s.scan_end, &w["scan_end"]) {
                    (None, Value::Null) => {}
                    (Some(e), v) if !v.is_null() => {
                        assert_eq!(e.sensor, s.sensor);
                        assert_eq!(e.scan, v["scan"].as_u64().unwrap(), "{ctx}: scan");
                        assert_eq!(e.time.unix_nanos(), v["time_unix_ns"].as_i64().unwrap(), "{ctx}");
                        let want: Option<[f64; 2]> = v["sector_deg"].as_array().map(|a| [a[0].as_f64().unwrap(), a[1].as_f64().unwrap()]);
                        assert_eq!(e.sector_deg, want, "{ctx}: sector covered");
                    }
                    (a, b) => panic!("{ctx}: scan_end {a:?}, expected {b}"),
                }
            }
            (g, kind) => panic!("{ctx}: got {g:?}, expected a {kind}: {w}"),
        }
    }
}

#[test]
fn trade_asterix_fixture_cases() {
    let f = fixture();
    assert!(f.cases.len() >= 15);
    for case in &f.cases {
        check_case(&f, case);
    }
}

#[test]
fn trade_asterix_counts_follow_outcomes() {
    // Every outcome handed to the sink is counted once, under its reason.
    let f = fixture();
    for case in &f.cases {
        let (got, dec) = run(&f, case);
        let c = dec.counts();
        let plots = got.iter().filter(|x| matches!(x, Ok(AsterixItem::Plot(_)))).count() as u64;
        let services = got.iter().filter(|x| matches!(x, Ok(AsterixItem::Service(_)))).count() as u64;
        assert_eq!((c.plots, c.services), (plots, services));
        for r in AsterixRejectReason::ALL {
            let n = got.iter().filter(|x| matches!(x, Err(e) if e.reason == r)).count() as u64;
            assert_eq!(c.rejected(r), n, "{}: {}", case["name"], r.key());
        }
    }
}

#[test]
fn trade_asterix_datagrams_are_independent_of_splitting() {
    // A recording decoded whole, or block by block in separate calls,
    // gives the same items (the day reference carries across calls).
    let f = fixture();
    let case = f.cases.iter().find(|c| c["name"] == "recording_across_midnight").unwrap();
    let data = hex(case["hex"].as_str().unwrap());
    let date = Timestamp::parse_date(case["date"].as_str().unwrap()).unwrap();
    let (whole, _) = run(&f, case);
    let mut dec = AsterixDecoder::new(f.sources.clone());
    let mut parts = Vec::new();
    let mut pos = 0;
    while pos < data.len() {
        let len = u16::from_be_bytes([data[pos + 1], data[pos + 2]]) as usize;
        dec.decode_recording(&data[pos..pos + len], date, &mut |x| parts.push(x));
        pos += len;
    }
    assert_eq!(whole, parts);
}
