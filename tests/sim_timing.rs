//! Beam timing: each plot is stamped with the instant at which the
//! sweeping beam's bearing equals the moving vessel's bearing. The
//! crossings are found here independently, by scanning the sweep and
//! bisecting on the bearing difference, with the vessels' straight-line
//! positions written out in the test.

use nalgebra::Vector2;
use skerry::feed::Record;
use skerry::geo::{Antenna, Geodetic, geodetic_to_ecef};
use skerry::sim::{Origin, Scenario, generate};

const PERIOD: f64 = 2.5;
const FIRST: f64 = 0.3;
const DURATION: f64 = 60.0;

struct Run {
    start: Vector2<f64>,
    vel: Vector2<f64>,
}

fn wrap180(d: f64) -> f64 {
    (d + 180.0).rem_euclid(360.0) - 180.0
}

#[test]
fn plot_time_is_the_beam_crossing() {
    let site = Geodetic::new(56.45, 7.35, 0.0);
    let frame = skerry::geo::LocalFrame::new(site);
    let antenna = Antenna::new(Geodetic::new(56.462, 7.343, 32.0), &frame);
    let a = antenna.site_en;
    let kn = 1852.0 / 3600.0;
    // (offset from the antenna, course, speed): across north clockwise and
    // anticlockwise, fast and close past the antenna, and far out.
    let runs_spec = [((-600.0, 500.0), 90.0, 30.0), ((600.0, 400.0), 270.0, 30.0), ((300.0, 350.0), 180.0, 25.0), ((5000.0, -6000.0), 320.0, 15.0)];
    let mut toml = format!(
        r#"
[scenario]
name = "timing"
start = "2026-05-14T06:00:00Z"
duration_s = {DURATION:?}
[site]
lat_deg = 56.45
lon_deg = 7.35
[[radars]]
id = "kestrel-point"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = 1e-9
bearing_sigma_deg = 1e-9
detection_probability = 0.99999
clutter_per_scan = 0.0
max_range_m = 18000.0
scan_period_s = {PERIOD:?}
first_scan_s = {FIRST:?}
"#
    );
    let mut runs = Vec::new();
    for (i, ((de, dn), course, speed)) in runs_spec.iter().enumerate() {
        let start = a + Vector2::new(*de, *dn);
        let c: f64 = f64::to_radians(*course);
        runs.push(Run { start, vel: Vector2::new(c.sin(), c.cos()) * (speed * kn) });
        toml.push_str(&format!("[[vessels]]\nname = \"v{i}\"\neast_m = {:?}\nnorth_m = {:?}\ncourse_deg = {course:?}\nspeed_kn = {speed:?}\n", start.x, start.y));
    }
    let g = generate(&Scenario::from_toml_str(&toml).unwrap(), 1).unwrap();
    let t0 = skerry::time::Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();

    let bearing = |run: &Run, t: f64| -> f64 {
        let p = frame.plane_to_geodetic(run.start + run.vel * t, 0.0);
        antenna.range_bearing_to(geodetic_to_ecef(p)).1.to_degrees()
    };
    let scans = ((DURATION - FIRST) / PERIOD).floor() as u64;
    let mut crossings = 0u64;
    let mut matched = 0u64;
    let mut used = std::collections::HashSet::new();
    for (vi, run) in runs.iter().enumerate() {
        for k in 0..scans {
            let ts = FIRST + k as f64 * PERIOD;
            let beam = |t: f64| 360.0 * (t - ts) / PERIOD;
            let diff = |t: f64| wrap180(beam(t) - bearing(run, t));
            // Sign changes from − to + of the wrapped difference (not the
            // ±180° wrap), then bisection.
            let steps = 500;
            let mut prev = diff(ts);
            for s in 1..=steps {
                let (ta, tb) = (ts + PERIOD * (s - 1) as f64 / steps as f64, ts + PERIOD * s as f64 / steps as f64);
                let cur = diff(tb);
                let root = if prev < 0.0 && cur >= 0.0 && cur - prev < 90.0 {
                    let (mut lo, mut hi) = (ta, tb);
                    for _ in 0..60 {
                        let mid = 0.5 * (lo + hi);
                        if diff(mid) < 0.0 { lo = mid } else { hi = mid }
                    }
                    Some(0.5 * (lo + hi))
                } else {
                    None
                };
                prev = cur;
                let Some(root) = root else { continue };
                if root >= ts + PERIOD {
                    continue;
                }
                crossings += 1;
                // The nearest unused plot of this vessel in this scan.
                let plot = g
                    .feed
                    .iter()
                    .zip(&g.origins)
                    .enumerate()
                    .filter_map(|(i, (r, o))| match (r, o) {
                        (Record::Detection(d), Origin::Vessel { vessel, time_s, .. }) if *vessel == vi && d.scan == Some(k) && !used.contains(&i) => Some((i, d.clone(), *time_s)),
                        _ => None,
                    })
                    .min_by(|a, b| (a.2 - root).abs().total_cmp(&(b.2 - root).abs()));
                let Some((i, d, exact)) = plot else { continue };
                used.insert(i);
                matched += 1;
                let t_plot = d.time.secs_since(t0);
                // Within 1 ms (the feed rounds to the millisecond).
                assert!((t_plot - root).abs() <= 0.001, "vessel {vi} scan {k}: plot {t_plot} crossing {root}");
                assert!((exact - root).abs() < 1e-6, "vessel {vi} scan {k}: solved {exact} crossing {root}");
                // The noise-free plot bearing is the beam's bearing then.
                assert!(wrap180(d.bearing_deg - beam(exact).rem_euclid(360.0)).abs() < 1e-4, "vessel {vi} scan {k}");
            }
        }
    }
    // About one crossing per vessel and scan: a vessel moving across north
    // is crossed twice in one scan (anticlockwise) or in none (clockwise).
    assert!(crossings.abs_diff(runs.len() as u64 * scans) <= 2, "{crossings}");
    // Each crossing has its plot (detection probability 0.99999), and no
    // plot is left over.
    let plots = g.origins.iter().filter(|o| matches!(o, Origin::Vessel { .. })).count() as u64;
    assert_eq!(plots, crossings);
    assert_eq!(matched, crossings);
}
