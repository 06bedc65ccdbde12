//! `score::score` on hand-built cases whose answers follow from the
//! definitions in the score module's documentation, worked by hand below;
//! percentiles against numpy.

use nalgebra::Vector2;
use skerry::feed::tracks::VesselLabel;
use skerry::feed::{TrackRecord, TrackStatus, TruthRecord};
use skerry::geo::{Geodetic, LocalFrame};
use skerry::score::{ScoreOptions, parse_tracks_jsonl, parse_truth_jsonl, percentile_sorted, score};
use skerry::time::Timestamp;

fn frame() -> LocalFrame {
    LocalFrame::new(Geodetic::new(56.45, 7.35, 0.0))
}

fn t0() -> Timestamp {
    Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap()
}

fn truth(f: &LocalFrame, name: &str, t: f64, en: (f64, f64), vel: Option<(f64, f64)>) -> TruthRecord {
    let g = f.plane_to_geodetic(Vector2::new(en.0, en.1), 0.0);
    TruthRecord {
        time: t0().plus_secs(t),
        vessel: VesselLabel::Text(name.into()),
        lat_deg: g.lat_deg,
        lon_deg: g.lon_deg,
        vel_east_mps: vel.map(|v| v.0),
        vel_north_mps: vel.map(|v| v.1),
    }
}

fn track(no: u64, status: TrackStatus, t: f64, en: (f64, f64), vel: (f64, f64)) -> TrackRecord {
    let (speed_kn, course_deg) = skerry::feed::tracks::speed_course(vel.0, vel.1);
    TrackRecord {
        time: t0().plus_secs(t),
        track: no,
        status,
        lat_deg: 0.0,
        lon_deg: 0.0,
        east_m: en.0,
        north_m: en.1,
        vel_east_mps: vel.0,
        vel_north_mps: vel.1,
        speed_kn,
        course_deg,
        pos_cov_m2: [[1.0, 0.0], [0.0, 1.0]],
        sensors: vec![],
        identity: None,
        name: None,
        ship_type: None,
        length_m: None,
        beam_m: None,
        identity_conflict: false,
    }
}

use TrackStatus::{Confirmed, Ended, Tentative};

/// Vessel A runs east at 5 m/s from the origin, vessel B lies still at
/// (0, 1000); instants t = 0..9 s.
/// - track 1 follows A 5 m off (offset (3, 4)) for t = 0..4, ends at 4.5;
/// - track 2 follows A 6 m off for t = 7..9;
/// - track 3 is tentative on B for t = 0..2, confirmed from t = 3;
/// - track 4 is confirmed far from everything;
/// - track 5 is tentative on B throughout (never an estimate).
fn case() -> (Vec<TruthRecord>, Vec<TrackRecord>) {
    let f = frame();
    let mut tr = Vec::new();
    let mut tk = Vec::new();
    for i in 0..10 {
        let t = i as f64;
        let a = (5.0 * t, 0.0);
        tr.push(truth(&f, "A", t, a, Some((5.0, 0.0))));
        tr.push(truth(&f, "B", t, (0.0, 1000.0), Some((0.0, 0.0))));
        if i <= 4 {
            tk.push(track(1, Confirmed, t, (a.0 + 3.0, a.1 + 4.0), (5.0, 0.0)));
        }
        if i >= 7 {
            tk.push(track(2, Confirmed, t, (a.0, a.1 + 6.0), (5.0, 0.0)));
        }
        tk.push(track(3, if i < 3 { Tentative } else { Confirmed }, t, (0.0, 1000.0), (0.0, 0.0)));
        tk.push(track(4, Confirmed, t, (5000.0, 5000.0), (0.0, 0.0)));
        tk.push(track(5, Tentative, t, (0.0, 1000.0), (0.0, 0.0)));
    }
    tk.push(track(1, Ended, 4.5, (25.5, 4.0), (5.0, 0.0)));
    (tr, tk)
}

