//! A short property-based stand-in for the cargo-fuzz targets (fuzz/),
//! for CI: random and mutated trade inputs, through the same paths the
//! fuzz targets drive, never panic, and the books always balance.
//!
//! - Live: [`IngestContext::asterix_datagram`] and
//!   [`IngestContext::nmea_datagram`]: each input counted once, as
//!   accepted, rejected or dropped (`received = accepted + rejected +
//!   dropped`), and the per-sensor metrics agree with the tally.
//! - Offline: [`read_inputs`] on an ASTERIX recording and an NMEA log:
//!   every decoder outcome is one input (`lines`), every record is
//!   accepted or screened out, and every record accepted survives the
//!   contract's own check: written as a feed line and read back, it is the
//!   same record (CONTRACT.md §1 ranges and types; numbers to within an
//!   ulp, see `Record::same_within_ulp`).

mod trade_support;

use proptest::prelude::*;
use skerry::daemon::clock::DaemonClock;
use skerry::daemon::ingest::{IngestContext, LogLimiter};
use skerry::daemon::metrics::Metrics;
use skerry::feed::asterix::{AsterixDecoder, SourceTable};
use skerry::feed::nmea::AisDecoder;
use skerry::feed::{decode_line, encode_record};
use skerry::offline::{NmeaInput, TradeInputs, read_inputs};
use skerry::time::Timestamp;
use std::sync::Arc;
use std::sync::Mutex;
use std::sync::atomic::Ordering::Relaxed;
use trade_support::{ais_lines, asterix_seeds, config, mutate};

fn now() -> Timestamp {
    Timestamp::parse_rfc3339("2026-05-14T06:00:10Z").unwrap()
}

struct Live {
    ctx: IngestContext,
    // Kept so that the queue stays open.
    _rx: tokio::sync::mpsc::Receiver<skerry::daemon::ingest::Arrival>,
}

fn live(queue: usize) -> Live {
    let cfg = config();
    let (tx, rx) = tokio::sync::mpsc::channel(queue);
    let ctx = IngestContext {
        sensors: cfg.sensor_table(),
        allow: vec![Vec::new(); cfg.sensors.len()],
        max_record_bytes: cfg.feed.max_record_bytes,
        max_time_offset_s: cfg.feed.max_time_offset_s,
        metrics: Arc::new(Metrics::new(&cfg, now())),
        clock: DaemonClock::start(),
        tx,
        log: Mutex::new(LogLimiter::new(10.0)),
        cancel: Default::default(),
        tracker: Default::default(),
        recorder: None,
    };
    Live { ctx, _rx: rx }
}

/// The books of the live path balance, in the tally and in the metrics.
fn check_live(l: &Live, tallies: &[skerry::daemon::ingest::Tally]) {
    let (mut received, mut accepted, mut rejected, mut dropped) = (0, 0, 0, 0);
    for t in tallies {
        let r: u64 = t.rejected.values().sum();
        assert_eq!(t.received, t.accepted + r + t.dropped, "{t:?}");
        received += t.received;
        accepted += t.accepted;
        rejected += r;
        dropped += t.dropped;
    }
    let m = l.ctx.metrics.totals();
    assert_eq!(m.received, received);
    assert_eq!(m.accepted, accepted);
    assert_eq!(m.rejected.iter().sum::<u64>(), rejected);
    assert_eq!(l.ctx.metrics.dropped_ingest_queue.load(Relaxed), dropped);
}

fn live_asterix(datagrams: &[Vec<u8>]) {
    let l = live(64);
    let mut dec = AsterixDecoder::new(SourceTable::from_config(&config()).unwrap());
    let tallies: Vec<_> = datagrams.iter().map(|d| l.ctx.asterix_datagram(&mut dec, d, None, now())).collect();
    check_live(&l, &tallies);
}

fn live_nmea(datagrams: &[Vec<u8>]) {
    let l = live(64);
    let mut dec = AisDecoder::with_limits(2, 5.0, 8);
    let tallies: Vec<_> = datagrams.iter().map(|d| l.ctx.nmea_datagram(&mut dec, d, None, now())).collect();
    check_live(&l, &tallies);
}

