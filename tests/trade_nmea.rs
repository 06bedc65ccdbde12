//! AIS over NMEA 0183, checked against pyais 3.3.1: every line of
//! tests/fixtures/ais_session.json was encoded by pyais from invented
//! content, and the fixture holds pyais's own decode of it (script:
//! tests/fixtures/make_ais_fixtures.py). Hull-centre positions were
//! computed with geographiclib 2.1 (WGS-84 geodesic Direct problem).

use serde_json::Value;
use skerry::feed::nmea::{AisDecoder, AisOutcome, AisPosition, AisRejectReason};
use skerry::time::Timestamp;

const SESSION: &str = include_str!("fixtures/ais_session.json");

fn session() -> Value {
    serde_json::from_str(SESSION).unwrap()
}

fn secs(v: &Value) -> Option<Timestamp> {
    v.as_i64().map(|s| Timestamp::from_unix_nanos(s * 1_000_000_000))
}

fn opt_str(v: &Value) -> Option<&str> {
    v.as_str().filter(|s| !s.is_empty())
}

fn nonzero(v: &Value) -> Option<u64> {
    v.as_u64().filter(|x| *x != 0)
}

fn check_position(p: &AisPosition, w: &Value, ctx: &str) {
    let f = &w["pyais"];
    assert_eq!(p.mmsi as u64, f["mmsi"].as_u64().unwrap(), "{ctx}");
    assert_eq!(&*p.report.id, format!("{:09}", p.mmsi), "{ctx}: identity is the 9-digit MMSI");
    assert_eq!(p.msg_type as u64, f["msg_type"].as_u64().unwrap(), "{ctx}");
    assert_eq!(Some(p.report.time), secs(&w["time_unix_s"]), "{ctx}: time");
    // pyais rounds positions to 6 decimals; the exact transmitted value
    // is raw / 600 000.
    assert!((p.antenna_lat_deg - f["lat"].as_f64().unwrap()).abs() <= 6e-7, "{ctx}: lat");
    assert!((p.antenna_lon_deg - f["lon"].as_f64().unwrap()).abs() <= 6e-7, "{ctx}: lon");
    assert!((p.antenna_lat_deg - w["antenna_lat_deg"].as_f64().unwrap()).abs() < 1e-12, "{ctx}");
    assert!((p.antenna_lon_deg - w["antenna_lon_deg"].as_f64().unwrap()).abs() < 1e-12, "{ctx}");
    assert_eq!(p.report.sog_kn, w["sog_kn"].as_f64(), "{ctx}: sog");
    assert_eq!(p.report.cog_deg, w["cog_deg"].as_f64(), "{ctx}: cog");
    assert_eq!(p.report.heading_deg, w["heading_deg"].as_f64(), "{ctx}: heading");
    let second = f["second"].as_u64().unwrap();
    assert_eq!(p.utc_second.map(u64::from), (second < 60).then_some(second), "{ctx}: second");
    assert_eq!(p.high_accuracy, f["accuracy"].as_bool().unwrap(), "{ctx}: accuracy");
    let status = f.get("status").and_then(Value::as_u64).filter(|s| *s != 15);
    assert_eq!(p.nav_status.map(u64::from), status, "{ctx}: nav status");
    match (&p.shift, &w["centre"]) {
        (None, Value::Null) => {
            assert_eq!((p.report.lat_deg, p.report.lon_deg), (p.antenna_lat_deg, p.antenna_lon_deg), "{ctx}");
        }
        (Some(s), c) if !c.is_null() => {
            for (got, key) in [(s.forward_m, "forward_m"), (s.starboard_m, "starboard_m"), (s.east_m, "east_m"), (s.north_m, "north_m")] {
                assert!((got - c[key].as_f64().unwrap()).abs() < 1e-9, "{ctx}: {key} {got} vs {}", c[key]);
            }
            assert_eq!(s.orientation_deg, c["orientation_deg"].as_f64().unwrap(), "{ctx}");
            assert_eq!(s.from_heading, c["from_heading"].as_bool().unwrap(), "{ctx}");
            // Within 1 mm of geographiclib's geodesic.
            let lat = c["lat_deg"].as_f64().unwrap();
            let lon = c["lon_deg"].as_f64().unwrap();
            let dn = (p.report.lat_deg - lat) * 111_320.0;
            let de = (p.report.lon_deg - lon) * 111_320.0 * lat.to_radians().cos();
            assert!(dn.hypot(de) < 1e-3, "{ctx}: centre off by {} m", dn.hypot(de));
        }
        (a, b) => panic!("{ctx}: shift {a:?}, expected {b}"),
    }
}

