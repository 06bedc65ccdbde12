//! The simulator's random parts have the configured distributions: radar
//! range and bearing noise, transponder position noise, clutter counts
//! (Poisson) and clutter placement (uniform in area and bearing). Critical
//! values come from scipy (tests/fixtures/make_sim_stats.py); each check
//! is at the 0.001 level, so a correct generator fails one with
//! probability about 0.001 per seed.

use skerry::feed::Record;
use skerry::geo::Geodetic;
use skerry::sim::{Origin, Scenario, generate};

fn stats() -> serde_json::Value {
    // Made by tests/fixtures/make_sim_stats.py with scipy 1.17.1.
    serde_json::from_str(include_str!("fixtures/sim_stats.json")).unwrap()
}

const HEAD: &str = r#"
[scenario]
name = "noise"
start = "2026-05-14T06:00:00Z"
duration_s = DURATION
[site]
lat_deg = 56.45
lon_deg = 7.35
"#;

fn radar(sigma_r: f64, sigma_b: f64, clutter: f64, period: f64) -> String {
    format!(
        r#"[[radars]]
id = "kestrel-point"
lat_deg = 56.462
lon_deg = 7.343
height_m = 32.0
range_sigma_m = {sigma_r:?}
bearing_sigma_deg = {sigma_b:?}
detection_probability = 0.95
clutter_per_scan = {clutter:?}
max_range_m = 18000.0
scan_period_s = {period:?}
"#
    )
}

fn mean_var(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    (m, x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0))
}

/// Checks sample mean and variance of zero-mean Gaussian errors with the
/// given sigma: mean within z·σ/√n; variance ratio within z·√(2/(n−1))
/// (the normal approximation of the chi-square, common practice at these
/// sample sizes).
fn check_gaussian(name: &str, e: &[f64], sigma: f64, z: f64) {
    let n = e.len() as f64;
    let (m, v) = mean_var(e);
    assert!(m.abs() < z * sigma / n.sqrt(), "{name}: mean {m} (n = {n})");
    let ratio = v / (sigma * sigma);
    assert!((ratio - 1.0).abs() < z * (2.0 / (n - 1.0)).sqrt(), "{name}: variance ratio {ratio} (n = {n})");
}

#[test]
fn range_and_bearing_noise() {
    let z = stats()["z_09995"].as_f64().unwrap();
    let (sr, sb) = (12.0, 0.2);
    let mut s = HEAD.replace("DURATION", "500.0") + &radar(sr, sb, 0.0, 2.5);
    // Twenty-four vessels on a ring 2–12 km out, on all courses.
    for i in 0..24 {
        let a = (i as f64 * 15.0).to_radians();
        let r = 2000.0 + 400.0 * i as f64;
        s.push_str(&format!(
            "[[vessels]]\nname = \"v{i}\"\neast_m = {:?}\nnorth_m = {:?}\ncourse_deg = {:?}\nspeed_kn = {:?}\n",
            r * a.sin(),
            r * a.cos(),
            (i as f64 * 37.0) % 360.0,
            (i % 5) as f64 * 4.0
        ));
    }
    let g = generate(&Scenario::from_toml_str(&s).unwrap(), 42).unwrap();
    let (mut er, mut eb) = (Vec::new(), Vec::new());
    for (rec, o) in g.feed.iter().zip(&g.origins) {
        if let (Record::Detection(d), Origin::Vessel { range_m, bearing_deg, .. }) = (rec, o) {
            er.push(d.range_m - range_m);
            eb.push((d.bearing_deg - bearing_deg + 180.0).rem_euclid(360.0) - 180.0);
        }
    }
    // 200 scans × 24 vessels × Pd 0.95 ≈ 4560 plots.
    assert!(er.len() > 4300, "{}", er.len());
    check_gaussian("range", &er, sr, z);
    check_gaussian("bearing", &eb, sb, z);
    // Independent: the correlation coefficient is within z/√n of 0.
    let (mr, vr) = mean_var(&er);
    let (mb, vb) = mean_var(&eb);
    let n = er.len() as f64;
    let cov = er.iter().zip(&eb).map(|(a, b)| (a - mr) * (b - mb)).sum::<f64>() / (n - 1.0);
    let rho = cov / (vr * vb).sqrt();
    assert!(rho.abs() < z / n.sqrt(), "correlation {rho}");
}

