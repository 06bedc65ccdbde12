//! Transponder-aided association, in both association modes: identities
//! taken by gated tracks, conflicts flagged on the track and in health,
//! new identities starting tracks. Feeds from skerry's simulator (no
//! clutter, so the expected outcome is fixed by the definitions in
//! src/engine/identity.rs).

use skerry::config::{Association, Config};
use skerry::engine::Engine;
use skerry::feed::{Record, Report, TrackRecord};
use skerry::geo::{Geodetic, LocalFrame};
use skerry::sim::{Generated, Scenario, generate};
use std::sync::Arc;

const MMSI: &str = "200100031";

fn scenario() -> Generated {
    let text = r#"
[scenario]
name = "identity"
start = 2026-05-14T09:30:00Z
duration_s = 240.0

[site]
lat_deg = 56.45
lon_deg = 7.35

[[radars]]
id = "kestrel-point"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 12.0
bearing_sigma_deg = 0.2
detection_probability = 0.9
clutter_per_scan = 0.0
max_range_m = 12000.0
scan_period_s = 2.5

[transponder]
id = "sound-ais"
position_sigma_m = 10.0

[[vessels]]
name = "Heron"
east_m = 1000.0
north_m = -1000.0
course_deg = 90.0
speed_kn = 10.0
mmsi = "200100031"
class = "A"

[[vessels]]
name = "Skua"
east_m = 1000.0
north_m = -2500.0
course_deg = 80.0
speed_kn = 8.0
"#;
    generate(&Scenario::from_toml_str(text).expect("scenario"), 5).expect("generate")
}

fn config(g: &Generated, association: Association) -> Config {
    let mut cfg =
        Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    cfg.tracking.association = association;
    cfg
}

/// A report of identity `id` at site-plane `en`, `t_s` after the start.
fn report(g: &Generated, cfg: &Config, id: &str, en: (f64, f64), t_s: f64) -> Record {
    let frame = LocalFrame::new(Geodetic::new(
        cfg.site.lat_deg,
        cfg.site.lon_deg,
        cfg.site.height_m,
    ));
    let p = frame.plane_to_geodetic(nalgebra::Vector2::new(en.0, en.1), 0.0);
    let sensor = g.sensors.lookup("sound-ais").expect("transponder sensor");
    let time = g.truth[0].time.plus_secs(t_s);
    Record::Report(Report {
        sensor,
        time,
        id: Arc::from(id),
        lat_deg: p.lat_deg,
        lon_deg: p.lon_deg,
        sog_kn: None,
        cog_deg: None,
        heading_deg: None,
        vessel: None,
    })
}

fn run(cfg: &Config, feed: &[Record]) -> (Vec<TrackRecord>, skerry::engine::EngineStats) {
    let mut e = Engine::new(cfg).expect("engine");
    let mut out = Vec::new();
    for r in feed {
        e.handle(r, &mut out);
    }
    e.finish(&mut out);
    (out, e.stats())
}

fn insert(feed: &mut Vec<Record>, r: Record) {
    let at = feed.partition_point(|x| x.time() <= r.time());
    feed.insert(at, r);
}

fn tracks_with(out: &[TrackRecord], id: &str) -> Vec<u64> {
    let mut v: Vec<u64> = out
        .iter()
        .filter(|r| r.identity.as_deref() == Some(id))
        .map(|r| r.track)
        .collect();
    v.dedup();
    v
}

#[test]
fn the_reporting_vessel_track_takes_the_identity() {
    let g = scenario();
    for assoc in [Association::Gnn, Association::Jpda] {
        let cfg = config(&g, assoc);
        let (out, stats) = run(&cfg, &g.feed);
        // One track holds the identity all along; it is on Heron (north of
        // Skua by 1.5 km), and no conflict arose.
        let held = tracks_with(&out, MMSI);
        assert_eq!(held.len(), 1, "{assoc:?}: {held:?}");
        let last = out.iter().rfind(|r| r.track == held[0]).expect("records");
        assert!(last.north_m > -1300.0, "{assoc:?}: {last:?}");
        assert_eq!(stats.identity_conflicts, 0);
        assert!(out.iter().all(|r| !r.identity_conflict));
        // Radar plots still update the identified track.
        assert!(
            out.iter()
                .any(|r| r.track == held[0] && r.sensors.iter().any(|s| &**s == "kestrel-point"))
        );
    }
}