#[test]
fn hand_worked_case() {
    let (tr, tk) = case();
    let r = score(&tr, &tk, &frame(), &ScoreOptions::default()).unwrap();
    // c = 100, p = 2: a miss or a false estimate costs c²/2 = 5000.
    //  t = 0..2: A–1 at 5 m, B missed, 4 false: 25 + 5000 + 5000
    //  t = 3..4: A–1 at 5 m, B–3 at 0, 4 false:  25 + 5000
    //  t = 5..6: A missed (1 ended), B–3, 4 false: 5000 + 5000
    //  t = 7..9: A–2 at 6 m, B–3, 4 false:        36 + 5000
    let pows = [10025.0, 10025.0, 10025.0, 5025.0, 5025.0, 10000.0, 10000.0, 5036.0, 5036.0, 5036.0];
    let mean: f64 = pows.iter().map(|p: &f64| p.sqrt()).sum::<f64>() / 10.0;
    assert_eq!(r.instants, 10);
    assert_eq!(r.vessels, 2);
    assert!((r.gospa_mean - mean).abs() < 1e-6, "{} vs {mean}", r.gospa_mean);
    assert!((r.gospa_pow_mean - pows.iter().sum::<f64>() / 10.0).abs() < 1e-5);
    assert!((r.localisation_pow_mean - (5.0 * 25.0 + 3.0 * 36.0) / 10.0).abs() < 1e-5);
    assert!((r.missed_pow_mean - 5.0 * 5000.0 / 10.0).abs() < 1e-9);
    assert!((r.false_pow_mean - 5000.0).abs() < 1e-9);
    assert!((r.missed_per_instant - 0.5).abs() < 1e-12);
    assert!((r.false_per_instant - 1.0).abs() < 1e-12);
    assert!((r.assigned_per_instant - 1.5).abs() < 1e-12);

    let c = &r.continuity;
    // A: track 1, a gap at 5–6, then track 2: one switch, one break.
    assert_eq!(c.id_switches, 1);
    assert_eq!(c.track_breaks, 1);
    // Firm at some instant: 1, 2, 3, 4 (5 never). 4 never assigned.
    assert_eq!(c.firm_tracks, 4);
    assert_eq!(c.false_track_numbers, vec![4]);
    // A at once, B after 3 s.
    assert_eq!(c.time_to_confirm_mean_s, Some(1.5));
    assert_eq!(c.time_to_confirm_max_s, Some(3.0));
    assert!(c.vessels_never_assigned.is_empty());
    let a = r.per_vessel.iter().find(|v| v.vessel == "A").unwrap();
    assert_eq!(a.tracks, vec![1, 2]);
    assert_eq!((a.instants, a.assigned), (10, 8));

    // Errors: 5 m ×5, 6 m ×3, 0 m ×7, sorted; type-7 percentile:
    // p50 at index 7 → 5; p95 at index 13.3 → 6.
    assert_eq!(r.errors.position_m.samples, 15);
    assert!((r.errors.position_m.p50.unwrap() - 5.0).abs() < 1e-6);
    assert!((r.errors.position_m.p95.unwrap() - 6.0).abs() < 1e-6);
    assert!(r.errors.speed_kn.p95.unwrap().abs() < 1e-9);
    // Course only where the truth moves (A): 8 samples.
    assert_eq!(r.errors.course_deg.samples, 8);
}

#[test]
fn switch_without_gap_and_half_life_track() {
    // A followed by track 1 at t = 0..3, by track 2 at t = 4..7: a switch
    // and no break. Track 2 is an estimate at t = 0..7 but near A only at
    // t = 4..7 (half its life): not false (false means fewer than half).
    let f = frame();
    let mut tr = Vec::new();
    let mut tk = Vec::new();
    for i in 0..8 {
        let t = i as f64;
        tr.push(truth(&f, "A", t, (0.0, 0.0), None));
        if i < 4 {
            tk.push(track(1, Confirmed, t, (1.0, 0.0), (0.0, 0.0)));
            tk.push(track(2, Confirmed, t, (900.0, 0.0), (0.0, 0.0)));
        } else {
            tk.push(track(2, Confirmed, t, (2.0, 0.0), (0.0, 0.0)));
            tk.push(track(1, Confirmed, t, (-900.0, 0.0), (0.0, 0.0)));
        }
    }
    let r = score(&tr, &tk, &frame(), &ScoreOptions::default()).unwrap();
    assert_eq!(r.continuity.id_switches, 1);
    assert_eq!(r.continuity.track_breaks, 0);
    assert!(r.continuity.false_track_numbers.is_empty());
    // Without velocities in the truth, the stationary vessel gets zero
    // velocity by central difference: speed errors are 0.
    assert_eq!(r.errors.speed_kn.samples, 8);
    assert!(r.errors.speed_kn.p95.unwrap().abs() < 1e-6);
}