#[test]
fn transponder_position_noise() {
    let z = stats()["z_09995"].as_f64().unwrap();
    let sigma = 10.0;
    let s = HEAD.replace("DURATION", "1500.0")
        + &format!(
            "[transponder]\nid = \"sound-ais\"\nposition_sigma_m = {sigma:?}\n\
             [[vessels]]\nname = \"a\"\neast_m = -3000.0\nnorth_m = 500.0\ncourse_deg = 75.0\nspeed_kn = 12.0\nmmsi = \"200100001\"\nreport_interval_s = 1.0\n"
        );
    let sc = Scenario::from_toml_str(&s).unwrap();
    let g = generate(&sc, 5).unwrap();
    let frame = sc.frame();
    let (mut ee, mut en) = (Vec::new(), Vec::new());
    for (rec, o) in g.feed.iter().zip(&g.origins) {
        if let (Record::Report(r), Origin::Report { east_m, north_m, .. }) = (rec, o) {
            let p = frame.geodetic_to_plane(Geodetic::new(r.lat_deg, r.lon_deg, 0.0));
            ee.push(p.x - east_m);
            en.push(p.y - north_m);
        }
    }
    assert!(ee.len() >= 1499, "{}", ee.len());
    check_gaussian("east", &ee, sigma, z);
    check_gaussian("north", &en, sigma, z);
}

/// Kolmogorov–Smirnov statistic of a sample against U(0, 1).
fn ks_uniform(mut u: Vec<f64>) -> f64 {
    u.sort_by(f64::total_cmp);
    let n = u.len() as f64;
    u.iter().enumerate().map(|(i, &x)| (x - i as f64 / n).max((i + 1) as f64 / n - x)).fold(0.0, f64::max)
}

#[test]
fn clutter_is_poisson_and_uniform_in_area() {
    let f = stats();
    let lambda = f["lambda"].as_f64().unwrap();
    let scans = f["scans"].as_u64().unwrap() as usize;
    let period = 1.0;
    let s = HEAD.replace("DURATION", &format!("{:?}", scans as f64 * period)) + &radar(10.0, 0.2, lambda, period);
    let g = generate(&Scenario::from_toml_str(&s).unwrap(), 9).unwrap();
    let mut counts = vec![0u64; scans];
    let (mut u_area, mut u_bearing) = (Vec::new(), Vec::new());
    let start = skerry::time::Timestamp::parse_rfc3339("2026-05-14T06:00:00Z").unwrap();
    for (rec, o) in g.feed.iter().zip(&g.origins) {
        if let (Record::Detection(d), Origin::Clutter) = (rec, o) {
            let k = d.scan.unwrap() as usize;
            counts[k] += 1;
            u_area.push((d.range_m / 18000.0).powi(2));
            u_bearing.push(d.bearing_deg / 360.0);
            // Stamped at the beam time of its bearing (to the 1 ms rounding).
            let beam = k as f64 * period + period * d.bearing_deg / 360.0;
            assert!((d.time.secs_since(start) - beam).abs() <= 0.0005 + 1e-6);
        }
    }
    // Chi-square goodness of fit over the count bins of the fixture.
    let lo = f["bin_low"].as_u64().unwrap();
    let hi = f["bin_high"].as_u64().unwrap();
    let probs: Vec<f64> = f["bin_probabilities"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let mut observed = vec![0.0; probs.len()];
    for &c in &counts {
        let bin = if c <= lo { 0 } else if c >= hi { probs.len() - 1 } else { (c - lo) as usize };
        observed[bin] += 1.0;
    }
    let chi2: f64 = observed.iter().zip(&probs).map(|(o, p)| (o - p * scans as f64).powi(2) / (p * scans as f64)).sum();
    assert!(chi2 < f["chi2_crit_0999"].as_f64().unwrap(), "chi-square {chi2}");
    // Index of dispersion: Σ(x − x̄)²/x̄ ~ χ²(n − 1) for Poisson counts.
    let xs: Vec<f64> = counts.iter().map(|&c| c as f64).collect();
    let (m, v) = mean_var(&xs);
    let dispersion = v * (scans as f64 - 1.0) / m;
    assert!(dispersion > f["dispersion_low"].as_f64().unwrap() && dispersion < f["dispersion_high"].as_f64().unwrap(), "dispersion {dispersion}");
    let z = f["z_09995"].as_f64().unwrap();
    assert!((m - lambda).abs() < z * (lambda / scans as f64).sqrt(), "mean count {m}");
    // Uniform in area: (r/R)² ~ U(0,1); bearing/360 ~ U(0,1).
    let k = f["ks_crit_0999_sqrt_n"].as_f64().unwrap();
    let n = u_area.len() as f64;
    assert!(ks_uniform(u_area) < k / n.sqrt());
    assert!(ks_uniform(u_bearing) < k / n.sqrt());
    // One scan_end per scan.
    assert_eq!(g.feed.iter().filter(|r| matches!(r, Record::ScanEnd(_))).count(), scans);
}
