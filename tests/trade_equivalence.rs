//! The same simulated harbour sent as ASTERIX gives the same tracks as its
//! JSON feed.
//!
//! The scenario is the demo close-pass (two radars, a Class B
//! transponder, clutter), moved to start at 23:58 UTC so that the
//! recording runs across midnight. Its radar plots are encoded as
//! category 010 target reports (I010/010, /000 = 1, /020 TYP = 3,
//! /140, /040) and its scan ends as category 034 north markers (I034/010,
//! /000 = 1, /030, /041), one ASTERIX file per radar, by an encoder in this
//! file written from the specifications (EUROCONTROL ASTERIX Part 1
//! framing; Category 010 ed. 1.1; Category 034 ed. 1.29; the LSBs: time
//! of day 1/128 s, RHO 1 m, THETA 360/2¹⁶°, rotation period 1/128 s). The
//! transponder reports stay JSON: they join the ASTERIX plots through the
//! same merge (`skerry track --asterix A --asterix B --date D reports.jsonl`).
//!
//! How the two are compared:
//!
//! 1. **Exact, against the quantised feed** (the whole scenario). The JSON
//!    feed is rounded to the ASTERIX LSBs (times to the nearest 1/128 s,
//!    ranges to the nearest metre, bearings to the nearest 360/2¹⁶°). The
//!    records decoded from the ASTERIX files must equal those rounded
//!    records, field for field (scan numbers included), and the track
//!    records made from the two must be the same to the byte.
//! 2. **Firm tracks, against the original feed.** Rounding times to
//!    1/128 s can reorder events less than 1/128 s apart: a plot and
//!    another radar's scan end, two radars' plots of one vessel, a plot and
//!    a transponder report. The engine then sees the same data in another
//!    order, which can legitimately change a status record or the order of
//!    two updates. For this comparison, plots and reports that lie within
//!    1/128 s of any scan end, or of another sensor's plot or report of the
//!    same vessel (the simulator says which vessel made each), are left out
//!    of the scenario (about 1 % of them; the count is printed).
//!    Then, between the tracks of the original JSON feed and those of the
//!    ASTERIX files: as many tracks ever confirmed, paired one to one by
//!    their first record (same sensor, time within 1/256 s, position within
//!    [`POSITION_TOL_M`]; track numbers themselves follow the order of the
//!    plots within a batch, which rounding can tie); for each pair the same
//!    sequence of records (same count, same status, sensors and identity
//!    at each step, times within 1/256 s, half a time-of-day LSB);
//!    positions within [`POSITION_TOL_M`] and velocities within
//!    [`VELOCITY_TOL_MPS`] of each other at every step. A plot moves by at
//!    most half an LSB: 0.5 m in range and 0.5 × 360/2¹⁶°, 1.4 cm per km,
//!    in bearing (0.25 m at the 18 km edge); the tolerances leave room for
//!    the filter to carry such shifts over a few updates.
//!
//! Seed 11 is the one checked; `SKERRY_EQUIVALENCE_SEED=N` runs another.
//! Of seeds 1 to 12, all pass but seed 1, where at the closest approach
//! two plots of one radar 4 ms apart, one from each vessel, lie in both
//! tracks' gates with assignment costs closer than the rounding moves
//! them: the assignment flips (a position then differs by 2 m). That is a
//! true tie of the global nearest neighbour, not a decoding error; part 1
//! shows that the decoded records themselves are exact.

use skerry::config::Config;
use skerry::feed::{Detection, Record, ScanEnd, SensorId, TrackRecord, encode_record};
use skerry::offline::{TradeInputs, feed_order, read_inputs};
use skerry::sim::{Origin, Scenario, generate};
use skerry::time::Timestamp;
use std::collections::{BTreeMap, BTreeSet};
use std::path::PathBuf;

/// See the module docs (2.).
const POSITION_TOL_M: f64 = 1.0;
const VELOCITY_TOL_MPS: f64 = 0.5;

/// 1/128 s in nanoseconds, exactly.
const TOD_NS: i64 = 7_812_500;
const DAY_NS: i64 = 86_400 * 1_000_000_000;

