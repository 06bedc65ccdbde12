//! Close-pass scenarios for the JPDA checks: two vessels crossing at a
//! shallow angle, made with skerry's simulator (src/sim) and scored with
//! skerry's scoring (src/score).
#![allow(dead_code)]

use skerry::config::{Association, Config};
use skerry::engine::Engine;
use skerry::feed::{TrackRecord, TruthRecord};
use skerry::geo::{Geodetic, LocalFrame};
use skerry::score::{ScoreOptions, score};
use skerry::sim::{Generated, Scenario, generate};
use std::collections::BTreeMap;

/// Time of the crossing, seconds after the start.
pub const CROSS_S: f64 = 220.0;
/// Instants where the vessels are at least this far apart are the ones
/// scored for continuity (m): well outside any gate (a gate is under
/// 100 m across here), so what is scored there is whether each vessel
/// kept its own track through the pass.
pub const APART_M: f64 = 150.0;

#[derive(Clone, Copy, Debug)]
pub struct Pass {
    /// Crossing angle (degrees).
    pub angle_deg: f64,
    /// Course of the first vessel (degrees).
    pub course_deg: f64,
    /// Offset of the second vessel's track from the crossing point,
    /// across its course (m): the distance at closest approach is about
    /// this.
    pub offset_m: f64,
    /// Whether the first vessel sends transponder reports.
    pub transponder: bool,
    pub clutter_per_scan: f64,
    /// Crossing point in the site plane (m).
    pub cross_en: (f64, f64),
    /// Speeds of the two vessels (kn).
    pub speeds_kn: (f64, f64),
    /// In company instead of crossing: the second vessel runs abreast of
    /// the first at `offset_m` on the same course until the crossing time,
    /// then turns away by `angle_deg` to starboard at 1°/s.
    pub company: bool,
}

impl Pass {
    /// The pass used for seed `seed`: angles 10–30° in turn, courses and
    /// offsets (0–20 m) spread over the seeds.
    pub fn for_seed(seed: u64) -> Pass {
        let k = seed as f64;
        Pass {
            angle_deg: 10.0 + 5.0 * (seed % 5) as f64,
            course_deg: (37.0 * k + 11.0) % 360.0,
            offset_m: (7.3 * k) % 20.0,
            transponder: false,
            clutter_per_scan: env_or("JPDA_CLUTTER", 40.0),
            cross_en: (
                env_or("JPDA_CROSS_E", 6000.0),
                env_or("JPDA_CROSS_N", -6000.0),
            ),
            speeds_kn: (10.0, env_or("JPDA_SPEED_B", 10.0)),
            company: false,
        }
    }

    /// Two vessels in company 25–45 m abreast, the second turning away by
    /// 10–30° at the crossing time: the set-up in which JPDA tracks are
    /// known to coalesce (Blom & Bloem 2000).
    pub fn company_for_seed(seed: u64) -> Pass {
        let mut p = Pass::for_seed(seed);
        p.company = true;
        p.offset_m = env_or("JPDA_ABREAST", 25.0) + (7.3 * seed as f64) % 20.0;
        p.speeds_kn = (10.0, 10.0);
        p
    }
}

fn env_or(key: &str, default: f64) -> f64 {
    std::env::var(key)
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(default)
}

