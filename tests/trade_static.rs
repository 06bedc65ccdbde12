//! AIS static data on the reports: every position report of a vessel
//! carries what that vessel's static messages (types 5, 19, 24) have said
//! so far, as pyais decoded them (tests/fixtures/ais_session.json, made by
//! tests/fixtures/make_ais_fixtures.py with pyais 3.3.1).
//!
//! The merge rule is ITU-R M.1371-5's: type 5 and type 19 give name, ship
//! type and dimensions together; type 24 part A gives the name, part B the
//! ship type and dimensions (an auxiliary craft's part B gives its mother
//! ship instead of dimensions). Length is A + B, beam C + D; a zero (not
//! available) is left out.

use serde_json::Value;
use skerry::feed::VesselInfo;
use skerry::feed::nmea::{AisDecoder, AisOutcome};
use skerry::time::Timestamp;
use std::collections::HashMap;

const SESSION: &str = include_str!("fixtures/ais_session.json");

#[derive(Default, Clone, Debug)]
struct Known {
    name: Option<String>,
    ship_type: Option<u64>,
    length: Option<u64>,
    beam: Option<u64>,
}

impl Known {
    fn dims(&mut self, f: &Value) {
        let g = |k: &str| f[k].as_u64().unwrap_or(0);
        let (l, b) = (g("to_bow") + g("to_stern"), g("to_port") + g("to_starboard"));
        self.length = (l > 0).then_some(l);
        self.beam = (b > 0).then_some(b);
    }
    fn name_type(&mut self, f: &Value) {
        self.name = f["shipname"].as_str().filter(|s| !s.is_empty()).map(str::to_string);
    }
    fn ship_type(&mut self, f: &Value) {
        self.ship_type = f["ship_type"].as_u64().filter(|t| *t != 0);
    }
    fn expect(&self) -> Option<VesselInfo> {
        let v = VesselInfo {
            name: self.name.as_deref().map(Into::into),
            ship_type: self.ship_type.map(|t| t as u8),
            length_m: self.length.map(|l| l as f64),
            beam_m: self.beam.map(|b| b as f64),
        };
        (!v.is_empty()).then_some(v)
    }
}

#[test]
fn trade_static_data_rides_on_later_reports() {
    let doc: Value = serde_json::from_str(SESSION).unwrap();
    let mut dec = AisDecoder::new(3);
    let mut known: HashMap<u64, Known> = HashMap::new();
    let (mut with, mut without) = (0, 0);
    for l in doc["lines"].as_array().unwrap() {
        let received = l["received_unix_s"].as_i64().map(|s| Timestamp::from_unix_nanos(s * 1_000_000_000));
        let out = dec.decode_line(l["line"].as_str().unwrap().as_bytes(), received);
        let w = &l["expect"];
        let f = &w["pyais"];
        let mmsi = f["mmsi"].as_u64().unwrap_or(0);
        // Static content first: type 19 carries it with its position.
        match (w["kind"].as_str().unwrap(), f["msg_type"].as_u64()) {
            ("static", Some(5)) | ("position", Some(19)) => {
                let k = known.entry(mmsi).or_default();
                k.name_type(f);
                k.ship_type(f);
                k.dims(f);
            }
            ("static", Some(24)) if f["partno"] == 0 => known.entry(mmsi).or_default().name_type(f),
            ("static", Some(24)) => {
                let k = known.entry(mmsi).or_default();
                k.ship_type(f);
                if f.get("mothership_mmsi").is_some() {
                    k.length = None;
                    k.beam = None;
                } else {
                    k.dims(f);
                }
            }
            _ => {}
        }
        if let AisOutcome::Position(p) | AisOutcome::OwnShip(p) = &out {
            let want = known.get(&mmsi).and_then(Known::expect);
            assert_eq!(p.report.vessel.as_deref(), want.as_ref(), "{}: {}", l["note"], l["line"]);
            if want.is_some() { with += 1 } else { without += 1 }
        }
    }
    assert!(with >= 4 && without >= 3, "the session has reports with ({with}) and without ({without}) static data");
    // The vessel table holds what its reports carry.
    let v = dec.vessel(235000101).unwrap();
    assert_eq!(v.info.as_ref().and_then(|i| i.name.as_deref()), Some("MORWEN GLASS"));
}