#[test]
fn estimates_are_moved_to_the_instant() {
    // One record at t = 0 at the origin, running east at 5 m/s; the vessel
    // is at (10, 0) at t = 2. Moved to t = 2 the estimate is at
    // (0 + 5·2, 0): exactly on the vessel.
    let f = frame();
    let tr = vec![truth(&f, "A", 2.0, (10.0, 0.0), Some((5.0, 0.0)))];
    let tk = vec![track(1, Confirmed, 0.0, (0.0, 0.0), (5.0, 0.0))];
    let r = score(&tr, &tk, &f, &ScoreOptions { cutoff_m: 50.0, order: 1.0 }).unwrap();
    assert!(r.gospa_mean < 1e-6, "{}", r.gospa_mean);
    // A record after the instant is not used.
    let tk = vec![track(1, Confirmed, 2.5, (10.0, 0.0), (5.0, 0.0))];
    let r = score(&tr, &tk, &f, &ScoreOptions { cutoff_m: 50.0, order: 1.0 }).unwrap();
    // p = 1: one missed truth costs c/2 = 25.
    assert!((r.gospa_mean - 25.0).abs() < 1e-9);
    assert_eq!(r.continuity.vessels_never_assigned, vec!["A".to_string()]);
    assert!(score(&tr, &tk, &f, &ScoreOptions { cutoff_m: 50.0, order: 0.5 }).is_err());
    assert!(score(&[], &tk, &f, &ScoreOptions::default()).is_err());
}

#[test]
fn percentiles_match_numpy() {
    // numpy.percentile (default linear method), tests/fixtures/make_score_gospa.py.
    let f: serde_json::Value = serde_json::from_str(include_str!("fixtures/score_gospa.json")).unwrap();
    let p = &f["percentiles"];
    let mut data: Vec<f64> = p["data"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    data.sort_by(f64::total_cmp);
    for (q, key) in [(50.0, "p50"), (95.0, "p95"), (0.0, "p0"), (100.0, "p100")] {
        let want = p[key].as_f64().unwrap();
        assert!((percentile_sorted(&data, q).unwrap() - want).abs() < 1e-12, "{key}");
    }
    assert_eq!(percentile_sorted(&[], 50.0), None);
}

#[test]
fn reads_files_and_names_bad_lines() {
    let (tr, tk) = case();
    let mut truth_text = String::new();
    for t in &tr {
        truth_text.push_str(&t.to_json());
        truth_text.push('\n');
    }
    let mut track_text = String::from("{\"type\":\"detection\",\"sensor\":\"x\"}\n\n");
    for t in &tk {
        track_text.push_str(&t.to_json());
        track_text.push('\n');
    }
    let tr2 = parse_truth_jsonl(&truth_text, "t.jsonl").unwrap();
    let tk2 = parse_tracks_jsonl(&track_text, "k.jsonl").unwrap();
    assert_eq!(tr2.len(), tr.len());
    assert_eq!(tk2.len(), tk.len());
    let a = score(&tr, &tk, &frame(), &ScoreOptions::default()).unwrap();
    let b = score(&tr2, &tk2, &frame(), &ScoreOptions::default()).unwrap();
    assert!((a.gospa_mean - b.gospa_mean).abs() < 1e-3);
    let e = parse_tracks_jsonl("{\"type\":\"track\",\"time\":\"2026-05-14T06:00:00Z\"}\n", "k.jsonl").unwrap_err();
    assert_eq!((e.file.as_str(), e.line), ("k.jsonl", 1));
    assert!(parse_truth_jsonl("\n{not json\n", "t.jsonl").unwrap_err().to_string().starts_with("t.jsonl:2:"));
}

#[test]
fn plot_writes_svg() {
    let (tr, tk) = case();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("p.svg");
    skerry::score::plot_svg(&path, &tr, &tk, &frame()).unwrap();
    let svg = std::fs::read_to_string(&path).unwrap();
    assert!(svg.starts_with("<svg") && svg.contains("polyline") && svg.contains("east (km)"));
}
