//! Fuzz target: the AIS decoder on arbitrary bytes, as a datagram of
//! lines (with a receive time) and line by line (a log: tag block times
//! only). Never panics; every line gives one outcome; every report keeps
//! the feed contract (CONTRACT.md §1): written as a feed line and read
//! back, it is the same record (numbers to within an ulp).

#![no_main]

use libfuzzer_sys::fuzz_target;
use skerry::feed::nmea::{AisDecoder, AisOutcome, AisRejectReason};
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

fn check(out: &AisOutcome, sensors: &SensorTable, line: &mut String) {
    if let AisOutcome::Position(p) | AisOutcome::OwnShip(p) = out {
        assert_eq!(p.report.id.len(), 9);
        let r = Record::Report(p.report.clone());
        line.clear();
        encode_record(&r, sensors, None, line);
        let back = decode_line(line.as_bytes(), sensors);
        assert!(back.as_ref().is_ok_and(|b| same_record(b, &r)), "{line}: {back:?} vs {r:?}");
    }
}

/// Outcomes the decoder counted that came from lines (lost fragment sets
/// are counted apart).
fn line_outcomes(dec: &AisDecoder) -> u64 {
    let c = dec.counts();
    let lost = c.rejected(AisRejectReason::FragmentTimeout) + c.rejected(AisRejectReason::FragmentAbandoned);
    c.positions + c.own_ship + c.no_position + c.statics + c.fragments + c.other + c.total_rejected() - lost
}

fuzz_target!(|data: &[u8]| {
    let sensors = SensorTable::new([("harbour-ais", SensorKind::Transponder)]);
    let now = Timestamp::from_unix_nanos(1_778_738_400_000_000_000);
    let mut line = String::new();
    // A small vessel table, so that pruning runs too.
    let mut dec = AisDecoder::with_limits(0, 5.0, 4);
    let mut n = 0u64;
    dec.decode_datagram(data, Some(now), &mut |o| {
        n += 1;
        check(&o, &sensors, &mut line);
    });
    assert_eq!(line_outcomes(&dec), n);

    let mut dec = AisDecoder::with_limits(0, 5.0, 4);
    let mut n = 0u64;
    for l in data.split(|&b| b == b'\n') {
        let o = dec.decode_line(l, None);
        n += 1;
        check(&o, &sensors, &mut line);
    }
    assert_eq!(line_outcomes(&dec), n);
    dec.expire(Timestamp::from_unix_nanos(i64::MAX));
    assert_eq!(dec.pending_fragments(), 0);
});
