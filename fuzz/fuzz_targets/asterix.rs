//! Fuzz target: the ASTERIX decoder on arbitrary bytes, live and as a
//! recording. Never panics; every outcome is counted once; every record
//! keeps the feed contract (CONTRACT.md §1): written as a feed line and
//! read back, it is the same record (numbers to within an ulp).

#![no_main]

use libfuzzer_sys::fuzz_target;
use skerry::feed::asterix::{AsterixDecoder, AsterixItem, SourceTable};
use skerry::feed::{SensorKind, SensorTable, decode_line, encode_record};
use skerry::time::Timestamp;

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
                assert!(back.as_ref().is_ok_and(|b| b.same_within_ulp(&r)), "{line}: {back:?} vs {r:?}");
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
