//! Vessel legs against a brute-force numerical integration of their own
//! definitions; scenario errors naming their keys; transponder reporting
//! intervals against ITU-R M.1371-5 Annex 1 Tables 1 and 2.

use skerry::feed::Record;
use skerry::sim::{Scenario, ScenarioError, generate};
use std::collections::BTreeMap;

const HEAD: &str = r#"
[scenario]
name = "motion"
start = "2026-05-14T06:00:00Z"
duration_s = 800.0
[site]
lat_deg = 56.45
lon_deg = 7.35
"#;

const KN: f64 = 1852.0 / 3600.0;

#[test]
fn legs_match_numerical_integration() {
    let s = HEAD.to_string()
        + r#"
[[vessels]]
name = "a"
east_m = 100.0
north_m = -50.0
course_deg = 350.0
speed_kn = 10.0
enter_s = 5.0
legs = [
  { leg = "straight", duration_s = 30.0 },
  { leg = "turn", direction = "starboard", rate_deg_s = 3.0, angle_deg = 90.0 },
  { leg = "speed", to_kn = 4.0, accel_mps2 = 0.1 },
  { leg = "turn", rate_deg_s = -2.0, duration_s = 25.0 },
  { leg = "speed", to_kn = 15.0, accel_mps2 = 0.25 },
  { leg = "turn", direction = "port", rate_deg_s = 1.5, to_course_deg = 300.0 },
]
"#;
    let sc = Scenario::from_toml_str(&s).unwrap();
    let m = &sc.vessels[0].motion;
    // The legs by their definitions: (start, end, turn rate °/s, accel m/s²).
    let d_slow = (10.0 - 4.0) * KN / 0.1;
    let d_fast = (15.0 - 4.0) * KN / 0.25;
    // Course after the second turn: 350 + 90 − 50 = 30°; port to 300° is 90°.
    let mut t = 5.0;
    let mut legs = Vec::new();
    for (dur, w, a) in [(30.0, 0.0, 0.0), (30.0, 3.0, 0.0), (d_slow, 0.0, -0.1), (25.0, -2.0, 0.0), (d_fast, 0.0, 0.25), (60.0, -1.5, 0.0), (50.0, 0.0, 0.0)] {
        legs.push((t, t + dur, w, a));
        t += dur;
    }
    let (mut x, mut y, mut c, mut v) = (100.0f64, -50.0f64, 350.0f64, 10.0 * KN);
    let dt: f64 = 1e-3;
    let mut time = 5.0;
    let mut checks = 0;
    let mut next_check = 5.0;
    while time < t - 1e-9 {
        if time >= next_check - 1e-9 {
            let st = m.state_at(time);
            assert!((st.pos.x - x).abs() < 0.02 && (st.pos.y - y).abs() < 0.02, "t = {time}: {:?} vs ({x}, {y})", st.pos);
            assert!(((st.course_deg - c).rem_euclid(360.0)).min((c - st.course_deg).rem_euclid(360.0)) < 1e-6, "t = {time}");
            assert!((st.speed_mps - v).abs() < 1e-6, "t = {time}");
            checks += 1;
            next_check += 7.0;
        }
        // Steps are cut at leg ends so that each lies within one leg.
        let &(_, leg_end, w, a) = legs.iter().find(|l| time >= l.0 - 1e-9 && time < l.1 - 1e-9).unwrap();
        let h = dt.min(leg_end - time).min(next_check - time).max(1e-12);
        // Midpoint rule: exact for the linear course and speed.
        let cm = (c + 0.5 * h * w).to_radians();
        let vm = v + 0.5 * h * a;
        x += vm * cm.sin() * h;
        y += vm * cm.cos() * h;
        c += w * h;
        v += a * h;
        time += h;
    }
    assert!(checks > 35);
    let end = m.state_at(t);
    assert!((end.course_deg - 300.0).abs() < 1e-9 && (end.speed_mps - 15.0 * KN).abs() < 1e-12);
    assert!((m.legs_end_s() - (t - 50.0)).abs() < 1e-9);
}

fn key_of(err: ScenarioError) -> String {
    match err {
        ScenarioError::Invalid { key, .. } => key,
        other => other.to_string(),
    }
}

