//! Noise-free plots of stationary vessels land at the slant range and
//! bearing that pymap3d computes on WGS-84 (tests/fixtures/make_sim_geometry.py).

use skerry::feed::Record;
use skerry::sim::{Origin, Scenario, generate};

fn fixture() -> serde_json::Value {
    // Made by tests/fixtures/make_sim_geometry.py with pymap3d 3.2.0.
    serde_json::from_str(include_str!("fixtures/sim_geometry.json")).unwrap()
}

fn scenario(f: &serde_json::Value) -> Scenario {
    let mut s = String::from(
        r#"
[scenario]
name = "geometry"
start = "2026-05-14T06:00:00Z"
duration_s = 9.0
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
detection_probability = 0.999999
clutter_per_scan = 0.0
max_range_m = 60000.0
scan_period_s = 2.5
[[radars]]
id = "gullhead"
lat_deg = 56.431
lon_deg = 7.392
height_m = 24.0
range_sigma_m = 1e-9
bearing_sigma_deg = 1e-9
detection_probability = 0.999999
clutter_per_scan = 0.0
max_range_m = 60000.0
scan_period_s = 3.0
"#,
    );
    for (i, v) in f["vessels"].as_array().unwrap().iter().enumerate() {
        let pos = match v.get("east_m") {
            Some(e) => format!("east_m = {}\nnorth_m = {}", e, v["north_m"]),
            None => format!("lat_deg = {}\nlon_deg = {}", v["lat_deg"], v["lon_deg"]),
        };
        s.push_str(&format!("[[vessels]]\nname = \"v{i}\"\n{pos}\ncourse_deg = 0.0\nspeed_kn = 0.0\n"));
    }
    Scenario::from_toml_str(&s).unwrap()
}

#[test]
fn plots_land_where_pymap3d_says() {
    let f = fixture();
    let sc = scenario(&f);
    let g = generate(&sc, 3).unwrap();
    let mut checked = 0;
    for look in f["looks"].as_array().unwrap() {
        let sensor = g.sensors.lookup(look["antenna"].as_str().unwrap()).unwrap();
        let vessel = look["vessel"].as_u64().unwrap() as usize;
        let want_r = look["range_m"].as_f64().unwrap();
        let want_b = look["bearing_deg"].as_f64().unwrap();
        let mut found = 0;
        for (rec, origin) in g.feed.iter().zip(&g.origins) {
            let (Record::Detection(d), Origin::Vessel { vessel: v, range_m, bearing_deg, .. }) = (rec, origin) else { continue };
            if d.sensor != sensor || *v != vessel {
                continue;
            }
            let db = |a: f64, b: f64| ((a - b + 180.0).rem_euclid(360.0) - 180.0).abs();
            // The exact geometry: pymap3d and skerry agree to well under a millimetre.
            assert!((range_m - want_r).abs() < 1e-4, "{look}: range {range_m}");
            assert!(db(*bearing_deg, want_b) < 1e-7, "{look}: bearing {bearing_deg}");
            // The feed's values, rounded to 1 cm and 1e-4°.
            assert!((d.range_m - want_r).abs() <= 0.005 + 1e-6, "{look}: feed range {}", d.range_m);
            assert!(db(d.bearing_deg, want_b) <= 0.5e-4 + 1e-9, "{look}: feed bearing {}", d.bearing_deg);
            assert!((0.0..360.0).contains(&d.bearing_deg));
            found += 1;
        }
        // Three whole scans of each radar in 9 s.
        assert_eq!(found, 3, "{look}");
        checked += 1;
    }
    assert_eq!(checked, 24);
}