const SOURCES: [(u8, u8); 2] = [(25, 201), (25, 202)];

fn tod_round(t: Timestamp) -> Timestamp {
    let ns = t.unix_nanos();
    Timestamp::from_unix_nanos((ns + TOD_NS / 2).div_euclid(TOD_NS) * TOD_NS)
}

/// 24-bit time of day (1/128 s) of an instant already on the grid.
fn tod_of(t: Timestamp) -> u32 {
    (t.unix_nanos().rem_euclid(DAY_NS) / TOD_NS) as u32
}

fn theta_of(bearing_deg: f64) -> u16 {
    ((bearing_deg * 65536.0 / 360.0).round() as u32 % 65536) as u16
}

/// The plot as the ASTERIX LSBs carry it; `None` if the range rounds to 0
/// (which the contract does not allow).
fn quantise(r: &Record) -> Option<Record> {
    Some(match r {
        Record::Detection(d) => {
            let range_m = d.range_m.round();
            if range_m < 1.0 {
                return None;
            }
            Record::Detection(Detection { time: tod_round(d.time), range_m, bearing_deg: theta_of(d.bearing_deg) as f64 * (360.0 / 65536.0), ..d.clone() })
        }
        Record::ScanEnd(s) => Record::ScanEnd(ScanEnd { time: tod_round(s.time), ..s.clone() }),
        Record::Report(_) => r.clone(),
    })
}

/// FSPEC from FRNs (1-based), 7 per octet MSB first, FX on all but the last.
fn fspec(frns: &[usize]) -> Vec<u8> {
    let top = *frns.iter().max().unwrap();
    let n = top.div_ceil(7);
    let mut out = vec![0u8; n];
    for &f in frns {
        out[(f - 1) / 7] |= 0x80 >> ((f - 1) % 7);
    }
    for o in out.iter_mut().take(n - 1) {
        *o |= 1;
    }
    out
}

fn push_u24(out: &mut Vec<u8>, v: u32) {
    out.extend_from_slice(&v.to_be_bytes()[1..]);
}

/// A category 010 target report: FRN 1 (I010/010), 2 (I010/000 = 1,
/// target report), 3 (I010/020: TYP = 011, PSR; no extension), 4
/// (I010/140), 6 (I010/040: RHO 1 m, THETA 360/2¹⁶°).
fn cat010_plot(src: (u8, u8), d: &Detection) -> Vec<u8> {
    let mut r = fspec(&[1, 2, 3, 4, 6]);
    r.extend_from_slice(&[src.0, src.1, 1, 0b0110_0000]);
    push_u24(&mut r, tod_of(d.time));
    r.extend_from_slice(&(d.range_m as u16).to_be_bytes());
    r.extend_from_slice(&theta_of(d.bearing_deg).to_be_bytes());
    r
}

/// A category 034 north marker: FRN 1 (I034/010), 2 (I034/000 = 1), 3
/// (I034/030), 5 (I034/041, 1/128 s).
fn cat034_north(src: (u8, u8), t: Timestamp, period_s: f64) -> Vec<u8> {
    let mut r = fspec(&[1, 2, 3, 5]);
    r.extend_from_slice(&[src.0, src.1, 1]);
    push_u24(&mut r, tod_of(t));
    r.extend_from_slice(&((period_s * 128.0).round() as u16).to_be_bytes());
    r
}

fn block(cat: u8, records: &[Vec<u8>]) -> Vec<u8> {
    let body: Vec<u8> = records.concat();
    let mut b = vec![cat];
    b.extend_from_slice(&((body.len() + 3) as u16).to_be_bytes());
    b.extend_from_slice(&body);
    b
}