#[test]
fn errors_name_their_keys() {
    let vessel = |legs: &str| format!("{HEAD}[[vessels]]\nname = \"a\"\neast_m = 0.0\nnorth_m = 0.0\ncourse_deg = 10.0\nspeed_kn = 5.0\nlegs = [{legs}]\n");
    let cases = [
        (vessel(r#"{ leg = "straight", duration_s = 5.0 }, { leg = "turn", rate_deg_s = 2.0, angle_deg = 9.0, duration_s = 3.0 }"#), "vessels[0].legs[1].angle_deg"),
        (vessel(r#"{ leg = "speed", to_kn = 8.0 }"#), "vessels[0].legs[0].accel_mps2"),
        (vessel(r#"{ leg = "speed", to_kn = 5.0, accel_mps2 = 0.1 }"#), "vessels[0].legs[0].to_kn"),
        (vessel(r#"{ leg = "straight", duration_s = -1.0 }"#), "vessels[0].legs[0].duration_s"),
        (vessel(r#"{ leg = "straight", duration_s = 1.0, rate_deg_s = 2.0 }"#), "vessels[0].legs[0].rate_deg_s"),
        (vessel(r#"{ leg = "turn", direction = "port", rate_deg_s = -2.0, angle_deg = 9.0 }"#), "vessels[0].legs[0].rate_deg_s"),
        (vessel("").replace("course_deg = 10.0", "course_deg = 360.0"), "vessels[0].course_deg"),
        (vessel("").replace("east_m = 0.0\n", ""), "vessels[0].lat_deg"),
        (vessel("").replace("speed_kn = 5.0", "speed_kn = 5.0\nmmsi = \"12345\""), "vessels[0].mmsi"),
        (HEAD.replace("duration_s = 800.0", "duration_s = 0.0"), "scenario.duration_s"),
        (
            HEAD.to_string()
                + "[[radars]]\nid = \"r\"\nlat_deg = 56.46\nlon_deg = 7.34\nheight_m = 30.0\nrange_sigma_m = 10.0\nbearing_sigma_deg = 0.2\n\
                   detection_probability = 1.0\nclutter_per_scan = 5.0\nmax_range_m = 9000.0\nscan_period_s = 2.5\n",
            "radars[0].detection_probability",
        ),
    ];
    for (text, key) in cases {
        assert_eq!(key_of(Scenario::from_toml_str(&text).unwrap_err()), key, "{text}");
    }
    // Unknown keys and syntax errors come from the TOML reader, with the key.
    let e = Scenario::from_toml_str(&vessel("").replace("speed_kn", "sped_kn")).unwrap_err().to_string();
    assert!(e.contains("sped_kn"), "{e}");
}

#[test]
fn reporting_intervals_follow_itu_table() {
    // (mmsi, class, speed kn, turning, at anchor, expected interval s):
    // ITU-R M.1371-5 Annex 1 Table 1 (Class A) and Table 2 (Class B "CS").
    let cases = [
        ("200000001", "A", 10.0, false, false, 10.0),
        ("200000002", "A", 18.0, false, false, 6.0),
        ("200000003", "A", 25.0, false, false, 2.0),
        ("200000004", "A", 10.0, true, false, 10.0 / 3.0),
        ("200000005", "A", 18.0, true, false, 2.0),
        ("200000006", "B", 8.0, false, false, 30.0),
        ("200000007", "B", 1.0, false, false, 180.0),
        ("200000008", "A", 0.0, false, true, 180.0),
        ("200000009", "A", 5.0, false, true, 10.0),
    ];
    let mut s = HEAD.to_string() + "[transponder]\nid = \"sound-ais\"\nposition_sigma_m = 10.0\n";
    for (i, (mmsi, class, kn, turning, anchor, _)) in cases.iter().enumerate() {
        let legs = if *turning { "legs = [{ leg = \"turn\", rate_deg_s = 0.5, duration_s = 900.0 }]\n" } else { "" };
        s.push_str(&format!(
            "[[vessels]]\nname = \"v{i}\"\neast_m = {}\nnorth_m = 0.0\ncourse_deg = 45.0\nspeed_kn = {kn:?}\nmmsi = \"{mmsi}\"\nclass = \"{class}\"\nat_anchor = {anchor}\n{legs}",
            -4000.0 + 1000.0 * i as f64
        ));
    }
    let g = generate(&Scenario::from_toml_str(&s).unwrap(), 3).unwrap();
    let mut times: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    let t0 = skerry::time::Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();
    for r in &g.feed {
        if let Record::Report(r) = r {
            times.entry(r.id.to_string()).or_default().push(r.time.secs_since(t0));
            assert_eq!(r.heading_deg.is_some(), !r.id.ends_with('6') && !r.id.ends_with('7'), "Class B sends no heading here");
            if r.id.as_ref() == "200000001" {
                assert_eq!(r.sog_kn, Some(10.0));
                assert!((r.cog_deg.unwrap() - 45.0).abs() < 0.2);
            }
            if r.id.as_ref() == "200000008" {
                assert_eq!((r.sog_kn, r.cog_deg), (Some(0.0), None));
            }
        }
    }
    for (mmsi, .., want) in cases {
        let t = &times[mmsi];
        assert!(t.len() >= 4, "{mmsi}");
        for w in t.windows(2) {
            // Both ends are rounded to the millisecond.
            assert!((w[1] - w[0] - want).abs() <= 0.0011, "{mmsi}: {} s", w[1] - w[0]);
        }
        assert!(t[0] >= 0.0 && t[0] < want);
    }
}