/// The offline path on one ASTERIX recording and one NMEA log.
fn offline(asterix: &[u8], nmea: &[u8]) {
    let dir = tempfile::tempdir().unwrap();
    let (a, n) = (dir.path().join("r.ast"), dir.path().join("l.nmea"));
    std::fs::write(&a, asterix).unwrap();
    std::fs::write(&n, nmea).unwrap();
    let cfg = config();
    let trade = TradeInputs { nmea: vec![NmeaInput { sensor: "harbour-ais".into(), path: n }], asterix: vec![a], date: Some(Timestamp::parse_date("2026-05-14").unwrap()) };
    let (feed, summary) = read_inputs(&[], &trade, &cfg).unwrap();
    let sensors = cfg.sensor_table();
    let ac = summary.asterix.as_ref().unwrap();
    let nc = summary.nmea.get(&2).cloned().unwrap_or_default();
    use skerry::feed::nmea::AisRejectReason as R;
    let lost = nc.rejected(R::FragmentTimeout) + nc.rejected(R::FragmentAbandoned);
    let nmea_outcomes = nc.positions + nc.own_ship + nc.no_position + nc.statics + nc.fragments + nc.other + nc.total_rejected() - lost;
    assert_eq!(feed.lines as u64, ac.plots + ac.services + ac.total_rejected() + nmea_outcomes);
    let decoder_rejects = ac.total_rejected() + nc.total_rejected();
    let records = ac.plots + ac.scan_ends + nc.positions;
    assert_eq!(feed.counts.total_accepted() + feed.counts.total_rejected() - decoder_rejects, records);
    assert_eq!(feed.records.len() as u64, feed.counts.total_accepted());
    let mut line = String::new();
    for r in &feed.records {
        line.clear();
        encode_record(r, &sensors, None, &mut line);
        let back = decode_line(line.as_bytes(), &sensors);
        assert!(back.as_ref().is_ok_and(|b| b.same_within_ulp(r)), "{line}: {back:?} vs {r:?}");
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 160, ..ProptestConfig::default() })]

    #[test]
    fn trade_fuzz_smoke_live_asterix(which in proptest::collection::vec(any::<usize>(), 1..4), edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..6), random in proptest::collection::vec(any::<u8>(), 0..200)) {
        let seeds = asterix_seeds();
        let mut dgs: Vec<Vec<u8>> = which.iter().map(|w| seeds[w % seeds.len()].clone()).collect();
        if let Some(first) = dgs.first_mut() {
            *first = mutate(first, &edits);
        }
        dgs.push(random);
        live_asterix(&dgs);
    }

    #[test]
    fn trade_fuzz_smoke_live_nmea(edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..6), which in any::<usize>(), per in 1usize..6) {
        // The session in datagrams of `per` lines, one line mutated.
        let lines = ais_lines();
        let k = which % lines.len();
        let mut dgs = Vec::new();
        for (c, chunk) in lines.chunks(per).enumerate() {
            let mut d = Vec::new();
            for (i, l) in chunk.iter().enumerate() {
                if c * per + i == k { d.extend(mutate(l, &edits)) } else { d.extend_from_slice(l) }
                d.extend_from_slice(b"\r\n");
            }
            dgs.push(d);
        }
        live_nmea(&dgs);
    }

    #[test]
    fn trade_fuzz_smoke_offline(a in any::<usize>(), edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..6), k in any::<usize>(), line_edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..4)) {
        let seeds = asterix_seeds();
        let mut rec = seeds[a % seeds.len()].clone();
        rec.extend(seeds[(a / 7) % seeds.len()].iter());
        let rec = mutate(&rec, &edits);
        let lines = ais_lines();
        let k = k % lines.len();
        let mut log = Vec::new();
        for (i, l) in lines.iter().enumerate() {
            if i == k { log.extend(mutate(l, &line_edits)) } else { log.extend_from_slice(l) }
            log.push(b'\n');
        }
        offline(&rec, &log);
    }
}