/// One radar's quantised records, in stream order, as ASTERIX: one category 010 block of
/// the plots of each scan, then a category 034 block with its north marker.
fn encode_radar(records: &[Record], src: (u8, u8), period_s: f64) -> Vec<u8> {
    let mut out = Vec::new();
    let mut plots = Vec::new();
    for r in records {
        match r {
            Record::Detection(d) => plots.push(cat010_plot(src, d)),
            Record::ScanEnd(s) => {
                if !plots.is_empty() {
                    out.extend(block(10, &plots));
                    plots.clear();
                }
                out.extend(block(34, &[cat034_north(src, s.time, period_s)]));
            }
            Record::Report(_) => unreachable!(),
        }
    }
    if !plots.is_empty() {
        out.extend(block(10, &plots));
    }
    out
}

/// Every record of each track that was ever confirmed, by track number.
fn firm_tracks(t: &[TrackRecord]) -> BTreeMap<u64, Vec<TrackRecord>> {
    let firm: BTreeSet<u64> = t.iter().filter(|r| r.status.is_firm()).map(|r| r.track).collect();
    let mut m: BTreeMap<u64, Vec<TrackRecord>> = BTreeMap::new();
    for r in t.iter().filter(|r| firm.contains(&r.track)) {
        m.entry(r.track).or_default().push(r.clone());
    }
    m
}

fn lines(tracks: &[TrackRecord]) -> Vec<String> {
    tracks.iter().map(TrackRecord::to_json).collect()
}

struct Setup {
    cfg: Config,
    original: Vec<Record>,
    quantised: Vec<Record>,
    dir: tempfile::TempDir,
    asterix: Vec<PathBuf>,
    reports: PathBuf,
}

/// Plots and reports less than 1/128 s from any scan end, or from a
/// record of the same vessel by another sensor (see the module docs, 2.).
fn coincident(feed: &[Record], origins: &[Origin]) -> Vec<bool> {
    let vessel = |o: &Origin| match o {
        Origin::Vessel { vessel, .. } | Origin::Report { vessel, .. } => Some(*vessel),
        _ => None,
    };
    let mut order: Vec<usize> = (0..feed.len()).collect();
    order.sort_by_key(|&i| feed[i].time());
    let mut out = vec![false; feed.len()];
    for (k, &i) in order.iter().enumerate() {
        let (ti, si) = (feed[i].time().unix_nanos(), feed[i].sensor());
        let vi = vessel(&origins[i]);
        let clash = |j: usize| match (&feed[j], vi) {
            (Record::ScanEnd(_), _) => true,
            (_, Some(v)) => feed[j].sensor() != si && vessel(&origins[j]) == Some(v),
            _ => false,
        };
        let mut hit = false;
        for &j in order[..k].iter().rev().take_while(|&&j| ti - feed[j].time().unix_nanos() <= TOD_NS) {
            hit |= clash(j);
        }
        for &j in order[k + 1..].iter().take_while(|&&j| feed[j].time().unix_nanos() - ti <= TOD_NS) {
            hit |= clash(j);
        }
        out[i] = hit && !matches!(feed[i], Record::ScanEnd(_));
    }
    out
}

