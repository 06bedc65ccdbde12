//! Property-based smoke tests: random bytes and mutated fixture inputs fed
//! to both trade decoders never panic, and whatever they accept still
//! satisfies the feed contract's ranges (CONTRACT.md §1).

mod trade_support;

use proptest::prelude::*;
use trade_support::{ais_lines, asterix_seeds, mutate};
use skerry::feed::asterix::{AsterixDecoder, AsterixItem, SourceTable};
use skerry::feed::nmea::{AisDecoder, AisOutcome};
use skerry::time::Timestamp;


fn check_asterix(data: &[u8]) {
    let sources = SourceTable::new([(25, 201, 0), (25, 202, 1)]).unwrap();
    let mut dec = AsterixDecoder::new(sources);
    let now = Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();
    let mut n = 0u64;
    let mut sink = |x: Result<AsterixItem, _>| {
        n += 1;
        if let Ok(AsterixItem::Plot(p)) = x {
            let d = p.detection;
            assert!(d.range_m.is_finite() && d.range_m > 0.0);
            assert!((0.0..360.0).contains(&d.bearing_deg), "{}", d.bearing_deg);
            assert!(d.time.secs_since(now).abs() <= 43_200.0);
        }
    };
    dec.decode(data, now, &mut sink);
    let c = dec.counts();
    assert_eq!(c.plots + c.services + c.total_rejected(), n);
    // The recording path too.
    let mut dec = AsterixDecoder::new(SourceTable::new([(25, 201, 0)]).unwrap());
    dec.decode_recording(data, now, &mut |_| {});
}

fn check_ais(dec: &mut AisDecoder, line: &[u8]) {
    let t = Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();
    match dec.decode_line(line, Some(t)) {
        AisOutcome::Position(p) | AisOutcome::OwnShip(p) => {
            let r = p.report;
            assert!((-90.0..=90.0).contains(&r.lat_deg) && (-180.0..=180.0).contains(&r.lon_deg));
            assert!(r.sog_kn.is_none_or(|s| (0.0..=102.2).contains(&s)));
            assert!(r.cog_deg.is_none_or(|c| (0.0..360.0).contains(&c)));
            assert!(r.heading_deg.is_none_or(|h| (0.0..360.0).contains(&h)));
            assert_eq!(r.id.len(), 9);
        }
        _ => {}
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 1500, ..ProptestConfig::default() })]

    #[test]
    fn trade_asterix_random_bytes_never_panic(data in proptest::collection::vec(any::<u8>(), 0..600)) {
        check_asterix(&data);
    }

    #[test]
    fn trade_asterix_plausible_headers_never_panic(cat in prop_oneof![Just(48u8), Just(34u8), Just(10u8)], body in proptest::collection::vec(any::<u8>(), 0..300)) {
        // A valid header over a random body reaches the record walkers.
        let mut data = vec![cat];
        data.extend_from_slice(&((body.len() + 3) as u16).to_be_bytes());
        data.extend_from_slice(&body);
        check_asterix(&data);
    }

    #[test]
    fn trade_asterix_mutated_fixtures_never_panic(which in any::<usize>(), edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 1..8)) {
        let seeds = asterix_seeds();
        let data = mutate(&seeds[which % seeds.len()], &edits);
        check_asterix(&data);
    }

    #[test]
    fn trade_ais_random_lines_never_panic(line in proptest::collection::vec(any::<u8>(), 0..200)) {
        let mut dec = AisDecoder::new(0);
        check_ais(&mut dec, &line);
    }

    #[test]
    fn trade_ais_mutated_session_never_panics(edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..4), which in any::<usize>()) {
        // The whole session through one decoder, with one line mutated, so
        // the static table and reassembly state are exercised too.
        let seeds = ais_lines();
        let k = which % seeds.len();
        let mut dec = AisDecoder::with_limits(0, 5.0, 8);
        for (i, s) in seeds.iter().enumerate() {
            let line = if i == k { mutate(s, &edits) } else { s.clone() };
            check_ais(&mut dec, &line);
        }
    }

    #[test]
    fn trade_ais_armoured_payloads_never_panic(payload in "[0-9:;<=>?@A-W`a-w]{0,180}", fill in 0u8..8, count in 1u8..4, number in 1u8..4) {
        // Well-formed sentences with random payloads reach the message
        // decoders (checksum computed by definition: XOR between ! and *).
        let body = format!("AIVDM,{count},{number},1,A,{payload},{fill}");
        let cs = body.bytes().fold(0u8, |a, b| a ^ b);
        let line = format!("!{body}*{cs:02X}");
        let mut dec = AisDecoder::new(0);
        check_ais(&mut dec, line.as_bytes());
    }
}