#[test]
fn a_report_far_from_its_track_raises_a_conflict() {
    let g = scenario();
    for assoc in [Association::Gnn, Association::Jpda] {
        let cfg = config(&g, assoc);
        let mut feed = g.feed.clone();
        // Heron is near (1000 + 5.14·120, −1000) at 120 s; this report is
        // 3 km away, beyond the 500 m identity gate (defaults.toml).
        let t_conflict = 120.0;
        insert(
            &mut feed,
            report(&g, &cfg, MMSI, (1600.0, 2000.0), t_conflict),
        );
        let (out, stats) = run(&cfg, &feed);
        assert_eq!(stats.identity_conflicts, 1, "{assoc:?}");
        let held = tracks_with(&out, MMSI);
        assert_eq!(
            held.len(),
            1,
            "{assoc:?}: the conflicting report must not start or move a track: {held:?}"
        );
        let recs: Vec<&TrackRecord> = out.iter().filter(|r| r.track == held[0]).collect();
        let t_c = g.truth[0].time.plus_secs(t_conflict);
        // Before: never flagged. Right after: flagged (the next radar
        // update), and written in the JSON line. After the next consistent
        // report (Class A at 10 kn: every 10 s): cleared.
        assert!(
            recs.iter()
                .filter(|r| r.time < t_c)
                .all(|r| !r.identity_conflict)
        );
        let next = recs
            .iter()
            .find(|r| r.time > t_c)
            .expect("a record after the conflict");
        assert!(next.identity_conflict, "{assoc:?}");
        assert!(next.to_json().ends_with(",\"identity_conflict\":true}"));
        let cleared = recs
            .iter()
            .find(|r| r.time > t_c && r.sensors.iter().any(|s| &**s == "sound-ais"))
            .expect("a later report update");
        assert!(!cleared.identity_conflict);
        assert!(cleared.time.secs_since(t_c) <= 12.0);
        assert!(!cleared.to_json().contains("identity_conflict"));
    }
}

#[test]
fn a_new_identity_takes_an_unidentified_track_or_starts_one() {
    let g = scenario();
    for assoc in [Association::Gnn, Association::Jpda] {
        let cfg = config(&g, assoc);
        let mut feed = g.feed.clone();
        // Skua carries no transponder; a report of a new identity at its
        // position (as a hand-held unit would send) is taken by its track.
        let t = 150.0;
        let v = 8.0 * 1852.0 / 3600.0;
        let (s, c) = 80f64.to_radians().sin_cos();
        insert(
            &mut feed,
            report(
                &g,
                &cfg,
                "200100099",
                (1000.0 + v * t * s, -2500.0 + v * t * c),
                t,
            ),
        );
        // And one far from every track starts a track of its own.
        insert(
            &mut feed,
            report(&g, &cfg, "200100098", (-3000.0, 3000.0), t + 1.0),
        );
        let (out, _) = run(&cfg, &feed);
        let skua = tracks_with(&out, "200100099");
        assert_eq!(skua.len(), 1);
        let first = out.iter().find(|r| r.track == skua[0]).expect("records");
        assert!(
            first.time < g.truth[0].time.plus_secs(t),
            "{assoc:?}: the identity went to the existing track"
        );
        let lone = tracks_with(&out, "200100098");
        assert_eq!(lone.len(), 1);
        let rec = out.iter().find(|r| r.track == lone[0]).expect("record");
        assert_eq!(rec.status, skerry::feed::TrackStatus::Tentative);
        assert!((rec.east_m + 3000.0).abs() < 1.0 && (rec.north_m - 3000.0).abs() < 1.0);
        assert!(skua[0] != lone[0] && !tracks_with(&out, MMSI).contains(&skua[0]));
    }
}

#[test]
fn jpda_output_is_deterministic() {
    let g = scenario();
    let cfg = config(&g, Association::Jpda);
    let lines = |out: Vec<TrackRecord>| {
        out.iter()
            .map(|r| r.to_json())
            .collect::<Vec<_>>()
            .join("\n")
    };
    let a = lines(run(&cfg, &g.feed).0);
    let b = lines(run(&cfg, &g.feed).0);
    assert!(!a.is_empty());
    assert_eq!(a, b);
}