/// The scenario, its configuration with ASTERIX sources, and its radar
/// data written as ASTERIX files; `spread`: leave out coincident records.
fn setup(spread: bool) -> Setup {
    let text = include_str!("../demo-feeds/close-pass/scenario.toml").replace("start = 2026-05-14T09:30:00Z", "start = 2026-05-14T23:58:00Z");
    assert!(text.contains("23:58:00Z"), "the scenario's start moved");
    let sc = Scenario::from_toml_str(&text).expect("scenario");
    let seed = std::env::var("SKERRY_EQUIVALENCE_SEED").ok().and_then(|s| s.parse().ok()).unwrap_or(11);
    let g = generate(&sc, seed).expect("generate");
    let mut cfg = Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    let periods: Vec<f64> = sc.radars.iter().map(|r| r.scan_period_s).collect();
    for (i, (sac, sic)) in SOURCES.iter().enumerate() {
        cfg.sensors[i].asterix_sac = Some(*sac);
        cfg.sensors[i].asterix_sic = Some(*sic);
    }
    cfg.validate().expect("valid with the ASTERIX sources");

    let sim_feed: Vec<Record> = if spread {
        let drop = coincident(&g.feed, &g.origins);
        let kept: Vec<Record> = g.feed.iter().zip(&drop).filter(|(_, d)| !**d).map(|(r, _)| r.clone()).collect();
        let plots = |f: &[Record]| f.iter().filter(|r| !matches!(r, Record::ScanEnd(_))).count();
        eprintln!("equivalence: {} of {} plots and reports within 1/128 s of a scan end or of another sensor's record of the same vessel left out", plots(&g.feed) - plots(&kept), plots(&g.feed));
        kept
    } else {
        g.feed.clone()
    };
    let mut original = sim_feed.clone();
    original.sort_by(feed_order);
    let mut quantised: Vec<Record> = original.iter().filter_map(quantise).collect();
    quantised.sort_by(feed_order);

    let dir = tempfile::tempdir().unwrap();
    let mut asterix = Vec::new();
    for (i, &src) in SOURCES.iter().enumerate() {
        // In the radar's own order, scan by scan: each scan's plots, then
        // its north marker. A plot of scan k + 1 stamped at the instant
        // scan k ended still follows the marker, as on the wire.
        let mut mine: Vec<Record> = sim_feed.iter().filter(|r| r.sensor() == i as SensorId && !matches!(r, Record::Report(_))).filter_map(quantise).collect();
        mine.sort_by_key(|r| match r {
            Record::Detection(d) => (d.scan.unwrap_or(0), 0u8, d.time),
            Record::ScanEnd(e) => (e.scan, 1, e.time),
            Record::Report(_) => unreachable!(),
        });
        let path = dir.path().join(format!("radar{i}.ast"));
        std::fs::write(&path, encode_radar(&mine, src, periods[i])).unwrap();
        asterix.push(path);
    }
    let sensors = cfg.sensor_table();
    let mut reports = String::new();
    for r in original.iter().filter(|r| matches!(r, Record::Report(_))) {
        encode_record(r, &sensors, None, &mut reports);
        reports.push('\n');
    }
    assert!(!reports.is_empty(), "the scenario has transponder reports");
    let reports_path = dir.path().join("reports.jsonl");
    std::fs::write(&reports_path, reports).unwrap();
    Setup { cfg, original, quantised, dir, asterix, reports: reports_path }
}

/// Reads the ASTERIX files and the reports as `skerry track` would.
fn read_trade(s: &Setup) -> (skerry::offline::Feed, skerry::offline::TradeSummary) {
    let trade = TradeInputs { nmea: vec![], asterix: s.asterix.clone(), date: Some(Timestamp::parse_date("2026-05-14").unwrap()) };
    let (feed, summary) = read_inputs(std::slice::from_ref(&s.reports), &trade, &s.cfg).expect("read");
    assert_eq!(feed.counts.total_rejected(), 0, "{:?}", feed.counts.rejected);
    (feed, summary)
}

#[test]
fn trade_equivalence_asterix_decodes_to_the_quantised_feed() {
    let s = setup(false);
    let (feed, summary) = read_trade(&s);
    // The recording crosses midnight: some records on each day.
    let midnight = Timestamp::parse_date("2026-05-15").unwrap();
    assert!(feed.records.iter().any(|r| r.time() < midnight) && feed.records.iter().any(|r| r.time() > midnight));
    // The rotation periods the markers carried (2.5 s and 3 s, exact in 1/128 s).
    assert_eq!(summary.rotation_period_s.values().copied().collect::<Vec<_>>(), vec![2.5, 3.0]);
    // 1. Exact: the decoded records are the quantised feed, and so are
    // the tracks, to the byte.
    assert_eq!(feed.records.len(), s.quantised.len());
    for (k, (a, b)) in feed.records.iter().zip(&s.quantised).enumerate() {
        assert_eq!(a, b, "record {k}");
    }
    let from_asterix = skerry::cli::run_engine(&s.cfg, &feed.records).unwrap();
    let from_quantised = skerry::cli::run_engine(&s.cfg, &s.quantised).unwrap();
    assert!(from_asterix.iter().any(|t| t.status.is_firm()));
    assert_eq!(lines(&from_asterix), lines(&from_quantised));
}

