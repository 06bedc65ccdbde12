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

fn check(out: &AisOutcome, sensors: &SensorTable, line: &mut String) {
    if let AisOutcome::Position(p) | AisOutcome::OwnShip(p) = out {
        assert_eq!(p.report.id.len(), 9);
        let r = Record::Report(p.report.clone());
        line.clear();
        encode_record(&r, sensors, None, line);
        let back = decode_line(line.as_bytes(), sensors);
        assert!(back.as_ref().is_ok_and(|b| b.same_within_ulp(&r)), "{line}: {back:?} vs {r:?}");
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