fn check_static(dec: &AisDecoder, w: &Value, ctx: &str) {
    let f = &w["pyais"];
    let mmsi = f["mmsi"].as_u64().unwrap() as u32;
    let v = dec.vessel(mmsi).unwrap_or_else(|| panic!("{ctx}: {mmsi} not in the table"));
    let st = &v.statics;
    assert_eq!(&*v.id, format!("{mmsi:09}"));
    if let Some(name) = f.get("shipname") {
        assert_eq!(st.name.as_ref().map(|n| n.as_str()), opt_str(name), "{ctx}: name");
    }
    if let Some(cs) = f.get("callsign") {
        assert_eq!(st.callsign.as_ref().map(|n| n.as_str()), opt_str(cs), "{ctx}: callsign");
    }
    if let Some(t) = f.get("ship_type") {
        assert_eq!(st.ship_type.map(u64::from), nonzero(t), "{ctx}: ship type");
    }
    if let Some(bow) = f.get("to_bow") {
        let d = [bow, &f["to_stern"], &f["to_port"], &f["to_starboard"]].map(|x| x.as_u64().unwrap());
        let got = st.dimensions.map(|x| [x.to_bow_m as u64, x.to_stern_m as u64, x.to_port_m as u64, x.to_starboard_m as u64]);
        assert_eq!(got, (d != [0; 4]).then_some(d), "{ctx}: dimensions");
    }
    if let Some(m) = f.get("mothership_mmsi") {
        assert_eq!(st.mothership_mmsi.map(u64::from), nonzero(m), "{ctx}: mothership");
        assert_eq!(st.dimensions, None, "{ctx}");
    }
    if let Some(dr) = f.get("draught") {
        let dr = dr.as_f64().unwrap();
        assert_eq!(st.draught_m, (dr != 0.0).then_some(dr), "{ctx}: draught");
    }
    if let Some(dst) = f.get("destination") {
        assert_eq!(st.destination.as_ref().map(|n| n.as_str()), opt_str(dst), "{ctx}: destination");
    }
    if let Some(imo) = f.get("imo") {
        assert_eq!(st.imo.map(u64::from), nonzero(imo), "{ctx}: imo");
    }
}

fn run_session(dec: &mut AisDecoder, doc: &Value) -> Vec<AisOutcome> {
    doc["lines"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| dec.decode_line(l["line"].as_str().unwrap().as_bytes(), secs(&l["received_unix_s"])))
        .collect()
}

#[test]
fn trade_nmea_agrees_with_pyais_line_by_line() {
    let doc = session();
    let timeout = doc["fragment_timeout_s"].as_f64().unwrap();
    let mut dec = AisDecoder::with_limits(7, timeout, 1000);
    let lines = doc["lines"].as_array().unwrap();
    let mut kinds = std::collections::BTreeSet::new();
    for (i, l) in lines.iter().enumerate() {
        let w = &l["expect"];
        let ctx = format!("line {i} ({}): {}", l["note"], l["line"]);
        let out = dec.decode_line(l["line"].as_str().unwrap().as_bytes(), secs(&l["received_unix_s"]));
        let kind = w["kind"].as_str().unwrap();
        kinds.insert(kind.to_string());
        match (&out, kind) {
            (AisOutcome::Position(p), "position") | (AisOutcome::OwnShip(p), "own_ship") => {
                assert_eq!(p.report.sensor, 7);
                check_position(p, w, &ctx);
                if w["pyais"].get("shipname").is_some() {
                    // Type 19 carries static data too.
                    check_static(&dec, w, &ctx);
                }
            }
            (AisOutcome::NoPosition { mmsi, msg_type, own_ship }, "no_position") => {
                assert_eq!(*mmsi as u64, w["pyais"]["mmsi"].as_u64().unwrap(), "{ctx}");
                assert_eq!(*msg_type as u64, w["pyais"]["msg_type"].as_u64().unwrap(), "{ctx}");
                assert!(!own_ship);
            }
            (AisOutcome::Static { mmsi, .. }, "static") => {
                assert_eq!(*mmsi as u64, w["pyais"]["mmsi"].as_u64().unwrap(), "{ctx}");
                check_static(&dec, w, &ctx);
            }
            (AisOutcome::Fragment, "fragment") => {}
            (AisOutcome::Other { msg_type }, "other") => assert_eq!(*msg_type as u64, w["msg_type"].as_u64().unwrap()),
            (AisOutcome::Rejected(r), "reject") => assert_eq!(r.key(), w["reason"].as_str().unwrap(), "{ctx}"),
            _ => panic!("{ctx}: got {out:?}, expected {w}"),
        }
        // Only another vessel's position is a feed record.
        assert_eq!(out.record().is_some(), kind == "position", "{ctx}");
    }
    for k in ["position", "own_ship", "no_position", "static", "fragment", "other", "reject"] {
        assert!(kinds.contains(k), "the session covers {k}");
    }
    let c = dec.counts();
    let fc = &doc["final_counts"];
    assert_eq!(c.rejected(AisRejectReason::FragmentTimeout), fc["fragment_timeout"].as_u64().unwrap());
    assert_eq!(c.rejected(AisRejectReason::FragmentAbandoned), fc["fragment_abandoned"].as_u64().unwrap());
    // The lone fragment 2 of the timed-out message is itself dropped later.
    assert_eq!(dec.pending_fragments(), 0);
}