/// The scenario text: one radar (Pd 0.9, 2.5 s scans, 8 km coverage,
/// light clutter), the crossing point 2 km south-east of the radar.
pub fn scenario_toml(p: &Pass, duration_s: f64) -> String {
    let v_a = p.speeds_kn.0 * 1852.0 / 3600.0;
    let v_b = p.speeds_kn.1 * 1852.0 / 3600.0;
    let (cross_e, cross_n) = p.cross_en;
    let ca = p.course_deg.to_radians();
    let cb = (p.course_deg + p.angle_deg).to_radians();
    let (sa, sb) = (
        cross_e - v_a * CROSS_S * ca.sin(),
        cross_n - v_a * CROSS_S * ca.cos(),
    );
    // Offset across the second course: its unit normal is (cos, −sin).
    let (qb_e, qb_n) = (
        cross_e + p.offset_m * cb.cos() - v_b * CROSS_S * cb.sin(),
        cross_n - p.offset_m * cb.sin() - v_b * CROSS_S * cb.cos(),
    );
    let (qb_e, qb_n, course_b, legs_b) = if p.company {
        let (e, n) = (sa + p.offset_m * ca.cos(), sb - p.offset_m * ca.sin());
        (
            e,
            n,
            p.course_deg,
            format!(
                "legs = [{{ leg = \"straight\", duration_s = {CROSS_S} }}, {{ leg = \"turn\", rate_deg_s = 1.0, angle_deg = {} }}]\n",
                p.angle_deg
            ),
        )
    } else {
        (qb_e, qb_n, p.course_deg + p.angle_deg, String::new())
    };
    let transponder = if p.transponder {
        "mmsi = \"200100031\"\nclass = \"A\"\n"
    } else {
        ""
    };
    format!(
        r#"
[scenario]
name = "jpda-close-pass"
start = 2026-05-14T09:30:00Z
duration_s = {duration_s}
truth_interval_s = 1.0

[site]
name = "Brannoch Sound (invented demo harbour)"
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
clutter_per_scan = {clutter}
max_range_m = 12000.0
scan_period_s = 2.5

[transponder]
id = "sound-ais"
position_sigma_m = 10.0

[[vessels]]
name = "Heron"
kind = "motor cruiser"
east_m = {sa}
north_m = {sb}
course_deg = {course_a}
speed_kn = {speed_a}
{transponder}
[[vessels]]
name = "Skua"
kind = "workboat"
east_m = {qb_e}
north_m = {qb_n}
course_deg = {course_b}
speed_kn = {speed_b}
{legs_b}"#,
        clutter = p.clutter_per_scan,
        speed_a = p.speeds_kn.0,
        speed_b = p.speeds_kn.1,
        course_a = p.course_deg.rem_euclid(360.0),
        course_b = course_b.rem_euclid(360.0),
    )
}

pub fn make(p: &Pass, seed: u64) -> Generated {
    let duration = CROSS_S + 380.0;
    let sc = Scenario::from_toml_str(&scenario_toml(p, duration)).expect("scenario");
    generate(&sc, seed).expect("generate")
}

/// The tracker's output on a generated feed.
pub fn track(g: &Generated, association: Association, prune: bool) -> Vec<TrackRecord> {
    let mut cfg =
        Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    cfg.tracking.association = association;
    // For measuring the batch span's effect (BENCHMARKS.md).
    if let Some(f) = std::env::var("JPDA_BATCH_FRACTION").ok().and_then(|v| v.parse().ok()) {
        cfg.tracking.batch_scan_fraction = f;
    }
    let mut engine = Engine::new(&cfg).expect("engine");
    engine.set_jpda_pruning(prune);
    let mut out = Vec::new();
    for r in &g.feed {
        engine.handle(r, &mut out);
    }
    engine.finish(&mut out);
    out
}

/// Result of one run.
#[derive(Clone, Debug, Default)]
pub struct Verdict {
    /// Each vessel held by one track from its first assignment on, at
    /// every well-separated instant, and the two tracks different.
    pub kept: bool,
    /// An ID switch (the score's definition) at the well-separated instants.
    pub swapped: bool,
    /// Coalescence: mean over the instants (after the first 30 s) at which
    /// the vessels are 20–150 m apart of (true separation − separation of
    /// their two tracks), metres; positive when the tracks are drawn
    /// together.
    pub separation_deficit_m: f64,
    /// Of those instants, the fraction at which the tracks are less than
    /// half as far apart as the vessels.
    pub merged_fraction: f64,
}

fn plane(frame: &LocalFrame, t: &TruthRecord) -> nalgebra::Vector2<f64> {
    frame.geodetic_to_plane(Geodetic::new(t.lat_deg, t.lon_deg, 0.0))
}