#[test]
fn trade_equivalence_asterix_gives_the_firm_tracks_of_the_json_feed() {
    let s = setup(true);
    let (feed, _) = read_trade(&s);
    let from_asterix = skerry::cli::run_engine(&s.cfg, &feed.records).unwrap();
    // 2. Firm tracks against the original JSON feed, matched by their
    // first record (track numbers follow the order of plots within a
    // batch, which rounding can tie).
    let from_json = skerry::cli::run_engine(&s.cfg, &s.original).unwrap();
    let (a, b) = (firm_tracks(&from_asterix), firm_tracks(&from_json));
    assert!(b.len() >= 3, "the scenario's three vessels are held: {} firm tracks", b.len());
    assert_eq!(a.len(), b.len(), "firm tracks");
    let mut paired = BTreeSet::new();
    let (mut worst_pos, mut worst_vel, mut compared) = (0.0f64, 0.0f64, 0usize);
    for rb in b.values() {
        let y0 = &rb[0];
        let (&na, ra) = a
            .iter()
            .find(|(_, ra)| {
                let x0 = &ra[0];
                x0.sensors == y0.sensors && x0.time.secs_since(y0.time).abs() <= 1.0 / 256.0 && (x0.east_m - y0.east_m).hypot(x0.north_m - y0.north_m) <= POSITION_TOL_M
            })
            .unwrap_or_else(|| panic!("no ASTERIX track matches JSON track {} born {}", y0.track, y0.time.to_rfc3339()));
        assert!(paired.insert(na), "ASTERIX track {na} matches two JSON tracks");
        assert_eq!(ra.len(), rb.len(), "JSON track {} / ASTERIX track {na}: record counts", y0.track);
        for (x, y) in ra.iter().zip(rb) {
            let at = y.time.to_rfc3339();
            assert_eq!((x.status, &x.sensors, &x.identity), (y.status, &y.sensors, &y.identity), "JSON track {} at {at}", y.track);
            assert!(x.time.secs_since(y.time).abs() <= 1.0 / 256.0, "JSON track {}: {at} vs {}", y.track, x.time.to_rfc3339());
            worst_pos = worst_pos.max((x.east_m - y.east_m).hypot(x.north_m - y.north_m));
            worst_vel = worst_vel.max((x.vel_east_mps - y.vel_east_mps).hypot(x.vel_north_mps - y.vel_north_mps));
            compared += 1;
        }
    }
    eprintln!("equivalence: {} firm tracks, {compared} records; largest position difference {worst_pos:.3} m, velocity {worst_vel:.3} m/s", a.len());
    assert!(worst_pos <= POSITION_TOL_M, "position differs by {worst_pos} m");
    assert!(worst_vel <= VELOCITY_TOL_MPS, "velocity differs by {worst_vel} m/s");
}

#[test]
fn trade_equivalence_files_split_anywhere_between_blocks() {
    // One radar's recording cut into two files at a block boundary gives
    // the same records as the whole file (the files are one recording).
    let s = setup(false);
    let date = Some(Timestamp::parse_date("2026-05-14").unwrap());
    let whole = std::fs::read(&s.asterix[0]).unwrap();
    // Walk the blocks to a boundary near the middle.
    let mut cut = 0;
    while cut < whole.len() / 2 {
        cut += u16::from_be_bytes([whole[cut + 1], whole[cut + 2]]) as usize;
    }
    let (p1, p2) = (s.dir.path().join("a.ast"), s.dir.path().join("b.ast"));
    std::fs::write(&p1, &whole[..cut]).unwrap();
    std::fs::write(&p2, &whole[cut..]).unwrap();
    let one = read_inputs(&[], &TradeInputs { nmea: vec![], asterix: vec![s.asterix[0].clone()], date }, &s.cfg).unwrap().0;
    let two = read_inputs(&[], &TradeInputs { nmea: vec![], asterix: vec![p1, p2], date }, &s.cfg).unwrap().0;
    assert!(!one.records.is_empty());
    assert_eq!(one.records, two.records);
}