#[test]
fn trade_nmea_datagram_equals_lines() {
    // The same lines joined into CR LF datagrams give the same outcomes.
    let doc = session();
    let mut a = AisDecoder::new(1);
    let by_line = run_session(&mut a, &doc);
    let mut b = AisDecoder::new(1);
    let mut by_datagram = Vec::new();
    let lines = doc["lines"].as_array().unwrap();
    let mut i = 0;
    while i < lines.len() {
        // Group consecutive lines that share the receive time (datagrams
        // carry one receive time).
        let r = secs(&lines[i]["received_unix_s"]);
        let mut dg = Vec::new();
        while i < lines.len() && secs(&lines[i]["received_unix_s"]) == r && dg.len() < 400 {
            dg.extend_from_slice(lines[i]["line"].as_str().unwrap().as_bytes());
            dg.extend_from_slice(b"\r\n");
            i += 1;
        }
        b.decode_datagram(&dg, r, &mut |o| by_datagram.push(o));
    }
    assert_eq!(by_line, by_datagram);
    assert_eq!(a.counts(), b.counts());
}

#[test]
fn trade_nmea_fragments_of_two_channels_interleave() {
    // Two type 5 messages with the same sequence id on channels A and B,
    // their fragments interleaved: both complete (key = id + channel).
    let doc = session();
    let lines = doc["lines"].as_array().unwrap();
    let find = |note_prefix: &str| -> Vec<String> {
        // The two fragments of TARNE WHISTLER (channel B, id 3).
        lines.iter().filter(|l| l["line"].as_str().unwrap().contains(note_prefix)).map(|l| l["line"].as_str().unwrap().to_string()).collect()
    };
    let b = find(",3,B,");
    assert_eq!(b.len(), 2);
    // The same payloads re-sent on channel A with id 3: the checksum
    // changes by 'A' ^ 'B'.
    let to_a = |l: &str| {
        let (head, cs) = l.rsplit_once('*').unwrap();
        let cs = u8::from_str_radix(cs, 16).unwrap() ^ b'A' ^ b'B';
        format!("{}*{cs:02X}", head.replace(",3,B,", ",3,A,"))
    };
    let mut dec = AisDecoder::new(0);
    let seq = [b[0].clone(), to_a(&b[1]), b[1].clone(), to_a(&b[0])];
    let outs: Vec<_> = seq.iter().map(|l| dec.decode_line(l.as_bytes(), None)).collect();
    assert!(matches!(outs[0], AisOutcome::Fragment));
    assert!(matches!(outs[1], AisOutcome::Fragment));
    assert!(matches!(outs[2], AisOutcome::Static { mmsi: 235000102, .. }), "{:?}", outs[2]);
    assert!(matches!(outs[3], AisOutcome::Static { mmsi: 235000102, .. }), "{:?}", outs[3]);
}