pub fn judge(g: &Generated, tracks: &[TrackRecord]) -> Verdict {
    let cfg =
        Config::from_toml_str(&g.config_toml, "generated", &Default::default()).expect("config");
    let frame = LocalFrame::new(Geodetic::new(
        cfg.site.lat_deg,
        cfg.site.lon_deg,
        cfg.site.height_m,
    ));
    // Truth by instant: both vessels' positions.
    let mut by_time: BTreeMap<_, Vec<&TruthRecord>> = BTreeMap::new();
    for t in &g.truth {
        by_time.entry(t.time).or_default().push(t);
    }
    let mut apart = Vec::new();
    let mut close: Vec<(skerry::time::Timestamp, f64)> = Vec::new();
    let start = g.truth[0].time;
    for (time, recs) in &by_time {
        if recs.len() != 2 {
            continue;
        }
        let d = (plane(&frame, recs[0]) - plane(&frame, recs[1])).norm();
        if d >= APART_M {
            apart.extend(recs.iter().map(|r| (*r).clone()));
        } else if time.secs_since(start) > 30.0 && d >= 20.0 {
            close.push((*time, d));
        }
    }
    let report = score(&apart, tracks, &frame, &ScoreOptions::default()).expect("score");
    if std::env::var("JPDA_DEBUG").is_ok() {
        for v in &report.per_vessel {
            eprintln!(
                "  {} instants {} assigned {} switches {} breaks {} confirm {:?} tracks {:?}",
                v.vessel,
                v.instants,
                v.assigned,
                v.id_switches,
                v.track_breaks,
                v.time_to_confirm_s,
                v.tracks
            );
        }
    }
    let mut kept = report.per_vessel.len() == 2;
    let mut swapped = false;
    let mut first_tracks = Vec::new();
    for v in &report.per_vessel {
        swapped |= v.id_switches > 0;
        let lead = v.time_to_confirm_s.map(|s| s.round() as usize);
        // Assigned at every instant from the first assignment on.
        kept &= v.id_switches == 0
            && v.track_breaks == 0
            && lead.is_some_and(|l| v.assigned + l == v.instants);
        first_tracks.push(v.tracks.first().copied());
    }
    kept &= first_tracks.len() == 2 && first_tracks[0] != first_tracks[1];

    // Coalescence after the crossing, on the vessels' first tracks.
    let (mut deficit, mut merged, mut n) = (0.0, 0usize, 0usize);
    if let [Some(a), Some(b)] = first_tracks[..] {
        let pos_at = |no: u64, t: skerry::time::Timestamp| {
            tracks
                .iter()
                .rfind(|r| r.track == no && r.time <= t)
                .filter(|r| r.status.is_firm())
                .map(|r| {
                    let dt = t.secs_since(r.time);
                    nalgebra::Vector2::new(
                        r.east_m + r.vel_east_mps * dt,
                        r.north_m + r.vel_north_mps * dt,
                    )
                })
        };
        for &(t, d) in &close {
            if let (Some(pa), Some(pb)) = (pos_at(a, t), pos_at(b, t)) {
                let de = (pa - pb).norm();
                deficit += d - de;
                merged += (de < 0.5 * d) as usize;
                n += 1;
            }
        }
    }
    let n = n.max(1) as f64;
    Verdict {
        kept,
        swapped,
        separation_deficit_m: deficit / n,
        merged_fraction: merged as f64 / n,
    }
}

/// Summary over seeds.
#[derive(Clone, Debug, Default)]
pub struct Tally {
    pub runs: usize,
    pub kept: usize,
    pub swapped: usize,
    pub deficit_sum: f64,
    pub merged_sum: f64,
}

impl Tally {
    pub fn add(&mut self, v: &Verdict) {
        self.runs += 1;
        self.kept += v.kept as usize;
        self.swapped += v.swapped as usize;
        self.deficit_sum += v.separation_deficit_m;
        self.merged_sum += v.merged_fraction;
    }
    pub fn kept_rate(&self) -> f64 {
        self.kept as f64 / self.runs as f64
    }
    pub fn line(&self, name: &str) -> String {
        format!(
            "{name}: kept both tracks in {}/{} runs ({:.0}%), swaps in {}, separation deficit (vessels 20–150 m apart) {:.1} m, merged instants {:.1}%",
            self.kept,
            self.runs,
            100.0 * self.kept_rate(),
            self.swapped,
            self.deficit_sum / self.runs as f64,
            100.0 * self.merged_sum / self.runs as f64
        )
    }
}

/// Runs seeds `seeds` with `pass` (per seed) through GNN, plain JPDA and
/// JPDA*.
pub fn campaign(seeds: std::ops::Range<u64>, pass: impl Fn(u64) -> Pass) -> [Tally; 3] {
    let mut t: [Tally; 3] = Default::default();
    for seed in seeds {
        let p = pass(seed);
        let g = make(&p, seed);
        let v = [
            judge(&g, &track(&g, Association::Gnn, true)),
            judge(&g, &track(&g, Association::Jpda, false)),
            judge(&g, &track(&g, Association::Jpda, true)),
        ];
        if std::env::var("JPDA_FAILS").is_ok() && v.iter().any(|v| !v.kept) {
            eprintln!(
                "seed {seed} angle {} offset {:.1}: kept gnn {} jpda {} star {}",
                p.angle_deg, p.offset_m, v[0].kept, v[1].kept, v[2].kept
            );
        }
        for (t, v) in t.iter_mut().zip(&v) {
            t.add(v);
        }
    }
    t
}
