//! Fuzz target: the ASTERIX decoder on arbitrary bytes, live and as a
//! recording. Never panics; every outcome is counted once; every record
//! keeps the feed contract (CONTRACT.md §1): written as a feed line and
//! read back, it is the same record (numbers to within an ulp).

#![no_main]

use libfuzzer_sys::fuzz_target;
use skerry::feed::asterix::{AsterixDecoder, AsterixItem, SourceTable};
use skerry::feed::{Record, SensorKind, SensorTable, decode_line, encode_record};
use skerry::time::Timestamp;

/// Whether two records are the same, each number to within one unit in
/// the last place: serde_json's default number parser (no
/// `float_roundtrip` feature) can land one ulp off the shortest
/// round-trip text it is given.
fn same_record(a: &Record, b: &Record) -> bool {
    fn f(x: f64, y: f64) -> bool {
        x == y || (x.is_finite() && y.is_finite() && x.signum() == y.signum() && x.to_bits().abs_diff(y.to_bits()) <= 1)
    }
    fn o(x: Option<f64>, y: Option<f64>) -> bool {
        match (x, y) {
            (Some(x), Some(y)) => f(x, y),
            (None, None) => true,
            _ => false,
        }
    }
    match (a, b) {
        (Record::Detection(x), Record::Detection(y)) => {
            (x.sensor, x.time, x.scan) == (y.sensor, y.time, y.scan) && f(x.range_m, y.range_m) && f(x.bearing_deg, y.bearing_deg) && o(x.radial_speed_mps, y.radial_speed_mps) && o(x.snr_db, y.snr_db)
        }
        (Record::ScanEnd(x), Record::ScanEnd(y)) => {
            (x.sensor, x.time, x.scan) == (y.sensor, y.time, y.scan)
                && match (x.sector_deg, y.sector_deg) {
                    (Some([p, q]), Some([r, s])) => f(p, r) && f(q, s),
                    (None, None) => true,
                    _ => false,
                }
        }
        (Record::Report(x), Record::Report(y)) => {
            let v = |r: &skerry::feed::Report| r.vessel.as_deref().map(|v| (v.name.clone(), v.ship_type, v.length_m, v.beam_m));
            (x.sensor, x.time, &x.id) == (y.sensor, y.time, &y.id)
                && f(x.lat_deg, y.lat_deg)
                && f(x.lon_deg, y.lon_deg)
                && o(x.sog_kn, y.sog_kn)
                && o(x.cog_deg, y.cog_deg)
                && o(x.heading_deg, y.heading_deg)
                && match (v(x), v(y)) {
                    (Some((n1, t1, l1, b1)), Some((n2, t2, l2, b2))) => n1 == n2 && t1 == t2 && o(l1, l2) && o(b1, b2),
                    (None, None) => true,
                    _ => false,
                }
        }
        _ => false,
    }
}

fuzz_target!(|data: &[u8]| {
    let sensors = SensorTable::new([("north-mast", SensorKind::Radar), ("south-quay", SensorKind::Radar)]);
    // 2026-05-14T06:00:00Z.
    let now = Timestamp::from_unix_nanos(1_778_738_400_000_000_000);
    let mut line = String::new();
    for recording in [false, true] {
        let mut dec = AsterixDecoder::new(SourceTable::new([(25, 201, 0), (25, 202, 1)]).unwrap());
        let mut outcomes = 0u64;
        let mut sink = |x: Result<AsterixItem, _>| {
            outcomes += 1;
            let Ok(item) = x else { return };
            if let AsterixItem::Service(s) = &item {
                assert!(s.rotation_period_s.is_none_or(|p| p.is_finite() && p >= 0.0));
            }
            if let Some(r) = item.record() {
                // Within half a day of the reference (nearest-day rule);
                // a recording may drift a day per half day of input, but
                // one input holds at most 64 KiB of records.
                if !recording {
                    assert!(r.time().secs_since(now).abs() <= 43_200.0);
                }
                line.clear();
                encode_record(&r, &sensors, None, &mut line);
                let back = decode_line(line.as_bytes(), &sensors);
                assert!(back.as_ref().is_ok_and(|b| same_record(b, &r)), "{line}: {back:?} vs {r:?}");
            }
        };
        if recording {
            dec.decode_recording(data, now, &mut sink);
        } else {
            dec.decode(data, now, &mut sink);
        }
        let c = dec.counts();
        assert_eq!(c.plots + c.services + c.total_rejected(), outcomes);
        assert!(c.scan_ends <= c.services);
    }
});
